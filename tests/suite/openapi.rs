//! The OpenAPI 3.1 description: served as committed, valid by a reference validator (Python's
//! `openapi-spec-validator`), every described operation served, and real responses valid
//! against the schemas it declares for them (Python's `jsonschema`, JSON Schema 2020-12).

use std::process::Command;

use serde_json::{Value, json};

use crate::helpers::missing_prerequisite;
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

const COMMITTED: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/docs/openapi.json");

/// Whether python3 can import `module`.
fn python_has(module: &str) -> bool {
    Command::new("python3")
        .args(["-c", &format!("import {module}")])
        .output()
        .is_ok_and(|o| o.status.success())
}

/// Runs a Python program with arguments; its standard output.
fn python(program: &str, args: &[&str]) -> String {
    let out = Command::new("python3")
        .arg("-c")
        .arg(program)
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

#[test]
fn the_committed_description_is_the_generated_one() {
    let committed = std::fs::read_to_string(COMMITTED).expect("docs/openapi.json exists");
    assert!(
        committed == cutpoints::web::api::openapi::document_text(),
        "docs/openapi.json is stale: regenerate it with `cargo run -- openapi > docs/openapi.json`"
    );
}

#[test]
fn the_description_is_valid_openapi_3_1() {
    let doc: Value = serde_json::from_str(&std::fs::read_to_string(COMMITTED).unwrap()).unwrap();
    assert_eq!(doc["openapi"], "3.1.0");
    if !python_has("openapi_spec_validator") {
        missing_prerequisite("python3 with openapi-spec-validator (reference OpenAPI validator)");
        return;
    }
    // openapi-spec-validator picks the OpenAPI 3.1 rules from the document's version.
    let program = "import json, sys
from openapi_spec_validator import validate
from openapi_spec_validator.validation.exceptions import OpenAPIValidationError
try:
    validate(json.load(open(sys.argv[1])))
    print('valid')
except OpenAPIValidationError as e:
    print('invalid:', e)
";
    assert_eq!(python(program, &[COMMITTED]).trim(), "valid");
    // The validator is not vacuous: the same document with an operation that lacks its
    // responses is refused.
    let mut broken = doc.clone();
    broken["paths"]["/api/v1/keys"]["get"]
        .as_object_mut()
        .unwrap()
        .remove("responses");
    broken["paths"]["/api/v1/keys"]["get"]["parameters"] = json!([{"name": "x"}]);
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("broken.json");
    std::fs::write(&path, serde_json::to_vec(&broken).unwrap()).unwrap();
    assert!(python(program, &[path.to_str().unwrap()]).starts_with("invalid"));
}

#[test]
fn every_schema_describes_its_fields() {
    // A type that describes itself names its fields; an object schema with none is a stand-in
    // that any answer would satisfy.
    let doc: Value = serde_json::from_str(&std::fs::read_to_string(COMMITTED).unwrap()).unwrap();
    let empty: Vec<&String> = doc["components"]["schemas"]
        .as_object()
        .unwrap()
        .iter()
        .filter(|(_, schema)| {
            ["properties", "allOf", "oneOf", "anyOf", "enum", "items"]
                .iter()
                .all(|k| schema.get(k).is_none())
                && schema.get("type").is_none_or(|t| t == "object")
        })
        .map(|(name, _)| name)
        .collect();
    assert!(empty.is_empty(), "schemas without fields: {empty:?}");
}

/// Every path and method the description names, with its placeholders filled in.
fn operations(doc: &Value) -> Vec<(String, String)> {
    let mut out = Vec::new();
    for (path, item) in doc["paths"].as_object().unwrap() {
        for method in item.as_object().unwrap().keys() {
            let concrete = path.replace("{key}", METRIC).replace("{id}", "1");
            out.push((method.to_uppercase(), concrete));
        }
    }
    out
}

on_both_backends! {
    async fn the_description_is_served_without_credentials_and_every_operation_exists(app) {
        let r = app.http.get(app.url("/api/v1/openapi.json")).send().await.unwrap();
        assert_eq!(r.status(), 200);
        assert_eq!(r.headers()["content-type"], "application/json");
        let served = r.text().await.unwrap();
        assert_eq!(served, std::fs::read_to_string(COMMITTED).unwrap(), "served = committed");
        let doc: Value = serde_json::from_str(&served).unwrap();
        let ops = operations(&doc);
        assert!(ops.len() >= 30, "{ops:?}");
        for (method, path) in ops {
            let r = app
                .http
                .request(reqwest::Method::from_bytes(method.as_bytes()).unwrap(), app.url(&path))
                .send()
                .await
                .unwrap();
            let status = r.status().as_u16();
            let body = r.text().await.unwrap();
            // Served: anything but the API's "no such endpoint" and "no such method".
            assert!(!body.contains("no such endpoint"), "{method} {path} is described but not served");
            assert_ne!(status, 405, "{method} {path}");
            if path != "/api/v1/openapi.json" {
                assert!(status == 401 || status == 403, "{method} {path} without a credential: {status} {body}");
            }
        }
    }

    async fn real_responses_match_the_schemas_the_description_declares(app) {
        let doc: Value = serde_json::from_str(&std::fs::read_to_string(COMMITTED).unwrap()).unwrap();
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.5, "v1")).await;
        team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "fleet.rides", "name": "Rides", "owners": ["tomas"]}))).await;
        let (_, p) = team.call("tomas", "POST", "/api/v1/metrics/fleet.rides/proposals", Some(json!({"direction": "target_band", "cuts": {"critical_low": 1.5, "intervene_low": 2.5, "intervene_high": 6, "critical_high": 8}, "rationale": "band"}))).await;
        let band = p["id"].as_i64().unwrap();
        team.act("tomas", band, "submit", None).await;
        team.sign("odile", band).await;
        team.approve("hana", band).await;
        let (_, open) = team.propose("tomas", hib(55.0, 70.0, 80.0, 90.5, "v2 in draft")).await;
        let open = open["id"].as_i64().unwrap();

        // (described path, method, what was called, body): each answer is checked against the
        // schema the description gives for its path, method and status.
        let calls: Vec<(&str, &str, String, Option<Value>)> = vec![
            ("/api/v1/me", "get", "/api/v1/me".into(), None),
            ("/api/v1/metrics", "get", "/api/v1/metrics".into(), None),
            ("/api/v1/metrics", "get", "/api/v1/metrics?page=0".into(), None),
            ("/api/v1/metrics/{key}", "get", format!("/api/v1/metrics/{METRIC}"), None),
            ("/api/v1/metrics/{key}", "get", "/api/v1/metrics/no.such".into(), None),
            ("/api/v1/metrics/{key}", "patch", format!("/api/v1/metrics/{METRIC}"), Some(json!({"description": "Share of docks free at the peak hour"}))),
            ("/api/v1/metrics/{key}/history", "get", format!("/api/v1/metrics/{METRIC}/history"), None),
            ("/api/v1/proposals/{id}", "get", format!("/api/v1/proposals/{open}"), None),
            ("/api/v1/metrics/{key}/proposals", "post", format!("/api/v1/metrics/{METRIC}/proposals"), Some(json!({"direction": "sideways"}))),
            ("/api/v1/inbox", "get", "/api/v1/inbox".into(), None),
            ("/api/v1/classify", "post", "/api/v1/classify".into(), Some(json!({"direction": "target_band", "cuts": {"critical_low": 1, "intervene_low": 2, "intervene_high": 6, "critical_high": 8}, "values": [0.5, 2, 4, 7, null]}))),
            ("/api/v1/classify", "post", "/api/v1/classify".into(), Some(json!({"direction": "upwards", "cuts": {}, "values": []}))),
            ("/api/v1/published", "get", "/api/v1/published".into(), None),
            ("/api/v1/published", "get", "/api/v1/published?as_of=2001-01-01".into(), None),
            ("/api/v1/published", "get", "/api/v1/published?as_of=yesterday".into(), None),
            ("/api/v1/published/{key}", "get", "/api/v1/published/fleet.rides".into(), None),
            ("/api/v1/published/changes", "get", "/api/v1/published/changes?from=0&to=2".into(), None),
            ("/api/v1/keys", "get", "/api/v1/keys".into(), None),
            ("/api/v1/evaluate", "post", "/api/v1/evaluate".into(), Some(json!({"values": [
                {"metric": METRIC, "value": 75.5},
                {"metric": "fleet.rides", "value": 9},
                {"metric": METRIC, "value": null},
                {"metric": "no.such", "value": 1},
            ]}))),
            ("/api/v1/audit", "get", "/api/v1/audit?limit=5".into(), None),
            ("/api/v1/audit/verify", "get", "/api/v1/audit/verify".into(), None),
            ("/api/v1/audit/exceptions", "get", "/api/v1/audit/exceptions".into(), None),
            ("/api/v1/audit/as-of", "get", "/api/v1/audit/as-of".into(), None),
            ("/api/v1/audit/metrics/{key}", "get", format!("/api/v1/audit/metrics/{METRIC}"), None),
            ("/api/v1/metrics/{key}/observations", "post", format!("/api/v1/metrics/{METRIC}/observations"), Some(json!({"observations": [
                {"period_start": "2026-01-05", "value": 72.5}, {"period_start": "2026-01-12", "value": 68}, {"period_start": "2026-01-19", "value": 81},
            ]}))),
            ("/api/v1/metrics/{key}/observations", "post", format!("/api/v1/metrics/{METRIC}/observations"), Some(json!({"observations": [{"period_start": "soon", "value": 1}]}))),
            ("/api/v1/metrics/{key}/observations", "get", format!("/api/v1/metrics/{METRIC}/observations"), None),
            ("/api/v1/metrics/{key}/evidence", "get", format!("/api/v1/metrics/{METRIC}/evidence"), None),
            ("/api/v1/metrics/{key}/evidence", "get", "/api/v1/metrics/fleet.rides/evidence".into(), None),
            ("/api/v1/proposals/{id}/backtest", "get", format!("/api/v1/proposals/{open}/backtest"), None),
            ("/api/v1/metrics/{key}/versions/{number}/backtest", "get", format!("/api/v1/metrics/{METRIC}/versions/1/backtest"), None),
            ("/api/v1/metrics/{key}/versions/{number}/backtest", "get", format!("/api/v1/metrics/{METRIC}/versions/7/backtest"), None),
        ];
        let mut cases = Vec::new();
        let mut statuses = Vec::new();
        for (described, method, path, body) in calls {
            let (status, answer) = team.call("root", &method.to_uppercase(), &path, body).await;
            let schema = doc["paths"][described][method]["responses"][status.to_string()]["content"]["application/json"]["schema"].clone();
            assert!(schema.is_object(), "{method} {path} answered {status}, which the description does not declare: {answer}");
            statuses.push(status);
            cases.push(json!({"name": format!("{method} {path} {status}"), "schema": schema, "instance": answer}));
        }
        // Errors as well as successes were checked.
        assert!(statuses.contains(&400) && statuses.contains(&404) && statuses.contains(&200), "{statuses:?}");
        // The check is not vacuous: answers altered against their schema are refused.
        let mut zone = cases[10].clone();
        zone["name"] = json!("altered zone");
        zone["instance"]["results"][0]["zone"] = json!("purple");
        let mut set = cases[12].clone();
        set["name"] = json!("altered set");
        set["instance"]["meta"]["digest"] = json!("md5:0");
        // An answer missing a field its type always has is refused too.
        let mut proposal = cases[7].clone();
        proposal["name"] = json!("proposal without still_needed");
        proposal["instance"].as_object_mut().unwrap().remove("still_needed");
        let mut inbox = cases[9].clone();
        inbox["name"] = json!("inbox without to_sign");
        inbox["instance"].as_object_mut().unwrap().remove("to_sign");
        let mut error = cases[4].clone();
        error["name"] = json!("error without code");
        error["instance"]["error"].as_object_mut().unwrap().remove("code");
        let altered = [zone, set, proposal, inbox, error];
        let altered_count = altered.len();
        cases.extend(altered);
        if !python_has("jsonschema") {
            missing_prerequisite("python3 with the jsonschema package (reference JSON Schema validator)");
            return;
        }
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("cases.json");
        std::fs::write(&path, serde_json::to_vec(&json!({"doc": doc, "cases": cases})).unwrap()).unwrap();
        // Each schema is checked as a JSON Schema 2020-12 document whose root is the whole
        // description, so its references to #/components/schemas/... resolve.
        let program = "import json, sys, jsonschema
data = json.load(open(sys.argv[1]))
for case in data['cases']:
    root = dict(data['doc'])
    root.update(case['schema'])
    errors = sorted(jsonschema.Draft202012Validator(root).iter_errors(case['instance']), key=str)
    print(case['name'], '=>', 'valid' if not errors else 'invalid: ' + errors[0].message)
";
        let out = python(program, &[path.to_str().unwrap()]);
        let lines: Vec<&str> = out.lines().collect();
        let (real, altered) = lines.split_at(lines.len() - altered_count);
        for line in real {
            assert!(line.ends_with("=> valid"), "{line}");
        }
        for line in altered {
            assert!(line.contains("=> invalid"), "{line}");
        }
    }
}
