//! The auditor's views over the API and in pages: export (JSON re-verified with Python's
//! standard library, CSV read with Python's `csv` module), verification, exceptions, what was
//! in force at a time, and why a threshold moved.

use std::process::Command;

use cutpoints::domain::Timestamp;
use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::helpers::missing_prerequisite;
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

async fn auditor(team: &Team) -> String {
    team.app.add_user("samir", "auditor").await;
    team.app.token("samir", Scope::Read).await
}

async fn get(team: &Team, token: &str, path: &str) -> (u16, reqwest::header::HeaderMap, String) {
    let r = team.app.get_as(token, path).await;
    (
        r.status().as_u16(),
        r.headers().clone(),
        r.text().await.unwrap(),
    )
}

async fn get_json(team: &Team, token: &str, path: &str) -> Value {
    let (status, _, body) = get(team, token, path).await;
    assert_eq!(status, 200, "{path}: {body}");
    serde_json::from_str(&body).unwrap()
}

fn python3() -> Option<&'static str> {
    Command::new("python3")
        .arg("--version")
        .output()
        .ok()
        .map(|_| "python3")
}

/// A small history with text that stresses CSV quoting and JSON escaping.
async fn history(team: &Team) {
    let mut body = hib(
        50.0,
        70.0,
        80.0,
        90.0,
        "First agreed, with \"quotes\", commas, and\na second line; ü €.",
    );
    body["shades"] = json!(4);
    team.agree(body).await;
    team.agree(hib(
        50.0,
        72.5,
        80.0,
        90.0,
        "Act a little sooner: 0.1 and 1e-7 appear here.",
    ))
    .await;
}

