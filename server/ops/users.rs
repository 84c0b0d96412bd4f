//! Managing people and API tokens: by an admin in the browser or the API, or by the operator
//! on the command line.

use super::{OpError, OpResult};
use crate::auth::password;
use crate::domain::Problems;
use crate::domain::User;
use crate::domain::access::{Scope, TokenInfo};
use crate::domain::people::{self, check_password};
use crate::domain::text;
use crate::domain::{Role, Roles, Timestamp, Username};
use crate::store::{Actor, Store, tokens, users};

/// Who is acting: a signed-in person, or the operator at the command line (who holds the
/// database's credentials and so every power).
#[derive(Clone, Copy, Debug)]
pub enum By<'a> {
    Operator,
    Person(&'a User),
}

impl By<'_> {
    pub fn actor(&self) -> Actor {
        match self {
            By::Operator => Actor::Cli,
            By::Person(u) => Actor::User(u.username.to_string()),
        }
    }

    fn require_admin(&self) -> OpResult<()> {
        match self {
            By::Operator => Ok(()),
            By::Person(u) if u.roles.has(Role::Admin) => Ok(()),
            By::Person(_) => Err(OpError::Forbidden(
                "only an admin may manage people and tokens".into(),
            )),
        }
    }
}

/// A new person as submitted.
#[derive(Clone, Debug, Default)]
pub struct NewUser {
    pub username: String,
    pub display_name: String,
    pub roles: String,
    pub password: String,
}

/// Hashes off the async threads: argon2id at these settings takes tens of milliseconds.
pub async fn hash_password(plain: String) -> String {
    tokio::task::spawn_blocking(move || password::hash(&plain))
        .await
        .expect("hashing does not panic")
}

pub async fn add(store: &Store, by: By<'_>, input: &NewUser) -> OpResult<User> {
    by.require_admin()?;
    let mut p = Problems::default();
    let username = p.check("username", Username::parse(text::trim(&input.username)));
    let display = if text::trim(&input.display_name).is_empty() {
        Some(text::trim(&input.username).to_string())
    } else {
        p.check("display_name", people::display_name(&input.display_name))
    };
    let roles = p.check("roles", Roles::parse_list(&input.roles));
    if roles.as_ref().is_some_and(Roles::is_empty) {
        p.add("roles", "give at least one role");
    }
    p.check("password", check_password(&input.password));
    let (Some(username), Some(display), Some(roles)) = (username, display, roles) else {
        return Err(p.into());
    };
    if !p.is_empty() {
        return Err(p.into());
    }
    add_with_hash(
        store,
        by,
        &username,
        &display,
        &roles,
        &hash_password(input.password.clone()).await,
    )
    .await
}

/// Adds a person whose password is already hashed (the demo and the tests hash once).
pub async fn add_with_hash(
    store: &Store,
    by: By<'_>,
    username: &Username,
    display_name: &str,
    roles: &Roles,
    password_hash: &str,
) -> OpResult<User> {
    by.require_admin()?;
    let mut w = store.begin_write().await?;
    let user = users::create(
        &mut w,
        &by.actor(),
        username,
        display_name,
        roles,
        password_hash,
    )
    .await?;
    w.commit().await?;
    Ok(user)
}

/// The person a request names: a text that is no username names nobody (400 naming the
/// field), and never reaches the database.
fn named(username: &str) -> OpResult<Username> {
    Username::parse(username).map_err(|e| single("username", e))
}

pub async fn set_roles(store: &Store, by: By<'_>, username: &str, roles: &str) -> OpResult<User> {
    by.require_admin()?;
    let username = named(username)?;
    let username = username.as_str();
    let roles = Roles::parse_list(roles).map_err(|e| single("roles", e))?;
    if roles.is_empty() {
        return Err(single("roles", "give at least one role"));
    }
    if let By::Person(me) = by
        && me.username == username
        && !roles.has(Role::Admin)
    {
        return Err(single(
            "roles",
            "you cannot remove your own admin role; ask another admin",
        ));
    }
    let mut w = store.begin_write().await?;
    let user = users::set_roles(&mut w, &by.actor(), username, &roles).await?;
    w.commit().await?;
    Ok(user)
}

