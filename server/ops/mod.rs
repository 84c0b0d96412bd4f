//! What people do, checked and carried out: the permission rule, the validation and the store
//! call of each action, and every view a page, an endpoint or a command shows, shared by the
//! HTTP API, the pages and the command line. It is their only way in: they never reach the
//! store themselves (a test checks it). Knows no HTTP.

pub mod access;
pub mod audit;
pub mod evidence;
pub mod metrics;
pub mod proposals;
pub mod publication;
pub mod upkeep;
pub mod uploads;
pub mod users;
pub mod versions;

use crate::domain::Problems;
use crate::store::StoreError;

/// The one error type of this layer.
#[derive(Debug, thiserror::Error)]
pub enum OpError {
    /// Signed in, but not allowed to do this.
    #[error("{0}")]
    Forbidden(String),
    #[error("{}", .0.first_message())]
    Invalid(Problems),
    /// An upload with bad lines; nothing of it was stored.
    #[error("{} bad line(s) in the upload; nothing was changed", .0.len())]
    InvalidRows(Vec<crate::domain::observations::RowProblem>),
    /// The right person at the wrong time: wrong state, stale revision, a repeat.
    #[error("{0}")]
    Conflict(String),
    /// A password re-entered for a signature did not match.
    #[error("{0}")]
    BadCredentials(String),
    /// Too many failed attempts; try again after this many seconds.
    #[error("too many failed attempts; try again in {0} seconds")]
    Throttled(u64),
    #[error("{0}")]
    NotFound(String),
    /// The database could not take this in time (another writer held the lock, every
    /// connection stayed in use); nothing was changed, and a later attempt may pass.
    #[error("the database is busy: {0}")]
    Busy(String),
    /// The database is not answering; nothing was changed.
    #[error("the database is unavailable: {0}")]
    Unavailable(String),
    /// A fault of the program or its set-up: logged, never shown.
    #[error("{0}")]
    Internal(String),
}

impl From<StoreError> for OpError {
    fn from(e: StoreError) -> Self {
        match e {
            StoreError::NotFound(m) => OpError::NotFound(m),
            StoreError::Conflict(m) => OpError::Conflict(m),
            StoreError::Invalid(p) => OpError::Invalid(p),
            StoreError::Busy(m) => OpError::Busy(m),
            StoreError::Unavailable(e) => OpError::Unavailable(e.to_string()),
            StoreError::Database(e) => OpError::Internal(format!("database error: {e}")),
            StoreError::Config(m) => OpError::Internal(m),
        }
    }
}

/// The handle on the database the layers above pass to every operation, and how it waits.
pub use crate::store::{Store, StoreSettings};

impl From<Problems> for OpError {
    fn from(p: Problems) -> Self {
        OpError::Invalid(p)
    }
}

pub type OpResult<T> = Result<T, OpError>;
