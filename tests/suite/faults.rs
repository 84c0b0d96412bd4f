//! Faults an operator meets: the database locked by another process for longer than the
//! timeout, reads while writers wait, large and abandoned uploads, a server killed in the
//! middle of writing. Each case checks status codes and data, never time.

use std::io::{BufRead, BufReader, Write};
use std::process::{Child, Command, Stdio};
use std::sync::Arc;
use std::sync::atomic::Ordering;

use cutpoints::domain::access::Scope;
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

/// `n` hourly periods starting `first` hours after 2000-01-01, as upload CSV.
fn hourly_csv(first: i64, n: i64, value: f64) -> String {
    let start = chrono::NaiveDate::from_ymd_opt(2000, 1, 1)
        .unwrap()
        .and_hms_opt(0, 0, 0)
        .unwrap();
    let mut s = String::with_capacity(n as usize * 32);
    for i in first..first + n {
        let t = start + chrono::Duration::hours(i);
        s.push_str(&format!("{}Z,{value}\n", t.format("%Y-%m-%dT%H:%M:%S")));
    }
    s
}

async fn upload_csv(team: &Team, mode: &str, body: String) -> (u16, Value) {
    let (status, _, body) = send(
        team.app
            .http
            .post(team.app.url(&format!(
                "/api/v1/metrics/{METRIC}/observations?mode={mode}"
            )))
            .bearer_auth(team.token_of("tomas"))
            .header("content-type", "text/csv")
            .body(body),
    )
    .await;
    (status, body)
}

/// Observations in histories that are not live, after a round of upkeep.
async fn leftovers(app: &TestApp) -> u64 {
    cutpoints::ops::upkeep::once(&app.store).await;
    cutpoints::store::observations::not_live(&app.store)
        .await
        .unwrap()
}

crate::on_both_backends! {
    async fn two_deletions_of_one_history_at_once_leave_none_of_it(app) {
        // An upload deletes the history it retired in the background while the upkeep's sweep
        // may take the same one: on PostgreSQL one DELETE step then finds its rows gone under
        // it. Whichever finishes, the history and all its rows are gone.
        use cutpoints::store::observations as rows;
        let team = Team::new(app).await;
        let store = &team.app.store;
        let metric = cutpoints::store::metrics::get(store, METRIC).await.unwrap();
        let observations = cutpoints::domain::observations::from_csv(hourly_csv(0, 40_000, 1.0).as_bytes(), |_| {}).unwrap();
        let history = rows::start(store, metric.id).await.unwrap();
        rows::add(store, history, &observations, |_| {}).await.unwrap();
        assert_eq!(rows::not_live(store).await.unwrap(), 40_000);
        let (a, b, c) = tokio::join!(rows::discard(store, history), rows::discard(store, history), rows::discard(store, history));
        assert_eq!(a.unwrap() + b.unwrap() + c.unwrap(), 40_000, "every row deleted once");
        assert_eq!(rows::not_live(store).await.unwrap(), 0);
    }

    async fn an_upload_whose_client_goes_away_leaves_no_rows_behind(app) {
        let team = Team::new(app).await;
        let (status, body) = upload_csv(&team, "replace", hourly_csv(0, 10, 1.0)).await;
        assert_eq!(status, 200, "{body}");
        let events_before = team.app.event_count().await;
        let csv = hourly_csv(0, 1_000_000, 2.0);
        let head = format!(
            "POST /api/v1/metrics/{METRIC}/observations?mode=replace HTTP/1.1\r\nHost: test\r\n\
             Authorization: Bearer {}\r\nContent-Type: text/csv\r\nContent-Length: {}\r\n\r\n",
            team.token_of("tomas"),
            csv.len()
        );
        let addr = team.app.base.trim_start_matches("http://").to_string();
        let mut stream = tokio::net::TcpStream::connect(addr).await.unwrap();
        use tokio::io::AsyncWriteExt;
        stream.write_all(head.as_bytes()).await.unwrap();
        stream.write_all(csv.as_bytes()).await.unwrap();
        stream.flush().await.unwrap();
        // Hang up once the server is writing the new history.
        let mut polls = 0;
        while sqlx::query_scalar::<_, i64>("SELECT COUNT(*) FROM histories WHERE state = 'building'")
            .fetch_one(team.app.store.pool()).await.unwrap() == 0
        {
            polls += 1;
            assert!(polls < 6000, "the upload never started writing");
            tokio::time::sleep(std::time::Duration::from_millis(5)).await;
        }
        drop(stream);
        // Whatever the server had done when it noticed, nothing of the upload may stay
        // outside the live history, and the live history is the one before.
        let mut waited = 0;
        loop {
            let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations"), None).await;
            let building: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM histories WHERE state = 'building'")
                .fetch_one(team.app.store.pool()).await.unwrap();
            if building == 0 && leftovers(&team.app).await == 0 {
                assert_eq!(listed["observations"].as_array().unwrap().len(), 10, "the live history is the earlier one");
                break;
            }
            waited += 1;
            assert!(waited < 600, "the abandoned upload was never cleared");
            tokio::time::sleep(std::time::Duration::from_millis(100)).await;
        }
        assert_eq!(team.app.event_count().await, events_before);
    }
}

