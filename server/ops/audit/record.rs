//! The event record itself: extracts with what is needed to check they are complete, and
//! the verification of the chain and of the audited tables against it.

use serde::{Deserialize, Serialize};

use super::{conn, require_auditor};
use crate::audit::register::Difference;
use crate::domain::User;
use crate::ops::OpResult;
use crate::store::Store;
use crate::store::audited::Finding;
use crate::store::events::{self, EventFilter};

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
#[derive(Clone, Debug, Default, Serialize, Deserialize, utoipa::ToSchema)]
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
    /// The events through this seq were verified by an earlier check, and this one read only
    /// those after it (0: it read every event). The full check always reads every event.
    #[serde(default)]
    pub verified_before: i64,
    /// The latest full check that finished: the whole chain and a replay of every event
    /// against the audited tables. Until a later one passes, what it found stands here.
    #[serde(default)]
    pub last_full_check: Option<super::FullCheckView>,
    /// A full check running now, with its progress.
    #[serde(default)]
    pub running_full_check: Option<super::FullCheckView>,
}

/// Differences listed in a verification; the rest are counted.
pub const DIFFERENCES_SHOWN: usize = 100;

impl Verification {
    /// A check's finding, in the words every interface uses.
    pub fn from_finding(finding: Finding) -> Verification {
        let failed = |seq: Option<i64>, problem: String, differences: &[Difference]| Verification {
            ok: false,
            seq,
            line: problem.clone(),
            problem: Some(problem),
            differences: differences
                .iter()
                .take(DIFFERENCES_SHOWN)
                .map(ToString::to_string)
                .collect(),
            difference_count: differences.len(),
            ..Verification::default()
        };
        match finding {
            Finding::Ok { events, head } => Verification {
                ok: true,
                events: Some(events),
                line: format!("ok {events} {head}"),
                head_hash: Some(head),
                ..Verification::default()
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

    /// What a full check found, in place of this quick check's own finding when it failed:
    /// a quick check cannot see the tables, so a difference stands until a full check passes.
    pub(super) fn with_full_finding(mut self, full: &Verification) -> Verification {
        if self.ok && !full.ok {
            self.ok = false;
            self.seq = full.seq;
            self.problem = full.problem.clone();
            self.line = full.line.clone();
            self.differences = full.differences.clone();
            self.difference_count = full.difference_count;
        }
        self
    }
}

/// The quick check, for auditors: the chain from the checkpoint the last successful check left
/// (every event when there is none) to the head, the events after it replayed, and the latest
/// full check's finding. A successful check moves the checkpoint to the head.
pub async fn verify(
    store: &Store,
    by: &User,
    known: Option<(i64, String)>,
) -> OpResult<Verification> {
    require_auditor(by)?;
    super::full_check::quick(store, known).await
}

/// The full check for the operator at the command line (`cutpoints audit verify`): every
/// event, and a replay against the audited tables, recorded as a full check.
pub async fn verify_as_operator(
    store: &Store,
    known: Option<(i64, String)>,
) -> OpResult<Verification> {
    super::full_check::run(store, "cli", known).await
}
