//! Register pages: the list with search, a metric's page, and the add and edit forms.

use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Deserialize;
use serde_json::json;

use super::{FormFields, PageQuery, base_context, field_errors, page, render};
use crate::domain::Metric;
use crate::domain::Problems;
use crate::domain::access::Session;
use crate::domain::metric::split_list;
use crate::domain::{MetricKey, Role};
use crate::ops::metrics::{self as metrics, MetricFilter};
use crate::ops::metrics::{MetricEdit, NewMetric, edit_permission};
use crate::ops::{self, OpError};
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

#[derive(Deserialize, Default)]
#[serde(default)]
pub struct ListQuery {
    q: String,
    tag: String,
    owner: String,
    page: String,
}

fn list_link(filter: &MetricFilter, page: i64) -> String {
    let query = serde_urlencoded::to_string([
        ("q", filter.text.as_str()),
        ("tag", filter.tag.as_str()),
        ("owner", filter.owner.as_str()),
        ("page", &page.to_string()),
    ])
    .unwrap_or_default();
    format!("/metrics?{query}")
}

pub async fn list(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PageQuery(query): PageQuery<ListQuery>,
) -> Result<Response, PageError> {
    let filter = MetricFilter {
        text: query.q,
        tag: query.tag,
        owner: query.owner,
    };
    let page_no = query.page.trim().parse::<i64>().unwrap_or(1).max(1);
    let found = metrics::list(&state.store, &filter, page_no, metrics::PER_PAGE_DEFAULT).await?;
    let pages = ((found.total + found.per_page - 1) / found.per_page).max(1);
    let mut ctx = base_context(Some(&session), "Metric register", "register");
    ctx.insert("metrics", &found.metrics);
    ctx.insert("total", &found.total);
    ctx.insert("page", &found.page);
    ctx.insert("pages", &pages);
    ctx.insert(
        "searching",
        &!(filter.text.is_empty() && filter.tag.is_empty() && filter.owner.is_empty()),
    );
    ctx.insert(
        "filter",
        &json!({"text": filter.text, "tag": filter.tag, "owner": filter.owner}),
    );
    ctx.insert(
        "prev_link",
        &(found.page > 1).then(|| list_link(&filter, found.page - 1)),
    );
    ctx.insert(
        "next_link",
        &(found.page < pages).then(|| list_link(&filter, found.page + 1)),
    );
    Ok(page("metrics_list.html", &ctx))
}

fn parse_key(key: &str) -> Result<MetricKey, PageError> {
    MetricKey::parse(key).map_err(|e| PageError(ApiError::not_found(e.to_string())))
}

#[derive(Deserialize, Default)]
#[serde(default)]
pub struct SavedQuery {
    saved: String,
    /// Rows of a history upload just stored.
    uploaded: String,
    /// The evidence window.
    from: String,
    to: String,
}

