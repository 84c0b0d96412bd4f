//! The agreement workflow's rules as plain functions: who may take each step, in which state,
//! and what approval still needs. The store applies them inside the deciding transaction.
//!
//! Every check answers who first (a refusal for the wrong person) and state second (a
//! conflict), so the wrong person never learns more than that they may not act.

use serde::Serialize;

use super::changes::FieldChanges;
use crate::domain::number;
use crate::domain::proposal::{ProposalState, Verdict};
use crate::domain::thresholds::CutSet;
use crate::domain::{Role, Roles};

/// The person acting, as far as the rules need to know.
#[derive(Clone, Copy, Debug)]
pub struct Actor<'a> {
    pub username: &'a str,
    pub roles: &'a Roles,
    /// Named among the metric's owners.
    pub owns_metric: bool,
}

impl Actor<'_> {
    fn is_admin(&self) -> bool {
        self.roles.has(Role::Admin)
    }

    /// Owners of the metric and admins write its proposals.
    fn may_write_proposals(&self) -> bool {
        self.owns_metric || self.is_admin()
    }
}

/// Why a step was refused.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Refusal {
    /// The wrong person (HTTP 403).
    NotAllowed(String),
    /// The wrong person in a way auditors report: an author approving or signing their own
    /// proposal, or one person counting twice (HTTP 403, recorded as an event).
    SeparationOfDuties(String),
    /// The right person at the wrong time: wrong state, stale revision, a repeat (HTTP 409).
    Conflict(String),
}

pub type Rule = Result<(), Refusal>;

fn not_allowed(m: impl Into<String>) -> Rule {
    Err(Refusal::NotAllowed(m.into()))
}

fn conflict(m: impl Into<String>) -> Rule {
    Err(Refusal::Conflict(m.into()))
}

fn state_conflict(state: ProposalState, step: &str) -> Rule {
    conflict(format!(
        "a proposal that is {} cannot be {step}",
        state.as_str()
    ))
}

pub fn may_propose(who: Actor<'_>) -> Rule {
    if who.may_write_proposals() {
        Ok(())
    } else {
        not_allowed("only the metric's owners or an admin may propose thresholds for it")
    }
}

/// Saving a new revision: draft, in review (stays in review) or sent back.
pub fn may_revise(who: Actor<'_>, state: ProposalState) -> Rule {
    if !who.may_write_proposals() {
        return not_allowed("only the metric's owners or an admin may revise its proposals");
    }
    if state.is_open() {
        Ok(())
    } else {
        state_conflict(state, "revised")
    }
}

/// Submitting for review: from draft, or from sent back once a new revision was saved.
pub fn may_submit(who: Actor<'_>, state: ProposalState, revised_since_sent_back: bool) -> Rule {
    if !who.may_write_proposals() {
        return not_allowed("only the metric's owners or an admin may submit its proposals");
    }
    match state {
        ProposalState::Draft => Ok(()),
        ProposalState::SentBack if revised_since_sent_back => Ok(()),
        ProposalState::SentBack => conflict(
            "the proposal was sent back: save a new revision that answers the review, then submit",
        ),
        other => state_conflict(other, "submitted"),
    }
}

/// Withdrawing: the proposal's author or one of the metric's owners (or an admin), before
/// approval.
pub fn may_withdraw(who: Actor<'_>, is_author: bool, state: ProposalState) -> Rule {
    if !(is_author || who.may_write_proposals()) {
        return not_allowed("only the proposal's author or the metric's owners may withdraw it");
    }
    if state.is_open() {
        Ok(())
    } else {
        state_conflict(state, "withdrawn")
    }
}

/// Rejecting: a reviewer, signatory or admin, while in review.
pub fn may_reject(who: Actor<'_>, state: ProposalState) -> Rule {
    let r = who.roles;
    if !(r.has(Role::Reviewer) || r.has(Role::Signatory) || r.has(Role::Admin)) {
        return not_allowed("only a reviewer, a signatory or an admin may reject a proposal");
    }
    if state == ProposalState::InReview {
        Ok(())
    } else {
        state_conflict(state, "rejected")
    }
}

/// What a decision (verdict or sign-off) is checked against.
#[derive(Clone, Copy, Debug)]
pub struct Decision<'a> {
    pub state: ProposalState,
    /// Wrote at least one revision of this proposal.
    pub is_author: bool,
    pub latest_hash: &'a str,
    pub given_hash: &'a str,
    /// Already approved the latest revision.
    pub approved_latest: bool,
    /// Already signed off the latest revision.
    pub signed_latest: bool,
}

