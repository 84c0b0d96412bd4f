//! A proposal as the API answers it and the page shows it, with what the reader may do next.

use std::collections::BTreeMap;

use serde::Serialize;

use super::approval::{
    changes_and_reasons, counted_approvals, counted_signoff, decision, still_needed,
};
use super::rules_actor;
use super::steps::revised_since_sent_back;
use crate::domain::Timestamp;
use crate::domain::proposal::Verdict as V;
use crate::domain::proposal::{ProposalState, Verdict, cuts_object};
use crate::domain::{Direction, Metric, PersonRef, User};
use crate::engine::changes::FieldChanges;
use crate::engine::workflow;
use crate::engine::workflow::StillNeeded;
use crate::ops::OpResult;
use crate::store::proposals::{self as records, ProposalBundle};
use crate::store::versions::{self, VersionRecord};
use crate::store::{Store, StoreError, metrics, policy};

/// What the reader may do next with the proposal as it stands, decided by the workflow's
/// rules from ids (the same rules each step applies when it is taken).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct Allowed {
    /// Save a new revision.
    pub revise: bool,
    /// Send it for review.
    pub submit: bool,
    /// Approve the latest revision.
    pub approve: bool,
    /// Send it back to its owners.
    pub send_back: bool,
    /// Sign the latest revision off.
    pub sign: bool,
    /// Withdraw it (its author).
    pub withdraw: bool,
    /// Reject it, with a reason.
    pub reject: bool,
}

impl Allowed {
    fn decide(
        bundle: &ProposalBundle,
        by: &User,
        metric: &Metric,
        signoff_needed: bool,
    ) -> Allowed {
        let who = rules_actor(by, metric);
        let state = bundle.proposal.state;
        let d = decision(bundle, by, &bundle.latest().content_hash);
        Allowed {
            revise: workflow::may_revise(who, state).is_ok(),
            submit: workflow::may_submit(who, state, revised_since_sent_back(bundle)).is_ok(),
            approve: workflow::may_give_verdict(who, V::Approve, &d).is_ok(),
            send_back: workflow::may_give_verdict(who, V::SendBack, &d).is_ok(),
            sign: workflow::may_sign_off(who, &d, signoff_needed).is_ok(),
            withdraw: workflow::may_withdraw(who, bundle.proposal.author.id == by.id, state)
                .is_ok(),
            reject: workflow::may_reject(who, state).is_ok(),
        }
    }
}

/// One revision of a proposal: its content, how it differs from the one before and from the
/// version it was compared with, and who wrote it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct RevisionView {
    pub number: i64,
    /// The SHA-256 of the revision's canonical text: what reviews and sign-offs name.
    pub hash: String,
    #[schema(value_type = Direction)]
    pub direction: &'static str,
    pub cuts: BTreeMap<&'static str, f64>,
    pub shades: u8,
    pub unit: String,
    pub effective_from: Option<Timestamp>,
    pub rationale: String,
    pub canonical_text: String,
    pub diff_from_previous: String,
    /// The version this revision was compared with when saved (the latest approved one).
    pub base_version: Option<i64>,
    pub diff_from_base: String,
    pub note: String,
    pub author: PersonRef,
    pub created_at: Timestamp,
}

/// A reviewer's verdict on a revision.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct ReviewView {
    pub reviewer: PersonRef,
    pub verdict: Verdict,
    pub revision_number: i64,
    pub revision_hash: String,
    pub comment: String,
    /// Names a revision that is no longer the latest.
    pub stale: bool,
    /// Counts toward approval now.
    pub counted: bool,
    pub created_at: Timestamp,
}

/// A signatory's sign-off of a revision.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct SignoffView {
    pub signer: PersonRef,
    /// The display name frozen at signing.
    pub signed_as: String,
    pub meaning: String,
    pub revision_number: i64,
    pub revision_hash: String,
    pub stale: bool,
    pub counted: bool,
    pub created_at: Timestamp,
}

/// A comment on a revision, about the whole of it or one cut point.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct CommentView {
    pub author: PersonRef,
    /// The cut point it is about, by name, if one.
    pub cut: Option<String>,
    pub body: String,
    pub revision_number: i64,
    pub created_at: Timestamp,
}

/// A proposal as the API answers it and the page shows it: its revisions with their diffs,
/// reviews, sign-offs, comments, what approval still needs and what the caller may do next
/// (docs/workflow.md).
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct ProposalView {
    pub id: i64,
    /// The metric's key.
    pub metric: String,
    pub state: ProposalState,
    pub author: PersonRef,
    pub created_at: Timestamp,
    pub updated_at: Timestamp,
    pub closed_at: Option<Timestamp>,
    pub close_reason: String,
    /// The revision that was sent back, if it was: resubmitting needs a later one.
    pub sent_back_revision: Option<i64>,
    /// The version it became, once approved.
    pub version: Option<i64>,
    pub latest_revision: RevisionView,
    pub revisions: Vec<RevisionView>,
    pub reviews: Vec<ReviewView>,
    pub signoffs: Vec<SignoffView>,
    pub comments: Vec<CommentView>,
    /// What the latest revision changes against the version that precedes it.
    pub changes: FieldChanges,
    /// The version the latest revision is compared with, if any.
    pub compared_with_version: Option<i64>,
    pub still_needed: StillNeeded,
    /// `still_needed` in words.
    pub still_needed_text: String,
    /// Reviewer approvals the policy asks for.
    pub reviewers_required: u32,
    /// What the caller may do next; absent when read without a caller (the command line).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub allowed: Option<Allowed>,
}

