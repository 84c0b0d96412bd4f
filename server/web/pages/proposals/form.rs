//! The proposal form: proposing thresholds for a metric and revising a proposal, with the
//! form's fields read back into the workflow's input and its problems shown beside them.

use std::collections::BTreeMap;

use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::{Deserialize, Serialize};

use super::OnProposal;
use crate::domain::Metric;
use crate::domain::access::Session;
use crate::domain::proposal::ContentInput;
use crate::domain::thresholds::Direction;
use crate::domain::{FieldProblem, Problems};
use crate::ops::OpError;
use crate::ops::proposals::{self as flow, RevisionInput};
use crate::web::error::PageError;
use crate::web::pages::metrics::OnMetric;
use crate::web::pages::{
    Common, FormFields, PageData, PageQuery, field_errors, form_problems, render,
};

#[derive(Deserialize, Default)]
#[serde(default)]
pub struct FormQuery {
    direction: String,
}

/// Values a form starts from: the revision being revised, or the latest version.
struct Prefill<'a> {
    cuts: &'a BTreeMap<&'static str, f64>,
    shades: u8,
    unit: &'a str,
    effective_from: Option<crate::domain::Timestamp>,
    rationale: &'a str,
}

impl<'a> From<&'a flow::RevisionView> for Prefill<'a> {
    fn from(r: &'a flow::RevisionView) -> Self {
        Prefill {
            cuts: &r.cuts,
            shades: r.shades,
            unit: &r.unit,
            effective_from: r.effective_from,
            rationale: &r.rationale,
        }
    }
}

/// The text fields of the proposal form as shown: each cut point's by name, and the rest.
#[derive(Debug, Serialize)]
pub struct ProposalFormValues {
    pub cuts: BTreeMap<&'static str, String>,
    pub shades: String,
    pub unit: String,
    pub effective_from: String,
    pub rationale: String,
    pub note: String,
}

/// The text fields of the proposal form: what was typed, else the prefill, else defaults.
fn form_values(
    direction: Direction,
    form: Option<&FormFields>,
    from: Option<Prefill<'_>>,
    unit: &str,
) -> ProposalFormValues {
    let typed = |name: &str| form.map(|f| f.get(name).to_string());
    let mut cuts = BTreeMap::new();
    for name in direction.cut_names() {
        let stored = from
            .as_ref()
            .and_then(|p| p.cuts.get(name))
            .map(|v| crate::domain::number::format(*v));
        cuts.insert(name, typed(name).or(stored).unwrap_or_default());
    }
    let p = from.as_ref();
    ProposalFormValues {
        cuts,
        shades: typed("shades").unwrap_or_else(|| p.map_or(3, |p| p.shades).to_string()),
        unit: typed("unit").unwrap_or_else(|| p.map_or(unit, |p| p.unit).to_string()),
        effective_from: typed("effective_from").unwrap_or_else(|| {
            p.and_then(|p| p.effective_from)
                .map(|t| t.to_string())
                .unwrap_or_default()
        }),
        rationale: typed("rationale").unwrap_or_else(|| p.map_or("", |p| p.rationale).to_string()),
        note: typed("note").unwrap_or_default(),
    }
}

struct FormPage<'a> {
    metric: &'a Metric,
    direction: Direction,
    action: String,
    /// Revising (with a note and the base hash) rather than proposing.
    revising: Option<(&'a str, i64)>,
}

impl<'a> FormPage<'a> {
    /// The form proposing new thresholds for `metric`.
    fn proposing(metric: &'a Metric, direction: Direction) -> FormPage<'a> {
        FormPage {
            metric,
            direction,
            action: format!("/metrics/{}/proposals/new", metric.key),
            revising: None,
        }
    }

    /// The form revising proposal `id`, written against the revision `base_hash`.
    fn revising(metric: &'a Metric, direction: Direction, id: i64, base_hash: &'a str) -> Self {
        FormPage {
            metric,
            direction,
            action: format!("/proposals/{id}/edit"),
            revising: Some((base_hash, id)),
        }
    }
}

/// The proposal being revised: the hash of the revision the form started from, and its id.
#[derive(Debug, Serialize)]
pub struct Revising<'a> {
    pub hash: &'a str,
    pub id: i64,
}

