//! Where the parts of the history chart go: the value axis, the labelled lines and their
//! labels, the horizontal positions of plot, strips and labels, and the zones' edges.

use super::points::Stats;
use super::time_axis::TimeAxis;
use super::{
    HistoryChart, LEADER, LINE_LABEL_SIZE, MIN_PLOT_WIDTH, PLOT_BOTTOM, PLOT_TOP, STRIP_GAP,
    STRIP_WIDTH, STRIPS_OFFSET, TICK_SIZE, background,
};
use crate::charts::scale::{Axis, axis_over};
use crate::charts::svg::{INK, WIDTH, text_width};
use crate::charts::zones::{ascending_cuts, zones_left_to_right};
use crate::domain::number;
use crate::domain::thresholds::CutSet;
use crate::engine::Zone;

/// Where values fall between the axis ends, from 0 (low) to 1 (high), clamped: bands and lines
/// never leave the plot.
fn fraction(axis: &Axis, value: f64) -> f64 {
    let f = axis.position(value);
    if f.is_finite() {
        f.clamp(0.0, 1.0)
    } else {
        0.5
    }
}

/// The value axis over the data, every cut point and the limits.
pub(super) fn value_axis(chart: &HistoryChart<'_>, stats: Option<&Stats>) -> Axis {
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
    axis_over(values)
}

/// A limit shown with about two more decimals than the axis ticks: "mean 50.81", not
/// "mean 50.8133333333".
pub(super) fn rounded(value: f64, axis: &Axis) -> String {
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
pub(super) enum Stroke {
    Cut,
    Limit,
    Mean,
}

impl Stroke {
    pub(super) fn attributes(self) -> String {
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
pub(super) struct LineLabel {
    pub(super) text: String,
    pub(super) value: f64,
    pub(super) stroke: Stroke,
}

/// The labelled lines: the cut points of the set drawn as bands, then the limits.
pub(super) fn line_labels(chart: &HistoryChart<'_>, axis: &Axis) -> Vec<LineLabel> {
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
pub(super) fn spread(wanted: &[f64], top: f64, bottom: f64, gap: f64) -> Vec<f64> {
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
pub(super) struct Layout {
    pub(super) left: f64,
    pub(super) right: f64,
    /// Left edge of the first strip.
    pub(super) strips_left: f64,
    /// Where the leaders to the line labels start: right of the strips, or of the plot.
    pub(super) leaders_from: f64,
    /// Left edge of the line labels.
    pub(super) labels_left: f64,
}

impl Layout {
    pub(super) fn new(axis: &Axis, strips: usize, labels: &[LineLabel]) -> Layout {
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

    pub(super) fn y(&self, axis: &Axis, value: f64) -> f64 {
        PLOT_BOTTOM - (PLOT_BOTTOM - PLOT_TOP) * fraction(axis, value)
    }

    pub(super) fn x(&self, time: &TimeAxis, seconds: f64) -> f64 {
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
pub(super) fn zone_spans(layout: &Layout, axis: &Axis, cuts: &CutSet) -> [(Zone, f64, f64); 5] {
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