fn revision_view(r: &crate::store::proposals::RevisionRecord) -> RevisionView {
    RevisionView {
        number: r.number,
        hash: r.content_hash.clone(),
        direction: r.content.direction().as_str(),
        cuts: cuts_object(&r.content.cuts),
        shades: r.content.shades.get(),
        unit: r.content.unit.clone(),
        effective_from: r.content.effective_from,
        rationale: r.content.rationale.clone(),
        canonical_text: r.canonical_text.clone(),
        diff_from_previous: r.diff_from_previous.clone(),
        base_version: r.base_version,
        diff_from_base: r.diff_from_base.clone(),
        note: r.note.clone(),
        author: PersonRef::from(&r.author),
        created_at: r.created_at,
    }
}

/// A proposal as read: the view, the version it is compared with, and its metric.
pub struct ProposalRead {
    pub view: ProposalView,
    pub previous: Option<VersionRecord>,
    pub metric: Metric,
}

/// Reads a proposal with everything said about it; anyone signed in may. With a reader, the
/// view says what they may do next.
pub async fn get(store: &Store, id: i64, reader: Option<&User>) -> OpResult<ProposalRead> {
    let mut conn = store.read().await?;
    let bundle = records::bundle(&mut conn, id)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("no proposal with id {id}")))?;
    let metric = metrics::get(store, &bundle.proposal.metric_key).await?;
    let required = policy::reviewers_required(&mut conn).await?;
    let previous = compared_version(&mut conn, &bundle.proposal).await?;
    let mut view = view(&bundle, required, previous.as_ref());
    view.allowed = reader
        .map(|by| Allowed::decide(&bundle, by, &metric, !view.still_needed.reasons.is_empty()));
    Ok(ProposalRead {
        view,
        previous,
        metric,
    })
}

/// The proposal, for a reader who is about to revise it: refused as the revision itself
/// would be when they may not.
pub async fn for_revision(store: &Store, id: i64, by: &User) -> OpResult<ProposalRead> {
    let read = get(store, id, Some(by)).await?;
    workflow::may_revise(rules_actor(by, &read.metric), read.view.state).map_err(super::refusal)?;
    Ok(read)
}

/// The version a proposal is compared with: the latest approved one, or for an approved
/// proposal the version before its own.
pub async fn compared_version(
    conn: &mut crate::store::Db,
    proposal: &records::ProposalRecord,
) -> OpResult<Option<VersionRecord>> {
    Ok(match proposal.version_number {
        Some(n) => versions::list(conn, proposal.metric_id)
            .await?
            .into_iter()
            .rfind(|v| v.number < n),
        None => versions::latest(conn, proposal.metric_id).await?,
    })
}

fn view(bundle: &ProposalBundle, required: u32, previous: Option<&VersionRecord>) -> ProposalView {
    let latest = bundle.latest().number;
    let counted: Vec<i64> = counted_approvals(bundle).iter().map(|p| p.id).collect();
    let counted_sign = counted_signoff(bundle).map(|s| s.id);
    let (changes, _) = changes_and_reasons(bundle, previous);
    let needed = still_needed(bundle, required, previous);
    let open = bundle.proposal.state.is_open();
    let p = &bundle.proposal;
    ProposalView {
        id: p.id,
        metric: p.metric_key.clone(),
        state: p.state,
        author: PersonRef::from(&p.author),
        created_at: p.created_at,
        updated_at: p.updated_at,
        closed_at: p.closed_at,
        close_reason: p.close_reason.clone(),
        sent_back_revision: p.sent_back_revision,
        version: p.version_number,
        latest_revision: revision_view(bundle.latest()),
        revisions: bundle.revisions.iter().map(revision_view).collect(),
        reviews: bundle
            .reviews
            .iter()
            .map(|r| ReviewView {
                reviewer: PersonRef::from(&r.reviewer),
                verdict: r.verdict,
                revision_number: r.revision_number,
                revision_hash: r.revision_hash.clone(),
                comment: r.comment.clone(),
                stale: r.revision_number != latest,
                counted: r.verdict == Verdict::Approve
                    && r.revision_number == latest
                    && counted.contains(&r.reviewer.id)
                    && (open || p.state == ProposalState::Approved),
                created_at: r.created_at,
            })
            .collect(),
        signoffs: bundle
            .signoffs
            .iter()
            .map(|s| SignoffView {
                signer: PersonRef::from(&s.signer),
                signed_as: s.signer_name.clone(),
                meaning: s.meaning.clone(),
                revision_number: s.revision_number,
                revision_hash: s.revision_hash.clone(),
                stale: s.revision_number != latest,
                counted: counted_sign == Some(s.id),
                created_at: s.created_at,
            })
            .collect(),
        comments: bundle
            .comments
            .iter()
            .map(|c| CommentView {
                author: PersonRef::from(&c.author),
                cut: c.cut.clone(),
                body: c.body.clone(),
                revision_number: c.revision_number,
                created_at: c.created_at,
            })
            .collect(),
        changes,
        compared_with_version: previous.map(|v| v.number),
        still_needed_text: needed.describe(),
        still_needed: needed,
        reviewers_required: required,
        allowed: None,
    }
}
