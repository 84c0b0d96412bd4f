//! Each metric's history: one value per period start, kept in histories of which one per
//! metric is live (migrations/*/0006_histories.sql).
//!
//! A large upload never writes into the live history. It builds a new one in short
//! transactions ([`add`], [`copy_missing`]), then [`put_live`] swaps it in with one small
//! update inside the upload's write transaction, beside its event. A small merge (at most
//! [`ROWS_PER_TRANSACTION`] rows) goes straight into the live history in that transaction
//! ([`merge_into_live`]), so it costs what it writes, not what the history holds. Retired histories and histories whose upload
//! died are deleted by [`sweep`], also a short transaction at a time. So other writers never
//! wait for more than one short transaction of an upload, whatever its size, and rows of a
//! failed upload neither linger nor slow later uploads (each history is its own key range).

use sqlx::Row;

use super::{Db, Store, StoreError, StoreResult, WriteTx};
use crate::domain::Timestamp;
pub use crate::domain::observations::Mode;
use crate::domain::observations::Observation;

/// Rows per INSERT statement: 3 parameters each, well under both databases' limits.
const ROWS_PER_STATEMENT: usize = 1000;
/// Rows per short transaction while building or deleting a history: small enough that a
/// transaction holds the write lock for a few tens of milliseconds (docs/benchmarks.md).
pub const ROWS_PER_TRANSACTION: usize = 5000;

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

/// A metric's live history: its id and how many observations it holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Live {
    pub id: i64,
    pub rows: u64,
}

/// The live history of a metric, if it has one.
pub async fn live(conn: &mut Db, metric_id: i64) -> StoreResult<Option<Live>> {
    let row = sqlx::query("SELECT id, rows FROM histories WHERE metric_id = $1 AND state = 'live'")
        .bind(metric_id)
        .fetch_optional(&mut *conn)
        .await?;
    row.map(|r| {
        Ok(Live {
            id: r.try_get(0)?,
            rows: r.try_get::<i64, _>(1)? as u64,
        })
    })
    .transpose()
}

/// The number of periods stored for a metric.
pub async fn count(conn: &mut Db, metric_id: i64) -> StoreResult<u64> {
    Ok(live(conn, metric_id).await?.map_or(0, |l| l.rows))
}

/// Starts an empty history for the metric, not yet live.
pub async fn start(store: &Store, metric_id: i64) -> StoreResult<i64> {
    let id: i64 = sqlx::query_scalar(
        "INSERT INTO histories (metric_id, state, rows, touched_at) \
         VALUES ($1, 'building', 0, $2) RETURNING id",
    )
    .bind(metric_id)
    .bind(Timestamp::now())
    .fetch_one(&mut store.unrecorded_write().await?)
    .await?;
    Ok(id)
}

/// Marks a history being built as still wanted; fails when the sweep has taken it as
/// abandoned.
async fn touch(tx: &mut Db, history: i64) -> StoreResult<()> {
    let done =
        sqlx::query("UPDATE histories SET touched_at = $1 WHERE id = $2 AND state = 'building'")
            .bind(Timestamp::now())
            .bind(history)
            .execute(&mut *tx)
            .await?;
    if done.rows_affected() == 0 {
        return Err(given_up());
    }
    Ok(())
}

/// The answer to an upload whose history the sweep took as abandoned.
fn given_up() -> StoreError {
    StoreError::Conflict(
        "the upload stalled for so long that it was given up; nothing was changed, send it again"
            .into(),
    )
}

/// The INSERT of one statement's worth of rows into `history`, bound and ready, ending with
/// `on_conflict`.
fn insert_rows<'q>(
    history: i64,
    chunk: &'q [Observation],
    on_conflict: &str,
) -> sqlx::query::Query<'q, sqlx::Any, sqlx::any::AnyArguments> {
    let mut sql =
        String::from("INSERT INTO observations (history_id, period_start, value) VALUES ");
    for i in 0..chunk.len() {
        if i > 0 {
            sql.push(',');
        }
        let p = 2 * i + 1;
        sql.push_str(&format!("($1, ${}, ${})", p + 1, p + 2));
    }
    sql.push(' ');
    sql.push_str(on_conflict);
    // Built from placeholders only; every value is bound.
    let mut q = sqlx::query(sqlx::AssertSqlSafe(sql)).bind(history);
    for o in chunk {
        q = q.bind(o.period_start).bind(o.value);
    }
    q
}

