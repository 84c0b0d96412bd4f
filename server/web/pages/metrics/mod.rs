//! Register pages: the list with search and a metric's page ([`form`] has the add and edit
//! forms).

mod form;

pub use form::{MetricForm, MetricFormValues, create, edit, edit_form, new_form};

use axum::extract::{FromRequest, Request, State};
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};

use super::evidence::MetricEvidence;
use super::{Common, PageData, PageQuery, page, parse_key, session_path_and};
use crate::domain::access::Session;
use crate::domain::proposal::ProposalState;
use crate::domain::{Metric, Role, Timestamp};
use crate::ops::metrics::{self as metrics, MetricFilter};
use crate::ops::metrics::{MetricEdit, edit_permission};
use crate::ops::proposals::ProposalView;
use crate::ops::versions::VersionView;
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::PageError;

/// What every page of one metric starts from: the application, the reader's session, the
/// metric its path names, and what the page reads besides (`input`: its query or its posted
/// form). Read in that order, as separate extractors would be; the metric is looked up once
/// the rest has been read, and a key that is not one or names no metric answers 404.
pub struct OnMetric<Input> {
    pub state: AppState,
    pub session: Session,
    pub metric: Metric,
    pub input: Input,
}

impl<Input, M> FromRequest<AppState, M> for OnMetric<Input>
where
    Input: FromRequest<AppState, M> + Send,
    Input::Rejection: IntoResponse,
{
    type Rejection = Response;

    async fn from_request(req: Request, state: &AppState) -> Result<Self, Self::Rejection> {
        let (session, key, input) = session_path_and(req, state).await?;
        let key = parse_key(&key).map_err(IntoResponse::into_response)?;
        let metric = metrics::get(&state.store, key.as_str())
            .await
            .map_err(|e| PageError::from(e).into_response())?;
        Ok(OnMetric {
            state: state.clone(),
            session,
            metric,
            input,
        })
    }
}

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

/// The search fields as typed.
#[derive(Debug, Serialize)]
pub struct ListFilter<'a> {
    pub text: &'a str,
    pub tag: &'a str,
    pub owner: &'a str,
}

/// A page of the register, the search that chose it, and links to the pages either side.
#[derive(Debug, Serialize)]
pub struct MetricList<'a> {
    pub metrics: &'a [Metric],
    /// Metrics matching in all.
    pub total: i64,
    pub page: i64,
    pub pages: i64,
    pub searching: bool,
    pub filter: ListFilter<'a>,
    pub prev_link: Option<String>,
    pub next_link: Option<String>,
}

impl PageData for MetricList<'_> {
    const TEMPLATE: &'static str = "metrics_list.html";
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
    let data = MetricList {
        metrics: &found.metrics,
        total: found.total,
        page: found.page,
        pages,
        searching: !(filter.text.is_empty() && filter.tag.is_empty() && filter.owner.is_empty()),
        filter: ListFilter {
            text: &filter.text,
            tag: &filter.tag,
            owner: &filter.owner,
        },
        prev_link: (found.page > 1).then(|| list_link(&filter, found.page - 1)),
        next_link: (found.page < pages).then(|| list_link(&filter, found.page + 1)),
    };
    let common = Common::new(Some(&session), "Metric register", "register");
    Ok(page(&common, &data))
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

/// A proposal of the metric that is closed, as its page lists it.
#[derive(Debug, Serialize)]
pub struct ClosedProposal {
    pub id: i64,
    pub state: ProposalState,
    pub updated_at: Timestamp,
    /// The version it became, if it was approved.
    pub version: Option<i64>,
}

/// A metric's page: its details, thresholds (in force, scheduled, history), the open proposal,
/// the evidence, and what the reader may do.
#[derive(Debug, Serialize)]
pub struct MetricDetail<'a> {
    #[serde(flatten)]
    pub shown: MetricEvidence<'a>,
    pub can_edit: bool,
    pub can_propose: bool,
    pub can_upload: bool,
    /// What was just saved or uploaded.
    pub saved: Option<&'static str>,
    pub uploaded: Option<String>,
    pub in_force: Option<&'a VersionView>,
    pub in_force_cut_names: Vec<&'static str>,
    pub scheduled: Option<&'a VersionView>,
    /// Newest first.
    pub history: Vec<&'a VersionView>,
    pub open: Option<&'a ProposalView>,
    pub closed_proposals: Vec<ClosedProposal>,
    /// The zone strip (SVG): the version in force, the scheduled one and the open proposal.
    pub strip: String,
}

impl PageData for MetricDetail<'_> {
    const TEMPLATE: &'static str = "metric_detail.html";
}

pub async fn detail(on: OnMetric<PageQuery<SavedQuery>>) -> Result<Response, PageError> {
    let OnMetric {
        state,
        session,
        metric,
        input: PageQuery(query),
    } = on;
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
    let data = MetricDetail {
        shown: MetricEvidence {
            metric: &metric,
            evidence: &evidence,
        },
        can_edit: may_edit(&session, &metric),
        can_propose,
        can_upload: session.user.roles.has(Role::Admin) || metric.is_owner(&session.user.username),
        saved,
        uploaded,
        in_force,
        in_force_cut_names: in_force
            .map(|v| v.record.content.direction().cut_names().to_vec())
            .unwrap_or_default(),
        scheduled,
        history: history.iter().rev().collect(),
        open: open_view.as_ref(),
        closed_proposals: proposals
            .iter()
            .filter(|p| !p.state.is_open())
            .map(|p| ClosedProposal {
                id: p.id,
                state: p.state,
                updated_at: p.updated_at,
                version: p.version_number,
            })
            .collect(),
        strip,
    };
    Ok(page(
        &Common::new(Some(&session), metric.name.as_str(), "register"),
        &data,
    ))
}

fn may_edit(session: &Session, metric: &Metric) -> bool {
    edit_permission(&session.user, metric, &MetricEdit::default()).is_ok()
}
