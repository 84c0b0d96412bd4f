//! Signing in and out.

use axum::extract::{RawQuery, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Redirect, Response};
use serde::Deserialize;

use super::{FormFields, base_context, render};
use crate::auth::password;
use crate::domain::text;
use crate::store::{Actor, sessions, throttle, users};
use crate::web::AppState;
use crate::web::auth::{
    MaybeSession, SESSION_COOKIE, SIGNIN_COOKIE, cookie_header, new_signin_token, read_cookie,
};
use crate::web::error::{ApiError, PageError};
use crate::web::extract::ClientAddr;
use crate::web::redirect::same_site_path;

/// The one message for every failed sign-in: it never tells whether the account exists, is
/// deactivated, or only the password was wrong.
pub const FAILED: &str = "That username and password do not match an active account.";

#[derive(Deserialize, Default)]
pub struct NextQuery {
    #[serde(default)]
    next: String,
}

/// Where sign-in leads when `next` names no path on this site.
const DEFAULT_NEXT: &str = "/metrics";

/// Only a path on this site may follow sign-in (no open redirect).
fn safe_next(next: &str) -> &str {
    same_site_path(next).unwrap_or(DEFAULT_NEXT)
}

/// `next` from the query. Read leniently: whatever it holds, sign-in falls back to
/// [`DEFAULT_NEXT`] unless it is a path on this site.
fn next_param(query: Option<&str>) -> String {
    let query: NextQuery = serde_urlencoded::from_str(query.unwrap_or("")).unwrap_or_default();
    safe_next(&query.next).to_string()
}

fn signin_form(
    csrf: &str,
    next: &str,
    username: &str,
    error: Option<&str>,
    status: StatusCode,
) -> Response {
    let mut ctx = base_context(None, "Sign in", "signin");
    ctx.insert("csrf", csrf);
    ctx.insert("next", next);
    ctx.insert("username", username);
    ctx.insert("error", &error);
    render(status, "signin.html", &ctx)
}

pub async fn show(
    State(state): State<AppState>,
    MaybeSession(session): MaybeSession,
    headers: HeaderMap,
    RawQuery(query): RawQuery,
) -> Response {
    let next = next_param(query.as_deref());
    if session.is_some() {
        return Redirect::to(&next).into_response();
    }
    let token = read_cookie(&headers, SIGNIN_COOKIE).unwrap_or_else(new_signin_token);
    let mut response = signin_form(&token, &next, "", None, StatusCode::OK);
    response.headers_mut().append(
        header::SET_COOKIE,
        cookie_header(&state, SIGNIN_COOKIE, &token, false),
    );
    response
}

/// Seconds until `until`, rounded up, at least 1.
fn seconds_until(until: crate::domain::Timestamp) -> u64 {
    let now = crate::domain::Timestamp::now().as_datetime();
    let ms = (until.as_datetime() - now).num_milliseconds().max(0) as u64;
    ms.div_ceil(1000).max(1)
}

pub async fn submit(
    State(state): State<AppState>,
    MaybeSession(existing): MaybeSession,
    ClientAddr(addr): ClientAddr,
    headers: HeaderMap,
    form: FormFields,
) -> Result<Response, PageError> {
    let store = &state.store;
    let next = safe_next(form.get("next")).to_string();
    let csrf = read_cookie(&headers, SIGNIN_COOKIE).unwrap_or_default();
    // No account's name holds a control character; such a request is malformed, not a
    // failed sign-in, and never reaches the database.
    if let Err(e) = text::no_control("username", form.get("username")) {
        let message = e.to_string();
        return Ok(signin_form(
            &csrf,
            &next,
            "",
            Some(&message),
            StatusCode::BAD_REQUEST,
        ));
    }
    let username = text::trim(form.get("username")).to_lowercase();

    // Throttled subjects are refused before any password is checked.
    let account_lock = throttle::locked_until(store, throttle::Scope::Account, &username).await?;
    let address_lock = throttle::locked_until(store, throttle::Scope::Address, &addr).await?;
    if account_lock.is_some() || address_lock.is_some() {
        if account_lock.is_some() {
            throttle::count_refused(store, throttle::Scope::Account, &username).await?;
        }
        if address_lock.is_some() {
            throttle::count_refused(store, throttle::Scope::Address, &addr).await?;
        }
        let until = account_lock.max(address_lock).expect("one lock is set");
        return Err(PageError(ApiError::throttled(seconds_until(until))));
    }

    let plain = form.get("password").to_string();
    let found = users::credentials(store, &username).await?;
    let verified = {
        let (hash, active) = match &found {
            Some((user, hash)) => (hash.clone(), user.active),
            None => (password::decoy_hash().to_string(), false),
        };
        let matches = tokio::task::spawn_blocking(move || password::verify(&plain, &hash))
            .await
            .unwrap_or(false);
        matches && active
    };

    if let (true, Some((user, _))) = (verified, found) {
        // The answer is built before the session, so nothing can fail after it is made.
        let mut response = Redirect::to(&next).into_response();
        throttle::clear(store, throttle::Scope::Account, &username).await?;
        // A fresh session id at every sign-in (OWASP ASVS 4.0.3 §3.2.1).
        if let Some(old) = existing {
            sessions::end(store, &old.id_hash).await?;
        }
        let (secret, _) = sessions::create(store, &user).await?;
        // Sign-ins are rare enough to sweep away sessions that can no longer be used.
        sessions::purge_expired(store).await?;
        response.headers_mut().append(
            header::SET_COOKIE,
            cookie_header(&state, SESSION_COOKIE, &secret, false),
        );
        response.headers_mut().append(
            header::SET_COOKIE,
            cookie_header(&state, SIGNIN_COOKIE, "", true),
        );
        return Ok(response);
    }

    let mut w = store.begin_write().await?;
    let account = throttle::count_failure(&mut w, throttle::Scope::Account, &username).await?;
    let address = throttle::count_failure(&mut w, throttle::Scope::Address, &addr).await?;
    w.record(
        &Actor::Anonymous,
        "signin.failed",
        &users::subject(&username),
        serde_json::json!({
            "username": username,
            "address": addr,
            "refused_while_throttled": account.refused_earlier + address.refused_earlier,
        }),
    )
    .await?;
    w.commit().await?;
    Ok(signin_form(
        &csrf,
        &next,
        &username,
        Some(FAILED),
        StatusCode::OK,
    ))
}

pub async fn signout(
    State(state): State<AppState>,
    MaybeSession(session): MaybeSession,
) -> Result<Response, PageError> {
    if let Some(s) = session {
        sessions::end(&state.store, &s.id_hash).await?;
    }
    let mut response = Redirect::to("/signin").into_response();
    response.headers_mut().append(
        header::SET_COOKIE,
        cookie_header(&state, SESSION_COOKIE, "", true),
    );
    Ok(response)
}