/// Inside the upload's write transaction: merges `rows` (distinct periods, a few thousand at
/// most, so the lock is held briefly) straight into the metric's live history, which it
/// starts if the metric has none. A small merge thus costs what it writes, whatever the size
/// of the history.
pub async fn merge_into_live(
    w: &mut WriteTx,
    metric_id: i64,
    rows: &[Observation],
) -> StoreResult<Written> {
    let (history, before) = match live(w.conn(), metric_id).await? {
        Some(l) => (l.id, l.rows),
        None => {
            let id: i64 = sqlx::query_scalar(
                "INSERT INTO histories (metric_id, state, rows, touched_at) \
                 VALUES ($1, 'live', 0, $2) RETURNING id",
            )
            .bind(metric_id)
            .bind(w.now())
            .fetch_one(w.conn())
            .await?;
            (id, 0)
        }
    };
    let mut added = 0;
    for chunk in rows.chunks(ROWS_PER_STATEMENT) {
        added += insert_rows(
            history,
            chunk,
            "ON CONFLICT (history_id, period_start) DO NOTHING",
        )
        .execute(w.conn())
        .await?
        .rows_affected();
        insert_rows(
            history,
            chunk,
            "ON CONFLICT (history_id, period_start) DO UPDATE SET value = excluded.value",
        )
        .execute(w.conn())
        .await?;
    }
    let total = before + added;
    sqlx::query("UPDATE histories SET rows = $1 WHERE id = $2")
        .bind(total as i64)
        .bind(history)
        .execute(w.conn())
        .await?;
    Ok(Written {
        added,
        replaced: rows.len() as u64 - added,
        removed: 0,
        total,
    })
}

/// Adds `rows` (distinct periods, none in the history yet) to a history being built, a short
/// transaction at a time, telling `progress` how many are written.
pub async fn add(
    store: &Store,
    history: i64,
    rows: &[Observation],
    mut progress: impl FnMut(u64),
) -> StoreResult<()> {
    let mut done = 0u64;
    for group in rows.chunks(ROWS_PER_TRANSACTION) {
        let mut tx = store.begin_unrecorded().await?;
        touch(&mut tx, history).await?;
        for chunk in group.chunks(ROWS_PER_STATEMENT) {
            insert_rows(history, chunk, "").execute(&mut tx).await?;
        }
        tx.commit().await?;
        done += group.len() as u64;
        progress(done);
    }
    Ok(())
}

/// Copies into history `to` the observations of history `from` whose period `to` does not
/// have, a short transaction at a time; returns how many were copied.
pub async fn copy_missing(store: &Store, from: i64, to: i64) -> StoreResult<u64> {
    let mut after = String::new();
    let mut copied = 0;
    loop {
        let mut tx = store.begin_unrecorded().await?;
        touch(&mut tx, to).await?;
        // The last period of this step: ROWS_PER_TRANSACTION rows on, or the end.
        let last: Option<String> = sqlx::query_scalar(
            "SELECT period_start FROM observations WHERE history_id = $1 AND period_start > $2 \
             ORDER BY period_start LIMIT 1 OFFSET $3",
        )
        .bind(from)
        .bind(&after)
        .bind(ROWS_PER_TRANSACTION as i64 - 1)
        .fetch_optional(&mut tx)
        .await?;
        let step = sqlx::query(
            "INSERT INTO observations (history_id, period_start, value) \
             SELECT $1, period_start, value FROM observations \
             WHERE history_id = $2 AND period_start > $3 AND ($4 = '' OR period_start <= $4) \
             ON CONFLICT (history_id, period_start) DO NOTHING",
        )
        .bind(to)
        .bind(from)
        .bind(&after)
        .bind(last.as_deref().unwrap_or(""))
        .execute(&mut tx)
        .await?;
        tx.commit().await?;
        copied += step.rows_affected();
        match last {
            Some(last) => after = last,
            None => return Ok(copied),
        }
    }
}

