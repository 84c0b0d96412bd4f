//! Proposal pages: the form, the proposal with its diff, change table, comments and decision
//! forms, and each person's inbox. Every action posts a form and comes back to the proposal.

use std::collections::BTreeMap;

use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Deserialize;
use serde_json::{Value, json};

use super::{FormFields, PageQuery, base_context, field_errors, page, render};
use crate::charts::zone_strip::{StripRow, zone_strip};
use crate::domain::Metric;
use crate::domain::Problems;
use crate::domain::access::Session;
use crate::domain::proposal::{ContentInput, Verdict};
use crate::domain::thresholds::{CutSet, Direction};
use crate::domain::{MetricKey, Role};
use crate::engine::workflow::{self, Decision};
use crate::ops::OpError;
use crate::ops::metrics;
use crate::ops::proposals::{self as flow, ProposalView, RevisionInput};
use crate::ops::versions::VersionRecord;
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

/// A unified diff as HTML: every line keeps its `+`/`-`, added lines are `<ins>` and removed
/// lines `<del>`, each with words for screen readers, so they differ in more than colour.
pub fn diff_html(diff: &str) -> String {
    if diff.is_empty() {
        return String::new();
    }
    let mut out = String::from("<pre class=\"diff\">");
    for line in diff.lines() {
        let text = crate::charts::svg::escape(line);
        let html = if line.starts_with("+++") || line.starts_with("---") {
            format!("<span class=\"file\">{text}</span>")
        } else if line.starts_with("@@") {
            format!("<span class=\"hunk\">{text}</span>")
        } else if line.starts_with('+') {
            format!("<ins><span class=\"visually-hidden\">added: </span>{text}</ins>")
        } else if line.starts_with('-') {
            format!("<del><span class=\"visually-hidden\">removed: </span>{text}</del>")
        } else {
            format!("<span>{text}</span>")
        };
        out.push_str(&html);
        out.push('\n');
    }
    out.push_str("</pre>");
    out
}

/// The zone strip of the version in force (if any) above the proposed cut set.
pub fn strip_for(
    title: &str,
    unit: &str,
    current: Option<&VersionRecord>,
    proposed: Option<(&str, &CutSet)>,
) -> String {
    let in_force_caption = current.map(|v| format!("Version {}", v.number));
    let mut rows = Vec::new();
    if let (Some(v), Some(caption)) = (current, in_force_caption.as_deref()) {
        rows.push(StripRow {
            caption,
            cuts: &v.content.cuts,
        });
    }
    if let Some((caption, cuts)) = proposed {
        rows.push(StripRow { caption, cuts });
    }
    if rows.is_empty() {
        return String::new();
    }
    zone_strip(title, unit, &rows)
}

fn parse_key(key: &str) -> Result<MetricKey, PageError> {
    MetricKey::parse(key).map_err(|e| PageError(ApiError::not_found(e.to_string())))
}

fn parse_id(id: &str) -> Result<i64, PageError> {
    id.parse()
        .map_err(|_| PageError(ApiError::not_found(format!("no proposal with id {id:?}"))))
}

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

/// The text fields of the proposal form: what was typed, else the prefill, else defaults.
fn form_values(
    direction: Direction,
    form: Option<&FormFields>,
    from: Option<Prefill<'_>>,
    unit: &str,
) -> Value {
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
    json!({
        "cuts": cuts,
        "shades": typed("shades").unwrap_or_else(|| p.map_or(3, |p| p.shades).to_string()),
        "unit": typed("unit").unwrap_or_else(|| p.map_or(unit, |p| p.unit).to_string()),
        "effective_from": typed("effective_from").unwrap_or_else(|| p.and_then(|p| p.effective_from).map(|t| t.to_string()).unwrap_or_default()),
        "rationale": typed("rationale").unwrap_or_else(|| p.map_or("", |p| p.rationale).to_string()),
        "note": typed("note").unwrap_or_default(),
    })
}

struct FormPage<'a> {
    metric: &'a Metric,
    direction: Direction,
    action: String,
    /// Revising (with a note and the base hash) rather than proposing.
    revising: Option<(&'a str, i64)>,
}

