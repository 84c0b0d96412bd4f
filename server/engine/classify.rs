//! Classifying a value against a cut set, exactly as docs/design.md states the rules.
//!
//! Reaching a line counts as crossing it: the line itself belongs to the zone beyond it.

use serde::Serialize;

use crate::domain::thresholds::{CutSet, Direction, Shades};

/// Where a value falls.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, utoipa::ToSchema)]
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
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
#[schema(as = BandSide)]
pub enum Side {
    Low,
    High,
}

/// The engine's answer for one value (docs/engine.md). A missing value is `no_data` with null
/// severity, shade and signal. Field order is the order of the command line's output.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Classification {
    pub value: Option<f64>,
    pub zone: Zone,
    /// 0 to 1 within intervene and outperform; 1 in critical and stretch; 0 in steady.
    pub severity: Option<f64>,
    pub shade: Option<u8>,
    /// Negative on the bad side, positive on the good side, 0 in steady.
    pub signal: Option<i8>,
    /// Present for target_band values outside steady.
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
        // Computed in f64 exactly as docs/design.md writes it: severity first, then times S.
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

/// Many finite values graded against one cut set, held column by column: for each value the
/// zone's place in the set (0 the worst .. 4 the best), its severity and its shade. The signal
/// and side follow from those and the direction, so [`Grades::get`] works them out on reading.
#[derive(Clone, Debug)]
pub struct Grades {
    direction: Direction,
    place: Vec<u8>,
    severity: Vec<f64>,
    shade: Vec<u8>,
}

impl Default for Grades {
    fn default() -> Self {
        Grades {
            direction: Direction::HigherIsBetter,
            place: Vec::new(),
            severity: Vec::new(),
            shade: Vec::new(),
        }
    }
}

impl Grades {
    pub fn len(&self) -> usize {
        self.place.len()
    }

    pub fn is_empty(&self) -> bool {
        self.place.is_empty()
    }

    /// The severities, in the order of the values.
    pub fn severities(&self) -> &[f64] {
        &self.severity
    }

    /// The shades, in the order of the values.
    pub fn shades(&self) -> &[u8] {
        &self.shade
    }

    /// Where the `i`th value fell: 0 critical, 1 intervene, 2 steady, 3 outperform, 4 stretch;
    /// for a band 0 and 1 are the low side's critical and intervene, 3 and 4 the high side's.
    /// Two values graded against one set have the same status exactly when their places match.
    pub fn place(&self, i: usize) -> u8 {
        self.place[i]
    }

    /// The signal (signed shade) of the `i`th value.
    pub fn signal(&self, i: usize) -> i8 {
        let band = self.direction == Direction::TargetBand;
        let shade = self.shade[i] as i8;
        match self.place[i] {
            2 => 0,
            3 | 4 if !band => shade,
            _ => -shade,
        }
    }

    /// The side of a band the `i`th value left it on (intervene and critical of a band only).
    pub fn side(&self, i: usize) -> Option<Side> {
        match (self.place[i], self.direction == Direction::TargetBand) {
            (0 | 1, true) => Some(Side::Low),
            (3 | 4, true) => Some(Side::High),
            _ => None,
        }
    }

    /// The zone of the `i`th value.
    pub fn zone(&self, i: usize) -> Zone {
        let band = self.direction == Direction::TargetBand;
        match (self.place[i], band) {
            (0, _) | (4, true) => Zone::Critical,
            (1, _) | (3, true) => Zone::Intervene,
            (2, _) => Zone::Steady,
            (3, false) => Zone::Outperform,
            _ => Zone::Stretch,
        }
    }

    /// What [`classify`] says about the `i`th value, which was `value`.
    pub fn classification(&self, i: usize, value: f64) -> Classification {
        Classification {
            value: Some(value),
            zone: self.zone(i),
            severity: Some(self.severity[i]),
            shade: Some(self.shade[i]),
            signal: Some(self.signal(i)),
            side: self.side(i),
        }
    }
}

/// Grades finite values against one cut set into `out` (replacing what it held): the same
/// answers as [`classify`], computed without branching on any value, so values spread over
/// every zone run at the speed of arithmetic rather than of branch mispredictions. Callers
/// grading millions of values reuse one `Grades` for a chunk at a time.
pub fn grade_all(cuts: &CutSet, shades: Shades, values: &[f64], out: &mut Grades) {
    grade_all_with(Instructions::best(), cuts, shades, values, out);
}

/// Which vector instructions [`grade_all_with`] compiles its loops for. Every choice gives the
/// same answers to the bit (IEEE arithmetic is exact the same way at any vector width); the
/// wider ones grade more values per instruction.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Instructions {
    /// What every processor of the target has (SSE2 on x86-64): two values at a time.
    Baseline,
    /// x86-64 AVX2: four values at a time.
    Avx2,
    /// x86-64 AVX-512 (F and BW): eight values at a time.
    Avx512,
}

impl Instructions {
    /// The choices this processor can run, baseline first.
    pub fn available() -> Vec<Instructions> {
        let mut all = vec![Instructions::Baseline];
        #[cfg(target_arch = "x86_64")]
        {
            if std::arch::is_x86_feature_detected!("avx2") {
                all.push(Instructions::Avx2);
            }
            if std::arch::is_x86_feature_detected!("avx512f")
                && std::arch::is_x86_feature_detected!("avx512bw")
            {
                all.push(Instructions::Avx512);
            }
        }
        all
    }

