//! The engine's rules from docs/design.md, case by case: a value exactly on every line and between
//! lines, for every direction. Cut points and values are exact in binary, so each expected
//! severity is exact too.

use cutpoints::domain::thresholds::{CutSet, Direction, Shades, ThresholdError, parse_cut_list};
use cutpoints::engine::{Classification, Side, Zone, classify};

fn cuts(direction: Direction, c: [f64; 4]) -> CutSet {
    CutSet::new(direction, c).expect("valid cut set")
}

/// (value, zone, severity, shade, signal, side) with the default 3 shades.
type Row = (f64, Zone, f64, u8, i8, Option<Side>);

fn check(set: &CutSet, rows: &[Row]) {
    for &(value, zone, severity, shade, signal, side) in rows {
        let got = classify(set, Shades::default(), Some(value));
        let want = Classification {
            value: Some(value),
            zone,
            severity: Some(severity),
            shade: Some(shade),
            signal: Some(signal),
            side,
        };
        assert_eq!(got, want, "{:?} at {value}", set.direction());
    }
}

#[test]
fn higher_is_better_every_line_and_between() {
    use Zone::*;
    // critical 10 < intervene 20 < outperform 30 < stretch 40
    let set = cuts(Direction::HigherIsBetter, [10.0, 20.0, 30.0, 40.0]);
    check(
        &set,
        &[
            (-1e9, Critical, 1.0, 4, -4, None),
            (5.0, Critical, 1.0, 4, -4, None),
            // On the critical line: reaching a line counts as crossing it.
            (10.0, Critical, 1.0, 4, -4, None),
            (12.5, Intervene, 0.75, 3, -3, None),
            (15.0, Intervene, 0.5, 2, -2, None),
            (17.5, Intervene, 0.25, 1, -1, None),
            // On the intervene line: intervene with severity 0, the lightest shade.
            (20.0, Intervene, 0.0, 1, -1, None),
            // Between the two action lines: no action needed (common practice).
            (20.5, Steady, 0.0, 0, 0, None),
            (25.0, Steady, 0.0, 0, 0, None),
            (29.75, Steady, 0.0, 0, 0, None),
            (30.0, Outperform, 0.0, 1, 1, None),
            (35.0, Outperform, 0.5, 2, 2, None),
            (37.5, Outperform, 0.75, 3, 3, None),
            (40.0, Stretch, 1.0, 4, 4, None),
            (1e9, Stretch, 1.0, 4, 4, None),
        ],
    );
}

#[test]
fn lower_is_better_every_line_and_between() {
    use Zone::*;
    // critical 40 > intervene 30 > outperform 20 > stretch 10
    let set = cuts(Direction::LowerIsBetter, [40.0, 30.0, 20.0, 10.0]);
    check(
        &set,
        &[
            (1e9, Critical, 1.0, 4, -4, None),
            (40.0, Critical, 1.0, 4, -4, None),
            (37.5, Intervene, 0.75, 3, -3, None),
            (35.0, Intervene, 0.5, 2, -2, None),
            (30.0, Intervene, 0.0, 1, -1, None),
            (29.5, Steady, 0.0, 0, 0, None),
            (25.0, Steady, 0.0, 0, 0, None),
            (20.0, Outperform, 0.0, 1, 1, None),
            (15.0, Outperform, 0.5, 2, 2, None),
            (12.5, Outperform, 0.75, 3, 3, None),
            (10.0, Stretch, 1.0, 4, 4, None),
            (-1e9, Stretch, 1.0, 4, 4, None),
        ],
    );
}

#[test]
fn target_band_every_line_and_between() {
    use Side::*;
    use Zone::*;
    // critical_low 10 < intervene_low 20 < intervene_high 30 < critical_high 40
    let set = cuts(Direction::TargetBand, [10.0, 20.0, 30.0, 40.0]);
    check(
        &set,
        &[
            (0.0, Critical, 1.0, 4, -4, Some(Low)),
            (10.0, Critical, 1.0, 4, -4, Some(Low)),
            (12.5, Intervene, 0.75, 3, -3, Some(Low)),
            (15.0, Intervene, 0.5, 2, -2, Some(Low)),
            (20.0, Intervene, 0.0, 1, -1, Some(Low)),
            (25.0, Steady, 0.0, 0, 0, None),
            (30.0, Intervene, 0.0, 1, -1, Some(High)),
            (35.0, Intervene, 0.5, 2, -2, Some(High)),
            (37.5, Intervene, 0.75, 3, -3, Some(High)),
            (40.0, Critical, 1.0, 4, -4, Some(High)),
            (50.0, Critical, 1.0, 4, -4, Some(High)),
        ],
    );
}

