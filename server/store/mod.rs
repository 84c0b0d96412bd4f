//! All SQL, for both backends.
//!
//! One query layer serves SQLite and PostgreSQL through sqlx's `Any` driver with portable SQL;
//! each backend has its own migrations folder (docs/architecture.md says why). Every write that
//! changes state goes through a [`WriteTx`], which serialises writers and appends the change's
//! event to the event record inside the same transaction.

pub mod audited;
mod codecs;
mod connections;
mod db;
mod error;
pub mod events;
mod handle;
pub mod metrics;
pub mod observations;
pub mod policy;
pub mod proposals;
mod rows;
pub mod sessions;
mod sql;
pub mod throttle;
pub mod tokens;
pub mod usage;
pub mod users;
pub mod versions;
mod write;

pub use db::Db;
pub use error::{StoreError, StoreResult};
pub use events::Actor;
pub use handle::{Backend, Store, StoreSettings};
pub use write::WriteTx;
