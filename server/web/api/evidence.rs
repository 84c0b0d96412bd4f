//! `/api/v1/metrics/{key}/observations`, `/evidence` and the backtests: a metric's history as
//! evidence for agreeing its thresholds.

use axum::Json;
use axum::extract::{FromRequestParts, Request, State};
use axum::http::request::Parts;
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};

use super::metrics::MetricCall;
use super::openapi::{BadRequest, NotFound, Unauthenticated, Unavailable};
use super::path_params;
use super::proposals::ProposalId;
use crate::domain::MetricKey;
use crate::domain::observations::Mode;
use crate::domain::observations::Observation;
use crate::ops::evidence::{self, Evidence, ProposalBacktest, VersionBacktest, Window};
use crate::ops::uploads::{self, Format, UploadReport, Uploader};
use crate::web::AppState;
use crate::web::auth::ApiCaller;
use crate::web::error::{ApiError, ErrorBody};
use crate::web::extract::{ApiQuery, read_body, time_param};

/// The window and the critical share a reader chose.
#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct WindowQuery {
    /// First period start to include (RFC 3339 or a bare date). Default: the first stored.
    from: String,
    /// Period starts before this are included (exclusive). Default: everything after `from`.
    to: String,
    /// Share of periods (0 to 1) at critical above which a warning is given. Default 0.1.
    critical_share: Option<f64>,
}

/// The window named by `from` and `to` query parameters.
fn window_of(from: &str, to: &str) -> Result<Window, ApiError> {
    Ok(Window {
        from: time_param("from", from)?,
        to: time_param("to", to)?,
    })
}

impl WindowQuery {
    pub fn window(&self) -> Result<Window, ApiError> {
        window_of(&self.from, &self.to)
    }

    pub fn critical_share(&self) -> Result<f64, ApiError> {
        Ok(evidence::critical_share(self.critical_share)?)
    }
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct UploadQuery {
    /// `merge` (default): add new periods and replace the values of periods already stored;
    /// `replace`: the upload becomes the whole history.
    mode: Option<String>,
}

/// Reads `mode`.
pub fn mode(text: Option<&str>) -> Result<Mode, ApiError> {
    match text.map(str::trim) {
        None | Some("") | Some("merge") => Ok(Mode::Merge),
        Some("replace") => Ok(Mode::Replace),
        Some(other) => Err(ApiError::bad_request(format!(
            "mode {other:?}: expected merge or replace"
        ))),
    }
}

/// `POST /api/v1/metrics/{key}/observations`: uploads history as CSV or JSON.
#[utoipa::path(post, path = "/v1/metrics/{key}/observations", operation_id = "uploadObservations", tag = "evidence",
    params(("key" = String, Path, description = "Metric key"), UploadQuery),
    request_body(description = "RFC 4180 CSV (`text/csv`: period start, value; optional header row) or JSON (`application/json`: {\"observations\": [{\"period_start\", \"value\"}]})", content(
        (String = "text/csv"),
        (Object = "application/json"),
    )),
    responses(
        (status = 200, description = "Stored, and recorded as an event", body = UploadReport),
        (status = 400, description = "Bad lines (each in error.rows with its line or item number and reason; nothing was changed), or a malformed request", body = ErrorBody),
        Unauthenticated,
        (status = 403, description = "Only the metric's owners or an admin may upload; read-scope tokens may not", body = ErrorBody),
        NotFound,
        (status = 413, description = "Larger than the upload limit", body = ErrorBody),
        (status = 415, description = "Neither CSV nor JSON", body = ErrorBody),
        Unavailable,
    ))]
pub async fn upload(
    call: MetricCall,
    ApiQuery(query): ApiQuery<UploadQuery>,
    request: Request,
) -> Result<Json<UploadReport>, ApiError> {
    // Who may comes before what they sent, and before reading it.
    uploads::may_upload_to(
        &call.state.store,
        &Uploader::User(call.user()),
        call.key().as_str(),
    )
    .await?;
    let mode = mode(query.mode.as_deref())?;
    let content_type = request
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_ascii_lowercase();
    let essence = content_type.split(';').next().unwrap_or("").trim();
    let format = match essence {
        "text/csv" => Format::Csv,
        "application/json" => Format::Json,
        _ => {
            return Err(ApiError::new(
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                "unsupported_media_type",
                "send the history as text/csv or application/json",
            ));
        }
    };
    let bytes = read_body(request.into_body(), call.state.config.upload_limit).await?;
    let report = uploads::upload(
        &call.state.store,
        Uploader::User(call.user()),
        call.key().as_str(),
        mode,
        format,
        bytes,
    )
    .await?;
    Ok(Json(report))
}

/// A window of the stored history.
#[derive(Serialize, utoipa::ToSchema)]
pub struct ObservationList {
    /// The metric's key.
    pub metric: String,
    /// Oldest first.
    pub observations: Vec<Observation>,
}

/// `GET /api/v1/metrics/{key}/observations`: the stored history, oldest first.
#[utoipa::path(get, path = "/v1/metrics/{key}/observations", operation_id = "listObservations", tag = "evidence",
    params(("key" = String, Path, description = "Metric key"), WindowQuery),
    responses((status = 200, description = "The history in the window, oldest first", body = ObservationList),
        BadRequest, Unauthenticated, NotFound, Unavailable))]
pub async fn observations(
    call: MetricCall,
    ApiQuery(query): ApiQuery<WindowQuery>,
) -> Result<Json<ObservationList>, ApiError> {
    let window = query.window()?;
    let observations = evidence::list(&call.state.store, call.key().as_str(), window).await?;
    Ok(Json(ObservationList {
        metric: call.key().to_string(),
        observations,
    }))
}

