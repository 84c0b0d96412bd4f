//! Backtests: what a cut set would have said about each period of a metric's history, how
//! often its status would have flipped, and where two cut sets disagree.

use std::collections::BTreeMap;

use serde::Serialize;

use super::classify::{Grades, Side, Zone, grade_all};
use crate::domain::thresholds::{CutSet, Direction, Shades};

/// The zones a cut set of `direction` can give a finite value, worst first.
pub fn zones_of(direction: Direction) -> &'static [Zone] {
    match direction {
        Direction::TargetBand => &[Zone::Critical, Zone::Intervene, Zone::Steady],
        _ => &[
            Zone::Critical,
            Zone::Intervene,
            Zone::Steady,
            Zone::Outperform,
            Zone::Stretch,
        ],
    }
}

/// One cut set over a history.
#[derive(Clone, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Backtest {
    pub periods: usize,
    /// Periods in each zone the direction has (zero counts included).
    pub zones: BTreeMap<&'static str, usize>,
    /// The same as shares of `periods` (0 to 1; all 0 for an empty history).
    pub zone_shares: BTreeMap<&'static str, f64>,
    /// Periods per signal (the signed shade: negative on the bad side, 0 steady), keyed by the
    /// signal written as a decimal integer; every signal the shade count allows is listed.
    pub shades: BTreeMap<String, usize>,
    pub shade_shares: BTreeMap<String, f64>,
    /// How many times the status changed from one period to the next: a move to another zone,
    /// or across a band from one side to the other.
    pub changes: usize,
    /// For a band, periods of intervene or critical on each side.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sides: Option<BTreeMap<&'static str, usize>>,
}

/// Grades `values` (finite, in time order) against one cut set.
pub fn grades(cuts: &CutSet, shades: Shades, values: &[f64]) -> Grades {
    let mut out = Grades::default();
    grade_all(cuts, shades, values, &mut out);
    out
}

fn share(count: usize, total: usize) -> f64 {
    if total == 0 {
        0.0
    } else {
        count as f64 / total as f64
    }
}

/// The backtest of a cut set over `values` (finite, in time order).
pub fn backtest(cuts: &CutSet, shades: Shades, values: &[f64]) -> Backtest {
    summarise(cuts, shades, &grades(cuts, shades, values))
}

/// The backtest from grades already computed.
pub fn summarise(cuts: &CutSet, shades: Shades, g: &Grades) -> Backtest {
    let n = g.len();
    let mut places = [0usize; 5];
    let mut changes = 0;
    let mut signals = vec![0usize; 2 * (usize::from(shades.get()) + 1) + 1];
    let offset = i32::from(shades.get()) + 1;
    let mut previous = None;
    for i in 0..n {
        let place = g.place(i);
        places[usize::from(place)] += 1;
        if previous.is_some_and(|p| p != place) {
            changes += 1;
        }
        previous = Some(place);
        signals[(i32::from(g.signal(i)) + offset) as usize] += 1;
    }
    let direction = cuts.direction();
    let band = direction == Direction::TargetBand;
    let count_of = |zone: Zone| -> usize {
        match (zone, band) {
            (Zone::Critical, true) => places[0] + places[4],
            (Zone::Intervene, true) => places[1] + places[3],
            (Zone::Critical, false) => places[0],
            (Zone::Intervene, false) => places[1],
            (Zone::Steady, _) => places[2],
            (Zone::Outperform, _) => places[3],
            (Zone::Stretch, _) => places[4],
            (Zone::NoData, _) => 0,
        }
    };
    let zones: BTreeMap<&'static str, usize> = zones_of(direction)
        .iter()
        .map(|&z| (z.as_str(), count_of(z)))
        .collect();
    let zone_shares = zones.iter().map(|(&k, &c)| (k, share(c, n))).collect();
    // A band has no good side: its signals run from -(S + 1) to 0.
    let allowed = |signal: i32| !band || signal <= 0;
    let shades_map: BTreeMap<String, usize> = signals
        .iter()
        .enumerate()
        .map(|(i, &c)| (i as i32 - offset, c))
        .filter(|&(signal, _)| allowed(signal))
        .map(|(signal, c)| (signal.to_string(), c))
        .collect();
    let shade_shares = shades_map
        .iter()
        .map(|(k, &c)| (k.clone(), share(c, n)))
        .collect();
    let sides = band.then(|| {
        BTreeMap::from([
            ("low", places[0] + places[1]),
            ("high", places[3] + places[4]),
        ])
    });
    Backtest {
        periods: n,
        zones,
        zone_shares,
        shades: shades_map,
        shade_shares,
        changes,
        sides,
    }
}

/// A period whose status differs between two cut sets.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Difference {
    /// The period's index in the values.
    pub index: usize,
    pub first: (Zone, Option<Side>),
    pub second: (Zone, Option<Side>),
}

/// The periods where `first` and `second` (grades of the same values) give a different zone
/// or band side, in time order.
pub fn differences(first: &Grades, second: &Grades) -> Vec<Difference> {
    assert_eq!(first.len(), second.len(), "grades of the same values");
    (0..first.len())
        .filter_map(|i| {
            let a = (first.zone(i), first.side(i));
            let b = (second.zone(i), second.side(i));
            (a != b).then_some(Difference {
                index: i,
                first: a,
                second: b,
            })
        })
        .collect()
}
