//! Evidence: statistics checked against the NIST/SEMATECH e-Handbook's worked example and
//! numpy's documented and computed percentiles; backtests and warnings; history uploads
//! (RFC 4180 CSV and JSON) that change nothing when any line is bad; the API and the command
//! line.

use std::io::Write;
use std::process::{Command, Stdio};

use cutpoints::domain::access::Scope;
use cutpoints::domain::observations::{from_csv, from_json};
use cutpoints::domain::thresholds::{CutSet, Direction, Shades};
use cutpoints::engine::backtest::{backtest, differences, grades};
use cutpoints::engine::stats::{process_limits, quantile_type7, summary};
use cutpoints::engine::warnings::warnings;
use cutpoints::engine::{Zone, classify};
use proptest::prelude::*;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};

use crate::helpers::{missing_prerequisite, python_json};
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

/// NIST/SEMATECH e-Handbook of Statistical Methods §6.3.2.2, individuals control chart
/// example: ten batches of flow rate.
const NIST_FLOW: [f64; 10] = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1];

fn close(a: f64, b: f64, tolerance: f64) -> bool {
    (a - b).abs() <= tolerance
}

#[test]
fn process_limits_match_the_nist_individuals_chart_example() {
    let l = process_limits(&NIST_FLOW).unwrap();
    // The handbook's figures, to the digits it prints.
    assert!(close(l.mean, 50.81, 1e-9), "{l:?}");
    assert!(close(l.average_moving_range, 1.8778, 5e-5), "{l:?}");
    assert!(close(l.upper, 55.8041, 5e-5), "{l:?}");
    assert!(close(l.lower, 45.8159, 5e-5), "{l:?}");
    // D4 x MR-bar for subgroups of two, D4 = 3.267 (the handbook's table).
    assert!(
        close(l.moving_range_upper, 3.267 * 1.877_777_8, 1e-6),
        "{l:?}"
    );
    assert_eq!(l.baseline_count, 10);
    assert!(
        process_limits(&[1.0]).is_none(),
        "no moving range from one value"
    );
}

#[test]
fn percentiles_match_numpys_documented_examples() {
    // numpy.percentile documentation: a = [[10, 7, 4], [3, 2, 1]].
    let mut all = vec![10.0, 7.0, 4.0, 3.0, 2.0, 1.0];
    all.sort_by(f64::total_cmp);
    assert_eq!(quantile_type7(&all, 0.5), 3.5, "np.percentile(a, 50)");
    // axis=0: the columns (10, 3), (7, 2), (4, 1) -> 6.5, 4.5, 2.5.
    for (column, expected) in [([3.0, 10.0], 6.5), ([2.0, 7.0], 4.5), ([1.0, 4.0], 2.5)] {
        assert_eq!(quantile_type7(&column, 0.5), expected);
    }
    // axis=1: the rows -> 7 and 2.
    assert_eq!(quantile_type7(&[4.0, 7.0, 10.0], 0.5), 7.0);
    assert_eq!(quantile_type7(&[1.0, 2.0, 3.0], 0.5), 2.0);
    // Hyndman & Fan (1996) type 7 by its definition: h = (n - 1)p on 1..10, p = 0.1 -> 1.9.
    let ten: Vec<f64> = (1..=10).map(f64::from).collect();
    assert!(close(quantile_type7(&ten, 0.1), 1.9, 1e-12));
    assert_eq!(quantile_type7(&ten, 0.0), 1.0);
    assert_eq!(quantile_type7(&ten, 1.0), 10.0);
    assert_eq!(quantile_type7(&[5.0], 0.9), 5.0);
}

#[test]
fn the_summary_of_the_nist_batches() {
    let s = summary(&NIST_FLOW).unwrap();
    assert_eq!(s.count, 10);
    assert!(close(s.mean, 50.81, 1e-9));
    assert_eq!((s.min, s.max), (47.6, 53.6));
    // Sample standard deviation (n - 1) of the ten values, worked by hand from the data:
    // the squared deviations sum to 40.009, and sqrt(40.009 / 9) = 2.108...
    // Python's statistics.stdev (the reference, standard library) of the same ten values.
    match python_stdev(&NIST_FLOW) {
        Some(reference) => assert!(
            close(s.sd.unwrap(), reference, 1e-12),
            "{s:?} vs {reference}"
        ),
        None => missing_prerequisite("python3 (reference standard deviation)"),
    }
    assert!(summary(&[]).is_none());
    assert_eq!(
        summary(&[3.0]).unwrap().sd,
        None,
        "no spread from one value"
    );
}

fn python_stdev(values: &[f64]) -> Option<f64> {
    let list = serde_json::to_string(values).unwrap();
    let out = Command::new("python3")
        .args([
            "-c",
            &format!("import statistics; print(repr(statistics.stdev({list})))"),
        ])
        .output()
        .ok()?;
    String::from_utf8_lossy(&out.stdout).trim().parse().ok()
}

/// Deterministic, spread-out values (a linear congruential generator), some repeated.
fn pseudo_random(n: usize, seed: u64) -> Vec<f64> {
    let mut x = seed;
    (0..n)
        .map(|i| {
            x = x
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            let u = (x >> 11) as f64 / (1u64 << 53) as f64;
            if i % 17 == 0 {
                42.0
            } else {
                (u - 0.3) * 1000.0
            }
        })
        .collect()
}

/// Asks numpy (the reference) for percentiles, mean and sample sd, or `None` (reported as a
/// skip, a failure under CI) when python3 with numpy is missing.
fn numpy_stats(values: &[f64]) -> Option<Vec<f64>> {
    let script = "import json, sys\ntry:\n    import numpy as np\nexcept ImportError:\n    print('null')\n    sys.exit()\nv = np.array(json.load(sys.stdin), dtype=float)\nout = [float(np.percentile(v, p)) for p in (10, 25, 50, 75, 90)]\nout += [float(v.mean()), float(v.std(ddof=1)), float(v.min()), float(v.max())]\nprint(json.dumps(out))\n";
    let what = "numpy (reference percentiles)";
    match python_json(script, &json!(values), what)? {
        Value::Null => {
            missing_prerequisite(&format!("python3 with {what}"));
            None
        }
        out => Some(serde_json::from_value(out).unwrap()),
    }
}

