//! What deserves an auditor's look: refusals, stale approvals, versions approved without a
//! sign-off, sign-in failures and lapsed reviews.

use chrono::Months;
use serde::Serialize;
use serde_json::Value;

use super::{all_metrics, conn, require_auditor};
use crate::domain::Timestamp;
use crate::domain::User;
use crate::engine::changes::compare;
use crate::engine::workflow::signoff_reasons;
use crate::ops::OpResult;
use crate::store::Store;
use crate::store::events::{self, EventFilter};
use crate::store::versions::{self};

/// An event worth a look, with its payload as `details`.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct EventException {
    pub seq: i64,
    pub at: Timestamp,
    pub actor: String,
    pub action: String,
    pub subject: String,
    /// The event's payload (docs/events.md).
    #[schema(value_type = Object)]
    pub details: Value,
}

/// A version approved without a sign-off.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct UnsignedVersion {
    pub metric: String,
    pub version: i64,
    pub approved_at: Timestamp,
    /// A sign-off was required (this must never happen).
    pub signoff_required: bool,
    pub reasons: Vec<String>,
}

/// A metric whose review cadence has passed without a new version.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct LapsedReview {
    pub metric: String,
    pub review_cadence_months: i64,
    /// The last approval (or the metric's creation when it has no version).
    pub last_reviewed: Timestamp,
    pub due: Timestamp,
}

/// What deserves an auditor's look: refusals, stale approvals, versions approved without a
/// sign-off, sign-in failures and lapsed reviews.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Exceptions {
    /// Self-approvals and sign-offs refused by separation of duties.
    pub refused_decisions: Vec<EventException>,
    /// Approvals and sign-offs made stale by a later revision.
    pub stale_approvals: Vec<EventException>,
    /// Versions approved without a sign-off; those where one was required come first.
    pub approved_without_signoff: Vec<UnsignedVersion>,
    /// Versions where a sign-off was required but none was given: must be empty.
    pub missing_signoffs: usize,
    /// Failed sign-ins, throttles, and wrong passwords at sign-off.
    pub signin_failures: Vec<EventException>,
    pub lapsed_reviews: Vec<LapsedReview>,
}

/// Every event with one of these actions, oldest first.
async fn events_with(store: &Store, actions: &[&str]) -> OpResult<Vec<EventException>> {
    let mut c = conn(store).await?;
    let mut out = Vec::new();
    for action in actions {
        let mut after = 0;
        loop {
            let page = events::select(
                &mut c,
                &EventFilter {
                    after,
                    limit: 10_000,
                    action: action.to_string(),
                    ..EventFilter::default()
                },
            )
            .await?;
            for e in &page {
                out.push(EventException {
                    seq: e.event.seq,
                    at: e.event.at,
                    actor: e.event.actor.clone(),
                    action: e.event.action.clone(),
                    subject: e.event.subject.clone(),
                    details: e.event.payload.clone(),
                });
            }
            match page.last() {
                Some(e) if page.len() == 10_000 => after = e.event.seq,
                _ => break,
            }
        }
    }
    out.sort_by_key(|e| e.seq);
    Ok(out)
}

pub async fn exceptions(store: &Store, by: &User) -> OpResult<Exceptions> {
    require_auditor(by)?;
    let refused_decisions = events_with(store, &["review.refused", "signoff.refused"]).await?;
    let stale_approvals = events_with(store, &["revision.saved"])
        .await?
        .into_iter()
        .filter(|e| {
            e.details["made_stale"]
                .as_array()
                .is_some_and(|a| !a.is_empty())
        })
        .collect();
    let signin_failures = events_with(
        store,
        &[
            "signin.failed",
            "signin.throttled",
            "signoff.password_failed",
        ],
    )
    .await?;
    let now = store.now();
    let mut c = conn(store).await?;
    let mut unsigned = Vec::new();
    let mut lapsed = Vec::new();
    for m in all_metrics(store).await? {
        let all = versions::list(&mut c, m.id).await?;
        for (i, v) in all.iter().enumerate() {
            if v.signatory.is_some() {
                continue;
            }
            let previous = i.checked_sub(1).map(|p| &all[p].content.cuts);
            let reasons = signoff_reasons(previous, &compare(previous, &v.content.cuts));
            unsigned.push(UnsignedVersion {
                metric: m.key.to_string(),
                version: v.number,
                approved_at: v.approved_at,
                signoff_required: !reasons.is_empty(),
                reasons,
            });
        }
        if let Some(months) = m.review_cadence_months {
            let last = all.last().map_or(m.created_at, |v| v.approved_at);
            let due = last
                .as_datetime()
                .checked_add_months(Months::new(months as u32))
                .map(Timestamp::from_datetime)
                .unwrap_or(last);
            if due < now {
                lapsed.push(LapsedReview {
                    metric: m.key.to_string(),
                    review_cadence_months: months,
                    last_reviewed: last,
                    due,
                });
            }
        }
    }
    unsigned.sort_by_key(|u| !u.signoff_required);
    let missing = unsigned.iter().filter(|u| u.signoff_required).count();
    Ok(Exceptions {
        refused_decisions,
        stale_approvals,
        approved_without_signoff: unsigned,
        missing_signoffs: missing,
        signin_failures,
        lapsed_reviews: lapsed,
    })
}
