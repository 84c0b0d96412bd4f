//! The history chart: a metric's values over time, drawn over the zones of the version in force
//! and of a proposal, with the natural process limits, so people can judge thresholds against
//! the evidence.
//!
//! Like the zone strip ([`super::zone_strip`]) it uses SVG presentation attributes only (the
//! page CSP forbids inline styles and scripts), the same purple/orange palette, and escapes
//! every piece of outside text. The `<desc>` carries the same facts in words (`describe.rs`).
//!
//! Layout: the value axis on the left and the time axis below frame the plot. The plot's
//! background shows the zones of the proposal as horizontal bands (of the version in force when
//! there is no proposal), with its cut points as lines across. Right of the plot, one narrow
//! strip per cut set (in force, then proposed) shows that set's zones, named where they are
//! tall enough, and a column of labels names each cut line and limit line.

mod describe;
mod draw;
mod layout;
mod points;
mod time_axis;

use std::fmt::Write as _;

use self::describe::describe;
use self::draw::{
    draw_bands, draw_lines, draw_series, draw_strip, draw_time_axis, draw_value_axis,
};
use self::layout::{Layout, line_labels, value_axis};
use self::points::{seconds, stats, thinned};
use self::time_axis::time_axis;
use super::svg::{INK, WHITE, WIDTH, at, escape, line, text, text_width};
use crate::domain::Timestamp;
use crate::domain::thresholds::CutSet;

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
