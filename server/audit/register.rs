//! The audited tables as plain rows, in one shape for both sides of the replay: the rows the
//! store reads from the database, and the rows `replay` rebuilds from the events; and their
//! comparison, which names each row and field that differ.

use std::collections::BTreeMap;
use std::fmt;

use serde_json::{Value, json};

use crate::domain::Roles;

/// The audited tables, in the order differences are reported.
pub const TABLES: [&str; 12] = [
    "users",
    "settings",
    "metrics",
    "histories",
    "proposals",
    "revisions",
    "reviews",
    "signoffs",
    "comments",
    "versions",
    "api_tokens",
    "signing_keys",
];

/// Which row of a table: a text part (a key or a name) and up to two numbers (an id, a
/// revision number, or the position of a row among its proposal's rows of that table).
#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub struct RowKey {
    pub text: String,
    pub numbers: [i64; 2],
}

impl RowKey {
    pub fn text(text: impl Into<String>) -> RowKey {
        RowKey {
            text: text.into(),
            numbers: [0, 0],
        }
    }

    pub fn id(n: i64) -> RowKey {
        RowKey {
            text: String::new(),
            numbers: [n, 0],
        }
    }

    pub fn pair(a: i64, b: i64) -> RowKey {
        RowKey {
            text: String::new(),
            numbers: [a, b],
        }
    }

    pub fn named(text: impl Into<String>, n: i64) -> RowKey {
        RowKey {
            text: text.into(),
            numbers: [n, 0],
        }
    }

    /// How the row is named in a report, e.g. `proposal 3, revision 2`.
    fn describe(&self, table: &str) -> String {
        let [a, b] = self.numbers;
        match table {
            "users" => format!("user {}", self.text),
            "settings" => format!("setting {}", self.text),
            "metrics" => format!("metric {}", self.text),
            "histories" => format!("live history of metric {}", self.text),
            "proposals" => format!("proposal {a}"),
            "revisions" => format!("proposal {a}, revision {b}"),
            "reviews" => format!("proposal {a}, review {b}"),
            "signoffs" => format!("proposal {a}, sign-off {b}"),
            "comments" => format!("proposal {a}, comment {b}"),
            "versions" => format!("metric {}, version {a}", self.text),
            "api_tokens" => format!("token {a}"),
            "signing_keys" => format!("key {}", self.text),
            _ => format!("{} {a} {b}", self.text),
        }
    }
}

/// One row as field name to value. Numbers are kept as JSON numbers of one kind per field
/// (integers as integers, cut points as floats), so that equal values compare equal.
pub type Fields = BTreeMap<&'static str, Value>;

/// A row and, on the side rebuilt from events, the event that last shaped it.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    pub fields: Fields,
    pub seq: i64,
    pub action: String,
}

/// The audited tables' rows, by table and key.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Register {
    pub tables: BTreeMap<&'static str, BTreeMap<RowKey, Row>>,
}

impl Register {
    /// Puts a row read from the database.
    pub fn put(&mut self, table: &'static str, key: RowKey, fields: Fields) {
        self.table(table).insert(
            key,
            Row {
                fields,
                seq: 0,
                action: String::new(),
            },
        );
    }

    pub(super) fn table(&mut self, table: &'static str) -> &mut BTreeMap<RowKey, Row> {
        self.tables.entry(table).or_default()
    }

    /// The number of rows across every table.
    pub fn len(&self) -> usize {
        self.tables.values().map(BTreeMap::len).sum()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A float field (cut points).
pub fn float(v: f64) -> Value {
    json!(v)
}

/// An integer field.
pub fn int(v: i64) -> Value {
    json!(v)
}

/// An optional integer field.
pub fn opt_int(v: Option<i64>) -> Value {
    v.map_or(Value::Null, int)
}

/// A text field.
pub fn text(v: impl Into<String>) -> Value {
    Value::String(v.into())
}

/// An optional time (or text) field.
pub fn opt_text(v: Option<impl ToString>) -> Value {
    v.map_or(Value::Null, |t| Value::String(t.to_string()))
}

/// A list of texts in order (owners, tags, approvers).
pub fn list(items: impl IntoIterator<Item = impl Into<String>>) -> Value {
    Value::Array(items.into_iter().map(|s| Value::String(s.into())).collect())
}

/// A difference between the tables and what the events say they hold.
#[derive(Clone, Debug, PartialEq)]
pub struct Difference {
    pub table: &'static str,
    pub key: RowKey,
    pub kind: DifferenceKind,
}

#[derive(Clone, Debug, PartialEq)]
pub enum DifferenceKind {
    /// A row no event accounts for.
    Unrecorded,
    /// A row an event recorded that is not in the table.
    Missing { seq: i64, action: String },
    /// A field whose value is not the one the events give it.
    Field {
        field: &'static str,
        stored: Value,
        recorded: Value,
        seq: i64,
        action: String,
    },
}

impl Difference {
    /// The event this difference names, if any.
    pub fn seq(&self) -> Option<i64> {
        match &self.kind {
            DifferenceKind::Unrecorded => None,
            DifferenceKind::Missing { seq, .. } | DifferenceKind::Field { seq, .. } => Some(*seq),
        }
    }
}

impl fmt::Display for Difference {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let row = format!("{} row ({})", self.table, self.key.describe(self.table));
        match &self.kind {
            DifferenceKind::Unrecorded => {
                write!(f, "{row} is in the database, but no event records it")
            }
            DifferenceKind::Missing { seq, action } => write!(
                f,
                "{row} was recorded by event {seq} ({action}), but is not in the database"
            ),
            DifferenceKind::Field {
                field,
                stored,
                recorded,
                seq,
                action,
            } => write!(
                f,
                "{row}: {field} is {stored} in the database, but {recorded} by event {seq} ({action})"
            ),
        }
    }
}

/// Every difference between `stored` (the tables) and `recorded` (rebuilt from the events),
/// table by table in [`TABLES`] order, then by row.
pub fn compare(stored: &Register, recorded: &Register) -> Vec<Difference> {
    let empty = BTreeMap::new();
    let mut out = Vec::new();
    for table in TABLES {
        let have = stored.tables.get(table).unwrap_or(&empty);
        let want = recorded.tables.get(table).unwrap_or(&empty);
        let mut keys: Vec<&RowKey> = have.keys().chain(want.keys()).collect();
        keys.sort();
        keys.dedup();
        for key in keys {
            let diff = |kind| Difference {
                table,
                key: key.clone(),
                kind,
            };
            match (have.get(key), want.get(key)) {
                (Some(_), None) => out.push(diff(DifferenceKind::Unrecorded)),
                (None, Some(w)) => out.push(diff(DifferenceKind::Missing {
                    seq: w.seq,
                    action: w.action.clone(),
                })),
                (Some(h), Some(w)) => {
                    for (field, recorded) in &w.fields {
                        let stored = h.fields.get(field).cloned().unwrap_or(Value::Null);
                        if &stored != recorded {
                            out.push(diff(DifferenceKind::Field {
                                field,
                                stored,
                                recorded: recorded.clone(),
                                seq: w.seq,
                                action: w.action.clone(),
                            }));
                        }
                    }
                }
                (None, None) => {}
            }
        }
    }
    out
}

/// Roles as the users table keeps them (`Roles::to_list`, from a comma-separated list); a list
/// the domain does not accept is kept as given, so that it shows as a difference.
pub fn roles_value(list: &str) -> Value {
    text(Roles::parse_list(list).map_or_else(|_| list.to_string(), |r| r.to_list()))
}
