//! `/api/v1/published...`, `/api/v1/keys` and `/api/v1/evaluate`: the approved set for
//! dashboards and pipelines, byte for byte the same for the same request, with strong ETags
//! and `If-None-Match` (RFC 9110 §13.1.2).

use std::sync::Arc;

use axum::Json;
use axum::extract::{FromRequestParts, Path, State};
use axum::http::request::Parts;
use axum::http::{HeaderMap, HeaderName, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};

use super::openapi::{
    BadRequest, Forbidden, MetricSetAnswers, NotJson, SetAnswers, SetCsvAnswers, Unauthenticated,
    Unavailable,
};
use crate::domain::{MetricKey, Timestamp};
use crate::engine::classify;
use crate::ops::publication::Change;
use crate::publish::document::Rendered;
use crate::publish::signing::PublicKey;
use crate::web::AppState;
use crate::web::auth::ApiCaller;
use crate::web::error::{ApiError, ErrorBody, ErrorDetail};
use crate::web::extract::{ApiJson, ApiQuery, time_param};

/// A reader of the published set: anyone signed in or holding a token (any scope), or anyone
/// at all when the instance serves with `--public-read`.
pub struct Reader;

impl FromRequestParts<AppState> for Reader {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        if state.config.public_read {
            return Ok(Reader);
        }
        ApiCaller::from_request_parts(parts, state)
            .await
            .map(|_| Reader)
    }
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct TimesQuery {
    /// Valid time: the set in force then (RFC 3339 or a bare date). Default now.
    as_of: String,
    /// Transaction time: as the record stood then, before later corrections. Default now.
    known_at: String,
}

impl TimesQuery {
    fn times(&self) -> Result<(Option<Timestamp>, Option<Timestamp>), ApiError> {
        Ok((
            time_param("as_of", &self.as_of)?,
            time_param("known_at", &self.known_at)?,
        ))
    }
}

/// Does `If-None-Match` match `etag`? RFC 9110 §13.1.2: `*` matches any current
/// representation; otherwise a comma-separated list of entity tags, compared weakly (a `W/`
/// prefix is ignored on either side).
pub fn if_none_match(header_value: &str, etag: &str) -> bool {
    let ours = etag.trim_start_matches("W/");
    let value = header_value.trim();
    if value == "*" {
        return true;
    }
    let mut rest = value;
    loop {
        rest = rest.trim_start_matches(|c: char| c == ',' || c.is_whitespace());
        if rest.is_empty() {
            return false;
        }
        let candidate = rest.strip_prefix("W/").unwrap_or(rest);
        let Some(body) = candidate.strip_prefix('"') else {
            return false;
        };
        let Some(end) = body.find('"') else {
            return false;
        };
        let tag = &candidate[..end + 2];
        if tag == ours {
            return true;
        }
        rest = &body[end + 1..];
    }
}

fn header_value(text: &str) -> HeaderValue {
    HeaderValue::from_str(text).expect("hex, base64 and digits")
}

/// Sends one rendering of a set, or 304 when the client's copy is current.
fn send(request: &HeaderMap, r: &Rendered, csv: bool) -> Response {
    let (etag, content_digest) = if csv {
        (&r.csv_etag, &r.csv_content_digest)
    } else {
        (&r.json_etag, &r.json_content_digest)
    };
    let mut headers = HeaderMap::new();
    headers.insert(header::ETAG, header_value(etag));
    headers.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    headers.insert(
        HeaderName::from_static("cutpoints-set-revision"),
        HeaderValue::from(r.set_revision),
    );
    headers.insert(
        HeaderName::from_static("cutpoints-set-digest"),
        header_value(&r.digest),
    );
    let matched = request
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .any(|v| if_none_match(v, etag));
    if matched {
        return (StatusCode::NOT_MODIFIED, headers).into_response();
    }
    headers.insert(
        HeaderName::from_static("content-digest"),
        header_value(content_digest),
    );
    let (content_type, body) = if csv {
        ("text/csv; charset=utf-8; header=present", r.csv.clone())
    } else {
        ("application/json", r.json.clone())
    };
    headers.insert(header::CONTENT_TYPE, HeaderValue::from_static(content_type));
    (headers, body).into_response()
}

/// A reader's request for a rendering of a set: the entity tags the reader holds and the
/// times asked for. The reader is checked first.
pub struct SetRequest {
    state: AppState,
    headers: HeaderMap,
    times: TimesQuery,
}

impl FromRequestParts<AppState> for SetRequest {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, ApiError> {
        Reader::from_request_parts(parts, state).await?;
        let ApiQuery(times) = ApiQuery::<TimesQuery>::from_request_parts(parts, state).await?;
        Ok(SetRequest {
            state: state.clone(),
            headers: parts.headers.clone(),
            times,
        })
    }
}

