//! A body the API cannot read answers 400 (RFC 9110 §15.5.1) with a message in the API's own
//! words: the JSON type it expected (a JSON object with its fields, a string, a number, a whole
//! number, an array...) and the path of the field, never the program's type names (`struct
//! NewMetric`, `i64`, `variant`).

use serde_json::{Value, json};

use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

/// The type names of the program that a message must never show.
const PROGRAM_WORDS: &[&str] = &[
    "struct",
    "enum",
    "variant",
    "tuple",
    "sequence",
    "map",
    "i8",
    "i16",
    "i32",
    "i64",
    "i128",
    "u8",
    "u16",
    "u32",
    "u64",
    "u128",
    "isize",
    "usize",
    "f32",
    "f64",
    "Option",
    "Vec",
    "BTreeMap",
    "String",
    "identifier",
];

/// True for a word such as `NewMetric`: a capital, small letters, then another capital.
fn is_camel_case(word: &str) -> bool {
    let mut chars = word.chars();
    chars.next().is_some_and(char::is_uppercase)
        && word.chars().skip(1).any(char::is_lowercase)
        && word.chars().skip(1).any(char::is_uppercase)
}

fn assert_plain_words(message: &str, what: &str) {
    for word in message.split(|c: char| !c.is_alphanumeric() && c != '_') {
        assert!(
            !PROGRAM_WORDS.contains(&word),
            "{what}: {word:?} in {message:?}"
        );
        assert!(!is_camel_case(word), "{what}: {word:?} in {message:?}");
    }
}

/// A value of another JSON type than `v`.
fn other_type(v: &Value) -> Value {
    match v {
        Value::String(_) => json!(5),
        Value::Number(_) => json!("x"),
        Value::Array(_) | Value::Bool(_) => json!("x"),
        Value::Object(_) => json!([1]),
        Value::Null => json!(true),
    }
}

