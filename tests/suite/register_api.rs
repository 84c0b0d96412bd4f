//! The metric register through `/api/v1/metrics`.

use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::helpers::TestApp;
use crate::on_both_backends;

/// An admin's write token and an owner, ready to add metrics.
pub async fn admin_and_owner(app: &TestApp) -> String {
    app.add_user("root", "admin").await;
    app.add_user("tomas", "owner").await;
    app.token("root", Scope::Write).await
}

pub fn fleet_metric() -> Value {
    json!({
        "key": "docks.peak_availability",
        "name": "Peak dock availability",
        "description": "Share of docks with a bike at weekday peaks.",
        "unit": "%",
        "owners": ["tomas"],
        "data_source": "dock sensors",
        "review_cadence_months": 6,
        "tags": ["Fleet", "service", "fleet"]
    })
}

async fn post(app: &TestApp, token: &str, body: &Value) -> reqwest::Response {
    app.http
        .post(app.url("/api/v1/metrics"))
        .bearer_auth(token)
        .json(body)
        .send()
        .await
        .unwrap()
}

async fn get_json(app: &TestApp, token: &str, path: &str) -> (u16, Value) {
    let r = app
        .http
        .get(app.url(path))
        .bearer_auth(token)
        .send()
        .await
        .unwrap();
    let status = r.status().as_u16();
    (status, r.json().await.unwrap())
}

