//! The audited tables read whole into the shape the replay rebuilds from the event record
//! (`audit::replay`), and the full check that compares the two inside one snapshot.

use std::collections::BTreeMap;

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
pub async fn check(store: &Store, known_head: Option<(i64, String)>) -> StoreResult<Finding> {
    let mut db = store.begin_snapshot().await?;
    let mut replayer = Replayer::new();
    let walked = super::events::walk(&mut db, known_head, |row, parts| {
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
    let differences = crate::audit::register::compare(&stored, &replayer.finish());
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

/// Every row of the audited tables, in the replay's shape.
pub async fn read(db: &mut Db) -> StoreResult<Register> {
    let mut r = Register::default();
    for row in fetch(
        db,
        "SELECT username, display_name, roles, active, created_at FROM users",
    )
    .await?
    {
        let roles: String = row.try_get("roles")?;
        r.put(
            "users",
            RowKey::text(s(&row, "username")?),
            fields(
                &row,
                &[
                    ("display_name", Kind::Text),
                    ("active", Kind::Int),
                    ("created_at", Kind::Text),
                ],
                [("roles", roles_value(&roles))],
            )?,
        );
    }
    for row in fetch(db, "SELECT name, value FROM settings").await? {
        r.put(
            "settings",
            RowKey::text(s(&row, "name")?),
            fields(&row, &[("value", Kind::Text)], [])?,
        );
    }
    read_metrics(db, &mut r).await?;
    for row in fetch(
        db,
        "SELECT m.key, h.rows, (SELECT COUNT(*) FROM observations o WHERE o.history_id = h.id) AS observations \
         FROM histories h JOIN metrics m ON m.id = h.metric_id WHERE h.state = 'live'",
    )
    .await?
    {
        r.put("histories", RowKey::text(s(&row, "key")?), fields(&row, &[("rows", Kind::Int), ("observations", Kind::Int)], [])?);
    }
    for row in fetch(
        db,
        "SELECT p.id, m.key AS metric, u.username AS author, p.state, p.created_at, \
         p.sent_back_revision, p.closed_at, p.close_reason, p.version_number \
         FROM proposals p JOIN metrics m ON m.id = p.metric_id JOIN users u ON u.id = p.author_id",
    )
    .await?
    {
        r.put(
            "proposals",
            RowKey::id(row.try_get("id")?),
            fields(
                &row,
                &[
                    ("metric", Kind::Text),
                    ("author", Kind::Text),
                    ("state", Kind::Text),
                    ("created_at", Kind::Text),
                    ("sent_back_revision", Kind::OptInt),
                    ("closed_at", Kind::OptText),
                    ("close_reason", Kind::Text),
                    ("version_number", Kind::OptInt),
                ],
                [],
            )?,
        );
    }
    for row in fetch(
        db,
        "SELECT r.proposal_id, r.number, r.direction, r.cut_1, r.cut_2, r.cut_3, r.cut_4, r.shades, \
         r.unit, r.effective_from, r.rationale, r.canonical_text, r.content_hash, r.diff_from_previous, \
         r.base_version, r.diff_from_base, r.note, u.username AS author, r.created_at \
         FROM revisions r JOIN users u ON u.id = r.author_id",
    )
    .await?
    {
        let key = RowKey::pair(row.try_get("proposal_id")?, row.try_get("number")?);
        r.put("revisions", key, fields(&row, &[
            ("direction", Kind::Text),
            ("cut_1", Kind::Float),
            ("cut_2", Kind::Float),
            ("cut_3", Kind::Float),
            ("cut_4", Kind::Float),
            ("shades", Kind::Int),
            ("unit", Kind::Text),
            ("effective_from", Kind::OptText),
            ("rationale", Kind::Text),
            ("canonical_text", Kind::Text),
            ("content_hash", Kind::Text),
            ("diff_from_previous", Kind::Text),
            ("base_version", Kind::OptInt),
            ("diff_from_base", Kind::Text),
            ("note", Kind::Text),
            ("author", Kind::Text),
            ("created_at", Kind::Text),
        ], [])?);
    }
    read_numbered(db, &mut r, "reviews",
        "SELECT x.proposal_id, x.revision_number, x.revision_hash, u.username AS reviewer, x.verdict, \
         x.comment, x.created_at FROM reviews x JOIN users u ON u.id = x.reviewer_id ORDER BY x.proposal_id, x.id",
        &[("revision_number", Kind::Int), ("revision_hash", Kind::Text), ("reviewer", Kind::Text),
          ("verdict", Kind::Text), ("comment", Kind::Text), ("created_at", Kind::Text)]).await?;
    read_numbered(db, &mut r, "signoffs",
        "SELECT x.proposal_id, x.revision_number, x.revision_hash, u.username AS signer, x.signer_name, \
         x.meaning, x.created_at FROM signoffs x JOIN users u ON u.id = x.signer_id ORDER BY x.proposal_id, x.id",
        &[("revision_number", Kind::Int), ("revision_hash", Kind::Text), ("signer", Kind::Text),
          ("signer_name", Kind::Text), ("meaning", Kind::Text), ("created_at", Kind::Text)]).await?;
    read_numbered(db, &mut r, "comments",
        "SELECT x.proposal_id, x.revision_number, u.username AS author, x.cut, x.body, x.created_at \
         FROM comments x JOIN users u ON u.id = x.author_id ORDER BY x.proposal_id, x.id",
        &[("revision_number", Kind::Int), ("author", Kind::Text), ("cut", Kind::OptText),
          ("body", Kind::Text), ("created_at", Kind::Text)]).await?;
    for row in fetch(
        db,
        "SELECT m.key, v.number, v.proposal_id, v.revision_number, v.revision_hash, v.direction, \
         v.cut_1, v.cut_2, v.cut_3, v.cut_4, v.shades, v.unit, v.effective_from, v.rationale, \
         v.approved_at, v.canonical_text, v.approvers, v.signatory, v.metric_name, v.approval_seq \
         FROM versions v JOIN metrics m ON m.id = v.metric_id",
    )
    .await?
    {
        let approvers: String = row.try_get("approvers")?;
        let approvers = serde_json::from_str(&approvers).unwrap_or(Value::String(approvers));
        r.put(
            "versions",
            RowKey::named(s(&row, "key")?, row.try_get("number")?),
            fields(
                &row,
                &[
                    ("proposal_id", Kind::Int),
                    ("revision_number", Kind::Int),
                    ("revision_hash", Kind::Text),
                    ("direction", Kind::Text),
                    ("cut_1", Kind::Float),
                    ("cut_2", Kind::Float),
                    ("cut_3", Kind::Float),
                    ("cut_4", Kind::Float),
                    ("shades", Kind::Int),
                    ("unit", Kind::Text),
                    ("effective_from", Kind::OptText),
                    ("rationale", Kind::Text),
                    ("approved_at", Kind::Text),
                    ("canonical_text", Kind::Text),
                    ("signatory", Kind::OptText),
                    ("metric_name", Kind::Text),
                    ("approval_seq", Kind::Int),
                ],
                [("approvers", approvers)],
            )?,
        );
    }
    for row in fetch(
        db,
        "SELECT t.id, u.username, t.prefix, t.scope, t.label, t.created_at, t.expires_at, t.revoked_at \
         FROM api_tokens t JOIN users u ON u.id = t.user_id",
    )
    .await?
    {
        r.put("api_tokens", RowKey::id(row.try_get("id")?), fields(&row, &[
            ("username", Kind::Text),
            ("prefix", Kind::Text),
            ("scope", Kind::Text),
            ("label", Kind::Text),
            ("created_at", Kind::Text),
            ("expires_at", Kind::OptText),
            ("revoked_at", Kind::OptText),
        ], [])?);
    }
    for row in fetch(
        db,
        "SELECT key_id, algorithm, public_key, created_at, retired_at FROM signing_keys",
    )
    .await?
    {
        r.put(
            "signing_keys",
            RowKey::text(s(&row, "key_id")?),
            fields(
                &row,
                &[
                    ("algorithm", Kind::Text),
                    ("public_key", Kind::Text),
                    ("created_at", Kind::Text),
                    ("retired_at", Kind::OptText),
                ],
                [],
            )?,
        );
    }
    Ok(r)
}

async fn read_metrics(db: &mut Db, r: &mut Register) -> StoreResult<()> {
    let mut owners: BTreeMap<i64, Vec<String>> = BTreeMap::new();
    for row in fetch(db, "SELECT o.metric_id, u.username FROM metric_owners o JOIN users u ON u.id = o.user_id ORDER BY o.metric_id, o.position").await? {
        owners.entry(row.try_get("metric_id")?).or_default().push(row.try_get("username")?);
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
        "SELECT id, key, name, description, unit, data_source, review_cadence_months, created_at FROM metrics",
    )
    .await?
    {
        let id: i64 = row.try_get("id")?;
        r.put("metrics", RowKey::text(s(&row, "key")?), fields(&row, &[
            ("name", Kind::Text),
            ("description", Kind::Text),
            ("unit", Kind::Text),
            ("data_source", Kind::Text),
            ("review_cadence_months", Kind::OptInt),
            ("created_at", Kind::Text),
        ], [
            ("owners", list(owners.remove(&id).unwrap_or_default())),
            ("tags", list(tags.remove(&id).unwrap_or_default())),
        ])?);
    }
    Ok(())
}

/// Rows kept per proposal in the order written (reviews, sign-offs, comments): each is keyed
/// by its proposal and its position among them, as the replay counts them.
async fn read_numbered(
    db: &mut Db,
    r: &mut Register,
    table: &'static str,
    sql: &'static str,
    columns: &[(&'static str, Kind)],
) -> StoreResult<()> {
    let mut last = (0, 0);
    for row in fetch(db, sql).await? {
        let proposal: i64 = row.try_get("proposal_id")?;
        last = if last.0 == proposal {
            (proposal, last.1 + 1)
        } else {
            (proposal, 1)
        };
        r.put(
            table,
            RowKey::pair(proposal, last.1),
            fields(&row, columns, [])?,
        );
    }
    Ok(())
}

async fn fetch(db: &mut Db, sql: &'static str) -> StoreResult<Vec<AnyRow>> {
    Ok(sqlx::query(sql).fetch_all(&mut *db).await?)
}

fn s(row: &AnyRow, column: &str) -> StoreResult<String> {
    Ok(row.try_get(column)?)
}

/// How a column is read, so that its value has the same form as the replay's.
#[derive(Clone, Copy)]
enum Kind {
    Text,
    OptText,
    Int,
    OptInt,
    Float,
}

fn fields<const N: usize>(
    row: &AnyRow,
    columns: &[(&'static str, Kind)],
    extra: [(&'static str, Value); N],
) -> StoreResult<Fields> {
    let mut f = Fields::new();
    for (name, kind) in columns {
        let value = match kind {
            Kind::Text => text(row.try_get::<String, _>(*name)?),
            Kind::OptText => opt_text(row.try_get::<Option<String>, _>(*name)?),
            Kind::Int => int(row.try_get(*name)?),
            Kind::OptInt => opt_int(row.try_get(*name)?),
            Kind::Float => float(row.try_get(*name)?),
        };
        f.insert(*name, value);
    }
    f.extend(extra);
    Ok(f)
}
