//! Each metric's history: one value per period start. Written in the caller's transaction, so
//! an upload and its event land together or not at all.

use sqlx::Row;

use super::Db;

use super::{StoreResult, WriteTx};
use crate::domain::Timestamp;
use crate::domain::observations::Observation;

/// Rows per INSERT statement: 3 parameters each, well under both databases' limits.
const CHUNK: usize = 1000;

/// How an upload meets the history already stored.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Mode {
    /// Add new periods; give periods already stored their uploaded value.
    Merge,
    /// The upload becomes the whole history.
    Replace,
}

impl Mode {
    pub fn as_str(self) -> &'static str {
        match self {
            Mode::Merge => "merge",
            Mode::Replace => "replace",
        }
    }
}

/// What an upload changed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
pub struct Written {
    /// Periods that were not stored before.
    pub added: u64,
    /// Periods already stored that got the uploaded value (merge only).
    pub replaced: u64,
    /// Replace only: every period stored before the upload (all removed; the upload's
    /// periods are then added, so a period may count both here and in `added`).
    pub removed: u64,
    /// Periods stored afterwards.
    pub total: u64,
}

/// The number of periods stored for a metric.
pub async fn count(conn: &mut Db, metric_id: i64) -> StoreResult<u64> {
    let n: i64 = sqlx::query("SELECT COUNT(*) FROM observations WHERE metric_id = $1")
        .bind(metric_id)
        .fetch_one(&mut *conn)
        .await?
        .get(0);
    Ok(n as u64)
}

/// Rows per staging transaction: few enough commits for SQLite's fsyncs, short enough that
/// other writers get their turn in between.
const CHUNKS_PER_TRANSACTION: usize = 20;

/// An upload's rows, staged and waiting to be moved in by [`write_staged`].
#[derive(Debug)]
pub struct Staged {
    upload: String,
    /// How many rows were staged.
    pub rows: u64,
}

/// Writes `rows` (distinct periods) to the staging table, outside the write lock, telling
/// `progress` how many are written. Also forgets stagings older than a day (uploads that died
/// half way). Call [`unstage`] afterwards, whatever happened.
pub async fn stage(
    store: &super::Store,
    rows: &[Observation],
    mut progress: impl FnMut(u64),
) -> StoreResult<Staged> {
    let upload = crate::auth::secret::random_token("upload");
    let now = store.now();
    sqlx::query("DELETE FROM observation_staging WHERE created_at < $1")
        .bind(now.plus_seconds(-86_400))
        .execute(store.pool())
        .await?;
    let mut done = 0u64;
    for group in rows.chunks(CHUNK * CHUNKS_PER_TRANSACTION) {
        let mut tx = store.pool().begin().await?;
        for chunk in group.chunks(CHUNK) {
            let mut sql = String::from(
                "INSERT INTO observation_staging (upload, period_start, value, created_at) VALUES ",
            );
            for i in 0..chunk.len() {
                if i > 0 {
                    sql.push(',');
                }
                let p = 2 * i + 2;
                sql.push_str(&format!("($1, ${}, ${}, $2)", p + 1, p + 2));
            }
            // Built from placeholders only; every value is bound.
            let mut q = sqlx::query(sqlx::AssertSqlSafe(sql))
                .bind(&upload)
                .bind(now);
            for o in chunk {
                q = q.bind(o.period_start).bind(o.value);
            }
            q.execute(&mut *tx).await?;
            done += chunk.len() as u64;
            progress(done);
        }
        tx.commit().await?;
    }
    Ok(Staged {
        upload,
        rows: rows.len() as u64,
    })
}

/// Removes an upload's staged rows.
pub async fn unstage(store: &super::Store, staged: &Staged) -> StoreResult<()> {
    sqlx::query("DELETE FROM observation_staging WHERE upload = $1")
        .bind(&staged.upload)
        .execute(store.pool())
        .await?;
    Ok(())
}

/// Moves staged rows into the metric's history in `mode`, inside the write transaction: one
/// statement, so the write lock is held for the move only.
pub async fn write_staged(
    w: &mut WriteTx,
    metric_id: i64,
    mode: Mode,
    staged: &Staged,
) -> StoreResult<Written> {
    let before = count(w.conn(), metric_id).await?;
    if mode == Mode::Replace {
        sqlx::query("DELETE FROM observations WHERE metric_id = $1")
            .bind(metric_id)
            .execute(w.conn())
            .await?;
    }
    sqlx::query(
        "INSERT INTO observations (metric_id, period_start, value) \
         SELECT $1, period_start, value FROM observation_staging WHERE upload = $2 \
         ON CONFLICT (metric_id, period_start) DO UPDATE SET value = excluded.value",
    )
    .bind(metric_id)
    .bind(&staged.upload)
    .execute(w.conn())
    .await?;
    let total = count(w.conn(), metric_id).await?;
    let uploaded = staged.rows;
    Ok(match mode {
        Mode::Merge => Written {
            added: total - before,
            replaced: uploaded - (total - before),
            removed: 0,
            total,
        },
        Mode::Replace => Written {
            added: uploaded,
            replaced: 0,
            removed: before,
            total,
        },
    })
}

/// A metric's history from `from` (inclusive) to `to` (exclusive), oldest first.
pub async fn list(
    conn: &mut Db,
    metric_id: i64,
    from: Option<Timestamp>,
    to: Option<Timestamp>,
) -> StoreResult<Vec<Observation>> {
    let rows = sqlx::query(
        "SELECT period_start, value FROM observations WHERE metric_id = $1 \
         AND ($2 = '' OR period_start >= $2) AND ($3 = '' OR period_start < $3) \
         ORDER BY period_start",
    )
    .bind(metric_id)
    .bind(from.map(|t| t.to_string()).unwrap_or_default())
    .bind(to.map(|t| t.to_string()).unwrap_or_default())
    .fetch_all(&mut *conn)
    .await?;
    rows.iter()
        .map(|r| {
            Ok(Observation {
                period_start: r.try_get(0)?,
                value: r.try_get(1)?,
            })
        })
        .collect()
}
