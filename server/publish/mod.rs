//! Publishing the approved set: what is in force, encoded, digested, signed, and cached once
//! per set revision so that serving it costs no more than sending bytes.

pub mod document;
pub mod signing;
pub mod withhold;

use std::sync::{Arc, Mutex, MutexGuard};
use std::time::{Duration, Instant};

use crate::domain::Timestamp;
use crate::store::{Store, StoreResult, events, versions};
use document::{Rendered, SetContent};
pub use signing::Signer;

/// How long a cached current set is trusted before the revision is read again. Another
/// instance's approval therefore shows here within this time.
pub const FRESHNESS: Duration = Duration::from_millis(500);

/// Reads what a set holds at `as_of` as recorded by `known_at`, optionally for one metric.
pub async fn content(
    store: &Store,
    as_of: Timestamp,
    known_at: Timestamp,
    requested: (Option<Timestamp>, Option<Timestamp>),
    only: Option<&str>,
) -> StoreResult<SetContent> {
    let mut conn = store.read().await?;
    let (set_revision, in_force_since) = versions::set_state(&mut conn, as_of, known_at).await?;
    let mut in_force = versions::in_force_all(&mut conn, as_of, known_at).await?;
    // Byte order of keys, whatever the database's collation.
    in_force.sort_by(|a, b| a.0.cmp(&b.0));
    let withheld = withhold_unapproved(&mut conn, &mut in_force).await?;
    // A withheld metric has a version in force (one that does not match its record): it is
    // named in meta.withheld, not among the metrics without a version.
    let keys: std::collections::HashSet<&str> = in_force
        .iter()
        .map(|(k, _)| k.as_str())
        .chain(withheld.iter().map(|w| w.metric.as_str()))
        .collect();
    // The set is a function of its revision: metrics without a version are those that
    // existed when the revision took effect.
    let mut without = match in_force_since {
        Some(since) => versions::metrics_existing_at(&mut conn, since)
            .await?
            .into_iter()
            .filter(|k| !keys.contains(k.as_str()))
            .collect(),
        None => Vec::new(),
    };
    let audit_head = match in_force_since {
        Some(since) => events::head_at(&mut conn, since).await?,
        None => crate::audit::GENESIS_HASH.to_string(),
    };
    without.sort();
    let mut withheld = withheld;
    if let Some(key) = only {
        in_force.retain(|(k, _)| k == key);
        without.retain(|k| k == key);
        withheld.retain(|w| w.metric == key);
    }
    Ok(SetContent {
        set_revision,
        in_force_since,
        audit_head,
        metrics_without_version: without,
        withheld,
        versions: in_force,
        as_of: requested.0,
        known_at: requested.1,
    })
}

/// Takes out of `in_force` every version that does not match the event that approved it,
/// logging each; returns them.
async fn withhold_unapproved(
    conn: &mut crate::store::Db,
    in_force: &mut Vec<(String, versions::VersionRecord)>,
) -> StoreResult<Vec<withhold::Withheld>> {
    let seqs: Vec<i64> = in_force.iter().map(|(_, v)| v.approval_seq).collect();
    let approvals = events::by_seq(conn, &seqs).await?;
    let mut withheld = Vec::new();
    in_force.retain(|(key, v)| match withhold::check(key, v, approvals.get(&v.approval_seq)) {
        Ok(()) => true,
        Err(reason) => {
            tracing::error!(metric = %key, version = v.number, %reason, "version withheld from the published set");
            withheld.push(withhold::Withheld {
                metric: key.clone(),
                version: v.number,
                reason,
            });
            false
        }
    });
    Ok(withheld)
}

struct Cached {
    rendered: Arc<Rendered>,
    checked: Instant,
    /// The set changes by itself at this time (a scheduled version takes effect).
    valid_until: Option<Timestamp>,
}

/// Builds and caches published sets for one instance.
pub struct Publisher {
    signer: Signer,
    current: Mutex<Option<Cached>>,
    /// Held by the one request that re-reads the revision; the others meanwhile serve the
    /// cached set (at most one database round trip staler), instead of all reading at once.
    refreshing: tokio::sync::Mutex<()>,
}

impl std::fmt::Debug for Publisher {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Publisher")
            .field("signer", &self.signer)
            .finish()
    }
}

impl Publisher {
    pub fn new(signer: Signer) -> Publisher {
        Publisher {
            signer,
            current: Mutex::new(None),
            refreshing: tokio::sync::Mutex::new(()),
        }
    }

    pub fn signer(&self) -> &Signer {
        &self.signer
    }

    /// The cache of the current set, locked.
    fn current_lock(&self) -> MutexGuard<'_, Option<Cached>> {
        self.current
            .lock()
            .expect("the cache lock is never poisoned")
    }

    /// The cached set, and whether it is still fresh.
    fn cached(&self, now: Timestamp) -> Option<(Arc<Rendered>, bool)> {
        self.current_lock().as_ref().map(|c| {
            let fresh = c.checked.elapsed() < FRESHNESS && c.valid_until.is_none_or(|t| now < t);
            (c.rendered.clone(), fresh)
        })
    }

    /// The set in force now, rendered once per set revision.
    pub async fn current(&self, store: &Store) -> StoreResult<Arc<Rendered>> {
        let now = store.now();
        let _refreshing = match self.cached(now) {
            Some((hit, true)) => return Ok(hit),
            // Someone else is re-reading: the set they started from will do meanwhile, unless
            // a scheduled version has taken effect since.
            Some((hit, false)) => match self.refreshing.try_lock() {
                Ok(guard) => guard,
                Err(_) if self.current_valid_at(now) => return Ok(hit),
                Err(_) => self.refreshing.lock().await,
            },
            None => self.refreshing.lock().await,
        };
        // Another request may have refreshed while this one waited.
        if let Some((hit, true)) = self.cached(store.now()) {
            return Ok(hit);
        }
        let (revision, valid_until) = {
            let mut conn = store.read().await?;
            let (revision, _) = versions::set_state(&mut conn, now, now).await?;
            (revision, versions::next_scheduled(&mut conn, now).await?)
        };
        let reuse = self
            .current_lock()
            .as_ref()
            .filter(|c| c.rendered.set_revision == revision)
            .map(|c| c.rendered.clone());
        let rendered = match reuse {
            Some(r) => r,
            None => {
                let c = content(store, now, now, (None, None), None).await?;
                Arc::new(document::render(&c, &self.signer))
            }
        };
        *self.current_lock() = Some(Cached {
            rendered: rendered.clone(),
            checked: Instant::now(),
            valid_until,
        });
        Ok(rendered)
    }

    /// The cached set does not yet contain a change that is due by `now`.
    fn current_valid_at(&self, now: Timestamp) -> bool {
        self.current_lock()
            .as_ref()
            .is_some_and(|c| c.valid_until.is_none_or(|t| now < t))
    }

    /// The set at requested times, or for one metric; built for each request.
    pub async fn at(
        &self,
        store: &Store,
        as_of: Option<Timestamp>,
        known_at: Option<Timestamp>,
        only: Option<&str>,
    ) -> StoreResult<Arc<Rendered>> {
        if as_of.is_none() && known_at.is_none() && only.is_none() {
            return self.current(store).await;
        }
        let now = store.now();
        let c = content(
            store,
            as_of.unwrap_or(now),
            known_at.unwrap_or(now),
            (as_of, known_at),
            only,
        )
        .await?;
        Ok(Arc::new(document::render(&c, &self.signer)))
    }
}