fn proposal_form(
    session: &Session,
    spec: &FormPage<'_>,
    values: Value,
    problems: &Problems,
    status: StatusCode,
) -> Response {
    let title = if spec.revising.is_some() {
        "Revise the proposal"
    } else {
        "Propose thresholds"
    };
    let mut ctx = base_context(Some(session), title, "register");
    ctx.insert("metric", spec.metric);
    ctx.insert("direction", spec.direction.as_str());
    ctx.insert(
        "directions",
        &Direction::ALL
            .iter()
            .map(|d| d.as_str())
            .collect::<Vec<_>>(),
    );
    ctx.insert("cut_names", &spec.direction.cut_names());
    ctx.insert("action", &spec.action);
    ctx.insert(
        "revising",
        &spec
            .revising
            .map(|(hash, id)| json!({"hash": hash, "id": id})),
    );
    ctx.insert("values", &values);
    ctx.insert("errors", &field_errors(problems));
    ctx.insert("problems", &problems.0);
    render(status, "proposal_form.html", &ctx)
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

pub async fn new_form(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
    PageQuery(query): PageQuery<FormQuery>,
) -> Result<Response, PageError> {
    let key = parse_key(&key)?;
    let metric = metrics::get(&state.store, key.as_str()).await?;
    workflow::may_propose(rules_actor(&session, &metric)).map_err(refusal_page)?;
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
    let spec = FormPage {
        metric: &metric,
        direction,
        action: format!("/metrics/{}/proposals/new", metric.key),
        revising: None,
    };
    Ok(proposal_form(
        &session,
        &spec,
        form_values(direction, None, start, &metric.unit),
        &Problems::default(),
        StatusCode::OK,
    ))
}

fn rules_actor<'a>(session: &'a Session, metric: &Metric) -> workflow::Actor<'a> {
    workflow::Actor {
        username: session.user.username.as_str(),
        roles: &session.user.roles,
        owns_metric: metric.is_owner(&session.user.username),
    }
}

fn refusal_page(r: workflow::Refusal) -> PageError {
    match r {
        workflow::Refusal::NotAllowed(m) | workflow::Refusal::SeparationOfDuties(m) => {
            PageError(ApiError::forbidden(m))
        }
        workflow::Refusal::Conflict(m) => {
            PageError(ApiError::new(StatusCode::CONFLICT, "conflict", m))
        }
    }
}

/// Validation problems go back to the form; everything else is an error page.
fn form_problems(e: OpError) -> Result<(Problems, StatusCode), PageError> {
    match e {
        OpError::Invalid(p) => Ok((p, StatusCode::BAD_REQUEST)),
        OpError::Conflict(m) => {
            let mut p = Problems::default();
            p.add("form", m);
            Ok((p, StatusCode::CONFLICT))
        }
        other => Err(other.into()),
    }
}

pub async fn create(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let key = parse_key(&key)?;
    let metric = metrics::get(&state.store, key.as_str()).await?;
    let direction = direction_param(form.get("direction"), Direction::HigherIsBetter);
    let mut problems = Problems::default();
    let input = content_from_form(direction, &form, &mut problems);
    let spec = FormPage {
        metric: &metric,
        direction,
        action: format!("/metrics/{}/proposals/new", metric.key),
        revising: None,
    };
    let result = if problems.is_empty() {
        flow::propose(&state.store, &session.user, key.as_str(), &input).await
    } else {
        Err(OpError::Invalid(problems))
    };
    match result {
        Ok(id) => Ok(Redirect::to(&format!("/proposals/{id}?done=proposed")).into_response()),
        Err(e) => {
            let (p, status) = form_problems(e)?;
            Ok(proposal_form(
                &session,
                &spec,
                form_values(direction, Some(&form), None, &metric.unit),
                &place_problems(direction, p),
                status,
            ))
        }
    }
}

