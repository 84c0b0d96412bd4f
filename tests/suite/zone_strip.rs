//! Tests of the zone strip picture: every zone and cut point labelled in text, the words of the
//! `<desc>` agreeing with the engine, one shared axis with nice ticks, escaping, no inline
//! styles or scripts, and well-formed XML according to a reference parser (Python's
//! `xml.etree.ElementTree`).

use cutpoints::charts::scale::nice_axis;
use cutpoints::charts::zone_strip::{StripRow, zone_strip, zone_strip_with_id};
use cutpoints::domain::number::format;
use cutpoints::domain::thresholds::{CutSet, Direction, Shades};
use cutpoints::engine::classify;
use proptest::prelude::*;

fn cuts(direction: Direction, values: [f64; 4]) -> CutSet {
    CutSet::new(direction, values).expect("valid cut set")
}

/// One cut set of each direction, with its zones from left to right.
fn examples() -> [(CutSet, [&'static str; 5]); 3] {
    [
        (
            cuts(Direction::HigherIsBetter, [50.0, 70.0, 80.0, 90.0]),
            ["critical", "intervene", "steady", "outperform", "stretch"],
        ),
        (
            cuts(Direction::LowerIsBetter, [50.0, 30.0, 20.0, 10.0]),
            ["stretch", "outperform", "steady", "intervene", "critical"],
        ),
        (
            cuts(Direction::TargetBand, [2.5, 4.0, 6.0, 7.5]),
            ["critical", "intervene", "steady", "intervene", "critical"],
        ),
    ]
}

/// The fill the design asks for (a purple/orange diverging palette, ColorBrewer PuOr).
fn fill_of(zone: &str) -> &'static str {
    match zone {
        "critical" => "#b35806",
        "intervene" => "#f1a340",
        "steady" => "#f7f7f7",
        "outperform" => "#998ec3",
        "stretch" => "#542788",
        other => panic!("no zone {other}"),
    }
}

/// The value of the first attribute `name` in `markup`.
fn attr<'a>(markup: &'a str, name: &str) -> Option<&'a str> {
    let marker = format!(" {name}=\"");
    let start = markup.find(&marker)? + marker.len();
    let end = markup[start..].find('"')? + start;
    Some(&markup[start..end])
}

/// The text content of `<desc>`.
fn desc_of(svg: &str) -> &str {
    let start = svg.find("<desc").unwrap();
    let start = svg[start..].find('>').unwrap() + start + 1;
    let end = svg.find("</desc>").unwrap();
    &svg[start..end]
}

use crate::helpers::parses_as_xml;

#[test]
fn every_direction_labels_every_zone_and_cut_point_in_text() {
    for (set, zones) in examples() {
        let svg = zone_strip(
            "Thresholds",
            "%",
            &[StripRow {
                caption: "In force: version 3",
                cuts: &set,
            }],
        );
        for zone in zones {
            assert!(svg.contains(&format!(">{zone}</text>")), "{zone} in\n{svg}");
        }
        for (name, value) in set.named() {
            let label = format!(">{name} {}</text>", format(value));
            assert!(svg.contains(&label), "{label} in\n{svg}");
        }
        assert!(svg.contains(">In force: version 3</text>"));
        assert!(svg.contains(">%</text>"), "the unit labels the axis");
    }
}

#[test]
fn zones_run_left_to_right_in_the_order_of_their_direction() {
    for (set, zones) in examples() {
        let svg = zone_strip(
            "t",
            "",
            &[StripRow {
                caption: "c",
                cuts: &set,
            }],
        );
        let fills: Vec<&str> = svg
            .split("<rect")
            .skip(1)
            .map(|tag| attr(tag, "fill").unwrap())
            .collect();
        let want: Vec<&str> = zones.iter().map(|z| fill_of(z)).collect();
        assert_eq!(fills, want, "{:?}", set.direction());
        let xs: Vec<f64> = svg
            .split("<rect")
            .skip(1)
            .map(|tag| attr(tag, "x").unwrap().parse().unwrap())
            .collect();
        assert!(xs.windows(2).all(|w| w[0] < w[1]), "ascending: {xs:?}");
    }
}

/// WCAG 2 relative luminance of `#rrggbb`.
fn luminance(hex: &str) -> f64 {
    let channel = |i: usize| {
        let c = f64::from(u8::from_str_radix(&hex[i..i + 2], 16).unwrap()) / 255.0;
        if c <= 0.04045 {
            c / 12.92
        } else {
            ((c + 0.055) / 1.055).powf(2.4)
        }
    };
    0.2126 * channel(1) + 0.7152 * channel(3) + 0.0722 * channel(5)
}

