//! The steps that change a proposal's text or its state: proposing, revising, submitting,
//! commenting, withdrawing and rejecting. Each runs in one write transaction with its event.

use std::collections::BTreeMap;

use serde::Deserialize;
use serde_json::json;

use super::{actor_of, load, refusal, rules_actor, single};
use crate::domain::Metric;
use crate::domain::Timestamp;
use crate::domain::User;
use crate::domain::proposal::{
    ContentInput, ProposalState, ThresholdContent, Verdict, cuts_object, validate_content,
};
use crate::domain::text;
use crate::engine::canonical::{canonical_text, content_hash, unified_diff};
use crate::engine::workflow::{self};
use crate::ops::{OpError, OpResult};
use crate::store::metrics;
use crate::store::proposals::{self as records, NewRevision, ProposalBundle};
use crate::store::versions::{self, VersionRecord};
use crate::store::{Store, WriteTx};

pub const NOTE_MAX: usize = 2_000;
pub const REASON_MAX: usize = 2_000;

/// A new revision as submitted: the content plus an edit note, and optionally the hash of
/// the revision it was written against (a stale one answers 409: someone saved in between).
/// The content fields repeat [`ContentInput`]'s because serde cannot both flatten a struct
/// and deny unknown fields.
#[derive(Clone, Debug, Default, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct RevisionInput {
    pub direction: String,
    pub cuts: BTreeMap<String, f64>,
    #[serde(default)]
    pub shades: Option<i64>,
    #[serde(default)]
    pub unit: Option<String>,
    #[serde(default)]
    pub effective_from: Option<String>,
    pub rationale: String,
    pub note: String,
    #[serde(default)]
    pub base_revision_hash: Option<String>,
}

impl RevisionInput {
    pub fn content(&self) -> ContentInput {
        ContentInput {
            direction: self.direction.clone(),
            cuts: self.cuts.clone(),
            shades: self.shades,
            unit: self.unit.clone(),
            effective_from: self.effective_from.clone(),
            rationale: self.rationale.clone(),
        }
    }
}

/// A version may not take effect before the latest approved version does.
pub(super) fn check_effective(
    content: &ThresholdContent,
    latest: Option<&VersionRecord>,
    now: Timestamp,
) -> Result<(), String> {
    let Some(latest) = latest else { return Ok(()) };
    let effective = content.effective_from.unwrap_or(now);
    if effective < latest.effective_from {
        Err(format!(
            "effective_from {} is earlier than version {}'s effective time {}; history is not re-ordered",
            content
                .effective_from
                .map_or_else(|| format!("on approval ({effective})"), |t| t.to_string()),
            latest.number,
            latest.effective_from
        ))
    } else {
        Ok(())
    }
}

fn validate(
    input: &ContentInput,
    metric: &Metric,
    latest: Option<&VersionRecord>,
    now: Timestamp,
) -> OpResult<ThresholdContent> {
    let content = validate_content(input, &metric.unit)?;
    // A fixed time can be checked now; "on approval" is checked when approval comes.
    if content.effective_from.is_some() {
        check_effective(&content, latest, now).map_err(|m| single("effective_from", m))?;
    }
    Ok(content)
}

/// A revision hash named by the request, checked for its form before anything else.
pub(super) fn hash_named<'a>(field: &str, text: &'a str) -> OpResult<&'a str> {
    crate::domain::proposal::revision_hash(field, text).map_err(|m| single(field, m))
}

fn note(text_in: &str) -> OpResult<String> {
    text::multi_line("note", text_in, 1, NOTE_MAX).map_err(|e| single("note", e.to_string()))
}

/// A revision about to be written.
struct Draft<'a> {
    proposal_id: i64,
    number: i64,
    content: &'a ThresholdContent,
    /// The previous revision's canonical text.
    previous: Option<&'a str>,
    /// The latest approved version, which the revision is also compared with.
    base: Option<&'a VersionRecord>,
    note: &'a str,
    author: &'a User,
}

/// Writes a revision with its canonical text, hash and both diffs; returns the text and hash.
async fn write_revision(w: &mut WriteTx, d: Draft<'_>) -> OpResult<(String, String)> {
    let text = canonical_text(d.content);
    let hash = content_hash(&text);
    let diff_previous = d
        .previous
        .map(|p| unified_diff(p, &text))
        .unwrap_or_default();
    let diff_base = d
        .base
        .map(|b| unified_diff(&b.canonical_text, &text))
        .unwrap_or_default();
    records::insert_revision(
        w,
        &NewRevision {
            proposal_id: d.proposal_id,
            number: d.number,
            content: d.content,
            canonical_text: &text,
            content_hash: &hash,
            diff_from_previous: &diff_previous,
            base_version: d.base.map(|b| b.number),
            diff_from_base: &diff_base,
            note: d.note,
            author_id: d.author.id,
        },
    )
    .await?;
    Ok((text, hash))
}

