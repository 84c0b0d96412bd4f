//! The field-level change between two threshold versions: for each cut point the old and new
//! value and the absolute and relative change, and whether the direction changed.

use serde::Serialize;

use crate::domain::number;
use crate::domain::thresholds::{CutSet, Direction};

/// How one cut point moved between two versions.
#[derive(Clone, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct CutChange {
    pub cut: &'static str,
    pub old: Option<f64>,
    pub new: Option<f64>,
    /// `new - old`, rounded to the decimals the two values are written with.
    pub absolute: Option<f64>,
    /// `(new - old) / |old|`; `None` when old is 0 (shown as n/a) or either side is missing.
    pub relative: Option<f64>,
    pub changed: bool,
    /// "intervene 80 -> 75 (-5, -6.25 %)"
    pub text: String,
    /// The absolute change as shown: "-5", "+0.5", or "n/a".
    pub absolute_text: String,
    /// The relative change as shown: "-6.25 %", or "n/a" (old value 0, or a side missing).
    pub relative_text: String,
}

/// What one version changes against the one before it: the direction and each cut point.
#[derive(Clone, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct FieldChanges {
    pub old_direction: Option<Direction>,
    pub new_direction: Direction,
    pub direction_changed: bool,
    pub cuts: Vec<CutChange>,
}

impl FieldChanges {
    /// Only the cut points that moved.
    pub fn moved(&self) -> impl Iterator<Item = &CutChange> {
        self.cuts.iter().filter(|c| c.changed)
    }
}

/// Decimal places of a number's shortest form (`0.25` has 2, `75` has 0, `1e-7` has 7).
fn decimals(v: f64) -> i32 {
    let text = number::format(v);
    let (mantissa, exponent) = match text.split_once('e') {
        Some((m, e)) => (m.to_string(), e.parse::<i32>().unwrap_or(0)),
        None => (text.clone(), 0),
    };
    let frac = mantissa.split_once('.').map_or(0, |(_, f)| f.len() as i32);
    (frac - exponent).max(0)
}

/// `new - old` without the binary noise (`0.3 - 0.1` is 0.2 here, not 0.19999999999999998).
fn difference(old: f64, new: f64) -> f64 {
    let places = decimals(old).max(decimals(new)).min(15);
    let scale = 10f64.powi(places);
    let d = ((new - old) * scale).round() / scale;
    if d.is_finite() { d } else { new - old }
}

fn signed(v: f64) -> String {
    if v > 0.0 {
        format!("+{}", number::format(v))
    } else {
        number::format(v)
    }
}

/// Two decimals at most, trailing zeros dropped: `-6.25`, `12.5`, `-66.67`.
fn percent(ratio: f64) -> String {
    let p = (ratio * 100.0 * 100.0).round() / 100.0;
    signed(p)
}

fn cut_change(cut: &'static str, old: Option<f64>, new: Option<f64>) -> CutChange {
    let (absolute, relative) = match (old, new) {
        (Some(o), Some(n)) => (
            Some(difference(o, n)),
            (o != 0.0).then(|| (n - o) / o.abs()),
        ),
        _ => (None, None),
    };
    let changed = old != new;
    let show = |v: Option<f64>| v.map_or_else(|| "none".to_string(), number::format);
    let text = match (absolute, relative) {
        (Some(_), _) if !changed => format!("{cut} {} (unchanged)", show(new)),
        (Some(a), Some(r)) => format!(
            "{cut} {} -> {} ({}, {} %)",
            show(old),
            show(new),
            signed(a),
            percent(r)
        ),
        (Some(a), None) => format!("{cut} {} -> {} ({}, n/a)", show(old), show(new), signed(a)),
        _ => format!("{cut} {} -> {}", show(old), show(new)),
    };
    CutChange {
        cut,
        old,
        new,
        absolute,
        relative,
        changed,
        text,
        absolute_text: absolute.map_or_else(|| "n/a".into(), signed),
        relative_text: relative.map_or_else(|| "n/a".into(), |r| format!("{} %", percent(r))),
    }
}

/// Compares `new` with the version before it (`None`: there was none). Cut points are matched
/// by name; when the direction changes between a band and a one-sided direction the names
/// differ, and each side's cuts are listed against nothing.
pub fn compare(old: Option<&CutSet>, new: &CutSet) -> FieldChanges {
    let mut cuts = Vec::new();
    let old_named: Vec<(&'static str, f64)> = old.map(|o| o.named().to_vec()).unwrap_or_default();
    for (name, value) in new.named() {
        let before = old_named.iter().find(|(n, _)| *n == name).map(|(_, v)| *v);
        cuts.push(cut_change(name, before, Some(value)));
    }
    for (name, value) in old_named {
        if !new.named().iter().any(|(n, _)| *n == name) {
            cuts.push(cut_change(name, Some(value), None));
        }
    }
    FieldChanges {
        old_direction: old.map(CutSet::direction),
        new_direction: new.direction(),
        direction_changed: old.is_some_and(|o| o.direction() != new.direction()),
        cuts,
    }
}