pub async fn edit_form(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    PageQuery(query): PageQuery<FormQuery>,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let (view, _) = flow::get(&state.store, id).await?;
    let metric = metrics::get(&state.store, &view.metric).await?;
    workflow::may_revise(rules_actor(&session, &metric), view.state).map_err(refusal_page)?;
    let latest = &view.latest_revision;
    let direction = direction_param(
        &query.direction,
        latest
            .direction
            .parse()
            .unwrap_or(Direction::HigherIsBetter),
    );
    let spec = FormPage {
        metric: &metric,
        direction,
        action: format!("/proposals/{id}/edit"),
        revising: Some((&latest.hash, id)),
    };
    Ok(proposal_form(
        &session,
        &spec,
        form_values(direction, None, Some(latest.into()), &metric.unit),
        &Problems::default(),
        StatusCode::OK,
    ))
}

pub async fn revise(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let (view, _) = flow::get(&state.store, id).await?;
    let metric = metrics::get(&state.store, &view.metric).await?;
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
    match result {
        Ok(()) => Ok(Redirect::to(&format!("/proposals/{id}?done=revised")).into_response()),
        Err(e) => {
            let (p, status) = form_problems(e)?;
            let spec = FormPage {
                metric: &metric,
                direction,
                action: format!("/proposals/{id}/edit"),
                revising: Some((form.get("base_revision_hash"), id)),
            };
            Ok(proposal_form(
                &session,
                &spec,
                form_values(direction, Some(&form), None, &metric.unit),
                &place_problems(direction, p),
                status,
            ))
        }
    }
}

#[derive(Deserialize, Default)]
#[serde(default)]
pub struct DoneQuery {
    done: String,
    /// The evidence window.
    from: String,
    to: String,
}

fn done_message(done: &str) -> Option<&'static str> {
    Some(match done {
        "proposed" => "Your proposal was saved as a draft. Submit it for review when it is ready.",
        "revised" => "A new revision was saved. Earlier approvals and sign-offs no longer count.",
        "submitted" => "Submitted for review.",
        "commented" => "Your comment was added.",
        "approved" => "Your approval was recorded.",
        "sent_back" => "The proposal was sent back to its owners.",
        "signed" => "Your sign-off was recorded.",
        "withdrawn" => "The proposal was withdrawn.",
        "rejected" => "The proposal was rejected.",
        "in_force" => "Approved: the new version is recorded.",
        _ => return None,
    })
}

/// What the signed-in person may do here, by the workflow's own rules.
fn permissions(session: &Session, metric: &Metric, view: &ProposalView) -> Value {
    let who = rules_actor(session, metric);
    let me = &session.user;
    let is_author = view
        .revisions
        .iter()
        .any(|r| r.author["username"] == me.username.as_str());
    let latest = &view.latest_revision;
    let d = Decision {
        state: view.state,
        is_author,
        latest_hash: &latest.hash,
        given_hash: &latest.hash,
        approved_latest: view.reviews.iter().any(|r| {
            r.verdict == Verdict::Approve
                && r.revision_number == latest.number
                && r.reviewer["username"] == me.username.as_str()
        }),
        signed_latest: view.signoffs.iter().any(|s| {
            s.revision_number == latest.number && s.signer["username"] == me.username.as_str()
        }),
    };
    let revised = view.sent_back_revision.is_none_or(|n| latest.number > n);
    json!({
        "revise": workflow::may_revise(who, view.state).is_ok(),
        "submit": workflow::may_submit(who, view.state, revised).is_ok(),
        "approve": workflow::may_give_verdict(who, Verdict::Approve, &d).is_ok(),
        "send_back": workflow::may_give_verdict(who, Verdict::SendBack, &d).is_ok(),
        "sign": workflow::may_sign_off(who, &d, !view.still_needed.reasons.is_empty()).is_ok(),
        "withdraw": workflow::may_withdraw(who, view.author["username"] == me.username.as_str(), view.state).is_ok(),
        "reject": workflow::may_reject(who, view.state).is_ok(),
        "is_author": is_author,
        "is_reviewer": me.roles.has(Role::Reviewer),
        "is_signatory": me.roles.has(Role::Signatory),
    })
}

