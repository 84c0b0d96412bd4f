//! Every stored diff, applied with GNU `patch` (the reference tool for unified diffs) to the
//! previous canonical text, gives exactly the new canonical text.

use std::path::Path;
use std::process::Command;

use cutpoints::domain::Timestamp;
use cutpoints::domain::proposal::ThresholdContent;
use cutpoints::domain::thresholds::{CutSet, Direction, Shades};
use cutpoints::engine::canonical::{canonical_text, unified_diff};
use serde_json::json;

use crate::helpers::missing_prerequisite;
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

/// Applies `diff` to `old` with GNU patch; `None` when patch is not installed.
fn gnu_patch(old: &str, diff: &str) -> Option<String> {
    let version = Command::new("patch").arg("--version").output().ok()?;
    assert!(
        String::from_utf8_lossy(&version.stdout).contains("GNU patch"),
        "the reference is GNU patch"
    );
    let dir = tempfile::tempdir().unwrap();
    let original = dir.path().join("canonical.txt");
    let patch_file = dir.path().join("change.diff");
    let output = dir.path().join("patched.txt");
    std::fs::write(&original, old).unwrap();
    std::fs::write(&patch_file, diff).unwrap();
    let status = Command::new("patch")
        .arg("--silent")
        .arg("--force")
        .arg("-o")
        .arg(&output)
        .arg("-i")
        .arg(&patch_file)
        .arg(&original)
        .status()
        .unwrap();
    assert!(status.success(), "patch refused the diff:\n{diff}");
    Some(std::fs::read_to_string(Path::new(&output)).unwrap())
}

fn check(old: &str, new: &str, diff: &str) -> bool {
    if old == new {
        assert!(diff.is_empty());
        return true;
    }
    match gnu_patch(old, diff) {
        Some(patched) => {
            assert_eq!(patched, new, "patching gives the new text exactly\n{diff}");
            true
        }
        None => {
            missing_prerequisite("GNU patch");
            false
        }
    }
}

#[test]
fn diffs_of_varied_contents_apply_with_gnu_patch() {
    let content = |d: Direction, c: [f64; 4], s: i64, unit: &str, eff: Option<&str>, r: &str| {
        ThresholdContent {
            cuts: CutSet::new(d, c).unwrap(),
            shades: Shades::new(s).unwrap(),
            unit: unit.into(),
            effective_from: eff.map(|t| Timestamp::parse(t).unwrap()),
            rationale: r.into(),
        }
    };
    let steps = [
        content(
            Direction::HigherIsBetter,
            [50.0, 70.0, 80.0, 90.0],
            3,
            "%",
            None,
            "One line.",
        ),
        content(
            Direction::HigherIsBetter,
            [50.0, 75.0, 80.0, 90.0],
            3,
            "%",
            None,
            "One line.\nAnd a second.",
        ),
        content(
            Direction::HigherIsBetter,
            [45.0, 75.0, 80.0, 90.0],
            4,
            "percent",
            Some("2027-01-01"),
            "Rewritten entirely.\n\nWith a blank line.",
        ),
        content(
            Direction::TargetBand,
            [1.5, 2.0, 3.0, 4.5],
            4,
            "rides",
            Some("2027-02-01"),
            "Rewritten entirely.\n\nWith a blank line.",
        ),
        content(
            Direction::LowerIsBetter,
            [1e-3, 1e-5, 1e-7, 1e-9],
            2,
            "",
            None,
            "tiny numbers",
        ),
    ];
    for pair in steps.windows(2) {
        let (old, new) = (canonical_text(&pair[0]), canonical_text(&pair[1]));
        if !check(&old, &new, &unified_diff(&old, &new)) {
            return;
        }
    }
}

on_both_backends! {
    async fn stored_revision_and_version_diffs_apply_with_gnu_patch(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.0, "v1")).await;
        let (_, p) = team.propose("tomas", hib(50.0, 72.0, 80.0, 90.0, "v2 draft")).await;
        let id = p["id"].as_i64().unwrap();
        let edits = [
            hib(45.0, 72.0, 80.0, 90.0, "v2 draft\nCritical lower after the winter review."),
            json!({"direction": "target_band", "cuts": {"critical_low": 40, "intervene_low": 60, "intervene_high": 90, "critical_high": 97}, "shades": 5, "unit": "% of docks", "effective_from": "2030-01-01", "rationale": "A band now: full docks block returns.\n\nSee the depot report."}),
        ];
        for (i, mut e) in edits.into_iter().enumerate() {
            e["note"] = json!(format!("edit {i}"));
            let (status, _) = team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(e)).await;
            assert_eq!(status, 200);
        }
        let p = team.get(id).await;
        let revisions = p["revisions"].as_array().unwrap();
        assert_eq!(revisions.len(), 3);
        for pair in revisions.windows(2) {
            let (old, new) = (pair[0]["canonical_text"].as_str().unwrap(), pair[1]["canonical_text"].as_str().unwrap());
            if !check(old, new, pair[1]["diff_from_previous"].as_str().unwrap()) {
                return;
            }
        }
        // Each revision's diff from the version in force when it was saved.
        let (_, history) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/history"), None).await;
        let in_force = history["versions"][0]["canonical_text"].as_str().unwrap().to_string();
        for r in revisions {
            assert_eq!(r["base_version"], 1);
            check(&in_force, r["canonical_text"].as_str().unwrap(), r["diff_from_base"].as_str().unwrap());
        }
        // And the diff between approved versions.
        team.act("tomas", id, "submit", None).await;
        team.sign("odile", id).await;
        team.approve("hana", id).await;
        let (_, history) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/history"), None).await;
        let v = history["versions"].as_array().unwrap();
        assert_eq!(v.len(), 2);
        check(
            v[0]["canonical_text"].as_str().unwrap(),
            v[1]["canonical_text"].as_str().unwrap(),
            v[1]["diff_from_previous"].as_str().unwrap(),
        );
    }
}
