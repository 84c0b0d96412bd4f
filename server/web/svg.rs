//! Pictures drawn by the server as SVG.
//!
//! The zone strip shows cut sets as coloured zones on one value axis, so people can compare the
//! thresholds in force with a proposal at a glance. The page CSP forbids inline styles and
//! scripts, so the pictures use SVG presentation attributes only, and every piece of text from
//! outside goes through [`escape`].

use std::fmt::Write as _;

use sha2::{Digest, Sha256};

use crate::domain::number;
use crate::domain::thresholds::{CutSet, Direction};
use crate::engine::Zone;

/// One strip: a caption such as "In force: version 3" and its cut set.
pub struct StripRow<'a> {
    pub caption: &'a str,
    pub cuts: &'a CutSet,
}

/// Width of every picture in viewBox units; the height grows with the rows.
pub(crate) const WIDTH: f64 = 720.0;
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
/// Near-black for text on light fills and for lines.
pub(crate) const INK: &str = "#1a1a1a";
pub(crate) const WHITE: &str = "#ffffff";
/// Light grey for the tick lines behind the strips.
pub(crate) const GRID: &str = "#d9d9d9";

/// Fill and text colour of a zone. The fills are the ColorBrewer PuOr diverging palette: purple
/// and orange stay apart under the common colour-vision deficiencies, unlike red and green. Each
/// text colour is the one of white and near-black with the higher WCAG 2 contrast ratio (at
/// least 4.5:1 on every fill).
pub(crate) fn colours(zone: Zone) -> (&'static str, &'static str) {
    match zone {
        Zone::Critical => ("#b35806", WHITE),
        Zone::Intervene => ("#f1a340", INK),
        Zone::Steady => ("#f7f7f7", INK),
        Zone::Outperform => ("#998ec3", INK),
        Zone::Stretch => ("#542788", WHITE),
        // Never a zone of a strip (it is the zone of a missing value); white like the page.
        Zone::NoData => (WHITE, INK),
    }
}

/// The five zones from low values (left) to high values (right).
pub(crate) fn zones_left_to_right(direction: Direction) -> [Zone; 5] {
    use Zone::*;
    match direction {
        Direction::HigherIsBetter => [Critical, Intervene, Steady, Outperform, Stretch],
        Direction::LowerIsBetter => [Stretch, Outperform, Steady, Intervene, Critical],
        Direction::TargetBand => [Critical, Intervene, Steady, Intervene, Critical],
    }
}

/// The cut points as `(name, value)` in ascending value order, as the axis shows them.
///
/// In every direction the line belongs to the zone farther from `steady` (docs/design.md:
/// reaching a line counts as crossing it), so the two lowest lines belong to the zone on their
/// left and the two highest to the zone on their right.
pub(crate) fn ascending_cuts(cuts: &CutSet) -> [(&'static str, f64); 4] {
    let mut named = cuts.named();
    if cuts.direction() == Direction::LowerIsBetter {
        named.reverse();
    }
    named
}

/// The value axis: its two ends and its labelled ticks.
#[derive(Clone, Debug, PartialEq)]
pub struct Axis {
    pub low: f64,
    pub high: f64,
    pub ticks: Vec<f64>,
}

/// A tick step `m × 10^k` with `m` 1, 2 or 5.
#[derive(Clone, Copy)]
struct Step {
    m: u8,
    k: i32,
}

impl Step {
    /// The `n`-th multiple of the step, parsed from decimal text so that ticks such as 0.3 come
    /// out as the nearest f64 to 0.3 rather than 3 × 0.1 = 0.30000000000000004.
    fn multiple(self, n: f64) -> f64 {
        format!("{}e{}", n * f64::from(self.m), self.k)
            .parse()
            .unwrap_or(f64::NAN)
    }

    /// The first and last multiples inside `[low, high]`, if the step is usable there.
    fn range(self, low: f64, high: f64) -> Option<(f64, f64)> {
        let size = self.multiple(1.0);
        let (first, last) = ((low / size).ceil(), (high / size).floor());
        (size > 0.0 && first.is_finite() && last.is_finite() && first <= last)
            .then_some((first, last))
    }
}

/// The axis ends for values from `min` to `max`: 15% of the span beyond each, or at least 1
/// around a single value, and within the finite numbers.
fn padded(min: f64, max: f64) -> (f64, f64) {
    // Halves first: the span of two finite numbers can overflow f64.
    let pad = if max > min {
        0.3 * (max / 2.0 - min / 2.0)
    } else {
        (min.abs() * 0.15).max(1.0)
    };
    ((min - pad).max(-f64::MAX), (max + pad).min(f64::MAX))
}

/// The 1-2-5 steps around a sixth of `[low, high]`, finest first, each with the indices of its
/// first and last multiple inside.
fn candidate_steps(low: f64, high: f64) -> Vec<(Step, (f64, f64))> {
    let width = high - low;
    let sixth = if width.is_finite() {
        width / 6.0
    } else {
        high / 6.0 - low / 6.0
    };
    let k0 = sixth.log10().floor().clamp(-330.0, 310.0) as i32;
    (k0 - 1..=k0 + 1)
        .flat_map(|k| [1, 2, 5].map(|m| Step { m, k }))
        .filter_map(|step| Some((step, step.range(low, high)?)))
        .collect()
}

/// How many ticks lie between the indices `first` and `last`.
fn tick_count((first, last): (f64, f64)) -> f64 {
    last - first + 1.0
}

/// A nice axis for values from `min` to `max` (finite): padded by 15% of the span on both sides
/// (never to zero width), with 4 to 8 ticks at a step of 1, 2 or 5 × 10^k, as near 6 as can be.
///
/// For a few widths no such step gives 4 to 8 ticks (9 at a step of 2, 3 at a step of 5); then
/// the axis is stretched to the next multiple of the larger step, on the side that needs less.
/// Only spans below the smallest normal f64 numbers get no ticks.
pub fn nice_axis(min: f64, max: f64) -> Axis {
    let (mut low, mut high) = padded(min.min(max), min.max(max));
    let steps = candidate_steps(low, high);
    let fitting = steps
        .iter()
        .filter(|(_, range)| (4.0..=8.0).contains(&tick_count(*range)))
        .min_by(|a, b| {
            let off = |range| (tick_count(range) - 6.0).abs();
            off(a.1).total_cmp(&off(b.1))
        });
    let (step, (first, last)) = match (fitting, steps.iter().find(|(_, r)| tick_count(*r) < 4.0)) {
        (Some(&found), _) => found,
        (None, Some(&(step, (first, last)))) => {
            let (below, above) = (step.multiple(first - 1.0), step.multiple(last + 1.0));
            if low - below <= above - high && below.is_finite() {
                low = below;
                (step, (first - 1.0, last))
            } else {
                high = above;
                (step, (first, last + 1.0))
            }
        }
        (None, None) => {
            return Axis {
                low,
                high,
                ticks: Vec::new(),
            };
        }
    };
    let ticks = (0..=(last - first) as usize)
        .map(|i| step.multiple(first + i as f64))
        .collect();
    Axis { low, high, ticks }
}

/// Where `value` sits on the drawn axis, in viewBox units.
fn x_of(axis: &Axis, value: f64) -> f64 {
    let width = axis.high - axis.low;
    let fraction = if width.is_finite() {
        (value - axis.low) / width
    } else {
        (value / 2.0 - axis.low / 2.0) / (axis.high / 2.0 - axis.low / 2.0)
    };
    PLOT_LEFT + (PLOT_RIGHT - PLOT_LEFT) * fraction.clamp(0.0, 1.0)
}

/// A coordinate as attribute text; a tenth of a unit is finer than any screen shows.
pub(crate) fn at(v: f64) -> String {
    format!("{v:.1}")
}

/// Escapes text for XML content and attribute values (& < > " '), and replaces the characters
/// XML 1.0 cannot carry at all, even escaped (most C0 controls, U+FFFE, U+FFFF), with U+FFFD.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\u{0}'..='\u{8}'
            | '\u{B}'
            | '\u{C}'
            | '\u{E}'..='\u{1F}'
            | '\u{FFFE}'
            | '\u{FFFF}' => out.push('\u{FFFD}'),
            c => out.push(c),
        }
    }
    out
}