fn check_revision(d: &Decision<'_>) -> Rule {
    if d.state != ProposalState::InReview {
        return conflict(format!(
            "the proposal is {}; decisions are taken while it is in_review",
            d.state.as_str()
        ));
    }
    if d.given_hash != d.latest_hash {
        return conflict(format!(
            "revision_hash {} is not the latest revision ({}); read the proposal again and decide on what it says now",
            d.given_hash, d.latest_hash
        ));
    }
    Ok(())
}

/// A reviewer's verdict. Reviewers approve or send back; signatories may send back too.
pub fn may_give_verdict(who: Actor<'_>, verdict: Verdict, d: &Decision<'_>) -> Rule {
    let may = match verdict {
        Verdict::Approve => who.roles.has(Role::Reviewer),
        Verdict::SendBack => who.roles.has(Role::Reviewer) || who.roles.has(Role::Signatory),
    };
    if !may {
        return not_allowed(match verdict {
            Verdict::Approve => "only reviewers may approve",
            Verdict::SendBack => "only reviewers and signatories may send a proposal back",
        });
    }
    if verdict == Verdict::Approve && d.is_author {
        return Err(Refusal::SeparationOfDuties(
            "you wrote a revision of this proposal, so you may not approve it".into(),
        ));
    }
    if verdict == Verdict::Approve && d.signed_latest {
        return Err(Refusal::SeparationOfDuties(
            "you signed this revision off; its approvals must come from other people".into(),
        ));
    }
    check_revision(d)?;
    if verdict == Verdict::Approve && d.approved_latest {
        return conflict("you already approved this revision");
    }
    Ok(())
}

/// A signatory's sign-off (after re-entering their password, checked by the caller).
pub fn may_sign_off(who: Actor<'_>, d: &Decision<'_>, signoff_required: bool) -> Rule {
    if !who.roles.has(Role::Signatory) {
        return not_allowed("only signatories may sign off");
    }
    if d.is_author {
        return Err(Refusal::SeparationOfDuties(
            "you wrote a revision of this proposal, so you may not sign it off".into(),
        ));
    }
    if d.approved_latest {
        return Err(Refusal::SeparationOfDuties(
            "you approved this revision as a reviewer; the sign-off must come from someone else"
                .into(),
        ));
    }
    check_revision(d)?;
    if d.signed_latest {
        return conflict("you already signed this revision off");
    }
    if !signoff_required {
        return conflict(
            "this proposal needs no sign-off: neither the direction nor a critical-level cut point changes",
        );
    }
    Ok(())
}

/// Why a sign-off is needed: the direction or a critical-level cut point differs from the
/// version that precedes this one in valid time, or there never was an approved version.
/// Empty when none is needed.
pub fn signoff_reasons(previous: Option<&CutSet>, changes: &FieldChanges) -> Vec<String> {
    let Some(previous) = previous else {
        return vec!["the metric has never had an approved version".to_string()];
    };
    if changes.direction_changed {
        return vec![format!(
            "direction changes {} -> {}",
            previous.direction().as_str(),
            changes.new_direction.as_str()
        )];
    }
    let critical = changes.new_direction.critical_cut_names();
    changes
        .moved()
        .filter(|c| critical.contains(&c.cut))
        .map(|c| {
            let show = |v: Option<f64>| v.map_or_else(|| "none".into(), number::format);
            format!("{} moved {} -> {}", c.cut, show(c.old), show(c.new))
        })
        .collect()
}

/// What approval still needs (`still_needed` in docs/design.md).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct StillNeeded {
    /// More reviewer approvals needed.
    pub approvals: u32,
    /// A signatory's sign-off is still needed.
    pub signoff: bool,
    /// Why a sign-off is required (also present once it is given).
    pub reasons: Vec<String>,
}

impl StillNeeded {
    pub fn new(required: u32, counted: u32, reasons: Vec<String>, signed: bool) -> StillNeeded {
        StillNeeded {
            approvals: required.saturating_sub(counted),
            signoff: !reasons.is_empty() && !signed,
            reasons,
        }
    }

    pub fn is_met(&self) -> bool {
        self.approvals == 0 && !self.signoff
    }

    /// In words: "1 more reviewer approval; signatory sign-off needed because critical moved
    /// 50 -> 45".
    pub fn describe(&self) -> String {
        let mut parts = Vec::new();
        match self.approvals {
            0 => {}
            1 => parts.push("1 more reviewer approval".to_string()),
            n => parts.push(format!("{n} more reviewer approvals")),
        }
        if self.signoff {
            parts.push(format!(
                "signatory sign-off needed because {}",
                self.reasons.join(" and ")
            ));
        }
        if parts.is_empty() {
            "nothing: every requirement is met".to_string()
        } else {
            parts.join("; ")
        }
    }
}
