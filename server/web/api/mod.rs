//! The JSON API under `/api/v1`.

pub mod audit;
pub mod classify;
pub mod evidence;
pub mod metrics;
pub mod openapi;
pub mod proposals;
pub mod published;

use axum::Json;
use axum::response::{IntoResponse, Response};
use serde_json::json;

use super::auth::{ApiCaller, Credential};
use super::error::ApiError;
use crate::domain::Role;
use openapi::{Unauthenticated, Unavailable};

/// `GET /api/v1/me`: who the credentials belong to, and for a browser session the CSRF token
/// that scripts must send in `X-CSRF-Token`.
#[utoipa::path(get, path = "/v1/me", operation_id = "getMe", tag = "service",
    responses((status = 200, description = "The caller", body = openapi::Me), Unauthenticated, Unavailable))]
pub async fn me(caller: ApiCaller) -> Response {
    let user = caller.user();
    let (via, csrf) = match &caller.0 {
        Credential::Session(s) => ("session", Some(s.csrf_token.clone())),
        Credential::Token { scope, .. } => (scope.as_str(), None),
    };
    Json(json!({
        "username": user.username,
        "display_name": user.display_name,
        "roles": user.roles.iter().map(Role::as_str).collect::<Vec<_>>(),
        "credential": if via == "session" { "session".to_string() } else { format!("token ({via} scope)") },
        "csrf_token": csrf,
    }))
    .into_response()
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
