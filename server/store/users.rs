//! People: accounts, roles, activation and passwords.

use serde_json::json;
use sqlx::Row;
use sqlx::any::Any;
use sqlx::{Encode, Type};

use super::{Actor, Store, StoreError, StoreResult, WriteTx, rows};
use crate::domain::{Roles, User, Username};

/// `SELECT <user columns> FROM users <rest>` as one static string.
macro_rules! select_users {
    ($rest:literal) => {
        concat!(
            "SELECT id, username, display_name, roles, active, created_at, password_hash FROM users ",
            $rest
        )
    };
}

fn not_found(username: &str) -> StoreError {
    StoreError::NotFound(format!("no user named {username:?}"))
}

/// Creates a user; the caller has validated the fields and hashed the password.
pub async fn create(
    w: &mut WriteTx,
    actor: &Actor,
    username: &Username,
    display_name: &str,
    roles: &Roles,
    password_hash: &str,
) -> StoreResult<User> {
    let exists: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM users WHERE username = $1")
        .bind(username.as_str())
        .fetch_one(w.conn())
        .await?;
    if exists > 0 {
        return Err(StoreError::Conflict(format!(
            "a user named {:?} already exists",
            username.as_str()
        )));
    }
    let now = w.now();
    let id: i64 = sqlx::query_scalar(
        "INSERT INTO users (username, display_name, roles, password_hash, active, created_at, updated_at) \
         VALUES ($1, $2, $3, $4, 1, $5, $5) RETURNING id",
    )
    .bind(username.as_str())
    .bind(display_name)
    .bind(roles.to_list())
    .bind(password_hash)
    .bind(now)
    .fetch_one(w.conn())
    .await?;
    w.record(
        actor,
        "user.created",
        &subject(username.as_str()),
        json!({"after": {"username": username.as_str(), "display_name": display_name, "roles": roles, "active": true}}),
    )
    .await?;
    Ok(User {
        id,
        username: username.clone(),
        display_name: display_name.to_string(),
        roles: roles.clone(),
        active: true,
        created_at: now,
    })
}

pub fn subject(username: &str) -> String {
    format!("user:{username}")
}

pub async fn find(store: &Store, username: &str) -> StoreResult<Option<User>> {
    let query = sqlx::query(select_users!("WHERE username = $1")).bind(username);
    rows::optional(&mut store.read().await?, query, rows::user).await
}

pub async fn get(store: &Store, username: &str) -> StoreResult<User> {
    find(store, username)
        .await?
        .ok_or_else(|| not_found(username))
}

pub async fn by_id(store: &Store, id: i64) -> StoreResult<Option<User>> {
    let query = sqlx::query(select_users!("WHERE id = $1")).bind(id);
    rows::optional(&mut store.read().await?, query, rows::user).await
}

/// The user and stored password hash for a sign-in attempt.
pub async fn credentials(store: &Store, username: &str) -> StoreResult<Option<(User, String)>> {
    let row = sqlx::query(select_users!("WHERE username = $1"))
        .bind(username)
        .fetch_optional(&mut store.read().await?)
        .await?;
    match row {
        Some(row) => Ok(Some((rows::user(&row)?, row.try_get("password_hash")?))),
        None => Ok(None),
    }
}

pub async fn list(store: &Store) -> StoreResult<Vec<User>> {
    let query = sqlx::query(select_users!("ORDER BY username"));
    rows::all(&mut store.read().await?, query, rows::user).await
}

async fn locked_user(w: &mut WriteTx, username: &str) -> StoreResult<User> {
    let query = sqlx::query(select_users!("WHERE username = $1")).bind(username);
    rows::optional(w.conn(), query, rows::user)
        .await?
        .ok_or_else(|| not_found(username))
}

/// Sets one column of the person `user_id` to `value` and stamps the row with the time of the
/// change; `column` is a name written in this file, never input.
async fn update<'v, T>(
    w: &mut WriteTx,
    user_id: i64,
    column: &'static str,
    value: T,
) -> StoreResult<()>
where
    T: Encode<'v, Any> + Type<Any> + Send,
{
    let now = w.now();
    let sql = format!("UPDATE users SET {column} = $1, updated_at = $2 WHERE id = $3");
    sqlx::query(sqlx::AssertSqlSafe(sql))
        .bind(value)
        .bind(now)
        .bind(user_id)
        .execute(w.conn())
        .await?;
    Ok(())
}

pub async fn set_roles(
    w: &mut WriteTx,
    actor: &Actor,
    username: &str,
    roles: &Roles,
) -> StoreResult<User> {
    let mut user = locked_user(w, username).await?;
    if user.roles == *roles {
        return Ok(user);
    }
    update(w, user.id, "roles", roles.to_list()).await?;
    w.record(
        actor,
        "user.roles_changed",
        &subject(username),
        json!({"before": {"roles": user.roles}, "after": {"roles": roles}}),
    )
    .await?;
    user.roles = roles.clone();
    Ok(user)
}

pub async fn set_display_name(
    w: &mut WriteTx,
    actor: &Actor,
    username: &str,
    display_name: &str,
) -> StoreResult<User> {
    let mut user = locked_user(w, username).await?;
    if user.display_name == display_name {
        return Ok(user);
    }
    update(w, user.id, "display_name", display_name).await?;
    w.record(
        actor,
        "user.display_name_changed",
        &subject(username),
        json!({"before": {"display_name": user.display_name}, "after": {"display_name": display_name}}),
    )
    .await?;
    user.display_name = display_name.to_string();
    Ok(user)
}

/// Activates or deactivates a person. Deactivation ends their sessions at once; their tokens
/// stop working because every token check requires an active owner.
pub async fn set_active(
    w: &mut WriteTx,
    actor: &Actor,
    username: &str,
    active: bool,
) -> StoreResult<User> {
    let mut user = locked_user(w, username).await?;
    if user.active == active {
        return Ok(user);
    }
    update(w, user.id, "active", i64::from(active)).await?;
    if !active {
        super::sessions::end_all_for(w, user.id).await?;
    }
    let action = if active {
        "user.activated"
    } else {
        "user.deactivated"
    };
    w.record(
        actor,
        action,
        &subject(username),
        json!({"before": {"active": user.active}, "after": {"active": active}}),
    )
    .await?;
    user.active = active;
    Ok(user)
}

/// Replaces a password hash and ends the person's sessions.
pub async fn set_password(
    w: &mut WriteTx,
    actor: &Actor,
    username: &str,
    password_hash: &str,
) -> StoreResult<User> {
    let user = locked_user(w, username).await?;
    update(w, user.id, "password_hash", password_hash).await?;
    super::sessions::end_all_for(w, user.id).await?;
    w.record(actor, "user.password_reset", &subject(username), json!({}))
        .await?;
    Ok(user)
}

/// How many active people exist (the first admin is created by `user add`).
pub async fn count(store: &Store) -> StoreResult<i64> {
    Ok(sqlx::query_scalar("SELECT COUNT(*) FROM users")
        .fetch_one(&mut store.read().await?)
        .await?)
}
