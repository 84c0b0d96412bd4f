//! Who is calling: passwords checked (one way, for signing in and for signing off), browser
//! sessions started, found and ended, and API tokens recognised (through a short-lived memory,
//! so that polling clients cost no database read per request).

use std::collections::HashMap;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use serde_json::json;

use super::{OpError, OpResult};
use crate::auth::password;
use crate::domain::access::{Scope, Session};
use crate::domain::{Timestamp, User};
use crate::store::{Actor, Store, sessions, throttle, tokens, users};

/// Why a password is checked: what a failure records, and what else throttles it.
#[derive(Clone, Copy, Debug)]
pub enum Purpose<'a> {
    /// Signing in from `address`: the account and the address are throttled, a failure is
    /// recorded as `signin.failed` by nobody known (it never says whether the account
    /// exists), and a success clears the account's count.
    SignIn { address: &'a str },
    /// Signing off proposal `proposal`: a fresh authentication by the signed-in person; a
    /// failure is recorded as `signoff.password_failed` by them.
    SignOff { proposal: i64 },
}

/// The one message for every failed sign-in: it never tells whether the account exists, is
/// deactivated, or only the password was wrong.
pub const SIGNIN_FAILED: &str = "That username and password do not match an active account.";

/// Seconds until `until`, rounded up, at least 1: what Retry-After says of a throttle.
fn seconds_until(until: Timestamp) -> u64 {
    let ms = (until.as_datetime() - Timestamp::now().as_datetime())
        .num_milliseconds()
        .max(0) as u64;
    ms.div_ceil(1000).max(1)
}

/// Checks `password` for `username`. Throttled subjects are refused before any password is
/// checked (their refusal only counted, OWASP ASVS 4.0.3 §2.2.1); a wrong password is
/// recorded and counted; the answer never tells which part was wrong.
pub async fn check_password(
    store: &Store,
    username: &str,
    password: &str,
    purpose: Purpose<'_>,
) -> OpResult<User> {
    let mut locked = Vec::new();
    let mut subjects = vec![(throttle::Scope::Account, username)];
    if let Purpose::SignIn { address } = purpose {
        subjects.push((throttle::Scope::Address, address));
    }
    for (scope, subject) in &subjects {
        if let Some(until) = throttle::locked_until(store, *scope, subject).await? {
            throttle::count_refused(store, *scope, subject).await?;
            locked.push(until);
        }
    }
    if let Some(until) = locked.into_iter().max() {
        return Err(OpError::Throttled(seconds_until(until)));
    }

    let found = users::credentials(store, username).await?;
    let verified = {
        let (hash, active) = match &found {
            Some((user, hash)) => (hash.clone(), user.active),
            None => (password::decoy_hash().to_string(), false),
        };
        let plain = password.to_string();
        let matches = tokio::task::spawn_blocking(move || password::verify(&plain, &hash))
            .await
            .unwrap_or(false);
        matches && active
    };
    match (verified, found, purpose) {
        (true, Some((user, _)), Purpose::SignIn { .. }) => {
            throttle::clear(store, throttle::Scope::Account, username).await?;
            Ok(user)
        }
        (true, Some((user, _)), Purpose::SignOff { .. }) => Ok(user),
        (_, None, Purpose::SignOff { .. }) => {
            Err(OpError::BadCredentials("the password is not right".into()))
        }
        (_, _, purpose) => {
            record_failure(store, username, &subjects, purpose).await?;
            Err(OpError::BadCredentials(match purpose {
                Purpose::SignIn { .. } => SIGNIN_FAILED.into(),
                Purpose::SignOff { .. } => {
                    "the password is not right; a sign-off needs your own password".into()
                }
            }))
        }
    }
}

