//! `/api/v1/metrics`: the register.

use axum::Json;
use axum::extract::{FromRequestParts, State};
use axum::http::StatusCode;
use axum::http::request::Parts;
use axum::response::Response;
use serde::{Deserialize, Serialize};

use super::openapi::{
    BadRequest, Forbidden, NotFound, NotJson, TooLarge, Unauthenticated, Unavailable,
};
use super::{Call, path_params};
use crate::domain::proposal::ProposalState;
use crate::domain::{Metric, MetricKey};
use crate::ops;
use crate::ops::metrics::{self as metrics, MetricFilter};
use crate::ops::metrics::{MetricEdit, NewMetric};
use crate::ops::versions::VersionView;
use crate::web::AppState;
use crate::web::auth::ApiCaller;
use crate::web::error::{ApiError, ErrorBody};
use crate::web::extract::{ApiJson, ApiQuery};

/// A metric key taken from the path, validated (400 for a malformed key, in JSON).
pub struct KeyPath(pub MetricKey);

impl FromRequestParts<AppState> for KeyPath {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let raw: String = path_params(parts, state).await?;
        MetricKey::parse(&raw)
            .map(KeyPath)
            .map_err(|e| ApiError::bad_request(e.to_string()))
    }
}

/// A call about one metric: the caller's credential, checked first, and the metric key in the
/// path.
pub type MetricCall = Call<KeyPath>;

impl MetricCall {
    /// The metric's key.
    pub fn key(&self) -> &MetricKey {
        &self.path.0
    }
}

/// `POST /api/v1/metrics`: adds a metric to the register (admins and owners).
#[utoipa::path(post, path = "/v1/metrics", operation_id = "createMetric", tag = "register",
    request_body = NewMetric,
    responses(
        (status = 201, description = "Created; Location names it", body = Metric),
        BadRequest, Unauthenticated, Forbidden,
        (status = 409, description = "A metric with this key exists", body = ErrorBody),
        TooLarge, NotJson, Unavailable,
    ))]
pub async fn create(
    State(state): State<AppState>,
    caller: ApiCaller,
    ApiJson(input): ApiJson<NewMetric>,
) -> Result<Response, ApiError> {
    let metric = ops::metrics::create(&state.store, caller.user(), &input).await?;
    let location = format!("/api/v1/metrics/{}", metric.key);
    Ok(super::located(StatusCode::CREATED, metric, &location))
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct ListQuery {
    /// Text to find in key, name or description.
    q: String,
    /// Only metrics with this tag.
    tag: String,
    /// Only metrics this username owns.
    owner: String,
    /// Page number, from 1.
    page: Option<i64>,
    /// Metrics per page (default 50).
    per_page: Option<i64>,
}

/// `GET /api/v1/metrics`: the register, a page at a time.
#[utoipa::path(get, path = "/v1/metrics", operation_id = "listMetrics", tag = "register", params(ListQuery),
    responses((status = 200, description = "A page of the register", body = metrics::MetricPage),
        BadRequest, Unauthenticated, Unavailable))]
pub async fn list(
    State(state): State<AppState>,
    _caller: ApiCaller,
    ApiQuery(query): ApiQuery<ListQuery>,
) -> Result<Json<metrics::MetricPage>, ApiError> {
    let page = query.page.unwrap_or(1);
    let per_page = query.per_page.unwrap_or(metrics::PER_PAGE_DEFAULT);
    if page < 1 {
        return Err(ApiError::bad_request("page counts from 1"));
    }
    if !(1..=metrics::PER_PAGE_MAX).contains(&per_page) {
        return Err(ApiError::bad_request(format!(
            "per_page must be from 1 to {}",
            metrics::PER_PAGE_MAX
        )));
    }
    let filter = MetricFilter {
        text: query.q,
        tag: query.tag,
        owner: query.owner,
    };
    Ok(Json(
        metrics::list(&state.store, &filter, page, per_page).await?,
    ))
}

/// A metric with the version in force, the scheduled one and the open proposal, if any.
#[derive(Serialize, utoipa::ToSchema)]
pub struct MetricDetail {
    #[serde(flatten)]
    pub metric: Metric,
    /// The version in force now, if any.
    pub version_in_force: Option<VersionView>,
    /// The next version, approved with a later effective time.
    pub scheduled_version: Option<VersionView>,
    pub open_proposal: Option<OpenProposal>,
}

/// The metric's open proposal, and where to read it.
#[derive(Serialize, utoipa::ToSchema)]
pub struct OpenProposal {
    pub id: i64,
    pub state: ProposalState,
    /// `/api/v1/proposals/{id}`.
    pub url: String,
}

/// `GET /api/v1/metrics/{key}`: a metric with its version in force.
#[utoipa::path(get, path = "/v1/metrics/{key}", operation_id = "getMetric", tag = "register",
    params(("key" = String, Path, description = "Metric key")),
    responses((status = 200, description = "The metric", body = MetricDetail),
        BadRequest, Unauthenticated, NotFound, Unavailable))]
pub async fn show(call: MetricCall) -> Result<Json<MetricDetail>, ApiError> {
    let metric = metrics::get(&call.state.store, call.key().as_str()).await?;
    let thresholds = crate::ops::versions::thresholds(&call.state.store, &metric).await?;
    let (in_force, scheduled) = crate::ops::versions::current(&thresholds.history);
    let open_proposal = thresholds.open_proposal().map(|p| OpenProposal {
        id: p.id,
        state: p.state,
        url: format!("/api/v1/proposals/{}", p.id),
    });
    Ok(Json(MetricDetail {
        version_in_force: in_force.cloned(),
        scheduled_version: scheduled.cloned(),
        open_proposal,
        metric,
    }))
}

/// `PATCH /api/v1/metrics/{key}`: changes descriptive fields; absent fields stay.
#[utoipa::path(patch, path = "/v1/metrics/{key}", operation_id = "editMetric", tag = "register",
    params(("key" = String, Path, description = "Metric key")),
    request_body = MetricEdit,
    responses((status = 200, description = "The metric as changed", body = Metric),
        BadRequest, Unauthenticated, Forbidden, NotFound, TooLarge, NotJson, Unavailable))]
pub async fn edit(
    call: MetricCall,
    ApiJson(input): ApiJson<MetricEdit>,
) -> Result<Json<Metric>, ApiError> {
    Ok(Json(
        ops::metrics::edit(&call.state.store, call.user(), call.key().as_str(), &input).await?,
    ))
}
