//! The publisher's check of each version against the event that approved it: a version whose
//! fields do not hash to the revision hash its `version.approved` event recorded (or whose
//! published names and times differ from that event) was changed behind the record's back. It
//! is left out of the set and named in `meta.withheld`, so that a signature never vouches for
//! thresholds nobody approved.

use serde::Serialize;
use serde_json::Value;

use crate::domain::proposal::ThresholdContent;
use crate::engine::canonical::{canonical_text, content_hash};
use crate::store::versions::VersionRecord;

/// A version left out of a published set, and why.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Withheld {
    pub metric: String,
    pub version: i64,
    pub reason: String,
}

/// The approval event as stored: action, subject and payload text.
pub type ApprovalEvent = (String, String, String);

/// Checks `v` (of metric `key`) against its approval event; the reason it fails, if it does.
pub fn check(key: &str, v: &VersionRecord, approval: Option<&ApprovalEvent>) -> Result<(), String> {
    let Some((action, subject, payload)) = approval else {
        return Err(format!(
            "its approval event (seq {}) is not in the record",
            v.approval_seq
        ));
    };
    let payload: Value = serde_json::from_str(payload).unwrap_or(Value::Null);
    if action != "version.approved"
        || *subject != format!("metric:{key}")
        || payload["version"].as_i64() != Some(v.number)
    {
        return Err(format!(
            "event {} is not the approval of version {} of {key}",
            v.approval_seq, v.number
        ));
    }
    let recorded = payload["hash"].as_str().unwrap_or_default();
    if !hashes_to(v, recorded) {
        return Err(format!(
            "its fields do not hash to the revision hash {recorded} that event {} recorded",
            v.approval_seq
        ));
    }
    let same = |field: &str, stored: Value| payload[field] == stored;
    let mismatch = [
        ("approvers", serde_json::json!(v.approvers)),
        ("signatory", serde_json::json!(v.signatory)),
        ("effective_from", serde_json::json!(v.effective_from)),
        ("approved_at", serde_json::json!(v.approved_at)),
    ]
    .into_iter()
    .find(|(field, stored)| !same(field, stored.clone()));
    match mismatch {
        Some((field, stored)) => Err(format!(
            "its {field} is {stored}, but event {} recorded {}",
            v.approval_seq, payload[field]
        )),
        None => Ok(()),
    }
}

/// The revision text of a version is its content with the revision's effective time: the
/// version's own, or "on approval" when it took effect as it was approved.
fn hashes_to(v: &VersionRecord, recorded: &str) -> bool {
    let with = |effective_from| ThresholdContent {
        effective_from,
        ..v.content.clone()
    };
    content_hash(&canonical_text(&with(Some(v.effective_from)))) == recorded
        || (v.effective_from == v.approved_at
            && content_hash(&canonical_text(&with(None))) == recorded)
}
