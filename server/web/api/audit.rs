//! `/api/v1/audit...`: the auditor's views as JSON, and the event record as JSON and CSV.

use axum::Json;
use axum::extract::State;
use axum::http::{HeaderMap, HeaderName, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Deserialize;

use super::metrics::MetricCall;
use super::openapi::{BadRequest, Forbidden, NotFound, Unauthenticated, Unavailable};
use super::{Call, IdOf, PathId, located};
use crate::domain::MetricKey;
use crate::domain::csv_out::{Cell, CsvOut};
use crate::ops::audit::EventFilter;
use crate::ops::audit::{
    self, AsOf, Exceptions, Extract, FullCheckStarted, FullCheckView, Timeline, Verification,
};
use crate::web::AppState;
use crate::web::auth::ApiCaller;
use crate::web::error::ApiError;
use crate::web::extract::{ApiQuery, time_param};

/// Filters of an extract, as query parameters.
#[derive(Deserialize, Default, Clone, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct ExtractQuery {
    /// Events after this sequence number (for paging).
    pub after: Option<i64>,
    /// Most events to return.
    pub limit: Option<i64>,
    /// Only events about this metric key.
    pub metric: String,
    /// Only events by this username.
    pub actor: String,
    /// Only events with this action (docs/events.md).
    pub action: String,
    /// Only events recorded at or after this time.
    pub from: String,
    /// Only events recorded before this time.
    pub to: String,
}

impl ExtractQuery {
    pub fn filter(&self, default_limit: i64) -> Result<EventFilter, ApiError> {
        let subject = if self.metric.trim().is_empty() {
            String::new()
        } else {
            let key = MetricKey::parse(self.metric.trim())
                .map_err(|e| ApiError::bad_request(format!("metric: {e}")))?;
            crate::domain::metric::subject(key.as_str())
        };
        let limit = self.limit.unwrap_or(default_limit);
        if !(1..=audit::EXTRACT_LIMIT_MAX).contains(&limit) {
            return Err(ApiError::bad_request(format!(
                "limit must be from 1 to {}",
                audit::EXTRACT_LIMIT_MAX
            )));
        }
        Ok(EventFilter {
            after: self.after.unwrap_or(0).max(0),
            limit,
            subject,
            actor: self.actor.trim().to_string(),
            action: self.action.trim().to_string(),
            from: time_param("from", &self.from)?,
            to: time_param("to", &self.to)?,
        })
    }
}

/// `GET /api/v1/audit`: a page of events with a summary for checking completeness.
#[utoipa::path(get, path = "/v1/audit", operation_id = "listEvents", tag = "audit", params(ExtractQuery),
    responses((status = 200, description = "A page of events with a summary for checking completeness", body = Extract),
        BadRequest, Unauthenticated, Forbidden, Unavailable))]
pub async fn events(
    State(state): State<AppState>,
    caller: ApiCaller,
    ApiQuery(q): ApiQuery<ExtractQuery>,
) -> Result<Json<Extract>, ApiError> {
    let filter = q.filter(1_000)?;
    Ok(Json(
        audit::extract(&state.store, caller.user(), &filter).await?,
    ))
}

/// The extract's summary in response headers (for the CSV, whose body holds only records).
fn summary_headers(x: &Extract) -> HeaderMap {
    let mut h = HeaderMap::new();
    let mut put = |name: &'static str, value: String| {
        h.insert(
            HeaderName::from_static(name),
            HeaderValue::from_str(&value).expect("numbers and hex"),
        );
    };
    let s = &x.summary;
    put("cutpoints-audit-count", s.count.to_string());
    put(
        "cutpoints-audit-first-seq",
        s.first_seq.map(|v| v.to_string()).unwrap_or_default(),
    );
    put(
        "cutpoints-audit-last-seq",
        s.last_seq.map(|v| v.to_string()).unwrap_or_default(),
    );
    put(
        "cutpoints-audit-head",
        format!("{}:{}", s.head_seq, s.head_hash),
    );
    if let Some(next) = s.next_after {
        put("cutpoints-audit-next-after", next.to_string());
    }
    h
}

