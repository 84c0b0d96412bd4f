//! What every deployment relies on: health, security headers, the append-only event record,
//! serialised writes, migrations and the operator's commands.

use std::collections::HashSet;

use cutpoints::domain::access::Scope;
use cutpoints::store::Store;
use cutpoints::store::events::{GENESIS_HASH, chain_hash};
use serde_json::Value;

use crate::cli::{cutpoints, cutpoints_with_stdin};
use crate::helpers::{Backend, TestApp};
use crate::on_both_backends;

fn header<'a>(r: &'a reqwest::Response, name: &str) -> &'a str {
    r.headers()
        .get(name)
        .unwrap_or_else(|| panic!("{name} on {}", r.url()))
        .to_str()
        .unwrap()
}

/// The database URL a CLI subprocess should use for this app's database.
fn database_url(app: &TestApp) -> String {
    app.store_url.clone()
}

on_both_backends! {
    async fn healthz_answers_200_while_the_database_answers_and_503_after(app) {
        let r = app.http.get(app.url("/healthz")).send().await.unwrap();
        assert_eq!(r.status(), 200);
        let body: Value = r.json().await.unwrap();
        assert_eq!(body["status"], "ok");
        app.store.close().await;
        let r = app.http.get(app.url("/healthz")).send().await.unwrap();
        assert_eq!(r.status(), 503);
        let body: Value = r.json().await.unwrap();
        assert_eq!(body["error"]["code"], "unavailable");
    }

    async fn security_headers_are_on_every_response(app) {
        // OWASP HTTP Headers Cheat Sheet: CSP without unsafe-inline scripts, framing denied,
        // no MIME sniffing, a referrer policy.
        app.add_user("wren", "viewer").await;
        let token = app.token("wren", Scope::Read).await;
        let responses = vec![
            app.http.get(app.url("/signin")).send().await.unwrap(),
            app.http.get(app.url("/metrics")).send().await.unwrap(),
            app.http.get(app.url("/no/such/page")).send().await.unwrap(),
            app.http.get(app.url("/api/v1/metrics")).bearer_auth(&token).send().await.unwrap(),
            app.http.get(app.url("/api/v1/metrics")).send().await.unwrap(),
            app.http.get(app.url("/static/style.css")).send().await.unwrap(),
            app.http.get(app.url("/healthz")).send().await.unwrap(),
        ];
        for r in &responses {
            let csp = header(r, "content-security-policy");
            assert!(csp.contains("default-src 'none'"), "{csp}");
            assert!(csp.contains("frame-ancestors 'none'"), "{csp}");
            assert!(!csp.contains("unsafe-inline"), "{csp}");
            assert!(!csp.contains("script-src"), "no script source is allowed at all: {csp}");
            assert_eq!(header(r, "x-frame-options"), "DENY");
            assert_eq!(header(r, "x-content-type-options"), "nosniff");
            assert_eq!(header(r, "referrer-policy"), "no-referrer");
        }
        assert_eq!(header(&responses[3], "cache-control"), "no-store");
        assert_eq!(header(&responses[5], "content-type"), "text/css; charset=utf-8");
    }

    async fn the_event_record_refuses_update_and_delete(app) {
        app.add_user("ana", "viewer").await;
        for sql in [
            "UPDATE events SET actor = 'mallory' WHERE seq = 1",
            "UPDATE events SET payload = '{}'",
            "DELETE FROM events WHERE seq = 1",
            "DELETE FROM events",
        ] {
            let e = sqlx::query(sql).execute(app.store.pool()).await.expect_err(sql);
            assert!(e.to_string().contains("append-only"), "{sql}: {e}");
        }
        if app.backend == Backend::Postgres {
            let e = sqlx::query("TRUNCATE events").execute(app.store.pool()).await.expect_err("truncate");
            assert!(e.to_string().contains("append-only"), "{e}");
        }
        // The signing key's registration, then the person.
        let events = app.events().await;
        assert_eq!(events.len(), 2);
        assert_eq!(events[0].event.action, "key.registered");
        assert_eq!(events[1].event.actor, "cli");
    }

    async fn events_link_into_one_chain(app) {
        app.add_user("ana", "viewer").await;
        app.add_user("ben", "admin").await;
        app.token("ben", Scope::Read).await;
        let events = app.events().await;
        assert_eq!(events.len(), 4, "the key's registration and three changes");
        let mut prev = GENESIS_HASH.to_string();
        for (i, e) in events.iter().enumerate() {
            assert_eq!(e.event.seq, i as i64 + 1);
            assert_eq!(e.prev_hash, prev);
            assert_eq!(e.hash, chain_hash(&prev, &e.event));
            prev = e.hash.clone();
        }
        assert!(events.windows(2).all(|w| w[0].event.at <= w[1].event.at));
    }

    async fn concurrent_writers_produce_one_gapless_sequence(app) {
        let root = app.add_user("root", "admin").await;
        let mut tasks = Vec::new();
        for i in 0..40 {
            let store = app.store.clone();
            let root = root.clone();
            tasks.push(tokio::spawn(async move {
                let input = cutpoints::ops::metrics::NewMetric {
                    key: format!("m{i:02}"),
                    name: format!("Metric {i}"),
                    ..Default::default()
                };
                cutpoints::ops::metrics::create(&store, &root, &input).await
            }));
        }
        for t in tasks {
            t.await.unwrap().expect("every write succeeds");
        }
        // The signing key's registration, the admin, and forty metrics.
        let events = app.events().await;
        assert_eq!(events.len(), 42);
        let seqs: Vec<i64> = events.iter().map(|e| e.event.seq).collect();
        assert_eq!(seqs, (1..=42).collect::<Vec<_>>());
        let mut prev = GENESIS_HASH.to_string();
        for e in &events {
            assert_eq!(e.prev_hash, prev, "seq {}", e.event.seq);
            prev = e.hash.clone();
        }
        let subjects: HashSet<_> = events.iter().map(|e| e.event.subject.clone()).collect();
        assert_eq!(subjects.len(), 42);
    }

    async fn a_failed_write_leaves_neither_rows_nor_events(app) {
        let root = app.add_user("root", "admin").await;
        let before = app.event_count().await;
        let input = cutpoints::ops::metrics::NewMetric {
            key: "dup".into(),
            name: "First".into(),
            ..Default::default()
        };
        cutpoints::ops::metrics::create(&app.store, &root, &input).await.unwrap();
        let err = cutpoints::ops::metrics::create(&app.store, &root, &input).await.unwrap_err();
        assert!(err.to_string().contains("already exists"));
        // The owner check fails after the key check passed: nothing of it may remain.
        let bad_owner = cutpoints::ops::metrics::NewMetric {
            key: "other".into(),
            name: "Other".into(),
            owners: vec!["ghost".into()],
            ..Default::default()
        };
        assert!(cutpoints::ops::metrics::create(&app.store, &root, &bad_owner).await.is_err());
        assert_eq!(app.event_count().await, before + 1);
        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 1);
        // The chain continues cleanly after the rolled-back writes.
        app.add_user("ana", "viewer").await;
        let events = app.events().await;
        assert_eq!(events.last().unwrap().event.seq, before + 2);
    }

    async fn the_operator_adds_people_and_issues_tokens_from_the_command_line(app) {
        let url = database_url(&app);
        let out = cutpoints_with_stdin(
            &["user", "add", "--username", "rosa", "--role", "admin,signatory", "--display-name", "Rosa L", "--password-stdin", "--database-url", &url],
            "a long enough password\n",
        );
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let rosa = cutpoints::store::users::get(&app.store, "rosa").await.unwrap();
        assert_eq!(rosa.roles.to_list(), "admin,signatory");
        assert_eq!(crate::helpers::Browser::new(&app).sign_in("rosa", "a long enough password").await.status(), 303);

        let out = cutpoints_with_stdin(
            &["user", "add", "--username", "rosa", "--role", "admin", "--password-stdin", "--database-url", &url],
            "a long enough password\n",
        );
        assert_eq!(out.status.code(), Some(1));
        assert!(String::from_utf8_lossy(&out.stderr).contains("already exists"));
        let out = cutpoints_with_stdin(
            &["user", "add", "--username", "ana", "--role", "emperor", "--password-stdin", "--database-url", &url],
            "short\n",
        );
        assert_eq!(out.status.code(), Some(1));
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("unknown role \"emperor\"") && err.contains("at least 12 characters"), "{err}");

        let out = cutpoints(&["token", "issue", "--username", "rosa", "--scope", "write", "--label", "ci", "--database-url", &url]);
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let token = String::from_utf8(out.stdout).unwrap();
        let token = token.trim_end();
        assert!(!token.contains('\n') && token.starts_with("cpt_"), "the token alone: {token:?}");
        let r = app.http.post(app.url("/api/v1/metrics")).bearer_auth(token)
            .json(&serde_json::json!({"key": "k", "name": "K"})).send().await.unwrap();
        assert_eq!(r.status(), 201);

        let out = cutpoints(&["token", "list", "--database-url", &url]);
        let listing = String::from_utf8_lossy(&out.stdout);
        assert!(listing.contains(&token[..10]) && !listing.contains(token));
        let out = cutpoints(&["token", "revoke", "--id", "1", "--database-url", &url]);
        assert!(out.status.success());
        // Another process revoked it: this instance stops accepting it within a second.
        let mut status = 0;
        for _ in 0..30 {
            status = app.http.get(app.url("/api/v1/metrics")).bearer_auth(token).send().await.unwrap().status().as_u16();
            if status == 401 {
                break;
            }
            tokio::time::sleep(std::time::Duration::from_millis(100)).await;
        }
        assert_eq!(status, 401);

        let out = cutpoints(&["user", "deactivate", "--username", "rosa", "--database-url", &url]);
        assert!(out.status.success());
        let out = cutpoints(&["user", "list", "--database-url", &url]);
        assert!(String::from_utf8_lossy(&out.stdout).contains("rosa\tadmin,signatory\tdeactivated"));
        let events = app.events().await;
        assert!(events.iter().filter(|e| e.event.actor == "cli").count() >= 4);
    }

    async fn migrate_is_idempotent(app) {
        let url = database_url(&app);
        for _ in 0..2 {
            let out = cutpoints(&["migrate", "--database-url", &url]);
            assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        }
    }

    async fn the_demo_scenario_seeds_an_empty_database_once(app) {
        let (app, people) = TestApp::spawn_demo(app.backend).await.unwrap();
        assert_eq!(people.len(), cutpoints::cli::demo::PEOPLE.len());
        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 5);
        for role in ["admin", "owner", "reviewer", "signatory", "auditor", "viewer"] {
            assert!(people.iter().any(|p| p.roles.to_list().contains(role)), "{role}");
        }
        let first = &cutpoints::cli::demo::PEOPLE[0];
        let r = crate::helpers::Browser::new(&app).sign_in(first.username, &first.password()).await;
        assert_eq!(r.status(), 303);
        // `cutpoints demo` refuses a database that already holds data.
        let out = cutpoints(&["demo", "--database-url", &database_url(&app), "--bind", "127.0.0.1:0"]);
        assert_eq!(out.status.code(), Some(1));
        assert!(String::from_utf8_lossy(&out.stderr).contains("already holds data"));
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn unsupported_database_urls_are_refused_clearly() {
    let e = Store::connect("mysql://localhost/x").await.unwrap_err();
    assert!(
        e.to_string().contains("use sqlite://FILE or postgres://"),
        "{e}"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sqlite_runs_in_wal_mode_with_foreign_keys_and_a_busy_timeout() {
    let app = TestApp::spawn(Backend::Sqlite).await.unwrap();
    let mut conn = app.store.pool().acquire().await.unwrap();
    let mode: String = sqlx::query_scalar("PRAGMA journal_mode")
        .fetch_one(&mut *conn)
        .await
        .unwrap();
    assert_eq!(mode, "wal");
    let fk: i64 = sqlx::query_scalar("PRAGMA foreign_keys")
        .fetch_one(&mut *conn)
        .await
        .unwrap();
    assert_eq!(fk, 1);
    let busy: i64 = sqlx::query_scalar("PRAGMA busy_timeout")
        .fetch_one(&mut *conn)
        .await
        .unwrap();
    assert!(busy >= 1000, "{busy} ms");
    // Foreign keys are enforced: an owner row for a metric that does not exist is refused.
    let e = sqlx::query(
        "INSERT INTO metric_owners (metric_id, user_id, position) VALUES (999, 999, 0)",
    )
    .execute(&mut *conn)
    .await;
    assert!(e.is_err());
}
