//! The command line, run as a user runs it.

use std::io::Write;
use std::process::{Command, Output, Stdio};

use serde_json::{Value, json};

pub fn cutpoints(args: &[&str]) -> Output {
    cutpoints_with_stdin(args, "")
}

pub fn cutpoints_with_stdin(args: &[&str], stdin: &str) -> Output {
    let mut child = Command::new(env!("CARGO_BIN_EXE_cutpoints"))
        .args(args)
        .env_remove("CUTPOINTS_DATABASE_URL")
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run cutpoints");
    child
        .stdin
        .take()
        .unwrap()
        .write_all(stdin.as_bytes())
        .unwrap();
    child.wait_with_output().unwrap()
}

fn lines(out: &Output) -> Vec<Value> {
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).expect("one JSON object per line"))
        .collect()
}

#[test]
fn classify_prints_one_json_object_per_value() {
    let out = cutpoints(&[
        "classify",
        "--direction",
        "higher_is_better",
        "--cuts",
        "50,70,80,90",
        "65",
        "null",
        "95",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // The first line is the example docs/design.md gives.
    assert_eq!(
        String::from_utf8_lossy(&out.stdout).lines().next().unwrap(),
        r#"{"value":65.0,"zone":"intervene","severity":0.25,"shade":1,"signal":-1}"#
    );
    assert_eq!(
        lines(&out),
        vec![
            json!({"value":65.0,"zone":"intervene","severity":0.25,"shade":1,"signal":-1}),
            json!({"value":null,"zone":"no_data","severity":null,"shade":null,"signal":null}),
            json!({"value":95.0,"zone":"stretch","severity":1.0,"shade":4,"signal":4}),
        ]
    );
}

#[test]
fn classify_takes_negative_cuts_and_values() {
    let out = cutpoints(&[
        "classify",
        "--direction",
        "target_band",
        "--cuts=-20,-10,0,5",
        "--shades",
        "4",
        "--",
        "-15",
        "-25",
        "2.5",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(
        lines(&out),
        vec![
            json!({"value":-15.0,"zone":"intervene","severity":0.5,"shade":3,"signal":-3,"side":"low"}),
            json!({"value":-25.0,"zone":"critical","severity":1.0,"shade":5,"signal":-5,"side":"low"}),
            json!({"value":2.5,"zone":"intervene","severity":0.5,"shade":3,"signal":-3,"side":"high"}),
        ]
    );
}

#[test]
fn classify_bad_input_exits_2_with_the_reason_and_prints_nothing() {
    let cases: &[(&[&str], &str)] = &[
        (
            &["--direction", "upward", "--cuts", "1,2,3,4", "1"],
            "unknown direction \"upward\"",
        ),
        (
            &["--direction", "higher_is_better", "--cuts", "1,3,2,4", "1"],
            "for higher_is_better, outperform (2) must be greater than intervene (3)",
        ),
        (
            &["--direction", "lower_is_better", "--cuts", "1,2,3,4", "1"],
            "for lower_is_better, intervene (2) must be less than critical (1)",
        ),
        (
            &["--direction", "higher_is_better", "--cuts", "1,2,3", "1"],
            "expected exactly 4 cut points",
        ),
        (
            &[
                "--direction",
                "higher_is_better",
                "--cuts",
                "1,2,3,4",
                "--",
                "1",
                "inf",
            ],
            "value must be a finite number or null, got inf",
        ),
        (
            &[
                "--direction",
                "higher_is_better",
                "--cuts",
                "1,2,3,4",
                "NaN",
            ],
            "got NaN",
        ),
        (
            &[
                "--direction",
                "higher_is_better",
                "--cuts",
                "1,2,3,4",
                "1e999",
            ],
            "got 1e999",
        ),
        (
            &[
                "--direction",
                "higher_is_better",
                "--cuts",
                "1,2,3,4",
                "abc",
            ],
            "got abc",
        ),
        (
            &[
                "--direction",
                "higher_is_better",
                "--cuts",
                "1,2,3,4",
                "--shades",
                "6",
                "1",
            ],
            "shades must be a whole number from 2 to 5, got 6",
        ),
        (
            &[
                "--direction",
                "higher_is_better",
                "--cuts=-1e308,0,1,1e308",
                "1",
            ],
            "too wide",
        ),
        (
            &["--direction", "higher_is_better", "--cuts", "1,2,3,4"],
            "required",
        ),
    ];
    for (args, reason) in cases {
        let mut all = vec!["classify"];
        all.extend_from_slice(args);
        let out = cutpoints(&all);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {stderr}");
        assert!(stderr.contains(reason), "{args:?}: {stderr}");
        assert!(out.stdout.is_empty(), "{args:?} printed {:?}", out.stdout);
    }
}

#[test]
fn every_subcommand_has_help() {
    for sub in ["serve", "demo", "migrate", "user", "token", "classify"] {
        let out = cutpoints(&[sub, "--help"]);
        assert!(out.status.success(), "{sub} --help");
    }
    let out = cutpoints(&["serve", "--help"]);
    let help = String::from_utf8_lossy(&out.stdout);
    for env in ["CUTPOINTS_DATABASE_URL", "CUTPOINTS_BIND"] {
        assert!(help.contains(env), "serve --help names {env}");
    }
}
