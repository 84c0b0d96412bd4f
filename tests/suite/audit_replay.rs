//! What is served is bound to the record: rows changed, added or deleted behind the
//! application's back are found by replaying the event record against the tables, and the
//! publisher will not sign a version that does not match the event that approved it.

use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::cli::cutpoints;
use crate::helpers::{Backend, TestApp};
use crate::workflow_support::{METRIC, Team, hib};

async fn exec(app: &TestApp, sql: &str) {
    app.exec(sql).await;
}

async fn refused(app: &TestApp, sql: &str) -> String {
    sqlx::query(sqlx::AssertSqlSafe(sql.to_string()))
        .execute(app.store.pool())
        .await
        .expect_err(sql)
        .to_string()
}

/// The tables whose rows are written once, and their triggers.
const WRITTEN_ONCE: [&str; 5] = ["revisions", "reviews", "signoffs", "comments", "versions"];

/// What an attacker with the database owner's rights does first.
async fn drop_guards(app: &TestApp) {
    app.drop_change_guards(&WRITTEN_ONCE).await;
    app.drop_change_guards(&["events"]).await;
}

/// A register built through the real workflow: a metric with an agreed version (40, 60,
/// 80, 90), an open proposal with a revision, a comment, an approval and a sign-off, a token,
/// and a history upload.
async fn register(app: TestApp) -> (Team, i64) {
    let team = Team::new(app).await;
    team.agree(hib(40.0, 60.0, 80.0, 90.0, "agreed")).await;
    let (status, p) = team
        .propose("tomas", hib(35.0, 60.0, 80.0, 90.0, "lower critical"))
        .await;
    assert_eq!(status, 201, "{p}");
    let id = p["id"].as_i64().unwrap();
    let (status, body) = team
        .call(
            "tomas",
            "PUT",
            &format!("/api/v1/proposals/{id}"),
            Some(json!({
                "direction": "higher_is_better",
                "cuts": {"critical": 36.0, "intervene": 60.0, "outperform": 80.0, "stretch": 90.0},
                "rationale": "lower critical, a little less",
                "note": "second thoughts"
            })),
        )
        .await;
    assert_eq!(status, 200, "{body}");
    assert_eq!(team.act("tomas", id, "submit", None).await.0, 200);
    assert_eq!(
        team.act(
            "wren",
            id,
            "comments",
            Some(json!({"body": "why?", "cut": "critical"}))
        )
        .await
        .0,
        201
    );
    assert_eq!(team.sign("odile", id).await.0, 200);
    assert_eq!(team.approve("emil", id).await.0, 200);
    // A second proposal, in review with one approval (policy asks for two).
    let (status, _) = team.call("root", "GET", "/api/v1/me", None).await;
    assert_eq!(status, 200);
    team.app.token("wren", Scope::Read).await;
    let r = team
        .app
        .http
        .post(
            team.app
                .url(&format!("/api/v1/metrics/{METRIC}/observations")),
        )
        .bearer_auth(team.token_of("tomas"))
        .header("content-type", "text/csv")
        .body("period_start,value\n2026-01-05,61\n2026-01-12,59.5\n2026-01-19,72\n")
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    (team, id)
}

/// Runs `cutpoints audit verify` and returns (exit code, stdout, stderr).
fn verify_cli(app: &TestApp) -> (i32, String, String) {
    let out = cutpoints(&["audit", "verify", "--database-url", app.store_url.as_str()]);
    (
        out.status.code().unwrap(),
        String::from_utf8_lossy(&out.stdout).to_string(),
        String::from_utf8_lossy(&out.stderr).to_string(),
    )
}

