//! Work a serving process does in the background, from start-up to shutdown: writing the last
//! use of tokens and sessions in batches (so that reads never write), and deleting histories
//! that are no longer live or whose upload died half way.

use std::time::Duration;

use crate::domain::Timestamp;
use crate::store::{Store, observations, usage};

/// How often remembered uses are written.
pub const FLUSH_EVERY: Duration = Duration::from_secs(5);

/// A history being built that has not been written to for this long was abandoned: a live
/// upload writes to it after each short transaction, and waits at most the timeout for the
/// connection and the timeout again for the lock before the next one.
pub fn abandoned_after(store: &Store) -> Duration {
    2 * store.settings().timeout + Duration::from_secs(10)
}

/// Runs until `stop` completes, then writes what is left once more. The first round runs at
/// once, so leftovers of a process that died are cleared at start-up.
pub async fn run(store: Store, stop: impl Future<Output = ()>) {
    tokio::pin!(stop);
    once(&store).await;
    loop {
        tokio::select! {
            () = &mut stop => break,
            () = tokio::time::sleep(FLUSH_EVERY) => once(&store).await,
        }
    }
    once(&store).await;
}

/// One round of upkeep; failures are logged and retried in the next round.
pub async fn once(store: &Store) {
    if let Err(e) = usage::flush(store).await {
        tracing::warn!(error = %e, "could not record the last use of tokens and sessions; trying again later");
    }
    let cutoff = Timestamp::now().plus_seconds(-(abandoned_after(store).as_secs() as i64));
    match observations::sweep(store, cutoff).await {
        Ok(0) => {}
        Ok(n) => tracing::info!(observations = n, "deleted histories no longer live"),
        Err(e) => {
            tracing::warn!(error = %e, "could not delete histories no longer live; trying again later")
        }
    }
}
