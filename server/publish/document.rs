//! The published set as a document: `{"meta":{...},"set":{KEY:{...}}}` (docs/design.md), its
//! digest, its signature, and its bytes. The body is the RFC 8785 form of the signed document,
//! so the same request always gives the same bytes.

use std::collections::BTreeMap;

use base64::Engine;
use base64::engine::general_purpose::STANDARD;
use serde::Serialize;
use serde_json::{Map, Value, json};
use sha2::{Digest, Sha256};

use super::signing::Signer;
use crate::domain::Timestamp;
use crate::domain::csv_out::{Cell, CsvOut};
use crate::domain::proposal::cuts_object;
use crate::store::versions::VersionRecord;

/// The `$id` of docs/schema/published-set.schema.json, named in every document.
pub const SCHEMA_ID: &str = "urn:cutpoints:schema:published-set:1";

/// How long a rationale's first line may be in the set.
pub const RATIONALE_LINE_MAX: usize = 200;

/// The eight cut point names of the CSV, in order.
pub const CSV_CUTS: [&str; 8] = [
    "critical",
    "intervene",
    "outperform",
    "stretch",
    "critical_low",
    "intervene_low",
    "intervene_high",
    "critical_high",
];

/// What a set is made of, before it is encoded.
#[derive(Clone, Debug)]
pub struct SetContent {
    pub set_revision: i64,
    pub in_force_since: Option<Timestamp>,
    pub audit_head: String,
    pub metrics_without_version: Vec<String>,
    /// Versions in force that were left out because they do not match their approval event.
    pub withheld: Vec<super::withhold::Withheld>,
    /// Versions in force, by metric key.
    pub versions: Vec<(String, VersionRecord)>,
    /// Present only when the request named them.
    pub as_of: Option<Timestamp>,
    pub known_at: Option<Timestamp>,
}

impl SetContent {
    /// The same set for one metric alone.
    pub fn only(&self, key: &str) -> SetContent {
        SetContent {
            versions: self
                .versions
                .iter()
                .filter(|(k, _)| k == key)
                .cloned()
                .collect(),
            metrics_without_version: self
                .metrics_without_version
                .iter()
                .filter(|k| *k == key)
                .cloned()
                .collect(),
            withheld: self
                .withheld
                .iter()
                .filter(|w| w.metric == key)
                .cloned()
                .collect(),
            audit_head: self.audit_head.clone(),
            ..*self
        }
    }
}

/// The first line of a rationale, at most 200 characters.
pub fn rationale_line(rationale: &str) -> String {
    rationale
        .lines()
        .next()
        .unwrap_or("")
        .chars()
        .take(RATIONALE_LINE_MAX)
        .collect()
}

fn entry(v: &VersionRecord) -> Value {
    json!({
        "name": v.metric_name,
        "unit": v.content.unit,
        "direction": v.content.direction().as_str(),
        "cuts": cuts_object(&v.content.cuts),
        "shades": v.content.shades.get(),
        "version": v.number,
        "effective_from": v.effective_from,
        "approved_at": v.approved_at,
        "approvers": v.approvers,
        "signatory": v.signatory,
        "rationale": rationale_line(&v.content.rationale),
    })
}

fn jcs(value: &Value) -> Vec<u8> {
    serde_json_canonicalizer::to_vec(value).expect("plain JSON")
}

/// `sha-256:` and the hex SHA-256 of the RFC 8785 bytes of `set`.
pub fn digest_of_set(set: &Value) -> String {
    format!("sha-256:{}", hex::encode(Sha256::digest(jcs(set))))
}

/// A set rendered for sending: the bytes and what the response headers say about them.
#[derive(Clone, Debug, Serialize)]
pub struct Rendered {
    #[serde(skip)]
    pub json: bytes::Bytes,
    #[serde(skip)]
    pub csv: bytes::Bytes,
    pub set_revision: i64,
    pub digest: String,
    pub key_id: String,
    /// Strong entity tags (RFC 9110 §8.8.3), from the SHA-256 of each body.
    pub json_etag: String,
    pub csv_etag: String,
    /// `Content-Digest` values (RFC 9530): `sha-256=:BASE64:`.
    pub json_content_digest: String,
    pub csv_content_digest: String,
    #[serde(skip)]
    pub document: Value,
    /// Each metric's cut set and shades, for evaluating values against this set.
    #[serde(skip)]
    pub cut_sets: std::collections::HashMap<String, (crate::domain::CutSet, crate::domain::Shades)>,
}