/// Checks that the command line, the API and the Audit page all name `expected` as the first
/// difference.
async fn caught(team: &Team, what: &str, expected: &str) {
    let (code, out, err) = verify_cli(&team.app);
    assert_eq!(code, 1, "{what}: exit 1 ({out}{err})");
    assert!(out.is_empty(), "{what}: {out}");
    assert!(
        err.contains(&format!(
            "the tables do not match the event record: {expected}"
        )),
        "{what}: expected {expected:?} first in: {err}"
    );
    let (status, v) = team.call("root", "GET", "/api/v1/audit/verify", None).await;
    assert_eq!(status, 200, "{v}");
    assert_eq!(v["ok"], false, "{what}: {v}");
    assert!(
        v["differences"][0].as_str().unwrap().contains(expected),
        "{what}: {v}"
    );
    let browser = team.app.signed_in("root").await;
    let (status, page) = browser.get_text("/audit").await;
    assert_eq!(status, 200);
    let shown = expected.replace('"', "&quot;").replace('\'', "&#x27;");
    assert!(
        page.contains("does not verify") && page.contains(&shown),
        "{what}: {page}"
    );
}

crate::on_both_backends! {
    async fn a_register_built_through_the_workflow_replays_cleanly(app) {
        let (team, _) = register(app).await;
        let (code, out, err) = verify_cli(&team.app);
        assert_eq!(code, 0, "{err}");
        assert!(out.starts_with("ok "), "{out}");
        let (_, v) = team.call("root", "GET", "/api/v1/audit/verify", None).await;
        assert_eq!(v["ok"], true, "{v}");
        assert_eq!(v["difference_count"], 0);
    }

    async fn rows_written_once_refuse_update_and_delete(app) {
        let (team, _) = register(app).await;
        for table in WRITTEN_ONCE {
            let e = refused(&team.app, &format!("UPDATE {table} SET proposal_id = proposal_id")).await;
            assert!(e.contains("written once"), "{table}: {e}");
            let e = refused(&team.app, &format!("DELETE FROM {table}")).await;
            assert!(e.contains("written once"), "{table}: {e}");
            if team.app.backend == Backend::Postgres {
                let e = refused(&team.app, &format!("TRUNCATE {table} CASCADE")).await;
                assert!(e.contains("written once"), "{table}: {e}");
            }
        }
    }

    async fn a_changed_cut_point_is_named_and_never_published(app) {
        let (team, _) = register(app).await;
        let (_, before) = team.call("wren", "GET", "/api/v1/published", None).await;
        assert_eq!(before["set"][METRIC]["cuts"]["critical"], 36.0);
        drop_guards(&team.app).await;
        exec(&team.app, "UPDATE versions SET cut_1 = 5 WHERE number = 2").await;
        let seq: i64 = sqlx::query_scalar("SELECT approval_seq FROM versions WHERE number = 2")
            .fetch_one(team.app.store.pool()).await.unwrap();
        caught(&team, "changed cut", &format!(
            "versions row (metric {METRIC}, version 2): cut_1 is 5.0 in the database, but 36.0 by event {seq} (version.approved)"
        )).await;

        // The publisher: a fresh instance on the same database (nothing cached) leaves the
        // metric out, says so in meta.withheld, and signs only what matches the record.
        let signer = cutpoints::publish::signing::load_or_create(&team.app.store, &team.app.key_file).await.unwrap();
        let publisher = cutpoints::publish::Publisher::new(signer);
        let set = publisher.current(&team.app.store).await.unwrap();
        let doc: Value = serde_json::from_slice(&set.json).unwrap();
        assert!(doc["set"].get(METRIC).is_none(), "{doc}");
        let withheld = &doc["meta"]["withheld"][0];
        assert_eq!((withheld["metric"].as_str(), withheld["version"].as_i64()), (Some(METRIC), Some(2)));
        assert!(withheld["reason"].as_str().unwrap().contains("do not hash to the revision hash"), "{withheld}");
        assert_eq!(doc["meta"]["metrics_without_version"], json!([]), "withheld is not the same as without a version");
        // One metric of a past set is checked the same way.
        let one = publisher.at(&team.app.store, None, None, Some(METRIC)).await.unwrap();
        let one: Value = serde_json::from_slice(&one.json).unwrap();
        assert!(one["set"].get(METRIC).is_none() && one["meta"]["withheld"][0]["version"] == 2, "{one}");
        // The document still validates against the published JSON Schema (Python's
        // jsonschema, Draft 2020-12), which describes meta.withheld.
        assert!(crate::published_schema::validates(&doc), "{doc}");
    }

    async fn every_other_tamper_is_named_by_its_table_and_row(app) {
        let backend = app.backend;
        drop(app);
        // (what the attacker did, the SQL, the first difference named)
        let cases: Vec<(&str, Vec<String>, String)> = vec![
            ("deleted review", vec!["DELETE FROM reviews WHERE id = (SELECT MAX(id) FROM reviews)".into()],
             "reviews row (proposal 2, review 1) was recorded by event".into()),
            ("changed rationale", vec!["UPDATE revisions SET rationale = 'nothing to see' WHERE number = 2".into()],
             "revisions row (proposal 2, revision 2): rationale is \"nothing to see\" in the database".into()),
            ("forged sign-off name", vec!["UPDATE signoffs SET signer_name = 'The Board'".into()],
             "signoffs row (proposal 1, sign-off 1): signer_name is \"The Board\" in the database".into()),
            ("extra comment", vec!["INSERT INTO comments (proposal_id, revision_number, author_id, body, created_at) \
               SELECT 2, 2, id, 'planted', '2026-01-01T00:00:00.000000Z' FROM users WHERE username = 'hana'".into()],
             "comments row (proposal 2, comment 2) is in the database, but no event records it".into()),
            ("roles raised", vec!["UPDATE users SET roles = 'admin,viewer' WHERE username = 'wren'".into()],
             "users row (user wren): roles is \"admin,viewer\" in the database, but \"viewer\" by event".into()),
            ("policy lowered", vec!["UPDATE settings SET value = '0' WHERE name = 'reviewers_required'".into()],
             "settings row (setting reviewers_required): value is \"0\" in the database".into()),
            ("owner added", vec!["INSERT INTO metric_owners (metric_id, user_id, position) SELECT m.id, u.id, 9 FROM metrics m, users u WHERE u.username = 'wren'".into()],
             "metrics row (metric docks.peak_availability): owners is".into()),
            ("proposal reopened", vec!["UPDATE proposals SET state = 'in_review' WHERE id = 1".into()],
             "proposals row (proposal 1): state is \"in_review\" in the database, but \"approved\" by event".into()),
            ("token planted", vec!["INSERT INTO api_tokens (user_id, token_hash, prefix, scope, label, created_at) \
               SELECT id, 'ab', 'cpt_x', 'write', 'backdoor', '2026-01-01T00:00:00.000000Z' FROM users WHERE username = 'root'".into()],
             "api_tokens row (token".into()),
            ("history thinned", vec!["DELETE FROM observations WHERE period_start = (SELECT MIN(period_start) FROM observations)".into()],
             "histories row (live history of metric docks.peak_availability): observations is 2 in the database, but 3 by event".into()),
            ("record emptied", vec!["DELETE FROM events".into(),
               "UPDATE chain_head SET seq = 0, hash = '0000000000000000000000000000000000000000000000000000000000000000' WHERE id = 1".into()],
             "users row (user".into()),
        ];
        for (what, sql, expected) in cases {
            let app = match backend {
                Backend::Sqlite => TestApp::spawn(Backend::Sqlite).await.unwrap(),
                Backend::Postgres => TestApp::spawn(Backend::Postgres).await.unwrap(),
            };
            let (team, _) = register(app).await;
            drop_guards(&team.app).await;
            for s in &sql {
                exec(&team.app, s).await;
            }
            if what == "record emptied" {
                // An empty record beside a populated database: never "ok 0".
                let (code, out, err) = verify_cli(&team.app);
                assert_eq!(code, 1, "{out}{err}");
                assert!(err.contains("is in the database, but no event records it"), "{err}");
                continue;
            }
            caught(&team, what, &expected).await;
        }
    }
}
