//! `POST /api/v1/classify`: the engine over HTTP, so anyone signed in can try a cut set on
//! some values before proposing it. Nothing is stored.

use std::collections::BTreeMap;

use axum::Json;
use serde::{Deserialize, Serialize};

use super::openapi::{BadRequest, Forbidden, NotJson, TooLarge, Unauthenticated, Unavailable};
use crate::domain::Problems;
use crate::domain::thresholds::{CutSet, Direction, Shades};
use crate::engine::{Classification, classify_all};
use crate::web::auth::ApiCaller;
use crate::web::error::ApiError;
use crate::web::extract::ApiJson;

/// Most values one request may classify.
pub const MAX_VALUES: usize = 10_000;

#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ClassifyRequest {
    /// higher_is_better, lower_is_better or target_band.
    direction: String,
    /// The four cut points by name.
    cuts: BTreeMap<String, f64>,
    /// Shades per graded zone, 2 to 5 (default 3).
    #[serde(default)]
    shades: Option<i64>,
    /// At most 10,000; null is a missing value.
    #[schema(max_items = 10000)]
    values: Vec<Option<f64>>,
}

/// The values classified.
#[derive(Serialize, utoipa::ToSchema)]
pub struct ClassifyResponse {
    /// One per value, in order.
    results: Vec<Classification>,
}

#[utoipa::path(post, path = "/v1/classify", operation_id = "classifyValues", tag = "engine",
    request_body = ClassifyRequest,
    responses((status = 200, description = "One classification per value, in order", body = ClassifyResponse),
        BadRequest, Unauthenticated, Forbidden, TooLarge, NotJson, Unavailable))]
pub async fn classify(
    _caller: ApiCaller,
    ApiJson(req): ApiJson<ClassifyRequest>,
) -> Result<Json<ClassifyResponse>, ApiError> {
    let mut p = Problems::default();
    let direction: Option<Direction> = p.check("direction", req.direction.parse());
    let cuts = direction.and_then(|d| {
        p.check(
            "cuts",
            CutSet::from_named(d, req.cuts.iter().map(|(k, v)| (k.as_str(), *v))),
        )
    });
    let shades = p.check(
        "shades",
        req.shades.map_or(Ok(Shades::default()), Shades::new),
    );
    if req.values.len() > MAX_VALUES {
        p.add(
            "values",
            format!(
                "at most {MAX_VALUES} values per request, got {}",
                req.values.len()
            ),
        );
    }
    match (cuts, shades) {
        (Some(cuts), Some(shades)) if p.is_empty() => Ok(Json(ClassifyResponse {
            results: classify_all(&cuts, shades, &req.values),
        })),
        _ => Err(ApiError::invalid(p)),
    }
}
