//! The canonical text of a threshold version and its content hash (docs/design.md): LF-terminated
//! `name: value` lines in a fixed order, the rationale last and indented, so that a diff
//! between two revisions reads naturally and the hash covers everything, rationale included.

use sha2::{Digest, Sha256};

use crate::domain::number;
use crate::domain::proposal::ThresholdContent;

/// ```text
/// direction: higher_is_better
/// critical: 50
/// intervene: 70
/// outperform: 80
/// stretch: 90
/// shades: 3
/// unit: %
/// effective_from: on approval
/// rationale:
///   First line of the rationale.
///   Second line.
/// ```
pub fn canonical_text(content: &ThresholdContent) -> String {
    let mut out = String::new();
    let mut line = |name: &str, value: &str| {
        out.push_str(name);
        out.push_str(": ");
        out.push_str(value);
        out.push('\n');
    };
    line("direction", content.direction().as_str());
    for (name, value) in content.cuts.named() {
        line(name, &number::format(value));
    }
    line("shades", &content.shades.get().to_string());
    line("unit", &content.unit);
    let effective = content
        .effective_from
        .map_or_else(|| "on approval".to_string(), |t| t.to_string());
    line("effective_from", &effective);
    out.push_str("rationale:\n");
    for l in content.rationale.lines() {
        out.push_str("  ");
        out.push_str(l);
        out.push('\n');
    }
    out
}

/// The SHA-256 of the canonical text, lowercase hex.
pub fn content_hash(canonical: &str) -> String {
    hex::encode(Sha256::digest(canonical.as_bytes()))
}

/// A unified diff from `old` to `new` (empty when they are equal).
pub fn unified_diff(old: &str, new: &str) -> String {
    if old == new {
        return String::new();
    }
    diffy::create_patch(old, new).to_string()
}
