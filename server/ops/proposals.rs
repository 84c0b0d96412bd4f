//! The agreement workflow, carried out: each step runs in one write transaction that reads
//! the proposal as it stands, applies the rules of `engine::workflow`, writes the change and
//! its event, and (when the last requirement is met) records the new version.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};
use serde_json::json;

use super::{OpError, OpResult};
use crate::domain::Metric;
use crate::domain::Person;
use crate::domain::Problems;
use crate::domain::User;
use crate::domain::proposal::{
    ContentInput, ProposalState, ThresholdContent, Verdict, cuts_object, validate_content,
};
use crate::domain::text;
use crate::domain::{Role, Timestamp};
use crate::engine::canonical::{canonical_text, content_hash, unified_diff};
use crate::engine::changes::{FieldChanges, compare};
use crate::engine::workflow::{self, Decision, Refusal, StillNeeded};
use crate::store::metrics;
use crate::store::proposals::{self as records, NewRevision, ProposalBundle};
use crate::store::versions::{self, NewVersion, VersionRecord};
use crate::store::{Actor, Store, StoreError, WriteTx, policy};

/// What a sign-off means, recorded with it.
pub const SIGNOFF_MEANING: &str = "approved as signatory";
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

fn refusal(r: Refusal) -> OpError {
    match r {
        Refusal::NotAllowed(m) | Refusal::SeparationOfDuties(m) => OpError::Forbidden(m),
        Refusal::Conflict(m) => OpError::Conflict(m),
    }
}

fn single(field: &str, message: impl Into<String>) -> OpError {
    let mut p = Problems::default();
    p.add(field, message.into());
    OpError::Invalid(p)
}

fn person_json(p: &Person) -> serde_json::Value {
    json!({"username": p.username, "display_name": p.display_name})
}

fn actor_of(user: &User) -> Actor {
    Actor::User(user.username.to_string())
}

fn rules_actor<'a>(user: &'a User, metric: &Metric) -> workflow::Actor<'a> {
    workflow::Actor {
        username: user.username.as_str(),
        roles: &user.roles,
        owns_metric: metric.is_owner(&user.username),
    }
}

/// A version may not take effect before the latest approved version does.
fn check_effective(
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
fn hash_named<'a>(field: &str, text: &'a str) -> OpResult<&'a str> {
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

fn content_json(c: &ThresholdContent) -> serde_json::Value {
    json!({
        "direction": c.direction().as_str(),
        "cuts": cuts_object(&c.cuts),
        "shades": c.shades.get(),
        "unit": c.unit,
        "effective_from": c.effective_from,
        "rationale": c.rationale,
    })
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

/// Loads the proposal and its metric inside the write transaction.
async fn load(w: &mut WriteTx, id: i64) -> OpResult<(ProposalBundle, Metric)> {
    let bundle = records::bundle(w.conn(), id)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("no proposal with id {id}")))?;
    let metric = metrics::get_for_update(w, &bundle.proposal.metric_key).await?;
    Ok((bundle, metric))
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