crate::on_both_backends! { with TestApp::spawn_impatient;
    async fn a_large_upload_leaves_other_writers_served(app) {
        let team = Team::new(app).await;
        let (status, p) = team.propose("tomas", hib(40.0, 60.0, 80.0, 90.0, "first")).await;
        assert_eq!(status, 201, "{p}");
        let id = p["id"].as_i64().unwrap();
        let (status, body) = upload_csv(&team, "replace", hourly_csv(0, 1000, 1.0)).await;
        assert_eq!(status, 200, "{body}");

        // A replace upload of 400,000 rows while others comment, one after another, with a
        // database timeout of one second: every comment is taken, because the upload holds
        // the write lock a short transaction at a time.
        let csv = hourly_csv(0, 400_000, 3.0);
        let upload = {
            let req = team
                .app
                .http
                .post(team.app.url(&format!("/api/v1/metrics/{METRIC}/observations?mode=replace")))
                .bearer_auth(team.token_of("tomas"))
                .header("content-type", "text/csv")
                .body(csv);
            tokio::spawn(send(req))
        };
        let mut comments = 0;
        while !upload.is_finished() {
            let (status, body) = team
                .act("hana", id, "comments", Some(json!({"body": format!("during the upload {comments}")})))
                .await;
            assert_eq!(status, 201, "a writer was refused during the upload: {body}");
            comments += 1;
        }
        let (status, _, body) = upload.await.unwrap();
        assert_eq!(status, 200, "{body}");
        assert!(comments > 0, "the upload ran while others wrote");
        assert_eq!((body["removed"].as_u64(), body["total"].as_u64()), (Some(1000), Some(400_000)));
        assert_eq!(team.get(id).await["comments"].as_array().unwrap().len(), comments);
        assert_eq!(leftovers(&team.app).await, 0);
    }

    async fn concurrent_merges_into_one_history_keep_every_period(app) {
        let team = Team::new(app).await;
        // Merges larger than one short transaction are built beside the live history (a
        // small one goes straight into it); one of two at once must build again on the
        // other's history. Then the same with small merges.
        for (size, overlap) in [(6000, 3000), (200, 100)] {
            let (status, body) = upload_csv(&team, "replace", hourly_csv(0, 1000, 1.0)).await;
            assert_eq!(status, 200, "{body}");
            let a = hourly_csv(1000, size, 2.0);
            let b = hourly_csv(1000 + size - overlap, size, 3.0);
            let (ra, rb) = tokio::join!(upload_csv(&team, "merge", a), upload_csv(&team, "merge", b));
            assert_eq!(ra.0, 200, "{}", ra.1);
            assert_eq!(rb.0, 200, "{}", rb.1);
            let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations"), None).await;
            let values: Vec<f64> = listed["observations"].as_array().unwrap().iter().map(|o| o["value"].as_f64().unwrap()).collect();
            let total = 1000 + 2 * size as usize - overlap as usize;
            assert_eq!(values.len(), total, "no period is lost");
            let (first_b, last_a) = (1000 + (size - overlap) as usize, 1000 + size as usize);
            assert!(values[..1000].iter().all(|v| *v == 1.0));
            assert!(values[1000..first_b].iter().all(|v| *v == 2.0));
            assert!(values[last_a..].iter().all(|v| *v == 3.0));
            // The overlap holds the values of whichever upload was recorded last.
            let last = if ra.1["event_seq"].as_i64() > rb.1["event_seq"].as_i64() { 2.0 } else { 3.0 };
            assert!(values[first_b..last_a].iter().all(|v| *v == last));
            let totals = [ra.1["total"].as_u64().unwrap(), rb.1["total"].as_u64().unwrap()];
            assert!(totals.contains(&(total as u64)), "{totals:?}");
            assert_eq!(leftovers(&team.app).await, 0);
        }
        let out = crate::cli::cutpoints(&["audit", "verify", "--database-url", &team.app.store_url]);
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    }
}