/// The evidence section for a proposal: its latest revision beside the version it would
/// replace, over the whole history.
async fn proposal_evidence(
    state: &AppState,
    metric: &Metric,
    view: &ProposalView,
    previous: Option<&VersionRecord>,
    (from, to): (&str, &str),
) -> Result<serde_json::Value, PageError> {
    let (window, window_problem) = super::evidence::window(from, to);
    let latest = &view.latest_revision;
    let proposed = latest
        .direction
        .parse()
        .ok()
        .and_then(|d| CutSet::from_named(d, latest.cuts.iter().map(|(k, v)| (*k, *v))).ok());
    let shades = crate::domain::thresholds::Shades::new(i64::from(latest.shades)).ok();
    let history = crate::ops::evidence::history(&state.store, metric.clone(), window).await?;
    let now = state.store.now();
    let in_force = previous.map(|v| super::evidence::Shown {
        caption: format!("Version {}", v.number),
        // The version compared with: the latest approved one, which is in force unless its
        // effective time is still ahead; for an approved proposal, the one before its own.
        short: if v.effective_from > now {
            "scheduled"
        } else if view.state == crate::domain::proposal::ProposalState::Approved {
            "previous"
        } else {
            "in force"
        },
        cuts: v.content.cuts,
        shades: v.content.shades,
    });
    let proposal = match (&proposed, shades) {
        (Some(cuts), Some(shades)) => Some(super::evidence::Shown {
            caption: format!("revision {} of proposal {}", latest.number, view.id),
            short: "proposed",
            cuts: *cuts,
            shades,
        }),
        _ => None,
    };
    super::evidence::section_off_thread(super::evidence::SectionInput {
        metric_name: metric.name.clone(),
        unit: latest.unit.clone(),
        history,
        in_force,
        proposal,
        window,
        window_problem,
    })
    .await
}

/// A proposal with the version it is compared with, its metric, and its evidence section.
async fn load_with_evidence(
    state: &AppState,
    id: i64,
    window: (&str, &str),
) -> Result<
    (
        ProposalView,
        Option<VersionRecord>,
        Metric,
        serde_json::Value,
    ),
    PageError,
> {
    let (view, previous) = flow::get(&state.store, id).await?;
    let metric = metrics::get(&state.store, &view.metric).await?;
    let evidence = proposal_evidence(state, &metric, &view, previous.as_ref(), window).await?;
    Ok((view, previous, metric, evidence))
}

#[allow(clippy::too_many_arguments)]
fn proposal_page(
    session: &Session,
    metric: &Metric,
    view: &ProposalView,
    previous: Option<&VersionRecord>,
    evidence: &serde_json::Value,
    notice: Option<&str>,
    error: Option<&str>,
    status: StatusCode,
) -> Response {
    let latest = &view.latest_revision;
    let proposed_cuts = CutSet::from_named(
        latest
            .direction
            .parse()
            .unwrap_or(Direction::HigherIsBetter),
        latest.cuts.iter().map(|(k, v)| (*k, *v)),
    )
    .ok();
    let caption = format!("Proposed: revision {}", latest.number);
    let strip = strip_for(
        &format!("{}: version in force and proposal", metric.name),
        &latest.unit,
        previous,
        proposed_cuts.as_ref().map(|c| (caption.as_str(), c)),
    );
    let mut ctx = base_context(
        Some(session),
        &format!("Proposal {} for {}", view.id, metric.name),
        "register",
    );
    ctx.insert("p", view);
    ctx.insert("metric", metric);
    ctx.insert("strip", &strip);
    ctx.insert("evidence", evidence);
    ctx.insert("can", &permissions(session, metric, view));
    ctx.insert("notice", &notice);
    ctx.insert("error", &error);
    ctx.insert(
        "cut_names",
        &latest
            .direction
            .parse::<Direction>()
            .map(|d| d.cut_names().to_vec())
            .unwrap_or_default(),
    );
    ctx.insert("diff_previous", &diff_html(&latest.diff_from_previous));
    ctx.insert("diff_base", &diff_html(&latest.diff_from_base));
    ctx.insert(
        "older_revisions",
        &view.revisions.iter().rev().skip(1).collect::<Vec<_>>(),
    );
    render(status, "proposal.html", &ctx)
}

pub async fn show(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    PageQuery(query): PageQuery<DoneQuery>,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let (view, previous, metric, evidence) =
        load_with_evidence(&state, id, (&query.from, &query.to)).await?;
    Ok(proposal_page(
        &session,
        &metric,
        &view,
        previous.as_ref(),
        &evidence,
        done_message(&query.done),
        None,
        StatusCode::OK,
    ))
}

