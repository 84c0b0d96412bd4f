//! Properties the engine must have for any valid cut set (proptest).

use cutpoints::domain::thresholds::{CutSet, Direction, Shades};
use cutpoints::engine::{Zone, classify, classify_all};
use proptest::prelude::*;

/// Four strictly increasing finite numbers.
fn ascending_cuts() -> impl Strategy<Value = [f64; 4]> {
    proptest::array::uniform4(-1.0e6f64..1.0e6)
        .prop_map(|mut c| {
            c.sort_by(f64::total_cmp);
            c
        })
        .prop_filter("strictly increasing", |c| {
            c[0] < c[1] && c[1] < c[2] && c[2] < c[3]
        })
}

fn shades() -> impl Strategy<Value = Shades> {
    (2i64..=5).prop_map(|s| Shades::new(s).unwrap())
}

fn value() -> impl Strategy<Value = f64> {
    prop_oneof![
        -2.0e6f64..2.0e6,
        // Values exactly on a line matter most; they are drawn from the cuts in the tests.
        Just(0.0),
    ]
}

fn signal(set: &CutSet, s: Shades, v: f64) -> i8 {
    classify(set, s, Some(v)).signal.unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(2000))]

    /// Moving a value toward the bad side never raises its signal (higher_is_better: down).
    #[test]
    fn higher_is_better_signal_never_rises_toward_the_bad_side(
        c in ascending_cuts(), s in shades(), a in value(), b in value(), pick in 0usize..4,
    ) {
        let set = CutSet::new(Direction::HigherIsBetter, c).unwrap();
        // Sometimes put one value exactly on a line.
        let a = if pick == 0 { c[(a.abs() as usize) % 4] } else { a };
        let (worse, better) = if a <= b { (a, b) } else { (b, a) };
        prop_assert!(signal(&set, s, worse) <= signal(&set, s, better));
    }

    /// lower_is_better: the bad side is up.
    #[test]
    fn lower_is_better_signal_never_rises_toward_the_bad_side(
        c in ascending_cuts(), s in shades(), a in value(), b in value(),
    ) {
        let desc = [c[3], c[2], c[1], c[0]];
        let set = CutSet::new(Direction::LowerIsBetter, desc).unwrap();
        let (better, worse) = if a <= b { (a, b) } else { (b, a) };
        prop_assert!(signal(&set, s, worse) <= signal(&set, s, better));
    }

    /// target_band: both ways out of the band are bad.
    #[test]
    fn target_band_signal_never_rises_moving_out_of_the_band(
        c in ascending_cuts(), s in shades(), a in value(), b in value(),
    ) {
        let set = CutSet::new(Direction::TargetBand, c).unwrap();
        let (lo, hi) = if a <= b { (a, b) } else { (b, a) };
        // Below the upper action line, moving down is moving out.
        if hi < c[2] {
            prop_assert!(signal(&set, s, lo) <= signal(&set, s, hi));
        }
        // Above the lower action line, moving up is moving out.
        if lo > c[1] {
            prop_assert!(signal(&set, s, hi) <= signal(&set, s, lo));
        }
    }

    /// lower_is_better on negated cuts and values gives the same answer as higher_is_better.
    #[test]
    fn lower_is_better_mirrors_higher_is_better(
        c in ascending_cuts(), s in shades(), v in value(), on_line in 0usize..8,
    ) {
        let v = if on_line < 4 { c[on_line] } else { v };
        let hib = CutSet::new(Direction::HigherIsBetter, c).unwrap();
        let lib = CutSet::new(Direction::LowerIsBetter, [-c[0], -c[1], -c[2], -c[3]]).unwrap();
        let a = classify(&hib, s, Some(v));
        let b = classify(&lib, s, Some(-v));
        prop_assert_eq!(a.zone, b.zone);
        prop_assert_eq!(a.severity, b.severity);
        prop_assert_eq!(a.shade, b.shade);
        prop_assert_eq!(a.signal, b.signal);
    }

    /// Each answer depends only on its own value, never on the order values are given.
    #[test]
    fn results_do_not_depend_on_the_order_of_values(
        c in ascending_cuts(),
        s in shades(),
        values in proptest::collection::vec(proptest::option::weighted(0.9, value()), 0..40),
        seed in any::<u64>(),
    ) {
        for direction in Direction::ALL {
            let set = match direction {
                Direction::LowerIsBetter => CutSet::new(direction, [c[3], c[2], c[1], c[0]]),
                _ => CutSet::new(direction, c),
            }.unwrap();
            let forward = classify_all(&set, s, &values);
            // A deterministic shuffle: sort the indices by a keyed hash.
            let mut order: Vec<usize> = (0..values.len()).collect();
            order.sort_by_key(|i| (*i as u64 ^ seed).wrapping_mul(0x9E37_79B9_7F4A_7C15));
            let shuffled: Vec<Option<f64>> = order.iter().map(|&i| values[i]).collect();
            let answers = classify_all(&set, s, &shuffled);
            for (k, &i) in order.iter().enumerate() {
                prop_assert_eq!(answers[k], forward[i]);
            }
        }
    }

    /// Grades always stay in range and agree with the zone.
    #[test]
    fn grades_stay_in_range(c in ascending_cuts(), s in shades(), v in value()) {
        for direction in Direction::ALL {
            let set = match direction {
                Direction::LowerIsBetter => CutSet::new(direction, [c[3], c[2], c[1], c[0]]),
                _ => CutSet::new(direction, c),
            }.unwrap();
            let r = classify(&set, s, Some(v));
            let sev = r.severity.unwrap();
            let shade = r.shade.unwrap();
            prop_assert!((0.0..=1.0).contains(&sev));
            match r.zone {
                Zone::Steady => prop_assert_eq!((shade, r.signal.unwrap()), (0, 0)),
                Zone::Critical | Zone::Stretch => prop_assert_eq!(shade, s.get() + 1),
                Zone::Intervene | Zone::Outperform => prop_assert!((1..=s.get()).contains(&shade)),
                Zone::NoData => prop_assert!(false, "a value is never no_data"),
            }
            prop_assert_eq!(r.signal.unwrap().unsigned_abs(), shade);
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(1000))]

    /// The batch grader gives exactly the answers of `classify`, value by value, lines included.
    #[test]
    fn the_batch_grader_agrees_with_classify(
        c in ascending_cuts(),
        s in shades(),
        values in proptest::collection::vec(value(), 0..1100),
        on_lines in proptest::collection::vec(0usize..4, 0..8),
    ) {
        let mut all = values.clone();
        all.extend(on_lines.iter().map(|&i| c[i]));
        all.extend([-1e300, 1e300]);
        for direction in Direction::ALL {
            let set = match direction {
                Direction::LowerIsBetter => CutSet::new(direction, [c[3], c[2], c[1], c[0]]),
                _ => CutSet::new(direction, c),
            }.unwrap();
            // Every instruction set this processor has, so that none goes untested.
            for instructions in cutpoints::engine::Instructions::available() {
                let mut graded = cutpoints::engine::Grades::default();
                cutpoints::engine::grade_all_with(instructions, &set, s, &all, &mut graded);
                prop_assert_eq!(graded.len(), all.len());
                for (i, v) in all.iter().enumerate() {
                    prop_assert_eq!(
                        graded.classification(i, *v),
                        classify(&set, s, Some(*v)),
                        "{:?} at {} with {:?}", direction, v, instructions
                    );
                }
            }
        }
    }
}
