//! Who is calling, resolved once per request, and the checks every unsafe request passes
//! before any handler runs:
//!
//! - machine clients send `Authorization: Bearer TOKEN` (API only); a read-scope token may
//!   only read;
//! - browsers send the session cookie, and every unsafe request carries the session's CSRF
//!   token (a `_csrf` form field, or the `X-CSRF-Token` header for API calls) (OWASP ASVS
//!   4.0.3 §4.2.2);
//! - the sign-in form, posted before any session exists, carries a token that must equal its
//!   own cookie (double submit).
//!
//! Because the checks sit here, in front of every route, no handler can forget them.

use axum::body::{Body, to_bytes};
use axum::extract::{FromRequestParts, Request, State};
use axum::http::request::Parts;
use axum::http::{HeaderMap, HeaderValue, Method, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Redirect, Response};
use cookie::{Cookie, SameSite};

use super::AppState;
use super::error::{ApiError, PageError};
use crate::auth::secret::{constant_time_eq, random_token};
use crate::domain::User;
use crate::domain::access::Scope;
use crate::domain::access::Session;
use crate::ops::access;

pub const SESSION_COOKIE: &str = "cutpoints_session";
pub const SIGNIN_COOKIE: &str = "cutpoints_signin";
pub const CSRF_FIELD: &str = "_csrf";
pub const CSRF_HEADER: &str = "x-csrf-token";
/// Largest form a page accepts (a rationale of 20,000 characters fits many times over).
pub const FORM_LIMIT: usize = 1024 * 1024;

/// How a request proved who it comes from.
#[derive(Clone, Debug)]
pub enum Credential {
    Session(Session),
    Token {
        user: std::sync::Arc<User>,
        scope: Scope,
    },
}

impl Credential {
    pub fn user(&self) -> &User {
        match self {
            Credential::Session(s) => &s.user,
            Credential::Token { user, .. } => user,
        }
    }
}

/// What the middleware found; handlers read it through the extractors below.
#[derive(Clone, Debug)]
struct Resolved(Option<Credential>);

pub fn read_cookie(headers: &HeaderMap, name: &str) -> Option<String> {
    headers
        .get_all(header::COOKIE)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| Cookie::split_parse(v.to_string()))
        .filter_map(Result::ok)
        .find(|c| c.name() == name)
        .map(|c| c.value().to_string())
}

/// A `Set-Cookie` value: HttpOnly, SameSite=Lax, Path=/, and Secure when the site is served
/// over https (OWASP ASVS 4.0.3 §3.4.1 to §3.4.3).
pub fn cookie_header(state: &AppState, name: &str, value: &str, remove: bool) -> HeaderValue {
    let mut c = Cookie::build((name.to_string(), value.to_string()))
        .http_only(true)
        .same_site(SameSite::Lax)
        .path("/")
        .secure(state.config.secure_cookies)
        .build();
    if remove {
        c.make_removal();
    }
    HeaderValue::from_str(&c.to_string()).expect("cookie values are ASCII")
}

/// POST endpoints that compute an answer and change nothing: read-scope tokens may call them.
const READ_ONLY_POSTS: &[&str] = &["/api/v1/classify", "/api/v1/evaluate"];

fn is_safe(method: &Method) -> bool {
    matches!(*method, Method::GET | Method::HEAD | Method::OPTIONS)
}

fn bearer(headers: &HeaderMap) -> Option<Result<String, ()>> {
    let value = headers.get(header::AUTHORIZATION)?;
    let text = value.to_str().map_err(|_| ());
    Some(text.and_then(|t| {
        let (scheme, token) = t.trim().split_once(' ').ok_or(())?;
        if scheme.eq_ignore_ascii_case("bearer") && !token.trim().is_empty() {
            Ok(token.trim().to_string())
        } else {
            Err(())
        }
    }))
}

/// The middleware: resolves the caller and refuses unsafe requests that fail the checks.
pub async fn resolve(State(state): State<AppState>, req: Request, next: Next) -> Response {
    match resolve_inner(&state, req).await {
        Ok(req) => next.run(req).await,
        Err(response) => response,
    }
}

