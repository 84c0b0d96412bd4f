//! Real exports validate against docs/schema/published-set.schema.json with Python's
//! `jsonschema` package, a reference validator for JSON Schema 2020-12.

use std::process::Command;

use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::helpers::missing_prerequisite;
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

const SCHEMA: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/docs/schema/published-set.schema.json"
);

const VALIDATE: &str = "import json, sys, jsonschema
schema = json.load(open(sys.argv[1]))
jsonschema.Draft202012Validator.check_schema(schema)
validator = jsonschema.Draft202012Validator(schema)
for path in sys.argv[2:]:
    errors = sorted(validator.iter_errors(json.load(open(path))), key=str)
    print(path.rsplit('/', 1)[-1], 'valid' if not errors else 'invalid: ' + errors[0].message)
";

/// Validates documents; `None` when python3 or jsonschema is missing.
fn validate(docs: &[(&str, Value)]) -> Option<Vec<String>> {
    let probe = Command::new("python3")
        .args(["-c", "import jsonschema"])
        .output()
        .ok()?;
    if !probe.status.success() {
        return None;
    }
    let dir = tempfile::tempdir().unwrap();
    let mut args = vec!["-c".to_string(), VALIDATE.to_string(), SCHEMA.to_string()];
    for (name, doc) in docs {
        let path = dir.path().join(name);
        std::fs::write(&path, serde_json::to_vec(doc).unwrap()).unwrap();
        args.push(path.to_str().unwrap().to_string());
    }
    let out = Command::new("python3").args(&args).output().unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    Some(
        String::from_utf8(out.stdout)
            .unwrap()
            .lines()
            .map(str::to_string)
            .collect(),
    )
}

/// True when `doc` validates against the schema; a missing Python or jsonschema is reported
/// as a skip (a failure under CI).
pub fn validates(doc: &Value) -> bool {
    match validate(&[("document.json", doc.clone())]) {
        Some(lines) => lines.iter().all(|l| l.ends_with(" valid")),
        None => {
            missing_prerequisite("python3 with jsonschema");
            true
        }
    }
}

on_both_backends! {
    async fn exports_validate_against_the_published_schema(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.5, "v1")).await;
        team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "fleet.rides", "name": "Rides", "owners": ["tomas"]}))).await;
        let (_, p) = team.call("tomas", "POST", "/api/v1/metrics/fleet.rides/proposals", Some(json!({"direction": "target_band", "cuts": {"critical_low": 1.5, "intervene_low": 2.5, "intervene_high": 6, "critical_high": 8}, "rationale": "band"}))).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        team.sign("odile", id).await;
        team.approve("hana", id).await;
        team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "waiting", "name": "W"}))).await;
        team.agree(hib(45.0, 70.0, 80.0, 90.5, "v2")).await;
        team.app.add_user("dash", "viewer").await;
        let token = team.app.token("dash", Scope::Read).await;
        let get = |path: String| {
            let req = team.app.http.get(team.app.url(&path)).bearer_auth(token.clone());
            async move { req.send().await.unwrap().json::<Value>().await.unwrap() }
        };
        let current = get("/api/v1/published".into()).await;
        assert_eq!(current["meta"]["metrics_without_version"], json!(["waiting"]));
        let empty = get("/api/v1/published?as_of=2001-01-01".into()).await;
        let one = get(format!("/api/v1/published/{METRIC}")).await;
        let known = get(format!("/api/v1/published?as_of={}&known_at={}", cutpoints::domain::Timestamp::now(), cutpoints::domain::Timestamp::now())).await;
        let mut broken = current.clone();
        broken["set"]["fleet.rides"]["cuts"] = json!({"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4});
        let mut unknown = current.clone();
        unknown["meta"]["extra"] = json!(1);
        let Some(lines) = validate(&[
            ("current.json", current),
            ("empty.json", empty),
            ("one.json", one),
            ("known.json", known),
            ("broken.json", broken),
            ("unknown.json", unknown),
        ]) else {
            missing_prerequisite("python3 with the jsonschema package (reference JSON Schema validator)");
            return;
        };
        assert_eq!(&lines[..4], ["current.json valid", "empty.json valid", "one.json valid", "known.json valid"]);
        assert!(lines[4].starts_with("broken.json invalid"), "{lines:?}");
        assert!(lines[5].starts_with("unknown.json invalid"), "{lines:?}");
    }
}
