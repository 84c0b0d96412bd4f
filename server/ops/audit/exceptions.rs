//! What deserves an auditor's look: refusals, stale approvals, versions approved without a
//! sign-off, sign-in failures and lapsed reviews.

use std::sync::{Arc, Mutex};

use chrono::Months;
use serde::Serialize;
use serde_json::Value;

use super::{conn, require_auditor};
use crate::domain::Timestamp;
use crate::domain::User;
use crate::engine::changes::compare;
use crate::engine::workflow::signoff_reasons;
use crate::ops::OpResult;
use crate::store::Store;
use crate::store::events::{self, EventFilter};
use crate::store::versions;

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

/// How many events a page of an exceptions query holds.
const PAGE: i64 = 10_000;

impl EventException {
    fn of(e: crate::audit::Entry) -> EventException {
        EventException {
            seq: e.event.seq,
            at: e.event.at,
            actor: e.event.actor,
            action: e.event.action,
            subject: e.event.subject,
            details: e.event.payload,
        }
    }
}

/// Every event with one of these actions, oldest first (each action through `events_action`).
async fn events_with(c: &mut crate::store::Db, actions: &[&str]) -> OpResult<Vec<EventException>> {
    let mut out = Vec::new();
    for action in actions {
        let mut after = 0;
        loop {
            let filter = EventFilter {
                after,
                limit: PAGE,
                action: action.to_string(),
                ..EventFilter::default()
            };
            let page = events::select(c, &filter).await?;
            let full = page.len() as i64 == PAGE;
            after = page.last().map_or(after, |e| e.event.seq);
            out.extend(page.into_iter().map(EventException::of));
            if !full {
                break;
            }
        }
    }
    out.sort_by_key(|e| e.seq);
    Ok(out)
}

/// Revisions that made earlier approvals stale, oldest first.
async fn stale_approvals(c: &mut crate::store::Db) -> OpResult<Vec<EventException>> {
    let mut out = Vec::new();
    let mut after = 0;
    loop {
        let page = events::made_stale(c, after, PAGE).await?;
        let full = page.len() as i64 == PAGE;
        after = page.last().map_or(after, |e| e.event.seq);
        // Only that action's payload has the key; the check keeps it exact all the same.
        out.extend(
            page.into_iter()
                .filter(|e| e.event.action == "revision.saved")
                .map(EventException::of),
        );
        if !full {
            return Ok(out);
        }
    }
}

/// What the record says up to one head: everything but the lapsed reviews, which also depend
/// on the time of asking.
#[derive(Debug)]
struct Recorded {
    refused_decisions: Vec<EventException>,
    stale_approvals: Vec<EventException>,
    approved_without_signoff: Vec<UnsignedVersion>,
    signin_failures: Vec<EventException>,
}

/// The exceptions found in the record, kept by the chain's head they were read at: while
/// nothing new is recorded, asking again costs one read of the head and of the metrics with a
/// review cadence. One per instance (`web::AppState` holds it).
#[derive(Debug, Default)]
pub struct ExceptionsCache(Mutex<Option<(i64, Arc<Recorded>)>>);

impl ExceptionsCache {
    fn get(&self, head: i64) -> Option<Arc<Recorded>> {
        let kept = self.0.lock().expect("never poisoned");
        kept.as_ref()
            .filter(|(at, _)| *at == head)
            .map(|(_, r)| r.clone())
    }

    fn put(&self, head: i64, recorded: Arc<Recorded>) {
        *self.0.lock().expect("never poisoned") = Some((head, recorded));
    }
}

async fn recorded(c: &mut crate::store::Db) -> OpResult<Recorded> {
    let refused_decisions = events_with(c, &["review.refused", "signoff.refused"]).await?;
    let stale_approvals = stale_approvals(c).await?;
    let signin_failures = events_with(
        c,
        &[
            "signin.failed",
            "signin.throttled",
            "signoff.password_failed",
        ],
    )
    .await?;
    let mut unsigned: Vec<UnsignedVersion> = versions::unsigned(c)
        .await?
        .into_iter()
        .map(|v| {
            let previous = v.previous.as_ref();
            let reasons = signoff_reasons(previous, &compare(previous, &v.cuts));
            UnsignedVersion {
                metric: v.metric_key,
                version: v.number,
                approved_at: v.approved_at,
                signoff_required: !reasons.is_empty(),
                reasons,
            }
        })
        .collect();
    unsigned.sort_by_key(|u| !u.signoff_required);
    Ok(Recorded {
        refused_decisions,
        stale_approvals,
        approved_without_signoff: unsigned,
        signin_failures,
    })
}

pub async fn exceptions(store: &Store, cache: &ExceptionsCache, by: &User) -> OpResult<Exceptions> {
    require_auditor(by)?;
    let mut c = conn(store).await?;
    // The head first: what is read after it holds at least what it names.
    let (head, _) = events::head(&mut c).await?;
    let recorded = match cache.get(head) {
        Some(kept) => kept,
        None => {
            let fresh = Arc::new(recorded(&mut c).await?);
            cache.put(head, fresh.clone());
            fresh
        }
    };
    let now = store.now();
    let mut lapsed = Vec::new();
    for m in versions::cadences(&mut c).await? {
        let last = m.last_approved.unwrap_or(m.created_at);
        let due = last
            .as_datetime()
            .checked_add_months(Months::new(m.months as u32))
            .map(Timestamp::from_datetime)
            .unwrap_or(last);
        if due < now {
            lapsed.push(LapsedReview {
                metric: m.metric_key,
                review_cadence_months: m.months,
                last_reviewed: last,
                due,
            });
        }
    }
    let r = &*recorded;
    Ok(Exceptions {
        refused_decisions: r.refused_decisions.clone(),
        stale_approvals: r.stale_approvals.clone(),
        missing_signoffs: r
            .approved_without_signoff
            .iter()
            .filter(|u| u.signoff_required)
            .count(),
        approved_without_signoff: r.approved_without_signoff.clone(),
        signin_failures: r.signin_failures.clone(),
        lapsed_reviews: lapsed,
    })
}
