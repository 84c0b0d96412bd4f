//! The event record: one row per state change, appended in the transaction of the change,
//! never updated or deleted (the database refuses both).
//!
//! Each event is hash-linked to the one before; `crate::audit` states and checks the chain.

use serde_json::{Value, json};
use sqlx::Row;

use super::Db;

use super::StoreResult;
pub use crate::audit::{Entry, Event, GENESIS_HASH, chain_hash};
use crate::domain::Timestamp;

/// Who made a change: a person, the command line, or nobody known (a failed sign-in).
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Actor {
    User(String),
    Cli,
    Anonymous,
}

impl Actor {
    pub fn as_text(&self) -> String {
        match self {
            Actor::User(name) => name.clone(),
            Actor::Cli => "cli".to_string(),
            Actor::Anonymous => "anonymous".to_string(),
        }
    }
}

/// The last appended event, held locked for the length of a write transaction.
#[derive(Clone, Debug)]
pub struct ChainHead {
    pub seq: i64,
    pub hash: String,
    pub at: Timestamp,
}

pub(super) async fn lock_head(conn: &mut Db) -> StoreResult<ChainHead> {
    // A no-op update takes the row lock on PostgreSQL (held to commit), which serialises
    // writers; on SQLite, BEGIN IMMEDIATE already did.
    sqlx::query("UPDATE chain_head SET seq = seq WHERE id = 1")
        .execute(&mut *conn)
        .await?;
    let row = sqlx::query("SELECT seq, hash, at FROM chain_head WHERE id = 1")
        .fetch_one(&mut *conn)
        .await?;
    Ok(ChainHead {
        seq: row.try_get("seq")?,
        hash: row.try_get("hash")?,
        at: row.try_get("at")?,
    })
}

pub(super) async fn store_head(conn: &mut Db, head: &ChainHead) -> StoreResult<()> {
    sqlx::query("UPDATE chain_head SET seq = $1, hash = $2, at = $3 WHERE id = 1")
        .bind(head.seq)
        .bind(&head.hash)
        .bind(head.at)
        .execute(&mut *conn)
        .await?;
    Ok(())
}

pub(super) async fn append(
    conn: &mut Db,
    head: &mut ChainHead,
    at: Timestamp,
    actor: &Actor,
    action: &str,
    subject: &str,
    payload: Value,
) -> StoreResult<i64> {
    let event = Event {
        seq: head.seq + 1,
        at,
        actor: actor.as_text(),
        action: action.to_string(),
        subject: subject.to_string(),
        payload,
    };
    // The payload is stored as its canonical text, which is also what the hash covers.
    let payload_text = crate::audit::canonical_payload(&event.payload);
    let at_text = at.to_string();
    let parts = crate::audit::EventParts {
        seq: event.seq,
        at: &at_text,
        actor: &event.actor,
        action: &event.action,
        subject: &event.subject,
        payload_jcs: &payload_text,
    };
    let hash = crate::audit::chain_hash_parts(&head.hash, &parts, &mut Vec::new());
    sqlx::query(
        "INSERT INTO events (seq, at, actor, action, subject, payload, prev_hash, hash) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8)",
    )
    .bind(event.seq)
    .bind(event.at)
    .bind(&event.actor)
    .bind(&event.action)
    .bind(&event.subject)
    .bind(payload_text)
    .bind(&head.hash)
    .bind(&hash)
    .execute(&mut *conn)
    .await?;
    head.seq = event.seq;
    head.hash = hash;
    head.at = at;
    Ok(event.seq)
}

pub(super) fn event_from_row(row: &sqlx::any::AnyRow) -> StoreResult<Entry> {
    let payload_text: String = row.try_get("payload")?;
    Ok(Entry {
        event: Event {
            seq: row.try_get("seq")?,
            at: row.try_get("at")?,
            actor: row.try_get("actor")?,
            action: row.try_get("action")?,
            subject: row.try_get("subject")?,
            payload: serde_json::from_str(&payload_text).unwrap_or_else(|_| json!(payload_text)),
        },
        prev_hash: row.try_get("prev_hash")?,
        hash: row.try_get("hash")?,
    })
}

/// Which events an extract holds. Empty strings match everything; times are a half-open
/// range, `from` included and `to` excluded.
#[derive(Clone, Debug, Default)]
pub struct EventFilter {
    pub after: i64,
    pub limit: i64,
    pub subject: String,
    pub actor: String,
    pub action: String,
    pub from: Option<Timestamp>,
    pub to: Option<Timestamp>,
}

/// Events in order of seq, as the filter asks. The statement names only the conditions the
/// filter gives (see [`select_sql`]), so each database can use the index that fits
/// (`events_subject`, `events_action`, `events_actor`, `events_at`) instead of a plan made for
/// every filter at once.
pub async fn select(conn: &mut Db, f: &EventFilter) -> StoreResult<Vec<Entry>> {
    let (sql, values) = select_sql(f);
    let mut q = sqlx::query(sqlx::AssertSqlSafe(sql)).bind(f.after);
    for value in values {
        q = q.bind(value);
    }
    let rows = q.bind(f.limit).fetch_all(&mut *conn).await?;
    rows.iter().map(event_from_row).collect()
}