#[test]
fn labels_inside_zones_meet_the_wcag_contrast_ratio() {
    // WCAG 2.x success criterion 1.4.3: at least 4.5:1 for text.
    let (set, _) = &examples()[0];
    let svg = zone_strip(
        "t",
        "",
        &[StripRow {
            caption: "c",
            cuts: set,
        }],
    );
    let mut checked = 0;
    for group in svg.split("<g>").skip(1) {
        let group = &group[..group.find("</g>").unwrap()];
        let Some(text) = group.find("<text") else {
            continue;
        };
        let fill = attr(group, "fill").unwrap();
        let ink = attr(&group[text..], "fill").unwrap();
        let (a, b) = (luminance(fill), luminance(ink));
        let ratio = (a.max(b) + 0.05) / (a.min(b) + 0.05);
        assert!(ratio >= 4.5, "{ink} on {fill}: {ratio:.2}");
        checked += 1;
    }
    assert_eq!(
        checked, 5,
        "every zone of a roomy strip is labelled inside it"
    );
}

#[test]
fn zones_too_narrow_for_their_label_are_labelled_beside_the_strip() {
    let set = cuts(Direction::HigherIsBetter, [0.0, 0.5, 99.5, 100.0]);
    let svg = zone_strip(
        "t",
        "",
        &[StripRow {
            caption: "c",
            cuts: &set,
        }],
    );
    for zone in ["critical", "intervene", "steady", "outperform", "stretch"] {
        assert!(svg.contains(&format!(">{zone}</text>")), "{zone} in\n{svg}");
    }
    // Labels inside a zone sit in its <g>; the narrow zones' labels are outside any.
    let inside: String = svg
        .split("<g>")
        .skip(1)
        .map(|group| &group[..group.find("</g>").unwrap()])
        .collect();
    for narrow in ["intervene", "outperform"] {
        assert!(!inside.contains(&format!(">{narrow}</text>")), "{narrow}");
    }
    parses_as_xml(&svg);
}

#[test]
fn the_desc_states_every_zone_and_cut_point_as_the_engine_classifies() {
    let in_words = [
        "critical at or below 50, intervene above 50 and at or below 70, steady above 70 and \
         below 80, outperform at or above 80 and below 90, stretch at or above 90",
        "stretch at or below 10, outperform above 10 and at or below 20, steady above 20 and \
         below 30, intervene at or above 30 and below 50, critical at or above 50",
        "critical at or below 2.5, intervene above 2.5 and at or below 4, steady above 4 and \
         below 6, intervene at or above 6 and below 7.5, critical at or above 7.5",
    ];
    for ((set, _), words) in examples().iter().zip(in_words) {
        let svg = zone_strip(
            "Compare",
            "%",
            &[StripRow {
                caption: "Proposal",
                cuts: set,
            }],
        );
        let desc = desc_of(&svg);
        assert!(desc.contains(&format!("Proposal ({}): ", set.direction())));
        assert!(desc.contains(words), "{words}\nin\n{desc}");
        for (name, value) in set.named() {
            assert!(
                desc.contains(&format!("{name} {}", format(value))),
                "{name}"
            );
            // The zone that claims the line in words is the engine's zone for it.
            let zone = classify(set, Shades::default(), Some(value)).zone.as_str();
            let v = format(value);
            let claims = words.split(", ").any(|clause| {
                clause.starts_with(&format!("{zone} "))
                    && (clause.ends_with(&format!("at or below {v}"))
                        || clause.ends_with(&format!("at or above {v}"))
                        || clause.contains(&format!("at or above {v} and")))
            });
            assert!(claims, "{value} belongs to {zone} in {words}");
        }
        assert!(desc.contains("%"), "the desc names the unit");
    }
}