    /// The widest this processor can run.
    pub fn best() -> Instructions {
        *Instructions::available()
            .last()
            .expect("the baseline is always available")
    }
}

/// [`grade_all`] with the instructions chosen by the caller (tests use it to check every
/// choice this processor has against [`classify`]).
///
/// # Panics
///
/// If the processor cannot run `instructions` (see [`Instructions::available`]).
pub fn grade_all_with(
    instructions: Instructions,
    cuts: &CutSet,
    shades: Shades,
    values: &[f64],
    out: &mut Grades,
) {
    assert!(
        Instructions::available().contains(&instructions),
        "this processor cannot run {instructions:?}"
    );
    // Every direction is graded as an ascending set: lower_is_better on negated cuts and
    // values, which is exact in IEEE arithmetic, since `(-i) - (-v)` is exactly `v - i`.
    let [a, b, c, d] = cuts.values();
    let direction = cuts.direction();
    let sign = if direction == Direction::LowerIsBetter {
        -1.0
    } else {
        1.0
    };
    let (c0, c1, c2, c3) = (a * sign, b * sign, c * sign, d * sign);
    let args = ([c0, c1, c2, c3], [c1 - c0, c3 - c2], sign, shades.get());
    out.direction = direction;
    let n = values.len();
    out.place.resize(n, 0);
    out.severity.resize(n, 0.0);
    out.shade.resize(n, 0);
    // A block at a time, small enough that its columns stay in the processor's nearest cache
    // between passes, so the values are read from memory once.
    const BLOCK: usize = 1024;
    for (((values, place), severity), shade) in values
        .chunks(BLOCK)
        .zip(out.place.chunks_mut(BLOCK))
        .zip(out.severity.chunks_mut(BLOCK))
        .zip(out.shade.chunks_mut(BLOCK))
    {
        match instructions {
            Instructions::Baseline => grade_block(args, values, place, severity, shade),
            #[cfg(target_arch = "x86_64")]
            // SAFETY: the processor has AVX2, checked on entry.
            Instructions::Avx2 => unsafe { grade_block_avx2(args, values, place, severity, shade) },
            #[cfg(target_arch = "x86_64")]
            // SAFETY: the processor has AVX-512F and BW, checked on entry.
            Instructions::Avx512 => unsafe {
                grade_block_avx512(args, values, place, severity, shade)
            },
            #[cfg(not(target_arch = "x86_64"))]
            _ => unreachable!("only the baseline is available off x86-64"),
        }
    }
}

type BlockArgs = ([f64; 4], [f64; 2], f64, u8);

/// Defines `$name`: [`grade_block`] compiled with the processor features `$features` enabled.
macro_rules! grade_block_for {
    ($name:ident, $features:literal) => {
        #[doc = concat!("[`grade_block`] compiled for `", $features, "`.")]
        #[cfg(target_arch = "x86_64")]
        #[target_feature(enable = $features)]
        fn $name(
            args: BlockArgs,
            values: &[f64],
            place: &mut [u8],
            severity: &mut [f64],
            shade: &mut [u8],
        ) {
            grade_block(args, values, place, severity, shade);
        }
    };
}

grade_block_for!(grade_block_avx2, "avx2");
grade_block_for!(grade_block_avx512, "avx512f,avx512bw");

/// One block of [`grade_all`]: three simple loops over slices of one length, each of which
/// the compiler turns into vector code.
#[inline(always)]
fn grade_block(
    ([c0, c1, c2, c3], [low_span, high_span], sign, shades): BlockArgs,
    values: &[f64],
    place: &mut [u8],
    severity: &mut [f64],
    shade: &mut [u8],
) {
    for (raw, place) in values.iter().zip(place.iter_mut()) {
        let v = raw * sign;
        *place = u8::from(v > c0) + u8::from(v > c1) + u8::from(v >= c2) + u8::from(v >= c3);
    }
    for ((raw, &place), severity) in values.iter().zip(&*place).zip(severity.iter_mut()) {
        let v = raw * sign;
        // Exactly as docs/design.md writes them: the difference divided by the span, the low side's
        // below steady and the high side's above; the outer zones are 1, steady 0.
        let upper = place >= 3;
        let numerator = if upper { v - c2 } else { c1 - v };
        let graded = numerator / if upper { high_span } else { low_span };
        let outer = if place == 0 || place == 4 { 1.0 } else { 0.0 };
        *severity = if place == 1 || place == 3 {
            graded
        } else {
            outer
        };
    }
    // min(S, floor(severity * S) + 1) for the graded zones. severity * S, kept below S - 1,
    // lies in [0, S - 1], where its floor is how many of the whole numbers 1 .. S - 1 it
    // reaches: counted by comparisons, one pass per whole number, which is exact and turns
    // into vector code where a conversion from float to integer would not.
    let sf = f64::from(shades);
    for (&place, shade) in place.iter().zip(shade.iter_mut()) {
        let graded = u8::from(place == 1 || place == 3);
        let outer = u8::from(place == 0 || place == 4);
        *shade = graded | (outer * (shades + 1));
    }
    for whole in 1..shades {
        let whole = f64::from(whole);
        for ((&severity, &place), shade) in severity.iter().zip(&*place).zip(shade.iter_mut()) {
            let graded = u8::from(place == 1 || place == 3);
            *shade += graded & u8::from((severity * sf).min(sf - 1.0) >= whole);
        }
    }
}
