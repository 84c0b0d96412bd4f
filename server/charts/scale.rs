//! The value axis: nice ends and ticks (1, 2 or 5 × 10^k) for a range of values, and where a
//! value falls between the ends.

/// The value axis: its two ends and its labelled ticks.
#[derive(Clone, Debug, PartialEq)]
pub struct Axis {
    pub low: f64,
    pub high: f64,
    pub ticks: Vec<f64>,
}

impl Axis {
    /// Where `value` falls between the ends, from 0 (low) to 1 (high), not clamped: below 0 or
    /// above 1 outside the ends, and not finite where the ends are equal.
    pub(crate) fn position(&self, value: f64) -> f64 {
        let width = self.high - self.low;
        if width.is_finite() {
            (value - self.low) / width
        } else {
            // Halves first: the width of two finite numbers can overflow f64.
            (value / 2.0 - self.low / 2.0) / (self.high / 2.0 - self.low / 2.0)
        }
    }
}

/// A tick step `m × 10^k` with `m` 1, 2 or 5.
#[derive(Clone, Copy)]
struct Step {
    m: u8,
    k: i32,
}

impl Step {
    /// The `n`-th multiple of the step, parsed from decimal text so that ticks such as 0.3 come
    /// out as the nearest f64 to 0.3 rather than 3 × 0.1 = 0.30000000000000004.
    fn multiple(self, n: f64) -> f64 {
        format!("{}e{}", n * f64::from(self.m), self.k)
            .parse()
            .unwrap_or(f64::NAN)
    }

    /// The first and last multiples inside `[low, high]`, if the step is usable there.
    fn range(self, low: f64, high: f64) -> Option<(f64, f64)> {
        let size = self.multiple(1.0);
        let (first, last) = ((low / size).ceil(), (high / size).floor());
        (size > 0.0 && first.is_finite() && last.is_finite() && first <= last)
            .then_some((first, last))
    }
}

/// The axis ends for values from `min` to `max`: 15% of the span beyond each, or at least 1
/// around a single value, and within the finite numbers.
fn padded(min: f64, max: f64) -> (f64, f64) {
    // Halves first: the span of two finite numbers can overflow f64.
    let pad = if max > min {
        0.3 * (max / 2.0 - min / 2.0)
    } else {
        (min.abs() * 0.15).max(1.0)
    };
    ((min - pad).max(-f64::MAX), (max + pad).min(f64::MAX))
}

/// The 1-2-5 steps around a sixth of `[low, high]`, finest first, each with the indices of its
/// first and last multiple inside.
fn candidate_steps(low: f64, high: f64) -> Vec<(Step, (f64, f64))> {
    let width = high - low;
    let sixth = if width.is_finite() {
        width / 6.0
    } else {
        high / 6.0 - low / 6.0
    };
    let k0 = sixth.log10().floor().clamp(-330.0, 310.0) as i32;
    (k0 - 1..=k0 + 1)
        .flat_map(|k| [1, 2, 5].map(|m| Step { m, k }))
        .filter_map(|step| Some((step, step.range(low, high)?)))
        .collect()
}

/// How many ticks lie between the indices `first` and `last`.
fn tick_count((first, last): (f64, f64)) -> f64 {
    last - first + 1.0
}

/// A nice axis for values from `min` to `max` (finite): padded by 15% of the span on both sides
/// (never to zero width), with 4 to 8 ticks at a step of 1, 2 or 5 × 10^k, as near 6 as can be.
///
/// For a few widths no such step gives 4 to 8 ticks (9 at a step of 2, 3 at a step of 5); then
/// the axis is stretched to the next multiple of the larger step, on the side that needs less.
/// Only spans below the smallest normal f64 numbers get no ticks.
pub fn nice_axis(min: f64, max: f64) -> Axis {
    let (mut low, mut high) = padded(min.min(max), min.max(max));
    let steps = candidate_steps(low, high);
    let fitting = steps
        .iter()
        .filter(|(_, range)| (4.0..=8.0).contains(&tick_count(*range)))
        .min_by(|a, b| {
            let off = |range| (tick_count(range) - 6.0).abs();
            off(a.1).total_cmp(&off(b.1))
        });
    let (step, (first, last)) = match (fitting, steps.iter().find(|(_, r)| tick_count(*r) < 4.0)) {
        (Some(&found), _) => found,
        (None, Some(&(step, (first, last)))) => {
            let (below, above) = (step.multiple(first - 1.0), step.multiple(last + 1.0));
            if low - below <= above - high && below.is_finite() {
                low = below;
                (step, (first - 1.0, last))
            } else {
                high = above;
                (step, (first, last + 1.0))
            }
        }
        (None, None) => {
            return Axis {
                low,
                high,
                ticks: Vec::new(),
            };
        }
    };
    let ticks = (0..=(last - first) as usize)
        .map(|i| step.multiple(first + i as f64))
        .collect();
    Axis { low, high, ticks }
}

/// The nice axis over `values`, or over 0 to 1 when there are none.
pub(crate) fn axis_over(values: impl IntoIterator<Item = f64>) -> Axis {
    let (min, max) = values
        .into_iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
    if min <= max {
        nice_axis(min, max)
    } else {
        nice_axis(0.0, 1.0)
    }
}
