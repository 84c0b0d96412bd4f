//! The threshold engine: plain Rust over domain types, with no web or database types, so it
//! can be tested on its own.

pub mod classify;

pub use classify::{Classification, Side, Zone, classify, classify_all};
