//! Every CSV the product writes: RFC 4180 (a header row, CRLF line ends, fields quoted where
//! they hold commas, quotes or line breaks), with text cells that a spreadsheet cannot take
//! for a formula.
//!
//! A spreadsheet that opens a CSV runs a cell beginning with `=`, `+`, `-` or `@` (and, in some,
//! a tab or carriage return) as a formula, so a metric named `=HYPERLINK(...)` would become a
//! link in every consumer's spreadsheet. As OWASP's "CSV Injection" advises, such a text cell is
//! written with a single quote in front, which makes spreadsheets show it as text. A cell that
//! already begins with a quote gets one more, so the rule can always be undone: remove one
//! leading `'` from a text cell that has one. Numbers and times are never text cells, so a cut
//! point of -5 stays `-5`.

use std::borrow::Cow;

use super::time::Timestamp;

/// What a text cell may not begin with as it is: the formula starts OWASP lists, and the
/// quote that marks a neutralised cell.
const NEEDS_QUOTE: [char; 7] = ['=', '+', '-', '@', '\t', '\r', '\''];

/// A text cell as written: `text` with one `'` in front when it begins with a character a
/// spreadsheet reads as the start of a formula, or with `'` itself.
pub fn text_cell(text: &str) -> Cow<'_, str> {
    if text.starts_with(NEEDS_QUOTE) {
        Cow::Owned(format!("'{text}"))
    } else {
        Cow::Borrowed(text)
    }
}

/// The text a [`text_cell`] was written from: one leading `'` removed.
pub fn text_of_cell(cell: &str) -> &str {
    cell.strip_prefix('\'').unwrap_or(cell)
}

/// One cell of a row.
#[derive(Clone, Debug, PartialEq)]
pub enum Cell<'a> {
    /// Free text (names, units, people, actions): written by [`text_cell`].
    Text(&'a str),
    /// A number already in its written form (`-5`, `0.1`, `3`), or blank; written as it is.
    Number(String),
    /// A time, written as the product writes times.
    Time(Timestamp),
}

impl Cell<'_> {
    /// A number in shortest round-trip form, or blank.
    pub fn number(value: Option<f64>) -> Cell<'static> {
        Cell::Number(value.map(super::number::format).unwrap_or_default())
    }

    fn written(&self) -> Cow<'_, str> {
        match self {
            Cell::Text(text) => text_cell(text),
            Cell::Number(n) => Cow::Borrowed(n),
            Cell::Time(t) => Cow::Owned(t.to_string()),
        }
    }
}

/// A CSV being written to memory.
pub struct CsvOut(csv::Writer<Vec<u8>>);

impl CsvOut {
    /// Starts with the header row; `capacity` is a guess of the final size in bytes.
    pub fn new(header: &[&str], capacity: usize) -> CsvOut {
        let mut w = csv::WriterBuilder::new()
            .terminator(csv::Terminator::CRLF)
            .from_writer(Vec::with_capacity(capacity));
        w.write_record(header).expect("writing to memory");
        CsvOut(w)
    }

    pub fn row(&mut self, cells: &[Cell<'_>]) {
        for cell in cells {
            self.0
                .write_field(cell.written().as_bytes())
                .expect("writing to memory");
        }
        self.0
            .write_record(None::<&[u8]>)
            .expect("writing to memory");
    }

    pub fn finish(self) -> Vec<u8> {
        self.0.into_inner().expect("flushing to memory")
    }
}
