//! cutpoints: a register where organisations agree, sign off and publish the thresholds that
//! decide when a dashboard metric needs action.
//!
//! Layers, each using only those below it:
//!
//! ```text
//! cli      clap commands
//! web      axum routes, pages, JSON errors
//! ops      each action: permission, validation, store call (no HTTP)
//! publish  the published set: bytes, digest, signature, cache
//! store    all SQL for both backends; each change and its event in one transaction
//! charts   SVG pictures of zones and histories (pure: no HTTP, no SQL)
//! engine   classification, workflow rules (pure)   audit  hash chain (pure)   auth  passwords (pure)
//! domain   validated types: metric key, direction, cut set, times, people
//! ```

pub mod audit;
pub mod auth;
pub mod charts;
pub mod cli;
pub mod domain;
pub mod engine;
pub mod ops;
pub mod publish;
pub mod store;
pub mod web;

pub use web::{AppState, WebConfig, app, serve};
