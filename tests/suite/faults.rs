//! Faults an operator meets: the database locked by another process for longer than the
//! timeout, reads while writers wait. Each case checks status codes and data, never time.

use std::io::{BufRead, BufReader, Write};
use std::process::{Child, Command, Stdio};

use cutpoints::store::tokens::Scope;
use serde_json::{Value, json};

use crate::helpers::{Backend, TestApp, missing_prerequisite};
use crate::workflow_support::{METRIC, Team, hib};

/// Another process holding the database's write lock until dropped: Python's `sqlite3`
/// module in `BEGIN IMMEDIATE` for SQLite, `psql` holding the chain-head row (the lock every
/// write takes first) for PostgreSQL.
pub struct ExternalLock {
    child: Child,
}

impl ExternalLock {
    pub fn hold(app: &TestApp) -> Option<ExternalLock> {
        let mut command = match app.backend {
            Backend::Sqlite => {
                let path = app.store_url.trim_start_matches("sqlite://");
                let mut c = Command::new("python3");
                c.args([
                    "-c",
                    "import sqlite3, sys\n\
                     c = sqlite3.connect(sys.argv[1], isolation_level=None)\n\
                     c.execute('BEGIN IMMEDIATE')\n\
                     print('locked', flush=True)\n\
                     sys.stdin.read()\n\
                     c.execute('ROLLBACK')\n",
                    path,
                ]);
                c
            }
            Backend::Postgres => {
                let mut c = Command::new("psql");
                c.args([
                    "-X",
                    "-q",
                    "-A",
                    "-t",
                    "-v",
                    "ON_ERROR_STOP=1",
                    &app.store_url,
                ]);
                c
            }
        };
        let program = format!("{:?}", command.get_program());
        let Ok(mut child) = command
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::inherit())
            .spawn()
        else {
            missing_prerequisite(&program);
            return None;
        };
        if app.backend == Backend::Postgres {
            let stdin = child.stdin.as_mut().unwrap();
            stdin
                .write_all(
                    b"BEGIN;\nSELECT seq FROM chain_head WHERE id = 1 FOR UPDATE;\n\\echo locked\n",
                )
                .unwrap();
            stdin.flush().unwrap();
        }
        let mut out = BufReader::new(child.stdout.take().unwrap());
        let mut line = String::new();
        loop {
            line.clear();
            assert!(
                out.read_line(&mut line).unwrap() > 0,
                "the lock holder stopped before taking the lock"
            );
            if line.trim() == "locked" {
                break;
            }
        }
        Some(ExternalLock { child })
    }
}

impl Drop for ExternalLock {
    fn drop(&mut self) {
        // End of input: the holder rolls back and exits, which releases the lock.
        drop(self.child.stdin.take());
        let _ = self.child.wait();
    }
}

/// Status, Retry-After and JSON body of a request.
async fn send(req: reqwest::RequestBuilder) -> (u16, Option<String>, Value) {
    let r = req.send().await.unwrap();
    let status = r.status().as_u16();
    let retry = r
        .headers()
        .get("retry-after")
        .map(|v| v.to_str().unwrap().to_string());
    let text = r.text().await.unwrap();
    (
        status,
        retry,
        serde_json::from_str(&text).unwrap_or(Value::String(text)),
    )
}

crate::on_both_backends! { with TestApp::spawn_impatient;
    async fn writes_that_cannot_get_the_lock_in_time_answer_503_with_retry_after_and_change_nothing(app) {
        let team = Team::new(app).await;
        let (status, p) = team.propose("tomas", hib(40.0, 60.0, 80.0, 90.0, "first")).await;
        assert_eq!(status, 201, "{p}");
        let id = p["id"].as_i64().unwrap();
        let browser = team.app.signed_in("hana").await;
        let form_csrf = browser.csrf_on(&format!("/proposals/{id}")).await;
        let events_before = team.app.event_count().await;

        let Some(lock) = ExternalLock::hold(&team.app) else { return };
        // Twelve writers at once, as in the report: RFC 9110 §15.6.4 503 (Service
        // Unavailable) with Retry-After (§10.2.3), never 500.
        let mut writers = tokio::task::JoinSet::new();
        for i in 0..12 {
            let req = team
                .app
                .http
                .post(team.app.url(&format!("/api/v1/proposals/{id}/comments")))
                .bearer_auth(team.token_of("hana"))
                .json(&json!({"body": format!("comment {i}")}));
            writers.spawn(send(req));
        }
        while let Some(done) = writers.join_next().await {
            let (status, retry, body) = done.unwrap();
            assert_eq!(status, 503, "{body}");
            assert_eq!(body["error"]["code"], "busy", "{body}");
            let seconds: u64 = retry.expect("Retry-After").parse().expect("delay-seconds");
            assert!(seconds >= 1);
        }
        // A browser gets the error page, with the same header.
        let r = browser
            .client
            .post(browser.url(&format!("/proposals/{id}/comments")))
            .form(&[("_csrf", form_csrf.as_str()), ("body", "from the page")])
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 503);
        assert!(r.headers().contains_key("retry-after"));
        assert!(r.headers()["content-type"].to_str().unwrap().starts_with("text/html"));
        let page = r.text().await.unwrap();
        assert!(page.contains("nothing was changed"), "{page}");
        drop(lock);

        // Nothing of the refused writes was kept, not even half.
        assert_eq!(team.app.event_count().await, events_before);
        assert_eq!(team.get(id).await["comments"].as_array().unwrap().len(), 0);
        let (status, body) = team
            .act("hana", id, "comments", Some(json!({"body": "after the lock"})))
            .await;
        assert_eq!(status, 201, "{body}");
        assert_eq!(team.app.event_count().await, events_before + 1);
    }

    async fn reads_keep_answering_while_another_process_holds_the_write_lock(app) {
        let team = Team::new(app).await;
        team.agree(hib(40.0, 60.0, 80.0, 90.0, "agreed")).await;
        // A token never used before, and a session last seen long ago: both would have
        // their last use written by the read that follows.
        team.app.add_user("dana", "viewer").await;
        let fresh = team.app.token("dana", Scope::Read).await;
        let browser = team.app.signed_in("dana").await;
        sqlx::query("UPDATE sessions SET last_seen_at = $1")
            .bind(cutpoints::domain::Timestamp::now().plus_seconds(-3600))
            .execute(team.app.store.pool())
            .await
            .unwrap();

        let Some(lock) = ExternalLock::hold(&team.app) else { return };
        let (status, _, body) = send(
            team.app.http.get(team.app.url("/api/v1/published")).bearer_auth(&fresh),
        )
        .await;
        assert_eq!(status, 200, "{body}");
        assert!(body["set"][METRIC].is_object(), "{body}");
        let (status, page) = browser.get_text(&format!("/metrics/{METRIC}")).await;
        assert_eq!(status, 200, "{page}");
        drop(lock);

        // The uses were remembered and are written afterwards, in a batch.
        cutpoints::ops::upkeep::once(&team.app.store).await;
        let tokens = cutpoints::store::tokens::list(&team.app.store, Some("dana")).await.unwrap();
        assert!(tokens[0].last_used_at.is_some(), "{tokens:?}");
        let seen: String = sqlx::query_scalar("SELECT MAX(last_seen_at) FROM sessions")
            .fetch_one(team.app.store.pool())
            .await
            .unwrap();
        assert!(seen.as_str() > cutpoints::domain::Timestamp::now().plus_seconds(-600).to_string().as_str());
    }
}