impl SetRequest {
    /// The set in force at the times asked for, narrowed to the metric `only` when given.
    async fn rendered(&self, only: Option<&str>) -> Result<Arc<Rendered>, ApiError> {
        let (as_of, known_at) = self.times.times()?;
        let (publisher, store) = (&self.state.publisher, &self.state.store);
        Ok(crate::ops::publication::at(publisher, store, as_of, known_at, only).await?)
    }

    /// Answers with one rendering of `set`, or 304 when the reader's copy is current.
    fn send(&self, set: &Rendered, csv: bool) -> Response {
        send(&self.headers, set, csv)
    }
}

/// `GET /api/v1/published[?as_of=T&known_at=R]`.
#[utoipa::path(get, path = "/v1/published", operation_id = "getPublishedSet", tag = "published",
    params(TimesQuery, ("If-None-Match" = Option<String>, Header, description = "Entity tags held (RFC 9110 §13.1.2)")),
    responses(
        SetAnswers,
        BadRequest, Unauthenticated, Unavailable,
    ))]
pub async fn set(request: SetRequest) -> Result<Response, ApiError> {
    let r = request.rendered(None).await?;
    Ok(request.send(&r, false))
}

/// `GET /api/v1/published.csv`.
#[utoipa::path(get, path = "/v1/published.csv", operation_id = "getPublishedSetCsv", tag = "published",
    params(TimesQuery, ("If-None-Match" = Option<String>, Header, description = "Entity tags held (RFC 9110 §13.1.2)")),
    responses(
        SetCsvAnswers,
        BadRequest, Unauthenticated, Unavailable,
    ))]
pub async fn set_csv(request: SetRequest) -> Result<Response, ApiError> {
    let r = request.rendered(None).await?;
    Ok(request.send(&r, true))
}

/// `GET /api/v1/published/{key}`: the set narrowed to one metric (its own digest and
/// signature); 404 when no version of it is in force.
#[utoipa::path(get, path = "/v1/published/{key}", operation_id = "getPublishedMetric", tag = "published",
    params(("key" = String, Path, description = "Metric key"), TimesQuery, ("If-None-Match" = Option<String>, Header, description = "Entity tags held (RFC 9110 §13.1.2)")),
    responses(
        MetricSetAnswers,
        BadRequest, Unauthenticated,
        (status = 404, description = "No such metric, or no version of it in force then", body = ErrorBody),
        Unavailable,
    ))]
pub async fn one(request: SetRequest, Path(key): Path<String>) -> Result<Response, ApiError> {
    let key = MetricKey::parse(&key).map_err(|e| ApiError::bad_request(e.to_string()))?;
    crate::ops::metrics::get(&request.state.store, key.as_str()).await?;
    let r = request.rendered(Some(key.as_str())).await?;
    if r.document["set"].get(key.as_str()).is_none() {
        return Err(ApiError::not_found(format!(
            "no version of {key} is in force at the requested time"
        )));
    }
    Ok(request.send(&r, false))
}

#[derive(Deserialize, Default, utoipa::IntoParams)]
#[serde(default, deny_unknown_fields)]
#[into_params(parameter_in = Query)]
pub struct ChangesQuery {
    /// The earlier set revision.
    #[param(required = true)]
    from: Option<i64>,
    /// The later set revision, at most the current one.
    #[param(required = true)]
    to: Option<i64>,
}

/// `GET /api/v1/published/changes?from=REV&to=REV`: which metrics moved between two set
/// revisions, with their old and new cuts.
#[utoipa::path(get, path = "/v1/published/changes", operation_id = "getPublishedChanges", tag = "published",
    params(ChangesQuery),
    responses((status = 200, description = "The metrics whose version changed, with old and new cuts", body = ChangeList),
        BadRequest, Unauthenticated, Unavailable))]
pub async fn changes(
    State(state): State<AppState>,
    _reader: Reader,
    ApiQuery(q): ApiQuery<ChangesQuery>,
) -> Result<Json<ChangeList>, ApiError> {
    let current = crate::ops::publication::current(&state.publisher, &state.store)
        .await?
        .set_revision;
    let (Some(from), Some(to)) = (q.from, q.to) else {
        return Err(ApiError::bad_request(
            "give both from and to (set revisions)",
        ));
    };
    if from < 0 || to < from || to > current {
        return Err(ApiError::bad_request(format!(
            "need 0 <= from <= to <= {current} (the current set revision), got from={from} to={to}"
        )));
    }
    let changes = crate::ops::publication::changes(&state.store, from, to).await?;
    Ok(Json(ChangeList { from, to, changes }))
}

/// The metrics that moved between two set revisions.
#[derive(Serialize, utoipa::ToSchema)]
pub struct ChangeList {
    /// The earlier set revision.
    pub from: i64,
    /// The later set revision.
    pub to: i64,
    /// In metric key order.
    pub changes: Vec<Change>,
}

