//! The audited tables read whole into the shape the replay rebuilds from the event record
//! (`audit::replay`), and the full check that compares the two inside one snapshot.

use std::collections::BTreeMap;
use std::sync::atomic::{AtomicI64, Ordering};

use serde_json::Value;
use sqlx::Row;
use sqlx::any::AnyRow;

use super::events::Stop;
use super::{Db, Store, StoreResult};
use crate::audit::register::{
    Difference, Fields, Register, RowKey, float, int, list, opt_int, opt_text, roles_value, text,
};
use crate::audit::replay::{Replayer, Unreadable, shapes_rows};
use crate::audit::{Break, Entry};
use Kind::{Float, Int, Json, OptInt, OptText, Roles, Text};

/// What the full check found.
#[derive(Debug)]
pub enum Finding {
    /// The chain and the tables agree: the number of events and the head hash.
    Ok { events: i64, head: String },
    /// The chain of events does not verify.
    Chain(Break),
    /// An event's payload cannot be replayed.
    Unreadable(Unreadable),
    /// The chain verifies, but the tables differ from what the events say (at least one).
    Tables {
        events: i64,
        head: String,
        differences: Vec<Difference>,
    },
}

/// Recomputes the chain and replays every event against the audited tables, all in one
/// snapshot of the database, so that writes made meanwhile cannot look like differences.
/// `progress` counts the events read so far.
pub async fn check(
    store: &Store,
    known_head: Option<(i64, String)>,
    progress: &AtomicI64,
) -> StoreResult<Finding> {
    let mut db = store.begin_snapshot().await?;
    let mut replayer = Replayer::new();
    let walked = super::events::walk(&mut db, None, known_head, |row, parts| {
        progress.store(parts.seq, Ordering::Relaxed);
        if !shapes_rows(parts.action) {
            return Ok(Ok(()));
        }
        let entry: Entry = super::events::event_from_row(row)?;
        Ok(replayer.apply(&entry.event))
    })
    .await?;
    let (events, head) = match walked {
        Ok(done) => done,
        Err(Stop::Break(b)) => return Ok(Finding::Chain(b)),
        Err(Stop::Visitor(u)) => return Ok(Finding::Unreadable(u)),
    };
    let stored = read(&mut db).await?;
    let recorded = replayer.finish();
    // Comparing every row is the one long stretch without a database wait in it.
    let differences =
        tokio::task::spawn_blocking(move || crate::audit::register::compare(&stored, &recorded))
            .await
            .expect("comparing the registers does not panic");
    Ok(if differences.is_empty() {
        Finding::Ok { events, head }
    } else {
        Finding::Tables {
            events,
            head,
            differences,
        }
    })
}

/// How many events the quick check replays into one replayer before starting a fresh one.
const REPLAY_KEPT: usize = 1_000;

/// The quick check: the chain from an event verified earlier (`from`; the first event when
/// `None`) to the head, each event after it replayed on its own (its payload must be readable
/// and its content must hash to what it records). It does not compare the audited tables:
/// [`check`] does, over everything.
pub async fn check_since(
    store: &Store,
    from: Option<(i64, String)>,
    known_head: Option<(i64, String)>,
) -> StoreResult<Finding> {
    let mut db = store.begin_snapshot().await?;
    // Each event is replayed on its own merits, so nothing need be kept between them: a fresh
    // replayer now and then keeps the memory of a first check (every event) to a page's worth.
    let mut replayer = Replayer::new();
    let mut replayed = 0_usize;
    let walked = super::events::walk(&mut db, from, known_head, |row, parts| {
        if !shapes_rows(parts.action) {
            return Ok(Ok(()));
        }
        replayed += 1;
        if replayed.is_multiple_of(REPLAY_KEPT) {
            replayer = Replayer::new();
        }
        let entry: Entry = super::events::event_from_row(row)?;
        Ok(replayer.apply(&entry.event))
    })
    .await?;
    Ok(match walked {
        Ok((events, head)) => Finding::Ok { events, head },
        Err(Stop::Break(b)) => Finding::Chain(b),
        Err(Stop::Visitor(u)) => Finding::Unreadable(u),
    })
}

