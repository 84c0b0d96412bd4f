//! Server-rendered pages. Each handler builds a context and names a template; forms post
//! back to the same place and are re-shown with a message beside each field that failed.

pub mod admin;
pub mod audit;
pub mod evidence;
pub mod metrics;
pub mod proposals;
pub mod published;
pub mod signin;

use std::collections::BTreeMap;

use axum::body::Bytes;
use axum::extract::{FromRequest, Request};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{Html, IntoResponse, Response};
use serde_json::json;
use tera::Context;

use super::AppState;
use super::error::{ApiError, PageError};
use super::templates;
use crate::domain::Problems;
use crate::domain::Role;
use crate::store::sessions::Session;

/// The context every page starts from: who is signed in, their CSRF token, the page title
/// and which part of the navigation is current.
pub fn base_context(session: Option<&Session>, title: &str, section: &str) -> Context {
    let mut ctx = Context::new();
    ctx.insert("title", title);
    ctx.insert("section", section);
    match session {
        Some(s) => {
            ctx.insert(
                "me",
                &json!({
                    "username": s.user.username,
                    "display_name": s.user.display_name,
                    "roles": s.user.roles.iter().map(Role::as_str).collect::<Vec<_>>(),
                    "is_admin": s.user.roles.has(Role::Admin),
                    "is_auditor": s.user.roles.has(Role::Auditor) || s.user.roles.has(Role::Admin),
                }),
            );
            ctx.insert("csrf", &s.csrf_token);
        }
        None => {
            ctx.insert("me", &serde_json::Value::Null);
            ctx.insert("csrf", "");
        }
    }
    ctx
}

/// Renders a page with a status.
pub fn render(status: StatusCode, name: &str, ctx: &Context) -> Response {
    match templates::render(name, ctx) {
        Ok(body) => (status, Html(body)).into_response(),
        Err(_) => error_page(&ApiError::internal()),
    }
}

pub fn page(name: &str, ctx: &Context) -> Response {
    render(StatusCode::OK, name, ctx)
}

/// The page for an error, with the same status and message the API would give.
pub fn error_page(err: &ApiError) -> Response {
    let heading = match err.status {
        StatusCode::BAD_REQUEST => "That request could not be used",
        StatusCode::UNAUTHORIZED => "Please sign in",
        StatusCode::FORBIDDEN => "Not allowed",
        StatusCode::NOT_FOUND => "Not found",
        StatusCode::CONFLICT => "That clashes with what is recorded",
        StatusCode::PAYLOAD_TOO_LARGE => "Too large",
        StatusCode::UNSUPPORTED_MEDIA_TYPE => "Unsupported form encoding",
        StatusCode::TOO_MANY_REQUESTS => "Too many attempts",
        StatusCode::SERVICE_UNAVAILABLE if err.code == "busy" => "Busy with other changes",
        StatusCode::SERVICE_UNAVAILABLE => "The database is not answering",
        _ => "Something went wrong",
    };
    let mut ctx = base_context(None, heading, "");
    ctx.insert("heading", heading);
    ctx.insert("message", &err.message);
    let mut response = match templates::render("error.html", &ctx) {
        Ok(body) => (err.status, Html(body)).into_response(),
        // The error page itself failed: fall back to plain words rather than loop.
        Err(_) => (err.status, Html(format!("<h1>{heading}</h1>"))).into_response(),
    };
    if let Some(seconds) = err.retry_after {
        response
            .headers_mut()
            .insert(header::RETRY_AFTER, HeaderValue::from(seconds));
    }
    response
}

/// A posted form as its fields in order (repeated names, like checkboxes, are kept).
pub struct FormFields(pub Vec<(String, String)>);

impl FormFields {
    pub fn get(&self, name: &str) -> &str {
        self.0
            .iter()
            .find(|(k, _)| k == name)
            .map(|(_, v)| v.as_str())
            .unwrap_or("")
    }

    pub fn all(&self, name: &str) -> Vec<&str> {
        self.0
            .iter()
            .filter(|(k, _)| k == name)
            .map(|(_, v)| v.as_str())
            .collect()
    }
}

impl FromRequest<AppState> for FormFields {
    type Rejection = PageError;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Self::Rejection> {
        let bytes = Bytes::from_request(req, state)
            .await
            .map_err(|e| PageError(super::extract::body_error(e)))?;
        serde_urlencoded::from_bytes(&bytes)
            .map(FormFields)
            .map_err(|e| {
                PageError(ApiError::bad_request(format!(
                    "the form could not be read: {e}"
                )))
            })
    }
}

/// The first problem of each field, for showing beside it.
pub fn field_errors(problems: &Problems) -> BTreeMap<String, String> {
    let mut out = BTreeMap::new();
    for p in &problems.0 {
        out.entry(p.field.clone())
            .or_insert_with(|| p.message.clone());
    }
    out
}

/// Query parameters of a page; a malformed query is read as no parameters, since a page can
/// always be shown without them. A control character in a parameter is refused (400 naming
/// it), as in every text field.
pub struct PageQuery<T>(pub T);

impl<T: serde::de::DeserializeOwned + Default> axum::extract::FromRequestParts<AppState>
    for PageQuery<T>
{
    type Rejection = PageError;

    async fn from_request_parts(
        parts: &mut axum::http::request::Parts,
        _: &AppState,
    ) -> Result<Self, Self::Rejection> {
        let query = parts.uri.query().unwrap_or("");
        super::extract::refuse_controls_in_query(query)?;
        Ok(PageQuery(
            serde_urlencoded::from_str(query).unwrap_or_default(),
        ))
    }
}