/// Each JSON endpoint with a body it takes: who calls it, method, path, body.
fn endpoints(id: i64, hash: &str) -> Vec<(&'static str, &'static str, String, Value)> {
    let mut revision = hib(1.0, 2.0, 3.0, 4.0, "because");
    revision["note"] = json!("a note");
    let step = |s: &str| format!("/api/v1/proposals/{id}/{s}");
    vec![
        (
            "root",
            "POST",
            "/api/v1/metrics".into(),
            json!({"key": "k", "name": "N", "description": "", "unit": "%", "owners": ["tomas"], "data_source": "", "review_cadence_months": 6, "tags": ["a"]}),
        ),
        (
            "root",
            "PATCH",
            format!("/api/v1/metrics/{METRIC}"),
            json!({"name": "N", "owners": ["tomas"], "review_cadence_months": 6, "tags": ["a"]}),
        ),
        (
            "tomas",
            "POST",
            "/api/v1/metrics/spare.metric/proposals".into(),
            json!({"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "shades": 3, "unit": "%", "effective_from": "2030-01-01", "rationale": "r"}),
        ),
        ("tomas", "PUT", format!("/api/v1/proposals/{id}"), revision),
        (
            "hana",
            "POST",
            step("comments"),
            json!({"body": "b", "cut": "critical"}),
        ),
        (
            "hana",
            "POST",
            step("reviews"),
            json!({"verdict": "approve", "revision_hash": hash, "comment": "c"}),
        ),
        (
            "odile",
            "POST",
            step("signoff"),
            json!({"revision_hash": hash, "password": "p"}),
        ),
        ("hana", "POST", step("reject"), json!({"reason": "r"})),
        ("tomas", "POST", step("withdraw"), json!({"reason": "r"})),
        (
            "wren",
            "POST",
            "/api/v1/classify".into(),
            json!({"direction": "higher_is_better", "cuts": {"critical": 1}, "shades": 3, "values": [1]}),
        ),
        (
            "wren",
            "POST",
            "/api/v1/evaluate".into(),
            json!({"values": [{"metric": "k", "value": 1}], "as_of": "2030-01-01"}),
        ),
    ]
}

/// Bodies that are not an object at all; each answer names the fields of the object.
fn not_objects(valid: &Value) -> Vec<Value> {
    let n = valid.as_object().unwrap().len();
    vec![
        json!([]),
        json!([1, 2]),
        json!(vec!["x"; n]),
        json!("text"),
        json!(5),
        json!(true),
        json!(null),
    ]
}

/// One field replaced by a value of another type, at every level: (path, body).
fn wrong_types(valid: &Value) -> Vec<(String, Value)> {
    let mut out = Vec::new();
    for (field, v) in valid.as_object().unwrap() {
        let mut body = valid.clone();
        body[field] = other_type(v);
        out.push((field.clone(), body));
        match v {
            Value::Array(items) if !items.is_empty() => {
                let mut body = valid.clone();
                body[field][0] = if items[0].is_object() {
                    json!(["x"])
                } else {
                    other_type(&items[0])
                };
                out.push((format!("{field}[0]"), body));
            }
            Value::Object(members) => {
                let (name, inner) = members.iter().next().unwrap();
                let mut body = valid.clone();
                body[field][name] = other_type(inner);
                out.push((format!("{field}.{name}"), body));
            }
            _ => {}
        }
        if let Some(Value::Object(item)) = v.as_array().and_then(|a| a.first()) {
            for (name, inner) in item {
                let mut body = valid.clone();
                body[field][0][name] = other_type(inner);
                out.push((format!("{field}[0].{name}"), body));
            }
        }
    }
    out
}

on_both_backends! {
    async fn body_errors_say_what_was_expected_in_the_apis_words(app) {
        let team = Team::new(app).await;
        team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "spare.metric", "name": "Spare", "owners": ["tomas"]}))).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        let hash = team.latest_hash(id).await;
        let events = team.app.event_count().await;
        for (who, method, path, valid) in endpoints(id, &hash) {
            let fields: Vec<&String> = valid.as_object().unwrap().keys().collect();
            for body in not_objects(&valid) {
                let (status, answer) = team.call(who, method, &path, Some(body.clone())).await;
                let what = format!("{method} {path} {body}");
                assert_eq!(status, 400, "{what}: {answer}");
                let message = answer["error"]["message"].as_str().unwrap();
                assert!(message.starts_with("the body must be a JSON object with the fields "), "{what}: {message}");
                for field in &fields {
                    assert!(message.contains(field.as_str()), "{what}: {message} names {field}");
                }
                assert_plain_words(message, &what);
            }
            for (field, body) in wrong_types(&valid) {
                let (status, answer) = team.call(who, method, &path, Some(body.clone())).await;
                let what = format!("{method} {path} {body}");
                assert_eq!(status, 400, "{what}: {answer}");
                let message = answer["error"]["message"].as_str().unwrap();
                assert!(message.starts_with(&format!("{field}: expected ")), "{what}: {message}");
                assert!(message.contains(", got "), "{what}: {message}");
                assert_eq!(answer["error"]["fields"][0]["field"], field.as_str(), "{what}: {answer}");
                assert_plain_words(message, &what);
            }
        }
        // Values the API does not know are named in its words too.
        for (who, method, path, body, field) in [
            ("hana", "POST", format!("/api/v1/proposals/{id}/reviews"), json!({"verdict": "applaud", "revision_hash": hash}), "verdict"),
            ("wren", "POST", "/api/v1/classify".to_string(), json!({"direction": "upward", "cuts": {}, "values": []}), "direction"),
            ("root", "POST", "/api/v1/metrics".to_string(), json!({"key": "k", "name": "N", "colour": "red"}), "colour"),
            ("root", "POST", "/api/v1/metrics".to_string(), json!({"key": "k"}), "name"),
        ] {
            let (status, answer) = team.call(who, method, &path, Some(body.clone())).await;
            assert_eq!(status, 400, "{body}: {answer}");
            let message = answer["error"]["message"].as_str().unwrap();
            assert!(message.contains(field), "{body}: {message}");
            assert_eq!(answer["error"]["fields"][0]["field"], field, "{body}: {answer}");
            assert_plain_words(message, &body.to_string());
        }
        // The history upload reads JSON in the same words.
        let r = team.app.http.post(team.app.url(&format!("/api/v1/metrics/{METRIC}/observations")))
            .bearer_auth(team.token_of("tomas")).json(&json!([1, 2])).send().await.unwrap();
        assert_eq!(r.status(), 400);
        let answer: Value = r.json().await.unwrap();
        let reason = answer["error"]["rows"][0]["reason"].as_str().unwrap();
        assert!(reason.contains("got an array"), "{reason}");
        assert_plain_words(reason, "history upload");
        assert_eq!(team.app.event_count().await, events, "nothing was stored");
    }
}

