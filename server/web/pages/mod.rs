//! Server-rendered pages. Each handler fills its page's data (a struct naming its template,
//! [`PageData`]) and renders it with the common part ([`Common`]); forms post back to the same
//! place and are re-shown with a message beside each field that failed.

pub mod admin;
pub mod audit;
pub mod evidence;
pub mod metrics;
pub mod proposals;
pub mod published;
#[doc(hidden)]
pub mod samples;
pub mod signin;

use std::collections::BTreeMap;

use axum::body::Bytes;
use axum::extract::{FromRequest, FromRequestParts, Path, Request};
use axum::http::StatusCode;
use axum::response::{Html, IntoResponse, Response};

use super::AppState;
use super::auth::PageSession;
use super::error::{ApiError, PageError, error_page};
pub use super::layout::{Common, PageData};
use crate::domain::access::Session;
use crate::domain::{MetricKey, Problems, Role};
use crate::ops::OpError;

/// Renders a page with a status; a page that fails to render becomes the error page.
pub fn render<P: PageData>(status: StatusCode, common: &Common<'_>, data: &P) -> Response {
    match super::layout::render(common, data) {
        Ok(body) => (status, Html(body)).into_response(),
        Err(_) => error_page(&ApiError::internal()),
    }
}

/// Renders a page with 200 OK.
pub fn page<P: PageData>(common: &Common<'_>, data: &P) -> Response {
    render(StatusCode::OK, common, data)
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

/// What a page about one thing reads first: the reader's session (or the sign-in redirect),
/// the one parameter of its path as text, then what it reads besides (`Input`: its query or
/// its posted form), in that order, as separate extractors in a handler's arguments would.
pub async fn session_path_and<Input, M>(
    req: Request,
    state: &AppState,
) -> Result<(Session, String, Input), Response>
where
    Input: FromRequest<AppState, M>,
    Input::Rejection: IntoResponse,
{
    let (mut parts, body) = req.into_parts();
    let PageSession(session) = PageSession::from_request_parts(&mut parts, state).await?;
    let Path(param) = Path::<String>::from_request_parts(&mut parts, state)
        .await
        .map_err(IntoResponse::into_response)?;
    let input = Input::from_request(Request::from_parts(parts, body), state)
        .await
        .map_err(IntoResponse::into_response)?;
    Ok((session, param, input))
}

/// Refuses (403) a session that is not an admin's, saying what only an admin may do.
pub fn require_admin(session: &Session, only_an_admin_may: &str) -> Result<(), PageError> {
    if session.user.roles.has(Role::Admin) {
        Ok(())
    } else {
        Err(PageError(ApiError::forbidden(format!(
            "only an admin may {only_an_admin_may}"
        ))))
    }
}

/// A metric key from a page's path; one that is not a key is a page that does not exist.
pub fn parse_key(key: &str) -> Result<MetricKey, PageError> {
    MetricKey::parse(key).map_err(|e| PageError(ApiError::not_found(e.to_string())))
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

/// Problems a form can show beside its fields, with the status to show them under: a
/// refusal of the whole request is shown beside `conflict_field`. Anything else becomes an
/// error page.
pub fn form_problems(
    err: OpError,
    conflict_field: &str,
) -> Result<(Problems, StatusCode), PageError> {
    match err {
        OpError::Invalid(p) => Ok((p, StatusCode::BAD_REQUEST)),
        OpError::Conflict(m) => {
            let mut p = Problems::default();
            p.add(conflict_field, m);
            Ok((p, StatusCode::CONFLICT))
        }
        other => Err(other.into()),
    }
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