pub async fn detail(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
    PageQuery(query): PageQuery<SavedQuery>,
) -> Result<Response, PageError> {
    let key = parse_key(&key)?;
    let metric = metrics::get(&state.store, key.as_str()).await?;
    let saved = match query.saved.as_str() {
        "created" => Some("The metric was added to the register."),
        "edited" => Some("Your changes were saved."),
        _ => None,
    };
    let uploaded = query.uploaded.parse::<u64>().ok().map(|n| {
        format!(
            "The history was uploaded: {n} period{} stored or updated.",
            if n == 1 { "" } else { "s" }
        )
    });
    let thresholds = crate::ops::versions::thresholds(&state.store, &metric).await?;
    let history = &thresholds.history;
    let (in_force, scheduled) = crate::ops::versions::current(history);
    let open = thresholds.open_proposal();
    let proposals = &thresholds.proposals;
    let open_view = match open {
        Some(p) => Some(
            crate::ops::proposals::get(&state.store, p.id, Some(&session.user))
                .await?
                .view,
        ),
        None => None,
    };
    // The strip shows the version in force, the scheduled one, and the open proposal.
    let mut rows: Vec<(String, crate::domain::thresholds::CutSet)> = Vec::new();
    for v in in_force.iter().chain(scheduled.iter()) {
        let label = format!(
            "Version {} ({})",
            v.number,
            v.status.as_str().replace('_', " ")
        );
        rows.push((label, v.record.content.cuts));
    }
    if let Some(view) = &open_view {
        let r = &view.latest_revision;
        if let Ok(cuts) = crate::domain::thresholds::CutSet::from_named(
            r.direction
                .parse()
                .unwrap_or(crate::domain::Direction::HigherIsBetter),
            r.cuts.iter().map(|(k, v)| (*k, *v)),
        ) {
            rows.push((
                format!("Proposal {} ({})", view.id, view.state.as_str()),
                cuts,
            ));
        }
    }
    let strip_rows: Vec<_> = rows
        .iter()
        .map(|(caption, cuts)| crate::charts::zone_strip::StripRow { caption, cuts })
        .collect();
    let unit = in_force.map_or(metric.unit.as_str(), |v| v.unit.as_str());
    let strip = if strip_rows.is_empty() {
        String::new()
    } else {
        crate::charts::zone_strip::zone_strip(&format!("{}: zones", metric.name), unit, &strip_rows)
    };
    let can_propose =
        open.is_none() && crate::ops::proposals::may_propose(&session.user, &metric).is_ok();
    let mut ctx = base_context(Some(&session), &metric.name, "register");
    ctx.insert("can_edit", &may_edit(&session, &metric));
    ctx.insert("can_propose", &can_propose);
    ctx.insert("saved", &saved);
    ctx.insert("metric", &metric);
    ctx.insert("in_force", &in_force);
    ctx.insert(
        "in_force_cut_names",
        &in_force
            .map(|v| v.record.content.direction().cut_names().to_vec())
            .unwrap_or_default(),
    );
    ctx.insert("scheduled", &scheduled);
    ctx.insert("history", &history.iter().rev().collect::<Vec<_>>());
    ctx.insert("open", &open_view);
    ctx.insert(
        "closed_proposals",
        &proposals
            .iter()
            .filter(|p| !p.state.is_open())
            .map(|p| json!({"id": p.id, "state": p.state, "updated_at": p.updated_at, "version": p.version_number}))
            .collect::<Vec<_>>(),
    );
    ctx.insert("strip", &strip);
    let (window, window_problem) = super::evidence::window(&query.from, &query.to);
    let evidence_history =
        crate::ops::evidence::history(&state.store, metric.clone(), window).await?;
    let shown = in_force.map(|v| super::evidence::Shown::version(&v.record));
    let evidence = super::evidence::section_off_thread(super::evidence::SectionInput {
        metric_name: metric.name.clone(),
        unit: unit.to_string(),
        history: evidence_history,
        in_force: shown,
        proposal: None,
        window,
        window_problem,
    })
    .await?;
    ctx.insert("evidence", &evidence);
    ctx.insert(
        "can_upload",
        &(session.user.roles.has(Role::Admin) || metric.is_owner(&session.user.username)),
    );
    ctx.insert("uploaded", &uploaded);
    Ok(page("metric_detail.html", &ctx))
}

fn may_edit(session: &Session, metric: &Metric) -> bool {
    edit_permission(&session.user, metric, &MetricEdit::default()).is_ok()
}

/// The form's fields as text, to re-show what was typed.
fn form_values(metric: Option<&Metric>, form: Option<&FormFields>) -> serde_json::Value {
    let field = |name: &str, from_metric: String| match form {
        Some(f) => f.get(name).to_string(),
        None => from_metric,
    };
    let m = metric;
    json!({
        "key": field("key", m.map(|m| m.key.to_string()).unwrap_or_default()),
        "name": field("name", m.map(|m| m.name.clone()).unwrap_or_default()),
        "description": field("description", m.map(|m| m.description.clone()).unwrap_or_default()),
        "unit": field("unit", m.map(|m| m.unit.clone()).unwrap_or_default()),
        "owners": field("owners", m.map(|m| m.owners.iter().map(|o| o.username.as_str()).collect::<Vec<_>>().join(", ")).unwrap_or_default()),
        "data_source": field("data_source", m.map(|m| m.data_source.clone()).unwrap_or_default()),
        "review_cadence_months": field("review_cadence_months", m.and_then(|m| m.review_cadence_months).map(|n| n.to_string()).unwrap_or_default()),
        "tags": field("tags", m.map(|m| m.tags.join(", ")).unwrap_or_default()),
    })
}

struct FormSpec<'a> {
    title: &'a str,
    action: String,
    cancel: String,
    creating: bool,
    can_set_owners: bool,
}

fn metric_form(
    session: &Session,
    spec: &FormSpec<'_>,
    values: serde_json::Value,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let mut ctx = base_context(Some(session), spec.title, "register");
    ctx.insert("action", &spec.action);
    ctx.insert("cancel", &spec.cancel);
    ctx.insert("creating", &spec.creating);
    ctx.insert("can_set_owners", &spec.can_set_owners);
    ctx.insert(
        "submit_label",
        if spec.creating {
            "Add metric"
        } else {
            "Save changes"
        },
    );
    ctx.insert("values", &values);
    ctx.insert("errors", &field_errors(problems));
    ctx.insert("problems", &problems.0);
    render(status, "metric_form.html", &ctx)
}

/// Reads the cadence field: blank means none; anything but a whole number is a problem.
fn cadence_field(text: &str, problems: &mut Problems) -> Option<i64> {
    let text = text.trim();
    if text.is_empty() {
        return None;
    }
    match text.parse::<i64>() {
        Ok(n) => Some(n),
        Err(_) => {
            problems.add(
                "review_cadence_months",
                format!("review_cadence_months must be a whole number of months, got {text:?}"),
            );
            None
        }
    }
}