/// Every row of the audited tables, in the replay's shape.
pub async fn read(db: &mut Db) -> StoreResult<Register> {
    let mut r = Register::default();
    for table in TABLES {
        read_table(db, &mut r, table).await?;
    }
    read_metrics(db, &mut r).await?;
    Ok(r)
}

/// An audited table as it is read: the query, the columns its rows are keyed by, and how each
/// other column is read.
struct Table {
    name: &'static str,
    sql: &'static str,
    key: Key,
    columns: &'static [(&'static str, Kind)],
}

/// Every audited table but `metrics`, whose owners and tags come from tables of their own.
#[rustfmt::skip]
const TABLES: &[Table] = &[
    Table {
        name: "users",
        sql: "SELECT username, display_name, roles, active, created_at FROM users",
        key: Key::Text("username"),
        columns: &[("display_name", Text), ("active", Int), ("created_at", Text), ("roles", Roles)],
    },
    Table {
        name: "settings",
        sql: "SELECT name, value FROM settings",
        key: Key::Text("name"),
        columns: &[("value", Text)],
    },
    Table {
        name: "histories",
        sql: "SELECT m.key, h.rows, \
              (SELECT COUNT(*) FROM observations o WHERE o.history_id = h.id) AS observations \
              FROM histories h JOIN metrics m ON m.id = h.metric_id WHERE h.state = 'live'",
        key: Key::Text("key"),
        columns: &[("rows", Int), ("observations", Int)],
    },
    Table {
        name: "proposals",
        sql: "SELECT p.id, m.key AS metric, u.username AS author, p.state, p.created_at, \
              p.sent_back_revision, p.closed_at, p.close_reason, p.version_number \
              FROM proposals p JOIN metrics m ON m.id = p.metric_id \
              JOIN users u ON u.id = p.author_id",
        key: Key::Id("id"),
        columns: &[
            ("metric", Text), ("author", Text), ("state", Text), ("created_at", Text),
            ("sent_back_revision", OptInt), ("closed_at", OptText), ("close_reason", Text),
            ("version_number", OptInt),
        ],
    },
    Table {
        name: "revisions",
        sql: "SELECT r.proposal_id, r.number, r.direction, r.cut_1, r.cut_2, r.cut_3, r.cut_4, \
              r.shades, r.unit, r.effective_from, r.rationale, r.canonical_text, r.content_hash, \
              r.diff_from_previous, r.base_version, r.diff_from_base, r.note, \
              u.username AS author, r.created_at \
              FROM revisions r JOIN users u ON u.id = r.author_id",
        key: Key::Pair("proposal_id", "number"),
        columns: &[
            ("direction", Text), ("cut_1", Float), ("cut_2", Float), ("cut_3", Float),
            ("cut_4", Float), ("shades", Int), ("unit", Text), ("effective_from", OptText),
            ("rationale", Text), ("canonical_text", Text), ("content_hash", Text),
            ("diff_from_previous", Text), ("base_version", OptInt), ("diff_from_base", Text),
            ("note", Text), ("author", Text), ("created_at", Text),
        ],
    },
    Table {
        name: "reviews",
        sql: "SELECT x.proposal_id, x.revision_number, x.revision_hash, u.username AS reviewer, \
              x.verdict, x.comment, x.created_at \
              FROM reviews x JOIN users u ON u.id = x.reviewer_id ORDER BY x.proposal_id, x.id",
        key: Key::Position("proposal_id"),
        columns: &[
            ("revision_number", Int), ("revision_hash", Text), ("reviewer", Text),
            ("verdict", Text), ("comment", Text), ("created_at", Text),
        ],
    },
    Table {
        name: "signoffs",
        sql: "SELECT x.proposal_id, x.revision_number, x.revision_hash, u.username AS signer, \
              x.signer_name, x.meaning, x.created_at \
              FROM signoffs x JOIN users u ON u.id = x.signer_id ORDER BY x.proposal_id, x.id",
        key: Key::Position("proposal_id"),
        columns: &[
            ("revision_number", Int), ("revision_hash", Text), ("signer", Text),
            ("signer_name", Text), ("meaning", Text), ("created_at", Text),
        ],
    },
    Table {
        name: "comments",
        sql: "SELECT x.proposal_id, x.revision_number, u.username AS author, x.cut, x.body, \
              x.created_at \
              FROM comments x JOIN users u ON u.id = x.author_id ORDER BY x.proposal_id, x.id",
        key: Key::Position("proposal_id"),
        columns: &[
            ("revision_number", Int), ("author", Text), ("cut", OptText), ("body", Text),
            ("created_at", Text),
        ],
    },
    Table {
        name: "versions",
        sql: "SELECT m.key, v.number, v.proposal_id, v.revision_number, v.revision_hash, \
              v.direction, v.cut_1, v.cut_2, v.cut_3, v.cut_4, v.shades, v.unit, \
              v.effective_from, v.rationale, v.approved_at, v.canonical_text, v.approvers, \
              v.signatory, v.metric_name, v.approval_seq \
              FROM versions v JOIN metrics m ON m.id = v.metric_id",
        key: Key::Named("key", "number"),
        columns: &[
            ("proposal_id", Int), ("revision_number", Int), ("revision_hash", Text),
            ("direction", Text), ("cut_1", Float), ("cut_2", Float), ("cut_3", Float),
            ("cut_4", Float), ("shades", Int), ("unit", Text), ("effective_from", OptText),
            ("rationale", Text), ("approved_at", Text), ("canonical_text", Text),
            ("approvers", Json), ("signatory", OptText), ("metric_name", Text),
            ("approval_seq", Int),
        ],
    },
    Table {
        name: "api_tokens",
        sql: "SELECT t.id, u.username, t.prefix, t.scope, t.label, t.created_at, t.expires_at, \
              t.revoked_at FROM api_tokens t JOIN users u ON u.id = t.user_id",
        key: Key::Id("id"),
        columns: &[
            ("username", Text), ("prefix", Text), ("scope", Text), ("label", Text),
            ("created_at", Text), ("expires_at", OptText), ("revoked_at", OptText),
        ],
    },
    Table {
        name: "signing_keys",
        sql: "SELECT key_id, algorithm, public_key, created_at, retired_at FROM signing_keys",
        key: Key::Text("key_id"),
        columns: &[
            ("algorithm", Text), ("public_key", Text), ("created_at", Text),
            ("retired_at", OptText),
        ],
    },
];