#[test]
fn percentiles_mean_and_sd_agree_with_numpy_on_random_data() {
    for (n, seed) in [(2usize, 2u64), (7, 3), (100, 4), (1001, 5), (20_000, 6)] {
        let values = pseudo_random(n, seed);
        let Some(reference) = numpy_stats(&values) else {
            return;
        };
        let s = summary(&values).unwrap();
        let p = s.percentiles;
        let ours = [p.p10, p.p25, p.p50, p.p75, p.p90, s.mean];
        for (i, (a, b)) in ours.iter().zip(&reference).enumerate() {
            assert!(
                close(*a, *b, 1e-9 * b.abs().max(1.0)),
                "n={n} field {i}: ours {a}, numpy {b}"
            );
        }
        let sd = s.sd.unwrap();
        assert!(close(sd, reference[6], 1e-9 * reference[6].max(1.0)));
        assert_eq!((s.min, s.max), (reference[7], reference[8]));
    }
}

fn hib_cuts(a: f64, b: f64, c: f64, d: f64) -> CutSet {
    CutSet::new(Direction::HigherIsBetter, [a, b, c, d]).unwrap()
}

#[test]
fn a_backtest_counts_zones_shades_and_status_changes() {
    let cuts = hib_cuts(50.0, 70.0, 80.0, 90.0);
    let shades = Shades::new(3).unwrap();
    // Lines belong to the zone beyond them (docs/design.md): 50 is critical, 70 intervene, 80
    // outperform, 90 stretch.
    let values = [45.0, 50.0, 60.0, 70.0, 75.0, 80.0, 85.0, 90.0, 95.0, 65.0];
    let bt = backtest(&cuts, shades, &values);
    assert_eq!(bt.periods, 10);
    assert_eq!(
        json!(bt.zones),
        json!({"critical": 2, "intervene": 3, "steady": 1, "outperform": 2, "stretch": 2})
    );
    assert_eq!(bt.changes, 5);
    assert_eq!(bt.zone_shares["critical"], 0.2);
    // Signals run from -(S + 1) to S + 1, each listed.
    assert_eq!(bt.shades.len(), 9);
    assert_eq!(
        bt.shades["-4"], 2,
        "critical is shade S + 1 on the bad side"
    );
    assert_eq!(bt.shades["4"], 2);
    assert_eq!(bt.shades["0"], 1);
    assert_eq!(bt.shades.values().sum::<usize>(), 10);
    assert!(bt.sides.is_none());
}

#[test]
fn a_band_backtest_counts_sides_and_a_swing_across_as_a_change() {
    let cuts = CutSet::new(Direction::TargetBand, [2.0, 4.0, 6.0, 8.0]).unwrap();
    let shades = Shades::new(3).unwrap();
    let values = [3.0, 7.0, 5.0, 9.0, 1.0];
    let bt = backtest(&cuts, shades, &values);
    assert_eq!(
        json!(bt.zones),
        json!({"critical": 2, "intervene": 2, "steady": 1})
    );
    assert_eq!(json!(bt.sides), json!({"low": 2, "high": 2}));
    // intervene low -> intervene high is a change of status, though the zone name is the same.
    assert_eq!(bt.changes, 4);
    // A band has no good side: signals from -(S + 1) to 0 only.
    let signals: Vec<i32> = bt.shades.keys().map(|k| k.parse().unwrap()).collect();
    assert_eq!(signals.len(), 5);
    assert!(signals.iter().all(|s| (-4..=0).contains(s)), "{signals:?}");
}

#[test]
fn differences_list_the_periods_whose_zone_moves() {
    let shades = Shades::new(3).unwrap();
    let old = hib_cuts(50.0, 70.0, 80.0, 90.0);
    let new = hib_cuts(40.0, 75.0, 80.0, 90.0);
    let values = [45.0, 72.0, 85.0, 60.0];
    let d = differences(
        &grades(&old, shades, &values),
        &grades(&new, shades, &values),
    );
    let moved: Vec<(usize, Zone, Zone)> =
        d.iter().map(|x| (x.index, x.first.0, x.second.0)).collect();
    // 45: critical under the old lines, intervene under the new; 72: steady, then intervene.
    assert_eq!(
        moved,
        [
            (0, Zone::Critical, Zone::Intervene),
            (1, Zone::Steady, Zone::Intervene)
        ]
    );
}

proptest! {
    #[test]
    fn backtest_counts_agree_with_classify(
        values in proptest::collection::vec(-100.0f64..200.0, 0..300),
        shades in 2i64..=5,
    ) {
        let cuts = hib_cuts(10.0, 40.0, 60.0, 90.0);
        let shades = Shades::new(shades).unwrap();
        let bt = backtest(&cuts, shades, &values);
        let zones: Vec<Zone> = values.iter().map(|v| classify(&cuts, shades, Some(*v)).zone).collect();
        for zone in [Zone::Critical, Zone::Intervene, Zone::Steady, Zone::Outperform, Zone::Stretch] {
            prop_assert_eq!(bt.zones[zone.as_str()], zones.iter().filter(|z| **z == zone).count());
        }
        let changes = zones.windows(2).filter(|w| w[0] != w[1]).count();
        prop_assert_eq!(bt.changes, changes);
        for v in &values {
            let signal = classify(&cuts, shades, Some(*v)).signal.unwrap();
            prop_assert!(bt.shades[&signal.to_string()] > 0);
        }
    }
}

fn codes(w: &[cutpoints::engine::warnings::Warning]) -> Vec<&str> {
    w.iter().map(|w| w.code).collect()
}

