//! The auditor's questions: why did a threshold move, what was in force at a time (and what the
//! register knew then), which exceptions deserve a look, and the event record itself.

use chrono::Months;
use serde::Serialize;
use serde_json::Value;

use super::{OpError, OpResult};
use crate::audit::register::Difference;
use crate::domain::Metric;
use crate::domain::Role;
use crate::domain::Timestamp;
use crate::domain::User;
use crate::engine::changes::compare;
use crate::engine::workflow::signoff_reasons;
use crate::store::Store;
use crate::store::audited::{self, Finding};
use crate::store::events;
pub use crate::store::events::EventFilter;
use crate::store::metrics::{self, MetricFilter};
use crate::store::versions::{self, VersionRecord};

/// Auditors read everything; admins too.
pub fn require_auditor(user: &User) -> OpResult<()> {
    if user.roles.has(Role::Auditor) || user.roles.has(Role::Admin) {
        Ok(())
    } else {
        Err(OpError::Forbidden(
            "the audit views are for auditors (and admins)".into(),
        ))
    }
}

async fn conn(store: &Store) -> OpResult<crate::store::Db> {
    Ok(store.read().await?)
}

/// Every metric, in key order (the register is small enough to read whole).
async fn all_metrics(store: &Store) -> OpResult<Vec<Metric>> {
    let mut out = Vec::new();
    let mut page = 1;
    loop {
        let found =
            metrics::list(store, &MetricFilter::default(), page, metrics::PER_PAGE_MAX).await?;
        let n = found.metrics.len() as i64;
        out.extend(found.metrics);
        if n < found.per_page {
            return Ok(out);
        }
        page += 1;
    }
}

// ----- why did it move -----

/// One version in a metric's timeline, with the discussion that led to it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct TimelineEntry {
    #[serde(flatten)]
    pub version: super::versions::VersionView,
    pub reviews: Vec<super::proposals::ReviewView>,
    pub signoffs: Vec<super::proposals::SignoffView>,
    pub comments: Vec<super::proposals::CommentView>,
    /// How many revisions the proposal had.
    pub revisions: usize,
}

/// Why a metric's thresholds moved: every version, newest first, with who, when and why.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Timeline {
    /// The metric's key.
    pub metric: String,
    pub name: String,
    pub versions: Vec<TimelineEntry>,
}

pub async fn timeline(store: &Store, by: &User, key: &str) -> OpResult<Timeline> {
    require_auditor(by)?;
    let metric = metrics::get(store, key).await?;
    let history = super::versions::history(store, &metric).await?;
    let mut versions = Vec::new();
    for v in history.into_iter().rev() {
        let p = super::proposals::get(store, v.proposal_id, None)
            .await?
            .view;
        versions.push(TimelineEntry {
            reviews: p.reviews,
            signoffs: p.signoffs,
            comments: p.comments,
            revisions: p.revisions.len(),
            version: v,
        });
    }
    Ok(Timeline {
        metric: metric.key.to_string(),
        name: metric.name.clone(),
        versions,
    })
}

// ----- as of -----

/// A version as the as-of view shows it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct VersionBrief {
    pub number: i64,
    #[schema(value_type = crate::domain::Direction)]
    pub direction: &'static str,
    /// The four cut points by name.
    pub cuts: std::collections::BTreeMap<&'static str, f64>,
    /// The cuts in their order, as words: "critical 50, intervene 70, ...".
    pub cuts_text: String,
    pub effective_from: Timestamp,
    pub approved_at: Timestamp,
    /// The approvers' display names.
    pub approvers: Vec<String>,
    /// The signatory's display name, if one signed.
    pub signatory: Option<String>,
}

fn brief(v: &VersionRecord) -> VersionBrief {
    VersionBrief {
        number: v.number,
        direction: v.content.direction().as_str(),
        cuts: crate::domain::proposal::cuts_object(&v.content.cuts),
        cuts_text: v
            .content
            .cuts
            .named()
            .iter()
            .map(|(name, value)| format!("{name} {}", crate::domain::number::format(*value)))
            .collect::<Vec<_>>()
            .join(", "),
        effective_from: v.effective_from,
        approved_at: v.approved_at,
        approvers: v.approvers.clone(),
        signatory: v.signatory.clone(),
    }
}

/// One metric in the as-of view.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct AsOfEntry {
    /// The metric's key.
    pub metric: String,
    pub name: String,
    /// In force at `as_of`, as the register had recorded it by `known_at`.
    pub in_force: Option<VersionBrief>,
    /// In force at `as_of` as the register knows it now, when that differs: a version
    /// approved after `known_at` took effect at or before `as_of` (a retroactive change).
    pub known_later: Option<VersionBrief>,
    /// The finding in words.
    pub note: String,
}

/// The versions in force at a valid time (`as_of`), as the register knew them at a
/// transaction time (`known_at`).
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct AsOf {
    pub as_of: Timestamp,
    pub known_at: Timestamp,
    pub metrics: Vec<AsOfEntry>,
}

