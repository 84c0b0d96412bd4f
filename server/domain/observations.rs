//! A metric's history as uploaded: one value per period start, read from RFC 4180 CSV or JSON
//! and checked whole, so that an upload is taken entirely or not at all, with every bad line
//! named.

use std::collections::HashMap;

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

/// Line numbers as an editor counts them, from byte offsets of record starts (which may
/// point at the line end of the record before). Offsets only grow, so counting is linear.
struct LineCounter<'a> {
    bytes: &'a [u8],
    cursor: usize,
    line: u64,
}

impl<'a> LineCounter<'a> {
    fn new(bytes: &'a [u8]) -> Self {
        LineCounter {
            bytes,
            cursor: 0,
            line: 1,
        }
    }

    /// The line a record starting at `byte` begins on.
    fn at(&mut self, byte: u64) -> u64 {
        let mut start = (byte as usize).min(self.bytes.len());
        while start < self.bytes.len() && matches!(self.bytes[start], b'\r' | b'\n') {
            start += 1;
        }
        if start > self.cursor {
            let newlines = self.bytes[self.cursor..start]
                .iter()
                .filter(|&&b| b == b'\n')
                .count();
            self.line += newlines as u64;
            self.cursor = start;
        }
        self.line
    }
}

/// Reads a CSV upload: two columns, period start and value, with an optional header row (a
/// first line whose first field holds no digit and whose second is not a number). Periods may come in any
/// order; a period may appear once. `progress` is told how many bytes have been read, now and
/// then, for large files.
pub fn from_csv(
    bytes: &[u8],
    mut progress: impl FnMut(u64),
) -> Result<Vec<Observation>, Vec<RowProblem>> {
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(bytes);
    let mut kept = Kept::default();
    let mut record = csv::ByteRecord::new();
    let mut first = true;
    let mut records = 0u64;
    let mut lines = LineCounter::new(bytes);
    loop {
        let line = lines.at(reader.position().byte());
        match reader.read_byte_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {}
            Err(e) => {
                let at = e.position().map_or(line, |p| lines.at(p.byte()));
                kept.problems
                    .push(RowProblem::line(at, format!("not CSV: {e}")));
                // An unterminated quote swallows the rest; nothing after it can be read.
                if matches!(e.kind(), csv::ErrorKind::Io(_)) {
                    break;
                }
                continue;
            }
        }
        let line = lines.at(record.position().map_or(0, |p| p.byte()));
        records += 1;
        if records.is_multiple_of(65_536) {
            progress(record.position().map_or(0, |p| p.byte()));
        }
        let fields: Vec<&str> = match record
            .iter()
            .map(std::str::from_utf8)
            .collect::<Result<_, _>>()
        {
            Ok(f) => f,
            Err(_) => {
                kept.problems.push(RowProblem::line(line, "not UTF-8 text"));
                continue;
            }
        };
        // A line holding only spaces reads as one empty field.
        if fields.iter().all(|f| f.is_empty()) {
            continue;
        }
        let is_first = std::mem::take(&mut first);
        if fields.len() != 2 {
            kept.problems.push(RowProblem::line(
                line,
                format!(
                    "expected 2 fields (period start, value), found {}",
                    fields.len()
                ),
            ));
            continue;
        }
        // The header row: a first line naming its columns, with no digit in the first.
        if is_first && !fields[0].bytes().any(|b| b.is_ascii_digit()) && value(fields[1]).is_err() {
            continue;
        }
        kept.take(Place::Line(line), period(fields[0]), value(fields[1]));
    }
    progress(bytes.len() as u64);
    finish(kept)
}

/// Reads a JSON upload: `{"observations": [{"period_start": "2026-03-01", "value": 71.5}, ...]}`.
pub fn from_json(body: &serde_json::Value) -> Result<Vec<Observation>, Vec<RowProblem>> {
    let Some(items) = body.get("observations").and_then(|v| v.as_array()) else {
        return Err(no_observations_array());
    };
    let mut reader = JsonItems::default();
    for item in items {
        reader.item(item);
    }
    finish(reader.kept)
}

