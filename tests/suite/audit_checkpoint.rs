//! The quick check (audit pages, `GET /api/v1/audit/verify`) goes on from the checkpoint the
//! last successful check left and reads only the events after it; the full check reads every
//! event and replays it against the tables, in the background with its progress, and what it
//! finds stands beside every quick check until a later full check passes.

use serde_json::Value;

use crate::cli::cutpoints;
use crate::helpers::TestApp;
use crate::workflow_support::{Team, hib};

/// The checkpoint as stored: (seq, hash).
async fn checkpoint(app: &TestApp) -> (i64, String) {
    sqlx::query_as("SELECT seq, hash FROM audit_checkpoint WHERE id = 1")
        .fetch_one(app.store.pool())
        .await
        .unwrap()
}

/// Waits (by polling, without a time limit of its own) until the checkpoint reaches `seq`:
/// a quick check moves it off the answer's path.
async fn checkpoint_reaches(app: &TestApp, seq: i64) {
    while checkpoint(app).await.0 < seq {
        tokio::time::sleep(std::time::Duration::from_millis(20)).await;
    }
}

async fn verify(team: &Team) -> Value {
    let (status, v) = team.call("root", "GET", "/api/v1/audit/verify", None).await;
    assert_eq!(status, 200, "{v}");
    v
}

/// Asks for a full check through the API and follows its Location until it has finished.
async fn full_check(team: &Team, who: &str) -> Value {
    let r = team
        .app
        .http
        .post(team.app.url("/api/v1/audit/full-checks"))
        .bearer_auth(team.token_of(who))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 202);
    let location = r.headers()["location"].to_str().unwrap().to_string();
    let started: Value = r.json().await.unwrap();
    assert_eq!(
        location,
        format!("/api/v1/audit/full-checks/{}", started["id"])
    );
    loop {
        let (status, check) = team.call(who, "GET", &location, None).await;
        assert_eq!(status, 200, "{check}");
        assert!(check["events_done"].as_i64() <= check["events_total"].as_i64());
        if !check["finished_at"].is_null() {
            return check;
        }
        tokio::time::sleep(std::time::Duration::from_millis(20)).await;
    }
}

crate::on_both_backends! {
    async fn the_quick_check_reads_only_the_events_after_the_checkpoint(app) {
        let team = Team::new(app).await;
        team.agree(hib(40.0, 60.0, 80.0, 90.0, "agreed")).await;
        let first = verify(&team).await;
        assert_eq!(first["ok"], true, "{first}");
        assert_eq!(first["verified_before"], 0, "the first check reads every event");
        let n = first["events"].as_i64().unwrap();
        checkpoint_reaches(&team.app, n).await;
        assert_eq!(checkpoint(&team.app).await.1, first["head_hash"].as_str().unwrap());

        team.agree(hib(41.0, 60.0, 80.0, 90.0, "agreed again")).await;
        let second = verify(&team).await;
        assert_eq!(second["ok"], true, "{second}");
        assert_eq!(second["verified_before"], n, "{second}");
        let m = second["events"].as_i64().unwrap();
        assert!(m > n);
        // The whole chain (Python-free: the command line's own full count) agrees.
        let out = cutpoints(&["audit", "verify", "--database-url", team.app.store_url.as_str()]);
        assert_eq!(String::from_utf8_lossy(&out.stdout).trim(), second["line"].as_str().unwrap());
        checkpoint_reaches(&team.app, m).await;

        // The event the checkpoint names, changed behind the application's back.
        team.app.drop_change_guards(&["events"]).await;
        team.app
            .exec(&format!("UPDATE events SET hash = '{}' WHERE seq = {m}", "f".repeat(64)))
            .await;
        let broken = verify(&team).await;
        assert_eq!(broken["ok"], false, "{broken}");
        assert_eq!(broken["seq"], m);
        assert!(
            broken["problem"].as_str().unwrap().contains("not the event an earlier check verified"),
            "{broken}"
        );
    }

    async fn a_full_check_runs_in_the_background_and_what_it_finds_stands(app) {
        let team = Team::new(app).await;
        team.agree(hib(40.0, 60.0, 80.0, 90.0, "agreed")).await;
        assert_eq!(verify(&team).await["ok"], true);
        // The approval policy lowered behind the application's back: the chain still holds,
        // so only a replay against the tables can see it.
        team.app
            .exec("UPDATE settings SET value = '0' WHERE name = 'reviewers_required'")
            .await;
        let quick = verify(&team).await;
        assert_eq!(quick["ok"], true, "the quick check does not read the tables: {quick}");

        let (status, _) = team.call("tomas", "POST", "/api/v1/audit/full-checks", None).await;
        assert_eq!(status, 403, "owners do not run audit checks");
        let check = full_check(&team, "root").await;
        assert_eq!(check["ok"], false, "{check}");
        assert_eq!(check["requested_by"], "root");
        assert_eq!(check["events_done"], check["events_total"], "{check}");
        assert!(check["line"].as_str().unwrap().contains("settings row"), "{check}");

        let after = verify(&team).await;
        assert_eq!(after["ok"], false, "{after}");
        assert!(after["differences"][0].as_str().unwrap().contains("settings row"), "{after}");
        assert_eq!(after["last_full_check"]["id"], check["id"]);
        let browser = team.app.signed_in("root").await;
        let (status, page) = browser.get_text("/audit").await;
        assert_eq!(status, 200);
        assert!(page.contains("does not verify") && page.contains("found a problem"), "{page}");

        // Put right, and checked again from the page's button.
        team.app
            .exec("UPDATE settings SET value = '1' WHERE name = 'reviewers_required'")
            .await;
        let r = browser.post_form("/audit", "/audit/full-checks", &[]).await;
        assert_eq!(r.status(), 303);
        assert_eq!(r.headers()["location"], "/audit#verify-heading", "back on the audit page");
        loop {
            let v = verify(&team).await;
            let last = &v["last_full_check"];
            if last["id"].as_i64() > check["id"].as_i64() {
                assert_eq!(last["ok"], true, "{v}");
                assert_eq!(v["ok"], true, "{v}");
                break;
            }
            tokio::time::sleep(std::time::Duration::from_millis(20)).await;
        }
    }

    async fn the_command_line_checks_everything_and_is_recorded_as_a_full_check(app) {
        let team = Team::new(app).await;
        team.agree(hib(40.0, 60.0, 80.0, 90.0, "agreed")).await;
        let out = cutpoints(&["audit", "verify", "--database-url", team.app.store_url.as_str()]);
        assert!(out.status.success());
        let v = verify(&team).await;
        assert_eq!(v["ok"], true, "{v}");
        assert_eq!(v["last_full_check"]["requested_by"], "cli", "{v}");
        assert_eq!(v["last_full_check"]["ok"], true, "{v}");
        assert_eq!(v["last_full_check"]["line"], v["line"], "{v}");
        // The command line moved the checkpoint to the head it verified.
        assert_eq!(checkpoint(&team.app).await.0, v["events"].as_i64().unwrap());
    }
}
