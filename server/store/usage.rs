//! When API tokens and browser sessions were last used, remembered in memory and written in
//! batches by [`flush`], so that a read never writes: it neither waits for nor holds the write
//! lock, and a busy or locked database cannot fail it. Writing is best effort: what a failed
//! flush could not write stays for the next one.

use std::collections::HashMap;
use std::sync::Mutex;

use super::{Store, StoreResult};
use crate::domain::Timestamp;

/// Uses not yet written, by token id and by session id hash.
#[derive(Debug, Default)]
pub struct Usage {
    pending: Mutex<Pending>,
}

#[derive(Debug, Default)]
struct Pending {
    tokens: HashMap<i64, Timestamp>,
    sessions: HashMap<String, Timestamp>,
}

impl Pending {
    fn is_empty(&self) -> bool {
        self.tokens.is_empty() && self.sessions.is_empty()
    }

    /// Keeps the later time of each entry of both.
    fn merge(&mut self, other: Pending) {
        for (id, at) in other.tokens {
            let e = self.tokens.entry(id).or_insert(at);
            *e = (*e).max(at);
        }
        for (id, at) in other.sessions {
            let e = self.sessions.entry(id).or_insert(at);
            *e = (*e).max(at);
        }
    }
}

impl Usage {
    fn pending(&self) -> std::sync::MutexGuard<'_, Pending> {
        self.pending
            .lock()
            .expect("the usage lock is never poisoned")
    }

    pub(super) fn token_used(&self, id: i64, at: Timestamp) {
        self.pending().tokens.insert(id, at);
    }

    pub(super) fn session_seen(&self, id_hash: &str, at: Timestamp) {
        self.pending().sessions.insert(id_hash.to_string(), at);
    }
}

/// Writes the uses remembered so far in one short transaction; returns how many. On failure
/// they are kept for the next flush.
pub async fn flush(store: &Store) -> StoreResult<usize> {
    let batch = std::mem::take(&mut *store.usage.pending());
    if batch.is_empty() {
        return Ok(0);
    }
    let n = batch.tokens.len() + batch.sessions.len();
    match write(store, &batch).await {
        Ok(()) => Ok(n),
        Err(e) => {
            store.usage.pending().merge(batch);
            Err(e)
        }
    }
}

async fn write(store: &Store, batch: &Pending) -> StoreResult<()> {
    let mut tx = store.begin_unrecorded().await?;
    for (id, at) in &batch.tokens {
        sqlx::query(
            "UPDATE api_tokens SET last_used_at = $1 \
             WHERE id = $2 AND (last_used_at IS NULL OR last_used_at < $1)",
        )
        .bind(*at)
        .bind(*id)
        .execute(&mut tx)
        .await?;
    }
    for (id_hash, at) in &batch.sessions {
        sqlx::query(
            "UPDATE sessions SET last_seen_at = $1 WHERE id_hash = $2 AND last_seen_at < $1",
        )
        .bind(*at)
        .bind(id_hash)
        .execute(&mut tx)
        .await?;
    }
    tx.commit().await?;
    Ok(())
}
