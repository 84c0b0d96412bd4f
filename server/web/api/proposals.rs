//! `/api/v1/proposals` and the workflow endpoints under `/api/v1/metrics/{key}`.

use axum::Json;
use axum::extract::{FromRequest, Request, State};
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};

use super::metrics::MetricCall;
use super::openapi::{
    BadRequest, Forbidden, NotFound, NotJson, ProposalMovedOn, Throttled, TooLarge,
    Unauthenticated, Unavailable,
};
use super::{Call, IdOf, PathId};
use crate::domain::Problems;
use crate::domain::proposal::{ContentInput, Verdict};
use crate::ops::metrics;
use crate::ops::proposals::{self as flow, Inbox, ProposalView, RevisionInput};
use crate::ops::versions::VersionView;
use crate::web::AppState;
use crate::web::auth::ApiCaller;
use crate::web::error::{ApiError, ErrorBody};
use crate::web::extract::ApiJson;

/// Proposals, as ids in paths name them.
pub struct Proposals;

impl IdOf for Proposals {
    const NOUN: &'static str = "proposal";
}

/// A proposal id from the path; anything but a whole number is no such proposal.
pub type ProposalId = PathId<Proposals>;

/// A call about one proposal: the caller's credential, checked first, and the proposal named
/// in the path.
pub type ProposalCall = Call<ProposalId>;

impl ProposalCall {
    /// The proposal's id.
    fn id(&self) -> i64 {
        self.path.0
    }

    /// Answers with the proposal as the caller now sees it.
    async fn answer(&self, status: StatusCode) -> Result<Response, ApiError> {
        proposal_response(&self.state, &self.caller, self.id(), status).await
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
    caller: &ApiCaller,
    id: i64,
    status: StatusCode,
) -> Result<Response, ApiError> {
    let view = flow::get(&state.store, id, Some(caller.user())).await?.view;
    Ok(if status == StatusCode::CREATED {
        super::located(status, view, &format!("/api/v1/proposals/{id}"))
    } else {
        (status, Json(view)).into_response()
    })
}

/// `POST /api/v1/metrics/{key}/proposals`: proposes thresholds for a metric (its owners).
#[utoipa::path(post, path = "/v1/metrics/{key}/proposals", operation_id = "createProposal", tag = "workflow",
    params(("key" = String, Path, description = "Metric key")),
    request_body = ContentInput,
    responses((status = 201, description = "The proposal, a draft; Location names it", body = ProposalView),
        BadRequest, Unauthenticated, Forbidden, NotFound,
        (status = 409, description = "The metric already has an open proposal", body = ErrorBody),
        TooLarge, NotJson, Unavailable))]
pub async fn create(
    call: MetricCall,
    ApiJson(input): ApiJson<ContentInput>,
) -> Result<Response, ApiError> {
    let id = flow::propose(&call.state.store, call.user(), call.key().as_str(), &input).await?;
    proposal_response(&call.state, &call.caller, id, StatusCode::CREATED).await
}

/// `GET /api/v1/proposals/{id}`.
#[utoipa::path(get, path = "/v1/proposals/{id}", operation_id = "getProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    responses((status = 200, description = "The proposal", body = ProposalView),
        Unauthenticated, NotFound, Unavailable))]
pub async fn show(call: ProposalCall) -> Result<Response, ApiError> {
    call.answer(StatusCode::OK).await
}

/// `PUT /api/v1/proposals/{id}`: a new revision (drafts and proposals sent back).
#[utoipa::path(put, path = "/v1/proposals/{id}", operation_id = "reviseProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    request_body = RevisionInput,
    responses((status = 200, description = "The proposal with its new revision", body = ProposalView),
        BadRequest, Unauthenticated, Forbidden, NotFound, ProposalMovedOn, TooLarge, NotJson, Unavailable))]
pub async fn revise(
    call: ProposalCall,
    ApiJson(input): ApiJson<RevisionInput>,
) -> Result<Response, ApiError> {
    flow::revise(&call.state.store, call.user(), call.id(), &input).await?;
    call.answer(StatusCode::OK).await
}

/// `POST /api/v1/proposals/{id}/submit`: asks for review.
#[utoipa::path(post, path = "/v1/proposals/{id}/submit", operation_id = "submitProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    responses((status = 200, description = "The proposal, in review", body = ProposalView),
        Unauthenticated, Forbidden, NotFound, ProposalMovedOn, Unavailable))]
pub async fn submit(call: ProposalCall) -> Result<Response, ApiError> {
    flow::submit(&call.state.store, call.user(), call.id()).await?;
    call.answer(StatusCode::OK).await
}

#[derive(Deserialize, Default, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct CommentInput {
    body: String,
    /// The cut point the comment is about, by name.
    #[serde(default)]
    cut: Option<String>,
}

/// `POST /api/v1/proposals/{id}/comments`.
#[utoipa::path(post, path = "/v1/proposals/{id}/comments", operation_id = "commentOnProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    request_body = CommentInput,
    responses((status = 201, description = "The proposal with the comment", body = ProposalView),
        BadRequest, Unauthenticated, Forbidden, NotFound, TooLarge, NotJson, Unavailable))]
pub async fn comment(
    call: ProposalCall,
    ApiJson(input): ApiJson<CommentInput>,
) -> Result<Response, ApiError> {
    flow::comment(
        &call.state.store,
        call.user(),
        call.id(),
        &input.body,
        input.cut.as_deref(),
    )
    .await?;
    call.answer(StatusCode::CREATED).await
}

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ReviewInput {
    /// approve or send_back.
    verdict: String,
    /// The hash of the revision reviewed; a stale one answers 409.
    revision_hash: String,
    #[serde(default)]
    comment: String,
}

