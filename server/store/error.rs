//! The store layer's one error type, and how database errors map onto it.

use crate::domain::Problems;

use super::db;

/// The store layer's one error type; the web layer maps each variant to a status in one place.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("{0}")]
    NotFound(String),
    #[error("{0}")]
    Conflict(String),
    #[error("{}", .0.first_message())]
    Invalid(Problems),
    /// The database is there but could not take this in time: another writer held the lock
    /// (SQLite's busy timeout, PostgreSQL's statement timeout) or every connection was in use.
    #[error("the database is busy: {0}")]
    Busy(String),
    /// The database is not answering: down, restarting, stalled or unreachable.
    #[error("the database is unavailable: {0}")]
    Unavailable(sqlx::Error),
    #[error("database error: {0}")]
    Database(sqlx::Error),
    #[error("{0}")]
    Config(String),
}

impl From<sqlx::Error> for StoreError {
    fn from(e: sqlx::Error) -> Self {
        if db::means_gone(&e) || matches!(e, sqlx::Error::PoolTimedOut) {
            return StoreError::Unavailable(e);
        }
        match e {
            sqlx::Error::Database(ref d) if d.is_unique_violation() => {
                StoreError::Conflict("that already exists".to_string())
            }
            sqlx::Error::Database(ref d) if is_busy(d.code().as_deref()) => {
                StoreError::Busy(d.message().to_string())
            }
            // A backstop behind the text rules of `domain::text`: PostgreSQL refuses a NUL or
            // bytes that are not UTF-8 in text (SQLSTATE 22021); that is bad input, not a fault.
            sqlx::Error::Database(ref d) if d.code().as_deref() == Some("22021") => {
                StoreError::Invalid(Problems::single(
                    "text",
                    "text must not contain NUL or other control characters",
                ))
            }
            other => StoreError::Database(other),
        }
    }
}

/// True for a database error that means "not now": SQLite's SQLITE_BUSY (5) and
/// SQLITE_LOCKED (6) in their primary or extended forms; PostgreSQL's statement timeout or
/// cancellation (57014), a lock that was not available (55P03), and a serialisation failure
/// or deadlock (class 40), each of which a later attempt may pass.
fn is_busy(code: Option<&str>) -> bool {
    match code {
        Some(state) if db::is_sqlstate(state) => {
            state == "57014" || state == "55P03" || state.starts_with("40")
        }
        Some(code) => code.parse::<i64>().is_ok_and(|n| matches!(n & 0xff, 5 | 6)),
        None => false,
    }
}

impl StoreError {
    /// True when the same request may pass later: the database was busy or away.
    pub fn is_transient(&self) -> bool {
        matches!(self, StoreError::Busy(_) | StoreError::Unavailable(_))
    }
}

impl From<sqlx::migrate::MigrateError> for StoreError {
    fn from(e: sqlx::migrate::MigrateError) -> Self {
        StoreError::Config(format!("migration failed: {e}"))
    }
}

pub type StoreResult<T> = Result<T, StoreError>;
