//! Signing in and out.

use axum::extract::{RawQuery, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{IntoResponse, Redirect, Response};
use serde::{Deserialize, Serialize};

use super::{Common, FormFields, PageData, render};
use crate::domain::text;
use crate::ops::OpError;
use crate::ops::access;
use crate::web::AppState;
use crate::web::auth::{
    MaybeSession, SESSION_COOKIE, SIGNIN_COOKIE, cookie_header, new_signin_token, read_cookie,
};
use crate::web::error::PageError;
use crate::web::extract::ClientAddr;
use crate::web::redirect::same_site_path;

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

/// The sign-in form: where it leads after, the username typed, and why the last try failed.
#[derive(Debug, Serialize)]
pub struct SigninPage<'a> {
    pub next: &'a str,
    pub username: &'a str,
    pub error: Option<&'a str>,
}

impl PageData for SigninPage<'_> {
    const TEMPLATE: &'static str = "signin.html";
}

fn signin_form(
    csrf: &str,
    next: &str,
    username: &str,
    error: Option<&str>,
    status: StatusCode,
) -> Response {
    // Nobody is signed in yet: the form carries the sign-in cookie's own token.
    let common = Common {
        csrf,
        ..Common::new(None, "Sign in", "signin")
    };
    let page = SigninPage {
        next,
        username,
        error,
    };
    render(status, &common, &page)
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

pub async fn submit(
    State(state): State<AppState>,
    MaybeSession(existing): MaybeSession,
    ClientAddr(addr): ClientAddr,
    headers: HeaderMap,
    form: FormFields,
) -> Result<Response, PageError> {
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
    // The answer is built before the session, so nothing can fail after it is made.
    let mut response = Redirect::to(&next).into_response();
    let signed_in = access::sign_in(
        &state.store,
        &username,
        form.get("password"),
        &addr,
        existing.as_ref(),
    )
    .await;
    match signed_in {
        Ok((secret, _)) => {
            response.headers_mut().append(
                header::SET_COOKIE,
                cookie_header(&state, SESSION_COOKIE, &secret, false),
            );
            response.headers_mut().append(
                header::SET_COOKIE,
                cookie_header(&state, SIGNIN_COOKIE, "", true),
            );
            Ok(response)
        }
        Err(OpError::BadCredentials(message)) => Ok(signin_form(
            &csrf,
            &next,
            &username,
            Some(&message),
            StatusCode::OK,
        )),
        Err(e) => Err(e.into()),
    }
}

pub async fn signout(
    State(state): State<AppState>,
    MaybeSession(session): MaybeSession,
) -> Result<Response, PageError> {
    if let Some(s) = session {
        access::sign_out(&state.store, &s).await?;
    }
    let mut response = Redirect::to("/signin").into_response();
    response.headers_mut().append(
        header::SET_COOKIE,
        cookie_header(&state, SESSION_COOKIE, "", true),
    );
    Ok(response)
}