/// Every signing key, current and retired.
#[derive(Serialize, utoipa::ToSchema)]
pub struct KeyList {
    pub keys: Vec<PublicKey>,
}

/// `GET /api/v1/keys`: the public keys, current and retired, to verify signatures with.
#[utoipa::path(get, path = "/v1/keys", operation_id = "listSigningKeys", tag = "published",
    responses((status = 200, description = "Every signing key, current and retired", body = KeyList),
        Unauthenticated, Unavailable))]
pub async fn keys(
    State(state): State<AppState>,
    _reader: Reader,
) -> Result<Json<KeyList>, ApiError> {
    let keys = crate::ops::publication::keys(&state.store).await?;
    Ok(Json(KeyList { keys }))
}

/// Most values one evaluate request may carry.
pub const EVALUATE_MAX: usize = 10_000;

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct EvaluateItem {
    /// Metric key.
    metric: String,
    /// Required, but may be null (a missing value classifies as no_data).
    #[serde(deserialize_with = "number_or_null")]
    #[schema(required = true)]
    value: Option<f64>,
}

fn number_or_null<'de, D: serde::Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
    Option::<f64>::deserialize(d)
}

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct EvaluateRequest {
    /// At most 10,000.
    #[schema(max_items = 10000)]
    values: Vec<EvaluateItem>,
    /// Classify against the set in force then (RFC 3339 or a bare date). Default now.
    #[serde(default)]
    as_of: Option<String>,
}

/// One value's answer from evaluate: a classification, or an error for this item only.
#[derive(Serialize, utoipa::ToSchema)]
#[serde(untagged)]
pub enum EvaluateResult {
    Classified {
        /// Metric key.
        metric: String,
        #[serde(flatten)]
        result: crate::engine::Classification,
    },
    Failed {
        /// Metric key.
        metric: String,
        value: Option<f64>,
        /// Code `unknown_metric` or `no_version`.
        error: ErrorDetail,
    },
}

/// The values evaluated against one published set.
#[derive(Serialize, utoipa::ToSchema)]
pub struct EvaluateResponse {
    /// The set revision the values were classified against.
    pub set_revision: i64,
    /// That set's `meta.digest`.
    pub digest: String,
    /// Present when the request named one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub as_of: Option<Timestamp>,
    /// One per value, in order.
    pub results: Vec<EvaluateResult>,
}

/// `POST /api/v1/evaluate`: classifies values against the set in force (at `as_of`), each
/// metric's own cut points; an unknown metric or one without a version in force is an error
/// for that item only.
#[utoipa::path(post, path = "/v1/evaluate", operation_id = "evaluateValues", tag = "published",
    request_body = EvaluateRequest,
    responses(
        (status = 200, description = "One result per value, in order", body = EvaluateResponse),
        BadRequest, Unauthenticated, Forbidden,
        (status = 413, description = "More than 10,000 values, or a body over the limit", body = ErrorBody),
        NotJson, Unavailable,
    ))]
pub async fn evaluate(
    State(state): State<AppState>,
    _reader: Reader,
    ApiJson(req): ApiJson<EvaluateRequest>,
) -> Result<Json<EvaluateResponse>, ApiError> {
    if req.values.len() > EVALUATE_MAX {
        return Err(ApiError::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "too_large",
            format!(
                "at most {EVALUATE_MAX} values per request, got {}",
                req.values.len()
            ),
        ));
    }
    let as_of = time_param("as_of", req.as_of.as_deref().unwrap_or(""))?;
    let r = crate::ops::publication::at(&state.publisher, &state.store, as_of, None, None).await?;
    // Keys of the register, read once and only when some item has no version in force.
    let mut register: Option<std::collections::HashSet<String>> = None;
    let mut results = Vec::with_capacity(req.values.len());
    for item in req.values {
        let found = r.cut_sets.get(&item.metric).copied();
        results.push(match found {
            Some((cuts, shades)) => EvaluateResult::Classified {
                result: classify(&cuts, shades, item.value),
                metric: item.metric,
            },
            None => {
                if register.is_none() {
                    register = Some(crate::ops::publication::metric_keys(&state.store).await?);
                }
                let known = register.as_ref().is_some_and(|r| r.contains(&item.metric));
                let (code, message) = if known {
                    (
                        "no_version",
                        format!(
                            "no version of {} is in force at the requested time",
                            item.metric
                        ),
                    )
                } else {
                    (
                        "unknown_metric",
                        format!("no metric with key {:?}", item.metric),
                    )
                };
                EvaluateResult::Failed {
                    metric: item.metric,
                    value: item.value,
                    error: ErrorDetail::new(code, message),
                }
            }
        });
    }
    Ok(Json(EvaluateResponse {
        set_revision: r.set_revision,
        digest: r.digest.clone(),
        as_of,
        results,
    }))
}