/// The proposal form for one direction: its cut points' fields, the values shown and the
/// problems of the last try.
#[derive(Debug, Serialize)]
pub struct ProposalForm<'a> {
    pub metric: &'a Metric,
    pub direction: &'static str,
    pub directions: Vec<&'static str>,
    pub cut_names: [&'static str; 4],
    pub action: &'a str,
    /// None when proposing.
    pub revising: Option<Revising<'a>>,
    pub values: ProposalFormValues,
    pub errors: BTreeMap<String, String>,
    pub problems: &'a [FieldProblem],
}

impl PageData for ProposalForm<'_> {
    const TEMPLATE: &'static str = "proposal_form.html";
}

fn proposal_form(
    session: &Session,
    spec: &FormPage<'_>,
    values: ProposalFormValues,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let title = if spec.revising.is_some() {
        "Revise the proposal"
    } else {
        "Propose thresholds"
    };
    let data = ProposalForm {
        metric: spec.metric,
        direction: spec.direction.as_str(),
        directions: Direction::ALL.iter().map(|d| d.as_str()).collect(),
        cut_names: spec.direction.cut_names(),
        action: &spec.action,
        revising: spec.revising.map(|(hash, id)| Revising { hash, id }),
        values,
        errors: field_errors(problems),
        problems: &problems.0,
    };
    render(
        status,
        &Common::new(Some(session), title, "register"),
        &data,
    )
}

/// Builds the content from the form: cut fields are named after the direction's cut points.
fn content_from_form(
    direction: Direction,
    form: &FormFields,
    problems: &mut Problems,
) -> ContentInput {
    let mut cuts = BTreeMap::new();
    for name in direction.cut_names() {
        let text = form.get(name).trim();
        if text.is_empty() {
            problems.add(name, format!("give {name} a value"));
            continue;
        }
        match crate::domain::thresholds::parse_finite(text) {
            Ok(v) => {
                cuts.insert(name.to_string(), v);
            }
            Err(_) => problems.add(
                name,
                format!("{name} must be a finite number, got {text:?}"),
            ),
        }
    }
    let shades = form.get("shades").trim();
    let shades = match shades.parse::<i64>() {
        Ok(n) => Some(n),
        Err(_) if shades.is_empty() => None,
        Err(_) => {
            problems.add("shades", "shades must be a whole number from 2 to 5");
            None
        }
    };
    ContentInput {
        direction: direction.as_str().to_string(),
        cuts,
        shades,
        unit: Some(form.get("unit").to_string()),
        effective_from: Some(form.get("effective_from").to_string()),
        rationale: form.get("rationale").to_string(),
    }
}

/// Problems of the cut set as a whole are shown beside the first cut field.
fn place_problems(direction: Direction, p: Problems) -> Problems {
    let first = direction.cut_names()[0];
    Problems(
        p.0.into_iter()
            .map(|mut f| {
                if f.field == "cuts" {
                    f.field = first.to_string();
                }
                f
            })
            .collect(),
    )
}

fn direction_param(text: &str, fallback: Direction) -> Direction {
    text.parse().unwrap_or(fallback)
}