pub(super) fn content_json(c: &ThresholdContent) -> serde_json::Value {
    json!({
        "direction": c.direction().as_str(),
        "cuts": cuts_object(&c.cuts),
        "shades": c.shades.get(),
        "unit": c.unit,
        "effective_from": c.effective_from,
        "rationale": c.rationale,
    })
}

/// Whether `by` may propose thresholds for the metric (its owners, or an admin).
pub fn may_propose(by: &User, metric: &Metric) -> OpResult<()> {
    workflow::may_propose(rules_actor(by, metric)).map_err(refusal)
}

/// `POST /api/v1/metrics/{key}/proposals`: an owner (or admin) proposes a version.
pub async fn propose(store: &Store, by: &User, key: &str, input: &ContentInput) -> OpResult<i64> {
    let mut w = store.begin_write().await?;
    let metric = metrics::get_for_update(&mut w, key).await?;
    workflow::may_propose(rules_actor(by, &metric)).map_err(refusal)?;
    if let Some(open) = records::open_for_metric(w.conn(), metric.id).await? {
        return Err(OpError::Conflict(format!(
            "metric {key} already has an open proposal ({}): /api/v1/proposals/{}",
            open.state.as_str(),
            open.id
        )));
    }
    let latest = versions::latest(w.conn(), metric.id).await?;
    let content = validate(input, &metric, latest.as_ref(), w.now())?;
    let id = records::insert_proposal(&mut w, metric.id, by.id).await?;
    let draft = Draft {
        proposal_id: id,
        number: 1,
        content: &content,
        previous: None,
        base: latest.as_ref(),
        note: "first revision",
        author: by,
    };
    let (_, hash) = write_revision(&mut w, draft).await?;
    w.record(
        &actor_of(by),
        "proposal.created",
        &metric.subject(),
        json!({"proposal": id, "revision": 1, "hash": hash, "content": content_json(&content)}),
    )
    .await?;
    w.commit().await?;
    Ok(id)
}

/// `PUT /api/v1/proposals/{id}`: a new revision. Earlier approvals and sign-offs become stale.
pub async fn revise(store: &Store, by: &User, id: i64, input: &RevisionInput) -> OpResult<()> {
    let base_hash = input
        .base_revision_hash
        .as_deref()
        .filter(|h| !h.is_empty());
    if let Some(h) = base_hash {
        hash_named("base_revision_hash", h)?;
    }
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    let state = bundle.proposal.state;
    workflow::may_revise(rules_actor(by, &metric), state).map_err(refusal)?;
    let latest_rev = bundle.latest();
    if let Some(base) = base_hash
        && base != latest_rev.content_hash
    {
        return Err(OpError::Conflict(format!(
            "base_revision_hash {base} is not the latest revision ({}, revision {}): someone saved in between; read it and try again",
            latest_rev.content_hash, latest_rev.number
        )));
    }
    let note = note(&input.note)?;
    let latest_version = versions::latest(w.conn(), metric.id).await?;
    let content = validate(&input.content(), &metric, latest_version.as_ref(), w.now())?;
    let number = latest_rev.number + 1;
    let draft = Draft {
        proposal_id: id,
        number,
        content: &content,
        previous: Some(&latest_rev.canonical_text),
        base: latest_version.as_ref(),
        note: &note,
        author: by,
    };
    let (_, hash) = write_revision(&mut w, draft).await?;
    // What this revision made stale, for the record.
    let stale: Vec<_> = bundle
        .reviews
        .iter()
        .filter(|r| r.verdict == Verdict::Approve && r.revision_number == latest_rev.number)
        .map(|r| json!({"kind": "approval", "by": r.reviewer.username, "revision": r.revision_number}))
        .chain(
            bundle
                .signoffs
                .iter()
                .filter(|s| s.revision_number == latest_rev.number)
                .map(|s| json!({"kind": "signoff", "by": s.signer.username, "revision": s.revision_number})),
        )
        .collect();
    w.record(
        &actor_of(by),
        "revision.saved",
        &metric.subject(),
        json!({"proposal": id, "revision": number, "hash": hash, "note": note, "made_stale": stale, "content": content_json(&content)}),
    )
    .await?;
    w.commit().await?;
    Ok(())
}