/// The extract as RFC 4180 CSV: a header row, one record per event (CRLF line ends, fields
/// with commas, quotes or line breaks quoted), and a last record summarising the extract. Text
/// cells are safe for spreadsheets (`domain::csv_out`; docs/audit-chain.md says how a verifier
/// undoes it).
pub fn extract_csv(x: &Extract) -> Vec<u8> {
    let header = [
        "seq",
        "at",
        "actor",
        "action",
        "subject",
        "payload",
        "prev_hash",
        "hash",
    ];
    let mut out = CsvOut::new(&header, 400 * (x.entries.len() + 2));
    for e in &x.entries {
        let payload = serde_json_canonicalizer::to_string(&e.event.payload).expect("plain JSON");
        out.row(&[
            Cell::Number(e.event.seq.to_string()),
            Cell::Time(e.event.at),
            Cell::Text(&e.event.actor),
            Cell::Text(&e.event.action),
            Cell::Text(&e.event.subject),
            Cell::Text(&payload),
            Cell::Text(&e.prev_hash),
            Cell::Text(&e.hash),
        ]);
    }
    let s = &x.summary;
    let summary = format!(
        "count={} first_seq={} last_seq={} head_seq={} head_hash={}",
        s.count,
        s.first_seq.map(|v| v.to_string()).unwrap_or_default(),
        s.last_seq.map(|v| v.to_string()).unwrap_or_default(),
        s.head_seq,
        s.head_hash
    );
    let blank = || Cell::Text("");
    out.row(&[
        Cell::Text("summary"),
        blank(),
        blank(),
        blank(),
        blank(),
        Cell::Text(&summary),
        blank(),
        blank(),
    ]);
    out.finish()
}

/// `GET /api/v1/audit.csv`.
#[utoipa::path(get, path = "/v1/audit.csv", operation_id = "listEventsCsv", tag = "audit", params(ExtractQuery),
    responses((status = 200, description = "The events as RFC 4180 CSV; the summary in response headers", body = String, content_type = "text/csv"),
        BadRequest, Unauthenticated, Forbidden, Unavailable))]
pub async fn events_csv(
    State(state): State<AppState>,
    caller: ApiCaller,
    ApiQuery(q): ApiQuery<ExtractQuery>,
) -> Result<Response, ApiError> {
    let filter = q.filter(audit::EXTRACT_LIMIT_MAX)?;
    let x = audit::extract(&state.store, caller.user(), &filter).await?;
    let mut headers = summary_headers(&x);
    headers.insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("text/csv; charset=utf-8; header=present"),
    );
    headers.insert(
        header::CONTENT_DISPOSITION,
        HeaderValue::from_static("attachment; filename=\"cutpoints-events.csv\""),
    );
    Ok((headers, extract_csv(&x)).into_response())
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct VerifyQuery {
    /// A head kept from earlier, SEQ:HASH, which the record must still contain.
    pub known_head: String,
}

fn known_head(text: &str) -> Result<Option<(i64, String)>, ApiError> {
    if text.trim().is_empty() {
        return Ok(None);
    }
    crate::audit::parse_known_head(text)
        .map(Some)
        .map_err(|e| ApiError::bad_request(format!("known_head {e}")))
}

/// `GET /api/v1/audit/verify[?known_head=SEQ:HASH]`.
#[utoipa::path(get, path = "/v1/audit/verify", operation_id = "verifyAuditChain", tag = "audit", params(VerifyQuery),
    responses((status = 200, description = "Whether the chain holds, and the first broken event if not", body = Verification),
        BadRequest, Unauthenticated, Forbidden, Unavailable))]
pub async fn verify(
    State(state): State<AppState>,
    caller: ApiCaller,
    ApiQuery(q): ApiQuery<VerifyQuery>,
) -> Result<Json<Verification>, ApiError> {
    let known = known_head(&q.known_head)?;
    Ok(Json(
        audit::verify(&state.store, caller.user(), known).await?,
    ))
}