/// Inside the upload's write transaction: makes history `new` (holding `rows` observations)
/// the metric's live one and retires the one before.
pub async fn put_live(w: &mut WriteTx, metric_id: i64, new: i64, rows: u64) -> StoreResult<()> {
    let now = w.now();
    sqlx::query("UPDATE histories SET state = 'retired', touched_at = $1 WHERE metric_id = $2 AND state = 'live'")
        .bind(now)
        .bind(metric_id)
        .execute(w.conn())
        .await?;
    let done = sqlx::query(
        "UPDATE histories SET state = 'live', rows = $1, touched_at = $2 \
         WHERE id = $3 AND state = 'building'",
    )
    .bind(rows as i64)
    .bind(now)
    .bind(new)
    .execute(w.conn())
    .await?;
    if done.rows_affected() == 0 {
        return Err(given_up());
    }
    Ok(())
}

/// Deletes one history that is not live, a short transaction at a time.
pub async fn discard(store: &Store, history: i64) -> StoreResult<u64> {
    let mut deleted = 0;
    loop {
        let mut tx = store.begin_unrecorded().await?;
        // Two deletions of one history take turns (on PostgreSQL the history's row lock;
        // SQLite has one writer anyway), so neither deletes rows in an order that deadlocks
        // with the other's.
        sqlx::query("UPDATE histories SET touched_at = touched_at WHERE id = $1")
            .bind(history)
            .execute(&mut tx)
            .await?;
        let step = sqlx::query(
            "DELETE FROM observations WHERE history_id = $1 AND period_start IN \
             (SELECT period_start FROM observations WHERE history_id = $1 \
              ORDER BY period_start LIMIT $2)",
        )
        .bind(history)
        .bind(ROWS_PER_TRANSACTION as i64)
        .execute(&mut tx)
        .await?;
        deleted += step.rows_affected();
        // The history goes only once none of its rows are left.
        let done = step.rows_affected() == 0
            && sqlx::query_scalar::<_, i64>(
                "SELECT COUNT(*) FROM (SELECT 1 FROM observations WHERE history_id = $1 LIMIT 1) AS left_over",
            )
            .bind(history)
            .fetch_one(&mut tx)
            .await?
                == 0;
        if done {
            sqlx::query("DELETE FROM histories WHERE id = $1 AND state <> 'live'")
                .bind(history)
                .execute(&mut tx)
                .await?;
        }
        tx.commit().await?;
        if done {
            return Ok(deleted);
        }
    }
}

/// Deletes retired histories and those whose upload stopped writing before `abandoned`;
/// returns how many observations went.
pub async fn sweep(store: &Store, abandoned: Timestamp) -> StoreResult<u64> {
    let ids: Vec<i64> = sqlx::query_scalar(
        "SELECT id FROM histories WHERE state = 'retired' \
         OR (state = 'building' AND touched_at < $1) ORDER BY id",
    )
    .bind(abandoned)
    .fetch_all(&mut store.read().await?)
    .await?;
    let mut deleted = 0;
    for id in ids {
        deleted += discard(store, id).await?;
    }
    Ok(deleted)
}

/// Observations in histories that are not live (retired, or still being built), for tests
/// and the operator's view of what a sweep would remove.
pub async fn not_live(store: &Store) -> StoreResult<u64> {
    let n: i64 = sqlx::query_scalar(
        "SELECT COUNT(*) FROM observations o JOIN histories h ON h.id = o.history_id \
         WHERE h.state <> 'live'",
    )
    .fetch_one(&mut store.read().await?)
    .await?;
    Ok(n as u64)
}

/// A metric's history from `from` (inclusive) to `to` (exclusive), oldest first.
pub async fn list(
    conn: &mut Db,
    metric_id: i64,
    from: Option<Timestamp>,
    to: Option<Timestamp>,
) -> StoreResult<Vec<Observation>> {
    // One statement, so it reads one history even while an upload swaps another in.
    let rows = sqlx::query(
        "SELECT period_start, value FROM observations WHERE history_id = \
         (SELECT id FROM histories WHERE metric_id = $1 AND state = 'live') \
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
