//! A metric's history as uploaded: one value per period start, read from RFC 4180 CSV
//! (`csv_in`) or JSON (`json_in`) and checked whole (`kept`), so that an upload is taken
//! entirely or not at all, with every bad line named. This file holds the values themselves,
//! the checks of one field, and the CSV an upload can be downloaded as.

mod csv_in;
mod json_in;
mod kept;

pub use csv_in::from_csv;
pub use json_in::{from_json, from_json_bytes};
pub use kept::PROBLEMS_LISTED;

use serde::Serialize;

use super::Timestamp;
use super::csv_out::{Cell, CsvOut};

/// One period of history.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Observation {
    pub period_start: Timestamp,
    pub value: f64,
}

/// What is wrong with one line of a CSV upload (`line`, counted from 1 like an editor) or one
/// item of a JSON upload (`item`, counted from 1).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct RowProblem {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub line: Option<u64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub item: Option<u64>,
    pub reason: String,
}

impl RowProblem {
    fn line(line: u64, reason: impl Into<String>) -> RowProblem {
        RowProblem {
            line: Some(line),
            item: None,
            reason: reason.into(),
        }
    }

    fn item(item: u64, reason: impl Into<String>) -> RowProblem {
        RowProblem {
            line: None,
            item: Some(item),
            reason: reason.into(),
        }
    }

    /// "line 3: ..." or "item 3: ...".
    pub fn describe(&self) -> String {
        match (self.line, self.item) {
            (Some(l), _) => format!("line {l}: {}", self.reason),
            (_, Some(i)) => format!("item {i}: {}", self.reason),
            _ => self.reason.clone(),
        }
    }
}

/// The period start of a field: an RFC 3339 time (any offset, stored in UTC) or a bare date,
/// which means 00:00:00Z.
fn period(text: &str) -> Result<Timestamp, String> {
    if text.is_empty() {
        return Err("missing period start".into());
    }
    Timestamp::parse(text).map_err(|_| {
        format!(
            "unparseable date {}: expected an RFC 3339 date such as 2026-03-01 or a time such \
             as 2026-03-01T09:30:00Z",
            echo(text)
        )
    })
}

/// The largest magnitude a value may have: far beyond any metric, and small enough that sums
/// of squares over millions of values stay finite.
pub const VALUE_MAX: f64 = 1e150;

/// At most this much of a bad field is repeated in its reason.
const ECHO_MAX: usize = 40;

/// A field as shown in a reason: quoted, and cut short when long.
fn echo(text: &str) -> String {
    if text.chars().count() <= ECHO_MAX {
        format!("{text:?}")
    } else {
        let start: String = text.chars().take(ECHO_MAX).collect();
        format!("{start:?}…")
    }
}

/// A value field: a finite decimal number within ±1e150.
fn value(text: &str) -> Result<f64, String> {
    if text.is_empty() {
        return Err("missing value".into());
    }
    checked(
        text.parse::<f64>()
            .map_err(|_| format!("value {} is not a number", echo(text)))?,
    )
    .map_err(|reason| format!("{reason} ({})", echo(text)))
}

fn checked(v: f64) -> Result<f64, String> {
    if !v.is_finite() {
        Err("non-finite value: values must be finite numbers".into())
    } else if v.abs() > VALUE_MAX {
        Err("value too large: values must lie within ±1e150".into())
    } else {
        Ok(v)
    }
}

/// Observations as RFC 4180 CSV with a header row, CRLF line ends, oldest first: the format
/// the upload reads, so a download can be uploaded again unchanged. Both columns are times and
/// numbers, never text (`csv_out`), so a value of -1.5 stays `-1.5`.
pub fn to_csv(rows: &[Observation]) -> Vec<u8> {
    let mut out = CsvOut::new(&["period_start", "value"], rows.len() * 40 + 20);
    for o in rows {
        out.row(&[Cell::Time(o.period_start), Cell::number(Some(o.value))]);
    }
    out.finish()
}

/// How an upload meets the history already stored.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize, utoipa::ToSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum Mode {
    /// Add new periods; give periods already stored their uploaded value.
    Merge,
    /// The upload becomes the whole history.
    Replace,
}

impl Mode {
    pub fn as_str(self) -> &'static str {
        match self {
            Mode::Merge => "merge",
            Mode::Replace => "replace",
        }
    }
}
