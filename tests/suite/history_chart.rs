//! Tests of the history chart: well-formed XML according to a reference parser (Python's
//! `xml.etree.ElementTree`) for every direction and edge case, the facts of the `<desc>`, zone
//! names in text, the zone strip's palette, escaping, no inline styles or scripts, a million
//! points drawn small without losing their extremes, and the same bytes for the same input.

use cutpoints::charts::history::{Bands, HistoryChart, LimitLines, history_chart};
use cutpoints::domain::Timestamp;
use cutpoints::domain::number::format;
use cutpoints::domain::thresholds::{CutSet, Direction};

fn cuts(direction: Direction, values: [f64; 4]) -> CutSet {
    CutSet::new(direction, values).expect("valid cut set")
}

fn day(text: &str) -> Timestamp {
    Timestamp::parse(text).expect("a date")
}

/// Monthly values from 2025-01-01 on.
fn monthly(values: &[f64]) -> Vec<(Timestamp, f64)> {
    values
        .iter()
        .enumerate()
        .map(|(i, &v)| (day(&format!("{}-{:02}-01", 2025 + i / 12, i % 12 + 1)), v))
        .collect()
}

const VALUES: [f64; 12] = [
    52.0, 49.5, 41.25, 50.0, 53.0, 51.0, 59.0, 48.0, 50.5, 47.0, 51.5, 50.0,
];

const LIMITS: LimitLines = LimitLines {
    mean: 50.8125,
    lower: 45.80333,
    upper: 55.82167,
};