/// The wording itself (`domain::json_errors`), on the reader's own errors.
mod wording {
    use std::collections::BTreeMap;

    use serde::Deserialize;

    use cutpoints::domain::json_errors::describe;

    #[derive(Debug, Deserialize)]
    #[serde(deny_unknown_fields)]
    #[allow(dead_code)]
    struct Body {
        name: String,
        count: Option<i64>,
        cuts: BTreeMap<String, f64>,
        tags: Vec<String>,
        flag: bool,
        mood: Mood,
    }

    #[derive(Debug, Deserialize)]
    #[serde(rename_all = "snake_case")]
    enum Mood {
        Calm,
        Busy,
    }

    fn message(json: &str) -> String {
        describe(&serde_json::from_str::<Body>(json).unwrap_err())
    }

    fn body_with(field: &str, value: &str) -> String {
        let mut fields = BTreeMap::from([
            ("name", r#""n""#),
            ("count", "1"),
            ("cuts", "{}"),
            ("tags", "[]"),
            ("flag", "true"),
            ("mood", r#""calm""#),
        ]);
        fields.insert(field, value);
        let inner: Vec<String> = fields.iter().map(|(k, v)| format!("\"{k}\":{v}")).collect();
        format!("{{{}}}", inner.join(","))
    }

    #[test]
    fn wrong_types_are_named_as_json_types() {
        for (field, value, says) in [
            ("name", "5", "expected a string, got the number 5"),
            (
                "count",
                "1.5",
                "expected a whole number, got the number 1.5",
            ),
            (
                "count",
                r#""7""#,
                r#"expected a whole number, got the string "7""#,
            ),
            ("cuts", "[1]", "expected a JSON object, got an array"),
            (
                "cuts",
                r#"{"a":"x"}"#,
                r#"expected a number, got the string "x""#,
            ),
            (
                "tags",
                r#""a""#,
                r#"expected a JSON array, got the string "a""#,
            ),
            ("tags", "[null]", "expected a string, got null"),
            ("flag", "1", "expected true or false, got the number 1"),
            (
                "mood",
                r#""angry""#,
                r#"unknown value "angry": expected "calm" or "busy""#,
            ),
        ] {
            assert_eq!(message(&body_with(field, value)), says, "{field}: {value}");
        }
    }

    #[test]
    fn an_array_instead_of_an_object_is_named_so() {
        assert_eq!(message("[1, 2]"), "expected a string, got the number 1");
        assert_eq!(message(r#"["n"]"#), "expected a JSON object, got an array");
        assert_eq!(message("5"), "expected a JSON object, got the number 5");
    }

    #[test]
    fn other_messages_are_kept_without_position() {
        assert_eq!(message(r#"{"name": "#), "EOF while parsing a value");
        assert!(message(r#"{"colour": 1}"#).starts_with("unknown field `colour`, expected one of"));
        assert_eq!(message(r#"{"name": "n"}"#), "missing field `cuts`");
    }
}