/// `cutpoints serve` as its own process on the app's database and signing key, answering
/// on `port` with a one-second database timeout.
fn serve_process(app: &TestApp, port: u16) -> Child {
    Command::new(env!("CARGO_BIN_EXE_cutpoints"))
        .args([
            "serve",
            "--database-url",
            &app.store_url,
            "--bind",
            &format!("127.0.0.1:{port}"),
            "--signing-key",
            app.key_file.to_str().unwrap(),
            "--db-timeout",
            "1",
            "--http-threads",
            "2",
        ])
        .env_remove("CUTPOINTS_DATABASE_URL")
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("run cutpoints serve")
}

async fn until_serving(client: &reqwest::Client, base: &str) {
    for _ in 0..600 {
        if client
            .get(format!("{base}/healthz"))
            .send()
            .await
            .is_ok_and(|r| r.status() == 200)
        {
            return;
        }
        tokio::time::sleep(std::time::Duration::from_millis(50)).await;
    }
    panic!("cutpoints serve did not start");
}

crate::on_both_backends! {
    async fn a_server_killed_during_writes_restarts_with_every_row_accounted_for(app) {
        let team = Team::new(app).await;
        let (status, p) = team.propose("tomas", hib(40.0, 60.0, 80.0, 90.0, "first")).await;
        assert_eq!(status, 201, "{p}");
        let id = p["id"].as_i64().unwrap();
        let port = std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port();
        let base = format!("http://127.0.0.1:{port}");
        let mut server = serve_process(&team.app, port);
        until_serving(&team.app.http, &base).await;

        // Four writers and a large upload through the separate process, then SIGKILL.
        let acknowledged = Arc::new(std::sync::atomic::AtomicUsize::new(0));
        let mut writers = tokio::task::JoinSet::new();
        for w in 0..4 {
            let (client, base, token, acknowledged) = (team.app.http.clone(), base.clone(), team.token_of("hana"), acknowledged.clone());
            writers.spawn(async move {
                for n in 0.. {
                    let sent = client
                        .post(format!("{base}/api/v1/proposals/{id}/comments"))
                        .bearer_auth(&token)
                        .json(&json!({"body": format!("comment {w}.{n}")}))
                        .send()
                        .await;
                    match sent {
                        Ok(r) if r.status() == 201 => { acknowledged.fetch_add(1, Ordering::SeqCst); }
                        Ok(r) => assert!(r.status() == 503, "{}", r.status()),
                        Err(_) => return, // the server is gone
                    }
                }
            });
        }
        let upload = {
            let req = team.app.http
                .post(format!("{base}/api/v1/metrics/{METRIC}/observations?mode=replace"))
                .bearer_auth(team.token_of("tomas"))
                .header("content-type", "text/csv")
                .body(hourly_csv(0, 1_000_000, 4.0));
            tokio::spawn(async move { req.send().await.map(|r| r.status().as_u16()) })
        };
        // Kill once the upload has written part of its history and comments have been taken.
        let mut polls = 0;
        while cutpoints::store::observations::not_live(&team.app.store).await.unwrap() == 0
            || acknowledged.load(Ordering::SeqCst) < 10
        {
            polls += 1;
            assert!(polls < 6000, "the load never got going");
            tokio::time::sleep(std::time::Duration::from_millis(5)).await;
        }
        server.kill().unwrap();
        server.wait().unwrap();
        while writers.join_next().await.is_some() {}
        assert!(upload.await.unwrap().is_err(), "the upload was cut off");

        // Restarted on the same database: the record and the tables agree, every acknowledged
        // write is there, and the rows of the cut-off upload are cleared by its upkeep.
        let mut server = serve_process(&team.app, port);
        until_serving(&team.app.http, &base).await;
        let out = crate::cli::cutpoints(&["audit", "verify", "--database-url", &team.app.store_url]);
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let stored = team.get(id).await["comments"].as_array().unwrap().len();
        assert!(stored >= acknowledged.load(Ordering::SeqCst), "{stored} stored");
        let mut polls = 0;
        while sqlx::query_scalar::<_, i64>("SELECT COUNT(*) FROM histories WHERE state <> 'live'")
            .fetch_one(team.app.store.pool()).await.unwrap() > 0
        {
            polls += 1;
            assert!(polls < 1200, "the cut-off upload's rows were never cleared");
            tokio::time::sleep(std::time::Duration::from_millis(100)).await;
        }
        let (_, listed) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/observations"), None).await;
        assert_eq!(listed["observations"].as_array().unwrap().len(), 0, "the cut-off upload never became live");
        server.kill().unwrap();
        server.wait().unwrap();
    }
}