/// Writes a `<text>` element; the content is escaped here so that no caller can forget it.
pub(crate) fn text(out: &mut String, x: f64, y: f64, attributes: &str, content: &str) {
    let _ = writeln!(
        out,
        r#"<text x="{}" y="{}" {attributes}>{}</text>"#,
        at(x),
        at(y),
        escape(content)
    );
}

pub(crate) fn line(out: &mut String, (x1, y1): (f64, f64), (x2, y2): (f64, f64), attributes: &str) {
    let _ = writeln!(
        out,
        r#"<line x1="{}" y1="{}" x2="{}" y2="{}" {attributes}/>"#,
        at(x1),
        at(y1),
        at(x2),
        at(y2)
    );
}

/// Width of `text` at `size`, estimated: SVG text cannot be measured on the server, and most
/// sans-serif characters are narrower than 0.6 em.
pub(crate) fn text_width(text: &str, size: f64) -> f64 {
    text.chars().count() as f64 * size * 0.6
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

/// The `i`-th zone from the left in words, e.g. "intervene above 50 and at or below 70": it
/// lies between the ascending cuts `i - 1` and `i`, and the outer zones are open-ended.
pub(crate) fn describe_zone(zone: Zone, i: usize, cuts: &[(&str, f64); 4]) -> String {
    let mut bounds = Vec::new();
    if i > 0 {
        // The two highest lines belong to the zone on their right (see `ascending_cuts`).
        let word = if i >= 3 { "at or above" } else { "above" };
        bounds.push(format!("{word} {}", number::format(cuts[i - 1].1)));
    }
    if i < 4 {
        // The two lowest lines belong to the zone on their left.
        let word = if i <= 1 { "at or below" } else { "below" };
        bounds.push(format!("{word} {}", number::format(cuts[i].1)));
    }
    format!("{} {}", zone.as_str(), bounds.join(" and "))
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

/// A cut set in words for a picture's description: its zones from low to high values, and
/// its cut points by name and value, each joined with commas.
pub(crate) fn zones_and_cuts_in_words(cut_set: &CutSet) -> (String, String) {
    let cuts = ascending_cuts(cut_set);
    let zones: Vec<String> = zones_left_to_right(cut_set.direction())
        .iter()
        .enumerate()
        .map(|(i, &zone)| describe_zone(zone, i, &cuts))
        .collect();
    let named: Vec<String> = cut_set
        .named()
        .iter()
        .map(|(name, value)| format!("{name} {}", number::format(*value)))
        .collect();
    (zones.join(", "), named.join(", "))
}

/// The axis that fits every row's cut points.
fn shared_axis(rows: &[StripRow<'_>]) -> Axis {
    let values = rows.iter().flat_map(|row| row.cuts.values());
    let (min, max) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
        (lo.min(v), hi.max(v))
    });
    if min <= max {
        nice_axis(min, max)
    } else {
        nice_axis(0.0, 1.0)
    }
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
