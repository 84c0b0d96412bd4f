//! The approval arithmetic: which approvals and sign-off count for the latest revision, what
//! is still needed, and recording the version when nothing is; the approval policy.

use serde::Serialize;
use serde_json::json;

use super::actor_of;
use super::steps::{check_effective, content_json};
use crate::domain::Metric;
use crate::domain::Person;
use crate::domain::Role;
use crate::domain::User;
use crate::domain::proposal::{ProposalState, ThresholdContent, Verdict};
use crate::engine::canonical::canonical_text;
use crate::engine::changes::{FieldChanges, compare};
use crate::engine::workflow::{self, Decision, StillNeeded};
use crate::ops::{OpError, OpResult};
use crate::store::proposals::{self as records, ProposalBundle};
use crate::store::versions::{self, NewVersion, VersionRecord};
use crate::store::{Store, WriteTx, policy};

/// The approvals that count for the latest revision: approve verdicts on it by distinct,
/// active reviewers who wrote no revision of it.
pub(super) fn counted_approvals(bundle: &ProposalBundle) -> Vec<&Person> {
    let latest = bundle.latest().number;
    let mut out: Vec<&Person> = Vec::new();
    for r in &bundle.reviews {
        let p = &r.reviewer;
        if r.verdict == Verdict::Approve
            && r.revision_number == latest
            && p.active
            && p.roles.has(Role::Reviewer)
            && !bundle.is_author(&p.username)
            && !out.iter().any(|o| o.id == p.id)
        {
            out.push(p);
        }
    }
    out
}

/// The sign-off that counts for the latest revision, if any.
pub(super) fn counted_signoff(
    bundle: &ProposalBundle,
) -> Option<&crate::store::proposals::SignoffRecord> {
    let latest = bundle.latest().number;
    let approvers = counted_approvals(bundle);
    bundle.signoffs.iter().find(|s| {
        s.revision_number == latest
            && s.signer.active
            && s.signer.roles.has(Role::Signatory)
            && !bundle.is_author(&s.signer.username)
            && !approvers.iter().any(|a| a.id == s.signer.id)
    })
}

/// What the latest revision changes, against the version that precedes it in valid time.
pub(super) fn changes_and_reasons(
    bundle: &ProposalBundle,
    previous: Option<&VersionRecord>,
) -> (FieldChanges, Vec<String>) {
    let changes = compare(
        previous.map(|v| &v.content.cuts),
        &bundle.latest().content.cuts,
    );
    let reasons = workflow::signoff_reasons(previous.map(|v| &v.content.cuts), &changes);
    (changes, reasons)
}

pub(super) fn still_needed(
    bundle: &ProposalBundle,
    required: u32,
    previous: Option<&VersionRecord>,
) -> StillNeeded {
    let (_, reasons) = changes_and_reasons(bundle, previous);
    StillNeeded::new(
        required,
        counted_approvals(bundle).len() as u32,
        reasons,
        counted_signoff(bundle).is_some(),
    )
}

/// Approves the proposal and records its version when nothing more is needed; otherwise it
/// stays in review.
pub(super) async fn approve_if_complete(
    w: &mut WriteTx,
    by: &User,
    id: i64,
    metric: &Metric,
) -> OpResult<Outcome> {
    let bundle = records::bundle(w.conn(), id)
        .await?
        .expect("the proposal exists");
    let required = policy::reviewers_required(w.conn()).await?;
    let previous = versions::latest(w.conn(), metric.id).await?;
    let needed = still_needed(&bundle, required, previous.as_ref());
    if !needed.is_met() {
        return Ok(Outcome {
            state: ProposalState::InReview,
            version: None,
        });
    }
    let latest = bundle.latest();
    let now = w.now();
    check_effective(&latest.content, previous.as_ref(), now).map_err(|m| {
        OpError::Conflict(format!("{m}: save a revision with a later effective time"))
    })?;
    let effective_from = latest.content.effective_from.unwrap_or(now);
    let approvers: Vec<String> = counted_approvals(&bundle)
        .iter()
        .map(|p| p.display_name.clone())
        .collect();
    let signoff = counted_signoff(&bundle);
    let version_content = ThresholdContent {
        effective_from: Some(effective_from),
        ..latest.content.clone()
    };
    let version_text = canonical_text(&version_content);
    let number = versions::next_number(w, metric.id).await?;
    records::mark_approved(w, id, number).await?;
    let approval_seq = w
        .record(
            &actor_of(by),
            "version.approved",
            &metric.subject(),
            json!({
                "proposal": id,
                "version": number,
                "revision": latest.number,
                "hash": latest.content_hash,
                "approvers": approvers,
                "signatory": signoff.map(|s| s.signer_name.clone()),
                "effective_from": effective_from,
                "approved_at": now,
                "scheduled": effective_from > now,
                "retroactive": effective_from < now,
                "content": content_json(&version_content),
            }),
        )
        .await?;
    // The version names its approval event, whose hash the publisher checks it against.
    versions::insert(
        w,
        &NewVersion {
            metric_id: metric.id,
            number,
            proposal_id: id,
            revision_number: latest.number,
            revision_hash: &latest.content_hash,
            content: &version_content,
            effective_from,
            canonical_text: &version_text,
            approvers: &approvers,
            signatory: signoff.map(|s| s.signer_name.as_str()),
            metric_name: &metric.name,
            approval_seq,
        },
    )
    .await?;
    Ok(Outcome {
        state: ProposalState::Approved,
        version: Some(number),
    })
}

pub(super) fn decision<'a>(
    bundle: &'a ProposalBundle,
    by: &User,
    given_hash: &'a str,
) -> Decision<'a> {
    let latest = bundle.latest();
    Decision {
        state: bundle.proposal.state,
        is_author: bundle.is_author(&by.username),
        latest_hash: &latest.content_hash,
        given_hash,
        approved_latest: bundle.reviews.iter().any(|r| {
            r.verdict == Verdict::Approve
                && r.revision_number == latest.number
                && r.reviewer.id == by.id
        }),
        signed_latest: bundle
            .signoffs
            .iter()
            .any(|s| s.revision_number == latest.number && s.signer.id == by.id),
    }
}

/// What a decision did.
#[derive(Clone, Debug, Serialize)]
pub struct Outcome {
    pub state: ProposalState,
    /// The version recorded, when this decision completed the approval.
    pub version: Option<i64>,
}

/// The approval policy: how many current reviewer approvals a proposal needs.
pub async fn reviewers_required(store: &Store) -> OpResult<u32> {
    Ok(policy::reviewers_required(&mut store.read().await?).await?)
}

/// Changes the approval policy (admins or the operator), recorded with before and after.
pub async fn set_reviewers_required(
    store: &Store,
    by: crate::ops::users::By<'_>,
    n: i64,
) -> OpResult<i64> {
    if let crate::ops::users::By::Person(u) = by
        && !u.roles.has(Role::Admin)
    {
        return Err(OpError::Forbidden(
            "only an admin may change the approval policy".into(),
        ));
    }
    let mut w = store.begin_write().await?;
    let n = policy::set_reviewers_required(&mut w, &by.actor(), n).await?;
    w.commit().await?;
    Ok(n)
}