#[test]
fn a_band_has_no_good_side_zones() {
    let set = cuts(Direction::TargetBand, [10.0, 20.0, 30.0, 40.0]);
    for v in [-100.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 40.0, 100.0] {
        let c = classify(&set, Shades::default(), Some(v));
        assert!(!matches!(c.zone, Zone::Outperform | Zone::Stretch), "{v}");
        assert!(c.signal.unwrap() <= 0, "{v}");
        assert_eq!(c.side.is_some(), c.zone != Zone::Steady, "{v}");
    }
}

#[test]
fn missing_value_is_no_data_with_null_grades() {
    for d in Direction::ALL {
        let set = match d {
            Direction::LowerIsBetter => cuts(d, [4.0, 3.0, 2.0, 1.0]),
            _ => cuts(d, [1.0, 2.0, 3.0, 4.0]),
        };
        let c = classify(&set, Shades::default(), None);
        assert_eq!(c.zone, Zone::NoData);
        assert_eq!(
            (c.value, c.severity, c.shade, c.signal, c.side),
            (None, None, None, None, None)
        );
        assert_eq!(
            serde_json::to_string(&c).unwrap(),
            r#"{"value":null,"zone":"no_data","severity":null,"shade":null,"signal":null}"#
        );
    }
}

#[test]
fn shade_is_min_of_s_and_floor_of_severity_times_s_plus_one() {
    // critical 0 < intervene 1: a value v has severity exactly 1 - v for v in (0, 1].
    let set = cuts(Direction::HigherIsBetter, [0.0, 1.0, 2.0, 3.0]);
    // (severity, expected shade for S = 2, 3, 4, 5)
    let table: &[(f64, [u8; 4])] = &[
        (0.0, [1, 1, 1, 1]),
        (0.125, [1, 1, 1, 1]),
        (0.25, [1, 1, 2, 2]),
        (0.375, [1, 2, 2, 2]),
        // severity * S lands exactly on a whole number: the next shade starts there.
        (0.5, [2, 2, 3, 3]),
        (0.625, [2, 2, 3, 4]),
        (0.75, [2, 3, 4, 4]),
        (0.875, [2, 3, 4, 5]),
        (0.9921875, [2, 3, 4, 5]),
    ];
    for &(severity, shades) in table {
        for (i, s) in (2..=5).enumerate() {
            let c = classify(&set, Shades::new(s).unwrap(), Some(1.0 - severity));
            assert_eq!(c.severity, Some(severity));
            assert_eq!(c.shade, Some(shades[i]), "severity {severity}, S = {s}");
            assert_eq!(c.signal, Some(-(shades[i] as i8)));
        }
    }
}

#[test]
fn critical_and_stretch_take_shade_s_plus_one_for_every_s() {
    let set = cuts(Direction::HigherIsBetter, [0.0, 1.0, 2.0, 3.0]);
    for s in 2..=5 {
        let shades = Shades::new(s).unwrap();
        assert_eq!(classify(&set, shades, Some(0.0)).shade, Some(s as u8 + 1));
        assert_eq!(classify(&set, shades, Some(3.0)).shade, Some(s as u8 + 1));
        assert_eq!(classify(&set, shades, Some(1.5)).shade, Some(0));
    }
}

#[test]
fn shades_default_to_three_and_allow_two_to_five() {
    // Three or four shades a side are enough for people to tell apart (common practice).
    assert_eq!(Shades::default().get(), 3);
    for ok in 2..=5 {
        assert!(Shades::new(ok).is_ok());
    }
    for bad in [-1, 0, 1, 6, 100] {
        assert_eq!(Shades::new(bad), Err(ThresholdError::ShadesOutOfRange(bad)));
    }
}

