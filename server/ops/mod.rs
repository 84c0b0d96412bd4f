//! What people do, checked and carried out: the permission rule, the validation and the store
//! call of each action, shared by the HTTP API, the pages and the command line. Knows no HTTP.

pub mod metrics;
pub mod users;

use crate::domain::metric::Problems;
use crate::store::StoreError;

/// The one error type of this layer.
#[derive(Debug, thiserror::Error)]
pub enum OpError {
    /// Signed in, but not allowed to do this.
    #[error("{0}")]
    Forbidden(String),
    #[error("{}", .0.first_message())]
    Invalid(Problems),
    #[error(transparent)]
    Store(#[from] StoreError),
}

impl From<Problems> for OpError {
    fn from(p: Problems) -> Self {
        OpError::Invalid(p)
    }
}

pub type OpResult<T> = Result<T, OpError>;
