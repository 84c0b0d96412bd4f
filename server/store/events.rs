//! The event record: one row per state change, appended in the transaction of the change,
//! never updated or deleted (the database refuses both).
//!
//! Each event is the JSON object `{"seq","at","actor","action","subject","payload"}`; its hash
//! is the hex SHA-256 of the previous event's hash (64 hex characters; 64 zeros before the
//! first event) followed by the event's RFC 8785 canonical bytes.

use serde::Serialize;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};
use sqlx::{AnyConnection, Row};

use super::StoreResult;
use crate::domain::Timestamp;

/// The hash that precedes the first event.
pub const GENESIS_HASH: &str = "0000000000000000000000000000000000000000000000000000000000000000";

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

pub(super) async fn lock_head(conn: &mut AnyConnection) -> StoreResult<ChainHead> {
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

pub(super) async fn store_head(conn: &mut AnyConnection, head: &ChainHead) -> StoreResult<()> {
    sqlx::query("UPDATE chain_head SET seq = $1, hash = $2, at = $3 WHERE id = 1")
        .bind(head.seq)
        .bind(&head.hash)
        .bind(head.at)
        .execute(&mut *conn)
        .await?;
    Ok(())
}

/// The canonical bytes of an event (RFC 8785).
pub fn canonical_event(event: &Event) -> Vec<u8> {
    serde_json_canonicalizer::to_vec(event).expect("events are plain JSON")
}

/// `hex(SHA-256(prev_hash || JCS(event)))`.
pub fn chain_hash(prev_hash: &str, event: &Event) -> String {
    let mut hasher = Sha256::new();
    hasher.update(prev_hash.as_bytes());
    hasher.update(canonical_event(event));
    hex::encode(hasher.finalize())
}

/// One event as it is hashed and exported.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Event {
    pub seq: i64,
    pub at: Timestamp,
    pub actor: String,
    pub action: String,
    pub subject: String,
    pub payload: Value,
}

pub(super) async fn append(
    conn: &mut AnyConnection,
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
    let hash = chain_hash(&head.hash, &event);
    let payload_text =
        serde_json_canonicalizer::to_string(&event.payload).expect("payloads are plain JSON");
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

/// A stored event with its chain links.
#[derive(Clone, Debug, Serialize)]
pub struct StoredEvent {
    pub event: Event,
    pub prev_hash: String,
    pub hash: String,
}

fn event_from_row(row: &sqlx::any::AnyRow) -> StoreResult<StoredEvent> {
    let payload_text: String = row.try_get("payload")?;
    Ok(StoredEvent {
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

/// Events in order of `seq`, after `after`, at most `limit`, optionally for one subject.
pub async fn list(
    store: &super::Store,
    after: i64,
    limit: i64,
    subject: Option<&str>,
) -> StoreResult<Vec<StoredEvent>> {
    let rows = sqlx::query(
        "SELECT seq, at, actor, action, subject, payload, prev_hash, hash FROM events \
         WHERE seq > $1 AND ($2 = '' OR subject = $2) ORDER BY seq LIMIT $3",
    )
    .bind(after)
    .bind(subject.unwrap_or(""))
    .bind(limit)
    .fetch_all(store.pool())
    .await?;
    rows.iter().map(event_from_row).collect()
}

/// Number of events with a given action (used by tests and the throttle summary).
pub async fn count(store: &super::Store) -> StoreResult<i64> {
    Ok(sqlx::query_scalar("SELECT COUNT(*) FROM events")
        .fetch_one(store.pool())
        .await?)
}
