//! The rows of an upload kept so far and the problems found, checked whole at the end: each
//! period once, and at most [`PROBLEMS_LISTED`] problems listed one by one.

use std::collections::HashMap;

use super::{Observation, RowProblem};
use crate::domain::Timestamp;

/// Keeps the first line of each period and names the later ones.
#[derive(Default)]
struct Periods {
    first_at: HashMap<Timestamp, u64>,
}

impl Periods {
    fn check(&mut self, at: Timestamp, position: u64, what: &str) -> Result<(), String> {
        match self.first_at.get(&at) {
            Some(first) => Err(format!(
                "duplicate period {at} (first given on {what} {first})"
            )),
            None => {
                self.first_at.insert(at, position);
                Ok(())
            }
        }
    }
}

/// Where a row came from: a CSV line or a JSON item, counted from 1.
#[derive(Clone, Copy)]
pub(super) enum Place {
    Line(u64),
    Item(u64),
}

impl Place {
    fn problem(self, reason: impl Into<String>) -> RowProblem {
        match self {
            Place::Line(n) => RowProblem::line(n, reason),
            Place::Item(n) => RowProblem::item(n, reason),
        }
    }
}

/// The rows of an upload read so far, and its problems.
#[derive(Default)]
pub(super) struct Kept {
    out: Vec<Observation>,
    pub(super) problems: Found,
    periods: Periods,
}

impl Kept {
    /// Keeps a row whose period and value both read and whose period is new; otherwise
    /// notes every reason it does not.
    pub(super) fn take(
        &mut self,
        at: Place,
        period: Result<Timestamp, String>,
        value: Result<f64, String>,
    ) {
        match (period, value) {
            (Ok(start), Ok(v)) => {
                let (n, what) = match at {
                    Place::Line(n) => (n, "line"),
                    Place::Item(n) => (n, "item"),
                };
                match self.periods.check(start, n, what) {
                    Ok(()) => self.out.push(Observation {
                        period_start: start,
                        value: v,
                    }),
                    Err(reason) => self.problems.push(at.problem(reason)),
                }
            }
            (p, v) => {
                let reasons: Vec<String> = [p.err(), v.err()].into_iter().flatten().collect();
                self.problems.push(at.problem(reasons.join("; ")));
            }
        }
    }
}

/// The most problems an answer lists one by one; a last entry counts the rest, so a hostile
/// or badly broken file cannot make an answer many times its own size.
pub const PROBLEMS_LISTED: usize = 10_000;

/// The problems found so far: the first [`PROBLEMS_LISTED`], and how many more.
#[derive(Default)]
pub(super) struct Found {
    listed: Vec<RowProblem>,
    more: u64,
}

impl Found {
    pub(super) fn push(&mut self, p: RowProblem) {
        if self.listed.len() < PROBLEMS_LISTED {
            self.listed.push(p);
        } else {
            self.more += 1;
        }
    }
}

/// The upload's observations in period order, or every problem found (with a count of those
/// not listed); an upload that holds no observations at all is a problem too.
pub(super) fn finish(kept: Kept) -> Result<Vec<Observation>, Vec<RowProblem>> {
    let Kept {
        mut out,
        problems: found,
        ..
    } = kept;
    let mut problems = found.listed;
    if found.more > 0 {
        problems.push(RowProblem {
            line: None,
            item: None,
            reason: format!(
                "and {} more lines or items with problems, not listed",
                found.more
            ),
        });
    }
    if !problems.is_empty() {
        return Err(problems);
    }
    if out.is_empty() {
        return Err(vec![RowProblem {
            line: None,
            item: None,
            reason: "the upload holds no observations".into(),
        }]);
    }
    out.sort_by_key(|o| o.period_start);
    Ok(out)
}
