//! Warnings a reviewer needs about a cut set, judged against the metric's history: each with a
//! stable code and its reason in plain words.

use serde::Serialize;

use super::backtest::Backtest;
use super::stats::{LIMITS_MIN_POINTS, ProcessLimits};
use crate::domain::number;
use crate::domain::thresholds::{CutSet, Direction};

/// The share of periods at critical above which a cut set is flagged, unless the reader picks
/// another. Our own default, not a published figure: a critical line reached in more than one
/// period in ten is rarely an exceptional event.
pub const DEFAULT_CRITICAL_SHARE: f64 = 0.10;

/// One warning.
#[derive(Clone, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Warning {
    /// Stable, for tools: `too_little_history`, `intervene_within_routine_variation`,
    /// `intervene_beyond_routine_variation`, `never_reached`, `critical_often`.
    pub code: &'static str,
    /// The reason in plain words.
    pub message: String,
    /// The cut point it is about, if one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cut: Option<&'static str>,
    /// The share of periods it is about (0 to 1), if one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub share: Option<f64>,
}

/// A share as people read it: "12 %", "less than 1 %", "0 %".
pub fn percent(share: f64) -> String {
    let p = (share * 100.0).round();
    if p == 0.0 && share > 0.0 {
        "less than 1 %".to_string()
    } else {
        format!("{p} %")
    }
}

/// What the reviewer is told about `cuts` over a window of `count` periods whose backtest is
/// `bt` and whose natural process limits are `limits`.
pub fn warnings(
    cuts: &CutSet,
    bt: &Backtest,
    limits: Option<&ProcessLimits>,
    critical_share: f64,
) -> Vec<Warning> {
    let mut out = Vec::new();
    let count = bt.periods;
    if count < LIMITS_MIN_POINTS {
        out.push(Warning {
            code: "too_little_history",
            message: format!(
                "Only {count} period{} of history in this window: natural process limits need at \
                 least {LIMITS_MIN_POINTS} points to be dependable (common practice in statistical \
                 process control texts), so treat the limits and shares below as rough.",
                if count == 1 { "" } else { "s" }
            ),
            cut: None,
            share: None,
        });
    }
    if count == 0 {
        return out;
    }
    let named: Vec<(&'static str, f64)> = cuts.named().to_vec();
    let value_of = |name: &str| {
        named
            .iter()
            .find(|(n, _)| *n == name)
            .map(|(_, v)| *v)
            .expect("cut of the direction")
    };
    let sides = bt.sides.as_ref();
    if let Some(l) = limits {
        let range = format!(
            "{} to {}",
            number::format(round_for_text(l.lower)),
            number::format(round_for_text(l.upper))
        );
        // (cut, is the line inside the limits, is it past the far limit, share of periods
        // at or past it)
        let mut checks: Vec<(&'static str, bool, bool, f64)> = Vec::new();
        let bad = |zone: &str| bt.zones.get(zone).copied().unwrap_or(0);
        match cuts.direction() {
            Direction::HigherIsBetter => {
                let i = value_of("intervene");
                checks.push((
                    "intervene",
                    i > l.lower && i < l.upper,
                    i >= l.upper,
                    share(bad("critical") + bad("intervene"), count),
                ));
            }
            Direction::LowerIsBetter => {
                let i = value_of("intervene");
                checks.push((
                    "intervene",
                    i > l.lower && i < l.upper,
                    i <= l.lower,
                    share(bad("critical") + bad("intervene"), count),
                ));
            }
            Direction::TargetBand => {
                let side = |s: &str| sides.and_then(|m| m.get(s)).copied().unwrap_or(0);
                let (low, high) = (value_of("intervene_low"), value_of("intervene_high"));
                checks.push((
                    "intervene_low",
                    low > l.lower && low < l.upper,
                    low >= l.upper,
                    share(side("low"), count),
                ));
                checks.push((
                    "intervene_high",
                    high > l.lower && high < l.upper,
                    high <= l.lower,
                    share(side("high"), count),
                ));
            }
        }
        for (cut, inside, beyond, share) in checks {
            if beyond {
                out.push(Warning {
                    code: "intervene_beyond_routine_variation",
                    message: format!(
                        "The {} line ({}) lies past the whole range of routine variation (natural \
                         process limits {range}): it would fire on most periods, about {} of \
                         this history.",
                        cut.replace('_', " "),
                        number::format(value_of(cut)),
                        percent(share)
                    ),
                    cut: Some(cut),
                    share: Some(share),
                });
            } else if inside {
                out.push(Warning {
                    code: "intervene_within_routine_variation",
                    message: format!(
                        "The {} line ({}) lies within the natural process limits ({range}): it \
                         would fire on routine variation about {} of periods (in this history).",
                        cut.replace('_', " "),
                        number::format(value_of(cut)),
                        percent(share)
                    ),
                    cut: Some(cut),
                    share: Some(share),
                });
            }
        }
    }
    if cuts.direction() != Direction::TargetBand {
        for cut in ["outperform", "stretch"] {
            let reached = match cut {
                "outperform" => bt.zones["outperform"] + bt.zones["stretch"],
                _ => bt.zones["stretch"],
            };
            if reached == 0 {
                out.push(Warning {
                    code: "never_reached",
                    message: format!(
                        "The {cut} line ({}) was never reached in the {count} periods of this \
                         history.",
                        number::format(value_of(cut))
                    ),
                    cut: Some(cut),
                    share: Some(0.0),
                });
            }
        }
    }
    let critical = share(bt.zones["critical"], count);
    if critical > critical_share {
        out.push(Warning {
            code: "critical_often",
            message: format!(
                "A critical line was reached in {} of periods, more than the chosen {}: critical \
                 would be a routine state, not an exception.",
                percent(critical),
                percent(critical_share)
            ),
            cut: None,
            share: Some(critical),
        });
    }
    out
}

fn share(count: usize, total: usize) -> f64 {
    count as f64 / total as f64
}

/// Four significant digits, enough for a sentence.
pub fn round_for_text(x: f64) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let digits = 4 - 1 - x.abs().log10().floor() as i32;
    format!("{:.*}", digits.clamp(0, 15) as usize, x)
        .parse()
        .unwrap_or(x)
}
