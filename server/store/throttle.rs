//! Sign-in throttling (OWASP ASVS 4.0.3 §2.2.1), kept in the database so that every instance
//! sharing it applies the same counts.
//!
//! Failures are counted per attempted account and per client address within a window. Past
//! the limit the subject is locked until the window ends; attempts refused while locked only
//! raise a counter (no event each), so a flood cannot swamp the event record. The count is
//! reported in the next event about that subject.

use serde_json::json;
use sqlx::Row;

use super::{Actor, Store, StoreResult, WriteTx};
use crate::domain::Timestamp;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Scope {
    Account,
    Address,
}

impl Scope {
    fn as_str(self) -> &'static str {
        match self {
            Scope::Account => "account",
            Scope::Address => "address",
        }
    }

    /// Failures allowed in one window before the subject is locked.
    pub fn limit(self) -> i64 {
        match self {
            Scope::Account => 5,
            // One address may serve many people (an office behind one gateway).
            Scope::Address => 20,
        }
    }
}

/// Length of the counting window and of a lock.
pub const WINDOW_SECONDS: i64 = 15 * 60;

/// When the subject may try again, if it is locked now.
pub async fn locked_until(
    store: &Store,
    scope: Scope,
    subject: &str,
) -> StoreResult<Option<Timestamp>> {
    let until: Option<Option<Timestamp>> = sqlx::query_scalar(
        "SELECT locked_until FROM signin_throttle WHERE scope = $1 AND subject = $2",
    )
    .bind(scope.as_str())
    .bind(subject)
    .fetch_optional(&mut store.read().await?)
    .await?;
    let now = Timestamp::now();
    Ok(until.flatten().filter(|t| *t > now))
}

/// Counts an attempt refused because the subject is locked.
pub async fn count_refused(store: &Store, scope: Scope, subject: &str) -> StoreResult<()> {
    sqlx::query(
        "UPDATE signin_throttle SET refused = refused + 1 WHERE scope = $1 AND subject = $2",
    )
    .bind(scope.as_str())
    .bind(subject)
    .execute(&mut store.unrecorded_write().await?)
    .await?;
    Ok(())
}

/// What recording a failure did.
#[derive(Clone, Copy, Debug, Default)]
pub struct FailureOutcome {
    /// Attempts refused during an earlier lock, not yet reported.
    pub refused_earlier: i64,
    /// Set when this failure started a lock.
    pub locked_until: Option<Timestamp>,
}

/// Counts one failure inside the sign-in failure's write transaction; starts a lock (and
/// records that as an event) when the limit is reached.
pub async fn count_failure(
    w: &mut WriteTx,
    scope: Scope,
    subject: &str,
) -> StoreResult<FailureOutcome> {
    let now = w.now();
    let row = sqlx::query(
        "SELECT window_start, failures, refused FROM signin_throttle WHERE scope = $1 AND subject = $2",
    )
    .bind(scope.as_str())
    .bind(subject)
    .fetch_optional(w.conn())
    .await?;
    let (failures, window_start, refused) = match &row {
        Some(row) => {
            let start: Timestamp = row.try_get("window_start")?;
            let failures: i64 = row.try_get("failures")?;
            let refused: i64 = row.try_get("refused")?;
            if start.plus_seconds(WINDOW_SECONDS) <= now {
                (1, now, refused)
            } else {
                (failures + 1, start, refused)
            }
        }
        None => (1, now, 0),
    };
    let locked_until = (failures >= scope.limit()).then(|| now.plus_seconds(WINDOW_SECONDS));
    sqlx::query(
        "INSERT INTO signin_throttle (scope, subject, window_start, failures, locked_until, refused) \
         VALUES ($1, $2, $3, $4, $5, 0) \
         ON CONFLICT (scope, subject) DO UPDATE SET window_start = $3, failures = $4, \
         locked_until = $5, refused = 0",
    )
    .bind(scope.as_str())
    .bind(subject)
    .bind(window_start)
    .bind(if locked_until.is_some() { 0 } else { failures })
    .bind(locked_until)
    .execute(w.conn())
    .await?;
    if let Some(until) = locked_until {
        w.record(
            &Actor::Anonymous,
            "signin.throttled",
            &format!("{}:{subject}", scope.as_str()),
            json!({"scope": scope.as_str(), "subject": subject, "failures": failures, "locked_until": until}),
        )
        .await?;
    }
    Ok(FailureOutcome {
        refused_earlier: refused,
        locked_until,
    })
}

/// Forgets an account's failures after a successful sign-in.
pub async fn clear(store: &Store, scope: Scope, subject: &str) -> StoreResult<()> {
    sqlx::query("DELETE FROM signin_throttle WHERE scope = $1 AND subject = $2")
        .bind(scope.as_str())
        .bind(subject)
        .execute(&mut store.unrecorded_write().await?)
        .await?;
    Ok(())
}
