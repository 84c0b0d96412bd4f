//! The time axis: its ends and its ticks on the calendar (days, months or years), as many as
//! their labels leave room for.

use chrono::{DateTime, Datelike, NaiveDate, Utc};

use super::TICK_SIZE;
use crate::charts::svg::text_width;

const DAY: f64 = 86_400.0;
/// The time axis: its ends in seconds and its labelled ticks.
pub(super) struct TimeAxis {
    pub(super) low: f64,
    pub(super) high: f64,
    pub(super) ticks: Vec<(f64, String)>,
}

/// A tick step on the calendar.
#[derive(Clone, Copy)]
enum Every {
    Days(i64),
    Months(i64),
    Years(i64),
}

impl Every {
    /// From finest to coarsest.
    const STEPS: [Every; 20] = [
        Every::Days(1),
        Every::Days(2),
        Every::Days(7),
        Every::Days(14),
        Every::Months(1),
        Every::Months(2),
        Every::Months(3),
        Every::Months(6),
        Every::Years(1),
        Every::Years(2),
        Every::Years(5),
        Every::Years(10),
        Every::Years(20),
        Every::Years(50),
        Every::Years(100),
        Every::Years(200),
        Every::Years(500),
        Every::Years(1000),
        Every::Years(10_000),
        Every::Years(100_000),
    ];

    /// Roughly how long the step is, in seconds.
    fn nominal(self) -> f64 {
        match self {
            Every::Days(n) => n as f64 * DAY,
            Every::Months(n) => n as f64 * 30.44 * DAY,
            Every::Years(n) => n as f64 * 365.25 * DAY,
        }
    }

    /// A label as wide as the widest this step writes.
    fn widest_label(self) -> &'static str {
        match self {
            Every::Days(_) => "2000-00-00",
            Every::Months(_) => "2000-00",
            Every::Years(_) => "2000",
        }
    }

    /// The ticks from `low` to `high` (seconds): midnights (weeks start on Monday), firsts of
    /// the month (every step-th month from January) or New Year's days (years divisible by the
    /// step), labelled "2025-03-14", "2025-03" or "2025".
    fn ticks(self, low: f64, high: f64, limit: usize) -> Vec<(f64, String)> {
        let mut ticks = Vec::new();
        let mut push = |t: Option<DateTime<Utc>>, format: &str| -> bool {
            let Some(t) = t else { return false };
            let s = t.timestamp() as f64;
            if s > high || ticks.len() > limit {
                return false;
            }
            if s >= low {
                ticks.push((s, t.format(format).to_string()));
            }
            true
        };
        let Some(start) = DateTime::<Utc>::from_timestamp(low.floor() as i64, 0) else {
            return ticks;
        };
        match self {
            Every::Days(n) => {
                // 1970-01-05, day 4 of the epoch, was a Monday.
                let offset = if n % 7 == 0 { 4 } else { 0 };
                let mut day = ((low / DAY).floor() as i64 - offset).div_euclid(n) * n + offset;
                while push(DateTime::from_timestamp(day * 86_400, 0), "%Y-%m-%d") {
                    day += n;
                }
            }
            Every::Months(n) => {
                let mut month =
                    (i64::from(start.year()) * 12 + i64::from(start.month0())).div_euclid(n) * n;
                while push(first_of_month(month), "%Y-%m") {
                    month += n;
                }
            }
            Every::Years(n) => {
                let mut year = i64::from(start.year()).div_euclid(n) * n;
                while push(first_of_month(year * 12), "%Y") {
                    year += n;
                }
            }
        }
        ticks
    }
}

/// Midnight UTC on the first day of the month `year * 12 + month0`.
fn first_of_month(months: i64) -> Option<DateTime<Utc>> {
    let year = i32::try_from(months.div_euclid(12)).ok()?;
    let month = u32::try_from(months.rem_euclid(12)).ok()? + 1;
    Some(
        NaiveDate::from_ymd_opt(year, month, 1)?
            .and_hms_opt(0, 0, 0)?
            .and_utc(),
    )
}

/// The time axis from `first` to `last` (seconds), 2% wider on each side (and at least two
/// days wide), with the finest calendar step whose labels fit `width`.
pub(super) fn time_axis(first: f64, last: f64, width: f64) -> TimeAxis {
    let pad = 0.02 * (last - first);
    let (mut low, mut high) = (first - pad, last + pad);
    if high - low < 2.0 * DAY {
        let middle = first / 2.0 + last / 2.0;
        (low, high) = (middle - DAY, middle + DAY);
    }
    for step in Every::STEPS {
        let room = text_width(step.widest_label(), TICK_SIZE) + 18.0;
        let fit = ((width / room).floor() as usize).max(2);
        if (high - low) / step.nominal() > fit as f64 + 2.0 {
            continue;
        }
        let ticks = step.ticks(low, high, fit);
        if ticks.len() <= fit {
            return TimeAxis { low, high, ticks };
        }
    }
    TimeAxis {
        low,
        high,
        ticks: Vec::new(),
    }
}