pub async fn new_form(on: OnMetric<PageQuery<FormQuery>>) -> Result<Response, PageError> {
    let OnMetric {
        state,
        session,
        metric,
        input: PageQuery(query),
    } = on;
    flow::may_propose(&session.user, &metric)?;
    let history = crate::ops::versions::history(&state.store, &metric).await?;
    let latest = history.last();
    let direction = direction_param(
        &query.direction,
        latest
            .and_then(|v| v.direction.parse().ok())
            .unwrap_or(Direction::HigherIsBetter),
    );
    // Start from the latest version's numbers when the direction is the same; the rationale
    // is the proposer's to write afresh.
    let start = latest
        .filter(|v| v.direction == direction.as_str())
        .map(|v| Prefill {
            cuts: &v.cuts,
            shades: v.shades,
            unit: &v.unit,
            effective_from: None,
            rationale: "",
        });
    let spec = FormPage::proposing(&metric, direction);
    Ok(proposal_form(
        &session,
        &spec,
        form_values(direction, None, start, &metric.unit),
        &Problems::default(),
        StatusCode::OK,
    ))
}

pub async fn create(on: OnMetric<FormFields>) -> Result<Response, PageError> {
    let OnMetric {
        state,
        session,
        metric,
        input: form,
    } = on;
    let direction = direction_param(form.get("direction"), Direction::HigherIsBetter);
    let mut problems = Problems::default();
    let input = content_from_form(direction, &form, &mut problems);
    let result = if problems.is_empty() {
        flow::propose(&state.store, &session.user, metric.key.as_str(), &input).await
    } else {
        Err(OpError::Invalid(problems))
    };
    let spec = FormPage::proposing(&metric, direction);
    answer_post(result, "proposed", &session, &spec, &form)
}

/// Answers a posted proposal form: on success the proposal it names with the message `done`;
/// on a refusal the form again as typed, with the problems beside their fields.
fn answer_post(
    result: Result<i64, OpError>,
    done: &str,
    session: &Session,
    spec: &FormPage<'_>,
    form: &FormFields,
) -> Result<Response, PageError> {
    match result {
        Ok(id) => Ok(Redirect::to(&format!("/proposals/{id}?done={done}")).into_response()),
        Err(e) => {
            let (p, status) = form_problems(e, "form")?;
            let direction = spec.direction;
            Ok(proposal_form(
                session,
                spec,
                form_values(direction, Some(form), None, &spec.metric.unit),
                &place_problems(direction, p),
                status,
            ))
        }
    }
}

pub async fn edit_form(on: OnProposal<PageQuery<FormQuery>>) -> Result<Response, PageError> {
    let OnProposal {
        state,
        session,
        id,
        input: PageQuery(query),
    } = on;
    let flow::ProposalRead { view, metric, .. } =
        flow::for_revision(&state.store, id, &session.user).await?;
    let latest = &view.latest_revision;
    let direction = direction_param(
        &query.direction,
        latest
            .direction
            .parse()
            .unwrap_or(Direction::HigherIsBetter),
    );
    let spec = FormPage::revising(&metric, direction, id, &latest.hash);
    Ok(proposal_form(
        &session,
        &spec,
        form_values(direction, None, Some(latest.into()), &metric.unit),
        &Problems::default(),
        StatusCode::OK,
    ))
}

pub async fn revise(on: OnProposal<FormFields>) -> Result<Response, PageError> {
    let OnProposal {
        state,
        session,
        id,
        input: form,
    } = on;
    let metric = flow::get(&state.store, id, Some(&session.user))
        .await?
        .metric;
    let direction = direction_param(form.get("direction"), Direction::HigherIsBetter);
    let mut problems = Problems::default();
    let content = content_from_form(direction, &form, &mut problems);
    let input = RevisionInput {
        direction: content.direction,
        cuts: content.cuts,
        shades: content.shades,
        unit: content.unit,
        effective_from: content.effective_from,
        rationale: content.rationale,
        note: form.get("note").to_string(),
        base_revision_hash: Some(form.get("base_revision_hash").to_string()),
    };
    let result = if problems.is_empty() {
        flow::revise(&state.store, &session.user, id, &input).await
    } else {
        Err(OpError::Invalid(problems))
    };
    let spec = FormPage::revising(&metric, direction, id, form.get("base_revision_hash"));
    answer_post(result.map(|()| id), "revised", &session, &spec, &form)
}