/// The statement [`select`] runs for `f`, and the values it binds after `after` (`$1`) and
/// before the limit (the last placeholder).
pub fn select_sql(f: &EventFilter) -> (String, Vec<String>) {
    let mut conditions = vec!["seq > $1".to_string()];
    let mut values: Vec<String> = Vec::new();
    for (column, op, value) in [
        (
            "subject",
            "=",
            Some(f.subject.clone()).filter(|s| !s.is_empty()),
        ),
        (
            "actor",
            "=",
            Some(f.actor.clone()).filter(|s| !s.is_empty()),
        ),
        (
            "action",
            "=",
            Some(f.action.clone()).filter(|s| !s.is_empty()),
        ),
        ("at", ">=", f.from.map(|t| t.to_string())),
        ("at", "<", f.to.map(|t| t.to_string())),
    ] {
        if let Some(value) = value {
            values.push(value);
            conditions.push(format!("{column} {op} ${}", values.len() + 1));
        }
    }
    // Only column names from the list above and numbered placeholders are spliced in; the
    // values travel as bound parameters.
    let sql = format!(
        "SELECT seq, at, actor, action, subject, payload, prev_hash, hash FROM events \
         WHERE {} ORDER BY seq LIMIT ${}",
        conditions.join(" AND "),
        values.len() + 2
    );
    (sql, values)
}

/// The statement of [`made_stale`], whose condition is the one of `events_made_stale`.
pub const MADE_STALE_SQL: &str = "SELECT seq, at, actor, action, subject, payload, prev_hash, \
    hash FROM events WHERE payload LIKE '%\"made_stale\":[{%' AND seq > $1 \
    ORDER BY seq LIMIT $2";

/// Events whose payload names approvals made stale (`revision.saved`), in order of seq, after
/// `after`, at most `limit` (found through `events_made_stale`).
pub async fn made_stale(conn: &mut Db, after: i64, limit: i64) -> StoreResult<Vec<Entry>> {
    let rows = sqlx::query(MADE_STALE_SQL)
        .bind(after)
        .bind(limit)
        .fetch_all(&mut *conn)
        .await?;
    rows.iter().map(event_from_row).collect()
}

/// Events in order of `seq`, after `after`, at most `limit`, optionally for one subject.
pub async fn list(
    store: &super::Store,
    after: i64,
    limit: i64,
    subject: Option<&str>,
) -> StoreResult<Vec<Entry>> {
    let mut conn = store.read().await?;
    let filter = EventFilter {
        after,
        limit,
        subject: subject.unwrap_or("").to_string(),
        ..EventFilter::default()
    };
    select(&mut conn, &filter).await
}

/// The chain's head as recorded: (seq, hash).
pub async fn head(conn: &mut Db) -> StoreResult<(i64, String)> {
    let row = sqlx::query("SELECT seq, hash FROM chain_head WHERE id = 1")
        .fetch_one(&mut *conn)
        .await?;
    Ok((row.try_get("seq")?, row.try_get("hash")?))
}

/// The chain's head as it was at `at`: the hash of the last event recorded by then (the
/// genesis hash before the first).
pub async fn head_at(conn: &mut Db, at: Timestamp) -> StoreResult<String> {
    let hash: Option<String> =
        // Times never go back along the chain (writes take the later of the clock and the
        // head's time), so the last event by time is the last by seq, found in `events_at`.
        sqlx::query_scalar(
            "SELECT hash FROM events WHERE at <= $1 ORDER BY at DESC, seq DESC LIMIT 1",
        )
            .bind(at)
            .fetch_optional(&mut *conn)
            .await?;
    Ok(hash.unwrap_or_else(|| GENESIS_HASH.to_string()))
}

/// Events by seq (those that exist), as (action, subject, payload text).
pub async fn by_seq(
    conn: &mut Db,
    seqs: &[i64],
) -> StoreResult<std::collections::HashMap<i64, (String, String, String)>> {
    let mut out = std::collections::HashMap::with_capacity(seqs.len());
    // Well under both databases' limits on bound parameters.
    for chunk in seqs.chunks(500) {
        let placeholders = (1..=chunk.len())
            .map(|i| format!("${i}"))
            .collect::<Vec<_>>()
            .join(", ");
        // Only numbered placeholders are spliced in; the seqs travel as bound parameters.
        let sql = format!(
            "SELECT seq, action, subject, payload FROM events WHERE seq IN ({placeholders})"
        );
        let mut q = sqlx::query(sqlx::AssertSqlSafe(sql));
        for seq in chunk {
            q = q.bind(*seq);
        }
        for row in q.fetch_all(&mut *conn).await? {
            out.insert(
                row.try_get("seq")?,
                (
                    row.try_get("action")?,
                    row.try_get("subject")?,
                    row.try_get("payload")?,
                ),
            );
        }
    }
    Ok(out)
}

