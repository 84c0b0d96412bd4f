//! The published set's pages: what is in force (or was, at a chosen time) with its digest and
//! signature status, a zone strip for each metric, downloads, and the changes between two
//! set revisions.

use axum::extract::State;
use axum::response::Response;
use base64::Engine;
use base64::engine::general_purpose::URL_SAFE_NO_PAD;
use ed25519_dalek::Verifier as _;
use serde::{Deserialize, Serialize};
use serde_json::Value;

use super::{Common, PageData, PageQuery, page};
use crate::charts::zone_strip::{StripRow, zone_strip};
use crate::domain::Timestamp;
use crate::domain::thresholds::{CutSet, Direction};
use crate::ops::publication::Change;
use crate::web::AppState;
use crate::web::auth::PageSession;
use crate::web::error::{ApiError, PageError};

#[derive(Deserialize, Default)]
#[serde(default)]
pub struct SetQuery {
    as_of: String,
    from: String,
    to: String,
}

/// A metric of the published set: its entry in the document, its cut points in order as words
/// ("critical 50, intervene 70, ...") and its zone strip.
#[derive(Debug, Serialize)]
pub struct PublishedMetric<'a> {
    pub key: &'a str,
    pub e: &'a Value,
    pub cuts: String,
    pub strip: String,
}

/// The published set at a time: the document's meta, each metric, and whether the signature
/// verifies.
#[derive(Debug, Serialize)]
pub struct PublishedPage<'a> {
    pub meta: &'a Value,
    pub metrics: Vec<PublishedMetric<'a>>,
    pub signature: String,
    /// The query that downloads the same set (empty for now).
    pub query: String,
    pub as_of: &'a str,
    /// Versions left out for not matching their approval are for those who look into it.
    pub show_withheld: bool,
}

impl PageData for PublishedPage<'_> {
    const TEMPLATE: &'static str = "published.html";
}

/// Checks a document's signature against the registered public key it names.
async fn signature_status(state: &AppState, doc: &Value) -> Result<String, PageError> {
    let keys = crate::ops::publication::keys(&state.store).await?;
    let key_id = doc["meta"]["key_id"].as_str().unwrap_or("");
    let Some(key) = keys.iter().find(|k| k.key_id == key_id) else {
        return Ok(format!(
            "signed with {key_id}, which is not a registered key"
        ));
    };
    let public: Option<[u8; 32]> = URL_SAFE_NO_PAD
        .decode(&key.public_key)
        .ok()
        .and_then(|b| b.try_into().ok());
    let signature = URL_SAFE_NO_PAD
        .decode(doc["meta"]["signature"].as_str().unwrap_or(""))
        .ok()
        .and_then(|b| ed25519_dalek::Signature::from_slice(&b).ok());
    let mut unsigned = doc.clone();
    if let Some(meta) = unsigned["meta"].as_object_mut() {
        meta.remove("signature");
    }
    let message = serde_json_canonicalizer::to_vec(&unsigned).unwrap_or_default();
    let ok = match (
        public.and_then(|p| ed25519_dalek::VerifyingKey::from_bytes(&p).ok()),
        signature,
    ) {
        (Some(vk), Some(sig)) => vk.verify(&message, &sig).is_ok(),
        _ => false,
    };
    Ok(if ok {
        format!("verified with key {key_id} ({})", key.status)
    } else {
        format!("does NOT verify with key {key_id}")
    })
}

pub async fn set(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PageQuery(q): PageQuery<SetQuery>,
) -> Result<Response, PageError> {
    let as_of = if q.as_of.trim().is_empty() {
        None
    } else {
        Some(
            Timestamp::parse(&q.as_of)
                .map_err(|e| PageError(ApiError::bad_request(e.to_string())))?,
        )
    };
    let r = crate::ops::publication::at(&state.publisher, &state.store, as_of, None, None).await?;
    let doc = &r.document;
    let mut metrics = Vec::new();
    if let Some(set) = doc["set"].as_object() {
        for (key, entry) in set {
            let direction: Direction = entry["direction"]
                .as_str()
                .and_then(|d| d.parse().ok())
                .unwrap_or(Direction::HigherIsBetter);
            let cuts_obj = entry["cuts"].as_object().cloned().unwrap_or_default();
            let cuts = CutSet::from_named(
                direction,
                cuts_obj
                    .iter()
                    .filter_map(|(k, v)| Some((k.as_str(), v.as_f64()?))),
            );
            let caption = format!("Version {}", entry["version"]);
            let strip = cuts
                .as_ref()
                .map(|c| {
                    zone_strip(
                        &format!("{} ({key})", entry["name"].as_str().unwrap_or(key)),
                        entry["unit"].as_str().unwrap_or(""),
                        &[StripRow {
                            caption: &caption,
                            cuts: c,
                        }],
                    )
                })
                .unwrap_or_default();
            let ordered: Vec<String> = direction
                .cut_names()
                .iter()
                .map(|n| {
                    format!(
                        "{n} {}",
                        cuts_obj
                            .get(*n)
                            .and_then(Value::as_f64)
                            .map(crate::domain::number::format)
                            .unwrap_or_default()
                    )
                })
                .collect();
            metrics.push(PublishedMetric {
                key,
                e: entry,
                cuts: ordered.join(", "),
                strip,
            });
        }
    }
    let query = if q.as_of.trim().is_empty() {
        String::new()
    } else {
        serde_urlencoded::to_string([("as_of", q.as_of.as_str())]).unwrap_or_default()
    };
    let roles = &session.user.roles;
    let data = PublishedPage {
        meta: &doc["meta"],
        metrics,
        signature: signature_status(&state, doc).await?,
        query,
        as_of: &q.as_of,
        show_withheld: roles.has(crate::domain::Role::Admin)
            || roles.has(crate::domain::Role::Auditor),
    };
    Ok(page(
        &Common::new(Some(&session), "Published set", "published"),
        &data,
    ))
}

/// The changes between two set revisions, the revisions as typed, and the current one.
#[derive(Debug, Serialize)]
pub struct ChangesPage<'a> {
    pub current: i64,
    pub from: &'a str,
    pub to: &'a str,
    /// None until two revisions are chosen (or when they cannot be compared).
    pub changes: Option<Vec<Change>>,
    pub error: Option<String>,
}

impl PageData for ChangesPage<'_> {
    const TEMPLATE: &'static str = "published_changes.html";
}

pub async fn changes(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    PageQuery(q): PageQuery<SetQuery>,
) -> Result<Response, PageError> {
    let current = crate::ops::publication::current(&state.publisher, &state.store)
        .await?
        .set_revision;
    let from = q.from.trim().parse::<i64>().ok();
    let to = q.to.trim().parse::<i64>().ok();
    let (changes, error) = match (from, to) {
        (Some(f), Some(t)) if 0 <= f && f <= t && t <= current => (
            Some(crate::ops::publication::changes(&state.store, f, t).await?),
            None,
        ),
        (None, None) if q.from.is_empty() && q.to.is_empty() => (None, None),
        _ => (
            None,
            Some(format!(
                "choose revisions with 0 <= from <= to <= {current}"
            )),
        ),
    };
    let data = ChangesPage {
        current,
        from: &q.from,
        to: &q.to,
        changes,
        error,
    };
    let common = Common::new(Some(&session), "Changes between set revisions", "published");
    Ok(page(&common, &data))
}