#[test]
fn warnings_say_why_in_plain_words() {
    let shades = Shades::new(3).unwrap();
    let limits = process_limits(&NIST_FLOW).unwrap();
    // An intervene line of 48 sits inside the limits 45.8 to 55.8: 47.6 and 47.8 reach it.
    let cuts = hib_cuts(40.0, 48.0, 60.0, 70.0);
    let bt = backtest(&cuts, shades, &NIST_FLOW);
    let w = warnings(&cuts, &bt, Some(&limits), 0.1);
    assert_eq!(
        codes(&w),
        [
            "too_little_history",
            "intervene_within_routine_variation",
            "never_reached",
            "never_reached"
        ]
    );
    assert!(
        w[0].message.contains("Only 10 periods") && w[0].message.contains("at least 20"),
        "{}",
        w[0].message
    );
    assert!(w[0].message.contains("common practice"));
    assert_eq!(w[1].share, Some(0.2));
    assert!(
        w[1].message
            .contains("would fire on routine variation about 20 % of periods"),
        "{}",
        w[1].message
    );
    assert!(w[1].message.contains("45.82 to 55.8"), "{}", w[1].message);
    assert_eq!((w[2].cut, w[3].cut), (Some("outperform"), Some("stretch")));
    assert!(w[2].message.contains("never reached"));

    // Critical at 50 is reached by four of ten periods: more than the chosen 10 %.
    let cuts = hib_cuts(50.0, 51.0, 52.0, 53.0);
    let bt = backtest(&cuts, shades, &NIST_FLOW);
    let w = warnings(&cuts, &bt, Some(&limits), 0.1);
    let critical = w.iter().find(|w| w.code == "critical_often").unwrap();
    assert_eq!(critical.share, Some(0.4));
    assert!(
        critical
            .message
            .contains("40 % of periods, more than the chosen 10 %"),
        "{}",
        critical.message
    );
    assert!(
        !codes(&w).contains(&"never_reached"),
        "53.6 reaches stretch"
    );
    let w = warnings(&cuts, &bt, Some(&limits), 0.5);
    assert!(
        !codes(&w).contains(&"critical_often"),
        "a higher chosen share"
    );

    // Lines outside the limits, enough history: nothing to say.
    let long: Vec<f64> = NIST_FLOW.iter().cycle().take(40).copied().collect();
    let limits = process_limits(&long).unwrap();
    let cuts = hib_cuts(30.0, 40.0, 52.0, 53.0);
    let bt = backtest(&cuts, shades, &long);
    assert!(warnings(&cuts, &bt, Some(&limits), 0.1).is_empty());

    // A band's two intervene lines are each checked against their own limit.
    let band = CutSet::new(Direction::TargetBand, [40.0, 48.0, 53.0, 60.0]).unwrap();
    let bt = backtest(&band, shades, &long);
    let w = warnings(&band, &bt, Some(&limits), 0.1);
    let cuts_named: Vec<_> = w.iter().filter_map(|w| w.cut).collect();
    assert_eq!(cuts_named, ["intervene_low", "intervene_high"]);
}

#[test]
fn csv_uploads_follow_rfc_4180_and_name_every_bad_line() {
    // A header row, CRLF ends, quoted fields (RFC 4180 §2), any order, bare dates, offsets.
    let good = "period_start,value\r\n\"2026-01-12\",\"71.5\"\r\n2026-01-05,70\r\n2026-01-19T01:00:00+01:00,-3e2\r\n";
    let rows = from_csv(good.as_bytes(), |_| {}).unwrap();
    let text: Vec<String> = rows
        .iter()
        .map(|o| format!("{} {}", o.period_start, o.value))
        .collect();
    assert_eq!(
        text,
        [
            "2026-01-05T00:00:00.000000Z 70",
            "2026-01-12T00:00:00.000000Z 71.5",
            "2026-01-19T00:00:00.000000Z -300",
        ]
    );
    // No header is fine too.
    assert_eq!(from_csv(b"2026-01-05,1\n", |_| {}).unwrap().len(), 1);

    let bad = "period_start,value\n2026-01-05,71.5\n2026-01-12,x\n2026-01-05T00:00:00Z,3\nnot a date,4\n2026-02-01,inf\n2026-02-08,\n2026-02-15\n2026-02-22,NaN\n2026-03-01,1,2\n";
    let problems = from_csv(bad.as_bytes(), |_| {}).unwrap_err();
    let listed: Vec<String> = problems.iter().map(|p| p.describe()).collect();
    let lines: Vec<u64> = problems.iter().map(|p| p.line.unwrap()).collect();
    assert_eq!(lines, [3, 4, 5, 6, 7, 8, 9, 10], "{listed:#?}");
    assert!(listed[0].contains("\"x\" is not a number"), "{listed:#?}");
    assert!(
        listed[1].contains("duplicate period") && listed[1].contains("line 2"),
        "{listed:#?}"
    );
    assert!(listed[2].contains("unparseable date"), "{listed:#?}");
    assert!(listed[3].contains("non-finite"), "{listed:#?}");
    assert!(listed[4].contains("missing value"), "{listed:#?}");
    assert!(listed[5].contains("expected 2 fields"), "{listed:#?}");
    assert!(listed[6].contains("non-finite"), "{listed:#?}");
    assert!(listed[7].contains("found 3"), "{listed:#?}");
    assert!(
        from_csv(b"period_start,value\n", |_| {}).is_err(),
        "no observations"
    );
}

