//! The history chart in words, for its `<desc>`: the history's facts, each cut set's zones and
//! cut points and where it is drawn, and the limits.

use std::fmt::Write as _;

use super::layout::rounded;
use super::points::{MAX_DRAWN, Stats, date};
use super::{HistoryChart, background, band_sets};
use crate::charts::scale::Axis;
use crate::charts::zones::zones_and_cuts_in_words;
use crate::domain::number;
use crate::domain::thresholds::Shades;
use crate::engine::classify;

/// The picture in words, for people who cannot see it.
pub(super) fn describe(chart: &HistoryChart<'_>, stats: Option<&Stats>, axis: &Axis) -> String {
    let mut desc = String::new();
    let unit = if chart.unit.is_empty() {
        String::new()
    } else {
        format!(" in {}", chart.unit)
    };
    let sets = band_sets(chart);
    match stats {
        None => {
            desc.push_str("No history uploaded yet.");
            if !chart.unit.is_empty() {
                let _ = write!(desc, " Values{unit}.");
            }
        }
        Some(s) => {
            let (v, t) = (number::format(s.last.1), date(s.last.0));
            if s.count == 1 {
                let _ = write!(desc, "History of 1 value{unit}, on {t}: {v}");
            } else {
                let _ = write!(
                    desc,
                    "History of {} values{unit} from {} to {t}. Lowest {} on {}, highest {} on \
                     {}, latest {v} on {t}",
                    s.count,
                    date(s.first.0),
                    number::format(s.lowest.1),
                    date(s.lowest.0),
                    number::format(s.highest.1),
                    date(s.highest.0),
                );
            }
            let zones: Vec<String> = sets
                .iter()
                .map(|(short, bands)| {
                    let zone = classify(bands.cuts, Shades::default(), Some(s.last.1)).zone;
                    format!("{short}: {}", zone.as_str())
                })
                .collect();
            if !zones.is_empty() {
                let _ = write!(desc, " ({})", zones.join("; "));
            }
            desc.push('.');
            if s.count > MAX_DRAWN {
                let _ = write!(
                    desc,
                    " The line shows the lowest and highest value of each of {} equal spans of \
                     time.",
                    MAX_DRAWN / 2
                );
            }
        }
    }
    let background = background(chart);
    for (short, bands) in &sets {
        let shown = if background.is_some_and(|b| std::ptr::eq(b, *bands)) {
            format!(
                "drawn as the background bands with its cut points as lines across, and in the \
                 strip captioned {short}"
            )
        } else {
            format!("drawn in the strip captioned {short}")
        };
        let (zones, named) = zones_and_cuts_in_words(bands.cuts);
        let _ = write!(
            desc,
            " {} ({}), {shown}: zones {zones}; cut points {named}.",
            bands.caption,
            bands.cuts.direction(),
        );
    }
    if sets.is_empty() {
        desc.push_str(" No thresholds are drawn.");
    }
    if let Some(l) = &chart.limits {
        let _ = write!(
            desc,
            " Natural process limits, drawn as dashed lines: upper limit {}, mean {}, lower \
             limit {}.",
            rounded(l.upper, axis),
            rounded(l.mean, axis),
            rounded(l.lower, axis)
        );
    }
    desc
}
