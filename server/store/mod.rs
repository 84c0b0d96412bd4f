//! All SQL, for both backends.
//!
//! One query layer serves SQLite and PostgreSQL through sqlx's `Any` driver with portable SQL;
//! each backend has its own migrations folder (docs/architecture.md says why). Every write that
//! changes state goes through a [`WriteTx`], which serialises writers and appends the change's
//! event to the event record inside the same transaction.
//!
//! Besides a file per table or concern: `handle` holds the [`Store`] and opening it,
//! `connections` the connections it hands out, `write` the [`WriteTx`], `db` connections whose
//! statements are bounded in time, `error` the [`StoreError`]; the tables' files share `rows`
//! (reading rows into records) and `sql` (SQL built at run time).

pub mod audited;
pub mod checkpoint;
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