#[test]
fn csv_reading_agrees_with_pythons_csv_module() {
    // Quoted fields with commas, quotes and line breaks inside are one field each (RFC 4180);
    // Python's csv module (the reference) must see the same lines as ours.
    let text = "period_start,value\r\n\"2026-01-05\",\"1\"\r\n\"2026-01-12\",\"2,5\"\r\n\"2026-01-19\r\n\",3\r\n2026-01-26,\"4\"\"\"\r\n";
    let ours = from_csv(text.as_bytes(), |_| {}).unwrap_err();
    let python = Command::new("python3")
        .args(["-c", "import csv, io, sys, json\nr = csv.reader(io.StringIO(sys.stdin.read(), newline=''))\nprint(json.dumps([[r.line_num, row] for row in r]))"])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn();
    let Ok(mut child) = python else {
        missing_prerequisite("python3 (reference CSV reader)");
        return;
    };
    child
        .stdin
        .take()
        .unwrap()
        .write_all(text.as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    let rows: Vec<(u64, Vec<String>)> = serde_json::from_slice(&out.stdout).unwrap();
    // Python reports the line each record ends on; the quoted line break makes the fourth
    // record two lines long, so the fifth starts on line 6 in both readers.
    let fields: Vec<Vec<String>> = rows.iter().map(|(_, r)| r.clone()).collect();
    assert_eq!(fields[2], ["2026-01-12", "2,5"]);
    assert_eq!(fields[3], ["2026-01-19\r\n", "3"]);
    assert_eq!(fields[4], ["2026-01-26", "4\""]);
    assert_eq!((rows[2].0, rows[4].0), (3, 6));
    let reasons: Vec<String> = ours.iter().map(|p| p.describe()).collect();
    // Fields are trimmed, so the quoted line break around a date is no problem.
    assert_eq!(reasons.len(), 2, "{reasons:#?}");
    assert!(
        reasons[0].starts_with("line 3:") && reasons[0].contains("\"2,5\""),
        "{reasons:#?}"
    );
    assert!(
        reasons[1].starts_with("line 6:") && reasons[1].contains("4\\\""),
        "{reasons:#?}"
    );
}

#[test]
fn json_uploads_name_every_bad_item() {
    let body = json!({"observations": [
        {"period_start": "2026-01-05", "value": 1},
        {"period_start": "2026-01-05T00:00:00Z", "value": 2},
        {"period_start": "yesterday", "value": 3},
        {"period_start": "2026-01-19", "value": null},
        {"period_start": "2026-01-26", "value": "4"},
        {"period_start": "2026-02-02", "value": 5, "note": "x"},
        7
    ]});
    let problems = from_json(&body).unwrap_err();
    let items: Vec<u64> = problems.iter().map(|p| p.item.unwrap()).collect();
    assert_eq!(items, [2, 3, 4, 5, 6, 7]);
    assert!(problems[0].reason.contains("duplicate"));
    assert!(from_json(&json!([1, 2])).is_err());
}

fn csv_of(rows: &[(&str, f64)]) -> String {
    let mut s = String::from("period_start,value\n");
    for (p, v) in rows {
        s.push_str(&format!("{p},{v}\n"));
    }
    s
}

/// Weekly periods from 2025-01-06 with the NIST values repeated.
fn weekly(n: usize) -> String {
    let start = chrono::NaiveDate::from_ymd_opt(2025, 1, 6).unwrap();
    let mut s = String::new();
    for i in 0..n {
        let day = start + chrono::Duration::weeks(i as i64);
        s.push_str(&format!("{day},{}\n", NIST_FLOW[i % 10]));
    }
    s
}

async fn upload(
    team: &Team,
    who: &str,
    query: &str,
    content_type: &str,
    body: String,
) -> (u16, Value) {
    let token = team.token_of(who);
    let r = team
        .app
        .http
        .post(
            team.app
                .url(&format!("/api/v1/metrics/{METRIC}/observations{query}")),
        )
        .bearer_auth(token)
        .header("content-type", content_type)
        .body(body)
        .send()
        .await
        .unwrap();
    let status = r.status().as_u16();
    (status, r.json().await.unwrap())
}

on_both_backends! {
    async fn an_upload_is_stored_whole_and_recorded_with_its_sha256(app) {
        let team = Team::new(app).await;
        let file = csv_of(&[("2026-01-05", 70.0), ("2026-01-12", 71.5), ("2026-01-19", 69.0)]);
        let (status, body) = upload(&team, "tomas", "", "text/csv", file.clone()).await;
        assert_eq!(status, 200, "{body}");
        assert_eq!(body["rows"], 3);
        assert_eq!(body["added"], 3);
        assert_eq!(body["total"], 3);
        assert_eq!(body["sha256"], hex::encode(Sha256::digest(file.as_bytes())));
        let events = team.app.events().await;
        let last = events.last().unwrap();
        assert_eq!(last.event.action, "observations.uploaded");
        assert_eq!(last.event.payload["rows"], 3);
        assert_eq!(last.event.payload["sha256"], body["sha256"]);
        assert_eq!(last.event.payload["mode"], "merge");

        // Merge: one new period, one replaced value.
        let (status, body) = upload(&team, "tomas", "?mode=merge", "text/csv; charset=utf-8",
            csv_of(&[("2026-01-19", 60.0), ("2026-01-26", 72.0)])).await;
        assert_eq!(status, 200, "{body}");
        assert_eq!((body["added"].as_u64(), body["replaced"].as_u64(), body["total"].as_u64()), (Some(1), Some(1), Some(4)));
        let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations"), None).await;
        let values: Vec<f64> = listed["observations"].as_array().unwrap().iter().map(|o| o["value"].as_f64().unwrap()).collect();
        assert_eq!(values, [70.0, 71.5, 60.0, 72.0]);

        // JSON, replace: the upload becomes the whole history.
        let (status, body) = upload(&team, "tomas", "?mode=replace", "application/json",
            json!({"observations": [{"period_start": "2026-02-02T00:00:00Z", "value": 1.25}]}).to_string()).await;
        assert_eq!(status, 200, "{body}");
        assert_eq!((body["removed"].as_u64(), body["total"].as_u64()), (Some(4), Some(1)));
        let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations?from=2026-01-01"), None).await;
        assert_eq!(listed["observations"], json!([{"period_start": "2026-02-02T00:00:00.000000Z", "value": 1.25}]));
        // The histories the uploads replaced are deleted (in the background, and by every
        // round of upkeep): only the live one is left.
        cutpoints::ops::upkeep::once(&team.app.store).await;
        assert_eq!(cutpoints::store::observations::not_live(&team.app.store).await.unwrap(), 0);
    }

    async fn a_bad_upload_changes_nothing_and_lists_every_bad_line(app) {
        let team = Team::new(app).await;
        let (status, _) = upload(&team, "tomas", "", "text/csv", csv_of(&[("2026-01-05", 1.0)])).await;
        assert_eq!(status, 200);
        let read = team.app.token("tomas", Scope::Read).await;
        let events_before = team.app.event_count().await;
        let bad = "2026-01-12,2\n2026-01-12,3\nnope,4\n2026-01-26,\n2026-02-02,1e999\n";
        let (status, body) = upload(&team, "tomas", "?mode=replace", "text/csv", bad.to_string()).await;
        assert_eq!(status, 400, "{body}");
        assert_eq!(body["error"]["code"], "invalid_rows");
        let lines: Vec<u64> = body["error"]["rows"].as_array().unwrap().iter().map(|r| r["line"].as_u64().unwrap()).collect();
        assert_eq!(lines, [2, 3, 4, 5], "{body}");
        assert!(body["error"]["message"].as_str().unwrap().contains("nothing was changed"));
        assert_eq!(team.app.event_count().await, events_before, "no event");
        let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations"), None).await;
        assert_eq!(listed["observations"].as_array().unwrap().len(), 1, "the old history stands");

        // Who may comes first; then what was sent.
        let (status, _) = upload(&team, "hana", "", "text/csv", bad.to_string()).await;
        assert_eq!(status, 403, "a reviewer does not own the metric");
        let r = team.app.http.post(team.app.url(&format!("/api/v1/metrics/{METRIC}/observations")))
            .bearer_auth(read).header("content-type", "text/csv").body("2026-01-05,1\n").send().await.unwrap();
        assert_eq!(r.status(), 403, "read-scope tokens never write");
        let (status, body) = upload(&team, "tomas", "", "text/plain", "2026-01-05,1\n".into()).await;
        assert_eq!(status, 415, "{body}");
        let (status, body) = upload(&team, "tomas", "?mode=append", "text/csv", "2026-01-05,1\n".into()).await;
        assert_eq!(status, 400, "{body}");
        let (status, body) = upload(&team, "tomas", "", "application/json", "{not json".into()).await;
        assert_eq!(status, 400, "{body}");
        assert_eq!(body["error"]["code"], "invalid_rows");
        assert_eq!(team.app.event_count().await, events_before);
    }

    async fn evidence_reports_statistics_limits_and_the_version_in_forces_backtest(app) {
        let team = Team::new(app).await;
        let (status, body) = upload(&team, "tomas", "", "text/csv", weekly(30)).await;
        assert_eq!(status, 200, "{body}");
        let (status, e) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/evidence"), None).await;
        assert_eq!(status, 200, "{e}");
        assert_eq!(e["count"], 30);
        assert_eq!(e["backtest"], Value::Null, "no version in force yet");
        for field in ["mean", "sd", "min", "max"] {
            assert!(e[field].is_number(), "{field}: {e}");
        }
        for p in ["p10", "p25", "p50", "p75", "p90"] {
            assert!(e["percentiles"][p].is_number(), "{p}: {e}");
        }
        // The first ten weeks are exactly the NIST batches.
        let (_, first) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/evidence?from=2025-01-06&to=2025-03-17"), None).await;
        assert_eq!(first["count"], 10, "{first}");
        let limits = &first["limits"];
        assert!(close(limits["mean"].as_f64().unwrap(), 50.81, 1e-9), "{first}");
        assert!(close(limits["upper"].as_f64().unwrap(), 55.8041, 5e-5));
        assert!(close(limits["lower"].as_f64().unwrap(), 45.8159, 5e-5));
        assert!(close(limits["average_moving_range"].as_f64().unwrap(), 1.8778, 5e-5));
        assert!(limits["moving_range_upper"].is_number());
        assert_eq!(first["limits_dependable"], false);

        team.agree(hib(40.0, 48.0, 60.0, 70.0, "First agreed lines.")).await;
        let (_, e) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/evidence"), None).await;
        let bt = &e["backtest"];
        assert_eq!(bt["of"]["kind"], "version");
        assert_eq!(bt["of"]["number"], 1);
        assert_eq!(bt["periods"], 30);
        let zone_total: u64 = bt["zones"].as_object().unwrap().values().map(|v| v.as_u64().unwrap()).sum();
        assert_eq!(zone_total, 30);
        assert_eq!(bt["zones"]["intervene"], 6, "47.6 and 47.8, three times over: {bt}");
        assert!(bt["changes"].is_number());
        let codes: Vec<&str> = bt["warnings"].as_array().unwrap().iter().map(|w| w["code"].as_str().unwrap()).collect();
        assert!(codes.contains(&"intervene_within_routine_variation"), "{codes:?}");
        assert!(codes.contains(&"never_reached"), "{codes:?}");

        let (status, body) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/evidence?from=soon"), None).await;
        assert_eq!(status, 400, "{body}");
        let (status, body) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/evidence?from=2026-01-01&to=2025-01-01"), None).await;
        assert_eq!(status, 400, "{body}");
        let (status, _) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/evidence?critical_share=2"), None).await;
        assert_eq!(status, 400);
        let (status, _) = team.call("wren", "GET", "/api/v1/metrics/no.such/evidence", None).await;
        assert_eq!(status, 404);
    }

    async fn a_proposal_and_any_version_can_be_backtested(app) {
        let team = Team::new(app).await;
        upload(&team, "tomas", "", "text/csv", weekly(20)).await;
        team.agree(hib(40.0, 48.0, 60.0, 70.0, "First agreed lines.")).await;
        let (status, p) = team.propose("tomas", hib(40.0, 50.0, 60.0, 70.0, "Raise intervene to 50.")).await;
        assert_eq!(status, 201, "{p}");
        let id = p["id"].as_i64().unwrap();
        let (status, b) = team.call("wren", "GET", &format!("/api/v1/proposals/{id}/backtest"), None).await;
        assert_eq!(status, 200, "{b}");
        assert_eq!(b["count"], 20);
        assert_eq!(b["backtest"]["of"]["kind"], "proposal");
        assert_eq!(b["compared_with"]["of"]["number"], 1);
        // 49.6 and 49.9 move from steady to intervene, twice each over 20 weeks.
        let moved = b["differences"].as_array().unwrap();
        assert_eq!(moved.len(), 4, "{b}");
        assert!(moved.iter().all(|d| d["first"] == "steady" && d["second"] == "intervene"));
        assert_eq!(moved[0]["period_start"], "2025-01-06T00:00:00.000000Z");
        assert_eq!(moved[0]["value"], 49.6);

        let (status, v) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/versions/1/backtest?from=2025-01-06&to=2025-03-17"), None).await;
        assert_eq!(status, 200, "{v}");
        assert_eq!(v["backtest"]["periods"], 10);
        assert_eq!(v["compared_with"], Value::Null);
        let (status, _) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/versions/9/backtest"), None).await;
        assert_eq!(status, 404);
        let (status, _) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/versions/1/backtest?compare=9"), None).await;
        assert_eq!(status, 404);
        // An earlier revision can be tested too.
        let mut body = hib(40.0, 52.0, 60.0, 70.0, "Raise intervene to 52.");
        body["note"] = json!("higher");
        let (status, revised) = team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(body)).await;
        assert_eq!(status, 200, "{revised}");
        let (_, latest) = team.call("wren", "GET", &format!("/api/v1/proposals/{id}/backtest"), None).await;
        assert_eq!(latest["backtest"]["of"]["number"], 2, "{latest}");
        let (status, first) = team.call("wren", "GET", &format!("/api/v1/proposals/{id}/backtest?revision=1"), None).await;
        assert_eq!(status, 200, "{first}");
        assert_eq!(first["backtest"]["of"]["number"], 1);
        assert_eq!(first["differences"].as_array().unwrap().len(), 4);
        let (status, _) = team.call("wren", "GET", &format!("/api/v1/proposals/{id}/backtest?revision=7"), None).await;
        assert_eq!(status, 404);
        let (status, _) = team.call("wren", "GET", "/api/v1/proposals/999999/backtest", None).await;
        assert_eq!(status, 404);
    }

    async fn the_command_line_imports_a_file_or_lists_every_bad_line(app) {
        let team = Team::new(app).await;
        let dir = tempfile::tempdir().unwrap();
        let good = dir.path().join("history.csv");
        std::fs::write(&good, weekly(25)).unwrap();
        let run = |file: &std::path::Path, mode: &str| {
            Command::new(env!("CARGO_BIN_EXE_cutpoints"))
                .args(["observations", "import", "--metric", METRIC, "--mode", mode, "--quiet"])
                .arg(file)
                .env("CUTPOINTS_DATABASE_URL", &team.app.store_url)
                .output()
                .unwrap()
        };
        let out = run(&good, "merge");
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let text = String::from_utf8_lossy(&out.stdout);
        assert!(text.contains("25 rows (25 added"), "{text}");
        assert!(text.contains(&hex::encode(Sha256::digest(weekly(25).as_bytes()))), "{text}");
        let events = team.app.events().await;
        assert_eq!(events.last().unwrap().event.action, "observations.uploaded");

        let bad = dir.path().join("bad.csv");
        std::fs::write(&bad, "2026-01-05,1\n2026-01-05,2\nx,3\n").unwrap();
        let before = team.app.event_count().await;
        let out = run(&bad, "replace");
        assert_eq!(out.status.code(), Some(1));
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("bad.csv: line 2: duplicate period"), "{err}");
        assert!(err.contains("bad.csv: line 3: unparseable date"), "{err}");
        assert!(err.contains("nothing was changed"), "{err}");
        assert_eq!(team.app.event_count().await, before);
        let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations"), None).await;
        assert_eq!(listed["observations"].as_array().unwrap().len(), 25);
    }
}

