//! Browser sessions. The cookie carries a random secret; the database keeps its SHA-256, so a
//! copy of the database does not hand out live sessions.

use sqlx::Row;

use super::{Store, StoreResult, WriteTx, rows};
use crate::auth::secret::{random_token, stored_hash};
use crate::domain::Timestamp;
use crate::domain::User;
use crate::domain::access::Session;

/// A session ends after this long without a request (OWASP ASVS 4.0.3 §3.3.2 allows 12 hours
/// of use; idle sessions end sooner).
pub const IDLE_SECONDS: i64 = 2 * 60 * 60;
/// A session ends this long after sign-in, however busy.
pub const ABSOLUTE_SECONDS: i64 = 12 * 60 * 60;
/// `last_seen_at` is refreshed at most this often; the refresh is written in a later batch
/// (`usage::flush`), never by the request that reads the session.
const TOUCH_EVERY_SECONDS: i64 = 60;

/// Creates a session for a user and returns the cookie secret and the session.
pub async fn create(store: &Store, user: &User) -> StoreResult<(String, Session)> {
    let secret = random_token("s");
    let csrf = random_token("c");
    let id_hash = stored_hash(&secret);
    let now = Timestamp::now();
    sqlx::query(
        "INSERT INTO sessions (id_hash, user_id, csrf_token, created_at, last_seen_at, expires_at) \
         VALUES ($1, $2, $3, $4, $4, $5)",
    )
    .bind(&id_hash)
    .bind(user.id)
    .bind(&csrf)
    .bind(now)
    .bind(now.plus_seconds(ABSOLUTE_SECONDS))
    .execute(&mut store.unrecorded_write().await?)
    .await?;
    Ok((
        secret,
        Session {
            id_hash,
            csrf_token: csrf,
            user: user.clone(),
        },
    ))
}

/// The live session for a cookie secret, if any: unexpired, recently used, and belonging to an
/// active person.
pub async fn lookup(store: &Store, secret: &str) -> StoreResult<Option<Session>> {
    let id_hash = stored_hash(secret);
    let now = Timestamp::now();
    let row = sqlx::query(
        "SELECT s.csrf_token, s.last_seen_at, u.id, u.username, u.display_name, u.roles, u.active, \
         u.created_at \
         FROM sessions s JOIN users u ON u.id = s.user_id \
         WHERE s.id_hash = $1 AND s.expires_at > $2 AND s.last_seen_at > $3 AND u.active = 1",
    )
    .bind(&id_hash)
    .bind(now)
    .bind(now.plus_seconds(-IDLE_SECONDS))
    .fetch_optional(&mut store.read().await?)
    .await?;
    let Some(row) = row else {
        return Ok(None);
    };
    let last_seen: Timestamp = row.try_get("last_seen_at")?;
    if last_seen < now.plus_seconds(-TOUCH_EVERY_SECONDS) {
        store.usage.session_seen(&id_hash, now);
    }
    Ok(Some(Session {
        id_hash,
        csrf_token: row.try_get("csrf_token")?,
        user: rows::user(&row)?,
    }))
}

/// Ends one session (sign-out).
pub async fn end(store: &Store, id_hash: &str) -> StoreResult<()> {
    sqlx::query("DELETE FROM sessions WHERE id_hash = $1")
        .bind(id_hash)
        .execute(&mut store.unrecorded_write().await?)
        .await?;
    Ok(())
}

/// Ends every session of a person (deactivation, password reset).
pub(super) async fn end_all_for(w: &mut WriteTx, user_id: i64) -> StoreResult<()> {
    sqlx::query("DELETE FROM sessions WHERE user_id = $1")
        .bind(user_id)
        .execute(w.conn())
        .await?;
    Ok(())
}

/// Removes sessions that can no longer be used.
pub async fn purge_expired(store: &Store) -> StoreResult<u64> {
    let now = Timestamp::now();
    let done = sqlx::query("DELETE FROM sessions WHERE expires_at <= $1 OR last_seen_at <= $2")
        .bind(now)
        .bind(now.plus_seconds(-IDLE_SECONDS))
        .execute(&mut store.unrecorded_write().await?)
        .await?;
    Ok(done.rows_affected())
}
