//! Benchmark: statistics and backtests over a long history (not a test; run with
//! scripts/bench-evidence.sh). Reports each step's time and its ratio to sorting the same
//! values, the percentile step's natural floor, measured side by side in one run.
//!
//! CUTPOINTS_BENCH_OBSERVATIONS sets the number of values (default 1,000,000);
//! CUTPOINTS_BENCH_ROUNDS the rounds per figure (default 15; the median is reported).

use std::hint::black_box;
use std::time::Instant;

use cutpoints::domain::thresholds::{CutSet, Direction, Shades};
use cutpoints::engine::backtest::{backtest, differences, grades};
use cutpoints::engine::stats::{process_limits, summary};
use cutpoints::engine::warnings::warnings;

/// Values like a weekly metric with noise, spread over every zone of the cut sets below.
fn history(n: usize) -> Vec<f64> {
    let mut x = 0x2545_f491_4f6c_dd1du64;
    (0..n)
        .map(|i| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            let u = (x >> 11) as f64 / (1u64 << 53) as f64;
            let season = (i as f64 * std::f64::consts::TAU / 52.0).sin();
            80.0 + 8.0 * season + 20.0 * (u - 0.5)
        })
        .collect()
}

fn median_seconds(rounds: usize, mut f: impl FnMut()) -> f64 {
    let mut times: Vec<f64> = (0..rounds)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .collect();
    times.sort_by(f64::total_cmp);
    times[times.len() / 2]
}

fn main() {
    let n: usize = std::env::var("CUTPOINTS_BENCH_OBSERVATIONS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1_000_000);
    let rounds: usize = std::env::var("CUTPOINTS_BENCH_ROUNDS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(15);
    let values = history(n);
    let cuts = CutSet::new(Direction::HigherIsBetter, [65.0, 75.0, 88.0, 95.0]).unwrap();
    let proposal = CutSet::new(Direction::HigherIsBetter, [65.0, 78.0, 88.0, 95.0]).unwrap();
    let shades = Shades::new(3).unwrap();

    let sort = median_seconds(rounds, || {
        let mut copy = values.clone();
        copy.sort_unstable_by(f64::total_cmp);
        black_box(copy);
    });
    let copy = median_seconds(rounds, || {
        black_box(values.clone());
    });
    let stats = median_seconds(rounds, || {
        black_box(summary(&values));
    });
    let limits = median_seconds(rounds, || {
        black_box(process_limits(&values));
    });
    let one_backtest = median_seconds(rounds, || {
        black_box(backtest(&cuts, shades, &values));
    });
    let compare = median_seconds(rounds, || {
        let a = grades(&cuts, shades, &values);
        let b = grades(&proposal, shades, &values);
        black_box(differences(&a, &b));
    });
    // What the evidence endpoint computes for one cut set once the rows are read: the
    // summary, the limits, the backtest and the warnings.
    let evidence = median_seconds(rounds, || {
        let s = summary(&values);
        let l = process_limits(&values);
        let bt = backtest(&cuts, shades, &values);
        black_box((s, warnings(&cuts, &bt, l.as_ref(), 0.1)));
    });
    // A proposal page's work: both backtests, the differences and the statistics.
    let proposal_page = median_seconds(rounds, || {
        let s = summary(&values);
        let l = process_limits(&values);
        let a = backtest(&cuts, shades, &values);
        let b = backtest(&proposal, shades, &values);
        let d = differences(
            &grades(&cuts, shades, &values),
            &grades(&proposal, shades, &values),
        );
        black_box((s, warnings(&proposal, &b, l.as_ref(), 0.1), a, d.len()));
    });

    println!("{n} values, median of {rounds} rounds, one thread");
    println!("{:<48} {:>10} {:>12}", "step", "ms", "x sort");
    let row = |name: &str, s: f64| println!("{name:<48} {:>10.2} {:>12.2}", s * 1e3, s / sort);
    row("sort a copy (sort_unstable_by total_cmp)", sort);
    row("copy only", copy);
    row("summary (count, mean, sd, min, max, 5 pct)", stats);
    row("natural process limits (XmR)", limits);
    row("backtest of one cut set", one_backtest);
    row("differences between two cut sets", compare);
    row("evidence: summary + limits + backtest + warnings", evidence);
    row("proposal: stats + 2 backtests + differences", proposal_page);
}
