//! Work a serving process does in the background: writing the last use of tokens and
//! sessions in batches, so that reads never write.

use std::time::Duration;

use crate::store::{Store, usage};

/// How often remembered uses are written.
pub const FLUSH_EVERY: Duration = Duration::from_secs(5);

/// Runs until `stop` completes, then writes what is left once more.
pub async fn run(store: Store, stop: impl Future<Output = ()>) {
    tokio::pin!(stop);
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
}
