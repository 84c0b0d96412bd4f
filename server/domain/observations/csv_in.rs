//! Reading a CSV upload, line by line, with each problem placed on the line an editor shows.

use super::kept::{Kept, Place, finish};
use super::{Observation, RowProblem, period, value};

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
