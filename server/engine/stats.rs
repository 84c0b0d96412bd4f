//! Statistics of a metric's history: the summary people quote (count, mean, standard deviation,
//! extremes, percentiles) and the natural process limits of an individuals (XmR) chart.
//!
//! Plain arithmetic over `f64` slices; the caller picks the window and passes the values in
//! time order (the moving ranges depend on it; nothing else does).

use serde::Serialize;

/// The bias-correction constant d2 for moving ranges of two points, as tabled for control
/// charts (NIST/SEMATECH e-Handbook §6.3.2.2 uses 1.128). 3 / d2 is about 2.66.
pub const D2: f64 = 1.128;
/// The tabled D4 for subgroups of two (NIST/SEMATECH e-Handbook §6.3.2.2): the upper limit of
/// the moving-range chart is D4 times the average moving range.
pub const D4: f64 = 3.267;
/// Fewer points than this make limits that move a lot with each new point (common practice in
/// statistical process control texts, not a derived figure).
pub const LIMITS_MIN_POINTS: usize = 20;

/// Percentiles the evidence reports, by the Hyndman & Fan (1996) type 7 definition.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Percentiles {
    pub p10: f64,
    pub p25: f64,
    pub p50: f64,
    pub p75: f64,
    pub p90: f64,
}

/// What a window of history looks like.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Summary {
    pub count: usize,
    pub mean: f64,
    /// Sample standard deviation (divisor n - 1); `None` for a single value.
    pub sd: Option<f64>,
    pub min: f64,
    pub max: f64,
    pub percentiles: Percentiles,
}

/// Natural process limits of an individuals chart over a baseline.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ProcessLimits {
    /// How many values the baseline holds.
    pub baseline_count: usize,
    pub mean: f64,
    pub average_moving_range: f64,
    /// mean - (3 / d2) x average moving range.
    pub lower: f64,
    /// mean + (3 / d2) x average moving range.
    pub upper: f64,
    /// D4 x average moving range.
    pub moving_range_upper: f64,
}

/// The `p`-th quantile (`p` in 0..=1) of ascending `sorted` values by the Hyndman & Fan type 7
/// definition, the default of numpy and R: with h = (n - 1) p, the value at floor(h) plus
/// (h - floor(h)) times the step to the next one.
///
/// # Panics
/// When `sorted` is empty.
pub fn quantile_type7(sorted: &[f64], p: f64) -> f64 {
    assert!(!sorted.is_empty(), "a quantile needs at least one value");
    let h = (sorted.len() - 1) as f64 * p.clamp(0.0, 1.0);
    let low = h.floor();
    let i = low as usize;
    let lower = sorted[i];
    match sorted.get(i + 1) {
        // numpy's form of the interpolation: lower + (upper - lower) * fraction.
        Some(&upper) if h > low => lower + (upper - lower) * (h - low),
        _ => lower,
    }
}

/// The mean, computed in two passes so that large offsets lose no precision: a first mean,
/// then the mean of the differences from it added back.
fn mean(values: &[f64]) -> f64 {
    let n = values.len() as f64;
    let first = values.iter().sum::<f64>() / n;
    first + values.iter().map(|v| v - first).sum::<f64>() / n
}

/// The summary of `values` (any order), or `None` when there are none. Sorts a copy.
pub fn summary(values: &[f64]) -> Option<Summary> {
    if values.is_empty() {
        return None;
    }
    let mut sorted = values.to_vec();
    sorted.sort_unstable_by(f64::total_cmp);
    summary_of_sorted(&sorted)
}

/// [`summary`] of values already in ascending order.
pub fn summary_of_sorted(sorted: &[f64]) -> Option<Summary> {
    let n = sorted.len();
    if n == 0 {
        return None;
    }
    let m = mean(sorted);
    let sd = (n > 1).then(|| {
        let squares: f64 = sorted.iter().map(|v| (v - m) * (v - m)).sum();
        (squares / (n - 1) as f64).sqrt()
    });
    let q = |p| quantile_type7(sorted, p);
    Some(Summary {
        count: n,
        mean: m,
        sd,
        min: sorted[0],
        max: sorted[n - 1],
        percentiles: Percentiles {
            p10: q(0.10),
            p25: q(0.25),
            p50: q(0.50),
            p75: q(0.75),
            p90: q(0.90),
        },
    })
}

/// Natural process limits from values in time order, or `None` with fewer than two values
/// (no moving range exists).
pub fn process_limits(in_time_order: &[f64]) -> Option<ProcessLimits> {
    let n = in_time_order.len();
    if n < 2 {
        return None;
    }
    let m = mean(in_time_order);
    let ranges: f64 = in_time_order
        .windows(2)
        .map(|pair| (pair[1] - pair[0]).abs())
        .sum();
    let average_moving_range = ranges / (n - 1) as f64;
    let reach = 3.0 / D2 * average_moving_range;
    Some(ProcessLimits {
        baseline_count: n,
        mean: m,
        average_moving_range,
        lower: m - reach,
        upper: m + reach,
        moving_range_upper: D4 * average_moving_range,
    })
}
