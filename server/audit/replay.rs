//! Replaying the event record: what the audited tables must hold if every change went through
//! the application, so that a row changed, added or deleted behind its back is found even when
//! the chain of events itself is intact.
//!
//! [`Register::from_events`] rebuilds, from the events alone, every row of the tables that
//! matter (people and roles, the approval policy, metrics with owners and tags, histories'
//! sizes, proposals, revisions, reviews, sign-offs, comments, versions, API tokens and signing
//! keys), as plain field maps (`register`). The store reads the same tables into the same
//! shape, and `register::compare` names each row the events do not account for, each event
//! whose row is missing, and each field that differs. What the record cannot vouch for (password hashes, token
//! hashes, history values) is stated in docs/audit-chain.md.

use std::collections::BTreeMap;
use std::fmt;

use serde_json::Value;

use super::Event;
use super::register::{
    Fields, Register, Row, RowKey, float, int, opt_int, opt_text, roles_value, text,
};
use crate::domain::Timestamp;
use crate::domain::proposal::ThresholdContent;
use crate::domain::thresholds::{CutSet, Direction, Shades};
use crate::engine::canonical::{canonical_text, content_hash, unified_diff};
/// An event whose payload is not what its action needs: the replay cannot go on past it.
#[derive(Clone, Debug, PartialEq)]
pub struct Unreadable {
    pub seq: i64,
    pub action: String,
    pub reason: String,
}

impl fmt::Display for Unreadable {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "event {} ({}) cannot be replayed: {}",
            self.seq, self.action, self.reason
        )
    }
}

/// The revision content an event carries (`content` of proposal.created, revision.saved and
/// version.approved).
fn content_of(payload: &Value) -> Result<ThresholdContent, String> {
    let c = &payload["content"];
    let direction = c["direction"]
        .as_str()
        .and_then(|d| d.parse::<Direction>().ok())
        .ok_or("no direction")?;
    let cuts = c["cuts"].as_object().ok_or("no cuts")?;
    let named = cuts
        .iter()
        .map(|(k, v)| {
            v.as_f64()
                .map(|v| (k.as_str(), v))
                .ok_or("a cut is not a number")
        })
        .collect::<Result<Vec<_>, _>>()?;
    let cuts = CutSet::from_named(direction, named).map_err(|e| e.to_string())?;
    let shades =
        Shades::new(c["shades"].as_i64().ok_or("no shades")?).map_err(|e| e.to_string())?;
    let effective_from = match &c["effective_from"] {
        Value::Null => None,
        v => Some(
            v.as_str()
                .and_then(|t| Timestamp::parse(t).ok())
                .ok_or("effective_from is not a time")?,
        ),
    };
    Ok(ThresholdContent {
        cuts,
        shades,
        unit: c["unit"].as_str().ok_or("no unit")?.to_string(),
        effective_from,
        rationale: c["rationale"].as_str().ok_or("no rationale")?.to_string(),
    })
}

/// The content columns shared by revisions and versions.
fn content_fields(content: &ThresholdContent, fields: &mut Fields) {
    let [c1, c2, c3, c4] = content.cuts.values();
    fields.insert("direction", text(content.direction().as_str()));
    fields.insert("cut_1", float(c1));
    fields.insert("cut_2", float(c2));
    fields.insert("cut_3", float(c3));
    fields.insert("cut_4", float(c4));
    fields.insert("shades", int(i64::from(content.shades.get())));
    fields.insert("unit", text(&content.unit));
    fields.insert("effective_from", opt_text(content.effective_from));
    fields.insert("rationale", text(&content.rationale));
}

/// Rebuilds the register event by event ([`Replayer::apply`], in order of `seq` from the
/// first), keeping besides the rows the canonical texts the diffs need, and counts.
#[derive(Default)]
pub struct Replayer {
    register: Register,
    /// Canonical text of each revision, by (proposal, number).
    revision_text: BTreeMap<(i64, i64), String>,
    /// Each metric's latest version: (number, canonical text).
    latest_version: BTreeMap<String, (i64, String)>,
    /// Rows each proposal has so far in reviews, signoffs and comments.
    counts: BTreeMap<(&'static str, i64), i64>,
}

impl Register {
    /// The tables as the events describe them. Events must come in order of `seq`, from the
    /// first.
    pub fn from_events<'a>(
        events: impl IntoIterator<Item = &'a Event>,
    ) -> Result<Register, Unreadable> {
        let mut replayer = Replayer::new();
        for event in events {
            replayer.apply(event)?;
        }
        Ok(replayer.finish())
    }
}

