//! State-changing transactions: [`Store::begin_write`] and the [`WriteTx`] it gives, which
//! serialises writers and appends each change's events to the record in the same transaction.

use crate::domain::Timestamp;

use super::events::{self, Actor};
use super::{Db, Store, StoreResult};

impl Store {
    /// How many recorded writes this handle (and its clones) has committed: a cheap way for a
    /// cache to know that this instance changed something since it was filled.
    pub fn writes_committed(&self) -> u64 {
        self.writes.load(std::sync::atomic::Ordering::Acquire)
    }

    /// Starts a write: takes the write lock at once (BEGIN IMMEDIATE on SQLite, the chain-head
    /// row lock on PostgreSQL), so writers are serialised on both backends and a deciding
    /// transaction never fails half way for want of a lock.
    pub async fn begin_write(&self) -> StoreResult<WriteTx> {
        let mut tx = self.begin_unrecorded().await?;
        let head = events::lock_head(&mut tx).await?;
        // Event times never run backwards, even if the clock steps back.
        let now = std::cmp::max(self.now(), head.at);
        Ok(WriteTx {
            tx,
            head,
            now,
            appended: 0,
            writes: self.writes.clone(),
        })
    }
}

/// One state-changing transaction and the events it appends. Dropping it without
/// [`WriteTx::commit`] rolls everything back, events included.
pub struct WriteTx {
    tx: Db,
    head: events::ChainHead,
    now: Timestamp,
    appended: usize,
    /// The handle's count of committed writes, moved on by [`WriteTx::commit`].
    writes: std::sync::Arc<std::sync::atomic::AtomicU64>,
}

impl WriteTx {
    /// The time of this change, shared by its rows and its events.
    pub fn now(&self) -> Timestamp {
        self.now
    }

    pub fn conn(&mut self) -> &mut Db {
        &mut self.tx
    }

    /// Appends one event to the record; see [`events`].
    pub async fn record(
        &mut self,
        actor: &Actor,
        action: &str,
        subject: &str,
        payload: serde_json::Value,
    ) -> StoreResult<i64> {
        let seq = events::append(
            &mut self.tx,
            &mut self.head,
            self.now,
            actor,
            action,
            subject,
            payload,
        )
        .await?;
        self.appended += 1;
        Ok(seq)
    }

    pub async fn commit(mut self) -> StoreResult<()> {
        if self.appended > 0 {
            events::store_head(&mut self.tx, &self.head).await?;
        }
        self.tx.commit().await?;
        if self.appended > 0 {
            self.writes
                .fetch_add(1, std::sync::atomic::Ordering::Release);
        }
        Ok(())
    }
}
