//! The agreement workflow, carried out: each step runs in one write transaction that reads
//! the proposal as it stands, applies the rules of `engine::workflow`, writes the change and
//! its event, and (when the last requirement is met) records the new version.
//!
//! - [`steps`]: proposing, revising, submitting, commenting, withdrawing, rejecting;
//! - [`decisions`]: verdicts and sign-offs;
//! - [`approval`]: what counts, what is still needed, recording the version, the policy;
//! - [`views`]: the proposal as read, with what the reader may do next;
//! - [`inbox`]: what waits for each person.

mod approval;
mod decisions;
mod inbox;
mod steps;
mod views;

pub use approval::{Outcome, reviewers_required, set_reviewers_required};
pub use decisions::{SIGNOFF_MEANING, review, sign_off};
pub use inbox::{Inbox, InboxItem, inbox};
pub use steps::{
    NOTE_MAX, REASON_MAX, RevisionInput, comment, may_propose, propose, reject, revise, submit,
    withdraw,
};
pub use views::{
    Allowed, CommentView, ProposalRead, ProposalView, ReviewView, RevisionView, SignoffView,
    compared_version, for_revision, get,
};

use super::{OpError, OpResult};
use crate::domain::Metric;
use crate::domain::Problems;
use crate::domain::User;
use crate::engine::workflow::{self, Refusal};
use crate::store::proposals::{self as records, ProposalBundle};
use crate::store::{Actor, StoreError, WriteTx, metrics};

pub(super) fn refusal(r: Refusal) -> OpError {
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

/// Loads the proposal and its metric inside the write transaction.
async fn load(w: &mut WriteTx, id: i64) -> OpResult<(ProposalBundle, Metric)> {
    let bundle = records::bundle(w.conn(), id)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("no proposal with id {id}")))?;
    let metric = metrics::get_for_update(w, &bundle.proposal.metric_key).await?;
    Ok((bundle, metric))
}