/// One in-force and one proposed cut set of each direction, with the zones from low to high.
fn examples() -> [(CutSet, CutSet, [&'static str; 5]); 3] {
    [
        (
            cuts(Direction::HigherIsBetter, [40.0, 45.0, 55.0, 58.0]),
            cuts(Direction::HigherIsBetter, [42.0, 46.0, 54.0, 60.0]),
            ["critical", "intervene", "steady", "outperform", "stretch"],
        ),
        (
            cuts(Direction::LowerIsBetter, [58.0, 55.0, 45.0, 40.0]),
            cuts(Direction::LowerIsBetter, [60.0, 54.0, 46.0, 42.0]),
            ["stretch", "outperform", "steady", "intervene", "critical"],
        ),
        (
            cuts(Direction::TargetBand, [40.0, 45.0, 55.0, 58.0]),
            cuts(Direction::TargetBand, [42.0, 46.0, 54.0, 60.0]),
            ["critical", "intervene", "steady", "intervene", "critical"],
        ),
    ]
}

fn chart<'a>(
    points: &'a [(Timestamp, f64)],
    in_force: Option<&'a CutSet>,
    proposal: Option<&'a CutSet>,
    limits: Option<LimitLines>,
) -> HistoryChart<'a> {
    HistoryChart {
        id_prefix: "hc-1",
        title: "Weekly active members",
        unit: "%",
        points,
        in_force: in_force.map(|cuts| Bands {
            caption: "In force: version 3",
            short: "in force",
            cuts,
        }),
        proposal: proposal.map(|cuts| Bands {
            caption: "Proposed: revision 2",
            short: "proposed",
            cuts,
        }),
        limits,
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

/// The y coordinates of the drawn line.
fn line_ys(svg: &str) -> Vec<f64> {
    let tag = &svg[svg.find("<polyline").expect("a line")..];
    attr(tag, "points")
        .unwrap()
        .split(' ')
        .map(|pair| pair.split(',').nth(1).unwrap().parse().unwrap())
        .collect()
}

/// The fill the design asks for (the ColorBrewer PuOr palette of the zone strip).
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

/// The background bands as `(fill, y)`: the rects drawn lighter with `fill-opacity`.
fn bands_of(svg: &str) -> Vec<(&str, f64)> {
    svg.split("<rect")
        .skip(1)
        .map(|tag| &tag[..tag.find("/>").unwrap()])
        .filter(|tag| tag.contains(" fill-opacity="))
        .map(|tag| {
            (
                attr(tag, "fill").unwrap(),
                attr(tag, "y").unwrap().parse().unwrap(),
            )
        })
        .collect()
}

use crate::helpers::parses_as_xml;

/// A million points a minute apart around 50, with one low of 10 and one high of 90.
fn a_million_points() -> Vec<(Timestamp, f64)> {
    let start = day("2024-01-01");
    (0..1_000_000_i64)
        .map(|i| {
            let v = match i {
                123_457 => 10.0,
                876_543 => 90.0,
                _ => 50.0 + 8.0 * ((i as f64) / 5000.0).sin() + (i % 7) as f64 * 0.25,
            };
            (start.plus_seconds(i * 60), v)
        })
        .collect()
}

#[test]
fn the_chart_is_well_formed_xml_for_every_direction_and_edge_case() {
    let points = monthly(&VALUES);
    for (in_force, proposal, _) in examples() {
        for (a, b) in [
            (Some(&in_force), Some(&proposal)),
            (Some(&in_force), None),
            (None, Some(&proposal)),
        ] {
            let svg = history_chart(&chart(&points, a, b, Some(LIMITS)));
            assert!(svg.starts_with("<svg ") && svg.ends_with("</svg>\n"));
            parses_as_xml(&svg);
        }
        let empty = history_chart(&chart(&[], Some(&in_force), Some(&proposal), None));
        parses_as_xml(&empty);
        let one = history_chart(&chart(&points[..1], Some(&in_force), None, None));
        parses_as_xml(&one);
    }
    parses_as_xml(&history_chart(&chart(&[], None, None, None)));
    let million = a_million_points();
    let (in_force, proposal, _) = &examples()[0];
    parses_as_xml(&history_chart(&chart(
        &million,
        Some(in_force),
        Some(proposal),
        Some(LIMITS),
    )));
}

#[test]
fn title_and_desc_label_the_chart() {
    let points = monthly(&VALUES);
    let (in_force, _, _) = &examples()[0];
    let svg = history_chart(&chart(&points, Some(in_force), None, None));
    assert!(svg.contains(r#"xmlns="http://www.w3.org/2000/svg""#));
    assert!(svg.contains(r#"role="img""#));
    assert!(svg.contains(r#"width="100%""#));
    assert!(svg.contains(r#"viewBox="0 0 720 "#));
    assert_eq!(
        attr(&svg, "aria-labelledby"),
        Some("hc-1-title hc-1-desc"),
        "the ids start with the prefix"
    );
    assert!(svg.contains(r#"<title id="hc-1-title">Weekly active members</title>"#));
    assert!(svg.contains(r#"<desc id="hc-1-desc">"#));
    for id in ["hc-1-title", "hc-1-desc"] {
        assert_eq!(svg.matches(&format!(r#"id="{id}""#)).count(), 1);
    }
    // Every id in the picture starts with the prefix.
    for rest in svg.split(" id=\"").skip(1) {
        assert!(rest.starts_with("hc-1-"), "{}", &rest[..20.min(rest.len())]);
    }
}

#[test]
fn the_desc_states_count_period_extremes_cut_points_and_limits() {
    let points = monthly(&VALUES);
    for (in_force, proposal, _) in examples() {
        let svg = history_chart(&chart(
            &points,
            Some(&in_force),
            Some(&proposal),
            Some(LIMITS),
        ));
        let desc = desc_of(&svg);
        for fact in [
            "12 values in %",
            "from 2025-01-01 to 2025-12-01",
            "Lowest 41.25 on 2025-03-01",
            "highest 59 on 2025-07-01",
            "latest 50 on 2025-12-01 (in force: steady; proposed: steady)",
            "In force: version 3",
            "Proposed: revision 2",
            "upper limit 55.82",
            "mean 50.81",
            "lower limit 45.8",
        ] {
            assert!(desc.contains(fact), "{fact:?} in\n{desc}");
        }
        for set in [&in_force, &proposal] {
            let named: Vec<String> = set
                .named()
                .iter()
                .map(|(name, value)| format!("{name} {}", format(*value)))
                .collect();
            let words = format!("cut points {}.", named.join(", "));
            assert!(desc.contains(&words), "{words} in\n{desc}");
            assert!(desc.contains(&format!("({})", set.direction())));
        }
    }
}

#[test]
fn cut_and_limit_lines_are_labelled_with_name_and_value() {
    let points = monthly(&VALUES);
    let (in_force, proposal, _) = &examples()[0];
    let svg = history_chart(&chart(
        &points,
        Some(in_force),
        Some(proposal),
        Some(LIMITS),
    ));
    // The proposal's lines are drawn across the plot and labelled.
    for (name, value) in proposal.named() {
        let label = format!(">{name} {}</text>", format(value));
        assert!(svg.contains(&label), "{label} in\n{svg}");
    }
    for label in [">upper limit 55.82<", ">mean 50.81<", ">lower limit 45.8<"] {
        assert!(svg.contains(label), "{label} in\n{svg}");
    }
    assert_eq!(
        svg.matches("stroke-dasharray=").count(),
        6,
        "three limit lines, each with its leader, dashed"
    );
    // Short captions on the strips; the full ones are in the desc.
    assert!(svg.contains(">in force</text>") && svg.contains(">proposed</text>"));
}

#[test]
fn every_zone_name_appears_as_text_in_every_direction() {
    let points = monthly(&VALUES);
    for (in_force, proposal, zones) in examples() {
        let svg = history_chart(&chart(&points, Some(&in_force), Some(&proposal), None));
        for zone in zones {
            assert!(svg.contains(&format!(">{zone}</text>")), "{zone} in\n{svg}");
        }
    }
    // Zones tall enough for their name are named in both strips.
    let roomy = monthly(&[10.0, 50.0, 90.0]);
    for direction in Direction::ALL {
        let (a, b) = if direction == Direction::LowerIsBetter {
            ([80.0, 60.0, 40.0, 20.0], [75.0, 60.0, 40.0, 25.0])
        } else {
            ([20.0, 40.0, 60.0, 80.0], [25.0, 40.0, 60.0, 75.0])
        };
        let (in_force, proposal) = (cuts(direction, a), cuts(direction, b));
        let svg = history_chart(&chart(&roomy, Some(&in_force), Some(&proposal), None));
        // How often each zone occurs in one strip: a band has critical and intervene twice.
        let zones: &[(&str, usize)] = match direction {
            Direction::TargetBand => &[("critical", 2), ("intervene", 2), ("steady", 1)],
            _ => &[
                ("critical", 1),
                ("intervene", 1),
                ("steady", 1),
                ("outperform", 1),
                ("stretch", 1),
            ],
        };
        for (zone, per_strip) in zones {
            assert_eq!(
                svg.matches(&format!(">{zone}</text>")).count(),
                2 * per_strip,
                "{zone} ({direction}) in\n{svg}"
            );
        }
    }
    // A zone too short for its name is left unnamed in the picture, but the desc names it.
    let tight = cuts(Direction::HigherIsBetter, [40.0, 49.9, 50.1, 60.0]);
    let svg = history_chart(&chart(&points, Some(&tight), None, None));
    assert!(!svg.contains(">steady</text>"));
    assert!(desc_of(&svg).contains("steady above 49.9 and below 50.1"));
}

#[test]
fn bands_use_the_zone_strip_palette_in_the_order_of_their_direction() {
    let points = monthly(&VALUES);
    for (in_force, proposal, zones) in examples() {
        let svg = history_chart(&chart(&points, Some(&in_force), Some(&proposal), None));
        let bands = bands_of(&svg);
        let fills: Vec<&str> = bands.iter().map(|(fill, _)| *fill).collect();
        let want: Vec<&str> = zones.iter().map(|z| fill_of(z)).collect();
        assert_eq!(fills, want, "{:?}", in_force.direction());
        // Low values at the bottom: each band from low to high sits higher up.
        assert!(bands.windows(2).all(|w| w[0].1 > w[1].1), "{bands:?}");
        // Every fill in the picture is a zone fill, the near-black ink, white or the grid.
        for tag in svg.split(" fill=\"").skip(1) {
            let fill = &tag[..tag.find('"').unwrap()];
            let allowed = ["#b35806", "#f1a340", "#f7f7f7", "#998ec3", "#542788"];
            assert!(
                allowed.contains(&fill) || ["#1a1a1a", "#ffffff", "none"].contains(&fill),
                "fill {fill}"
            );
        }
    }
    // lower_is_better turns the zones over: critical at the top, stretch at the bottom.
    let (in_force, _, _) = &examples()[1];
    let svg = history_chart(&chart(&points, Some(in_force), None, None));
    let bands = bands_of(&svg);
    assert_eq!(bands.first().unwrap().0, fill_of("stretch"));
    assert_eq!(bands.last().unwrap().0, fill_of("critical"));
    assert!(bands.last().unwrap().1 < bands.first().unwrap().1);
}

#[test]
fn without_a_proposal_the_bands_are_the_version_in_force() {
    let points = monthly(&VALUES);
    let (in_force, proposal, _) = &examples()[0];
    let alone = history_chart(&chart(&points, Some(in_force), None, None));
    for (name, value) in in_force.named() {
        assert!(alone.contains(&format!(">{name} {}</text>", format(value))));
    }
    assert!(alone.contains(">in force</text>") && !alone.contains(">proposed</text>"));
    let both = history_chart(&chart(&points, Some(in_force), Some(proposal), None));
    assert_ne!(bands_of(&alone), bands_of(&both), "the proposal's bands");
}

#[test]
fn no_inline_styles_scripts_or_event_handlers() {
    let points = monthly(&VALUES);
    let million = a_million_points();
    for (in_force, proposal, _) in examples() {
        for points in [&points[..], &[], &million[..3000]] {
            let svg = history_chart(&chart(
                points,
                Some(&in_force),
                Some(&proposal),
                Some(LIMITS),
            ));
            let lower = svg.to_lowercase();
            for banned in ["style=", "<style", "<script", "javascript:", "href="] {
                assert!(!lower.contains(banned), "{banned} in\n{svg}");
            }
            let handler = lower.split(" on").skip(1).any(|rest| {
                let name = rest.split('=').next().unwrap_or("");
                rest.contains('=')
                    && !name.is_empty()
                    && name.chars().all(|c| c.is_ascii_lowercase())
            });
            assert!(!handler, "event handler in\n{svg}");
            for bad in ["NaN", "inf"] {
                assert!(!svg.contains(bad), "{bad} in\n{svg}");
            }
        }
    }
}

#[test]
fn text_from_outside_is_escaped() {
    let points = monthly(&VALUES);
    let (in_force, proposal, _) = &examples()[0];
    let svg = history_chart(&HistoryChart {
        id_prefix: "a\"b<c>",
        title: r#"<b>&"x"</b>"#,
        unit: "m's <u>",
        points: &points,
        in_force: Some(Bands {
            caption: "Q&A <draft>",
            short: "in force",
            cuts: in_force,
        }),
        proposal: Some(Bands {
            caption: "bell \u{7}",
            short: "proposed",
            cuts: proposal,
        }),
        limits: None,
    });
    assert!(svg.contains("&lt;b&gt;&amp;&quot;x&quot;&lt;/b&gt;"));
    assert!(svg.contains("Q&amp;A &lt;draft&gt;"));
    assert!(svg.contains("m&apos;s &lt;u&gt;"));
    assert!(svg.contains(r#"id="a&quot;b&lt;c&gt;-title""#));
    for raw in ["<b>", "Q&A", "<draft>", "<u>", "m's", "\u{7}", "a\"b"] {
        assert!(!svg.contains(raw), "{raw} unescaped");
    }
    parses_as_xml(&svg);
}

#[test]
fn an_empty_history_says_so_and_still_draws_the_bands() {
    let (in_force, proposal, _) = &examples()[0];
    let svg = history_chart(&chart(&[], Some(in_force), Some(proposal), Some(LIMITS)));
    assert!(svg.contains(">No history uploaded yet</text>"));
    assert!(desc_of(&svg).starts_with("No history uploaded yet."));
    assert!(!svg.contains("<polyline") && !svg.contains("<circle"));
    assert_eq!(bands_of(&svg).len(), 5);
    for (name, value) in proposal.named() {
        assert!(svg.contains(&format!(">{name} {}</text>", format(value))));
    }
    // The value axis still covers the cut points.
    assert!(
        svg.contains(">40</text>") && svg.contains(">60</text>"),
        "{svg}"
    );

    let bare = history_chart(&chart(&[], None, None, None));
    assert!(bare.contains(">No history uploaded yet</text>"));
    assert!(desc_of(&bare).contains("No thresholds are drawn."));
}

#[test]
fn a_single_point_and_equal_values_still_draw() {
    let (in_force, _, _) = &examples()[0];
    let one = monthly(&[52.0]);
    let svg = history_chart(&chart(&one, Some(in_force), None, None));
    assert_eq!(svg.matches("<circle").count(), 1, "one marker");
    assert!(!svg.contains("<polyline"), "no line through one point");
    let desc = desc_of(&svg);
    assert!(desc.contains("1 value in %, on 2025-01-01: 52"), "{desc}");
    assert!(desc.contains("(in force: steady)"), "{desc}");
    assert!(svg.contains(">2025-01-01</text>"), "a date tick: {svg}");
    parses_as_xml(&svg);

    let flat = monthly(&[7.0; 6]);
    let svg = history_chart(&chart(&flat, None, None, None));
    assert_eq!(svg.matches("<circle").count(), 6);
    assert!(line_ys(&svg).windows(2).all(|w| w[0] == w[1]));
    assert!(desc_of(&svg).contains("Lowest 7 on 2025-01-01, highest 7 on 2025-01-01"));
    parses_as_xml(&svg);
}

#[test]
fn time_ticks_are_months_or_years_depending_on_the_span() {
    let year = monthly(&VALUES);
    let svg = history_chart(&chart(&year, None, None, None));
    assert!(svg.contains(">2025-01</text>"), "{svg}");
    assert!(!svg.contains(">2025</text>"));

    let decade: Vec<(Timestamp, f64)> = (0..15)
        .map(|i| (day(&format!("{}-06-15", 2010 + i)), 50.0 + i as f64))
        .collect();
    let svg = history_chart(&chart(&decade, None, None, None));
    let labels: Vec<&str> = svg
        .split("<text")
        .filter_map(|t| {
            let t = &t[t.find('>')? + 1..];
            Some(&t[..t.find('<')?])
        })
        .filter(|t| t.len() == 4 && t.starts_with("20"))
        .collect();
    assert!(labels.len() >= 3, "{labels:?}");
    assert!(
        labels.contains(&"2012") || labels.contains(&"2015"),
        "{labels:?}"
    );
}

#[test]
fn a_million_points_are_drawn_small_and_keep_their_extremes() {
    let million = a_million_points();
    let (in_force, proposal, _) = &examples()[0];
    let big = history_chart(&chart(
        &million,
        Some(in_force),
        Some(proposal),
        Some(LIMITS),
    ));
    assert!(big.len() < 200_000, "{} bytes", big.len());
    let ys = line_ys(&big);
    assert!(ys.len() <= 1500, "{} points drawn", ys.len());
    let desc = desc_of(&big);
    for fact in [
        "1000000 values",
        "from 2024-01-01 to 2025-11-25",
        "Lowest 10 on 2024-03-26",
        "highest 90 on 2025-08-31",
    ] {
        assert!(desc.contains(fact), "{fact:?} in {desc}");
    }
    // The same extremes over the same time span, drawn as three points on the same axes, sit
    // at the same heights as the extremes of the thinned line.
    let few = [
        million[0],
        million[123_457],
        million[876_543],
        million[999_999],
    ];
    let small = history_chart(&chart(&few, Some(in_force), Some(proposal), Some(LIMITS)));
    let top = |ys: &[f64]| ys.iter().copied().fold(f64::INFINITY, f64::min);
    let bottom = |ys: &[f64]| ys.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let small_ys = line_ys(&small);
    assert_eq!(top(&ys), top(&small_ys), "the highest value is drawn");
    assert_eq!(bottom(&ys), bottom(&small_ys), "the lowest value is drawn");
}

#[test]
fn the_same_input_draws_the_same_bytes() {
    let points = monthly(&VALUES);
    let million = a_million_points();
    for (in_force, proposal, _) in examples() {
        for points in [&points[..], &million[..]] {
            let draw = || {
                history_chart(&chart(
                    points,
                    Some(&in_force),
                    Some(&proposal),
                    Some(LIMITS),
                ))
            };
            assert_eq!(draw(), draw());
        }
    }
}

#[test]
fn extreme_values_still_draw_a_well_formed_chart() {
    let set = cuts(Direction::HigherIsBetter, [-8e307, -1e307, 1e307, 8e307]);
    let points = vec![
        (day("2025-01-01"), -1.7e308),
        (day("2025-01-01"), 1.7e308),
        (day("2025-01-02"), 5e-324),
        (day("2025-01-03"), f64::NAN),
    ];
    let limits = LimitLines {
        mean: 0.0,
        lower: -1e308,
        upper: 1e308,
    };
    let svg = history_chart(&chart(&points, Some(&set), None, Some(limits)));
    for bad in ["NaN", "inf", "Infinity"] {
        assert!(!svg.contains(bad), "{bad} in\n{svg}");
    }
    assert!(
        desc_of(&svg).contains("History of 3 values"),
        "a NaN is left out"
    );
    for (name, _) in set.named() {
        assert!(svg.contains(&format!(">{name} ")), "{name}");
    }
    parses_as_xml(&svg);
}