/// Counts a wrong password against each throttled subject and records it.
async fn record_failure(
    store: &Store,
    username: &str,
    subjects: &[(throttle::Scope, &str)],
    purpose: Purpose<'_>,
) -> OpResult<()> {
    let mut w = store.begin_write().await?;
    let mut refused_earlier = 0;
    for (scope, subject) in subjects {
        refused_earlier += throttle::count_failure(&mut w, *scope, subject)
            .await?
            .refused_earlier;
    }
    match purpose {
        Purpose::SignIn { address } => {
            w.record(
                &Actor::Anonymous,
                "signin.failed",
                &users::subject(username),
                json!({
                    "username": username,
                    "address": address,
                    "refused_while_throttled": refused_earlier,
                }),
            )
            .await?
        }
        Purpose::SignOff { proposal } => {
            w.record(
                &Actor::User(username.to_string()),
                "signoff.password_failed",
                &users::subject(username),
                json!({"proposal": proposal}),
            )
            .await?
        }
    };
    w.commit().await?;
    Ok(())
}

/// A new browser session for `username` after a password check; any session the browser
/// still held ends (a fresh session id at every sign-in, OWASP ASVS 4.0.3 §3.2.1). Returns
/// the cookie secret and the session.
pub async fn sign_in(
    store: &Store,
    username: &str,
    password: &str,
    address: &str,
    previous: Option<&Session>,
) -> OpResult<(String, Session)> {
    let user = check_password(store, username, password, Purpose::SignIn { address }).await?;
    if let Some(old) = previous {
        sessions::end(store, &old.id_hash).await?;
    }
    let started = sessions::create(store, &user).await?;
    // Sign-ins are rare enough to sweep away sessions that can no longer be used.
    sessions::purge_expired(store).await?;
    Ok(started)
}

/// Ends a browser session.
pub async fn sign_out(store: &Store, session: &Session) -> OpResult<()> {
    Ok(sessions::end(store, &session.id_hash).await?)
}

/// The live session for a cookie secret, if any.
pub async fn session(store: &Store, secret: &str) -> OpResult<Option<Session>> {
    Ok(sessions::lookup(store, secret).await?)
}

/// How long a recognised token is believed without asking the database again: a revoked or
/// expired token, or a deactivated owner, stops working on every instance within this time.
pub const TOKEN_TTL: Duration = Duration::from_secs(1);
/// Tokens remembered at most; past this the oldest half is forgotten.
const TOKENS_REMEMBERED: usize = 10_000;

/// Who a token belongs to, its scope, and when that was read from the database.
type Remembered = (Arc<User>, Scope, Instant);

/// A short-lived memory of valid API tokens, one per serving process.
#[derive(Debug, Default)]
pub struct TokenCache {
    /// Keyed by the presented token itself: it is in every request anyway, and hashing it
    /// for each lookup would cost more than the lookup.
    entries: Mutex<HashMap<String, Remembered>>,
}

impl TokenCache {
    fn entries(&self) -> std::sync::MutexGuard<'_, HashMap<String, Remembered>> {
        self.entries
            .lock()
            .expect("the token cache lock is never poisoned")
    }

    /// Forgets every token, after this instance revoked one or deactivated someone.
    pub fn clear(&self) {
        self.entries().clear();
    }

    /// The person and scope of a usable token, from memory when checked within
    /// [`TOKEN_TTL`].
    pub async fn authenticate(
        &self,
        store: &Store,
        secret: &str,
    ) -> OpResult<Option<(Arc<User>, Scope)>> {
        if let Some((user, scope, at)) = self.entries().get(secret)
            && at.elapsed() < TOKEN_TTL
        {
            return Ok(Some((user.clone(), *scope)));
        }
        let found = tokens::authenticate(store, secret)
            .await?
            .map(|(user, scope)| (Arc::new(user), scope));
        let mut entries = self.entries();
        match &found {
            Some((user, scope)) => {
                if entries.len() >= TOKENS_REMEMBERED {
                    let mut ages: Vec<_> = entries.iter().map(|(k, v)| (v.2, k.clone())).collect();
                    ages.sort();
                    for (_, k) in ages.into_iter().take(TOKENS_REMEMBERED / 2) {
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