on_both_backends! {
    async fn admins_add_metrics_and_everyone_signed_in_reads_them(app) {
        let admin = admin_and_owner(&app).await;
        let r = post(&app, &admin, &fleet_metric()).await;
        assert_eq!(r.status(), 201);
        assert_eq!(r.headers()["location"], "/api/v1/metrics/docks.peak_availability");
        let created: Value = r.json().await.unwrap();
        assert_eq!(created["key"], "docks.peak_availability");
        assert_eq!(created["owners"], json!([{"username": "tomas", "display_name": "tomas (display)"}]));
        // Tags are trimmed, lower-cased and de-duplicated in order.
        assert_eq!(created["tags"], json!(["fleet", "service"]));
        assert_eq!(created["review_cadence_months"], 6);
        let created_at = created["created_at"].as_str().unwrap();
        assert_eq!(created_at.len(), "2026-03-01T09:30:00.000000Z".len(), "{created_at}");
        assert!(created_at.ends_with('Z'));

        app.add_user("wren", "viewer").await;
        let viewer = app.token("wren", Scope::Read).await;
        let (status, one) = get_json(&app, &viewer, "/api/v1/metrics/docks.peak_availability").await;
        assert_eq!(status, 200);
        assert_eq!(one["name"], "Peak dock availability");
        assert_eq!(one["version_in_force"], Value::Null);
        let (status, missing) = get_json(&app, &viewer, "/api/v1/metrics/no.such.metric").await;
        assert_eq!(status, 404);
        assert_eq!(missing["error"]["code"], "not_found");

        // The creation is one event with the whole metric as "after".
        let events = app.events().await;
        let e = events.iter().find(|e| e.event.action == "metric.created").unwrap();
        assert_eq!(e.event.actor, "root");
        assert_eq!(e.event.subject, "metric:docks.peak_availability");
        assert_eq!(e.event.payload["after"]["owners"], json!(["tomas"]));
        assert_eq!(e.event.payload["after"]["unit"], "%");
    }

    async fn only_admins_add_metrics(app) {
        admin_and_owner(&app).await;
        app.add_user("hana", "reviewer,signatory,owner,auditor").await;
        let token = app.token("hana", Scope::Write).await;
        let r = post(&app, &token, &fleet_metric()).await;
        assert_eq!(r.status(), 403);
        let body: Value = r.json().await.unwrap();
        assert_eq!(body["error"]["code"], "forbidden");
        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 0);
    }

    async fn owners_must_exist_be_active_and_hold_the_owner_role(app) {
        let admin = admin_and_owner(&app).await;
        app.add_user("hana", "reviewer").await;
        app.add_user("old", "owner").await;
        cutpoints::ops::users::set_active(&app.store, cutpoints::ops::users::By::Operator, "old", false).await.unwrap();
        for (owner, message) in [
            ("ghost", "no user named \"ghost\""),
            ("hana", "\"hana\" does not hold the owner role"),
            ("old", "\"old\" is deactivated"),
        ] {
            let mut body = fleet_metric();
            body["owners"] = json!(["tomas", owner]);
            let r = post(&app, &admin, &body).await;
            assert_eq!(r.status(), 400, "{owner}");
            let err: Value = r.json().await.unwrap();
            assert_eq!(err["error"]["code"], "invalid");
            assert_eq!(err["error"]["fields"][0]["field"], "owners");
            assert!(err["error"]["message"].as_str().unwrap().contains(message), "{err}");
        }
        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 0);
    }

    async fn the_register_searches_by_key_name_tag_and_owner_and_pages(app) {
        let admin = admin_and_owner(&app).await;
        app.add_user("priya", "owner").await;
        for i in 0..30 {
            let owner = if i % 3 == 0 { "priya" } else { "tomas" };
            let tag = if i % 2 == 0 { "even" } else { "odd" };
            let body = json!({
                "key": format!("m{i:02}.value"),
                "name": format!("Metric number {i}"),
                "owners": [owner],
                "tags": [tag, "all"],
            });
            assert_eq!(post(&app, &admin, &body).await.status(), 201);
        }
        let page = |q: &str| {
            let path = format!("/api/v1/metrics?{q}");
            let app = &app;
            let admin = admin.clone();
            async move { get_json(app, &admin, &path).await }
        };
        let (status, first) = page("").await;
        assert_eq!(status, 200);
        assert_eq!(first["total"], 30);
        assert_eq!(first["per_page"], 25);
        assert_eq!(first["metrics"].as_array().unwrap().len(), 25);
        assert_eq!(first["metrics"][0]["key"], "m00.value");
        let (_, second) = page("page=2").await;
        assert_eq!(second["metrics"].as_array().unwrap().len(), 5);
        assert_eq!(second["metrics"][0]["key"], "m25.value");
        let (_, small) = page("per_page=7&page=5").await;
        assert_eq!(small["metrics"].as_array().unwrap().len(), 2);

        // Text matches key, name or tag, case-insensitively.
        let (_, by_key) = page("q=M1").await;
        assert_eq!(by_key["total"], 10);
        let (_, by_name) = page("q=number%202").await;
        assert_eq!(by_name["total"], 11); // 2, 20..29
        let (_, by_tag_text) = page("q=ODD").await;
        assert_eq!(by_tag_text["total"], 15);
        let (_, by_tag) = page("tag=even").await;
        assert_eq!(by_tag["total"], 15);
        let (_, by_owner) = page("owner=priya").await;
        assert_eq!(by_owner["total"], 10);
        let (_, both) = page("owner=priya&tag=even").await;
        assert_eq!(both["total"], 5);
        // LIKE wildcards in the text are taken literally.
        let (_, wild) = page("q=%25").await;
        assert_eq!(wild["total"], 0);
        let (_, under) = page("q=_").await;
        assert_eq!(under["total"], 0);
        for bad in ["page=0", "per_page=101", "page=x", "colour=red"] {
            let (status, body) = page(bad).await;
            assert_eq!(status, 400, "{bad}");
            assert_eq!(body["error"]["code"], "bad_request", "{bad}");
        }
    }

    async fn edits_change_only_what_they_name_and_record_before_and_after(app) {
        let admin = admin_and_owner(&app).await;
        assert_eq!(post(&app, &admin, &fleet_metric()).await.status(), 201);
        let tomas = app.token("tomas", Scope::Write).await;
        let patch = |token: &str, body: Value| {
            let req = app
                .http
                .patch(app.url("/api/v1/metrics/docks.peak_availability"))
                .bearer_auth(token.to_string())
                .json(&body);
            async move { req.send().await.unwrap() }
        };
        let r = patch(&tomas, json!({"description": "Weekday peaks only.", "review_cadence_months": null})).await;
        assert_eq!(r.status(), 200);
        let m: Value = r.json().await.unwrap();
        assert_eq!(m["description"], "Weekday peaks only.");
        assert_eq!(m["review_cadence_months"], Value::Null);
        assert_eq!(m["name"], "Peak dock availability");
        assert_eq!(m["tags"], json!(["fleet", "service"]));
        assert_ne!(m["updated_at"], m["created_at"]);

        let events = app.events().await;
        let e = events.iter().find(|e| e.event.action == "metric.edited").unwrap();
        assert_eq!(e.event.actor, "tomas");
        assert_eq!(
            e.event.payload,
            json!({
                "before": {"description": "Share of docks with a bike at weekday peaks.", "review_cadence_months": 6},
                "after": {"description": "Weekday peaks only.", "review_cadence_months": null}
            })
        );
        // An edit that changes nothing records nothing.
        let before = app.event_count().await;
        assert_eq!(patch(&tomas, json!({"name": "Peak dock availability"})).await.status(), 200);
        assert_eq!(app.event_count().await, before);

        // Owners may not change who owns the metric; admins may.
        assert_eq!(patch(&tomas, json!({"owners": ["tomas", "root"]})).await.status(), 403);
        app.add_user("priya", "owner").await;
        let r = patch(&admin, json!({"owners": ["priya"], "tags": ["members"]})).await;
        assert_eq!(r.status(), 200);
        let m: Value = r.json().await.unwrap();
        assert_eq!(m["owners"][0]["username"], "priya");
        assert_eq!(m["tags"], json!(["members"]));
        // Tomas no longer owns it, so he cannot edit it.
        assert_eq!(patch(&tomas, json!({"name": "x"})).await.status(), 403);
        // Nor can a reviewer.
        app.add_user("hana", "reviewer").await;
        let hana = app.token("hana", Scope::Write).await;
        assert_eq!(patch(&hana, json!({"name": "x"})).await.status(), 403);
    }

    async fn the_engine_answers_over_http(app) {
        app.add_user("wren", "viewer").await;
        let token = app.token("wren", Scope::Read).await;
        let before = app.event_count().await;
        let r = app.http.post(app.url("/api/v1/classify")).bearer_auth(&token)
            .json(&json!({"direction": "lower_is_better", "cuts": {"critical": 40, "intervene": 30, "outperform": 20, "stretch": 10}, "values": [35, null, 5]}))
            .send().await.unwrap();
        assert_eq!(r.status(), 200);
        let body: Value = r.json().await.unwrap();
        assert_eq!(body["results"][0], json!({"value": 35.0, "zone": "intervene", "severity": 0.5, "shade": 2, "signal": -2}));
        assert_eq!(body["results"][1]["zone"], "no_data");
        assert_eq!(body["results"][2]["zone"], "stretch");
        // Nothing is stored by classifying.
        assert_eq!(app.event_count().await, before);
    }
}
