//! The invented histories of the demo metrics: a fixed pseudo-random sequence around each
//! metric's story (seasons, a holiday dip, a price change), as the CSV an owner uploads.

use chrono::{Datelike, Months};

use crate::domain::Timestamp;

/// Roughly normal noise with mean 0 and standard deviation 1 (the sum of four uniforms, made
/// from a fixed linear congruential sequence), so every demo shows the same history.
struct Noise(u64);

impl Noise {
    fn uniform(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }

    fn next(&mut self) -> f64 {
        let sum: f64 = (0..4).map(|_| self.uniform()).sum();
        (sum - 2.0) * 3f64.sqrt()
    }
}

/// `x` rounded to a multiple of 1 / `per_unit` (10 for tenths), as the nearest f64 to the
/// decimal, so it prints short.
fn round_to(x: f64, per_unit: f64) -> f64 {
    (x * per_unit).round() / per_unit
}

/// An invented history for a demo metric as CSV (with a header row): two years of weekly
/// periods, or 16 to 36 months, all starting before `end`.
pub(super) fn history_csv(key: &str, end: Timestamp) -> String {
    use std::f64::consts::TAU;
    let today = end.as_datetime().date_naive();
    // The Monday of the week before `end`, and the first of the month before.
    let last_monday =
        today - chrono::Duration::days(i64::from(today.weekday().num_days_from_monday()) + 7);
    let last_month = today
        .with_day(1)
        .and_then(|d| d.checked_sub_months(Months::new(1)))
        .expect("a valid month");
    let mut noise = Noise(
        key.bytes()
            .fold(17u64, |h, b| h.wrapping_mul(31).wrapping_add(u64::from(b))),
    );
    let weekly = |n: i64| (0..n).map(move |i| last_monday - chrono::Duration::weeks(n - 1 - i));
    let monthly = |n: u32| {
        (0..n).map(move |i| {
            last_month
                .checked_sub_months(Months::new(n - 1 - i))
                .expect("a valid month")
        })
    };
    let rows: Vec<(chrono::NaiveDate, f64)> = match key {
        // Peak dock availability, %: a summer dip when demand peaks.
        "docks.peak_availability" => weekly(104)
            .enumerate()
            .map(|(t, d)| {
                let season = (TAU * (t as f64 + 10.0) / 52.0).cos();
                let v = 85.0 - 3.0 * season + 2.5 * noise.next();
                (d, round_to(v.clamp(55.0, 100.0), 10.0))
            })
            .collect(),
        // Repair turnaround, hours: longer in the holiday weeks with one mechanic.
        "repairs.turnaround" => weekly(104)
            .enumerate()
            .map(|(t, d)| {
                let holiday = if (t % 52) >= 49 { 14.0 } else { 0.0 };
                let v = 28.0 + 4.0 * (TAU * t as f64 / 52.0).sin() + holiday + 4.0 * noise.next();
                (d, round_to(v.max(4.0), 2.0))
            })
            .collect(),
        // Rides per bike per day: busy summers, quiet winters.
        "fleet.rides_per_bike" => weekly(104)
            .enumerate()
            .map(|(t, d)| {
                let v = 4.3 - 2.1 * (TAU * (t as f64 + 4.0) / 52.0).cos() + 0.3 * noise.next();
                (d, round_to(v.max(0.5), 100.0))
            })
            .collect(),
        // Monthly member churn, %: lower since the annual membership discount.
        "members.monthly_churn" => monthly(36)
            .enumerate()
            .map(|(t, d)| {
                let level = if t < 14 { 3.6 } else { 2.6 };
                (d, round_to((level + 0.3 * noise.next()).max(0.3), 100.0))
            })
            .collect(),
        // Cash runway, months: slowly lengthening; recorded monthly only since the last
        // finance review, so the history is short.
        _ => monthly(16)
            .enumerate()
            .map(|(t, d)| {
                (
                    d,
                    round_to(7.0 + 0.28 * t as f64 + 0.6 * noise.next(), 10.0),
                )
            })
            .collect(),
    };
    let mut csv = String::from("period_start,value\n");
    for (d, v) in rows {
        csv.push_str(&format!(
            "{},{}\n",
            d.format("%Y-%m-%d"),
            crate::domain::number::format(v)
        ));
    }
    csv
}
