//! The zone strip: one strip per cut set, one above the other on one shared value axis, each
//! zone coloured and named, each cut point drawn and labelled, and a `<desc>` in words.

use std::fmt::Write as _;

use sha2::{Digest, Sha256};

use super::scale::{Axis, axis_over};
use super::svg::{GRID, INK, WIDTH, at, escape, line, text, text_width};
use super::zones::{ascending_cuts, colours, zones_and_cuts_in_words, zones_left_to_right};
use crate::domain::number;
use crate::domain::thresholds::CutSet;

/// One strip: a caption such as "In force: version 3" and its cut set.
pub struct StripRow<'a> {
    pub caption: &'a str,
    pub cuts: &'a CutSet,
}

/// Room left and right of the axis, so labels at its ends stay inside the picture.
const MARGIN: f64 = 24.0;
const PLOT_LEFT: f64 = MARGIN;
const PLOT_RIGHT: f64 = WIDTH - MARGIN;
const STRIP_HEIGHT: f64 = 28.0;
/// Height of one line of labels above or below a strip.
const LANE: f64 = 14.0;
const LABEL_SIZE: f64 = 11.0;
const CAPTION_SIZE: f64 = 13.0;
/// Space kept between a label and its neighbours.
const LABEL_GAP: f64 = 6.0;

/// Where `value` sits on the drawn axis, in viewBox units.
fn x_of(axis: &Axis, value: f64) -> f64 {
    PLOT_LEFT + (PLOT_RIGHT - PLOT_LEFT) * axis.position(value).clamp(0.0, 1.0)
}

/// A label outside the strip, centred on `x` (kept inside the picture), in a lane of its own
/// when it would overlap its neighbours.
struct Label {
    text: String,
    x: f64,
    lane: usize,
}

/// Labels for texts wanting to be centred at the given x positions (in ascending order), each
/// in the first lane where it clears the labels already placed; returns them and the lane count.
fn stack_in_lanes(wanted: Vec<(String, f64)>) -> (Vec<Label>, usize) {
    let mut lane_ends: Vec<f64> = Vec::new();
    let labels = wanted
        .into_iter()
        .map(|(text, x)| {
            let half = text_width(&text, LABEL_SIZE) / 2.0;
            let x = x.min(WIDTH - half - 2.0).max(half + 2.0);
            let lane = match lane_ends
                .iter()
                .position(|&end| end + LABEL_GAP <= x - half)
            {
                Some(lane) => lane,
                None => {
                    lane_ends.push(f64::NEG_INFINITY);
                    lane_ends.len() - 1
                }
            };
            lane_ends[lane] = x + half;
            Label { text, x, lane }
        })
        .collect();
    (labels, lane_ends.len())
}

