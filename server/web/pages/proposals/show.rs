//! A proposal's page and the signatory's sign-off page: the proposal with its zone strip,
//! diffs, evidence and the forms for what the reader may do next.

use axum::http::StatusCode;
use axum::response::Response;
use serde::Serialize;

use super::{DoneQuery, OnProposal, done_message};
use crate::charts::zone_strip::{StripRow, zone_strip};
use crate::domain::Metric;
use crate::domain::access::Session;
use crate::domain::thresholds::{CutSet, Direction};
use crate::ops::proposals::{self as flow, ProposalView, RevisionView};
use crate::ops::versions::VersionRecord;
use crate::web::AppState;
use crate::web::error::PageError;
use crate::web::pages::evidence::{EvidenceSection, MetricEvidence};
use crate::web::pages::{Common, PageData, PageQuery, render};

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

/// The evidence section for a proposal: its latest revision beside the version it would
/// replace, over the whole history.
async fn proposal_evidence(
    state: &AppState,
    metric: &Metric,
    view: &ProposalView,
    previous: Option<&VersionRecord>,
    (from, to): (&str, &str),
) -> Result<EvidenceSection, PageError> {
    let (window, window_problem) = crate::web::pages::evidence::window(from, to);
    let latest = &view.latest_revision;
    let proposed = latest
        .direction
        .parse()
        .ok()
        .and_then(|d| CutSet::from_named(d, latest.cuts.iter().map(|(k, v)| (*k, *v))).ok());
    let shades = crate::domain::thresholds::Shades::new(i64::from(latest.shades)).ok();
    let history = crate::ops::evidence::history(&state.store, metric.clone(), window).await?;
    let now = state.store.now();
    let in_force = previous.map(|v| crate::web::pages::evidence::Shown {
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
        (Some(cuts), Some(shades)) => Some(crate::web::pages::evidence::Shown {
            caption: format!("revision {} of proposal {}", latest.number, view.id),
            short: "proposed",
            cuts: *cuts,
            shades,
        }),
        _ => None,
    };
    crate::web::pages::evidence::section_off_thread(crate::web::pages::evidence::SectionInput {
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

/// A proposal as `by` reads it, with its evidence section.
pub(super) async fn load_with_evidence(
    state: &AppState,
    by: &crate::domain::User,
    id: i64,
    window: (&str, &str),
) -> Result<(flow::ProposalRead, EvidenceSection), PageError> {
    let read = flow::get(&state.store, id, Some(by)).await?;
    let evidence = proposal_evidence(
        state,
        &read.metric,
        &read.view,
        read.previous.as_ref(),
        window,
    )
    .await?;
    Ok((read, evidence))
}

/// A proposal with its zone strip, evidence, the reader's notice or error, and its older
/// revisions (newest first).
#[derive(Debug, Serialize)]
pub struct ProposalPage<'a> {
    pub p: &'a ProposalView,
    #[serde(flatten)]
    pub shown: MetricEvidence<'a>,
    pub strip: String,
    pub notice: Option<&'a str>,
    pub error: Option<&'a str>,
    /// The latest revision's cut points, for the comment form.
    pub cut_names: Vec<&'static str>,
    pub older_revisions: Vec<&'a RevisionView>,
}

impl PageData for ProposalPage<'_> {
    const TEMPLATE: &'static str = "proposal.html";
}

#[allow(clippy::too_many_arguments)]
pub(super) fn proposal_page(
    session: &Session,
    metric: &Metric,
    view: &ProposalView,
    previous: Option<&VersionRecord>,
    evidence: &EvidenceSection,
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
    let data = ProposalPage {
        p: view,
        shown: MetricEvidence { metric, evidence },
        strip,
        notice,
        error,
        cut_names: latest
            .direction
            .parse::<Direction>()
            .map(|d| d.cut_names().to_vec())
            .unwrap_or_default(),
        older_revisions: view.revisions.iter().rev().skip(1).collect(),
    };
    let title = format!("Proposal {} for {}", view.id, metric.name);
    render(
        status,
        &Common::new(Some(session), title, "register"),
        &data,
    )
}

impl OnProposal<PageQuery<DoneQuery>> {
    /// The proposal as the reader may see it, with its evidence over the window asked for.
    async fn read_with_evidence(&self) -> Result<(flow::ProposalRead, EvidenceSection), PageError> {
        let query = &self.input.0;
        let window = (query.from.as_str(), query.to.as_str());
        load_with_evidence(&self.state, &self.session.user, self.id, window).await
    }
}

pub async fn show(on: OnProposal<PageQuery<DoneQuery>>) -> Result<Response, PageError> {
    let (read, evidence) = on.read_with_evidence().await?;
    Ok(proposal_page(
        &on.session,
        &read.metric,
        &read.view,
        read.previous.as_ref(),
        &evidence,
        done_message(&on.input.0.done),
        None,
        StatusCode::OK,
    ))
}

/// What the signatory signs: the proposal, its evidence and the signature form.
#[derive(Debug, Serialize)]
pub struct SignoffPage<'a> {
    pub p: &'a ProposalView,
    #[serde(flatten)]
    pub shown: MetricEvidence<'a>,
    pub error: Option<&'a str>,
}

impl PageData for SignoffPage<'_> {
    const TEMPLATE: &'static str = "signoff.html";
}

/// `GET /proposals/{id}/signoff`: what changes, the evidence and the signature form on one
/// page for the signatory.
pub async fn signoff_page(on: OnProposal<PageQuery<DoneQuery>>) -> Result<Response, PageError> {
    let (flow::ProposalRead { view, metric, .. }, evidence) = on.read_with_evidence().await?;
    let data = SignoffPage {
        p: &view,
        shown: MetricEvidence {
            metric: &metric,
            evidence: &evidence,
        },
        error: None,
    };
    let title = format!("Sign off proposal {} for {}", view.id, metric.name);
    Ok(render(
        StatusCode::OK,
        &Common::new(Some(&on.session), title, "register"),
        &data,
    ))
}
