//! The publisher of one instance: the current set, rendered once per set revision and kept
//! while nothing changes, and the other sets asked for (past times, one metric) kept within a
//! memory budget. Rendering runs on the blocking pool, off the threads that serve requests.
//!
//! The current set is trusted without asking the database for [`FRESHNESS`], unless this
//! instance recorded a write since it was rendered: then the next request re-reads the chain's
//! head first, so a client reads its own writes. After the freshness time, one request reads
//! the head (one row); only when it moved are the set's revision and, if that changed, its
//! content read again.

use std::collections::{HashMap, VecDeque};
use std::sync::{Arc, Mutex, MutexGuard};
use std::time::{Duration, Instant};

use super::document::{self, Rendered, SetContent};
use super::signing::Signer;
use super::{content, content_of_one};
use crate::domain::Timestamp;
use crate::store::{Store, StoreResult, events, versions};

/// How long a cached current set is trusted before the chain's head is read again. Another
/// instance's approval therefore shows here within this time.
pub const FRESHNESS: Duration = Duration::from_millis(500);

/// The memory the sets other than the current one may take, in bytes of their bodies.
pub const RENDER_BUDGET: usize = 32 * 1024 * 1024;

struct Cached {
    rendered: Arc<Rendered>,
    content: Arc<SetContent>,
    checked: Instant,
    /// The chain's head seq when it was last checked.
    head: i64,
    /// This instance's count of committed writes when it was last checked.
    writes: u64,
    /// The set changes by itself at this time (a scheduled version takes effect).
    valid_until: Option<Timestamp>,
}

/// What a kept set was read from.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
enum Basis {
    /// Cut from the current set of this revision.
    Current(i64),
    /// Read at this chain head.
    Head(i64),
}

/// What identifies a set other than the current one: what it was read from, the times asked
/// for, and the one metric (if any).
type RenderKey = (Basis, Option<Timestamp>, Option<Timestamp>, Option<String>);

/// Rendered sets by key, the oldest dropped first once over the budget.
#[derive(Default)]
struct Renders {
    by_key: HashMap<RenderKey, Arc<Rendered>>,
    order: VecDeque<RenderKey>,
    bytes: usize,
}

/// The memory a rendered set takes, roughly: its bodies and the document they were made from.
fn weight(r: &Rendered) -> usize {
    r.json.len() * 3 + r.csv.len()
}

impl Renders {
    fn get(&self, key: &RenderKey) -> Option<Arc<Rendered>> {
        self.by_key.get(key).cloned()
    }

    fn put(&mut self, key: RenderKey, rendered: Arc<Rendered>, budget: usize) {
        let w = weight(&rendered);
        if w > budget || self.by_key.contains_key(&key) {
            return;
        }
        while self.bytes + w > budget {
            let Some(oldest) = self.order.pop_front() else {
                break;
            };
            if let Some(r) = self.by_key.remove(&oldest) {
                self.bytes -= weight(&r);
            }
        }
        self.bytes += w;
        self.order.push_back(key.clone());
        self.by_key.insert(key, rendered);
    }
}

/// Builds and caches published sets for one instance.
pub struct Publisher {
    signer: Arc<Signer>,
    current: Mutex<Option<Cached>>,
    /// Held by the one request that re-reads the revision; the others meanwhile serve the
    /// cached set (at most one database round trip staler), instead of all reading at once.
    refreshing: tokio::sync::Mutex<()>,
    renders: Mutex<Renders>,
    budget: usize,
}

impl std::fmt::Debug for Publisher {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // The caches are left out: they hold whole sets.
        f.debug_struct("Publisher")
            .field("signer", &self.signer)
            .field("budget", &self.budget)
            .finish_non_exhaustive()
    }
}

/// Renders on the blocking pool: a large set takes long enough to hold up a serving thread.
async fn render(content: Arc<SetContent>, signer: Arc<Signer>) -> Arc<Rendered> {
    tokio::task::spawn_blocking(move || Arc::new(document::render(&content, &signer)))
        .await
        .expect("rendering a set does not panic")
}

impl Publisher {
    pub fn new(signer: Signer) -> Publisher {
        Publisher::with_budget(signer, RENDER_BUDGET)
    }