/// Draws one row (caption, zone labels that do not fit, strip, cut lines and their labels)
/// from `top` and returns where the next row starts.
fn draw_row(out: &mut String, axis: &Axis, row: &StripRow<'_>, top: f64) -> f64 {
    let cuts = ascending_cuts(row.cuts);
    let zones = zones_left_to_right(row.cuts.direction());
    let mut edges = [PLOT_LEFT; 6];
    for (edge, (_, value)) in edges[1..5].iter_mut().zip(cuts) {
        *edge = x_of(axis, value);
    }
    edges[5] = PLOT_RIGHT;

    let fits =
        |i: usize| edges[i + 1] - edges[i] >= text_width(zones[i].as_str(), LABEL_SIZE) + LABEL_GAP;
    let (above, above_lanes) = stack_in_lanes(
        (0..5)
            .filter(|&i| !fits(i))
            .map(|i| {
                (
                    zones[i].as_str().to_string(),
                    (edges[i] + edges[i + 1]) / 2.0,
                )
            })
            .collect(),
    );
    let (below, below_lanes) = stack_in_lanes(
        cuts.iter()
            .zip(&edges[1..5])
            .map(|(&(name, value), &x)| (format!("{name} {}", number::format(value)), x))
            .collect(),
    );

    let caption_attributes =
        format!(r#"font-size="{CAPTION_SIZE}" font-weight="bold" fill="{INK}""#);
    text(
        out,
        PLOT_LEFT,
        top + CAPTION_SIZE,
        &caption_attributes,
        row.caption,
    );
    let strip_top = top + CAPTION_SIZE + 8.0 + above_lanes as f64 * LANE;
    let strip_bottom = strip_top + STRIP_HEIGHT;
    let label_attributes =
        |fill: &str| format!(r#"font-size="{LABEL_SIZE}" text-anchor="middle" fill="{fill}""#);

    for label in &above {
        let y = strip_top - 4.0 - label.lane as f64 * LANE;
        text(out, label.x, y, &label_attributes(INK), &label.text);
    }
    for (i, zone) in zones.iter().enumerate() {
        let (fill, ink) = colours(*zone);
        let _ = writeln!(
            out,
            r#"<g><rect x="{}" y="{}" width="{}" height="{STRIP_HEIGHT}" fill="{fill}" stroke="{INK}" stroke-width="0.75"/>"#,
            at(edges[i]),
            at(strip_top),
            at(edges[i + 1] - edges[i])
        );
        if fits(i) {
            let (x, y) = ((edges[i] + edges[i + 1]) / 2.0, strip_top + 18.0);
            text(out, x, y, &label_attributes(ink), zone.as_str());
        }
        out.push_str("</g>\n");
    }
    let line_attributes = format!(r#"stroke="{INK}" stroke-width="2""#);
    for &x in &edges[1..5] {
        line(
            out,
            (x, strip_top - 4.0),
            (x, strip_bottom + 4.0),
            &line_attributes,
        );
    }
    for label in &below {
        let y = strip_bottom + 2.0 + (label.lane + 1) as f64 * LANE;
        text(out, label.x, y, &label_attributes(INK), &label.text);
    }
    strip_bottom + 4.0 + below_lanes as f64 * LANE + 14.0
}

/// Draws the shared axis at `y` and returns the picture's height.
fn draw_axis(out: &mut String, axis: &Axis, unit: &str, y: f64) -> f64 {
    line(
        out,
        (PLOT_LEFT, y),
        (PLOT_RIGHT, y),
        &format!(r#"stroke="{INK}" stroke-width="1""#),
    );
    let attributes = format!(r#"font-size="{LABEL_SIZE}" text-anchor="middle" fill="{INK}""#);
    for &tick in &axis.ticks {
        let x = x_of(axis, tick);
        line(out, (x, y), (x, y + 5.0), &format!(r#"stroke="{INK}""#));
        text(out, x, y + 18.0, &attributes, &number::format(tick));
    }
    if unit.is_empty() {
        return y + 28.0;
    }
    let attributes = format!(r#"font-size="12" text-anchor="middle" fill="{INK}""#);
    text(
        out,
        (PLOT_LEFT + PLOT_RIGHT) / 2.0,
        y + 36.0,
        &attributes,
        unit,
    );
    y + 44.0
}

/// The whole picture in words, for people who cannot see it: each row's zones from left to
/// right, then its cut points.
fn describe(unit: &str, rows: &[StripRow<'_>]) -> String {
    let mut desc = String::from("Zones and cut points on one shared value axis");
    if !unit.is_empty() {
        let _ = write!(desc, " in {unit}");
    }
    desc.push('.');
    for row in rows {
        let (zones, named) = zones_and_cuts_in_words(row.cuts);
        let _ = write!(
            desc,
            " {} ({}): {zones}; cut points {named}.",
            row.caption,
            row.cuts.direction(),
        );
    }
    desc
}

/// The axis that fits every row's cut points.
fn shared_axis(rows: &[StripRow<'_>]) -> Axis {
    axis_over(rows.iter().flat_map(|row| row.cuts.values()))
}

/// A complete `<svg>` element showing one strip per row, one above the other, on ONE shared
/// value axis. Its ids come from a hash of the content, so different strips on one page do not
/// clash; use [`zone_strip_with_id`] to choose them.
pub fn zone_strip(title: &str, unit: &str, rows: &[StripRow<'_>]) -> String {
    let desc = describe(unit, rows);
    let digest = Sha256::digest(format!("{title}\0{desc}").as_bytes());
    zone_strip_with_id(
        &format!("zs-{}", hex::encode(&digest[..5])),
        title,
        unit,
        rows,
    )
}

/// [`zone_strip`] with ids starting with `id_prefix`, which must be unique on the page.
pub fn zone_strip_with_id(
    id_prefix: &str,
    title: &str,
    unit: &str,
    rows: &[StripRow<'_>],
) -> String {
    let axis = shared_axis(rows);
    let mut body = String::new();
    let first_top = 8.0;
    let mut y = first_top;
    for row in rows {
        y = draw_row(&mut body, &axis, row, y);
    }
    let mut grid = String::new();
    for &tick in &axis.ticks {
        let x = x_of(&axis, tick);
        line(
            &mut grid,
            (x, first_top),
            (x, y),
            &format!(r#"stroke="{GRID}""#),
        );
    }
    let height = draw_axis(&mut body, &axis, unit, y);
    let id = escape(id_prefix);
    format!(
        r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {}" width="100%" role="img" aria-labelledby="{id}-title {id}-desc" font-family="system-ui, sans-serif">
<title id="{id}-title">{}</title>
<desc id="{id}-desc">{}</desc>
{grid}{body}</svg>
"#,
        at(height),
        escape(title),
        escape(&describe(unit, rows))
    )
}
