//! Direction types, cut sets and shades: the validated inputs of the engine.
//!
//! A `CutSet` can only be built through [`CutSet::new`], which enforces the strict ordering of
//! docs/design.md, so every other layer may rely on it.

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use super::number::Num;

/// Which side of the axis is good.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Direction {
    HigherIsBetter,
    LowerIsBetter,
    /// Best inside a band; too low and too high are both bad.
    TargetBand,
}

impl Direction {
    pub const ALL: [Direction; 3] = [
        Direction::HigherIsBetter,
        Direction::LowerIsBetter,
        Direction::TargetBand,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Direction::HigherIsBetter => "higher_is_better",
            Direction::LowerIsBetter => "lower_is_better",
            Direction::TargetBand => "target_band",
        }
    }

    /// The names of the four cut points, in the order the ordering rule lists them.
    pub fn cut_names(self) -> [&'static str; 4] {
        match self {
            Direction::HigherIsBetter | Direction::LowerIsBetter => {
                ["critical", "intervene", "outperform", "stretch"]
            }
            Direction::TargetBand => [
                "critical_low",
                "intervene_low",
                "intervene_high",
                "critical_high",
            ],
        }
    }

    /// Names of the cut points at the critical level (a change to these needs a sign-off).
    pub fn critical_cut_names(self) -> &'static [&'static str] {
        match self {
            Direction::HigherIsBetter | Direction::LowerIsBetter => &["critical"],
            Direction::TargetBand => &["critical_low", "critical_high"],
        }
    }
}

impl fmt::Display for Direction {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

impl FromStr for Direction {
    type Err = ThresholdError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Direction::ALL
            .into_iter()
            .find(|d| d.as_str() == s)
            .ok_or_else(|| ThresholdError::UnknownDirection(s.to_string()))
    }
}

/// Why a direction, cut set, shade count or value was refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ThresholdError {
    #[error("unknown direction {0:?}: expected higher_is_better, lower_is_better or target_band")]
    UnknownDirection(String),
    #[error("{name} must be a finite number, got {text}")]
    NonFiniteCut { name: &'static str, text: String },
    #[error(
        "for {direction}, {first} ({first_value}) must be {relation} {second} ({second_value})"
    )]
    OutOfOrder {
        direction: Direction,
        first: &'static str,
        first_value: Num,
        relation: &'static str,
        second: &'static str,
        second_value: Num,
    },
    #[error(
        "the cut points span from {low} to {high}, a range too wide to compute with; use a smaller unit"
    )]
    SpanOverflow { low: Num, high: Num },
    #[error("expected exactly 4 cut points ({expected}), got {got}")]
    WrongCount { expected: String, got: usize },
    #[error("missing cut point {name} for {direction}")]
    MissingCut {
        name: &'static str,
        direction: Direction,
    },
    #[error("unknown cut point {name:?} for {direction}: expected {expected}")]
    UnknownCut {
        name: String,
        direction: Direction,
        expected: String,
    },
    #[error("shades must be a whole number from 2 to 5, got {0}")]
    ShadesOutOfRange(i64),
    #[error("value must be a finite number or null, got {0}")]
    NonFiniteValue(String),
}

/// Four cut points in the order of their direction's rule, known to be finite, strictly
/// ordered and with a computable span.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CutSet {
    direction: Direction,
    cuts: [f64; 4],
}

