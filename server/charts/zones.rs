//! The five zones of a cut set as the pictures show them: their colours, their order from low
//! values to high, the cut points in ascending order, and the zones in words.

use crate::domain::number;
use crate::domain::thresholds::{CutSet, Direction};
use crate::engine::Zone;

use super::svg::{INK, WHITE};

/// Fill and text colour of a zone. The fills are the ColorBrewer PuOr diverging palette: purple
/// and orange stay apart under the common colour-vision deficiencies, unlike red and green. Each
/// text colour is the one of white and near-black with the higher WCAG 2 contrast ratio (at
/// least 4.5:1 on every fill).
pub(crate) fn colours(zone: Zone) -> (&'static str, &'static str) {
    match zone {
        Zone::Critical => ("#b35806", WHITE),
        Zone::Intervene => ("#f1a340", INK),
        Zone::Steady => ("#f7f7f7", INK),
        Zone::Outperform => ("#998ec3", INK),
        Zone::Stretch => ("#542788", WHITE),
        // Never a zone of a strip (it is the zone of a missing value); white like the page.
        Zone::NoData => (WHITE, INK),
    }
}

/// The five zones from low values (left) to high values (right).
pub(crate) fn zones_left_to_right(direction: Direction) -> [Zone; 5] {
    use Zone::*;
    match direction {
        Direction::HigherIsBetter => [Critical, Intervene, Steady, Outperform, Stretch],
        Direction::LowerIsBetter => [Stretch, Outperform, Steady, Intervene, Critical],
        Direction::TargetBand => [Critical, Intervene, Steady, Intervene, Critical],
    }
}

/// The cut points as `(name, value)` in ascending value order, as the axis shows them.
///
/// In every direction the line belongs to the zone farther from `steady` (docs/design.md:
/// reaching a line counts as crossing it), so the two lowest lines belong to the zone on their
/// left and the two highest to the zone on their right.
pub(crate) fn ascending_cuts(cuts: &CutSet) -> [(&'static str, f64); 4] {
    let mut named = cuts.named();
    if cuts.direction() == Direction::LowerIsBetter {
        named.reverse();
    }
    named
}

/// The `i`-th zone from the left in words, e.g. "intervene above 50 and at or below 70": it
/// lies between the ascending cuts `i - 1` and `i`, and the outer zones are open-ended.
pub(crate) fn describe_zone(zone: Zone, i: usize, cuts: &[(&str, f64); 4]) -> String {
    let mut bounds = Vec::new();
    if i > 0 {
        // The two highest lines belong to the zone on their right (see `ascending_cuts`).
        let word = if i >= 3 { "at or above" } else { "above" };
        bounds.push(format!("{word} {}", number::format(cuts[i - 1].1)));
    }
    if i < 4 {
        // The two lowest lines belong to the zone on their left.
        let word = if i <= 1 { "at or below" } else { "below" };
        bounds.push(format!("{word} {}", number::format(cuts[i].1)));
    }
    format!("{} {}", zone.as_str(), bounds.join(" and "))
}

/// A cut set in words for a picture's description: its zones from low to high values, and
/// its cut points by name and value, each joined with commas.
pub(crate) fn zones_and_cuts_in_words(cut_set: &CutSet) -> (String, String) {
    let cuts = ascending_cuts(cut_set);
    let zones: Vec<String> = zones_left_to_right(cut_set.direction())
        .iter()
        .enumerate()
        .map(|(i, &zone)| describe_zone(zone, i, &cuts))
        .collect();
    let named: Vec<String> = cut_set
        .named()
        .iter()
        .map(|(name, value)| format!("{name} {}", number::format(*value)))
        .collect();
    (zones.join(", "), named.join(", "))
}