/// Actions whose events shape no row: the replay need not read their payloads.
pub fn shapes_rows(action: &str) -> bool {
    !matches!(
        action,
        "signin.failed"
            | "signin.throttled"
            | "signoff.password_failed"
            | "review.refused"
            | "signoff.refused"
            | "user.password_reset"
    )
}

impl Replayer {
    /// Starts from an empty register: the schema's own rows only (the default policy).
    pub fn new() -> Replayer {
        let mut replayer = Replayer::default();
        let mut settings = Fields::new();
        settings.insert("value", text("1"));
        replayer.register.table("settings").insert(
            RowKey::text("reviewers_required"),
            Row {
                fields: settings,
                seq: 0,
                action: "the schema's default".into(),
            },
        );
        replayer
    }

    /// Applies the next event.
    pub fn apply(&mut self, event: &Event) -> Result<(), Unreadable> {
        if !shapes_rows(&event.action) {
            return Ok(());
        }
        self.shape(event).map_err(|reason| Unreadable {
            seq: event.seq,
            action: event.action.clone(),
            reason,
        })
    }

    /// The register the events applied so far describe.
    pub fn finish(self) -> Register {
        self.register
    }

    /// Sets (or creates) a row's fields, naming the event.
    fn set(&mut self, table: &'static str, key: RowKey, event: &Event, fields: Fields) {
        let row = self
            .register
            .table(table)
            .entry(key)
            .or_insert_with(|| Row {
                fields: Fields::new(),
                seq: 0,
                action: String::new(),
            });
        row.fields.extend(fields);
        row.seq = event.seq;
        row.action = event.action.clone();
    }

    /// The next position among a proposal's rows of `table` (1, 2, ...).
    fn next(&mut self, table: &'static str, proposal: i64) -> i64 {
        let n = self.counts.entry((table, proposal)).or_insert(0);
        *n += 1;
        *n
    }