fn new_form_spec() -> FormSpec<'static> {
    FormSpec {
        title: "Add a metric",
        action: "/metrics/new".into(),
        cancel: "/metrics".into(),
        creating: true,
        can_set_owners: true,
    }
}

fn require_admin(session: &Session) -> Result<(), PageError> {
    if session.user.roles.has(Role::Admin) {
        Ok(())
    } else {
        Err(PageError(ApiError::forbidden(
            "only an admin may add metrics to the register",
        )))
    }
}

pub async fn new_form(PageSession(session): PageSession) -> Result<Response, PageError> {
    require_admin(&session)?;
    Ok(metric_form(
        &session,
        &new_form_spec(),
        form_values(None, None),
        &Problems::default(),
        StatusCode::OK,
    ))
}

/// Re-shows a form for the errors a user can fix there; other errors become error pages.
fn reshow_or_fail(
    err: OpError,
    conflict_field: &str,
    show: impl FnOnce(&Problems, StatusCode) -> Response,
) -> Result<Response, PageError> {
    match err {
        OpError::Invalid(p) => Ok(show(&p, StatusCode::BAD_REQUEST)),
        OpError::Conflict(m) => {
            let mut p = Problems::default();
            p.add(conflict_field, m);
            Ok(show(&p, StatusCode::CONFLICT))
        }
        other => Err(other.into()),
    }
}

pub async fn create(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    form: FormFields,
) -> Result<Response, PageError> {
    require_admin(&session)?;
    let mut problems = Problems::default();
    let input = NewMetric {
        key: form.get("key").to_string(),
        name: form.get("name").to_string(),
        description: form.get("description").to_string(),
        unit: form.get("unit").to_string(),
        owners: split_list(form.get("owners")),
        data_source: form.get("data_source").to_string(),
        review_cadence_months: cadence_field(form.get("review_cadence_months"), &mut problems),
        tags: split_list(form.get("tags")),
    };
    let show = |p: &Problems, status| {
        metric_form(
            &session,
            &new_form_spec(),
            form_values(None, Some(&form)),
            p,
            status,
        )
    };
    if !problems.is_empty() {
        // Report the cadence alongside whatever else is wrong.
        if let Err(p) = ops::metrics::validate_new(&input) {
            problems.0.extend(p.0);
        }
        return Ok(show(&problems, StatusCode::BAD_REQUEST));
    }
    match ops::metrics::create(&state.store, &session.user, &input).await {
        Ok(m) => Ok(Redirect::to(&format!("/metrics/{}?saved=created", m.key)).into_response()),
        Err(e) => reshow_or_fail(e, "key", show),
    }
}

fn edit_spec(metric: &Metric, session: &Session) -> FormSpec<'static> {
    FormSpec {
        title: "Edit metric details",
        action: format!("/metrics/{}/edit", metric.key),
        cancel: format!("/metrics/{}", metric.key),
        creating: false,
        can_set_owners: session.user.roles.has(Role::Admin),
    }
}

pub async fn edit_form(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
) -> Result<Response, PageError> {
    let key = parse_key(&key)?;
    let metric = metrics::get(&state.store, key.as_str()).await?;
    edit_permission(&session.user, &metric, &MetricEdit::default())?;
    Ok(metric_form(
        &session,
        &edit_spec(&metric, &session),
        form_values(Some(&metric), None),
        &Problems::default(),
        StatusCode::OK,
    ))
}

pub async fn edit(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let key = parse_key(&key)?;
    let metric = metrics::get(&state.store, key.as_str()).await?;
    let spec = edit_spec(&metric, &session);
    let mut problems = Problems::default();
    let input = MetricEdit {
        name: Some(form.get("name").to_string()),
        description: Some(form.get("description").to_string()),
        unit: Some(form.get("unit").to_string()),
        owners: spec.can_set_owners.then(|| split_list(form.get("owners"))),
        data_source: Some(form.get("data_source").to_string()),
        review_cadence_months: Some(cadence_field(
            form.get("review_cadence_months"),
            &mut problems,
        )),
        tags: Some(split_list(form.get("tags"))),
    };
    let show = |p: &Problems, status| {
        metric_form(
            &session,
            &spec,
            form_values(Some(&metric), Some(&form)),
            p,
            status,
        )
    };
    if !problems.is_empty() {
        if let Err(p) = ops::metrics::validate_edit(&input) {
            problems.0.extend(p.0);
        }
        return Ok(show(&problems, StatusCode::BAD_REQUEST));
    }
    match ops::metrics::edit(&state.store, &session.user, key.as_str(), &input).await {
        Ok(m) => Ok(Redirect::to(&format!("/metrics/{}?saved=edited", m.key)).into_response()),
        Err(e) => reshow_or_fail(e, "name", show),
    }
}
