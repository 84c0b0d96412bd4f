//! Classifying a value against a cut set, exactly as DESIGN.md states the rules.
//!
//! Reaching a line counts as crossing it: the line itself belongs to the zone beyond it.

use serde::Serialize;

use crate::domain::thresholds::{CutSet, Direction, Shades};

/// Where a value falls.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Zone {
    Critical,
    Intervene,
    Steady,
    Outperform,
    Stretch,
    NoData,
}

impl Zone {
    pub const ALL: [Zone; 6] = [
        Zone::Critical,
        Zone::Intervene,
        Zone::Steady,
        Zone::Outperform,
        Zone::Stretch,
        Zone::NoData,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Zone::Critical => "critical",
            Zone::Intervene => "intervene",
            Zone::Steady => "steady",
            Zone::Outperform => "outperform",
            Zone::Stretch => "stretch",
            Zone::NoData => "no_data",
        }
    }

    fn is_bad_side(self) -> bool {
        matches!(self, Zone::Critical | Zone::Intervene)
    }
}

/// Which side of a target band a value left it on.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Side {
    Low,
    High,
}

/// The engine's answer for one value. Field order is the order of the command line's output.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Classification {
    pub value: Option<f64>,
    pub zone: Zone,
    pub severity: Option<f64>,
    pub shade: Option<u8>,
    pub signal: Option<i8>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub side: Option<Side>,
}

/// Classifies one value. `None` is a missing value (`no_data`). The caller guarantees a finite
/// value (see [`crate::domain::thresholds::parse_finite`]); a non-finite one is treated as
/// missing rather than given a zone it does not have.
pub fn classify(cuts: &CutSet, shades: Shades, value: Option<f64>) -> Classification {
    let Some(v) = value.filter(|v| v.is_finite()) else {
        return Classification {
            value: None,
            zone: Zone::NoData,
            severity: None,
            shade: None,
            signal: None,
            side: None,
        };
    };
    let [a, b, c, d] = cuts.values();
    let (zone, severity, side) = match cuts.direction() {
        Direction::HigherIsBetter => {
            let (crit, int, out, str_) = (a, b, c, d);
            if v <= crit {
                (Zone::Critical, 1.0, None)
            } else if v <= int {
                (Zone::Intervene, (int - v) / (int - crit), None)
            } else if v < out {
                (Zone::Steady, 0.0, None)
            } else if v < str_ {
                (Zone::Outperform, (v - out) / (str_ - out), None)
            } else {
                (Zone::Stretch, 1.0, None)
            }
        }
        Direction::LowerIsBetter => {
            let (crit, int, out, str_) = (a, b, c, d);
            if v >= crit {
                (Zone::Critical, 1.0, None)
            } else if v >= int {
                (Zone::Intervene, (v - int) / (crit - int), None)
            } else if v > out {
                (Zone::Steady, 0.0, None)
            } else if v > str_ {
                (Zone::Outperform, (out - v) / (out - str_), None)
            } else {
                (Zone::Stretch, 1.0, None)
            }
        }
        Direction::TargetBand => {
            let (cl, il, ih, ch) = (a, b, c, d);
            if v <= cl {
                (Zone::Critical, 1.0, Some(Side::Low))
            } else if v <= il {
                (Zone::Intervene, (il - v) / (il - cl), Some(Side::Low))
            } else if v < ih {
                (Zone::Steady, 0.0, None)
            } else if v < ch {
                (Zone::Intervene, (v - ih) / (ch - ih), Some(Side::High))
            } else {
                (Zone::Critical, 1.0, Some(Side::High))
            }
        }
    };
    let s = shades.get();
    let shade = match zone {
        Zone::Steady => 0,
        Zone::Critical | Zone::Stretch => s + 1,
        // Computed in f64 exactly as DESIGN.md writes it: severity first, then times S.
        _ => {
            let graded = (severity * f64::from(s)).floor() + 1.0;
            (graded.min(f64::from(s))) as u8
        }
    };
    let signal = if zone.is_bad_side() {
        -(shade as i8)
    } else {
        shade as i8
    };
    Classification {
        value: Some(v),
        zone,
        severity: Some(severity),
        shade: Some(shade),
        signal: Some(signal),
        side,
    }
}

/// Classifies many values; each answer depends only on its own value.
pub fn classify_all(cuts: &CutSet, shades: Shades, values: &[Option<f64>]) -> Vec<Classification> {
    values.iter().map(|v| classify(cuts, shades, *v)).collect()
}