/// Reads a JSON upload from its bytes, one item at a time, so that memory grows with the
/// observations kept rather than with a parsed copy of the whole document.
pub fn from_json_bytes(bytes: &[u8]) -> Result<Vec<Observation>, Vec<RowProblem>> {
    use serde::de::DeserializeSeed;
    let mut reader = JsonItems::default();
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let found = Top(&mut reader)
        .deserialize(&mut de)
        .and_then(|found| de.end().map(|()| found));
    match found {
        Ok(true) => finish(reader.kept),
        Ok(false) => Err(no_observations_array()),
        Err(e) => Err(vec![RowProblem {
            line: Some(e.line() as u64),
            item: None,
            reason: format!(
                "not JSON of the expected shape: {}",
                super::json_errors::describe(&e)
            ),
        }]),
    }
}

fn no_observations_array() -> Vec<RowProblem> {
    vec![RowProblem {
        line: None,
        item: None,
        reason: "expected an object with an \"observations\" array".into(),
    }]
}

/// The top-level object: its `observations` array is read item by item; other keys are
/// skipped.
struct Top<'a>(&'a mut JsonItems);

impl<'de> serde::de::DeserializeSeed<'de> for Top<'_> {
    type Value = bool;

    fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<bool, D::Error> {
        d.deserialize_map(self)
    }
}

impl<'de> serde::de::Visitor<'de> for Top<'_> {
    type Value = bool;

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("an object with an \"observations\" array")
    }

    fn visit_map<A: serde::de::MapAccess<'de>>(self, mut map: A) -> Result<bool, A::Error> {
        let mut found = false;
        while let Some(key) = map.next_key::<String>()? {
            if key == "observations" && !found {
                map.next_value_seed(Items(&mut *self.0))?;
                found = true;
            } else {
                map.next_value::<serde::de::IgnoredAny>()?;
            }
        }
        Ok(found)
    }
}

struct Items<'a>(&'a mut JsonItems);

impl<'de> serde::de::DeserializeSeed<'de> for Items<'_> {
    type Value = ();

    fn deserialize<D: serde::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        d.deserialize_seq(self)
    }
}

impl<'de> serde::de::Visitor<'de> for Items<'_> {
    type Value = ();

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("an array of observations")
    }

    fn visit_seq<A: serde::de::SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        while let Some(item) = seq.next_element::<serde_json::Value>()? {
            self.0.item(&item);
        }
        Ok(())
    }
}

/// The observations and problems of a JSON upload, item by item.
#[derive(Default)]
struct JsonItems {
    kept: Kept,
    seen: u64,
}

impl JsonItems {
    fn item(&mut self, item: &serde_json::Value) {
        self.seen += 1;
        let n = self.seen;
        let Some(object) = item.as_object() else {
            self.kept.problems.push(RowProblem::item(
                n,
                "expected an object with period_start and value",
            ));
            return;
        };
        if let Some(other) = object
            .keys()
            .find(|k| *k != "period_start" && *k != "value")
        {
            self.kept.problems.push(RowProblem::item(
                n,
                format!("unknown field {}", echo(other)),
            ));
            return;
        }
        let p = match object.get("period_start") {
            Some(serde_json::Value::String(s)) => period(s.trim()),
            None | Some(serde_json::Value::Null) => Err("missing period start".into()),
            Some(_) => Err("period_start must be a string".into()),
        };
        let v = match object.get("value") {
            Some(serde_json::Value::Number(x)) => x
                .as_f64()
                .ok_or_else(|| "non-finite value".to_string())
                .and_then(checked),
            None | Some(serde_json::Value::Null) => Err("missing value".into()),
            Some(_) => Err("value must be a number".into()),
        };
        self.kept.take(Place::Item(n), p, v);
    }
}

/// Where a row came from: a CSV line or a JSON item, counted from 1.
#[derive(Clone, Copy)]
enum Place {
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
struct Kept {
    out: Vec<Observation>,
    problems: Found,
    periods: Periods,
}

impl Kept {
    /// Keeps a row whose period and value both read and whose period is new; otherwise
    /// notes every reason it does not.
    fn take(&mut self, at: Place, period: Result<Timestamp, String>, value: Result<f64, String>) {
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
struct Found {
    listed: Vec<RowProblem>,
    more: u64,
}

impl Found {
    fn push(&mut self, p: RowProblem) {
        if self.listed.len() < PROBLEMS_LISTED {
            self.listed.push(p);
        } else {
            self.more += 1;
        }
    }
}

fn finish(kept: Kept) -> Result<Vec<Observation>, Vec<RowProblem>> {
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
