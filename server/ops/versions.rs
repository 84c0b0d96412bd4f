//! Reading a metric's approved versions: the one in force, any scheduled one, and the whole
//! history with what changed from one version to the next.

use std::collections::BTreeMap;

use serde::Serialize;

use super::OpResult;
use crate::domain::Metric;
use crate::domain::proposal::cuts_object;
use crate::domain::{Direction, Timestamp};
use crate::engine::canonical::unified_diff;
use crate::engine::changes::{FieldChanges, compare};
use crate::store::Store;
use crate::store::versions;
pub use crate::store::versions::{VersionRecord, VersionStatus};

/// A version as the API and pages show it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct VersionView {
    pub number: i64,
    pub status: VersionStatus,
    #[schema(value_type = Direction)]
    pub direction: &'static str,
    /// The four cut points by name.
    pub cuts: BTreeMap<&'static str, f64>,
    pub shades: u8,
    pub unit: String,
    pub effective_from: Timestamp,
    /// When it was approved: the transaction time at which the register recorded it.
    pub approved_at: Timestamp,
    /// Approved after its effective time: a recorded retroactive change.
    pub retroactive: bool,
    pub rationale: String,
    pub approvers: Vec<String>,
    pub signatory: Option<String>,
    pub proposal_id: i64,
    pub revision_number: i64,
    pub revision_hash: String,
    pub canonical_text: String,
    /// Unified diff from the previous version's canonical text (empty for the first).
    pub diff_from_previous: String,
    pub changes: FieldChanges,
    #[serde(skip)]
    #[schema(ignore)]
    pub record: VersionRecord,
}

pub fn view(
    v: &VersionRecord,
    previous: Option<&VersionRecord>,
    status: VersionStatus,
) -> VersionView {
    VersionView {
        number: v.number,
        status,
        direction: v.content.direction().as_str(),
        cuts: cuts_object(&v.content.cuts),
        shades: v.content.shades.get(),
        unit: v.content.unit.clone(),
        effective_from: v.effective_from,
        approved_at: v.approved_at,
        retroactive: v.is_retroactive(),
        rationale: v.content.rationale.clone(),
        approvers: v.approvers.clone(),
        signatory: v.signatory.clone(),
        proposal_id: v.proposal_id,
        revision_number: v.revision_number,
        revision_hash: v.revision_hash.clone(),
        canonical_text: v.canonical_text.clone(),
        diff_from_previous: previous
            .map(|p| unified_diff(&p.canonical_text, &v.canonical_text))
            .unwrap_or_default(),
        changes: compare(previous.map(|p| &p.content.cuts), &v.content.cuts),
        record: v.clone(),
    }
}

/// Every version of the metric, oldest first, with its status now.
pub async fn history(store: &Store, metric: &Metric) -> OpResult<Vec<VersionView>> {
    let mut conn = store.read().await?;
    let all = versions::list(&mut conn, metric.id).await?;
    let statuses = versions::statuses(&all, store.now());
    Ok(all
        .iter()
        .enumerate()
        .map(|(i, v)| view(v, i.checked_sub(1).map(|p| &all[p]), statuses[i]))
        .collect())
}

/// A metric's thresholds as its page and API show them: every version, and every proposal
/// (newest first).
pub struct MetricThresholds {
    pub history: Vec<VersionView>,
    pub proposals: Vec<crate::store::proposals::ProposalRecord>,
}

impl MetricThresholds {
    pub fn open_proposal(&self) -> Option<&crate::store::proposals::ProposalRecord> {
        self.proposals.iter().find(|p| p.state.is_open())
    }
}

pub async fn thresholds(store: &Store, metric: &Metric) -> OpResult<MetricThresholds> {
    let history = history(store, metric).await?;
    let mut conn = store.read().await?;
    let proposals = crate::store::proposals::for_metric(&mut conn, metric.id).await?;
    Ok(MetricThresholds { history, proposals })
}

/// The version in force now and the scheduled one after it, if any.
pub fn current(history: &[VersionView]) -> (Option<&VersionView>, Option<&VersionView>) {
    let in_force = history.iter().find(|v| v.status == VersionStatus::InForce);
    let scheduled = history
        .iter()
        .rev()
        .find(|v| v.status == VersionStatus::Scheduled);
    (in_force, scheduled)
}