/// Every row of one table, in the replay's shape.
async fn read_table(db: &mut Db, r: &mut Register, table: &Table) -> StoreResult<()> {
    let mut last = (0, 0);
    for row in fetch(db, table.sql).await? {
        r.put(
            table.name,
            table.key.of(&row, &mut last)?,
            fields(&row, table.columns)?,
        );
    }
    Ok(())
}

/// The metrics, each with its owners and tags in their order.
async fn read_metrics(db: &mut Db, r: &mut Register) -> StoreResult<()> {
    let mut owners: BTreeMap<i64, Vec<String>> = BTreeMap::new();
    for row in fetch(
        db,
        "SELECT o.metric_id, u.username FROM metric_owners o JOIN users u ON u.id = o.user_id \
         ORDER BY o.metric_id, o.position",
    )
    .await?
    {
        owners
            .entry(row.try_get("metric_id")?)
            .or_default()
            .push(row.try_get("username")?);
    }
    let mut tags: BTreeMap<i64, Vec<String>> = BTreeMap::new();
    for row in fetch(
        db,
        "SELECT metric_id, tag FROM metric_tags ORDER BY metric_id, position",
    )
    .await?
    {
        tags.entry(row.try_get("metric_id")?)
            .or_default()
            .push(row.try_get("tag")?);
    }
    for row in fetch(
        db,
        "SELECT id, key, name, description, unit, data_source, review_cadence_months, \
         created_at FROM metrics",
    )
    .await?
    {
        let id: i64 = row.try_get("id")?;
        let mut f = fields(
            &row,
            &[
                ("name", Text),
                ("description", Text),
                ("unit", Text),
                ("data_source", Text),
                ("review_cadence_months", OptInt),
                ("created_at", Text),
            ],
        )?;
        f.insert("owners", list(owners.remove(&id).unwrap_or_default()));
        f.insert("tags", list(tags.remove(&id).unwrap_or_default()));
        r.put("metrics", RowKey::text(row.try_get::<String, _>("key")?), f);
    }
    Ok(())
}

