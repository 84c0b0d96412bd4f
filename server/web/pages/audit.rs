//! The auditor's pages: the chain's verification, why a metric's thresholds moved, what was in
//! force at a time, exceptions, and the event record. Each has a JSON twin under /api/v1/audit.

use axum::extract::{Path, State};
use axum::response::Response;
use serde_json::json;

use super::{PageQuery, base_context, page};
use crate::domain::{MetricKey, Timestamp};
use crate::ops::audit;
use crate::ops::metrics::{self as metrics, MetricFilter};
use crate::web::AppState;
use crate::web::api::audit::{AsOfQuery, ExtractQuery};
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

pub async fn index(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    let verification = audit::verify(&state.store, &session.user, None).await?;
    let found = metrics::list(
        &state.store,
        &MetricFilter::default(),
        1,
        metrics::PER_PAGE_MAX,
    )
    .await?;
    let mut ctx = base_context(Some(&session), "Audit", "audit");
    ctx.insert("v", &verification);
    ctx.insert("metrics", &found.metrics);
    Ok(page("audit_index.html", &ctx))
}

pub async fn timeline(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
) -> Result<Response, PageError> {
    let key = MetricKey::parse(&key).map_err(|e| PageError(ApiError::not_found(e.to_string())))?;
    let t = audit::timeline(&state.store, &session.user, key.as_str()).await?;
    let mut ctx = base_context(Some(&session), &format!("Why {} moved", t.name), "audit");
    ctx.insert("t", &t);
    Ok(page("audit_timeline.html", &ctx))
}

fn time_or_error(name: &str, text: &str) -> Result<Option<Timestamp>, String> {
    if text.trim().is_empty() {
        Ok(None)
    } else {
        Timestamp::parse(text)
            .map(Some)
            .map_err(|e| format!("{name}: {e}"))
    }
}

pub async fn as_of(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PageQuery(q): PageQuery<AsOfQuery>,
) -> Result<Response, PageError> {
    let mut ctx = base_context(Some(&session), "What was in force", "audit");
    let parsed = time_or_error("as_of", &q.as_of)
        .and_then(|a| Ok((a, time_or_error("known_at", &q.known_at)?)));
    let key = Some(q.metric.trim()).filter(|k| !k.is_empty());
    match parsed {
        Ok((as_of, known_at)) => {
            let view = audit::as_of(&state.store, &session.user, as_of, known_at, key).await?;
            ctx.insert("view", &view);
            ctx.insert("error", &None::<String>);
        }
        Err(e) => {
            audit::require_auditor(&session.user)?;
            ctx.insert("view", &None::<()>);
            ctx.insert("error", &Some(e));
        }
    }
    ctx.insert(
        "q",
        &json!({"as_of": q.as_of, "known_at": q.known_at, "metric": q.metric}),
    );
    Ok(page("audit_as_of.html", &ctx))
}

pub async fn exceptions(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    let x = audit::exceptions(&state.store, &session.user).await?;
    let mut ctx = base_context(Some(&session), "Exceptions", "audit");
    ctx.insert("x", &x);
    Ok(page("audit_exceptions.html", &ctx))
}

pub async fn events(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PageQuery(q): PageQuery<ExtractQuery>,
) -> Result<Response, PageError> {
    let mut ctx = base_context(Some(&session), "Event record", "audit");
    let filter = q.filter(100).map_err(PageError)?;
    let x = audit::extract(&state.store, &session.user, &filter).await?;
    let query = serde_urlencoded::to_string([
        ("metric", q.metric.as_str()),
        ("actor", q.actor.as_str()),
        ("action", q.action.as_str()),
        ("from", q.from.as_str()),
        ("to", q.to.as_str()),
    ])
    .unwrap_or_default();
    ctx.insert("x", &x);
    ctx.insert("q", &json!({"metric": q.metric, "actor": q.actor, "action": q.action, "from": q.from, "to": q.to}));
    ctx.insert("query", &query);
    ctx.insert(
        "entries",
        &x.entries
            .iter()
            .map(|e| json!({"e": e, "payload": serde_json_canonicalizer::to_string(&e.event.payload).unwrap_or_default()}))
            .collect::<Vec<_>>(),
    );
    Ok(page("audit_events.html", &ctx))
}
