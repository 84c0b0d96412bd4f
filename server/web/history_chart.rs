//! The history chart: a metric's values over time, drawn over the zones of the version in force
//! and of a proposal, with the natural process limits, so people can judge thresholds against
//! the evidence.
//!
//! Like the zone strip ([`super::svg`]) it uses SVG presentation attributes only (the page CSP
//! forbids inline styles and scripts), the same purple/orange palette, and escapes every piece
//! of outside text. The `<desc>` carries the same facts in words.
//!
//! Layout: the value axis on the left and the time axis below frame the plot. The plot's
//! background shows the zones of the proposal as horizontal bands (of the version in force when
//! there is no proposal), with its cut points as lines across. Right of the plot, one narrow
//! strip per cut set (in force, then proposed) shows that set's zones, named where they are
//! tall enough, and a column of labels names each cut line and limit line.

use std::fmt::Write as _;

use chrono::{DateTime, Datelike, NaiveDate, Utc};

use super::svg::{
    Axis, GRID, INK, WHITE, WIDTH, ascending_cuts, at, colours, escape, line, nice_axis, text,
    text_width, zones_left_to_right,
};
use crate::domain::Timestamp;
use crate::domain::number;
use crate::domain::thresholds::{CutSet, Shades};
use crate::engine::classify;

/// One cut set to draw as zones: a caption such as "In force: version 3" and its cut set.
#[derive(Clone, Copy, Debug)]
pub struct Bands<'a> {
    pub caption: &'a str,
    /// The strip's heading, a word or two ("in force", "scheduled", "proposed").
    pub short: &'a str,
    pub cuts: &'a CutSet,
}

/// The natural process limits of the history (XmR): the mean and the lower and upper limits.
#[derive(Clone, Copy, Debug)]
pub struct LimitLines {
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// Everything the chart shows.
#[derive(Clone, Copy, Debug)]
pub struct HistoryChart<'a> {
    /// Unique on the page; every id in the picture starts with it.
    pub id_prefix: &'a str,
    pub title: &'a str,
    pub unit: &'a str,
    /// In ascending time order, with finite values (others are left out).
    pub points: &'a [(Timestamp, f64)],
    pub in_force: Option<Bands<'a>>,
    pub proposal: Option<Bands<'a>>,
    pub limits: Option<LimitLines>,
}

/// At most this many points are drawn; longer histories keep the lowest and highest value of
/// each of `MAX_DRAWN / 2` equal spans of time, so every peak and trough stays visible.
const MAX_DRAWN: usize = 1500;
/// Up to this many points each get a marker; beyond, markers would merge into a thick line, so
/// only the lowest, highest and latest points get one.
const MAX_MARKERS: usize = 120;

const PLOT_TOP: f64 = 26.0;
const PLOT_BOTTOM: f64 = 326.0;
const HEIGHT: f64 = PLOT_BOTTOM + 32.0;
/// Baseline of the unit and the strip captions above the plot.
const HEADER_BASELINE: f64 = 16.0;
const TICK_SIZE: f64 = 11.0;
const LINE_LABEL_SIZE: f64 = 10.0;
/// Vertical room of one line label.
const LINE_LABEL_HEIGHT: f64 = 12.0;
const STRIP_SIZE: f64 = 9.0;
const STRIP_WIDTH: f64 = 40.0;
const STRIP_GAP: f64 = 6.0;
/// Space between the plot and the first strip.
const STRIPS_OFFSET: f64 = 10.0;
/// Room for the leader from the strips (or the plot) to a line label.
const LEADER: f64 = 14.0;
/// The plot never gets narrower than this, however long the labels.
const MIN_PLOT_WIDTH: f64 = 320.0;
/// The background bands are the zone fills made lighter, so the near-black series and its
/// labels keep their contrast on every zone.
const BAND_OPACITY: &str = "0.35";

const DAY: f64 = 86_400.0;

/// Seconds since the Unix epoch.
fn seconds(t: Timestamp) -> f64 {
    t.as_datetime().timestamp_micros() as f64 / 1e6
}

fn date(t: Timestamp) -> String {
    t.as_datetime().format("%Y-%m-%d").to_string()
}

/// The facts about the history the picture and the `<desc>` state.
struct Stats {
    count: usize,
    first: (Timestamp, f64),
    last: (Timestamp, f64),
    lowest: (Timestamp, f64),
    highest: (Timestamp, f64),
}