/// A multipart/form-data body (RFC 7578) with text fields and one file, as a browser sends
/// the upload form.
fn multipart(fields: &[(&str, &str)], file: Option<&str>) -> (String, Vec<u8>) {
    let boundary = "----cutpoints-test-boundary-7d1f";
    let mut body = Vec::new();
    for (name, value) in fields {
        body.extend_from_slice(
            format!(
                "--{boundary}\r\nContent-Disposition: form-data; name=\"{name}\"\r\n\r\n{value}\r\n"
            )
            .as_bytes(),
        );
    }
    if let Some(text) = file {
        body.extend_from_slice(
            format!("--{boundary}\r\nContent-Disposition: form-data; name=\"file\"; filename=\"history.csv\"\r\nContent-Type: text/csv\r\n\r\n{text}\r\n").as_bytes(),
        );
    }
    body.extend_from_slice(format!("--{boundary}--\r\n").as_bytes());
    (format!("multipart/form-data; boundary={boundary}"), body)
}

async fn post_upload(
    browser: &crate::helpers::Browser,
    fields: &[(&str, &str)],
    file: Option<&str>,
) -> (u16, String, String) {
    let (content_type, body) = multipart(fields, file);
    let r = browser
        .client
        .post(browser.url(&format!("/metrics/{METRIC}/observations")))
        .header("content-type", content_type)
        .body(body)
        .send()
        .await
        .unwrap();
    let status = r.status().as_u16();
    let location = r
        .headers()
        .get("location")
        .map(|v| v.to_str().unwrap().to_string())
        .unwrap_or_default();
    (status, location, r.text().await.unwrap())
}