/// `GET /proposals/{id}/signoff`: what changes, the evidence and the signature form on one
/// page for the signatory.
pub async fn signoff_page(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    PageQuery(query): PageQuery<DoneQuery>,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let (view, _, metric, evidence) =
        load_with_evidence(&state, id, (&query.from, &query.to)).await?;
    let mut ctx = base_context(
        Some(&session),
        &format!("Sign off proposal {} for {}", view.id, metric.name),
        "register",
    );
    ctx.insert("p", &view);
    ctx.insert("metric", &metric);
    ctx.insert("evidence", &evidence);
    ctx.insert("can", &permissions(&session, &metric, &view));
    ctx.insert("error", &None::<String>);
    Ok(render(StatusCode::OK, "signoff.html", &ctx))
}

/// Runs a step; on success returns to the proposal with a message, on a refusal shows the
/// proposal again with the reason (and the status the API would give).
async fn step(
    state: &AppState,
    session: &Session,
    id: i64,
    done: &str,
    result: Result<(), OpError>,
) -> Result<Response, PageError> {
    match result {
        Ok(()) => Ok(Redirect::to(&format!("/proposals/{id}?done={done}")).into_response()),
        Err(e) => {
            let api: ApiError = e.into();
            if api.status == StatusCode::INTERNAL_SERVER_ERROR
                || api.status == StatusCode::NOT_FOUND
            {
                return Err(PageError(api));
            }
            let (view, previous, metric, evidence) =
                load_with_evidence(state, id, ("", "")).await?;
            let mut response = proposal_page(
                session,
                &metric,
                &view,
                previous.as_ref(),
                &evidence,
                None,
                Some(&api.message),
                api.status,
            );
            if let Some(secs) = api.retry_after {
                response
                    .headers_mut()
                    .insert(axum::http::header::RETRY_AFTER, secs.into());
            }
            Ok(response)
        }
    }
}

pub async fn submit(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    _form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::submit(&state.store, &session.user, id).await;
    step(&state, &session, id, "submitted", result).await
}

pub async fn comment(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let cut = Some(form.get("cut")).filter(|c| !c.is_empty());
    let result = flow::comment(&state.store, &session.user, id, form.get("body"), cut)
        .await
        .map(|_| ());
    step(&state, &session, id, "commented", result).await
}

pub async fn review(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let Some(verdict) = Verdict::parse(form.get("verdict")) else {
        return step(
            &state,
            &session,
            id,
            "",
            Err(OpError::Conflict("choose approve or send back".into())),
        )
        .await;
    };
    let result = flow::review(
        &state.store,
        &session.user,
        id,
        verdict,
        form.get("revision_hash"),
        form.get("comment"),
    )
    .await;
    let done = match (&result, verdict) {
        (Ok(o), _) if o.version.is_some() => "in_force",
        (_, Verdict::Approve) => "approved",
        (_, Verdict::SendBack) => "sent_back",
    };
    step(&state, &session, id, done, result.map(|_| ())).await
}

pub async fn signoff(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::sign_off(
        &state.store,
        &session.user,
        id,
        form.get("revision_hash"),
        form.get("password"),
    )
    .await;
    let done = if result.as_ref().is_ok_and(|o| o.version.is_some()) {
        "in_force"
    } else {
        "signed"
    };
    step(&state, &session, id, done, result.map(|_| ())).await
}

pub async fn withdraw(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::withdraw(&state.store, &session.user, id, form.get("reason")).await;
    step(&state, &session, id, "withdrawn", result).await
}

pub async fn reject(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(id): Path<String>,
    form: FormFields,
) -> Result<Response, PageError> {
    let id = parse_id(&id)?;
    let result = flow::reject(&state.store, &session.user, id, form.get("reason")).await;
    step(&state, &session, id, "rejected", result).await
}

pub async fn inbox(
    State(state): State<AppState>,
    PageSession(session): PageSession,
) -> Result<Response, PageError> {
    let inbox = flow::inbox(&state.store, &session.user).await?;
    let mut ctx = base_context(Some(&session), "Inbox", "inbox");
    ctx.insert("inbox", &inbox);
    Ok(page("inbox.html", &ctx))
}