async fn resolve_inner(state: &AppState, mut req: Request) -> Result<Request, Response> {
    let is_api = req.uri().path().starts_with("/api/");
    let unsafe_method = !is_safe(req.method());
    let page_error = |e: ApiError| PageError(e).into_response();

    let credential = match bearer(req.headers()).filter(|_| is_api) {
        Some(Ok(token)) => match state.tokens.authenticate(&state.store, &token).await {
            Ok(Some((user, scope))) => Some(Credential::Token { user, scope }),
            Ok(None) => {
                return Err(ApiError::unauthorized(
                    "the token is not valid: unknown, expired, revoked, or its owner deactivated",
                )
                .into_response());
            }
            Err(e) => return Err(ApiError::from(e).into_response()),
        },
        Some(Err(())) => {
            return Err(
                ApiError::unauthorized("send the token as 'Authorization: Bearer TOKEN'")
                    .into_response(),
            );
        }
        None => match read_cookie(req.headers(), SESSION_COOKIE) {
            Some(secret) => match access::session(&state.store, &secret).await {
                Ok(found) => found.map(Credential::Session),
                Err(e) if is_api => return Err(ApiError::from(e).into_response()),
                Err(e) => return Err(page_error(e.into())),
            },
            None => None,
        },
    };

    if unsafe_method {
        match &credential {
            Some(Credential::Token {
                scope: Scope::Read, ..
            }) if !(req.method() == Method::POST
                && READ_ONLY_POSTS.contains(&req.uri().path())) =>
            {
                return Err(ApiError::forbidden(
                    "this token has read scope; changes need a write-scope token",
                )
                .into_response());
            }
            Some(Credential::Token { .. }) => {}
            Some(Credential::Session(session)) if is_api => {
                let sent = req
                    .headers()
                    .get(CSRF_HEADER)
                    .and_then(|v| v.to_str().ok())
                    .unwrap_or("");
                if !constant_time_eq(sent, &session.csrf_token) {
                    return Err(ApiError::forbidden(
                        "a browser session must send its CSRF token in the X-CSRF-Token header",
                    )
                    .into_response());
                }
            }
            // The history upload form sends a file, so its body is multipart; its handler
            // reads the token first and checks it before anything else (pages::evidence).
            Some(Credential::Session(_)) if is_upload_form(&req) => {}
            Some(Credential::Session(session)) => {
                let expected = session.csrf_token.clone();
                req = check_form_token(req, &expected).await?;
            }
            // With --public-read, anyone may evaluate (it reads the published set only).
            None if is_api
                && state.config.public_read
                && req.method() == Method::POST
                && req.uri().path() == "/api/v1/evaluate" => {}
            None if is_api => {
                return Err(ApiError::unauthorized(
                    "sign in, or send 'Authorization: Bearer TOKEN'",
                )
                .into_response());
            }
            None if req.uri().path() == "/signin" => {
                let expected = read_cookie(req.headers(), SIGNIN_COOKIE).unwrap_or_default();
                req = check_form_token(req, &expected).await?;
            }
            None => return Err(Redirect::to("/signin").into_response()),
        }
    }
    req.extensions_mut().insert(Resolved(credential));
    Ok(req)
}

/// `POST /metrics/{key}/observations` sent as multipart/form-data.
fn is_upload_form(req: &Request) -> bool {
    let path = req.uri().path();
    let multipart = req
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|t| t.to_ascii_lowercase().starts_with("multipart/form-data"));
    multipart
        && req.method() == Method::POST
        && path.starts_with("/metrics/")
        && path.ends_with("/observations")
        && path.matches('/').count() == 3
}

/// Reads a form body, checks its `_csrf` field against `expected`, and puts the body back.
async fn check_form_token(req: Request, expected: &str) -> Result<Request, Response> {
    let page_error = |e: ApiError| PageError(e).into_response();
    let content_type = req
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_ascii_lowercase();
    if !content_type.starts_with("application/x-www-form-urlencoded") {
        return Err(page_error(ApiError::new(
            StatusCode::UNSUPPORTED_MEDIA_TYPE,
            "unsupported_media_type",
            "forms must be sent as application/x-www-form-urlencoded",
        )));
    }
    let (parts, body) = req.into_parts();
    let bytes = to_bytes(body, FORM_LIMIT).await.map_err(|_| {
        page_error(ApiError::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "too_large",
            "the form is larger than cutpoints accepts",
        ))
    })?;
    let fields: Vec<(String, String)> = serde_urlencoded::from_bytes(&bytes).unwrap_or_default();
    let sent = fields
        .iter()
        .find(|(k, _)| k == CSRF_FIELD)
        .map(|(_, v)| v.as_str())
        .unwrap_or("");
    if expected.is_empty() || !constant_time_eq(sent, expected) {
        return Err(page_error(ApiError::forbidden(
            "this form has expired or did not come from cutpoints: go back, reload the page and try again",
        )));
    }
    Ok(Request::from_parts(parts, Body::from(bytes)))
}

/// A new random token for the sign-in form's double submit.
pub fn new_signin_token() -> String {
    random_token("f")
}

/// Whether the middleware found any credential (without copying it).
pub fn has_credential(parts: &Parts) -> bool {
    parts
        .extensions
        .get::<Resolved>()
        .is_some_and(|r| r.0.is_some())
}

fn resolved(parts: &Parts) -> Option<Credential> {
    parts.extensions.get::<Resolved>().and_then(|r| r.0.clone())
}

/// The caller of an API endpoint; 401 when there is none.
pub struct ApiCaller(pub Credential);

impl ApiCaller {
    pub fn user(&self) -> &User {
        self.0.user()
    }
}

impl FromRequestParts<AppState> for ApiCaller {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _: &AppState) -> Result<Self, Self::Rejection> {
        resolved(parts)
            .map(ApiCaller)
            .ok_or_else(|| ApiError::unauthorized("sign in, or send 'Authorization: Bearer TOKEN'"))
    }
}

/// The signed-in person of a page; without a session, a redirect to the sign-in page that
/// comes back here afterwards.
pub struct PageSession(pub Session);

impl FromRequestParts<AppState> for PageSession {
    type Rejection = Response;

    async fn from_request_parts(parts: &mut Parts, _: &AppState) -> Result<Self, Self::Rejection> {
        match resolved(parts) {
            Some(Credential::Session(s)) => Ok(PageSession(s)),
            _ => {
                let here = parts
                    .uri
                    .path_and_query()
                    .map(|p| p.as_str())
                    .unwrap_or("/");
                let next: String =
                    serde_urlencoded::to_string([("next", here)]).unwrap_or_default();
                Err(Redirect::to(&format!("/signin?{next}")).into_response())
            }
        }
    }
}

/// The session of a page that also serves visitors (the sign-in page).
pub struct MaybeSession(pub Option<Session>);

impl FromRequestParts<AppState> for MaybeSession {
    type Rejection = std::convert::Infallible;

    async fn from_request_parts(parts: &mut Parts, _: &AppState) -> Result<Self, Self::Rejection> {
        Ok(MaybeSession(match resolved(parts) {
            Some(Credential::Session(s)) => Some(s),
            _ => None,
        }))
    }
}
