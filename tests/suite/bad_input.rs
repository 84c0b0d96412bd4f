//! The catalogue of bad input: each gets a clear JSON error (never a framework's plain text or
//! a 500) and changes nothing. Status codes as RFC 9110 §15 defines them: 400 for a malformed
//! request, 404 for no such resource, 405 for a method the resource does not take, 409 for a
//! conflict with the current state, 413 for content too large, 415 for an unsupported media
//! type.

use serde_json::{Value, json};

use crate::on_both_backends;
use crate::register_api::{admin_and_owner, fleet_metric};

struct Case {
    what: &'static str,
    method: &'static str,
    path: &'static str,
    content_type: &'static str,
    body: Vec<u8>,
    status: u16,
    code: &'static str,
    says: &'static str,
}

fn json_case(
    what: &'static str,
    body: Value,
    status: u16,
    code: &'static str,
    says: &'static str,
) -> Case {
    Case {
        what,
        method: "POST",
        path: "/api/v1/metrics",
        content_type: "application/json",
        body: body.to_string().into_bytes(),
        status,
        code,
        says,
    }
}

fn with(field: &str, value: Value) -> Value {
    let mut m = fleet_metric();
    m["key"] = json!("a.new.metric");
    m[field] = value;
    m
}

fn catalogue() -> Vec<Case> {
    let raw = |what, method, path, content_type, body: &str, status, code, says| Case {
        what,
        method,
        path,
        content_type,
        body: body.as_bytes().to_vec(),
        status,
        code,
        says,
    };
    let mut without_name = with("name", Value::Null);
    without_name.as_object_mut().unwrap().remove("name");
    vec![
        raw(
            "malformed JSON",
            "POST",
            "/api/v1/metrics",
            "application/json",
            r#"{"key": "x", "name": "#,
            400,
            "bad_json",
            "malformed JSON",
        ),
        raw(
            "trailing characters",
            "POST",
            "/api/v1/metrics",
            "application/json",
            r#"{"key": "x", "name": "X"} {"#,
            400,
            "bad_json",
            "trailing characters",
        ),
        raw(
            "empty body",
            "POST",
            "/api/v1/metrics",
            "application/json",
            "",
            400,
            "bad_json",
            "body is empty",
        ),
        raw(
            "not an object",
            "POST",
            "/api/v1/metrics",
            "application/json",
            "[1, 2]",
            400,
            "bad_json",
            "the body must be a JSON object with the fields key, name,",
        ),
        json_case(
            "unknown field",
            with("colour", json!("red")),
            400,
            "bad_json",
            "unknown field `colour`",
        ),
        json_case(
            "missing field",
            without_name,
            400,
            "bad_json",
            "missing field `name`",
        ),
        json_case(
            "wrong type",
            with("name", json!(5)),
            400,
            "bad_json",
            "name: expected a string, got the number 5",
        ),
        json_case(
            "wrong type in a list",
            with("owners", json!(["tomas", 7])),
            400,
            "bad_json",
            "owners[1]: expected a string, got the number 7",
        ),
        json_case(
            "bad metric key",
            with("key", json!("Peak Docks")),
            400,
            "invalid",
            "\"Peak Docks\" is not a metric key",
        ),
        json_case(
            "key too long",
            with("key", json!("k".repeat(65))),
            400,
            "invalid",
            "is not a metric key",
        ),
        json_case(
            "duplicate key",
            fleet_metric(),
            409,
            "conflict",
            "a metric with key \"docks.peak_availability\" already exists",
        ),
        json_case(
            "empty name",
            with("name", json!("  ")),
            400,
            "invalid",
            "name must not be empty",
        ),
        json_case(
            "name too long",
            with("name", json!("n".repeat(201))),
            400,
            "invalid",
            "name is 201 characters long; at most 200",
        ),
        json_case(
            "control character in name",
            with("name", json!("tab\u{0007}bell")),
            400,
            "invalid",
            "control characters",
        ),
        json_case(
            "description too long",
            with("description", json!("d".repeat(10_001))),
            400,
            "invalid",
            "description is 10001 characters long; at most 10000",
        ),
        json_case(
            "data source too long",
            with("data_source", json!("s".repeat(2_001))),
            400,
            "invalid",
            "data_source is 2001 characters long; at most 2000",
        ),
        json_case(
            "cadence zero",
            with("review_cadence_months", json!(0)),
            400,
            "invalid",
            "review_cadence_months must be a whole number from 1 to 120, got 0",
        ),
        json_case(
            "cadence fractional",
            with("review_cadence_months", json!(1.5)),
            400,
            "bad_json",
            "review_cadence_months: expected a whole number, got the number 1.5",
        ),
        json_case(
            "bad tag",
            with("tags", json!(["fleet", "a,b"])),
            400,
            "invalid",
            "tag \"a,b\"",
        ),
        json_case(
            "too many tags",
            with(
                "tags",
                json!((0..21).map(|i| format!("t{i}")).collect::<Vec<_>>()),
            ),
            400,
            "invalid",
            "at most 20 tags",
        ),
        json_case(
            "bad owner name",
            with("owners", json!(["Tomas Ferreira"])),
            400,
            "invalid",
            "is not a username",
        ),
        json_case(
            "unknown owner",
            with("owners", json!(["ghost"])),
            400,
            "invalid",
            "no user named \"ghost\"",
        ),
        raw(
            "wrong content type",
            "POST",
            "/api/v1/metrics",
            "text/plain",
            r#"{"key": "x", "name": "X"}"#,
            415,
            "unsupported_media_type",
            "application/json",
        ),
        raw(
            "form instead of JSON",
            "POST",
            "/api/v1/metrics",
            "application/x-www-form-urlencoded",
            "key=x&name=X",
            415,
            "unsupported_media_type",
            "application/json",
        ),
        Case {
            what: "body too large",
            method: "POST",
            path: "/api/v1/metrics",
            content_type: "application/json",
            body: format!(
                r#"{{"key":"x","name":"X","description":"{}"}}"#,
                "d".repeat(3 * 1024 * 1024)
            )
            .into_bytes(),
            status: 413,
            code: "too_large",
            says: "larger than",
        },
        raw(
            "patch of an unknown field",
            "PATCH",
            "/api/v1/metrics/docks.peak_availability",
            "application/json",
            r#"{"key": "renamed"}"#,
            400,
            "bad_json",
            "unknown field `key`",
        ),
        raw(
            "patch with a wrong type",
            "PATCH",
            "/api/v1/metrics/docks.peak_availability",
            "application/json",
            r#"{"tags": "fleet"}"#,
            400,
            "bad_json",
            "tags: expected a JSON array, got the string \"fleet\"",
        ),
        raw(
            "patch of a missing metric",
            "PATCH",
            "/api/v1/metrics/no.such.metric",
            "application/json",
            r#"{"name": "X"}"#,
            404,
            "not_found",
            "no metric with key \"no.such.metric\"",
        ),
        raw(
            "bad key in the path",
            "PATCH",
            "/api/v1/metrics/Not%20A%20Key",
            "application/json",
            r#"{"name": "X"}"#,
            400,
            "bad_request",
            "is not a metric key",
        ),
        raw(
            "unknown endpoint",
            "POST",
            "/api/v1/nothing-here",
            "application/json",
            "{}",
            404,
            "not_found",
            "no such endpoint",
        ),
        raw(
            "method not allowed",
            "DELETE",
            "/api/v1/metrics/docks.peak_availability",
            "application/json",
            "",
            405,
            "method_not_allowed",
            "does not take that method",
        ),
        // The engine's own rules, through the stateless classify endpoint.
        Case {
            what: "unknown direction",
            path: "/api/v1/classify",
            ..json_case(
                "",
                json!({"direction": "upward", "cuts": {}, "values": [1]}),
                400,
                "invalid",
                "unknown direction \"upward\"",
            )
        },
        Case {
            what: "cuts out of order",
            path: "/api/v1/classify",
            ..json_case(
                "",
                json!({"direction": "higher_is_better", "cuts": {"critical": 50, "intervene": 40, "outperform": 80, "stretch": 90}, "values": [1]}),
                400,
                "invalid",
                "for higher_is_better, intervene (40) must be greater than critical (50)",
            )
        },
        Case {
            what: "cut named for another direction",
            path: "/api/v1/classify",
            ..json_case(
                "",
                json!({"direction": "target_band", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "values": [1]}),
                400,
                "invalid",
                "unknown cut point \"critical\" for target_band",
            )
        },
        Case {
            what: "shades out of range",
            path: "/api/v1/classify",
            ..json_case(
                "",
                json!({"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "shades": 9, "values": [1]}),
                400,
                "invalid",
                "shades must be a whole number from 2 to 5, got 9",
            )
        },
        Case {
            what: "overflowing span",
            path: "/api/v1/classify",
            ..json_case(
                "",
                json!({"direction": "higher_is_better", "cuts": {"critical": -1e308, "intervene": 0, "outperform": 1, "stretch": 1e308}, "values": [1]}),
                400,
                "invalid",
                "too wide",
            )
        },
        raw(
            "non-finite number",
            "POST",
            "/api/v1/classify",
            "application/json",
            r#"{"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 1e999}, "values": [1]}"#,
            400,
            "bad_json",
            "number out of range",
        ),
        raw(
            "NaN is not JSON",
            "POST",
            "/api/v1/classify",
            "application/json",
            r#"{"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "values": [NaN]}"#,
            400,
            "bad_json",
            "malformed JSON: expected value",
        ),
        raw(
            "a value that is text",
            "POST",
            "/api/v1/classify",
            "application/json",
            r#"{"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "values": ["7"]}"#,
            400,
            "bad_json",
            "values[0]: expected a number, got the string \"7\"",
        ),
    ]
}

on_both_backends! {
    async fn every_bad_request_gets_a_json_error_and_changes_nothing(app) {
        let admin = admin_and_owner(&app).await;
        let r = app.http.post(app.url("/api/v1/metrics")).bearer_auth(&admin).json(&fleet_metric()).send().await.unwrap();
        assert_eq!(r.status(), 201);
        let events_before = app.event_count().await;
        let metric_before: Value = app.http.get(app.url("/api/v1/metrics/docks.peak_availability"))
            .bearer_auth(&admin).send().await.unwrap().json().await.unwrap();

        for case in catalogue() {
            let method = reqwest::Method::from_bytes(case.method.as_bytes()).unwrap();
            let r = app.http.request(method, app.url(case.path))
                .bearer_auth(&admin)
                .header("content-type", case.content_type)
                .body(case.body.clone())
                .send().await.unwrap();
            let status = r.status().as_u16();
            let content_type = r.headers().get("content-type").map(|v| v.to_str().unwrap().to_string());
            let text = r.text().await.unwrap();
            assert_eq!(status, case.status, "{}: {text}", case.what);
            assert_eq!(content_type.as_deref(), Some("application/json"), "{}", case.what);
            let body: Value = serde_json::from_str(&text).unwrap_or_else(|_| panic!("{}: not JSON: {text}", case.what));
            assert_eq!(body["error"]["code"], case.code, "{}: {text}", case.what);
            let message = body["error"]["message"].as_str().unwrap();
            assert!(message.contains(case.says), "{}: {message:?} lacks {:?}", case.what, case.says);
        }

        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 1);
        assert_eq!(app.event_count().await, events_before, "no bad request wrote an event");
        let metric_after: Value = app.http.get(app.url("/api/v1/metrics/docks.peak_availability"))
            .bearer_auth(&admin).send().await.unwrap().json().await.unwrap();
        assert_eq!(metric_before, metric_after);
    }

    async fn bad_forms_are_shown_again_with_the_message_beside_the_field(app) {
        admin_and_owner(&app).await;
        let admin = app.signed_in("root").await;
        let r = admin.post_form("/metrics/new", "/metrics/new", &[
            ("key", "Bad Key"), ("name", ""), ("description", "kept as typed"),
            ("review_cadence_months", "often"), ("owners", "ghost"), ("tags", ""),
        ]).await;
        assert_eq!(r.status(), 400);
        let html = r.text().await.unwrap();
        for (id, says) in [
            ("key-error", "is not a metric key"),
            ("name-error", "name must not be empty"),
            ("cadence-error", "must be a whole number of months"),
        ] {
            let at = html.find(&format!("id=\"{id}\"")).unwrap_or_else(|| panic!("{id} in {html}"));
            assert!(html[at..at + 300].contains(says), "{id}");
        }
        assert!(html.contains("kept as typed"), "what was typed is kept");
        assert!(html.contains("aria-invalid=\"true\""));
        // An unknown owner is caught by the store and shown beside the owners field.
        let r = admin.post_form("/metrics/new", "/metrics/new", &[("key", "ok.key"), ("name", "Fine"), ("owners", "ghost")]).await;
        assert_eq!(r.status(), 400);
        assert!(r.text().await.unwrap().contains("id=\"owners-error\">no user named &quot;ghost&quot;"));
        let r = admin.post_form("/metrics/new", "/metrics/new", &[("key", "ok.key"), ("name", "n".repeat(201).as_str())]).await;
        assert_eq!(r.status(), 400);
        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 0);
    }
}