    fn shape(&mut self, e: &Event) -> Result<(), String> {
        let p = &e.payload;
        let after = &p["after"];
        let subject_key = e.subject.split_once(':').map_or("", |(_, k)| k).to_string();
        let proposal = p["proposal"].as_i64().unwrap_or(0);
        let at = text(e.at.to_string());
        let mut f = Fields::new();
        match e.action.as_str() {
            "user.created" => {
                f.insert("display_name", after["display_name"].clone());
                f.insert("roles", roles(&after["roles"]));
                f.insert("active", int(1));
                f.insert("created_at", at);
                self.set("users", RowKey::text(subject_key), e, f);
            }
            "user.roles_changed" => {
                f.insert("roles", roles(&after["roles"]));
                self.set("users", RowKey::text(subject_key), e, f);
            }
            "user.display_name_changed" => {
                f.insert("display_name", after["display_name"].clone());
                self.set("users", RowKey::text(subject_key), e, f);
            }
            "user.activated" | "user.deactivated" => {
                let active = after["active"].as_bool().ok_or("no active")?;
                f.insert("active", int(i64::from(active)));
                self.set("users", RowKey::text(subject_key), e, f);
            }
            "policy.changed" => {
                let n = after["reviewers_required"]
                    .as_i64()
                    .ok_or("no reviewers_required")?;
                f.insert("value", text(n.to_string()));
                self.set("settings", RowKey::text("reviewers_required"), e, f);
            }
            "metric.created" | "metric.edited" => {
                let fields = after.as_object().ok_or("no after")?;
                for (name, column) in [
                    ("name", "name"),
                    ("description", "description"),
                    ("unit", "unit"),
                    ("data_source", "data_source"),
                    ("review_cadence_months", "review_cadence_months"),
                    ("owners", "owners"),
                    ("tags", "tags"),
                ] {
                    if let Some(v) = fields.get(name) {
                        f.insert(column, v.clone());
                    }
                }
                if e.action == "metric.created" {
                    f.insert("created_at", at);
                }
                self.set("metrics", RowKey::text(subject_key), e, f);
            }
            "observations.uploaded" => {
                let total = p["total"].as_i64().ok_or("no total")?;
                f.insert("rows", int(total));
                f.insert("observations", int(total));
                self.set("histories", RowKey::text(subject_key), e, f);
            }
            "proposal.created" => {
                f.insert("metric", text(&subject_key));
                f.insert("author", text(&e.actor));
                f.insert("state", text("draft"));
                f.insert("created_at", at);
                f.insert("sent_back_revision", Value::Null);
                f.insert("closed_at", Value::Null);
                f.insert("close_reason", text(""));
                f.insert("version_number", Value::Null);
                self.set("proposals", RowKey::id(proposal), e, f);
                self.revision(e, proposal, &subject_key, "first revision")?;
            }
            "revision.saved" => {
                let note = p["note"].as_str().ok_or("no note")?.to_string();
                self.revision(e, proposal, &subject_key, &note)?;
            }
            "proposal.submitted" => {
                f.insert("state", text("in_review"));
                self.set("proposals", RowKey::id(proposal), e, f);
            }
            "proposal.withdrawn" | "proposal.rejected" => {
                let state = e.action.trim_start_matches("proposal.");
                f.insert("state", text(state));
                f.insert("closed_at", at);
                f.insert("close_reason", p["reason"].clone());
                self.set("proposals", RowKey::id(proposal), e, f);
            }
            "comment.added" => {
                f.insert("revision_number", p["revision"].clone());
                f.insert("author", text(&e.actor));
                f.insert("cut", p["cut"].clone());
                f.insert("body", p["body"].clone());
                f.insert("created_at", at);
                let n = self.next("comments", proposal);
                self.set("comments", RowKey::pair(proposal, n), e, f);
            }
            "review.given" => {
                let verdict = p["verdict"].as_str().ok_or("no verdict")?;
                f.insert("revision_number", p["revision"].clone());
                f.insert("revision_hash", p["hash"].clone());
                f.insert("reviewer", text(&e.actor));
                f.insert("verdict", text(verdict));
                f.insert("comment", p["comment"].clone());
                f.insert("created_at", at);
                let n = self.next("reviews", proposal);
                self.set("reviews", RowKey::pair(proposal, n), e, f);
                if verdict == "send_back" {
                    let mut g = Fields::new();
                    g.insert("state", text("sent_back"));
                    g.insert("sent_back_revision", p["revision"].clone());
                    self.set("proposals", RowKey::id(proposal), e, g);
                }
            }
            "signoff.given" => {
                f.insert("revision_number", p["revision"].clone());
                f.insert("revision_hash", p["hash"].clone());
                f.insert("signer", text(&e.actor));
                f.insert("signer_name", p["signer"].clone());
                f.insert("meaning", p["meaning"].clone());
                f.insert("created_at", at);
                let n = self.next("signoffs", proposal);
                self.set("signoffs", RowKey::pair(proposal, n), e, f);
            }
            "version.approved" => self.version(e, proposal, &subject_key)?,
            "token.issued" => {
                let id: i64 = subject_key
                    .parse()
                    .map_err(|_| "the subject is no token id")?;
                for name in ["username", "prefix", "scope", "label", "expires_at"] {
                    f.insert(name, after[name].clone());
                }
                f.insert("created_at", at);
                f.insert("revoked_at", Value::Null);
                self.set("api_tokens", RowKey::id(id), e, f);
            }
            "token.revoked" => {
                let id: i64 = subject_key
                    .parse()
                    .map_err(|_| "the subject is no token id")?;
                f.insert("revoked_at", after["revoked_at"].clone());
                self.set("api_tokens", RowKey::id(id), e, f);
            }
            "key.registered" | "key.rotated" => {
                if e.action == "key.rotated" {
                    let current: Vec<RowKey> = self
                        .register
                        .table("signing_keys")
                        .iter()
                        .filter(|(_, r)| r.fields.get("retired_at") == Some(&Value::Null))
                        .map(|(k, _)| k.clone())
                        .collect();
                    for k in current {
                        let mut g = Fields::new();
                        g.insert("retired_at", at.clone());
                        self.set("signing_keys", k, e, g);
                    }
                }
                f.insert("algorithm", p["algorithm"].clone());
                f.insert("public_key", p["public_key"].clone());
                f.insert("created_at", at);
                f.insert("retired_at", Value::Null);
                self.set("signing_keys", RowKey::text(subject_key), e, f);
            }
            // Events without rows of their own: refusals, failed sign-ins and sign-offs,
            // throttles, password resets (the record does not hold the hash).
            _ => {}
        }
        Ok(())
    }

