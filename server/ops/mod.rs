//! What people do, checked and carried out: the permission rule, the validation and the store
//! call of each action, shared by the HTTP API, the pages and the command line. Knows no HTTP.

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
    #[error(transparent)]
    Store(#[from] StoreError),
}

impl From<Problems> for OpError {
    fn from(p: Problems) -> Self {
        OpError::Invalid(p)
    }
}

pub type OpResult<T> = Result<T, OpError>;