/// `POST /api/v1/audit/full-checks`: starts the full check in the background.
#[utoipa::path(post, path = "/v1/audit/full-checks", operation_id = "startFullCheck", tag = "audit",
    responses((status = 202, description = "The full check started (or was already running); follow Location for its progress and finding", body = FullCheckStarted),
        Unauthenticated, Forbidden, Unavailable))]
pub async fn start_full_check(
    State(state): State<AppState>,
    caller: ApiCaller,
) -> Result<Response, ApiError> {
    let started = audit::start_full_check(&state.store, caller.user()).await?;
    let location = format!("/api/v1/audit/full-checks/{}", started.id);
    Ok(located(StatusCode::ACCEPTED, started, &location))
}

/// Full checks, as ids in paths name them.
pub struct FullChecks;

impl IdOf for FullChecks {
    const NOUN: &'static str = "full check";
}

/// `GET /api/v1/audit/full-checks/{id}`: a full check's progress, then its finding.
#[utoipa::path(get, path = "/v1/audit/full-checks/{id}", operation_id = "getFullCheck", tag = "audit",
    params(("id" = i64, Path, description = "Full check id")),
    responses((status = 200, description = "How far the full check got, and what it found once finished", body = FullCheckView),
        Unauthenticated, Forbidden, NotFound, Unavailable))]
pub async fn full_check(call: Call<PathId<FullChecks>>) -> Result<Json<FullCheckView>, ApiError> {
    Ok(Json(
        audit::full_check(&call.state.store, call.user(), call.path.0).await?,
    ))
}

/// `GET /api/v1/audit/exceptions`.
#[utoipa::path(get, path = "/v1/audit/exceptions", operation_id = "listExceptions", tag = "audit",
    responses((status = 200, description = "Versions approved without a sign-off, refusals and other exceptions", body = Exceptions),
        Unauthenticated, Forbidden, Unavailable))]
pub async fn exceptions(
    State(state): State<AppState>,
    caller: ApiCaller,
) -> Result<Json<Exceptions>, ApiError> {
    Ok(Json(
        audit::exceptions(&state.store, &state.exceptions, caller.user()).await?,
    ))
}

/// `GET /api/v1/audit/metrics/{key}`: why did it move.
#[utoipa::path(get, path = "/v1/audit/metrics/{key}", operation_id = "getMetricTimeline", tag = "audit",
    params(("key" = String, Path, description = "Metric key")),
    responses((status = 200, description = "Every change to the metric's thresholds, with who, when and why", body = Timeline),
        BadRequest, Unauthenticated, Forbidden, NotFound, Unavailable))]
pub async fn timeline(call: MetricCall) -> Result<Json<Timeline>, ApiError> {
    Ok(Json(
        audit::timeline(&call.state.store, call.user(), call.key().as_str()).await?,
    ))
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct AsOfQuery {
    /// Valid time (RFC 3339 or a bare date). Default now.
    pub as_of: String,
    /// Transaction time. Default now.
    pub known_at: String,
    /// Only this metric key.
    pub metric: String,
}

/// `GET /api/v1/audit/as-of?as_of=T&known_at=R[&metric=KEY]`.
#[utoipa::path(get, path = "/v1/audit/as-of", operation_id = "getVersionsAsOf", tag = "audit", params(AsOfQuery),
    responses((status = 200, description = "The versions in force at a valid time, as known at a transaction time", body = AsOf),
        BadRequest, Unauthenticated, Forbidden, NotFound, Unavailable))]
pub async fn as_of(
    State(state): State<AppState>,
    caller: ApiCaller,
    ApiQuery(q): ApiQuery<AsOfQuery>,
) -> Result<Json<AsOf>, ApiError> {
    let as_of = time_param("as_of", &q.as_of)?;
    let known_at = time_param("known_at", &q.known_at)?;
    let key = if q.metric.trim().is_empty() {
        None
    } else {
        Some(MetricKey::parse(q.metric.trim()).map_err(|e| ApiError::bad_request(e.to_string()))?)
    };
    let view = audit::as_of(
        &state.store,
        caller.user(),
        as_of,
        known_at,
        key.as_ref().map(|k| k.as_str()),
    )
    .await?;
    Ok(Json(view))
}
