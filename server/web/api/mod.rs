//! The JSON API under `/api/v1`.

pub mod audit;
pub mod classify;
pub mod evidence;
pub mod metrics;
pub mod openapi;
pub mod proposals;
pub mod published;

use axum::Json;
use axum::extract::{FromRequestParts, Path};
use axum::http::request::Parts;
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Serialize;
use serde::de::DeserializeOwned;

use super::AppState;
use super::auth::{ApiCaller, Credential};
use super::error::ApiError;
use crate::domain::{Role, User, Username};
use openapi::{Unauthenticated, Unavailable};

/// A call about one thing the path names: the caller's credential, checked first, then `P`,
/// what the path names (a metric key, a proposal id).
pub struct Call<P> {
    pub state: AppState,
    pub caller: ApiCaller,
    pub path: P,
}

impl<P> FromRequestParts<AppState> for Call<P>
where
    P: FromRequestParts<AppState, Rejection = ApiError> + Send,
{
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let caller = ApiCaller::from_request_parts(parts, state).await?;
        let path = P::from_request_parts(parts, state).await?;
        Ok(Call {
            state: state.clone(),
            caller,
            path,
        })
    }
}

impl<P> Call<P> {
    /// The caller's account.
    pub fn user(&self) -> &User {
        self.caller.user()
    }
}

/// The request's path parameters as `T`, still text to be checked; 400 in JSON when the
/// path does not give them.
pub async fn path_params<T>(parts: &mut Parts, state: &AppState) -> Result<T, ApiError>
where
    T: DeserializeOwned + Send,
{
    let Path(params) = Path::<T>::from_request_parts(parts, state)
        .await
        .map_err(|e| ApiError::bad_request(format!("bad path: {}", e.body_text())))?;
    Ok(params)
}

/// A JSON answer that names where its subject lives (`Location`, RFC 9110 §10.2.2): a
/// resource just created, or a job just started.
pub fn located(status: StatusCode, body: impl Serialize, location: &str) -> Response {
    let mut response = (status, Json(body)).into_response();
    response.headers_mut().insert(
        header::LOCATION,
        HeaderValue::from_str(location).expect("locations are built from URL-safe parts"),
    );
    response
}

/// What a whole-number id in a path names, for the answer when it is not one.
pub trait IdOf {
    const NOUN: &'static str;
}

/// A whole-number id from the path; anything but a whole number is no such thing (404).
pub struct PathId<T>(pub i64, std::marker::PhantomData<T>);

impl<T: IdOf> FromRequestParts<AppState> for PathId<T> {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let raw: String = path_params(parts, state).await?;
        raw.parse()
            .map(|id| PathId(id, std::marker::PhantomData))
            .map_err(|_| ApiError::not_found(format!("no {} with id {raw:?}", T::NOUN)))
    }
}

/// Who the credentials belong to.
#[derive(Serialize, utoipa::ToSchema)]
pub struct Me {
    #[schema(value_type = String)]
    pub username: Username,
    pub display_name: String,
    pub roles: Vec<Role>,
    /// `session`, or `token (read scope)` / `token (write scope)`.
    pub credential: String,
    /// For a browser session, the token scripts send in `X-CSRF-Token`; null for tokens.
    pub csrf_token: Option<String>,
}

/// `GET /api/v1/me`: who the credentials belong to, and for a browser session the CSRF token
/// that scripts must send in `X-CSRF-Token`.
#[utoipa::path(get, path = "/v1/me", operation_id = "getMe", tag = "service",
    responses((status = 200, description = "The caller", body = Me), Unauthenticated, Unavailable))]
pub async fn me(caller: ApiCaller) -> Json<Me> {
    let user = caller.user();
    let (credential, csrf_token) = match &caller.0 {
        Credential::Session(s) => ("session".to_string(), Some(s.csrf_token.clone())),
        Credential::Token { scope, .. } => (format!("token ({} scope)", scope.as_str()), None),
    };
    Json(Me {
        username: user.username.clone(),
        display_name: user.display_name.clone(),
        roles: user.roles.iter().collect(),
        credential,
        csrf_token,
    })
}

/// Unknown paths under `/api` answer in JSON too.
pub async fn not_found() -> ApiError {
    ApiError::not_found("no such endpoint; see /api/v1/metrics")
}

pub async fn method_not_allowed() -> ApiError {
    ApiError::new(
        axum::http::StatusCode::METHOD_NOT_ALLOWED,
        "method_not_allowed",
        "this endpoint does not take that method",
    )
}
