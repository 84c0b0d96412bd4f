//! Reviewers' verdicts and signatories' sign-offs: each decided by `engine::workflow` on the
//! proposal as it stands inside the write transaction, and completing the approval when it
//! is the last requirement.

use serde_json::json;

use super::approval::{Outcome, approve_if_complete, changes_and_reasons, decision};
use super::steps::hash_named;
use super::{actor_of, load, refusal, rules_actor, single};
use crate::domain::Metric;
use crate::domain::User;
use crate::domain::proposal::{ProposalState, Verdict};
use crate::domain::text;
use crate::engine::workflow::{self, Refusal};
use crate::ops::{OpError, OpResult};
use crate::store::proposals::{self as records, ProposalBundle};
use crate::store::versions::{self};
use crate::store::{Store, WriteTx};

/// What a sign-off means, recorded with it.
pub const SIGNOFF_MEANING: &str = "approved as signatory";

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
    crate::ops::access::check_password(
        store,
        by.username.as_str(),
        password,
        crate::ops::access::Purpose::SignOff { proposal: id },
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
