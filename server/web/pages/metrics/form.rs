//! The metric forms: adding a metric to the register and editing its details, re-shown with
//! the problems of each field beside it.

use std::collections::BTreeMap;

use axum::extract::State;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Serialize;

use super::OnMetric;
use crate::domain::access::Session;
use crate::domain::metric::split_list;
use crate::domain::{FieldProblem, Metric, Problems, Role};
use crate::ops::metrics::{MetricEdit, NewMetric, edit_permission};
use crate::ops::{self, OpError};
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::PageError;
use crate::web::pages::{self, Common, FormFields, PageData, field_errors, form_problems, render};

/// The metric form's fields as text.
#[derive(Debug, Serialize)]
pub struct MetricFormValues {
    pub key: String,
    pub name: String,
    pub description: String,
    pub unit: String,
    /// Usernames separated by commas.
    pub owners: String,
    pub data_source: String,
    pub review_cadence_months: String,
    /// Separated by commas.
    pub tags: String,
}

/// The form's fields as text, to re-show what was typed.
fn form_values(metric: Option<&Metric>, form: Option<&FormFields>) -> MetricFormValues {
    let field = |name: &str, from_metric: String| match form {
        Some(f) => f.get(name).to_string(),
        None => from_metric,
    };
    let m = metric;
    let owners = |m: &Metric| {
        m.owners
            .iter()
            .map(|o| o.username.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    };
    MetricFormValues {
        key: field("key", m.map(|m| m.key.to_string()).unwrap_or_default()),
        name: field("name", m.map(|m| m.name.clone()).unwrap_or_default()),
        description: field(
            "description",
            m.map(|m| m.description.clone()).unwrap_or_default(),
        ),
        unit: field("unit", m.map(|m| m.unit.clone()).unwrap_or_default()),
        owners: field("owners", m.map(owners).unwrap_or_default()),
        data_source: field(
            "data_source",
            m.map(|m| m.data_source.clone()).unwrap_or_default(),
        ),
        review_cadence_months: field(
            "review_cadence_months",
            m.and_then(|m| m.review_cadence_months)
                .map(|n| n.to_string())
                .unwrap_or_default(),
        ),
        tags: field("tags", m.map(|m| m.tags.join(", ")).unwrap_or_default()),
    }
}

/// The form to add a metric or edit its details, with the problems of the last try.
#[derive(Debug, Serialize)]
pub struct MetricForm<'a> {
    pub action: &'a str,
    pub cancel: &'a str,
    /// Adding a metric (its key can be set only then).
    pub creating: bool,
    pub can_set_owners: bool,
    pub submit_label: &'static str,
    pub values: MetricFormValues,
    pub errors: BTreeMap<String, String>,
    pub problems: &'a [FieldProblem],
}

impl PageData for MetricForm<'_> {
    const TEMPLATE: &'static str = "metric_form.html";
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
    values: MetricFormValues,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let data = MetricForm {
        action: &spec.action,
        cancel: &spec.cancel,
        creating: spec.creating,
        can_set_owners: spec.can_set_owners,
        submit_label: if spec.creating {
            "Add metric"
        } else {
            "Save changes"
        },
        values,
        errors: field_errors(problems),
        problems: &problems.0,
    };
    render(
        status,
        &Common::new(Some(session), spec.title, "register"),
        &data,
    )
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

/// Only an admin adds metrics to the register.
fn require_admin(session: &Session) -> Result<(), PageError> {
    pages::require_admin(session, "add metrics to the register")
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
    let (problems, status) = form_problems(err, conflict_field)?;
    Ok(show(&problems, status))
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

pub async fn edit_form(on: OnMetric<()>) -> Result<Response, PageError> {
    let OnMetric {
        session, metric, ..
    } = on;
    edit_permission(&session.user, &metric, &MetricEdit::default())?;
    Ok(metric_form(
        &session,
        &edit_spec(&metric, &session),
        form_values(Some(&metric), None),
        &Problems::default(),
        StatusCode::OK,
    ))
}

pub async fn edit(on: OnMetric<FormFields>) -> Result<Response, PageError> {
    let OnMetric {
        state,
        session,
        metric,
        input: form,
    } = on;
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
    match ops::metrics::edit(&state.store, &session.user, metric.key.as_str(), &input).await {
        Ok(m) => Ok(Redirect::to(&format!("/metrics/{}?saved=edited", m.key)).into_response()),
        Err(e) => reshow_or_fail(e, "name", show),
    }
}
