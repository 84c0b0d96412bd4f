//! The points of a history: the finite ones, the facts the chart states about them, and the
//! thinning of long histories to the points worth drawing.

use crate::domain::Timestamp;

/// At most this many points are drawn; longer histories keep the lowest and highest value of
/// each of `MAX_DRAWN / 2` equal spans of time, so every peak and trough stays visible.
pub(super) const MAX_DRAWN: usize = 1500;

/// Seconds since the Unix epoch.
pub(super) fn seconds(t: Timestamp) -> f64 {
    t.as_datetime().timestamp_micros() as f64 / 1e6
}

pub(super) fn date(t: Timestamp) -> String {
    t.as_datetime().format("%Y-%m-%d").to_string()
}

/// The facts about the history the picture and the `<desc>` state.
pub(super) struct Stats {
    pub(super) count: usize,
    pub(super) first: (Timestamp, f64),
    pub(super) last: (Timestamp, f64),
    pub(super) lowest: (Timestamp, f64),
    pub(super) highest: (Timestamp, f64),
}

/// The finite points of the history.
fn finite<'a>(points: &'a [(Timestamp, f64)]) -> impl Iterator<Item = (Timestamp, f64)> + 'a {
    points.iter().copied().filter(|(_, v)| v.is_finite())
}

pub(super) fn stats(points: &[(Timestamp, f64)]) -> Option<Stats> {
    let mut all = finite(points);
    let first = all.next()?;
    let mut s = Stats {
        count: 1,
        first,
        last: first,
        lowest: first,
        highest: first,
    };
    for point in all {
        s.count += 1;
        s.last = point;
        // Strict comparisons: the first time the extreme was reached.
        if point.1 < s.lowest.1 {
            s.lowest = point;
        }
        if point.1 > s.highest.1 {
            s.highest = point;
        }
    }
    Some(s)
}

/// The points to draw as `(seconds, value)`: all of them, or for long histories the lowest and
/// highest of each equal span of time, in time order.
pub(super) fn thinned(points: &[(Timestamp, f64)], stats: &Stats) -> Vec<(f64, f64)> {
    let all = finite(points).map(|(t, v)| (seconds(t), v));
    if stats.count <= MAX_DRAWN {
        return all.collect();
    }
    let buckets = MAX_DRAWN / 2;
    let (start, span) = (
        seconds(stats.first.0),
        seconds(stats.last.0) - seconds(stats.first.0),
    );
    type Kept = (usize, f64, f64);
    let mut kept: Vec<Option<(Kept, Kept)>> = vec![None; buckets];
    for (i, (t, v)) in all.enumerate() {
        let bucket = if span > 0.0 {
            // A negative fraction (points out of order) saturates to bucket 0.
            ((t - start) / span * buckets as f64) as usize
        } else {
            i * buckets / stats.count
        };
        match &mut kept[bucket.min(buckets - 1)] {
            slot @ None => *slot = Some(((i, t, v), (i, t, v))),
            Some((low, high)) => {
                if v < low.2 {
                    *low = (i, t, v);
                }
                if v > high.2 {
                    *high = (i, t, v);
                }
            }
        }
    }
    let mut drawn = Vec::with_capacity(MAX_DRAWN);
    for (low, high) in kept.into_iter().flatten() {
        let (a, b) = if low.0 <= high.0 {
            (low, high)
        } else {
            (high, low)
        };
        drawn.push((a.1, a.2));
        if a.0 != b.0 {
            drawn.push((b.1, b.2));
        }
    }
    drawn
}