/// `POST /api/v1/proposals/{id}/reviews`: approve or send back a revision (reviewers).
#[utoipa::path(post, path = "/v1/proposals/{id}/reviews", operation_id = "reviewProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    request_body = ReviewInput,
    responses((status = 200, description = "The proposal after the review", body = ProposalView),
        BadRequest, Unauthenticated, Forbidden, NotFound, ProposalMovedOn, TooLarge, NotJson, Unavailable))]
pub async fn review(
    call: ProposalCall,
    ApiJson(input): ApiJson<ReviewInput>,
) -> Result<Response, ApiError> {
    let verdict = Verdict::parse(&input.verdict).ok_or_else(|| {
        ApiError::invalid(Problems::single(
            "verdict",
            format!(
                "unknown verdict {:?}: expected approve or send_back",
                input.verdict
            ),
        ))
    })?;
    flow::review(
        &call.state.store,
        call.user(),
        call.id(),
        verdict,
        &input.revision_hash,
        &input.comment,
    )
    .await?;
    call.answer(StatusCode::OK).await
}

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SignoffInput {
    /// The hash of the revision signed off.
    revision_hash: String,
    /// The signatory's password, asked again for every sign-off.
    password: String,
}

/// `POST /api/v1/proposals/{id}/signoff`: leadership's sign-off of a worst-level change.
///
/// A wrong password answers 401, and repeated wrong passwords 429.
#[utoipa::path(post, path = "/v1/proposals/{id}/signoff", operation_id = "signOffProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    request_body = SignoffInput,
    responses((status = 200, description = "The proposal after the sign-off", body = ProposalView),
        BadRequest, Unauthenticated, Forbidden, NotFound, ProposalMovedOn, TooLarge, NotJson, Throttled, Unavailable))]
pub async fn signoff(
    call: ProposalCall,
    ApiJson(input): ApiJson<SignoffInput>,
) -> Result<Response, ApiError> {
    flow::sign_off(
        &call.state.store,
        call.user(),
        call.id(),
        &input.revision_hash,
        &input.password,
    )
    .await?;
    call.answer(StatusCode::OK).await
}

#[derive(Deserialize, Default, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ReasonInput {
    #[serde(default)]
    reason: String,
}

/// `POST /api/v1/proposals/{id}/withdraw`: the author withdraws it; the body is optional.
#[utoipa::path(post, path = "/v1/proposals/{id}/withdraw", operation_id = "withdrawProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    request_body(content = Option<ReasonInput>, description = "Optional"),
    responses((status = 200, description = "The proposal, withdrawn", body = ProposalView),
        BadRequest, Unauthenticated, Forbidden, NotFound, ProposalMovedOn, TooLarge, NotJson, Unavailable))]
pub async fn withdraw(
    call: ProposalCall,
    OptionalJson(input): OptionalJson<ReasonInput>,
) -> Result<Response, ApiError> {
    flow::withdraw(&call.state.store, call.user(), call.id(), &input.reason).await?;
    call.answer(StatusCode::OK).await
}

/// `POST /api/v1/proposals/{id}/reject`: a reviewer or signatory rejects it, with a reason.
#[utoipa::path(post, path = "/v1/proposals/{id}/reject", operation_id = "rejectProposal", tag = "workflow",
    params(("id" = i64, Path, description = "Proposal id")),
    request_body = ReasonInput,
    responses((status = 200, description = "The proposal, rejected", body = ProposalView),
        BadRequest, Unauthenticated, Forbidden, NotFound, ProposalMovedOn, TooLarge, NotJson, Unavailable))]
pub async fn reject(
    call: ProposalCall,
    ApiJson(input): ApiJson<ReasonInput>,
) -> Result<Response, ApiError> {
    flow::reject(&call.state.store, call.user(), call.id(), &input.reason).await?;
    call.answer(StatusCode::OK).await
}

/// A metric's versions, oldest first.
#[derive(Serialize, utoipa::ToSchema)]
pub struct MetricHistory {
    /// The metric's key.
    pub metric: String,
    pub versions: Vec<VersionView>,
}

/// `GET /api/v1/metrics/{key}/history`: every version, oldest first.
#[utoipa::path(get, path = "/v1/metrics/{key}/history", operation_id = "getMetricHistory", tag = "workflow",
    params(("key" = String, Path, description = "Metric key")),
    responses((status = 200, description = "Every version, oldest first", body = MetricHistory),
        BadRequest, Unauthenticated, NotFound, Unavailable))]
pub async fn history(call: MetricCall) -> Result<Json<MetricHistory>, ApiError> {
    let metric = metrics::get(&call.state.store, call.key().as_str()).await?;
    let versions = crate::ops::versions::history(&call.state.store, &metric).await?;
    Ok(Json(MetricHistory {
        metric: metric.key.to_string(),
        versions,
    }))
}

/// `GET /api/v1/inbox`: what waits for the caller.
#[utoipa::path(get, path = "/v1/inbox", operation_id = "getInbox", tag = "workflow",
    responses((status = 200, description = "Proposals waiting for the caller, by what they wait for", body = Inbox),
        Unauthenticated, Unavailable))]
pub async fn inbox(
    State(state): State<AppState>,
    caller: ApiCaller,
) -> Result<Json<Inbox>, ApiError> {
    Ok(Json(flow::inbox(&state.store, caller.user()).await?))
}
