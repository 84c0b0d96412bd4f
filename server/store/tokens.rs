//! API tokens: a random secret shown once; the database keeps its SHA-256, a short prefix to
//! recognise it by, its scope, expiry and revocation.

use serde_json::json;
use sqlx::Row;
use sqlx::any::AnyRow;

use super::{Actor, Store, StoreError, StoreResult, WriteTx, rows};
use crate::auth::secret::{random_token, stored_hash};
use crate::domain::Timestamp;
use crate::domain::User;
use crate::domain::access::{Scope, TokenInfo};

fn info_from_row(row: &AnyRow) -> StoreResult<TokenInfo> {
    let scope: String = row.try_get("scope")?;
    Ok(TokenInfo {
        id: row.try_get("id")?,
        username: row.try_get("username")?,
        prefix: row.try_get("prefix")?,
        scope: Scope::parse(&scope).unwrap_or(Scope::Read),
        label: row.try_get("label")?,
        created_at: row.try_get("created_at")?,
        expires_at: row.try_get("expires_at")?,
        revoked_at: row.try_get("revoked_at")?,
        last_used_at: row.try_get("last_used_at")?,
    })
}

/// `SELECT <token columns, with the owner's username> FROM api_tokens <rest>` as one static
/// string, for [`info_from_row`].
macro_rules! select_tokens {
    ($rest:literal) => {
        concat!(
            "SELECT t.id, u.username, t.prefix, t.scope, t.label, t.created_at, t.expires_at, ",
            "t.revoked_at, t.last_used_at FROM api_tokens t JOIN users u ON u.id = t.user_id ",
            $rest
        )
    };
}

/// The shown prefix: enough to tell tokens apart in a list, far too little to guess the rest.
const PREFIX_LEN: usize = 10;

/// Issues a token for a person; returns the secret (shown once) and what is stored.
pub async fn issue(
    w: &mut WriteTx,
    actor: &Actor,
    user: &User,
    scope: Scope,
    label: &str,
    expires_at: Option<Timestamp>,
) -> StoreResult<(String, TokenInfo)> {
    let secret = random_token("cpt");
    let prefix: String = secret.chars().take(PREFIX_LEN).collect();
    let now = w.now();
    let id: i64 = sqlx::query_scalar(
        "INSERT INTO api_tokens (user_id, token_hash, prefix, scope, label, created_at, expires_at) \
         VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id",
    )
    .bind(user.id)
    .bind(stored_hash(&secret))
    .bind(&prefix)
    .bind(scope.as_str())
    .bind(label)
    .bind(now)
    .bind(expires_at)
    .fetch_one(w.conn())
    .await?;
    w.record(
        actor,
        "token.issued",
        &subject(id),
        json!({"after": {"username": user.username, "prefix": prefix, "scope": scope, "label": label, "expires_at": expires_at}}),
    )
    .await?;
    Ok((
        secret,
        TokenInfo {
            id,
            username: user.username.to_string(),
            prefix,
            scope,
            label: label.to_string(),
            created_at: now,
            expires_at,
            revoked_at: None,
            last_used_at: None,
        },
    ))
}

/// The subject of a token's events: `token:ID`.
fn subject(id: i64) -> String {
    format!("token:{id}")
}

/// Revokes a token; revoking twice is a conflict.
pub async fn revoke(w: &mut WriteTx, actor: &Actor, id: i64) -> StoreResult<TokenInfo> {
    let query = sqlx::query(select_tokens!("WHERE t.id = $1")).bind(id);
    let mut info = rows::optional(w.conn(), query, info_from_row)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("no token with id {id}")))?;
    if info.revoked_at.is_some() {
        return Err(StoreError::Conflict(format!(
            "token {id} was already revoked"
        )));
    }
    let now = w.now();
    sqlx::query("UPDATE api_tokens SET revoked_at = $1 WHERE id = $2")
        .bind(now)
        .bind(id)
        .execute(w.conn())
        .await?;
    w.record(
        actor,
        "token.revoked",
        &subject(id),
        json!({"before": {"revoked_at": null}, "after": {"revoked_at": now}, "username": info.username, "prefix": info.prefix}),
    )
    .await?;
    info.revoked_at = Some(now);
    Ok(info)
}

/// Every token, newest first, optionally of one person.
pub async fn list(store: &Store, username: Option<&str>) -> StoreResult<Vec<TokenInfo>> {
    let query = sqlx::query(select_tokens!(
        "WHERE ($1 = '' OR u.username = $1) ORDER BY t.id DESC"
    ))
    .bind(username.unwrap_or(""));
    rows::all(&mut store.read().await?, query, info_from_row).await
}

/// The person and scope behind a presented token, if it is usable: not revoked, not expired,
/// and its owner active.
pub async fn authenticate(store: &Store, secret: &str) -> StoreResult<Option<(User, Scope)>> {
    let now = Timestamp::now();
    let row = sqlx::query(concat!(
        "SELECT t.id AS token_id, t.scope, t.last_used_at, u.id, u.username, u.display_name, ",
        "u.roles, u.active, u.created_at FROM api_tokens t JOIN users u ON u.id = t.user_id ",
        "WHERE t.token_hash = $1 AND t.revoked_at IS NULL ",
        "AND (t.expires_at IS NULL OR t.expires_at > $2) AND u.active = 1"
    ))
    .bind(stored_hash(secret))
    .bind(now)
    .fetch_optional(&mut store.read().await?)
    .await?;
    let Some(row) = row else {
        return Ok(None);
    };
    let token_id: i64 = row.try_get("token_id")?;
    let last_used: Option<Timestamp> = row.try_get("last_used_at")?;
    if last_used.is_none_or(|t| t < now.plus_seconds(-60)) {
        store.usage.token_used(token_id, now);
    }
    let scope: String = row.try_get("scope")?;
    Ok(Some((
        rows::user(&row)?,
        Scope::parse(&scope).unwrap_or(Scope::Read),
    )))
}