/// Whether a proposal that was sent back has a revision saved since (one never sent back
/// counts as revised).
pub(super) fn revised_since_sent_back(bundle: &ProposalBundle) -> bool {
    bundle
        .proposal
        .sent_back_revision
        .is_none_or(|sent| bundle.latest().number > sent)
}

/// `POST .../submit`: draft or sent back (after a new revision) to in review.
pub async fn submit(store: &Store, by: &User, id: i64) -> OpResult<()> {
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    let revised = revised_since_sent_back(&bundle);
    workflow::may_submit(rules_actor(by, &metric), bundle.proposal.state, revised)
        .map_err(refusal)?;
    records::set_state(&mut w, id, ProposalState::InReview, "").await?;
    w.record(
        &actor_of(by),
        "proposal.submitted",
        &metric.subject(),
        json!({"proposal": id, "revision": bundle.latest().number, "hash": bundle.latest().content_hash}),
    )
    .await?;
    w.commit().await?;
    Ok(())
}

/// `POST .../comments`: anyone signed in, optionally on one named cut point.
pub async fn comment(
    store: &Store,
    by: &User,
    id: i64,
    body: &str,
    cut: Option<&str>,
) -> OpResult<i64> {
    let body = text::multi_line("body", body, 1, text::RATIONALE_MAX)
        .map_err(|e| single("body", e.to_string()))?;
    if body.trim().is_empty() {
        return Err(single("body", "body must not be empty"));
    }
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    let latest = bundle.latest();
    let cut = cut.map(str::trim).filter(|c| !c.is_empty());
    if let Some(c) = cut {
        let names = latest.content.direction().cut_names();
        if !names.contains(&c) {
            return Err(single(
                "cut",
                format!(
                    "unknown cut point {c:?} for {}: expected {}",
                    latest.content.direction(),
                    names.join(", ")
                ),
            ));
        }
    }
    let comment_id = records::insert_comment(&mut w, id, latest.number, by.id, cut, &body).await?;
    w.record(
        &actor_of(by),
        "comment.added",
        &metric.subject(),
        json!({"proposal": id, "revision": latest.number, "cut": cut, "body": body}),
    )
    .await?;
    w.commit().await?;
    Ok(comment_id)
}

/// `POST .../withdraw`: the author or an owner, before approval.
pub async fn withdraw(store: &Store, by: &User, id: i64, reason: &str) -> OpResult<()> {
    let reason = text::multi_line("reason", reason, 0, REASON_MAX)
        .map_err(|e| single("reason", e.to_string()))?;
    close(
        store,
        by,
        id,
        ProposalState::Withdrawn,
        &reason,
        |by, metric, bundle| {
            let is_author = bundle.proposal.author.id == by.id;
            workflow::may_withdraw(rules_actor(by, metric), is_author, bundle.proposal.state)
        },
    )
    .await
}

/// `POST .../reject`: a reviewer, signatory or admin, while in review, with a reason.
pub async fn reject(store: &Store, by: &User, id: i64, reason: &str) -> OpResult<()> {
    let reason = text::multi_line("reason", reason, 1, REASON_MAX)
        .map_err(|e| single("reason", e.to_string()))?;
    if reason.trim().is_empty() {
        return Err(single("reason", "give the reason for rejecting"));
    }
    close(
        store,
        by,
        id,
        ProposalState::Rejected,
        &reason,
        |by, metric, bundle| workflow::may_reject(rules_actor(by, metric), bundle.proposal.state),
    )
    .await
}

/// Closes a proposal (withdrawn or rejected) with its reason, when `rule` lets `by` do it on
/// the proposal as it stands in the write transaction.
async fn close(
    store: &Store,
    by: &User,
    id: i64,
    state: ProposalState,
    reason: &str,
    rule: impl FnOnce(&User, &Metric, &ProposalBundle) -> workflow::Rule,
) -> OpResult<()> {
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    rule(by, &metric, &bundle).map_err(refusal)?;
    records::set_state(&mut w, id, state, reason).await?;
    w.record(
        &actor_of(by),
        &format!("proposal.{}", state.as_str()),
        &metric.subject(),
        json!({"proposal": id, "reason": reason}),
    )
    .await?;
    w.commit().await?;
    Ok(())
}