/// The stored hash of event `seq`, if there is one.
async fn hash_of(conn: &mut Db, seq: i64) -> StoreResult<Option<String>> {
    Ok(sqlx::query_scalar("SELECT hash FROM events WHERE seq = $1")
        .bind(seq)
        .fetch_optional(&mut *conn)
        .await?)
}

/// How many events a walk of the chain reads at a time.
const WALK_PAGE: i64 = 10_000;

/// Why a walk of the chain stopped early.
#[derive(Debug)]
pub enum Stop<E> {
    /// The chain does not verify here.
    Break(crate::audit::Break),
    /// `visit` refused this event.
    Visitor(E),
}

/// Recomputes the chain in `conn`, page by page, handing every event row to `visit`
/// as it goes, and compares the chain's end with the recorded head (and with a head an
/// auditor held earlier, if given). The number of events and the head when everything holds;
/// otherwise the first event that does not, or what `visit` said.
///
/// `from` is an event already verified (seq and hash) to go on from; `None` starts at the
/// first event. A held head at or before `from` is compared with the stored event.
pub(super) async fn walk<E>(
    conn: &mut Db,
    from: Option<(i64, String)>,
    known_head: Option<(i64, String)>,
    mut visit: impl FnMut(
        &sqlx::any::AnyRow,
        &crate::audit::EventParts<'_>,
    ) -> StoreResult<Result<(), E>>,
) -> StoreResult<Result<(i64, String), Stop<E>>> {
    let (mut verifier, mut last_seq) = match from {
        Some((seq, hash)) if seq > 0 => {
            if hash_of(conn, seq).await?.as_deref() != Some(hash.as_str()) {
                return Ok(Err(Stop::Break(crate::audit::Break::Checkpoint { seq })));
            }
            let known = match known_head {
                Some((known_seq, known_hash)) if known_seq <= seq => {
                    if hash_of(conn, known_seq).await?.as_deref() != Some(known_hash.as_str()) {
                        return Ok(Err(Stop::Break(crate::audit::Break::KnownHead {
                            seq: known_seq,
                        })));
                    }
                    None
                }
                other => other,
            };
            (crate::audit::Verifier::resume(seq, &hash, known), seq)
        }
        _ => (crate::audit::Verifier::new(known_head), 0),
    };
    loop {
        // The stored text as it is: the payload is already canonical, so nothing is parsed.
        let rows = sqlx::query(
            "SELECT seq, at, actor, action, subject, payload, prev_hash, hash FROM events \
             WHERE seq > $1 ORDER BY seq LIMIT $2",
        )
        .bind(last_seq)
        .bind(WALK_PAGE)
        .fetch_all(&mut *conn)
        .await?;
        for row in &rows {
            let seq: i64 = row.try_get("seq")?;
            let at: String = row.try_get("at")?;
            let actor: String = row.try_get("actor")?;
            let action: String = row.try_get("action")?;
            let subject: String = row.try_get("subject")?;
            let payload: String = row.try_get("payload")?;
            let prev_hash: String = row.try_get("prev_hash")?;
            let hash: String = row.try_get("hash")?;
            let parts = crate::audit::EventParts {
                seq,
                at: &at,
                actor: &actor,
                action: &action,
                subject: &subject,
                payload_jcs: &payload,
            };
            if let Err(b) = verifier.push_parts(&parts, &prev_hash, &hash) {
                return Ok(Err(Stop::Break(b)));
            }
            if let Err(e) = visit(row, &parts)? {
                return Ok(Err(Stop::Visitor(e)));
            }
            last_seq = seq;
        }
        if (rows.len() as i64) < WALK_PAGE {
            break;
        }
    }
    let (head_seq, head_hash) = head(conn).await?;
    Ok(match verifier.finish() {
        Ok((_, hash)) if head_seq != last_seq || hash != head_hash => {
            Err(Stop::Break(crate::audit::Break::Head {
                head_seq,
                last_seq,
            }))
        }
        Ok(done) => Ok(done),
        Err(b) => Err(Stop::Break(b)),
    })
}

/// The chain alone (no replay; `audited::check` does both): `Ok(Ok((events, head)))` when it
/// holds, `Ok(Err(break))` naming the first event that does not.
pub async fn verify(
    store: &super::Store,
    known_head: Option<(i64, String)>,
) -> StoreResult<Result<(i64, String), crate::audit::Break>> {
    let mut conn = store.read().await?;
    let walked = walk(&mut conn, None, known_head, |_, _| Ok(Ok::<(), ()>(()))).await?;
    Ok(walked.map_err(|stop| match stop {
        Stop::Break(b) => b,
        Stop::Visitor(()) => unreachable!("the visitor refuses nothing"),
    }))
}

/// Number of events with a given action (used by tests and the throttle summary).
pub async fn count(store: &super::Store) -> StoreResult<i64> {
    Ok(sqlx::query_scalar("SELECT COUNT(*) FROM events")
        .fetch_one(&mut store.read().await?)
        .await?)
}