pub async fn as_of(
    store: &Store,
    by: &User,
    as_of: Option<Timestamp>,
    known_at: Option<Timestamp>,
    key: Option<&str>,
) -> OpResult<AsOf> {
    require_auditor(by)?;
    let now = store.now();
    let (as_of, known_at) = (as_of.unwrap_or(now), known_at.unwrap_or(now));
    let metrics = match key {
        Some(k) => vec![metrics::get(store, k).await?],
        None => all_metrics(store).await?,
    };
    let mut c = conn(store).await?;
    let mut out = Vec::new();
    for m in metrics {
        let then = versions::in_force(&mut c, m.id, as_of, known_at).await?;
        let later = versions::in_force(&mut c, m.id, as_of, now.max(known_at)).await?;
        let differs = then.as_ref().map(|v| v.number) != later.as_ref().map(|v| v.number);
        let note = match (&then, &later) {
            (_, Some(l)) if differs => format!(
                "version {} was approved at {}, after {known_at}, with effect from {}: a retroactive change recorded later",
                l.number, l.approved_at, l.effective_from
            ),
            (Some(v), _) => format!("version {} in force since {}", v.number, v.effective_from),
            (None, _) => "no version was in force".to_string(),
        };
        out.push(AsOfEntry {
            metric: m.key.to_string(),
            name: m.name.clone(),
            in_force: then.as_ref().map(brief),
            known_later: if differs {
                later.as_ref().map(brief)
            } else {
                None
            },
            note,
        });
    }
    Ok(AsOf {
        as_of,
        known_at,
        metrics: out,
    })
}

// ----- exceptions -----

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

// ----- the record itself -----

/// An extract of the event record with what is needed to check it is complete.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Extract {
    pub entries: Vec<crate::audit::Entry>,
    pub summary: ExtractSummary,
}

/// What an extract holds and where the whole chain stood when it was taken.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct ExtractSummary {
    pub count: usize,
    pub first_seq: Option<i64>,
    pub last_seq: Option<i64>,
    /// The head of the whole chain when the extract was taken.
    pub head_seq: i64,
    pub head_hash: String,
    /// Pass as `after` for the next page; absent on the last page.
    pub next_after: Option<i64>,
}

pub const EXTRACT_LIMIT_MAX: i64 = 100_000;

pub async fn extract(store: &Store, by: &User, filter: &EventFilter) -> OpResult<Extract> {
    require_auditor(by)?;
    let mut c = conn(store).await?;
    // The head first: the extract then covers at least everything up to it.
    let (head_seq, head_hash) = events::head(&mut c).await?;
    let mut f = filter.clone();
    f.limit = filter.limit.clamp(1, EXTRACT_LIMIT_MAX);
    let entries = events::select(&mut c, &f).await?;
    let full = entries.len() as i64 == f.limit;
    Ok(Extract {
        summary: ExtractSummary {
            count: entries.len(),
            first_seq: entries.first().map(|e| e.event.seq),
            last_seq: entries.last().map(|e| e.event.seq),
            head_seq,
            head_hash,
            next_after: if full {
                entries.last().map(|e| e.event.seq)
            } else {
                None
            },
        },
        entries,
    })
}

/// The verification result as the API and page give it: whether the chain holds and the
/// audited tables match it, and the first broken event if not.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Verification {
    pub ok: bool,
    pub events: Option<i64>,
    pub head_hash: Option<String>,
    /// The first event that does not match, when one does not.
    pub seq: Option<i64>,
    pub problem: Option<String>,
    /// The text `cutpoints audit verify` prints.
    pub line: String,
    /// Rows of the audited tables that differ from what the events say, in table order
    /// (at most [`DIFFERENCES_SHOWN`]; `difference_count` counts them all).
    pub differences: Vec<String>,
    pub difference_count: usize,
}

/// Differences listed in a verification; the rest are counted.
pub const DIFFERENCES_SHOWN: usize = 100;

impl Verification {
    /// The full check's finding, in the words every interface uses.
    pub fn from_finding(finding: Finding) -> Verification {
        let failed = |seq: Option<i64>, problem: String, differences: &[Difference]| Verification {
            ok: false,
            events: None,
            head_hash: None,
            seq,
            line: problem.clone(),
            problem: Some(problem),
            differences: differences
                .iter()
                .take(DIFFERENCES_SHOWN)
                .map(ToString::to_string)
                .collect(),
            difference_count: differences.len(),
        };
        match finding {
            Finding::Ok { events, head } => Verification {
                ok: true,
                events: Some(events),
                line: format!("ok {events} {head}"),
                head_hash: Some(head),
                seq: None,
                problem: None,
                differences: Vec::new(),
                difference_count: 0,
            },
            Finding::Chain(b) => failed(Some(b.seq()), b.to_string(), &[]),
            Finding::Unreadable(u) => failed(Some(u.seq), u.to_string(), &[]),
            Finding::Tables { differences, .. } => {
                let first = &differences[0];
                let more = match differences.len() {
                    1 => String::new(),
                    n => format!(" ({} more differences)", n - 1),
                };
                failed(
                    first.seq(),
                    format!("the tables do not match the event record: {first}{more}"),
                    &differences,
                )
            }
        }
    }
}

/// The full check: the hash chain, and a replay of every event against the audited tables.
pub async fn verify(
    store: &Store,
    by: &User,
    known: Option<(i64, String)>,
) -> OpResult<Verification> {
    require_auditor(by)?;
    verify_as_operator(store, known).await
}

/// The full check for the operator at the command line (`cutpoints audit verify`).
pub async fn verify_as_operator(
    store: &Store,
    known: Option<(i64, String)>,
) -> OpResult<Verification> {
    Ok(Verification::from_finding(
        audited::check(store, known).await?,
    ))
}