fn etag_and_digest(body: &[u8]) -> (String, String) {
    let sum = Sha256::digest(body);
    (
        format!("\"{}\"", hex::encode(sum)),
        format!("sha-256=:{}:", STANDARD.encode(sum)),
    )
}

/// The signed document: meta.signature is Ed25519 over the RFC 8785 bytes of the whole
/// document without meta.signature, so digest, revision and audit head are signed too.
pub fn document(content: &SetContent, signer: &Signer) -> Value {
    let set: Map<String, Value> = content
        .versions
        .iter()
        .map(|(key, v)| (key.clone(), entry(v)))
        .collect();
    let set = Value::Object(set);
    let mut meta = Map::new();
    meta.insert("set_revision".into(), json!(content.set_revision));
    meta.insert("in_force_since".into(), json!(content.in_force_since));
    if let Some(t) = content.as_of {
        meta.insert("as_of".into(), json!(t));
    }
    if let Some(t) = content.known_at {
        meta.insert("known_at".into(), json!(t));
    }
    meta.insert("audit_head".into(), json!(content.audit_head));
    meta.insert(
        "metrics_without_version".into(),
        json!(content.metrics_without_version),
    );
    if !content.withheld.is_empty() {
        meta.insert("withheld".into(), json!(content.withheld));
    }
    meta.insert("digest".into(), json!(digest_of_set(&set)));
    meta.insert("key_id".into(), json!(signer.key_id()));
    meta.insert("schema".into(), json!(SCHEMA_ID));
    let mut doc = json!({"meta": Value::Object(meta), "set": set});
    let signature = signer.sign(&jcs(&doc));
    doc["meta"]["signature"] = json!(signature);
    doc
}

/// The set as RFC 4180 CSV: a header row, one row per metric, CRLF line ends; text cells
/// safe for spreadsheets (`domain::csv_out`).
pub fn csv(content: &SetContent) -> Vec<u8> {
    let mut header = vec!["key", "name", "unit", "direction"];
    header.extend(CSV_CUTS);
    header.extend(["shades", "version", "effective_from", "approved_at"]);
    let mut out = CsvOut::new(&header, 200 * (content.versions.len() + 1));
    for (key, v) in &content.versions {
        let cuts: BTreeMap<&str, f64> = v.content.cuts.named().into_iter().collect();
        let mut row = vec![
            Cell::Text(key),
            Cell::Text(&v.metric_name),
            Cell::Text(&v.content.unit),
            Cell::Text(v.content.direction().as_str()),
        ];
        row.extend(
            CSV_CUTS
                .iter()
                .map(|name| Cell::number(cuts.get(name).copied())),
        );
        row.extend([
            Cell::Number(v.content.shades.get().to_string()),
            Cell::Number(v.number.to_string()),
            Cell::Time(v.effective_from),
            Cell::Time(v.approved_at),
        ]);
        out.row(&row);
    }
    out.finish()
}

/// Encodes, signs and renders both formats.
pub fn render(content: &SetContent, signer: &Signer) -> Rendered {
    let doc = document(content, signer);
    let json_bytes = jcs(&doc);
    let csv_bytes = csv(content);
    let (json_etag, json_content_digest) = etag_and_digest(&json_bytes);
    let (csv_etag, csv_content_digest) = etag_and_digest(&csv_bytes);
    Rendered {
        set_revision: content.set_revision,
        digest: doc["meta"]["digest"]
            .as_str()
            .unwrap_or_default()
            .to_string(),
        key_id: signer.key_id().to_string(),
        json: json_bytes.into(),
        csv: csv_bytes.into(),
        json_etag,
        csv_etag,
        json_content_digest,
        csv_content_digest,
        document: doc,
        cut_sets: content
            .versions
            .iter()
            .map(|(key, v)| (key.clone(), (v.content.cuts, v.content.shades)))
            .collect(),
    }
}