/// `GET /api/v1/metrics/{key}/observations.csv`: the stored history as RFC 4180 CSV, in the
/// format the upload reads.
#[utoipa::path(get, path = "/v1/metrics/{key}/observations.csv", operation_id = "downloadObservations", tag = "evidence",
    params(("key" = String, Path, description = "Metric key"), WindowQuery),
    responses((status = 200, description = "period_start,value rows, oldest first, CRLF line ends", content_type = "text/csv", body = String),
        BadRequest, Unauthenticated, NotFound, Unavailable))]
pub async fn observations_csv(
    call: MetricCall,
    ApiQuery(query): ApiQuery<WindowQuery>,
) -> Result<Response, ApiError> {
    let rows = evidence::list(&call.state.store, call.key().as_str(), query.window()?).await?;
    let body = tokio::task::spawn_blocking(move || crate::domain::observations::to_csv(&rows))
        .await
        .map_err(|_| ApiError::internal())?;
    let disposition = format!("attachment; filename=\"{}-history.csv\"", call.key());
    Ok((
        [
            (
                header::CONTENT_TYPE,
                "text/csv; charset=utf-8; header=present".to_string(),
            ),
            (header::CONTENT_DISPOSITION, disposition),
        ],
        body,
    )
        .into_response())
}

/// `GET /api/v1/metrics/{key}/evidence`: statistics, natural process limits and the version
/// in force's backtest over a window.
#[utoipa::path(get, path = "/v1/metrics/{key}/evidence", operation_id = "getEvidence", tag = "evidence",
    params(("key" = String, Path, description = "Metric key"), WindowQuery),
    responses((status = 200, description = "The evidence over the window", body = Evidence),
        BadRequest, Unauthenticated, NotFound, Unavailable))]
pub async fn show(
    call: MetricCall,
    ApiQuery(query): ApiQuery<WindowQuery>,
) -> Result<Json<Evidence>, ApiError> {
    let evidence = evidence::evidence(
        &call.state.store,
        call.key().as_str(),
        query.window()?,
        query.critical_share()?,
    )
    .await?;
    Ok(Json(evidence))
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct ProposalQuery {
    /// First period start to include (RFC 3339 or a bare date).
    from: String,
    /// Period starts before this are included (exclusive).
    to: String,
    /// Share of periods (0 to 1) at critical above which a warning is given. Default 0.1.
    critical_share: Option<f64>,
    /// The revision to test (default: the latest).
    revision: Option<i64>,
}

/// `GET /api/v1/proposals/{id}/backtest`: a revision of the proposal (the latest unless
/// named) and the version it would replace, over the history.
#[utoipa::path(get, path = "/v1/proposals/{id}/backtest", operation_id = "getProposalBacktest", tag = "evidence",
    params(("id" = i64, Path, description = "Proposal id"), ProposalQuery),
    responses((status = 200, description = "Both backtests and the periods where they differ", body = ProposalBacktest),
        BadRequest, Unauthenticated, NotFound, Unavailable))]
pub async fn proposal(
    State(state): State<AppState>,
    _caller: ApiCaller,
    proposal: ProposalId,
    ApiQuery(query): ApiQuery<ProposalQuery>,
) -> Result<Json<ProposalBacktest>, ApiError> {
    let window = window_of(&query.from, &query.to)?;
    let share = evidence::critical_share(query.critical_share)?;
    let backtest =
        evidence::proposal_backtest(&state.store, proposal.0, query.revision, window, share)
            .await?;
    Ok(Json(backtest))
}

/// A metric key and a version number from the path.
pub struct VersionPath(pub MetricKey, pub i64);

impl FromRequestParts<AppState> for VersionPath {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        let (key, number): (String, String) = path_params(parts, state).await?;
        let key = MetricKey::parse(&key).map_err(|e| ApiError::bad_request(e.to_string()))?;
        let number = number
            .parse()
            .map_err(|_| ApiError::not_found(format!("{key} has no version {number:?}")))?;
        Ok(VersionPath(key, number))
    }
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct VersionQuery {
    /// First period start to include (RFC 3339 or a bare date).
    from: String,
    /// Period starts before this are included (exclusive).
    to: String,
    /// Share of periods (0 to 1) at critical above which a warning is given. Default 0.1.
    critical_share: Option<f64>,
    /// Another version of the metric to compare with (its periods that differ are listed).
    compare: Option<i64>,
}

/// `GET /api/v1/metrics/{key}/versions/{number}/backtest`: any version (in force, past or
/// scheduled) over the history, optionally beside another.
#[utoipa::path(get, path = "/v1/metrics/{key}/versions/{number}/backtest", operation_id = "getVersionBacktest", tag = "evidence",
    params(("key" = String, Path, description = "Metric key"), ("number" = i64, Path, description = "Version number"), VersionQuery),
    responses((status = 200, description = "The backtest, and the comparison when asked", body = VersionBacktest),
        BadRequest, Unauthenticated, NotFound, Unavailable))]
pub async fn version(
    State(state): State<AppState>,
    _caller: ApiCaller,
    VersionPath(key, number): VersionPath,
    ApiQuery(query): ApiQuery<VersionQuery>,
) -> Result<Response, ApiError> {
    let window = window_of(&query.from, &query.to)?;
    let share = evidence::critical_share(query.critical_share)?;
    let backtest = evidence::version_backtest(
        &state.store,
        key.as_str(),
        number,
        query.compare,
        window,
        share,
    )
    .await?;
    Ok(Json(backtest).into_response())
}
