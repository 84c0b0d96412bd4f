//! Drawing the parts of the history chart: the background bands, the strips, both axes, the
//! labelled lines and the series with its markers.

use std::fmt::Write as _;

use super::layout::{Layout, LineLabel, spread, zone_spans};
use super::points::{Stats, seconds};
use super::time_axis::TimeAxis;
use super::{
    BAND_OPACITY, HEADER_BASELINE, LINE_LABEL_HEIGHT, LINE_LABEL_SIZE, PLOT_BOTTOM, PLOT_TOP,
    STRIP_SIZE, STRIP_WIDTH, TICK_SIZE,
};
use crate::charts::scale::Axis;
use crate::charts::svg::{GRID, INK, WHITE, WIDTH, at, line, text, text_width};
use crate::charts::zones::colours;
use crate::domain::number;
use crate::domain::thresholds::CutSet;

/// Up to this many points each get a marker; beyond, markers would merge into a thick line, so
/// only the lowest, highest and latest points get one.
const MAX_MARKERS: usize = 120;

pub(super) fn draw_bands(out: &mut String, layout: &Layout, axis: &Axis, cuts: &CutSet) {
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
pub(super) fn draw_strip(
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

pub(super) fn draw_value_axis(out: &mut String, layout: &Layout, axis: &Axis, unit: &str) {
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

pub(super) fn draw_time_axis(out: &mut String, layout: &Layout, time: &TimeAxis) {
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

pub(super) fn draw_lines(out: &mut String, layout: &Layout, axis: &Axis, labels: &[LineLabel]) {
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

pub(super) fn draw_series(
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
