//! How far the event record has been verified: the checkpoint that every successful check
//! advances, so that the next check reads only the events after it, and the full checks (the
//! whole chain and a replay against the audited tables) with their progress and findings.
//!
//! Neither is part of the audited register: they say what was checked, not what changed, and
//! an operator may empty them at any time (the next check then starts from the first event).

use sqlx::Row;

use super::{Db, Store, StoreResult};
use crate::domain::Timestamp;

/// The last event through which the chain verified.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Checkpoint {
    pub seq: i64,
    pub hash: String,
    pub checked_at: Option<Timestamp>,
}

impl Checkpoint {
    /// Where a check goes on from: nothing when nothing was verified yet.
    pub fn start(&self) -> Option<(i64, String)> {
        (self.seq > 0).then(|| (self.seq, self.hash.clone()))
    }
}

pub async fn read(conn: &mut Db) -> StoreResult<Checkpoint> {
    let row = sqlx::query("SELECT seq, hash, checked_at FROM audit_checkpoint WHERE id = 1")
        .fetch_optional(&mut *conn)
        .await?;
    Ok(match row {
        Some(row) => Checkpoint {
            seq: row.try_get("seq")?,
            hash: row.try_get("hash")?,
            checked_at: row.try_get("checked_at")?,
        },
        None => Checkpoint {
            seq: 0,
            hash: crate::audit::GENESIS_HASH.to_string(),
            checked_at: None,
        },
    })
}

/// Moves the checkpoint forward to (`seq`, `hash`), verified at `at`; a checkpoint already
/// further on (another instance's check) stays. Writes nothing else: callers on a read path
/// treat a busy database as "not this time".
pub async fn advance(store: &Store, seq: i64, hash: &str, at: Timestamp) -> StoreResult<()> {
    let mut conn = store.unrecorded_write().await?;
    sqlx::query(
        "UPDATE audit_checkpoint SET seq = $1, hash = $2, checked_at = $3 \
         WHERE id = 1 AND seq <= $1",
    )
    .bind(seq)
    .bind(hash)
    .bind(at)
    .execute(&mut conn)
    .await?;
    Ok(())
}

/// Puts the checkpoint back to the first event (after a full check found the chain broken,
/// so that quick checks stop vouching for what came before).
pub async fn reset(store: &Store) -> StoreResult<()> {
    let mut conn = store.unrecorded_write().await?;
    sqlx::query("UPDATE audit_checkpoint SET seq = 0, hash = $1, checked_at = NULL WHERE id = 1")
        .bind(crate::audit::GENESIS_HASH)
        .execute(&mut conn)
        .await?;
    Ok(())
}

/// A full check, running or finished.
#[derive(
    Clone,
    Debug,
    PartialEq,
    Eq,
    serde::Serialize,
    serde::Deserialize,
    sqlx::FromRow,
    utoipa::ToSchema,
)]
pub struct FullCheck {
    pub id: i64,
    /// Who asked for it (`cli` for the command line).
    pub requested_by: String,
    pub started_at: Timestamp,
    pub finished_at: Option<Timestamp>,
    /// The events in the record when it started, and how many it has read.
    pub events_total: i64,
    pub events_done: i64,
    /// What it found, as the JSON the caller stored; `None` while it runs (or when the
    /// instance running it stopped before the end).
    #[serde(skip)]
    pub result: Option<String>,
}

const FULL_CHECK_COLUMNS: &str =
    "id, requested_by, started_at, finished_at, events_total, events_done, result";

/// Records that a full check starts; its id.
pub async fn start_full(
    store: &Store,
    requested_by: &str,
    at: Timestamp,
    events_total: i64,
) -> StoreResult<i64> {
    let mut conn = store.unrecorded_write().await?;
    Ok(sqlx::query_scalar(
        "INSERT INTO audit_full_checks (requested_by, started_at, events_total, events_done) \
         VALUES ($1, $2, $3, 0) RETURNING id",
    )
    .bind(requested_by)
    .bind(at)
    .bind(events_total)
    .fetch_one(&mut conn)
    .await?)
}

/// How many events a running full check has read.
pub async fn full_progress(store: &Store, id: i64, events_done: i64) -> StoreResult<()> {
    let mut conn = store.unrecorded_write().await?;
    sqlx::query("UPDATE audit_full_checks SET events_done = $1 WHERE id = $2")
        .bind(events_done)
        .bind(id)
        .execute(&mut conn)
        .await?;
    Ok(())
}

/// What a full check found.
pub async fn finish_full(
    store: &Store,
    id: i64,
    at: Timestamp,
    events_done: i64,
    result: &str,
) -> StoreResult<()> {
    let mut conn = store.unrecorded_write().await?;
    sqlx::query(
        "UPDATE audit_full_checks SET finished_at = $1, events_done = $2, result = $3 \
         WHERE id = $4",
    )
    .bind(at)
    .bind(events_done)
    .bind(result)
    .bind(id)
    .execute(&mut conn)
    .await?;
    Ok(())
}

pub async fn full_check_by_id(conn: &mut Db, id: i64) -> StoreResult<Option<FullCheck>> {
    let sql = format!("SELECT {FULL_CHECK_COLUMNS} FROM audit_full_checks WHERE id = $1");
    Ok(sqlx::query_as(sqlx::AssertSqlSafe(sql))
        .bind(id)
        .fetch_optional(&mut *conn)
        .await?)
}

/// The latest full check that finished, and the latest one still running (if it started
/// after that).
pub async fn latest_full(conn: &mut Db) -> StoreResult<(Option<FullCheck>, Option<FullCheck>)> {
    let finished = format!(
        "SELECT {FULL_CHECK_COLUMNS} FROM audit_full_checks WHERE result IS NOT NULL \
         ORDER BY id DESC LIMIT 1"
    );
    let finished: Option<FullCheck> = sqlx::query_as(sqlx::AssertSqlSafe(finished))
        .fetch_optional(&mut *conn)
        .await?;
    let running = format!(
        "SELECT {FULL_CHECK_COLUMNS} FROM audit_full_checks WHERE result IS NULL AND id > $1 \
         ORDER BY id DESC LIMIT 1"
    );
    let running = sqlx::query_as(sqlx::AssertSqlSafe(running))
        .bind(finished.as_ref().map_or(0, |f| f.id))
        .fetch_optional(&mut *conn)
        .await?;
    Ok((finished, running))
}

impl Store {
    /// Marks a full check as starting in this instance; `Err` with the id of the one already
    /// running (0 while it is being recorded).
    pub fn claim_full_check(&self) -> Result<(), i64> {
        let mut running = self.full_check.lock().expect("never poisoned");
        match *running {
            Some(other) => Err(other),
            None => {
                *running = Some(0);
                Ok(())
            }
        }
    }

    /// The id of the full check this instance runs, once recorded; `None` when it has ended.
    pub fn set_full_check(&self, id: Option<i64>) {
        *self.full_check.lock().expect("never poisoned") = id;
    }

    /// The full check this instance runs, if any.
    pub fn running_full_check(&self) -> Option<i64> {
        *self.full_check.lock().expect("never poisoned")
    }
}