    /// A revision saved by `e` (proposal.created or revision.saved).
    fn revision(
        &mut self,
        e: &Event,
        proposal: i64,
        metric: &str,
        note: &str,
    ) -> Result<(), String> {
        let number = e.payload["revision"].as_i64().ok_or("no revision")?;
        let content = content_of(&e.payload)?;
        let canonical = canonical_text(&content);
        let recorded_hash = e.payload["hash"].as_str().ok_or("no hash")?;
        if content_hash(&canonical) != recorded_hash {
            return Err(format!(
                "its content hashes to {}, not to the {recorded_hash} it records",
                content_hash(&canonical)
            ));
        }
        let previous = self.revision_text.get(&(proposal, number - 1));
        let base = self.latest_version.get(metric);
        let mut f = Fields::new();
        content_fields(&content, &mut f);
        f.insert(
            "diff_from_previous",
            text(
                previous
                    .map(|p| unified_diff(p, &canonical))
                    .unwrap_or_default(),
            ),
        );
        f.insert("base_version", opt_int(base.map(|b| b.0)));
        f.insert(
            "diff_from_base",
            text(
                base.map(|b| unified_diff(&b.1, &canonical))
                    .unwrap_or_default(),
            ),
        );
        f.insert("content_hash", text(recorded_hash));
        f.insert("canonical_text", text(&canonical));
        f.insert("note", text(note));
        f.insert("author", text(&e.actor));
        f.insert("created_at", text(e.at.to_string()));
        self.revision_text.insert((proposal, number), canonical);
        self.set("revisions", RowKey::pair(proposal, number), e, f);
        Ok(())
    }

    /// A version recorded by `e` (version.approved), which also closes its proposal.
    fn version(&mut self, e: &Event, proposal: i64, metric: &str) -> Result<(), String> {
        let p = &e.payload;
        let number = p["version"].as_i64().ok_or("no version")?;
        let content = content_of(p)?;
        let canonical = canonical_text(&content);
        let name = self
            .register
            .table("metrics")
            .get(&RowKey::text(metric))
            .and_then(|m| m.fields.get("name").cloned())
            .unwrap_or(Value::Null);
        let mut f = Fields::new();
        content_fields(&content, &mut f);
        f.insert("proposal_id", int(proposal));
        f.insert("revision_number", p["revision"].clone());
        f.insert("revision_hash", p["hash"].clone());
        f.insert("approved_at", p["approved_at"].clone());
        f.insert("canonical_text", text(&canonical));
        f.insert("approvers", p["approvers"].clone());
        f.insert("signatory", p["signatory"].clone());
        f.insert("metric_name", name);
        f.insert("approval_seq", int(e.seq));
        self.set("versions", RowKey::named(metric, number), e, f);
        self.latest_version
            .insert(metric.to_string(), (number, canonical));
        let mut g = Fields::new();
        g.insert("state", text("approved"));
        g.insert("closed_at", text(e.at.to_string()));
        g.insert("close_reason", text(""));
        g.insert("version_number", int(number));
        self.set("proposals", RowKey::id(proposal), e, g);
        Ok(())
    }
}

/// Roles from an event's list, in the users table's form.
fn roles(v: &Value) -> Value {
    let names: Vec<&str> = v
        .as_array()
        .map(|a| a.iter().filter_map(Value::as_str).collect())
        .unwrap_or_default();
    roles_value(&names.join(","))
}
