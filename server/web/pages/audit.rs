//! The auditor's pages: the chain's verification, why a metric's thresholds moved, what was in
//! force at a time, exceptions, and the event record. Each has a JSON twin under /api/v1/audit.

use axum::extract::{Path, State};
use axum::response::{IntoResponse, Redirect, Response};
use serde::Serialize;

use super::{Common, PageData, PageQuery, page, parse_key};
use crate::domain::{Metric, Timestamp};
use crate::ops::audit::{self, AsOf, Exceptions, Extract, Timeline, Verification};
use crate::ops::metrics::{self as metrics, MetricFilter};
use crate::web::AppState;
use crate::web::api::audit::{AsOfQuery, ExtractQuery};
use crate::web::auth::PageSession;
use crate::web::error::PageError;

/// The audit overview: the chain's verification and a link to each metric's timeline.
#[derive(Debug, Serialize)]
pub struct AuditIndex<'a> {
    pub v: &'a Verification,
    pub metrics: &'a [Metric],
}

impl PageData for AuditIndex<'_> {
    const TEMPLATE: &'static str = "audit_index.html";
}

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
    let data = AuditIndex {
        v: &verification,
        metrics: &found.metrics,
    };
    Ok(page(&Common::new(Some(&session), "Audit", "audit"), &data))
}

/// Starts the full check in the background and goes back to the overview, which shows its
/// progress.
pub async fn start_full_check(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    audit::start_full_check(&state.store, &session.user).await?;
    Ok(Redirect::to("/audit#verify-heading").into_response())
}

/// Why a metric's thresholds moved: its versions with the discussion behind each.
#[derive(Debug, Serialize)]
pub struct TimelinePage<'a> {
    pub t: &'a Timeline,
}

impl PageData for TimelinePage<'_> {
    const TEMPLATE: &'static str = "audit_timeline.html";
}

pub async fn timeline(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
) -> Result<Response, PageError> {
    let key = parse_key(&key)?;
    let t = audit::timeline(&state.store, &session.user, key.as_str()).await?;
    let common = Common::new(Some(&session), format!("Why {} moved", t.name), "audit");
    Ok(page(&common, &TimelinePage { t: &t }))
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

/// The fields of the as-of form, as typed.
#[derive(Debug, Serialize)]
pub struct AsOfFields<'a> {
    pub as_of: &'a str,
    pub known_at: &'a str,
    pub metric: &'a str,
}

/// What was in force at a time, as recorded by a time; or why the times could not be read.
#[derive(Debug, Serialize)]
pub struct AsOfPage<'a> {
    pub view: Option<&'a AsOf>,
    pub error: Option<String>,
    pub q: AsOfFields<'a>,
}

impl PageData for AsOfPage<'_> {
    const TEMPLATE: &'static str = "audit_as_of.html";
}

pub async fn as_of(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PageQuery(q): PageQuery<AsOfQuery>,
) -> Result<Response, PageError> {
    let parsed = time_or_error("as_of", &q.as_of)
        .and_then(|a| Ok((a, time_or_error("known_at", &q.known_at)?)));
    let key = Some(q.metric.trim()).filter(|k| !k.is_empty());
    let (view, error) = match parsed {
        Ok((as_of, known_at)) => (
            Some(audit::as_of(&state.store, &session.user, as_of, known_at, key).await?),
            None,
        ),
        Err(e) => {
            audit::require_auditor(&session.user)?;
            (None, Some(e))
        }
    };
    let data = AsOfPage {
        view: view.as_ref(),
        error,
        q: AsOfFields {
            as_of: &q.as_of,
            known_at: &q.known_at,
            metric: &q.metric,
        },
    };
    let common = Common::new(Some(&session), "What was in force", "audit");
    Ok(page(&common, &data))
}

/// The exceptions an auditor looks for.
#[derive(Debug, Serialize)]
pub struct ExceptionsPage<'a> {
    pub x: &'a Exceptions,
}

impl PageData for ExceptionsPage<'_> {
    const TEMPLATE: &'static str = "audit_exceptions.html";
}

pub async fn exceptions(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    let x = audit::exceptions(&state.store, &state.exceptions, &session.user).await?;
    let common = Common::new(Some(&session), "Exceptions", "audit");
    Ok(page(&common, &ExceptionsPage { x: &x }))
}

/// The fields of the event record's filter, as typed.
#[derive(Debug, Serialize)]
pub struct EventFilterFields<'a> {
    pub metric: &'a str,
    pub actor: &'a str,
    pub action: &'a str,
    pub from: &'a str,
    pub to: &'a str,
}

/// An event of the record with its payload as canonical JSON text.
#[derive(Debug, Serialize)]
pub struct EventRow<'a> {
    pub e: &'a crate::audit::Entry,
    pub payload: String,
}

/// A page of the event record, its filter, and the query that downloads the same events.
#[derive(Debug, Serialize)]
pub struct EventsPage<'a> {
    pub x: &'a Extract,
    pub q: EventFilterFields<'a>,
    pub query: String,
    pub entries: Vec<EventRow<'a>>,
}

impl PageData for EventsPage<'_> {
    const TEMPLATE: &'static str = "audit_events.html";
}

pub async fn events(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PageQuery(q): PageQuery<ExtractQuery>,
) -> Result<Response, PageError> {
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
    let entries = x
        .entries
        .iter()
        .map(|e| EventRow {
            e,
            payload: serde_json_canonicalizer::to_string(&e.event.payload).unwrap_or_default(),
        })
        .collect();
    let data = EventsPage {
        x: &x,
        q: EventFilterFields {
            metric: &q.metric,
            actor: &q.actor,
            action: &q.action,
            from: &q.from,
            to: &q.to,
        },
        query,
        entries,
    };
    Ok(page(
        &Common::new(Some(&session), "Event record", "audit"),
        &data,
    ))
}