impl CutSet {
    /// Checks the ordering rule of docs/design.md and returns the set, or the first pair that
    /// breaks it, named with both values and the direction.
    pub fn new(direction: Direction, cuts: [f64; 4]) -> Result<CutSet, ThresholdError> {
        let names = direction.cut_names();
        for (name, value) in names.iter().zip(cuts) {
            if !value.is_finite() {
                return Err(ThresholdError::NonFiniteCut {
                    name,
                    text: value.to_string(),
                });
            }
        }
        let ascending = direction != Direction::LowerIsBetter;
        for i in 0..3 {
            let (a, b) = (cuts[i], cuts[i + 1]);
            let in_order = if ascending { a < b } else { a > b };
            if !in_order {
                return Err(ThresholdError::OutOfOrder {
                    direction,
                    first: names[i + 1],
                    first_value: Num(b),
                    relation: if ascending {
                        "greater than"
                    } else {
                        "less than"
                    },
                    second: names[i],
                    second_value: Num(a),
                });
            }
        }
        let (low, high) = if ascending {
            (cuts[0], cuts[3])
        } else {
            (cuts[3], cuts[0])
        };
        if !(high - low).is_finite() {
            return Err(ThresholdError::SpanOverflow {
                low: Num(low),
                high: Num(high),
            });
        }
        Ok(CutSet { direction, cuts })
    }

    /// Builds a set from `(name, value)` pairs, e.g. the `cuts` object of an API request.
    pub fn from_named<'a>(
        direction: Direction,
        named: impl IntoIterator<Item = (&'a str, f64)>,
    ) -> Result<CutSet, ThresholdError> {
        let names = direction.cut_names();
        let mut cuts: [Option<f64>; 4] = [None; 4];
        for (name, value) in named {
            match names.iter().position(|n| *n == name) {
                Some(i) => cuts[i] = Some(value),
                None => {
                    return Err(ThresholdError::UnknownCut {
                        name: name.to_string(),
                        direction,
                        expected: names.join(", "),
                    });
                }
            }
        }
        let mut out = [0.0; 4];
        for i in 0..4 {
            out[i] = cuts[i].ok_or(ThresholdError::MissingCut {
                name: names[i],
                direction,
            })?;
        }
        CutSet::new(direction, out)
    }

    pub fn direction(&self) -> Direction {
        self.direction
    }

    /// The cut points in the order of the direction's rule.
    pub fn values(&self) -> [f64; 4] {
        self.cuts
    }

    /// `(name, value)` pairs in order.
    pub fn named(&self) -> [(&'static str, f64); 4] {
        let names = self.direction.cut_names();
        [
            (names[0], self.cuts[0]),
            (names[1], self.cuts[1]),
            (names[2], self.cuts[2]),
            (names[3], self.cuts[3]),
        ]
    }
}

/// How many shades each graded zone is split into (docs/design.md: 2 to 5, default 3).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(transparent)]
pub struct Shades(u8);

impl Shades {
    pub const MIN: u8 = 2;
    pub const MAX: u8 = 5;

    pub fn new(n: i64) -> Result<Shades, ThresholdError> {
        if (i64::from(Self::MIN)..=i64::from(Self::MAX)).contains(&n) {
            Ok(Shades(n as u8))
        } else {
            Err(ThresholdError::ShadesOutOfRange(n))
        }
    }

    pub fn get(self) -> u8 {
        self.0
    }
}

impl Default for Shades {
    /// Three shades a side: few enough for people to tell apart (common practice).
    fn default() -> Self {
        Shades(3)
    }
}

/// Parses a comma-separated list of exactly four numbers, as the command line spells cuts.
pub fn parse_cut_list(direction: Direction, text: &str) -> Result<CutSet, ThresholdError> {
    let parts: Vec<&str> = text.split(',').map(str::trim).collect();
    if parts.len() != 4 {
        return Err(ThresholdError::WrongCount {
            expected: direction.cut_names().join(", "),
            got: parts.len(),
        });
    }
    let names = direction.cut_names();
    let mut cuts = [0.0; 4];
    for (i, part) in parts.iter().enumerate() {
        cuts[i] = parse_finite(part).map_err(|_| ThresholdError::NonFiniteCut {
            name: names[i],
            text: format!("{part:?}"),
        })?;
    }
    CutSet::new(direction, cuts)
}

/// Parses a finite decimal number; `inf`, `NaN` and numbers too large for f64 are refused.
pub fn parse_finite(text: &str) -> Result<f64, ThresholdError> {
    match text.trim().parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        _ => Err(ThresholdError::NonFiniteValue(text.to_string())),
    }
}