#[test]
fn order_errors_name_the_pair_both_values_and_the_direction() {
    let e = CutSet::new(Direction::HigherIsBetter, [50.0, 40.0, 80.0, 90.0]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "for higher_is_better, intervene (40) must be greater than critical (50)"
    );
    let e = CutSet::new(Direction::HigherIsBetter, [10.0, 20.0, 30.0, 30.0]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "for higher_is_better, stretch (30) must be greater than outperform (30)"
    );
    let e = CutSet::new(Direction::LowerIsBetter, [10.0, 20.0, 5.0, 1.0]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "for lower_is_better, intervene (20) must be less than critical (10)"
    );
    let e = CutSet::new(Direction::TargetBand, [1.0, 2.0, 4.0, 3.0]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "for target_band, critical_high (3) must be greater than intervene_high (4)"
    );
    let e = CutSet::new(Direction::TargetBand, [1.0, 2.5, 2.5, 3.0]).unwrap_err();
    assert!(e.to_string().contains("intervene_high (2.5)"), "{e}");
}

#[test]
fn non_finite_cuts_and_overflowing_spans_are_refused() {
    for bad in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
        let e = CutSet::new(Direction::HigherIsBetter, [bad, 1.0, 2.0, 3.0]).unwrap_err();
        assert!(
            matches!(
                e,
                ThresholdError::NonFiniteCut {
                    name: "critical",
                    ..
                }
            ),
            "{e}"
        );
    }
    let e = CutSet::new(Direction::HigherIsBetter, [-1e308, 0.0, 1.0, 1e308]).unwrap_err();
    assert!(matches!(e, ThresholdError::SpanOverflow { .. }), "{e}");
    assert!(e.to_string().contains("-1e+308"), "{e}");
    let e = CutSet::new(Direction::LowerIsBetter, [1e308, 0.0, -1.0, -1e308]).unwrap_err();
    assert!(matches!(e, ThresholdError::SpanOverflow { .. }), "{e}");
    // Wide but computable spans are fine.
    assert!(CutSet::new(Direction::HigherIsBetter, [-1e307, 0.0, 1.0, 1e307]).is_ok());
}

#[test]
fn negative_cuts_work() {
    let set = parse_cut_list(Direction::HigherIsBetter, "-20,-10,0,5").unwrap();
    let c = classify(&set, Shades::default(), Some(-15.0));
    assert_eq!((c.zone, c.severity), (Zone::Intervene, Some(0.5)));
}

#[test]
fn cut_lists_need_exactly_four_numbers() {
    let e = parse_cut_list(Direction::HigherIsBetter, "1,2,3").unwrap_err();
    assert_eq!(
        e.to_string(),
        "expected exactly 4 cut points (critical, intervene, outperform, stretch), got 3"
    );
    let e = parse_cut_list(Direction::HigherIsBetter, "1,2,x,4").unwrap_err();
    assert_eq!(
        e.to_string(),
        "outperform must be a finite number, got \"x\""
    );
    let e = parse_cut_list(Direction::HigherIsBetter, "1,2,inf,4").unwrap_err();
    assert!(
        e.to_string()
            .starts_with("outperform must be a finite number")
    );
}

#[test]
fn named_cuts_must_match_the_direction() {
    let ok = CutSet::from_named(
        Direction::TargetBand,
        [
            ("critical_high", 4.0),
            ("intervene_low", 2.0),
            ("critical_low", 1.0),
            ("intervene_high", 3.0),
        ],
    )
    .unwrap();
    assert_eq!(ok.values(), [1.0, 2.0, 3.0, 4.0]);
    let e = CutSet::from_named(Direction::TargetBand, [("critical", 1.0)]).unwrap_err();
    assert!(
        e.to_string()
            .starts_with("unknown cut point \"critical\" for target_band"),
        "{e}"
    );
    let e = CutSet::from_named(Direction::HigherIsBetter, [("critical", 1.0)]).unwrap_err();
    assert_eq!(
        e.to_string(),
        "missing cut point intervene for higher_is_better"
    );
}

#[test]
fn directions_parse_only_by_their_names() {
    for d in Direction::ALL {
        assert_eq!(d.as_str().parse::<Direction>().unwrap(), d);
    }
    let e = "higher".parse::<Direction>().unwrap_err();
    assert_eq!(
        e.to_string(),
        "unknown direction \"higher\": expected higher_is_better, lower_is_better or target_band"
    );
}