async fn fetch(db: &mut Db, sql: &'static str) -> StoreResult<Vec<AnyRow>> {
    Ok(sqlx::query(sql).fetch_all(&mut *db).await?)
}

/// The columns a row's key is read from, as the replay keys the same table.
#[derive(Clone, Copy)]
enum Key {
    /// A text column: a username, a setting's name, a metric key.
    Text(&'static str),
    /// A number column: an id.
    Id(&'static str),
    /// Two number columns: a proposal id and a revision number.
    Pair(&'static str, &'static str),
    /// A text column and a number column: a metric key and a version number.
    Named(&'static str, &'static str),
    /// Rows kept per proposal in the order written (reviews, sign-offs, comments): the
    /// proposal id column, and the row's position among that proposal's rows, as the replay
    /// counts them (the query reads them in order).
    Position(&'static str),
}

impl Key {
    /// The key of `row`. `last` holds the proposal of the row read before and how many of its
    /// rows have been read, for [`Key::Position`].
    fn of(self, row: &AnyRow, last: &mut (i64, i64)) -> StoreResult<RowKey> {
        Ok(match self {
            Key::Text(column) => RowKey::text(row.try_get::<String, _>(column)?),
            Key::Id(column) => RowKey::id(row.try_get(column)?),
            Key::Pair(a, b) => RowKey::pair(row.try_get(a)?, row.try_get(b)?),
            Key::Named(a, b) => RowKey::named(row.try_get::<String, _>(a)?, row.try_get(b)?),
            Key::Position(column) => {
                let proposal: i64 = row.try_get(column)?;
                *last = if last.0 == proposal {
                    (proposal, last.1 + 1)
                } else {
                    (proposal, 1)
                };
                RowKey::pair(proposal, last.1)
            }
        })
    }
}

/// How a column is read, so that its value has the same form as the replay's.
#[derive(Clone, Copy)]
enum Kind {
    Text,
    OptText,
    Int,
    OptInt,
    Float,
    /// A comma-separated list of roles.
    Roles,
    /// Text holding JSON, kept as the text itself when it does not parse.
    Json,
}

/// The `columns` of a row, each read as its kind says.
fn fields(row: &AnyRow, columns: &[(&'static str, Kind)]) -> StoreResult<Fields> {
    let mut f = Fields::new();
    for (name, kind) in columns {
        let value = match kind {
            Text => text(row.try_get::<String, _>(*name)?),
            OptText => opt_text(row.try_get::<Option<String>, _>(*name)?),
            Int => int(row.try_get(*name)?),
            OptInt => opt_int(row.try_get(*name)?),
            Float => float(row.try_get(*name)?),
            Roles => roles_value(&row.try_get::<String, _>(*name)?),
            Json => {
                let json: String = row.try_get(*name)?;
                serde_json::from_str(&json).unwrap_or(Value::String(json))
            }
        };
        f.insert(*name, value);
    }
    Ok(f)
}
