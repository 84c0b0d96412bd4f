//! A short-lived memory of valid API tokens, so that machine clients polling the published
//! set do not cost a database read per request. An entry lives for [`TTL`]: a revoked or
//! expired token, or a deactivated owner, stops working on every instance within that time.

use std::collections::HashMap;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use std::sync::Arc;

use crate::domain::User;
use crate::store::tokens::{self, Scope};
use crate::store::{Store, StoreResult};

pub const TTL: Duration = Duration::from_secs(1);
/// Entries kept at most; past this the oldest half is dropped.
const CAPACITY: usize = 10_000;

/// Who a token belongs to, its scope, and when that was read from the database.
type Entry = (Arc<User>, Scope, Instant);

#[derive(Debug, Default)]
pub struct TokenCache {
    /// Keyed by the presented token itself: it is in every request anyway, and hashing it
    /// for each lookup would cost more than the lookup.
    entries: Mutex<HashMap<String, Entry>>,
}

impl TokenCache {
    /// Forgets every token, after this instance revoked one or deactivated someone.
    pub fn clear(&self) {
        self.entries
            .lock()
            .expect("the token cache lock is never poisoned")
            .clear();
    }

    /// The person and scope of a usable token, from memory when checked within [`TTL`].
    pub async fn authenticate(
        &self,
        store: &Store,
        secret: &str,
    ) -> StoreResult<Option<(Arc<User>, Scope)>> {
        {
            let entries = self
                .entries
                .lock()
                .expect("the token cache lock is never poisoned");
            if let Some((user, scope, at)) = entries.get(secret)
                && at.elapsed() < TTL
            {
                return Ok(Some((user.clone(), *scope)));
            }
        }
        let found = tokens::authenticate(store, secret)
            .await?
            .map(|(user, scope)| (Arc::new(user), scope));
        let mut entries = self
            .entries
            .lock()
            .expect("the token cache lock is never poisoned");
        match &found {
            Some((user, scope)) => {
                if entries.len() >= CAPACITY {
                    let mut ages: Vec<_> = entries.iter().map(|(k, v)| (v.2, k.clone())).collect();
                    ages.sort();
                    for (_, k) in ages.into_iter().take(CAPACITY / 2) {
                        entries.remove(&k);
                    }
                }
                entries.insert(secret.to_string(), (user.clone(), *scope, Instant::now()));
            }
            None => {
                entries.remove(secret);
            }
        }
        Ok(found)
    }
}