on_both_backends! {
    async fn the_pages_upload_history_and_show_chart_backtest_and_warnings(app) {
        let team = Team::new(app).await;
        let owner = team.app.signed_in("tomas").await;
        let (status, html) = owner.get_text(&format!("/metrics/{METRIC}")).await;
        assert_eq!(status, 200);
        assert!(html.contains("No history uploaded yet"), "the chart says so");
        assert!(html.contains("enctype=\"multipart/form-data\""), "the upload form");
        let csrf = crate::helpers::csrf_in(&html).unwrap();

        // A bad file: refused with every line listed, nothing stored.
        let (status, _, page) = post_upload(&owner, &[("_csrf", &csrf), ("mode", "merge")], Some("2026-01-05,1\n2026-01-05,2\nx,3\n")).await;
        assert_eq!(status, 400, "{page}");
        assert!(page.contains("line 2: duplicate period"), "{page}");
        assert!(page.contains("line 3: unparseable date"), "{page}");
        assert!(page.contains("Nothing in the metric"), "{page}");
        // Without the session's token nothing is read or stored.
        let before = team.app.event_count().await;
        let (status, _, _) = post_upload(&owner, &[("_csrf", "forged"), ("mode", "merge")], Some(&weekly(30))).await;
        assert_eq!(status, 403);
        let (status, _, _) = post_upload(&owner, &[("mode", "merge")], Some(&weekly(30))).await;
        assert_eq!(status, 403, "no token");
        let (status, _, _) = post_upload(&owner, &[("mode", "merge"), ("_csrf", &csrf)], Some(&weekly(30))).await;
        assert_eq!(status, 403, "the token must come first");
        let (status, _, page) = post_upload(&owner, &[("_csrf", &csrf), ("mode", "append")], Some(&weekly(30))).await;
        assert_eq!(status, 400, "an unknown mode: {page}");
        assert_eq!(team.app.event_count().await, before);
        let reviewer = team.app.signed_in("hana").await;
        let reviewer_csrf = reviewer.csrf_on(&format!("/metrics/{METRIC}")).await;
        let (status, _, _) = post_upload(&reviewer, &[("_csrf", &reviewer_csrf)], Some(&weekly(30))).await;
        assert_eq!(status, 403, "only owners and admins");
        let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations"), None).await;
        assert_eq!(listed["observations"].as_array().unwrap().len(), 0);

        // A good file.
        let (status, location, _) = post_upload(&owner, &[("_csrf", &csrf), ("mode", "replace")], Some(&weekly(30))).await;
        assert_eq!(status, 303);
        assert_eq!(location, format!("/metrics/{METRIC}?uploaded=30"));
        let (_, html) = owner.get_text(&location).await;
        assert!(html.contains("30 periods stored or updated"), "notice");
        assert!(html.contains("30 periods from 2025-01-06 to 2025-07-28"), "summary");
        assert!(html.contains("Natural process limits"), "limits in words");
        // A chosen window: every figure over those periods only.
        let (_, html) = owner.get_text(&format!("/metrics/{METRIC}?from=2025-01-06&to=2025-03-17")).await;
        assert!(html.contains("10 periods from 2025-01-06 to 2025-03-10"), "the window");
        assert!(html.contains("45.82 to 55.8"), "the NIST limits over the first ten weeks");
        assert!(html.contains("value=\"2025-03-17\""), "the form keeps the window");
        let (status, html) = owner.get_text(&format!("/metrics/{METRIC}?from=soon")).await;
        assert_eq!(status, 200);
        assert!(html.contains("showing the whole history"), "a bad window is said, not fatal");
        assert!(html.contains("30 periods from"));

        // The proposal page: chart with both sets, backtest table, warnings.
        team.agree(hib(40.0, 48.0, 60.0, 70.0, "First agreed lines.")).await;
        let (_, p) = team.propose("tomas", hib(30.0, 50.0, 60.0, 70.0, "Intervene at 50; critical lower.")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        let (status, html) = reviewer.get_text(&format!("/proposals/{id}")).await;
        assert_eq!(status, 200);
        assert!(html.contains("history and zones"), "the chart's title");
        assert!(html.contains("What each set would have said"));
        assert!(html.contains(&format!("revision 1 of proposal {id}")));
        assert!(html.contains("would fire on routine variation about"), "the intervene warning");
        assert!(html.contains("was never reached"), "the stretch warning");
        assert!(html.contains("Periods whose zone would change (6)"), "49.6 and 49.9 three times, {html}");
        assert!(html.contains(">In force</th><th scope=\"col\">Proposed</th>"), "the compared sets named");

        // The signatory's sign-off page shows the same evidence beside the form.
        let signatory = team.app.signed_in("odile").await;
        let (status, html) = signatory.get_text(&format!("/proposals/{id}/signoff")).await;
        assert_eq!(status, 200);
        assert!(html.contains("Evidence from the history"));
        assert!(html.contains("history and zones"));
        assert!(html.contains("name=\"password\""), "the sign-off form");
        let (status, html) = reviewer.get_text(&format!("/proposals/{id}/signoff")).await;
        assert_eq!(status, 200);
        assert!(!html.contains("name=\"password\""), "a reviewer cannot sign");
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn uploads_past_the_json_limit_work_and_past_the_upload_limit_answer_413() {
    let config = cutpoints::web::WebConfig {
        upload_limit: 4 * 1024 * 1024,
        ..Default::default()
    };
    let app = crate::helpers::TestApp::spawn_with(crate::helpers::Backend::Sqlite, config)
        .await
        .unwrap();
    let team = Team::new(app).await;
    // About 3 MB: more than the 2 MiB the JSON endpoints take, within the upload limit.
    let start = chrono::NaiveDate::from_ymd_opt(1900, 1, 1).unwrap();
    let big: String = (0..150_000)
        .map(|i| format!("{},{}.125\n", start + chrono::Duration::days(i), i % 997))
        .collect();
    assert!(
        big.len() > 2 * 1024 * 1024 && big.len() < 4 * 1024 * 1024,
        "{}",
        big.len()
    );
    let (status, body) = upload(&team, "tomas", "", "text/csv", big.clone()).await;
    assert_eq!(status, 200, "{body}");
    assert_eq!(body["rows"], 150_000);
    let before = team.app.event_count().await;
    let (status, body) = upload(&team, "tomas", "", "text/csv", big.repeat(2)).await;
    assert_eq!(status, 413, "{body}");
    assert_eq!(body["error"]["code"], "too_large");
    assert_eq!(team.app.event_count().await, before);
}

#[test]
fn a_line_past_the_far_limit_is_said_to_fire_on_most_periods() {
    let shades = Shades::new(3).unwrap();
    let long: Vec<f64> = NIST_FLOW.iter().cycle().take(40).copied().collect();
    let limits = process_limits(&long).unwrap();
    // Intervene at 60 is above the upper limit (about 55.9): nearly every period reaches it.
    let cuts = hib_cuts(40.0, 60.0, 70.0, 80.0);
    let bt = backtest(&cuts, shades, &long);
    let w = warnings(&cuts, &bt, Some(&limits), 0.1);
    let beyond = w
        .iter()
        .find(|w| w.code == "intervene_beyond_routine_variation")
        .unwrap();
    assert_eq!(beyond.share, Some(1.0));
    assert!(
        beyond
            .message
            .contains("past the whole range of routine variation"),
        "{}",
        beyond.message
    );
    assert!(
        beyond.message.contains("about 100 % of this history"),
        "{}",
        beyond.message
    );
    assert!(
        !codes(&w).contains(&"intervene_within_routine_variation"),
        "not inside: {w:?}"
    );
    // The same for lower_is_better below the lower limit.
    let lib = CutSet::new(Direction::LowerIsBetter, [60.0, 44.0, 30.0, 20.0]).unwrap();
    let bt = backtest(&lib, shades, &long);
    let w = warnings(&lib, &bt, Some(&limits), 0.1);
    assert!(
        codes(&w).contains(&"intervene_beyond_routine_variation"),
        "{w:?}"
    );
}

#[test]
fn only_four_digit_years_are_times() {
    use cutpoints::domain::Timestamp;
    for text in [
        "+99999-1-1",
        "-999-01-01",
        "+2026-3-1",
        "2026-3-01x",
        "9999-12-31T23:00:00-05:00",
        "0000-01-01",
    ] {
        assert!(Timestamp::parse(text).is_err(), "{text}");
    }
    assert_eq!(
        Timestamp::parse("2026-03-01").unwrap().to_string(),
        "2026-03-01T00:00:00.000000Z"
    );
    assert!(Timestamp::parse("9999-12-31T23:59:59Z").is_ok());
    assert!(Timestamp::parse("0001-01-01").is_ok());
}

#[test]
fn a_bad_first_line_is_reported_not_taken_for_a_header() {
    let problems = from_csv(b"2026-02-30,abc\n2026-03-01,1\n", |_| {}).unwrap_err();
    assert_eq!(problems.len(), 1);
    assert_eq!(problems[0].line, Some(1));
    // Blank lines before the header do not use up its place.
    let rows = from_csv(b"\n  \nperiod,value\n2026-03-01,1\n", |_| {}).unwrap();
    assert_eq!(rows.len(), 1);
    // Values beyond +-1e150 are refused (their squares would overflow), and long fields are
    // cut short in the reason.
    let long = "9".repeat(500);
    let problems = from_csv(
        format!("2026-03-01,1e200\n2026-03-02,x{long}\n").as_bytes(),
        |_| {},
    )
    .unwrap_err();
    assert!(problems[0].reason.contains("too large"), "{problems:?}");
    assert!(problems[1].reason.len() < 120, "{problems:?}");
}

#[test]
fn a_broken_file_lists_ten_thousand_problems_and_counts_the_rest() {
    let text: String = (0..10_005).map(|i| format!("bad{i},x\n")).collect();
    let problems = from_csv(text.as_bytes(), |_| {}).unwrap_err();
    assert_eq!(problems.len(), 10_001);
    assert_eq!(problems[9_999].line, Some(10_000));
    assert!(
        problems[10_000].reason.contains("and 5 more"),
        "{:?}",
        problems[10_000]
    );
}

#[test]
fn json_bytes_are_read_item_by_item_with_the_same_answers() {
    use cutpoints::domain::observations::from_json_bytes;
    let body = json!({"note": {"ignored": [1, 2]}, "observations": [
        {"period_start": "2026-01-12", "value": 2.5},
        {"period_start": "2026-01-05", "value": 1},
    ]});
    let bytes = serde_json::to_vec(&body).unwrap();
    assert_eq!(from_json_bytes(&bytes).unwrap(), from_json(&body).unwrap());
    let bad =
        json!({"observations": [{"period_start": "2026-01-05", "value": 1}, {"value": 2}, 3]});
    let problems = from_json_bytes(&serde_json::to_vec(&bad).unwrap()).unwrap_err();
    let items: Vec<u64> = problems.iter().map(|p| p.item.unwrap()).collect();
    assert_eq!(items, [2, 3]);
    assert!(from_json_bytes(br#"{"observations": 5}"#).is_err());
    assert!(from_json_bytes(br#"{"other": []}"#).is_err());
    assert!(from_json_bytes(br#"{"observations": []} trailing"#).is_err());
}

on_both_backends! {
    async fn the_stored_history_downloads_as_csv_that_uploads_again_unchanged(app) {
        let team = Team::new(app).await;
        let file = "period_start,value\n2026-01-12,71.5\n2026-01-05T06:00:00+06:00,70\n2026-01-19,-0.125\n";
        let (status, _) = upload(&team, "tomas", "", "text/csv", file.into()).await;
        assert_eq!(status, 200);
        let r = team.app.http.get(team.app.url(&format!("/api/v1/metrics/{METRIC}/observations.csv")))
            .bearer_auth(team.token_of("wren")).send().await.unwrap();
        assert_eq!(r.status(), 200);
        assert!(r.headers()["content-type"].to_str().unwrap().starts_with("text/csv"));
        assert!(r.headers()["content-disposition"].to_str().unwrap().contains("attachment"));
        let csv = r.text().await.unwrap();
        // RFC 4180: CRLF line ends; in time order, times in UTC.
        assert_eq!(csv, "period_start,value\r\n2026-01-05T00:00:00.000000Z,70\r\n2026-01-12T00:00:00.000000Z,71.5\r\n2026-01-19T00:00:00.000000Z,-0.125\r\n");
        // Python's csv module (the reference reader) reads the same three rows.
        let python = Command::new("python3")
            .args(["-c", "import csv, io, sys, json\nprint(json.dumps(list(csv.reader(io.StringIO(sys.stdin.read(), newline='')))))"])
            .stdin(Stdio::piped()).stdout(Stdio::piped()).spawn();
        match python {
            Ok(mut child) => {
                child.stdin.take().unwrap().write_all(csv.as_bytes()).unwrap();
                let rows: Vec<Vec<String>> = serde_json::from_slice(&child.wait_with_output().unwrap().stdout).unwrap();
                assert_eq!(rows.len(), 4);
                assert_eq!(rows[3], ["2026-01-19T00:00:00.000000Z", "-0.125"]);
            }
            Err(_) => missing_prerequisite("python3 (reference CSV reader)"),
        }
        // Uploading the download replaces the history with itself.
        let (status, body) = upload(&team, "tomas", "?mode=replace", "text/csv", csv.clone()).await;
        assert_eq!(status, 200, "{body}");
        assert_eq!(body["total"], 3);
        let again = team.app.http.get(team.app.url(&format!("/api/v1/metrics/{METRIC}/observations.csv?from=2026-01-10")))
            .bearer_auth(team.token_of("wren")).send().await.unwrap().text().await.unwrap();
        assert_eq!(again.lines().count(), 3, "a window: {again}");
    }
}
