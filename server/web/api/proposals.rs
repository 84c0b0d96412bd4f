//! `/api/v1/proposals` and the workflow endpoints under `/api/v1/metrics/{key}`.

use axum::Json;
use axum::extract::{FromRequest, FromRequestParts, Path, Request, State};
use axum::http::request::Parts;
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Deserialize;
use serde::de::DeserializeOwned;

use super::metrics::KeyPath;
use crate::domain::proposal::{ContentInput, Verdict};
use crate::ops::proposals::{self as flow, RevisionInput};
use crate::store::metrics;
use crate::web::AppState;
use crate::web::auth::ApiCaller;
use crate::web::error::ApiError;
use crate::web::extract::ApiJson;

/// A proposal id from the path; anything but a whole number is no such proposal.
pub struct ProposalId(pub i64);

impl FromRequestParts<AppState> for ProposalId {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let Path(raw) = Path::<String>::from_request_parts(parts, state)
            .await
            .map_err(|e| ApiError::bad_request(format!("bad path: {}", e.body_text())))?;
        raw.parse()
            .map(ProposalId)
            .map_err(|_| ApiError::not_found(format!("no proposal with id {raw:?}")))
    }
}

/// A JSON body that may be left out entirely (then `T::default()`).
pub struct OptionalJson<T>(pub T);

impl<T: DeserializeOwned + Default> FromRequest<AppState> for OptionalJson<T> {
    type Rejection = ApiError;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, ApiError> {
        let empty = req
            .headers()
            .get(header::CONTENT_LENGTH)
            .is_some_and(|v| v == "0")
            || (!req.headers().contains_key(header::CONTENT_TYPE)
                && !req.headers().contains_key(header::TRANSFER_ENCODING)
                && !req.headers().contains_key(header::CONTENT_LENGTH));
        if empty {
            return Ok(OptionalJson(T::default()));
        }
        let ApiJson(value) = ApiJson::<T>::from_request(req, state).await?;
        Ok(OptionalJson(value))
    }
}

async fn proposal_response(
    state: &AppState,
    id: i64,
    status: StatusCode,
) -> Result<Response, ApiError> {
    let (view, _) = flow::get(&state.store, id).await?;
    let mut response = (status, Json(view)).into_response();
    if status == StatusCode::CREATED {
        response.headers_mut().insert(
            header::LOCATION,
            HeaderValue::from_str(&format!("/api/v1/proposals/{id}")).expect("ids are digits"),
        );
    }
    Ok(response)
}

pub async fn create(
    State(state): State<AppState>,
    caller: ApiCaller,
    KeyPath(key): KeyPath,
    ApiJson(input): ApiJson<ContentInput>,
) -> Result<Response, ApiError> {
    let id = flow::propose(&state.store, caller.user(), key.as_str(), &input).await?;
    proposal_response(&state, id, StatusCode::CREATED).await
}

pub async fn show(
    State(state): State<AppState>,
    _caller: ApiCaller,
    ProposalId(id): ProposalId,
) -> Result<Response, ApiError> {
    proposal_response(&state, id, StatusCode::OK).await
}

pub async fn revise(
    State(state): State<AppState>,
    caller: ApiCaller,
    ProposalId(id): ProposalId,
    ApiJson(input): ApiJson<RevisionInput>,
) -> Result<Response, ApiError> {
    flow::revise(&state.store, caller.user(), id, &input).await?;
    proposal_response(&state, id, StatusCode::OK).await
}

pub async fn submit(
    State(state): State<AppState>,
    caller: ApiCaller,
    ProposalId(id): ProposalId,
) -> Result<Response, ApiError> {
    flow::submit(&state.store, caller.user(), id).await?;
    proposal_response(&state, id, StatusCode::OK).await
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct CommentInput {
    body: String,
    #[serde(default)]
    cut: Option<String>,
}

pub async fn comment(
    State(state): State<AppState>,
    caller: ApiCaller,
    ProposalId(id): ProposalId,
    ApiJson(input): ApiJson<CommentInput>,
) -> Result<Response, ApiError> {
    flow::comment(
        &state.store,
        caller.user(),
        id,
        &input.body,
        input.cut.as_deref(),
    )
    .await?;
    proposal_response(&state, id, StatusCode::CREATED).await
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReviewInput {
    verdict: String,
    revision_hash: String,
    #[serde(default)]
    comment: String,
}

pub async fn review(
    State(state): State<AppState>,
    caller: ApiCaller,
    ProposalId(id): ProposalId,
    ApiJson(input): ApiJson<ReviewInput>,
) -> Result<Response, ApiError> {
    let verdict = Verdict::parse(&input.verdict).ok_or_else(|| {
        ApiError::bad_request(format!(
            "unknown verdict {:?}: expected approve or send_back",
            input.verdict
        ))
    })?;
    flow::review(
        &state.store,
        caller.user(),
        id,
        verdict,
        &input.revision_hash,
        &input.comment,
    )
    .await?;
    proposal_response(&state, id, StatusCode::OK).await
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SignoffInput {
    revision_hash: String,
    password: String,
}

pub async fn signoff(
    State(state): State<AppState>,
    caller: ApiCaller,
    ProposalId(id): ProposalId,
    ApiJson(input): ApiJson<SignoffInput>,
) -> Result<Response, ApiError> {
    flow::sign_off(
        &state.store,
        caller.user(),
        id,
        &input.revision_hash,
        &input.password,
    )
    .await?;
    proposal_response(&state, id, StatusCode::OK).await
}

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct ReasonInput {
    #[serde(default)]
    reason: String,
}

pub async fn withdraw(
    State(state): State<AppState>,
    caller: ApiCaller,
    ProposalId(id): ProposalId,
    OptionalJson(input): OptionalJson<ReasonInput>,
) -> Result<Response, ApiError> {
    flow::withdraw(&state.store, caller.user(), id, &input.reason).await?;
    proposal_response(&state, id, StatusCode::OK).await
}

pub async fn reject(
    State(state): State<AppState>,
    caller: ApiCaller,
    ProposalId(id): ProposalId,
    ApiJson(input): ApiJson<ReasonInput>,
) -> Result<Response, ApiError> {
    flow::reject(&state.store, caller.user(), id, &input.reason).await?;
    proposal_response(&state, id, StatusCode::OK).await
}

/// `GET /api/v1/metrics/{key}/history`: every version, oldest first.
pub async fn history(
    State(state): State<AppState>,
    _caller: ApiCaller,
    KeyPath(key): KeyPath,
) -> Result<Response, ApiError> {
    let metric = metrics::get(&state.store, key.as_str()).await?;
    let versions = crate::ops::versions::history(&state.store, &metric).await?;
    Ok(Json(serde_json::json!({"metric": metric.key, "versions": versions})).into_response())
}

/// `GET /api/v1/inbox`: what waits for the caller.
pub async fn inbox(State(state): State<AppState>, caller: ApiCaller) -> Result<Response, ApiError> {
    Ok(Json(flow::inbox(&state.store, caller.user()).await?).into_response())
}