/// The finite points of the history.
fn finite<'a>(points: &'a [(Timestamp, f64)]) -> impl Iterator<Item = (Timestamp, f64)> + 'a {
    points.iter().copied().filter(|(_, v)| v.is_finite())
}

fn stats(points: &[(Timestamp, f64)]) -> Option<Stats> {
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
fn thinned(points: &[(Timestamp, f64)], stats: &Stats) -> Vec<(f64, f64)> {
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

/// Where values fall between the axis ends, from 0 (low) to 1 (high), clamped: bands and lines
/// never leave the plot.
fn fraction(axis: &Axis, value: f64) -> f64 {
    let width = axis.high - axis.low;
    let f = if width.is_finite() {
        (value - axis.low) / width
    } else {
        // Halves first: the width of two finite numbers can overflow f64.
        (value / 2.0 - axis.low / 2.0) / (axis.high / 2.0 - axis.low / 2.0)
    };
    if f.is_finite() {
        f.clamp(0.0, 1.0)
    } else {
        0.5
    }
}

/// The time axis: its ends in seconds and its labelled ticks.
struct TimeAxis {
    low: f64,
    high: f64,
    ticks: Vec<(f64, String)>,
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
fn time_axis(first: f64, last: f64, width: f64) -> TimeAxis {
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

/// The value axis over the data, every cut point and the limits.
fn value_axis(chart: &HistoryChart<'_>, stats: Option<&Stats>) -> Axis {
    let mut values: Vec<f64> = Vec::new();
    if let Some(s) = stats {
        values.extend([s.lowest.1, s.highest.1]);
    }
    for bands in [&chart.in_force, &chart.proposal].into_iter().flatten() {
        values.extend(bands.cuts.values());
    }
    if let Some(l) = &chart.limits {
        values.extend(
            [l.lower, l.mean, l.upper]
                .into_iter()
                .filter(|v| v.is_finite()),
        );
    }
    let (min, max) = values
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(v), hi.max(v))
        });
    if min <= max {
        nice_axis(min, max)
    } else {
        nice_axis(0.0, 1.0)
    }
}

/// A limit shown with about two more decimals than the axis ticks: "mean 50.81", not
/// "mean 50.8133333333".
fn rounded(value: f64, axis: &Axis) -> String {
    let step = match axis.ticks.as_slice() {
        [a, b, ..] => b - a,
        _ => axis.high - axis.low,
    };
    if !(step.is_finite() && step > 0.0) {
        return number::format(value);
    }
    let decimals = (2.0 - step.log10().floor()).clamp(0.0, 17.0) as usize;
    match format!("{value:.decimals$}").parse::<f64>() {
        Ok(v) if v.is_finite() => number::format(v),
        _ => number::format(value),
    }
}

/// How a labelled line is drawn.
#[derive(Clone, Copy)]
enum Stroke {
    Cut,
    Limit,
    Mean,
}

impl Stroke {
    fn attributes(self) -> String {
        match self {
            Stroke::Cut => format!(r#"stroke="{INK}" stroke-width="1""#),
            Stroke::Limit => {
                format!(r#"stroke="{INK}" stroke-width="1.25" stroke-dasharray="6 4""#)
            }
            Stroke::Mean => {
                format!(r#"stroke="{INK}" stroke-width="1.25" stroke-dasharray="10 3 2 3""#)
            }
        }
    }
}

/// A line across the plot, labelled in the column right of the strips.
struct LineLabel {
    text: String,
    value: f64,
    stroke: Stroke,
}

/// The labelled lines: the cut points of the set drawn as bands, then the limits.
fn line_labels(chart: &HistoryChart<'_>, axis: &Axis) -> Vec<LineLabel> {
    let mut labels = Vec::new();
    if let Some(bands) = background(chart) {
        for (name, value) in bands.cuts.named() {
            labels.push(LineLabel {
                text: format!("{name} {}", number::format(value)),
                value,
                stroke: Stroke::Cut,
            });
        }
    }
    if let Some(l) = &chart.limits {
        for (name, value, stroke) in [
            ("upper limit", l.upper, Stroke::Limit),
            ("mean", l.mean, Stroke::Mean),
            ("lower limit", l.lower, Stroke::Limit),
        ] {
            if value.is_finite() {
                labels.push(LineLabel {
                    text: format!("{name} {}", rounded(value, axis)),
                    value,
                    stroke,
                });
            }
        }
    }
    labels
}

/// Centres for labels that want to sit at `wanted` (ascending), moved apart to at least `gap`
/// and kept within `top..=bottom` while there is room.
fn spread(wanted: &[f64], top: f64, bottom: f64, gap: f64) -> Vec<f64> {
    let mut ys = wanted.to_vec();
    for i in 0..ys.len() {
        let least = if i == 0 { top } else { ys[i - 1] + gap };
        ys[i] = ys[i].max(least);
    }
    for i in (0..ys.len()).rev() {
        let most = if i + 1 == ys.len() {
            bottom
        } else {
            ys[i + 1] - gap
        };
        ys[i] = ys[i].min(most);
    }
    ys
}

/// Horizontal positions of the parts of the picture.
struct Layout {
    left: f64,
    right: f64,
    /// Left edge of the first strip.
    strips_left: f64,
    /// Where the leaders to the line labels start: right of the strips, or of the plot.
    leaders_from: f64,
    /// Left edge of the line labels.
    labels_left: f64,
}

impl Layout {
    fn new(axis: &Axis, strips: usize, labels: &[LineLabel]) -> Layout {
        let widest_tick = axis
            .ticks
            .iter()
            .map(|&t| text_width(&number::format(t), TICK_SIZE))
            .fold(0.0, f64::max);
        let left = (widest_tick + 12.0).max(36.0);
        let strips_width = if strips == 0 {
            0.0
        } else {
            STRIPS_OFFSET + strips as f64 * STRIP_WIDTH + (strips - 1) as f64 * STRIP_GAP
        };
        let labels_width = labels
            .iter()
            .map(|l| text_width(&l.text, LINE_LABEL_SIZE))
            .fold(0.0, f64::max);
        let labels_width = if labels.is_empty() {
            0.0
        } else {
            labels_width + LEADER
        };
        let right = (WIDTH - 4.0 - strips_width - labels_width).max(left + MIN_PLOT_WIDTH);
        let strips_left = right + STRIPS_OFFSET;
        let leaders_from = right + strips_width;
        Layout {
            left,
            right,
            strips_left,
            leaders_from,
            labels_left: leaders_from + LEADER,
        }
    }

    fn y(&self, axis: &Axis, value: f64) -> f64 {
        PLOT_BOTTOM - (PLOT_BOTTOM - PLOT_TOP) * fraction(axis, value)
    }

    fn x(&self, time: &TimeAxis, seconds: f64) -> f64 {
        let f = (seconds - time.low) / (time.high - time.low);
        let f = if f.is_finite() {
            f.clamp(0.0, 1.0)
        } else {
            0.5
        };
        self.left + (self.right - self.left) * f
    }
}

/// The zone edges of `cuts` from the top of the plot down, with each zone between two edges:
/// `(zone, y_top, y_bottom)` from low values to high.
fn zone_spans(layout: &Layout, axis: &Axis, cuts: &CutSet) -> [(crate::engine::Zone, f64, f64); 5] {
    let ascending = ascending_cuts(cuts);
    let mut edges = [axis.low; 6];
    for (edge, (_, value)) in edges[1..5].iter_mut().zip(ascending) {
        *edge = value;
    }
    edges[5] = axis.high;
    let zones = zones_left_to_right(cuts.direction());
    std::array::from_fn(|i| {
        (
            zones[i],
            layout.y(axis, edges[i + 1]),
            layout.y(axis, edges[i]),
        )
    })
}

fn draw_bands(out: &mut String, layout: &Layout, axis: &Axis, cuts: &CutSet) {
    for (zone, top, bottom) in zone_spans(layout, axis, cuts) {
        let _ = writeln!(
            out,
            r#"<rect x="{}" y="{}" width="{}" height="{}" fill="{}" fill-opacity="{BAND_OPACITY}"/>"#,
            at(layout.left),
            at(top),
            at(layout.right - layout.left),
            at(bottom - top),
            colours(zone).0
        );
    }
}

/// Width of a zone name at `size`: the strips are narrow, so this is closer than the zone
/// strip's estimate. Each lowercase letter counts its width in Helvetica's Adobe font metrics,
/// plus 10% for wider sans-serif system fonts; other characters count 0.6 em.
fn zone_name_width(name: &str, size: f64) -> f64 {
    let em: f64 = name
        .chars()
        .map(|c| match c {
            'i' | 'l' => 0.222,
            'f' | 't' => 0.278,
            'r' => 0.333,
            'c' | 's' | 'v' | 'y' => 0.5,
            'a' | 'd' | 'e' | 'h' | 'n' | 'o' | 'p' | 'u' => 0.556,
            'm' => 0.833,
            _ => 0.6,
        })
        .sum();
    em * 1.1 * size
}

/// One strip at `x`: the set's zones, each named (reading upwards) where it is tall enough.
fn draw_strip(
    out: &mut String,
    layout: &Layout,
    axis: &Axis,
    x: f64,
    caption: &str,
    cuts: &CutSet,
) {
    let middle = x + STRIP_WIDTH / 2.0;
    text(
        out,
        middle,
        HEADER_BASELINE,
        &format!(r#"font-size="{STRIP_SIZE}" text-anchor="middle" fill="{INK}""#),
        caption,
    );
    for (zone, top, bottom) in zone_spans(layout, axis, cuts) {
        let (fill, ink) = colours(zone);
        let _ = writeln!(
            out,
            r#"<g><rect x="{}" y="{}" width="{STRIP_WIDTH}" height="{}" fill="{fill}" stroke="{INK}" stroke-width="0.75"/>"#,
            at(x),
            at(top),
            at(bottom - top)
        );
        let name = zone.as_str();
        // Smaller type before none: a zone named in words is not told by colour alone.
        let size = [STRIP_SIZE, 8.0, 7.0]
            .into_iter()
            .find(|&size| zone_name_width(name, size) + 4.0 <= bottom - top);
        if let Some(size) = size {
            let y = (top + bottom) / 2.0;
            let attributes = format!(
                r#"font-size="{size}" text-anchor="middle" fill="{ink}" transform="rotate(-90 {} {})""#,
                at(middle),
                at(y)
            );
            text(out, middle, y + size / 3.0, &attributes, name);
        }
        out.push_str("</g>\n");
    }
}

fn draw_value_axis(out: &mut String, layout: &Layout, axis: &Axis, unit: &str) {
    let grid = format!(r#"stroke="{GRID}" stroke-width="0.75""#);
    let tick = format!(r#"stroke="{INK}""#);
    let attributes = format!(r#"font-size="{TICK_SIZE}" text-anchor="end" fill="{INK}""#);
    for &value in &axis.ticks {
        let y = layout.y(axis, value);
        line(out, (layout.left, y), (layout.right, y), &grid);
        line(out, (layout.left - 5.0, y), (layout.left, y), &tick);
        text(
            out,
            layout.left - 7.0,
            y + 4.0,
            &attributes,
            &number::format(value),
        );
    }
    if !unit.is_empty() {
        let attributes = format!(r#"font-size="{TICK_SIZE}" fill="{INK}""#);
        text(out, 4.0, HEADER_BASELINE, &attributes, unit);
    }
}

fn draw_time_axis(out: &mut String, layout: &Layout, time: &TimeAxis) {
    let grid = format!(r#"stroke="{GRID}" stroke-width="0.75""#);
    let tick = format!(r#"stroke="{INK}""#);
    let attributes = format!(r#"font-size="{TICK_SIZE}" text-anchor="middle" fill="{INK}""#);
    for (seconds, label) in &time.ticks {
        let x = layout.x(time, *seconds);
        line(out, (x, PLOT_TOP), (x, PLOT_BOTTOM), &grid);
        line(out, (x, PLOT_BOTTOM), (x, PLOT_BOTTOM + 5.0), &tick);
        let half = text_width(label, TICK_SIZE) / 2.0;
        let x = x.clamp(half + 2.0, WIDTH - half - 2.0);
        text(out, x, PLOT_BOTTOM + 18.0, &attributes, label);
    }
}

fn draw_lines(out: &mut String, layout: &Layout, axis: &Axis, labels: &[LineLabel]) {
    let mut order: Vec<(f64, &LineLabel)> = labels
        .iter()
        .map(|label| (layout.y(axis, label.value), label))
        .collect();
    order.sort_by(|a, b| a.0.total_cmp(&b.0));
    let wanted: Vec<f64> = order.iter().map(|(y, _)| *y).collect();
    let placed = spread(&wanted, PLOT_TOP, PLOT_BOTTOM, LINE_LABEL_HEIGHT);
    let attributes = format!(r#"font-size="{LINE_LABEL_SIZE}" fill="{INK}""#);
    for ((y, label), label_y) in order.iter().zip(placed) {
        let stroke = label.stroke.attributes();
        line(out, (layout.left, *y), (layout.right, *y), &stroke);
        line(
            out,
            (layout.leaders_from, *y),
            (layout.labels_left - 3.0, label_y),
            &stroke,
        );
        text(
            out,
            layout.labels_left,
            label_y + 3.5,
            &attributes,
            &label.text,
        );
    }
}

fn marker(out: &mut String, (x, y): (f64, f64)) {
    let _ = writeln!(
        out,
        r#"<circle cx="{}" cy="{}" r="2.5" fill="{INK}" stroke="{WHITE}" stroke-width="0.75"/>"#,
        at(x),
        at(y)
    );
}

fn draw_series(
    out: &mut String,
    layout: &Layout,
    (axis, time): (&Axis, &TimeAxis),
    drawn: &[(f64, f64)],
    stats: &Stats,
) {
    let place = |(t, v): (f64, f64)| (layout.x(time, t), layout.y(axis, v));
    if drawn.len() >= 2 {
        let mut points = String::with_capacity(drawn.len() * 12);
        for (i, &point) in drawn.iter().enumerate() {
            let (x, y) = place(point);
            if i > 0 {
                points.push(' ');
            }
            let _ = write!(points, "{},{}", at(x), at(y));
        }
        let _ = writeln!(
            out,
            r#"<polyline points="{points}" fill="none" stroke="{INK}" stroke-width="1.5" stroke-linejoin="round"/>"#
        );
    }
    if drawn.len() <= MAX_MARKERS {
        for &point in drawn {
            marker(out, place(point));
        }
    } else {
        for (t, v) in [stats.lowest, stats.highest, stats.last] {
            marker(out, place((seconds(t), v)));
        }
    }
}

/// The cut sets present with their strip captions, in the order the strips are drawn.
fn band_sets<'c>(chart: &'c HistoryChart<'_>) -> Vec<(&'c str, &'c Bands<'c>)> {
    [&chart.in_force, &chart.proposal]
        .into_iter()
        .filter_map(|bands| bands.as_ref().map(|b| (b.short, b)))
        .collect()
}

/// The cut set drawn as the background bands: the proposal's, else the version in force's.
fn background<'c>(chart: &'c HistoryChart<'_>) -> Option<&'c Bands<'c>> {
    chart.proposal.as_ref().or(chart.in_force.as_ref())
}

/// The picture in words, for people who cannot see it.
fn describe(chart: &HistoryChart<'_>, stats: Option<&Stats>, axis: &Axis) -> String {
    let mut desc = String::new();
    let unit = if chart.unit.is_empty() {
        String::new()
    } else {
        format!(" in {}", chart.unit)
    };
    let sets = band_sets(chart);
    match stats {
        None => {
            desc.push_str("No history uploaded yet.");
            if !chart.unit.is_empty() {
                let _ = write!(desc, " Values{unit}.");
            }
        }
        Some(s) => {
            let (v, t) = (number::format(s.last.1), date(s.last.0));
            if s.count == 1 {
                let _ = write!(desc, "History of 1 value{unit}, on {t}: {v}");
            } else {
                let _ = write!(
                    desc,
                    "History of {} values{unit} from {} to {t}. Lowest {} on {}, highest {} on \
                     {}, latest {v} on {t}",
                    s.count,
                    date(s.first.0),
                    number::format(s.lowest.1),
                    date(s.lowest.0),
                    number::format(s.highest.1),
                    date(s.highest.0),
                );
            }
            let zones: Vec<String> = sets
                .iter()
                .map(|(short, bands)| {
                    let zone = classify(bands.cuts, Shades::default(), Some(s.last.1)).zone;
                    format!("{short}: {}", zone.as_str())
                })
                .collect();
            if !zones.is_empty() {
                let _ = write!(desc, " ({})", zones.join("; "));
            }
            desc.push('.');
            if s.count > MAX_DRAWN {
                let _ = write!(
                    desc,
                    " The line shows the lowest and highest value of each of {} equal spans of \
                     time.",
                    MAX_DRAWN / 2
                );
            }
        }
    }
    let background = background(chart);
    for (short, bands) in &sets {
        let shown = if background.is_some_and(|b| std::ptr::eq(b, *bands)) {
            format!(
                "drawn as the background bands with its cut points as lines across, and in the \
                 strip captioned {short}"
            )
        } else {
            format!("drawn in the strip captioned {short}")
        };
        let (zones, named) = crate::web::svg::zones_and_cuts_in_words(bands.cuts);
        let _ = write!(
            desc,
            " {} ({}), {shown}: zones {zones}; cut points {named}.",
            bands.caption,
            bands.cuts.direction(),
        );
    }
    if sets.is_empty() {
        desc.push_str(" No thresholds are drawn.");
    }
    if let Some(l) = &chart.limits {
        let _ = write!(
            desc,
            " Natural process limits, drawn as dashed lines: upper limit {}, mean {}, lower \
             limit {}.",
            rounded(l.upper, axis),
            rounded(l.mean, axis),
            rounded(l.lower, axis)
        );
    }
    desc
}

/// A complete `<svg>` element: the history as a line with point markers over the zones of the
/// proposal (or of the version in force), a strip per cut set, the cut and limit lines
/// labelled, and both axes. The same input gives the same bytes.
pub fn history_chart(chart: &HistoryChart<'_>) -> String {
    let stats = stats(chart.points);
    let axis = value_axis(chart, stats.as_ref());
    let labels = line_labels(chart, &axis);
    let sets = band_sets(chart);
    let layout = Layout::new(&axis, sets.len(), &labels);

    let mut body = String::new();
    if let Some(bands) = background(chart) {
        draw_bands(&mut body, &layout, &axis, bands.cuts);
    }
    draw_value_axis(&mut body, &layout, &axis, chart.unit);
    let time = stats.as_ref().map(|s| {
        time_axis(
            seconds(s.first.0),
            seconds(s.last.0),
            layout.right - layout.left,
        )
    });
    if let Some(time) = &time {
        draw_time_axis(&mut body, &layout, time);
    }
    draw_lines(&mut body, &layout, &axis, &labels);
    let frame = format!(r#"stroke="{INK}" stroke-width="1""#);
    line(
        &mut body,
        (layout.left, PLOT_TOP),
        (layout.left, PLOT_BOTTOM),
        &frame,
    );
    line(
        &mut body,
        (layout.left, PLOT_BOTTOM),
        (layout.right, PLOT_BOTTOM),
        &frame,
    );
    for (i, (short, bands)) in sets.iter().enumerate() {
        let x = layout.strips_left + i as f64 * (STRIP_WIDTH + STRIP_GAP);
        draw_strip(&mut body, &layout, &axis, x, short, bands.cuts);
    }
    match (&stats, &time) {
        (Some(s), Some(time)) => {
            let drawn = thinned(chart.points, s);
            draw_series(&mut body, &layout, (&axis, time), &drawn, s);
        }
        _ => {
            let message = "No history uploaded yet";
            let (x, y) = (
                (layout.left + layout.right) / 2.0,
                (PLOT_TOP + PLOT_BOTTOM) / 2.0,
            );
            // On white, so that no band or line runs through the words.
            let half = text_width(message, 13.0) / 2.0 + 8.0;
            let _ = writeln!(
                body,
                r#"<rect x="{}" y="{}" width="{}" height="26" fill="{WHITE}" stroke="{INK}" stroke-width="0.75"/>"#,
                at(x - half),
                at(y - 17.0),
                at(2.0 * half)
            );
            let attributes = format!(r#"font-size="13" text-anchor="middle" fill="{INK}""#);
            text(&mut body, x, y, &attributes, message);
        }
    }

    let id = escape(chart.id_prefix);
    format!(
        r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" width="100%" role="img" aria-labelledby="{id}-title {id}-desc" font-family="system-ui, sans-serif">
<title id="{id}-title">{}</title>
<desc id="{id}-desc">{}</desc>
{body}</svg>
"#,
        escape(chart.title),
        escape(&describe(chart, stats.as_ref(), &axis))
    )
}