    /// A publisher whose sets other than the current one take at most `budget` bytes.
    pub fn with_budget(signer: Signer, budget: usize) -> Publisher {
        Publisher {
            signer: Arc::new(signer),
            current: Mutex::new(None),
            refreshing: tokio::sync::Mutex::new(()),
            renders: Mutex::default(),
            budget,
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

    /// The cached set and its content, whether it is still fresh, and whether this instance
    /// wrote since it was checked.
    fn cached(
        &self,
        store: &Store,
        now: Timestamp,
    ) -> Option<(Arc<Rendered>, Arc<SetContent>, bool, bool)> {
        let writes = store.writes_committed();
        self.current_lock().as_ref().map(|c| {
            let wrote = c.writes != writes;
            let fresh =
                !wrote && c.checked.elapsed() < FRESHNESS && c.valid_until.is_none_or(|t| now < t);
            (c.rendered.clone(), c.content.clone(), fresh, wrote)
        })
    }

    /// The set in force now, rendered once per set revision.
    pub async fn current(&self, store: &Store) -> StoreResult<Arc<Rendered>> {
        Ok(self.current_with_content(store).await?.0)
    }

    async fn current_with_content(
        &self,
        store: &Store,
    ) -> StoreResult<(Arc<Rendered>, Arc<SetContent>)> {
        let now = store.now();
        let _refreshing = match self.cached(store, now) {
            Some((hit, content, true, _)) => return Ok((hit, content)),
            // Someone else is re-reading: the set they started from will do meanwhile, unless
            // a scheduled version has taken effect since or this instance wrote since.
            Some((hit, content, false, wrote)) => match self.refreshing.try_lock() {
                Ok(guard) => guard,
                Err(_) if !wrote && self.current_valid_at(now) => return Ok((hit, content)),
                Err(_) => self.refreshing.lock().await,
            },
            None => self.refreshing.lock().await,
        };
        // Another request may have refreshed while this one waited.
        if let Some((hit, content, true, _)) = self.cached(store, store.now()) {
            return Ok((hit, content));
        }
        // Counted before reading: a write committed meanwhile makes the next request look.
        let writes = store.writes_committed();
        let mut conn = store.read().await?;
        let (head, _) = events::head(&mut conn).await?;
        let unchanged = self
            .current_lock()
            .as_ref()
            .filter(|c| c.head == head && c.valid_until.is_none_or(|t| now < t))
            .map(|c| (c.rendered.clone(), c.content.clone(), c.valid_until));
        let (rendered, content, valid_until) = match unchanged {
            Some(same) => same,
            None => {
                let (revision, _) = versions::set_state(&mut conn, now, now).await?;
                let valid_until = versions::next_scheduled(&mut conn, now).await?;
                drop(conn);
                let reuse = self
                    .current_lock()
                    .as_ref()
                    .filter(|c| c.rendered.set_revision == revision)
                    .map(|c| (c.rendered.clone(), c.content.clone()));
                match reuse {
                    Some((r, c)) => (r, c, valid_until),
                    None => {
                        let c = Arc::new(content(store, now, now, (None, None)).await?);
                        (render(c.clone(), self.signer.clone()).await, c, valid_until)
                    }
                }
            }
        };
        *self.current_lock() = Some(Cached {
            rendered: rendered.clone(),
            content: content.clone(),
            checked: Instant::now(),
            head,
            writes,
            valid_until,
        });
        Ok((rendered, content))
    }

    /// The cached set does not yet contain a change that is due by `now`.
    fn current_valid_at(&self, now: Timestamp) -> bool {
        self.current_lock()
            .as_ref()
            .is_some_and(|c| c.valid_until.is_none_or(|t| now < t))
    }

    /// The set at requested times, or for one metric. One metric of the current set is cut
    /// from it; other sets are read from the rows they need and kept by the chain's head.
    pub async fn at(
        &self,
        store: &Store,
        as_of: Option<Timestamp>,
        known_at: Option<Timestamp>,
        only: Option<&str>,
    ) -> StoreResult<Arc<Rendered>> {
        if as_of.is_none() && known_at.is_none() {
            let (current, content) = self.current_with_content(store).await?;
            let Some(key) = only else {
                return Ok(current);
            };
            let cache_key = (
                Basis::Current(current.set_revision),
                None,
                None,
                Some(key.to_string()),
            );
            if let Some(hit) = self.renders_lock().get(&cache_key) {
                return Ok(hit);
            }
            let one = Arc::new(content.only(key));
            let rendered = render(one, self.signer.clone()).await;
            self.renders_lock()
                .put(cache_key, rendered.clone(), self.budget);
            return Ok(rendered);
        }
        let now = store.now();
        let (head, _) = events::head(&mut store.read().await?).await?;
        let cache_key = (Basis::Head(head), as_of, known_at, only.map(str::to_string));
        if let Some(hit) = self.renders_lock().get(&cache_key) {
            return Ok(hit);
        }
        let (as_of_t, known_t) = (as_of.unwrap_or(now), known_at.unwrap_or(now));
        let c = match only {
            Some(key) => content_of_one(store, as_of_t, known_t, (as_of, known_at), key).await?,
            None => content(store, as_of_t, known_t, (as_of, known_at)).await?,
        };
        let rendered = render(Arc::new(c), self.signer.clone()).await;
        // A set asked for at a valid time is kept: left out, `known_at` is now, and what was
        // approved by now changes only with an event, which moves the head in the key. Left
        // out, `as_of` is now too, and a scheduled version takes effect with no event at all,
        // so such a set is not kept.
        if as_of.is_some() {
            self.renders_lock()
                .put(cache_key, rendered.clone(), self.budget);
        }
        Ok(rendered)
    }

    fn renders_lock(&self) -> MutexGuard<'_, Renders> {
        self.renders
            .lock()
            .expect("the render cache is never poisoned")
    }
}