on_both_backends! {
    async fn the_json_export_reverifies_with_python_alone(app) {
        let team = Team::new(app).await;
        history(&team).await;
        let token = auditor(&team).await;
        let export = get_json(&team, &token, "/api/v1/audit?limit=100000").await;
        let entries = export["entries"].as_array().unwrap();
        let summary = &export["summary"];
        assert_eq!(summary["count"], entries.len());
        assert_eq!(summary["first_seq"], 1);
        assert_eq!(summary["last_seq"], entries.len());
        assert_eq!(summary["head_seq"], entries.len());
        assert_eq!(summary["head_hash"], entries.last().unwrap()["hash"]);
        assert_eq!(summary["next_after"], Value::Null);
        let Some(python) = python3() else {
            missing_prerequisite("python3 (re-verifies the export with its standard library)");
            return;
        };
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("export.json");
        std::fs::write(&path, serde_json::to_vec(&export).unwrap()).unwrap();
        let out = Command::new(python)
            .arg(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/tools/verify_audit_export.py"))
            .arg(&path)
            .output()
            .unwrap();
        let printed = String::from_utf8_lossy(&out.stdout);
        assert!(out.status.success(), "{printed}{}", String::from_utf8_lossy(&out.stderr));
        assert_eq!(printed.trim(), format!("ok {} {}", entries.len(), summary["head_hash"].as_str().unwrap()));
        let ours = get_json(&team, &token, "/api/v1/audit/verify").await;
        assert_eq!(ours["line"], printed.trim());
        // Python catches a changed value too.
        let mut tampered = export.clone();
        tampered["entries"][3]["event"]["actor"] = json!("mallory");
        std::fs::write(&path, serde_json::to_vec(&tampered).unwrap()).unwrap();
        let out = Command::new(python)
            .arg(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/tools/verify_audit_export.py"))
            .arg(&path)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(1));
        assert!(String::from_utf8_lossy(&out.stdout).contains("event seq 4: hash does not match"));
    }

    async fn extracts_filter_and_page_with_a_summary(app) {
        let team = Team::new(app).await;
        history(&team).await;
        let token = auditor(&team).await;
        let all = get_json(&team, &token, "/api/v1/audit?limit=100000").await;
        let total = all["entries"].as_array().unwrap().len();
        // Paging by after and limit covers everything once, in order.
        let mut after = 0;
        let mut seen = Vec::new();
        loop {
            let page = get_json(&team, &token, &format!("/api/v1/audit?after={after}&limit=7")).await;
            for e in page["entries"].as_array().unwrap() {
                seen.push(e["event"]["seq"].as_i64().unwrap());
            }
            match page["summary"]["next_after"].as_i64() {
                Some(n) => after = n,
                None => break,
            }
        }
        assert_eq!(seen, (1..=total as i64).collect::<Vec<_>>());
        let by_metric = get_json(&team, &token, &format!("/api/v1/audit?metric={METRIC}")).await;
        assert!(by_metric["entries"].as_array().unwrap().iter().all(|e| e["event"]["subject"] == format!("metric:{METRIC}")));
        let by_action = get_json(&team, &token, "/api/v1/audit?action=version.approved").await;
        assert_eq!(by_action["summary"]["count"], 2);
        let by_actor = get_json(&team, &token, "/api/v1/audit?actor=odile").await;
        assert!(by_actor["entries"].as_array().unwrap().iter().all(|e| e["event"]["actor"] == "odile"));
        assert!(by_actor["summary"]["count"].as_u64().unwrap() >= 1);
        let at = |i: usize| all["entries"][i]["event"]["at"].as_str().unwrap().to_string();
        let (from, to) = (at(3), at(8));
        let window = get_json(&team, &token, &format!("/api/v1/audit?from={from}&to={to}")).await;
        for e in window["entries"].as_array().unwrap() {
            let t = e["event"]["at"].as_str().unwrap();
            assert!(t >= from.as_str() && t < to.as_str());
        }
        for bad in ["from=yesterday", "limit=0", "metric=Not%20A%20Key", "colour=red"] {
            let (status, _, body) = get(&team, &token, &format!("/api/v1/audit?{bad}")).await;
            assert_eq!(status, 400, "{bad}: {body}");
        }
    }

    async fn the_csv_export_is_rfc_4180_as_pythons_csv_module_reads_it(app) {
        let team = Team::new(app).await;
        history(&team).await;
        let token = auditor(&team).await;
        let json_export = get_json(&team, &token, "/api/v1/audit?limit=100000").await;
        let (status, headers, csv) = get(&team, &token, "/api/v1/audit.csv").await;
        assert_eq!(status, 200);
        assert!(headers["content-type"].to_str().unwrap().starts_with("text/csv"));
        let entries = json_export["entries"].as_array().unwrap();
        assert_eq!(headers["cutpoints-audit-count"], entries.len().to_string().as_str());
        assert_eq!(
            headers["cutpoints-audit-head"].to_str().unwrap(),
            format!("{}:{}", entries.len(), json_export["summary"]["head_hash"].as_str().unwrap())
        );
        // RFC 4180: every record ends with CRLF.
        assert!(csv.ends_with("\r\n"));
        assert!(!csv.replace("\r\n", "").contains("\r"));
        let Some(rows) = crate::helpers::python_csv_rows(&csv) else { return };
        assert_eq!(rows[0], ["seq", "at", "actor", "action", "subject", "payload", "prev_hash", "hash"]);
        assert_eq!(rows.len(), entries.len() + 2, "header, one row per event, summary");
        for (row, e) in rows[1..].iter().zip(entries) {
            let ev = &e["event"];
            assert_eq!(row[0], ev["seq"].to_string());
            assert_eq!(row[1], ev["at"].as_str().unwrap());
            assert_eq!(row[2], ev["actor"].as_str().unwrap());
            assert_eq!(row[3], ev["action"].as_str().unwrap());
            let payload: Value = serde_json::from_str(&row[5]).unwrap();
            assert_eq!(payload, ev["payload"], "seq {}", row[0]);
            assert_eq!(row[7], e["hash"].as_str().unwrap());
        }
        // The rationale with quotes, commas and a line break survived quoting.
        assert!(rows.iter().any(|r| r[5].contains(r#"\"quotes\", commas, and\na second line"#)));
        let last = rows.last().unwrap();
        assert_eq!(last[0], "summary");
        assert!(last[5].contains(&format!("count={}", entries.len())));
    }

    async fn verification_is_reported_to_auditors_in_json_and_on_a_page(app) {
        let team = Team::new(app).await;
        history(&team).await;
        let token = auditor(&team).await;
        let v = get_json(&team, &token, "/api/v1/audit/verify").await;
        assert_eq!(v["ok"], true);
        let head = v["head_hash"].as_str().unwrap().to_string();
        let n = v["events"].as_i64().unwrap();
        assert_eq!(v["line"], format!("ok {n} {head}"));
        let v = get_json(&team, &token, &format!("/api/v1/audit/verify?known_head={}:{}", n, "a".repeat(64))).await;
        assert_eq!(v["ok"], false);
        assert_eq!(v["seq"], n);
        let (status, _, _) = get(&team, &token, "/api/v1/audit/verify?known_head=nonsense").await;
        assert_eq!(status, 400);
        let samir = team.app.signed_in("samir").await;
        let (status, html) = samir.get_text("/audit").await;
        assert_eq!(status, 200);
        assert!(html.contains(&format!("ok {n} {head}")));
        assert!(html.contains("cannot be seen from the chain alone"));
        for page in ["/audit/events", "/audit/exceptions", "/audit/as-of?as_of=2026-01-01", &format!("/audit/metrics/{METRIC}")] {
            let (status, _) = samir.get_text(page).await;
            assert_eq!(status, 200, "{page}");
        }
    }

    async fn only_auditors_and_admins_see_the_audit_views(app) {
        let team = Team::new(app).await;
        for who in ["tomas", "hana", "odile", "wren"] {
            let token = team.app.token(who, Scope::Read).await;
            for path in ["/api/v1/audit", "/api/v1/audit.csv", "/api/v1/audit/verify", "/api/v1/audit/exceptions", "/api/v1/audit/as-of", &format!("/api/v1/audit/metrics/{METRIC}")] {
                let (status, _, _) = get(&team, &token, path).await;
                assert_eq!(status, 403, "{who} {path}");
            }
            let b = team.app.signed_in(who).await;
            assert_eq!(b.get("/audit").await.status(), 403, "{who}");
        }
        let root = team.app.token("root", Scope::Read).await;
        assert_eq!(get(&team, &root, "/api/v1/audit").await.0, 200);
    }

    async fn exceptions_list_refusals_stale_approvals_signin_failures_and_lapsed_reviews(app) {
        let team = Team::new(app).await;
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        // A version approved without a sign-off, where none was needed.
        team.agree(hib(1.0, 2.5, 3.0, 4.0, "v2")).await;
        // A refused self-approval.
        // (critical moves, so one approval alone does not complete it)
        let (_, p) = team.propose("ownsig", hib(0.5, 2.7, 3.0, 4.0, "v3")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("ownsig", id, "submit", None).await;
        assert_eq!(team.approve("ownsig", id).await.0, 403);
        // An approval made stale by an edit.
        team.approve("hana", id).await;
        let mut edit = hib(0.5, 2.8, 3.0, 4.0, "v3");
        edit["note"] = json!("nudge");
        team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(edit)).await;
        // A failed sign-in.
        crate::helpers::Browser::new(&team.app).sign_in("hana", "not the password").await;
        // A metric to be reviewed every 6 months, never reviewed; asked about 400 days on.
        let (status, m) = team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "old.metric", "name": "Old", "review_cadence_months": 6}))).await;
        assert_eq!(status, 201);
        let created = Timestamp::parse(m["created_at"].as_str().unwrap()).unwrap();
        let token = auditor(&team).await;
        team.app.store.set_clock(Some(created.plus_seconds(400 * 86_400)));
        let x = get_json(&team, &token, "/api/v1/audit/exceptions").await;
        team.app.store.set_clock(None);
        assert_eq!(x["refused_decisions"].as_array().unwrap().len(), 1);
        assert_eq!(x["refused_decisions"][0]["actor"], "ownsig");
        assert_eq!(x["refused_decisions"][0]["action"], "review.refused");
        let stale = x["stale_approvals"].as_array().unwrap();
        assert_eq!(stale.len(), 1);
        assert_eq!(stale[0]["details"]["made_stale"][0]["by"], "hana");
        assert_eq!(x["missing_signoffs"], 0);
        let unsigned = x["approved_without_signoff"].as_array().unwrap();
        assert_eq!(unsigned.len(), 1);
        assert_eq!((unsigned[0]["version"].clone(), unsigned[0]["signoff_required"].clone()), (json!(2), json!(false)));
        assert!(x["signin_failures"].as_array().unwrap().iter().any(|e| e["details"]["username"] == "hana"));
        let lapsed = x["lapsed_reviews"].as_array().unwrap();
        assert_eq!(lapsed.len(), 1);
        assert_eq!(lapsed[0]["metric"], "old.metric");
        let due = created.as_datetime().checked_add_months(chrono::Months::new(6)).unwrap();
        assert_eq!(lapsed[0]["due"], Timestamp::from_datetime(due).to_string());
        // Asked again, the same (kept by the chain's head); after one more failed sign-in,
        // that one too.
        let again = get_json(&team, &token, "/api/v1/audit/exceptions").await;
        assert_eq!(again["refused_decisions"], x["refused_decisions"]);
        assert_eq!(again["stale_approvals"], x["stale_approvals"]);
        assert_eq!(again["approved_without_signoff"], x["approved_without_signoff"]);
        let failures = again["signin_failures"].as_array().unwrap().len();
        crate::helpers::Browser::new(&team.app).sign_in("kofi", "not the password").await;
        let later = get_json(&team, &token, "/api/v1/audit/exceptions").await;
        let now_listed = later["signin_failures"].as_array().unwrap();
        assert_eq!(now_listed.len(), failures + 1);
        assert_eq!(now_listed.last().unwrap()["details"]["username"], "kofi");
    }

    async fn as_of_tells_valid_time_from_transaction_time(app) {
        let team = Team::new(app).await;
        let token = auditor(&team).await;
        // Version 1 agreed on day 10 (invented times, stepped on the store's clock).
        let day = |d: i64| Timestamp::parse("2030-01-01").unwrap().plus_seconds(d * 86_400);
        team.app.store.set_clock(Some(day(10)));
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        // On day 20, version 2 is approved to take effect on day 30 (future-dated).
        team.app.store.set_clock(Some(day(20)));
        let mut body = hib(1.0, 2.5, 3.0, 4.0, "v2 from day 30");
        body["effective_from"] = json!(day(30).to_string());
        team.agree(body).await;
        // On day 40, version 3 is approved with effect from day 35 (after its effective time).
        team.app.store.set_clock(Some(day(40)));
        let mut body = hib(1.0, 2.7, 3.0, 4.0, "v3 backdated to day 35");
        body["effective_from"] = json!(day(35).to_string());
        team.agree(body).await;
        team.app.store.set_clock(Some(day(50)));
        let at = |as_of: Timestamp, known_at: Timestamp| {
            let path = format!("/api/v1/audit/as-of?metric={METRIC}&as_of={as_of}&known_at={known_at}");
            let team = &team;
            let token = token.clone();
            async move { get_json(team, &token, &path).await["metrics"][0].clone() }
        };
        let number = |v: &Value| v["in_force"]["number"].as_i64();
        // Before anything: nothing in force, no error.
        assert_eq!(number(&at(day(5), day(50)).await), None);
        // The future-dated version is not in force before day 30, whenever asked.
        assert_eq!(number(&at(day(25), day(50)).await), Some(1));
        assert_eq!(number(&at(day(31), day(50)).await), Some(2));
        // On day 36, as the register knew it on day 38: version 2 ...
        let then = at(day(36), day(38)).await;
        assert_eq!(number(&then), Some(2));
        // ... but as known now, version 3 (approved day 40, effective day 35) applies.
        assert_eq!(then["known_later"]["number"], 3);
        assert!(then["note"].as_str().unwrap().contains("retroactive"));
        assert_eq!(number(&at(day(36), day(50)).await), Some(3));
        assert_eq!(at(day(36), day(50)).await["known_later"], Value::Null);
        // Without a metric, the whole register; a malformed time is a 400.
        let all = get_json(&team, &token, &format!("/api/v1/audit/as-of?as_of={}", day(36))).await;
        assert_eq!(all["metrics"].as_array().unwrap().len(), 1);
        let (status, _, _) = get(&team, &token, "/api/v1/audit/as-of?as_of=someday").await;
        assert_eq!(status, 400);
        team.app.store.set_clock(None);
    }

    async fn why_did_it_move_shows_each_version_with_its_reasons_and_discussion(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(50.0, 70.0, 80.0, 90.0, "First thresholds.")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("wren", id, "comments", Some(json!({"body": "Is 70 too strict?", "cut": "intervene"}))).await;
        team.act("tomas", id, "submit", None).await;
        team.sign("odile", id).await;
        team.approve("hana", id).await;
        team.agree(hib(45.0, 70.0, 80.0, 90.0, "Critical lower after the winter.")).await;
        let token = auditor(&team).await;
        let t = get_json(&team, &token, &format!("/api/v1/audit/metrics/{METRIC}")).await;
        let versions = t["versions"].as_array().unwrap();
        assert_eq!(versions.len(), 2);
        let (newest, oldest) = (&versions[0], &versions[1]);
        assert_eq!(newest["number"], 2);
        assert_eq!(newest["rationale"], "Critical lower after the winter.");
        assert_eq!(newest["changes"]["cuts"][0]["text"], "critical 50 -> 45 (-5, -10 %)");
        assert!(newest["diff_from_previous"].as_str().unwrap().contains("-critical: 50\n+critical: 45"));
        assert_eq!(newest["signatory"], "odile (display)");
        assert_eq!(oldest["comments"][0]["body"], "Is 70 too strict?");
        assert_eq!(oldest["approvers"], json!(["hana (display)"]));
        assert!(oldest["approved_at"].as_str().unwrap() <= newest["approved_at"].as_str().unwrap());
        let samir = team.app.signed_in("samir").await;
        let (_, html) = samir.get_text(&format!("/audit/metrics/{METRIC}")).await;
        assert!(html.contains("Is 70 too strict?") && html.contains("Critical lower after the winter."));
    }
}