pub async fn set_display_name(
    store: &Store,
    by: By<'_>,
    username: &str,
    display_name: &str,
) -> OpResult<User> {
    by.require_admin()?;
    let username = named(username)?;
    let username = username.as_str();
    let display = people::display_name(display_name).map_err(|e| single("display_name", e))?;
    let mut w = store.begin_write().await?;
    let user = users::set_display_name(&mut w, &by.actor(), username, &display).await?;
    w.commit().await?;
    Ok(user)
}

pub async fn set_active(store: &Store, by: By<'_>, username: &str, active: bool) -> OpResult<User> {
    by.require_admin()?;
    let username = named(username)?;
    let username = username.as_str();
    if let By::Person(me) = by
        && me.username == username
        && !active
    {
        return Err(OpError::Forbidden(
            "you cannot deactivate yourself; ask another admin".into(),
        ));
    }
    let mut w = store.begin_write().await?;
    let user = users::set_active(&mut w, &by.actor(), username, active).await?;
    w.commit().await?;
    Ok(user)
}

pub async fn reset_password(
    store: &Store,
    by: By<'_>,
    username: &str,
    new_password: &str,
) -> OpResult<User> {
    by.require_admin()?;
    let username = named(username)?;
    let username = username.as_str();
    check_password(new_password).map_err(|e| single("password", e))?;
    users::get(store, username).await?;
    let hash = hash_password(new_password.to_string()).await;
    let mut w = store.begin_write().await?;
    let user = users::set_password(&mut w, &by.actor(), username, &hash).await?;
    w.commit().await?;
    Ok(user)
}

fn single(field: &str, message: impl ToString) -> OpError {
    let mut p = Problems::default();
    p.add(field, message.to_string());
    OpError::Invalid(p)
}

/// Issues a token for `username`; returns the secret, shown once.
pub async fn issue_token(
    store: &Store,
    by: By<'_>,
    username: &str,
    scope: Scope,
    label: &str,
    expires_at: Option<Timestamp>,
) -> OpResult<(String, TokenInfo)> {
    by.require_admin()?;
    let username = named(username)?;
    let username = username.as_str();
    let label =
        text::single_line("label", label, 0, text::LABEL_MAX).map_err(|e| single("label", e))?;
    if expires_at.is_some_and(|t| t <= Timestamp::now()) {
        return Err(single("expires_at", "the expiry must lie in the future"));
    }
    let user = users::get(store, username).await?;
    if !user.active {
        return Err(single(
            "username",
            format!("{username:?} is deactivated; activate them first"),
        ));
    }
    let mut w = store.begin_write().await?;
    let issued = tokens::issue(&mut w, &by.actor(), &user, scope, &label, expires_at).await?;
    w.commit().await?;
    Ok(issued)
}

pub async fn revoke_token(store: &Store, by: By<'_>, id: i64) -> OpResult<TokenInfo> {
    by.require_admin()?;
    let mut w = store.begin_write().await?;
    let info = tokens::revoke(&mut w, &by.actor(), id).await?;
    w.commit().await?;
    Ok(info)
}

pub async fn list_tokens(
    store: &Store,
    by: By<'_>,
    username: Option<&str>,
) -> OpResult<Vec<TokenInfo>> {
    by.require_admin()?;
    let username = username.map(named).transpose()?;
    Ok(tokens::list(store, username.as_ref().map(Username::as_str)).await?)
}

/// A person by username (404 when there is none).
pub async fn get(store: &Store, username: &str) -> OpResult<User> {
    Ok(users::get(store, username).await?)
}

/// Everyone with an account, in username order.
pub async fn list(store: &Store) -> OpResult<Vec<User>> {
    Ok(users::list(store).await?)
}

/// How many active people exist (`serve` warns when there is nobody yet).
pub async fn count(store: &Store) -> OpResult<i64> {
    Ok(users::count(store).await?)
}