#[test]
fn title_and_desc_label_the_picture_with_ids_unique_per_picture() {
    let (set, _) = &examples()[0];
    let svg = zone_strip(
        "Churn thresholds",
        "",
        &[StripRow {
            caption: "In force",
            cuts: set,
        }],
    );
    assert!(svg.starts_with("<svg "));
    assert!(svg.contains(r#"xmlns="http://www.w3.org/2000/svg""#));
    assert!(svg.contains(r#"role="img""#));
    assert!(svg.contains(r#"width="100%""#));
    assert!(svg.contains(r#"viewBox="0 0 720 "#));
    let root = &svg[..svg.find('>').unwrap()];
    assert!(
        !root.contains(" height="),
        "the viewBox alone sets the height: {root}"
    );
    let labelled_by = attr(&svg, "aria-labelledby").unwrap();
    let ids: Vec<&str> = labelled_by.split(' ').collect();
    assert_eq!(ids.len(), 2);
    assert!(svg.contains(&format!(
        r#"<title id="{}">Churn thresholds</title>"#,
        ids[0]
    )));
    assert!(svg.contains(&format!(r#"<desc id="{}">"#, ids[1])));
    for id in &ids {
        assert_eq!(svg.matches(&format!(r#"id="{id}""#)).count(), 1);
    }

    let other = zone_strip(
        "Churn thresholds",
        "",
        &[StripRow {
            caption: "Proposal",
            cuts: set,
        }],
    );
    let other_ids = attr(&other, "aria-labelledby").unwrap();
    assert_ne!(
        labelled_by, other_ids,
        "two strips on one page do not clash"
    );
    assert_eq!(
        zone_strip(
            "Churn thresholds",
            "",
            &[StripRow {
                caption: "In force",
                cuts: set
            }]
        ),
        svg,
        "the same content draws the same picture"
    );

    let chosen = zone_strip_with_id(
        "metric-7",
        "t",
        "",
        &[StripRow {
            caption: "c",
            cuts: set,
        }],
    );
    assert!(chosen.contains(r#"aria-labelledby="metric-7-title metric-7-desc""#));
}

#[test]
fn no_inline_styles_or_scripts() {
    for (set, _) in examples() {
        let svg = zone_strip(
            "t",
            "u",
            &[StripRow {
                caption: "c",
                cuts: &set,
            }],
        );
        let lower = svg.to_lowercase();
        for banned in ["style=", "<style", "<script", "javascript:"] {
            assert!(!lower.contains(banned), "{banned} in\n{svg}");
        }
        // No event handler attributes such as onload=.
        let handler = lower.split(" on").skip(1).any(|rest| {
            let name = rest.split('=').next().unwrap_or("");
            rest.contains('=') && !name.is_empty() && name.chars().all(|c| c.is_ascii_lowercase())
        });
        assert!(!handler, "event handler in\n{svg}");
    }
}

#[test]
fn text_from_outside_is_escaped() {
    let (set, _) = &examples()[0];
    let svg = zone_strip(
        "Title \"quoted\" & <b>",
        "m's <u>",
        &[StripRow {
            caption: "Q&A <draft>",
            cuts: set,
        }],
    );
    assert!(svg.contains("Q&amp;A &lt;draft&gt;"));
    assert!(svg.contains("Title &quot;quoted&quot; &amp; &lt;b&gt;"));
    assert!(svg.contains("m&apos;s &lt;u&gt;"));
    for raw in ["Q&A", "<draft>", "<b>", "<u>", "m's"] {
        assert!(!svg.contains(raw), "{raw} unescaped");
    }
    parses_as_xml(&svg);

    // Characters XML 1.0 cannot carry even escaped are replaced, not passed through.
    let svg = zone_strip(
        "bell \u{7}",
        "",
        &[StripRow {
            caption: "nul \u{0} vt \u{b}",
            cuts: set,
        }],
    );
    assert!(!svg.contains('\u{0}') && !svg.contains('\u{7}') && !svg.contains('\u{b}'));
    parses_as_xml(&svg);
}

#[test]
fn rows_share_one_axis() {
    let in_force = cuts(Direction::HigherIsBetter, [50.0, 70.0, 80.0, 90.0]);
    let proposal = cuts(Direction::HigherIsBetter, [55.0, 70.0, 85.0, 95.0]);
    let one = zone_strip(
        "t",
        "%",
        &[StripRow {
            caption: "In force: version 3",
            cuts: &in_force,
        }],
    );
    let svg = zone_strip(
        "t",
        "%",
        &[
            StripRow {
                caption: "In force: version 3",
                cuts: &in_force,
            },
            StripRow {
                caption: "Proposal",
                cuts: &proposal,
            },
        ],
    );
    let axis = nice_axis(50.0, 95.0);
    assert!(!axis.ticks.is_empty());
    for tick in &axis.ticks {
        let label = format!(">{}</text>", format(*tick));
        assert_eq!(svg.matches(&label).count(), 1, "{label} once in\n{svg}");
    }
    assert_eq!(svg.matches(">%</text>").count(), 1, "one axis label");
    // Both rows draw intervene 70 at the same x.
    let xs: Vec<&str> = svg
        .split("<text")
        .filter(|t| t.contains(">intervene 70</text>"))
        .map(|t| attr(t, "x").unwrap())
        .collect();
    assert_eq!(xs.len(), 2);
    assert_eq!(xs[0], xs[1]);
    // The height grows with the rows.
    let height = |svg: &str| -> f64 {
        let view_box = attr(svg, "viewBox").unwrap();
        view_box.rsplit(' ').next().unwrap().parse().unwrap()
    };
    assert!(height(&svg) > height(&one));
    parses_as_xml(&svg);
}

/// Whether `step` is 1, 2 or 5 times a power of ten (up to rounding).
fn is_nice(step: f64) -> bool {
    let power = 10f64.powf(step.log10().floor());
    let m = step / power;
    [1.0, 2.0, 5.0, 10.0].iter().any(|n| (m - n).abs() < 1e-9)
}

#[test]
fn ticks_are_nice_and_four_to_eight() {
    let spans = [
        (50.0, 90.0),
        (0.0, 100.0),
        (0.1, 0.4),
        (-5.0, 5.0),
        (1000.0, 1003.0),
        (2.5, 7.5),
        (0.0, 1e9),
        (-0.002, -0.001),
        // No 1-2-5 step gives 4 to 8 ticks on the padded axis (9 at a step of 2, 3 at 5):
        // the axis is stretched to the next multiple of 5.
        (2.6, 16.8),
    ];
    for (min, max) in spans {
        let axis = nice_axis(min, max);
        let span = max - min;
        let n = axis.ticks.len();
        assert!((4..=8).contains(&n), "{n} ticks for {min}..{max}: {axis:?}");
        assert!(
            axis.low <= min - 0.14 * span && axis.high >= max + 0.14 * span,
            "{axis:?}"
        );
        assert!(
            axis.low >= min - 0.4 * span && axis.high <= max + 0.4 * span,
            "{axis:?}"
        );
        assert!(
            axis.ticks
                .iter()
                .all(|t| (axis.low..=axis.high).contains(t))
        );
        let step = axis.ticks[1] - axis.ticks[0];
        assert!(is_nice(step), "step {step} for {min}..{max}");
        for pair in axis.ticks.windows(2) {
            assert!(
                ((pair[1] - pair[0]) - step).abs() <= step * 1e-9,
                "{axis:?}"
            );
        }
    }
    // Tick values are the decimal numbers, not sums of rounded steps.
    assert_eq!(
        nice_axis(0.1, 0.4).ticks,
        [0.1, 0.15, 0.2, 0.25, 0.3, 0.35, 0.4]
    );
    assert_eq!(nice_axis(2.6, 16.8).ticks, [0.0, 5.0, 10.0, 15.0]);
    // Never zero width, even for a single value.
    let point = nice_axis(3.0, 3.0);
    assert!(point.low < 3.0 && point.high > 3.0 && point.ticks.len() >= 4);
}

proptest! {
    #[test]
    fn nice_axis_fits_any_ordinary_span(min in -1.0e6f64..1.0e6, span in 1.0e-3f64..1.0e6) {
        let max = min + span;
        let axis = nice_axis(min, max);
        let n = axis.ticks.len();
        prop_assert!((4..=8).contains(&n), "{} ticks: {:?}", n, axis);
        prop_assert!(axis.low < min && axis.high > max);
        prop_assert!(axis.low >= min - 0.4 * span && axis.high <= max + 0.4 * span);
        let step = axis.ticks[1] - axis.ticks[0];
        prop_assert!(is_nice(step), "step {} in {:?}", step, axis);
        // Within a rounding error of the ends.
        let slack = step * 1e-9;
        prop_assert!(axis.ticks.iter().all(|t| *t >= axis.low - slack && *t <= axis.high + slack));
    }
}

#[test]
fn extreme_cut_sets_still_draw_a_well_formed_picture() {
    let sets = [
        cuts(Direction::HigherIsBetter, [-8e307, -1e307, 1e307, 8e307]),
        cuts(Direction::LowerIsBetter, [1e-300, 5e-301, 2e-301, 1e-301]),
        cuts(
            Direction::TargetBand,
            [1e15, 1e15 + 2.0, 1e15 + 4.0, 1e15 + 6.0],
        ),
    ];
    for set in &sets {
        let svg = zone_strip(
            "t",
            "",
            &[StripRow {
                caption: "c",
                cuts: set,
            }],
        );
        for bad in ["NaN", "inf", "Infinity"] {
            assert!(!svg.contains(bad), "{bad} in\n{svg}");
        }
        for (name, _) in set.named() {
            assert!(svg.contains(&format!(">{name} ")), "{name}");
        }
        parses_as_xml(&svg);
    }
}

#[test]
fn the_picture_is_well_formed_xml_for_every_direction() {
    let sets = examples().map(|(set, _)| set);
    let rows: Vec<StripRow<'_>> = sets
        .iter()
        .map(|set| StripRow {
            caption: "row",
            cuts: set,
        })
        .collect();
    parses_as_xml(&zone_strip("All three", "units", &rows));
    let empty = zone_strip("empty", "", &[]);
    assert!(empty.starts_with("<svg"));
    parses_as_xml(&empty);
}