/// `POST .../submit`: draft or sent back (after a new revision) to in review.
pub async fn submit(store: &Store, by: &User, id: i64) -> OpResult<()> {
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    let revised = bundle
        .proposal
        .sent_back_revision
        .is_none_or(|sent| bundle.latest().number > sent);
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

/// The approvals that count for the latest revision: approve verdicts on it by distinct,
/// active reviewers who wrote no revision of it.
fn counted_approvals(bundle: &ProposalBundle) -> Vec<&Person> {
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
fn counted_signoff(bundle: &ProposalBundle) -> Option<&crate::store::proposals::SignoffRecord> {
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
fn changes_and_reasons(
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

fn still_needed(
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

/// Lets a decision through its rule, or refuses it. Separation-of-duties refusals are
/// recorded (as `action`) in the transaction, which then commits with nothing else in it.
async fn passed(
    mut w: WriteTx,
    rule: workflow::Rule,
    by: &User,
    metric: &Metric,
    action: &str,
    bundle: &ProposalBundle,
) -> OpResult<WriteTx> {
    match rule {
        Ok(()) => Ok(w),
        Err(Refusal::SeparationOfDuties(reason)) => {
            let payload = json!({
                "proposal": bundle.proposal.id,
                "revision": bundle.latest().number,
                "reason": reason,
            });
            w.record(&actor_of(by), action, &metric.subject(), payload)
                .await?;
            w.commit().await?;
            Err(OpError::Forbidden(reason))
        }
        Err(other) => Err(refusal(other)),
    }
}

/// Approves the proposal and records its version when nothing more is needed; otherwise it
/// stays in review.
async fn approve_if_complete(
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

fn decision<'a>(bundle: &'a ProposalBundle, by: &User, given_hash: &'a str) -> Decision<'a> {
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

/// `POST .../reviews`: a verdict on the latest revision.
pub async fn review(
    store: &Store,
    by: &User,
    id: i64,
    verdict: Verdict,
    revision_hash: &str,
    comment: &str,
) -> OpResult<Outcome> {
    let revision_hash = hash_named("revision_hash", revision_hash)?;
    let comment = text::multi_line("comment", comment, 0, text::RATIONALE_MAX)
        .map_err(|e| single("comment", e.to_string()))?;
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    let d = decision(&bundle, by, revision_hash);
    let rule = workflow::may_give_verdict(rules_actor(by, &metric), verdict, &d);
    let mut w = passed(w, rule, by, &metric, "review.refused", &bundle).await?;
    let latest = bundle.latest();
    records::insert_review(
        &mut w,
        id,
        latest.number,
        &latest.content_hash,
        by.id,
        verdict,
        &comment,
    )
    .await?;
    w.record(
        &actor_of(by),
        "review.given",
        &metric.subject(),
        json!({"proposal": id, "revision": latest.number, "hash": latest.content_hash, "verdict": verdict.as_str(), "comment": comment}),
    )
    .await?;
    let outcome = match verdict {
        Verdict::SendBack => {
            records::mark_sent_back(&mut w, id, latest.number).await?;
            Outcome {
                state: ProposalState::SentBack,
                version: None,
            }
        }
        Verdict::Approve => approve_if_complete(&mut w, by, id, &metric).await?,
    };
    w.commit().await?;
    Ok(outcome)
}

/// The sign-off's rule, decided in `w` on the proposal as it stands: the transaction back
/// when the caller may sign now, with the proposal, its metric and why a sign-off is needed.
/// A separation-of-duties refusal is recorded (and committed) as `signoff.refused`.
async fn signoff_allowed(
    mut w: WriteTx,
    by: &User,
    id: i64,
    revision_hash: &str,
) -> OpResult<(WriteTx, ProposalBundle, Metric, Vec<String>)> {
    let (bundle, metric) = load(&mut w, id).await?;
    let previous = versions::latest(w.conn(), metric.id).await?;
    let (_, reasons) = changes_and_reasons(&bundle, previous.as_ref());
    let d = decision(&bundle, by, revision_hash);
    let rule = workflow::may_sign_off(rules_actor(by, &metric), &d, !reasons.is_empty());
    let w = passed(w, rule, by, &metric, "signoff.refused", &bundle).await?;
    Ok((w, bundle, metric, reasons))
}

/// `POST .../signoff`: a signatory signs the latest revision off, re-entering their password.
pub async fn sign_off(
    store: &Store,
    by: &User,
    id: i64,
    revision_hash: &str,
    password: &str,
) -> OpResult<Outcome> {
    let revision_hash = hash_named("revision_hash", revision_hash)?;
    // Who and when come before the password: the wrong person (403) or the right person at
    // the wrong moment (409) is refused whatever password came, so the answer tells nothing
    // about the password, and no failed attempt is recorded or counted for someone who may
    // not sign. This check writes nothing; committing only ends its transaction and lock.
    let (checked, ..) = signoff_allowed(store.begin_write().await?, by, id, revision_hash).await?;
    checked.commit().await?;
    // A fresh authentication, throttled like sign-in, outside the write lock (hashing
    // takes tens of milliseconds).
    super::access::check_password(
        store,
        by.username.as_str(),
        password,
        super::access::Purpose::SignOff { proposal: id },
    )
    .await?;
    // Decided again in the transaction that writes: another step may have come in between.
    let (mut w, bundle, metric, reasons) =
        signoff_allowed(store.begin_write().await?, by, id, revision_hash).await?;
    let latest = bundle.latest();
    records::insert_signoff(
        &mut w,
        id,
        latest.number,
        &latest.content_hash,
        by.id,
        &by.display_name,
        SIGNOFF_MEANING,
    )
    .await?;
    w.record(
        &actor_of(by),
        "signoff.given",
        &metric.subject(),
        json!({"proposal": id, "revision": latest.number, "hash": latest.content_hash, "signer": by.display_name, "meaning": SIGNOFF_MEANING, "reasons": reasons}),
    )
    .await?;
    let outcome = approve_if_complete(&mut w, by, id, &metric).await?;
    w.commit().await?;
    Ok(outcome)
}

/// `POST .../withdraw`: the author or an owner, before approval.
pub async fn withdraw(store: &Store, by: &User, id: i64, reason: &str) -> OpResult<()> {
    let reason = text::multi_line("reason", reason, 0, REASON_MAX)
        .map_err(|e| single("reason", e.to_string()))?;
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    let is_author = bundle.proposal.author.id == by.id;
    workflow::may_withdraw(rules_actor(by, &metric), is_author, bundle.proposal.state)
        .map_err(refusal)?;
    records::set_state(&mut w, id, ProposalState::Withdrawn, &reason).await?;
    w.record(
        &actor_of(by),
        "proposal.withdrawn",
        &metric.subject(),
        json!({"proposal": id, "reason": reason}),
    )
    .await?;
    w.commit().await?;
    Ok(())
}

/// `POST .../reject`: a reviewer, signatory or admin, while in review, with a reason.
pub async fn reject(store: &Store, by: &User, id: i64, reason: &str) -> OpResult<()> {
    let reason = text::multi_line("reason", reason, 1, REASON_MAX)
        .map_err(|e| single("reason", e.to_string()))?;
    if reason.trim().is_empty() {
        return Err(single("reason", "give the reason for rejecting"));
    }
    let mut w = store.begin_write().await?;
    let (bundle, metric) = load(&mut w, id).await?;
    workflow::may_reject(rules_actor(by, &metric), bundle.proposal.state).map_err(refusal)?;
    records::set_state(&mut w, id, ProposalState::Rejected, &reason).await?;
    w.record(
        &actor_of(by),
        "proposal.rejected",
        &metric.subject(),
        json!({"proposal": id, "reason": reason}),
    )
    .await?;
    w.commit().await?;
    Ok(())
}

/// The approval policy: how many current reviewer approvals a proposal needs.
pub async fn reviewers_required(store: &Store) -> OpResult<u32> {
    Ok(policy::reviewers_required(&mut store.read().await?).await?)
}

/// Changes the approval policy (admins or the operator), recorded with before and after.
pub async fn set_reviewers_required(
    store: &Store,
    by: super::users::By<'_>,
    n: i64,
) -> OpResult<i64> {
    if let super::users::By::Person(u) = by
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

// ----- reading -----

#[derive(Clone, Debug, Serialize)]
pub struct RevisionView {
    pub number: i64,
    pub hash: String,
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
    pub author: serde_json::Value,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug, Serialize)]
pub struct ReviewView {
    pub reviewer: serde_json::Value,
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

#[derive(Clone, Debug, Serialize)]
pub struct SignoffView {
    pub signer: serde_json::Value,
    /// The display name frozen at signing.
    pub signed_as: String,
    pub meaning: String,
    pub revision_number: i64,
    pub revision_hash: String,
    pub stale: bool,
    pub counted: bool,
    pub created_at: Timestamp,
}

#[derive(Clone, Debug, Serialize)]
pub struct CommentView {
    pub author: serde_json::Value,
    pub cut: Option<String>,
    pub body: String,
    pub revision_number: i64,
    pub created_at: Timestamp,
}

/// A proposal as the API answers it and the page shows it.
#[derive(Clone, Debug, Serialize)]
pub struct ProposalView {
    pub id: i64,
    pub metric: String,
    pub state: ProposalState,
    pub author: serde_json::Value,
    pub created_at: Timestamp,
    pub updated_at: Timestamp,
    pub closed_at: Option<Timestamp>,
    pub close_reason: String,
    /// The revision that was sent back, if it was: resubmitting needs a later one.
    pub sent_back_revision: Option<i64>,
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
    pub still_needed_text: String,
    pub reviewers_required: u32,
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
        author: person_json(&r.author),
        created_at: r.created_at,
    }
}

/// Reads a proposal with everything said about it; anyone signed in may.
pub async fn get(store: &Store, id: i64) -> OpResult<(ProposalView, Option<VersionRecord>)> {
    let mut conn = store.read().await?;
    let bundle = records::bundle(&mut conn, id)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("no proposal with id {id}")))?;
    let required = policy::reviewers_required(&mut conn).await?;
    let previous = compared_version(&mut conn, &bundle.proposal).await?;
    Ok((view(&bundle, required, previous.as_ref()), previous))
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
        author: person_json(&p.author),
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
                reviewer: person_json(&r.reviewer),
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
                signer: person_json(&s.signer),
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
                author: person_json(&c.author),
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
    }
}

/// A line in someone's inbox.
#[derive(Clone, Debug, Serialize)]
pub struct InboxItem {
    pub proposal: i64,
    pub metric: String,
    pub state: ProposalState,
    pub updated_at: Timestamp,
    pub why: String,
}

/// Proposals waiting for this person: to review, to sign off, or (as owner) to act on.
#[derive(Clone, Debug, Default, Serialize)]
pub struct Inbox {
    pub to_review: Vec<InboxItem>,
    pub to_sign: Vec<InboxItem>,
    pub mine: Vec<InboxItem>,
}

pub async fn inbox(store: &Store, by: &User) -> OpResult<Inbox> {
    let mut conn = store.read().await?;
    let required = policy::reviewers_required(&mut conn).await?;
    let open = records::in_states(
        &mut conn,
        &[
            ProposalState::Draft,
            ProposalState::InReview,
            ProposalState::SentBack,
        ],
    )
    .await?;
    let mut inbox = Inbox::default();
    for p in open {
        let Some(bundle) = records::bundle(&mut conn, p.id).await? else {
            continue;
        };
        let metric = metrics::find(store, &p.metric_key).await?;
        let owns = metric.as_ref().is_some_and(|m| m.is_owner(&by.username));
        let previous = versions::latest(&mut conn, p.metric_id).await?;
        let needed = still_needed(&bundle, required, previous.as_ref());
        let item = |why: String| InboxItem {
            proposal: p.id,
            metric: p.metric_key.clone(),
            state: p.state,
            updated_at: p.updated_at,
            why,
        };
        let author = bundle.is_author(&by.username);
        let d = decision(&bundle, by, &bundle.latest().content_hash);
        if p.state == ProposalState::InReview {
            if by.roles.has(Role::Reviewer)
                && !author
                && !d.approved_latest
                && !d.signed_latest
                && needed.approvals > 0
            {
                inbox.to_review.push(item(needed.describe()));
            }
            if by.roles.has(Role::Signatory)
                && !author
                && !d.approved_latest
                && !d.signed_latest
                && needed.signoff
            {
                inbox.to_sign.push(item(needed.describe()));
            }
        }
        if owns || p.author.id == by.id {
            let why = match p.state {
                ProposalState::Draft => "draft: submit it for review when ready".to_string(),
                ProposalState::SentBack => "sent back: revise it and submit again".to_string(),
                _ => format!("in review: {}", needed.describe()),
            };
            inbox.mine.push(item(why));
        }
    }
    Ok(inbox)
}
