//! Accounts, sign-in, sessions, CSRF, throttling and API tokens, checked against OWASP ASVS
//! 4.0.3 and the OWASP cheat sheets named beside each test.

use cutpoints::domain::access::Scope;
use cutpoints::store::users;
use reqwest::header::{RETRY_AFTER, SET_COOKIE};
use serde_json::{Value, json};

use crate::helpers::{Browser, PASSWORD, TestApp};
use crate::on_both_backends;

fn set_cookies(r: &reqwest::Response) -> Vec<String> {
    r.headers()
        .get_all(SET_COOKIE)
        .iter()
        .map(|v| v.to_str().unwrap().to_string())
        .collect()
}

fn session_cookie(r: &reqwest::Response) -> Option<String> {
    set_cookies(r)
        .into_iter()
        .find(|c| c.starts_with("cutpoints_session=") && !c.contains("Max-Age=0"))
}

fn cookie_value(set_cookie: &str) -> String {
    set_cookie
        .split(';')
        .next()
        .unwrap()
        .split_once('=')
        .unwrap()
        .1
        .to_string()
}

/// A request carrying only the given session cookie, as an attacker replaying it would.
async fn get_with_session(app: &TestApp, path: &str, session: &str) -> reqwest::Response {
    app.http
        .get(app.url(path))
        .header("cookie", format!("cutpoints_session={session}"))
        .send()
        .await
        .unwrap()
}

#[test]
fn password_hashes_use_argon2id_at_the_owasp_minimum() {
    // OWASP Password Storage Cheat Sheet: argon2id with at least m=19456 (19 MiB), t=2, p=1.
    let phc = cutpoints::auth::password::hash("a password of some length");
    let parsed = argon2::password_hash::phc::PasswordHash::new(&phc).unwrap();
    assert_eq!(parsed.algorithm.as_str(), "argon2id");
    assert_eq!(parsed.version, Some(0x13));
    let param = |name: &str| -> u32 {
        parsed
            .params
            .get_decimal(name)
            .unwrap_or_else(|| panic!("{name} in {phc}"))
    };
    assert!(param("m") >= 19_456, "{phc}");
    assert!(param("t") >= 2, "{phc}");
    assert!(param("p") >= 1, "{phc}");
    assert!(phc.starts_with("$argon2id$v=19$m=19456,t=2,p=1$"), "{phc}");
    assert!(cutpoints::auth::password::verify(
        "a password of some length",
        &phc
    ));
    assert!(!cutpoints::auth::password::verify("another password", &phc));
}

on_both_backends! {
    async fn stored_passwords_are_argon2id_phc_strings(app) {
        app.add_user("ana", "viewer").await;
        let hash: String = sqlx::query_scalar("SELECT password_hash FROM users WHERE username = 'ana'")
            .fetch_one(app.store.pool()).await.unwrap();
        assert!(hash.starts_with("$argon2id$v=19$m=19456,t=2,p=1$"), "{hash}");
        assert!(!hash.contains(PASSWORD));
    }

    async fn sign_in_sets_a_hardened_session_cookie(app) {
        // OWASP ASVS 4.0.3 §3.4.1 (Secure), §3.4.2 (HttpOnly), §3.4.3 (SameSite).
        app.add_user("ana", "viewer").await;
        let browser = Browser::new(&app);
        let response = browser.sign_in("ana", PASSWORD).await;
        assert_eq!(response.status(), 303);
        assert_eq!(response.headers()["location"], "/metrics");
        let cookie = session_cookie(&response).expect("a session cookie");
        assert!(cookie.contains("HttpOnly"), "{cookie}");
        assert!(cookie.contains("SameSite=Lax"), "{cookie}");
        assert!(cookie.contains("Path=/"), "{cookie}");
        // Served over plain http here, so not Secure (see the https test below).
        assert!(!cookie.contains("Secure"), "{cookie}");
        let (status, page) = browser.get_text("/metrics").await;
        assert_eq!(status, 200);
        assert!(page.contains("ana (display)"));
    }

    async fn every_sign_in_gets_a_new_session_id_and_sign_out_ends_it(app) {
        // OWASP ASVS 4.0.3 §3.2.1 (new token at authentication), §3.3.1 (logout invalidates).
        app.add_user("ana", "viewer").await;
        let browser = Browser::new(&app);
        let first = cookie_value(&session_cookie(&browser.sign_in("ana", PASSWORD).await).unwrap());
        // Signing in again while signed in still yields a fresh id, and ends the old one.
        let csrf = browser.csrf_on("/metrics").await;
        let again = browser
            .client
            .post(browser.url("/signin"))
            .form(&[("_csrf", csrf.as_str()), ("username", "ana"), ("password", PASSWORD)])
            .send()
            .await
            .unwrap();
        assert_eq!(again.status(), 303);
        let second = cookie_value(&session_cookie(&again).unwrap());
        assert_ne!(first, second);
        assert_eq!(get_with_session(&app, "/metrics", &first).await.status(), 303);
        assert_eq!(get_with_session(&app, "/metrics", &second).await.status(), 200);

        let csrf = browser.csrf_on("/metrics").await;
        let out = browser
            .client
            .post(browser.url("/signout"))
            .form(&[("_csrf", csrf.as_str())])
            .send()
            .await
            .unwrap();
        assert_eq!(out.status(), 303);
        assert!(set_cookies(&out).iter().any(|c| c.starts_with("cutpoints_session=;") && c.contains("Max-Age=0")));
        // The server forgot the session: replaying the old cookie does not work.
        let replay = get_with_session(&app, "/metrics", &second).await;
        assert_eq!(replay.status(), 303);
        assert!(replay.headers()["location"].to_str().unwrap().starts_with("/signin"));
        let sessions: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM sessions")
            .fetch_one(app.store.pool()).await.unwrap();
        assert_eq!(sessions, 0);
    }

    async fn sessions_are_stored_only_as_hashes(app) {
        app.add_user("ana", "viewer").await;
        let browser = Browser::new(&app);
        let secret = cookie_value(&session_cookie(&browser.sign_in("ana", PASSWORD).await).unwrap());
        let stored: String = sqlx::query_scalar("SELECT id_hash FROM sessions")
            .fetch_one(app.store.pool()).await.unwrap();
        assert_ne!(stored, secret);
        assert_eq!(stored, cutpoints::auth::secret::stored_hash(&secret));
    }

    async fn failed_sign_ins_never_tell_whether_the_account_exists(app) {
        app.add_user("ana", "viewer").await;
        app.add_user("gone", "viewer").await;
        cutpoints::ops::users::set_active(&app.store, cutpoints::ops::users::By::Operator, "gone", false)
            .await.unwrap();
        let mut pages = Vec::new();
        for (user, password) in [("ana", "wrong password here"), ("nobody", PASSWORD), ("gone", PASSWORD)] {
            let browser = Browser::new(&app);
            let r = browser.sign_in(user, password).await;
            assert_eq!(r.status(), 200, "{user}");
            assert!(session_cookie(&r).is_none(), "{user}");
            let html = r.text().await.unwrap();
            let start = html.find("role=\"alert\">").expect("a message");
            let message = &html[start..start + 80];
            pages.push(message.to_string());
        }
        assert!(pages.iter().all(|m| m == &pages[0]), "{pages:#?}");
        assert!(pages[0].contains("do not match an active account"));
        // Each failure is an event.
        let events = app.events().await;
        let failures: Vec<_> = events.iter().filter(|e| e.event.action == "signin.failed").collect();
        assert_eq!(failures.len(), 3);
        assert_eq!(failures[1].event.payload["username"], "nobody");
        assert_eq!(failures[1].event.payload["address"], "127.0.0.1");
    }

    async fn sign_in_is_throttled_per_account_with_retry_after(app) {
        // OWASP ASVS 4.0.3 §2.2.1: anti-automation against credential guessing.
        app.add_user("ana", "viewer").await;
        for _ in 0..5 {
            let r = Browser::new(&app).sign_in("ana", "not the password").await;
            assert_eq!(r.status(), 200);
        }
        let events_when_locked = app.event_count().await;
        // Locked now, even for the right password.
        let browser = Browser::new(&app);
        let r = browser.sign_in("ana", PASSWORD).await;
        assert_eq!(r.status(), 429);
        let retry: u64 = r.headers()[RETRY_AFTER].to_str().unwrap().parse().unwrap();
        assert!(retry > 0 && retry <= 15 * 60, "{retry}");
        assert!(session_cookie(&r).is_none());
        // Refused attempts are counted, not recorded one by one.
        for _ in 0..10 {
            assert_eq!(Browser::new(&app).sign_in("ana", "guess").await.status(), 429);
        }
        assert_eq!(app.event_count().await, events_when_locked);
        let refused: i64 = sqlx::query_scalar(
            "SELECT refused FROM signin_throttle WHERE scope = 'account' AND subject = 'ana'")
            .fetch_one(app.store.pool()).await.unwrap();
        assert_eq!(refused, 11);
        let events = app.events().await;
        assert_eq!(events.iter().filter(|e| e.event.action == "signin.failed").count(), 5);
        assert_eq!(events.iter().filter(|e| e.event.action == "signin.throttled").count(), 1);
        // Another account from the same address is not locked by it.
        app.add_user("ben", "viewer").await;
        assert_eq!(Browser::new(&app).sign_in("ben", PASSWORD).await.status(), 303);
    }

    async fn sign_in_is_throttled_per_address(app) {
        app.add_user("ana", "viewer").await;
        for i in 0..20 {
            let r = Browser::new(&app).sign_in(&format!("guess{i}"), "whatever it is").await;
            assert_eq!(r.status(), 200, "attempt {i}");
        }
        let r = Browser::new(&app).sign_in("ana", PASSWORD).await;
        assert_eq!(r.status(), 429);
        assert!(r.headers().contains_key(RETRY_AFTER));
    }

    async fn the_throttle_is_shared_by_instances_on_one_database(app) {
        // A second app instance over the same database refuses the locked account too.
        app.add_user("ana", "viewer").await;
        for _ in 0..5 {
            Browser::new(&app).sign_in("ana", "not the password").await;
        }
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
        let other = format!("http://{}", listener.local_addr().unwrap());
        let signer = cutpoints::publish::signing::load_or_create(&app.store, &app.key_file).await.unwrap();
        let state = cutpoints::AppState::new(app.store.clone(), cutpoints::WebConfig::default(), signer);
        tokio::spawn(cutpoints::serve(listener, state, std::future::pending()));
        let browser = Browser { base: other, ..Browser::new(&app) };
        assert_eq!(browser.sign_in("ana", PASSWORD).await.status(), 429);
    }

    async fn forms_without_the_csrf_token_are_refused(app) {
        // OWASP ASVS 4.0.3 §4.2.2: anti-CSRF tokens on every state-changing request.
        app.add_user("root", "admin").await;
        let browser = app.signed_in("root").await;
        let before = app.event_count().await;
        for token in ["", "c_not-the-token"] {
            let r = browser
                .client
                .post(browser.url("/metrics/new"))
                .form(&[("_csrf", token), ("key", "x"), ("name", "X")])
                .send()
                .await
                .unwrap();
            assert_eq!(r.status(), 403, "{token:?}");
        }
        // Sign-out needs it too.
        let r = browser.client.post(browser.url("/signout")).form(&[("a", "b")]).send().await.unwrap();
        assert_eq!(r.status(), 403);
        assert_eq!(browser.get("/metrics").await.status(), 200);
        // The sign-in form carries its own token, bound to a cookie.
        let stranger = Browser::new(&app);
        let r = stranger
            .client
            .post(stranger.url("/signin"))
            .form(&[("_csrf", "f_forged"), ("username", "root"), ("password", PASSWORD)])
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 403);
        assert_eq!(app.event_count().await, before);
        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 0);
    }

    async fn browser_api_writes_need_the_csrf_header(app) {
        app.add_user("root", "admin").await;
        let browser = app.signed_in("root").await;
        let body = json!({"key": "k", "name": "K"});
        let r = browser.client.post(browser.url("/api/v1/metrics")).json(&body).send().await.unwrap();
        assert_eq!(r.status(), 403);
        let csrf = browser.api_csrf().await;
        let r = browser
            .client
            .post(browser.url("/api/v1/metrics"))
            .header("x-csrf-token", csrf)
            .json(&body)
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 201);
    }

    async fn tokens_carry_a_scope_and_only_their_hash_is_stored(app) {
        app.add_user("root", "admin").await;
        let read = app.token("root", Scope::Read).await;
        let write = app.token("root", Scope::Write).await;
        let stored: Vec<String> = sqlx::query_scalar("SELECT token_hash FROM api_tokens ORDER BY id")
            .fetch_all(app.store.pool()).await.unwrap();
        assert_eq!(stored, vec![
            cutpoints::auth::secret::stored_hash(&read),
            cutpoints::auth::secret::stored_hash(&write),
        ]);
        let dump: Vec<String> = sqlx::query_scalar("SELECT prefix || label || scope FROM api_tokens")
            .fetch_all(app.store.pool()).await.unwrap();
        assert!(dump.iter().all(|row| !row.contains(&read[10..]) && !row.contains(&write[10..])));

        let get = app.http.get(app.url("/api/v1/metrics")).bearer_auth(&read).send().await.unwrap();
        assert_eq!(get.status(), 200);
        let body = json!({"key": "k", "name": "K"});
        let post = app.http.post(app.url("/api/v1/metrics")).bearer_auth(&read).json(&body).send().await.unwrap();
        assert_eq!(post.status(), 403);
        let error: Value = post.json().await.unwrap();
        assert_eq!(error["error"]["code"], "forbidden");
        let post = app.http.post(app.url("/api/v1/metrics")).bearer_auth(&write).json(&body).send().await.unwrap();
        assert_eq!(post.status(), 201);
    }

    async fn revoked_expired_and_orphaned_tokens_stop_working(app) {
        use cutpoints::ops::users::{By, revoke_token, set_active};
        app.add_user("root", "admin").await;
        app.add_user("ana", "viewer").await;
        // Valid tokens are remembered for up to a second (web::token_cache::TTL), so a
        // revocation is waited for, a little longer than that at most.
        let ok = |t: &str| {
            let http = app.http.clone();
            let url = app.url("/api/v1/metrics");
            let t = t.to_string();
            async move {
                let mut status = 0;
                for _ in 0..30 {
                    status = http.get(&url).bearer_auth(&t).send().await.unwrap().status().as_u16();
                    if status != 200 {
                        break;
                    }
                    tokio::time::sleep(std::time::Duration::from_millis(100)).await;
                }
                status
            }
        };
        let first_use = |t: &str| {
            let req = app.http.get(app.url("/api/v1/metrics")).bearer_auth(t.to_string());
            async move { req.send().await.unwrap().status().as_u16() }
        };
        let revoked = app.token("root", Scope::Read).await;
        assert_eq!(first_use(&revoked).await, 200);
        let id: i64 = sqlx::query_scalar("SELECT MAX(id) FROM api_tokens").fetch_one(app.store.pool()).await.unwrap();
        revoke_token(&app.store, By::Operator, id).await.unwrap();
        assert_eq!(ok(&revoked).await, 401);
        // Revoking twice is a conflict.
        assert!(revoke_token(&app.store, By::Operator, id).await.is_err());

        let expiring = app.token("root", Scope::Read).await;
        sqlx::query("UPDATE api_tokens SET expires_at = '2000-01-01T00:00:00.000000Z' WHERE token_hash = $1")
            .bind(cutpoints::auth::secret::stored_hash(&expiring))
            .execute(app.store.pool()).await.unwrap();
        assert_eq!(ok(&expiring).await, 401);

        let anas = app.token("ana", Scope::Read).await;
        assert_eq!(first_use(&anas).await, 200);
        set_active(&app.store, By::Operator, "ana", false).await.unwrap();
        assert_eq!(ok(&anas).await, 401);
        assert_eq!(ok("cpt_made_up").await, 401);
        let r = app.http.get(app.url("/api/v1/metrics")).header("authorization", "Basic abc").send().await.unwrap();
        assert_eq!(r.status(), 401);
        let r = app.http.get(app.url("/api/v1/metrics")).send().await.unwrap();
        assert_eq!(r.status(), 401);
        let body: Value = r.json().await.unwrap();
        assert_eq!(body["error"]["code"], "unauthorized");
    }

    async fn deactivation_ends_sessions_and_refuses_sign_in(app) {
        app.add_user("root", "admin").await;
        app.add_user("ana", "viewer").await;
        let ana = app.signed_in("ana").await;
        assert_eq!(ana.get("/metrics").await.status(), 200);
        let admin = app.signed_in("root").await;
        let r = admin.post_form("/admin/users/ana", "/admin/users/ana/active", &[("active", "0")]).await;
        assert_eq!(r.status(), 303);
        assert_eq!(ana.get("/metrics").await.status(), 303);
        assert_eq!(Browser::new(&app).sign_in("ana", PASSWORD).await.status(), 200);
        let user = users::get(&app.store, "ana").await.unwrap();
        assert!(!user.active);
        let r = admin.post_form("/admin/users/ana", "/admin/users/ana/active", &[("active", "1")]).await;
        assert_eq!(r.status(), 303);
        assert_eq!(Browser::new(&app).sign_in("ana", PASSWORD).await.status(), 303);
    }

    async fn admins_add_people_change_roles_and_reset_passwords_through_the_admin_pages(app) {
        app.add_user("root", "admin").await;
        let admin = app.signed_in("root").await;
        let r = admin.post_form("/admin/users/new", "/admin/users/new", &[
            ("username", "Not Valid"), ("display_name", ""), ("password", "short"),
        ]).await;
        assert_eq!(r.status(), 400);
        let html = r.text().await.unwrap();
        assert!(html.contains("is not a username"), "{html}");
        assert!(html.contains("give at least one role"));
        assert!(html.contains("password must be at least 12 characters"));

        let r = admin.post_form("/admin/users/new", "/admin/users/new", &[
            ("username", "cleo"), ("display_name", "Cleo Marsh"), ("role", "reviewer"),
            ("role", "owner"), ("password", "a long enough password"),
        ]).await;
        assert_eq!(r.status(), 303);
        let cleo = users::get(&app.store, "cleo").await.unwrap();
        assert_eq!(cleo.roles.to_list(), "owner,reviewer");
        assert_eq!(cleo.display_name, "Cleo Marsh");
        // A duplicate username is shown beside the field.
        let r = admin.post_form("/admin/users/new", "/admin/users/new", &[
            ("username", "cleo"), ("role", "viewer"), ("password", "a long enough password"),
        ]).await;
        assert_eq!(r.status(), 409);
        assert!(r.text().await.unwrap().contains("already exists"));

        let r = admin.post_form("/admin/users/cleo", "/admin/users/cleo", &[
            ("display_name", "Cleo Marsh-Ortiz"), ("role", "signatory"),
        ]).await;
        assert_eq!(r.status(), 303);
        let cleo = users::get(&app.store, "cleo").await.unwrap();
        assert_eq!(cleo.roles.to_list(), "signatory");
        assert_eq!(cleo.display_name, "Cleo Marsh-Ortiz");

        let r = admin.post_form("/admin/users/cleo", "/admin/users/cleo/password", &[
            ("password", "a brand new password"), ("password_again", "a brand new password"),
        ]).await;
        assert_eq!(r.status(), 303);
        assert_eq!(Browser::new(&app).sign_in("cleo", "a long enough password").await.status(), 200);
        assert_eq!(Browser::new(&app).sign_in("cleo", "a brand new password").await.status(), 303);

        // Every change is an event with before and after.
        let events = app.events().await;
        let roles = events.iter().find(|e| e.event.action == "user.roles_changed").unwrap();
        assert_eq!(roles.event.actor, "root");
        assert_eq!(roles.event.subject, "user:cleo");
        assert_eq!(roles.event.payload["before"]["roles"], json!(["owner", "reviewer"]));
        assert_eq!(roles.event.payload["after"]["roles"], json!(["signatory"]));
        assert!(events.iter().any(|e| e.event.action == "user.password_reset" && e.event.subject == "user:cleo"));
        assert!(events.iter().all(|e| !e.event.payload.to_string().contains("brand new")));
    }

    async fn only_admins_reach_the_admin_pages(app) {
        app.add_user("ana", "owner,reviewer,signatory,auditor").await;
        let ana = app.signed_in("ana").await;
        for path in ["/admin/users", "/admin/users/new", "/admin/tokens", "/admin/users/ana"] {
            assert_eq!(ana.get(path).await.status(), 403, "{path}");
        }
        let r = ana.post_form("/metrics", "/admin/users/new", &[("username", "x"), ("role", "admin"), ("password", "a long enough password")]).await;
        assert_eq!(r.status(), 403);
        assert!(users::find(&app.store, "x").await.unwrap().is_none());
    }

    async fn admins_issue_and_revoke_tokens_through_the_admin_pages(app) {
        app.add_user("root", "admin").await;
        app.add_user("dash", "viewer").await;
        let admin = app.signed_in("root").await;
        let r = admin.post_form("/admin/tokens", "/admin/tokens", &[
            ("username", "dash"), ("scope", "read"), ("label", "fleet dashboard"), ("expires_in_days", "30"),
        ]).await;
        assert_eq!(r.status(), 201);
        let html = r.text().await.unwrap();
        let start = html.find("<code class=\"secret\">").unwrap() + "<code class=\"secret\">".len();
        let token = &html[start..start + html[start..].find('<').unwrap()];
        assert!(token.starts_with("cpt_"));
        assert_eq!(app.http.get(app.url("/api/v1/metrics")).bearer_auth(token).send().await.unwrap().status(), 200);
        // The list shows the prefix, never the secret.
        let (_, list) = admin.get_text("/admin/tokens").await;
        assert!(list.contains(&token[..10]));
        assert!(!list.contains(token));
        let id: i64 = sqlx::query_scalar("SELECT id FROM api_tokens").fetch_one(app.store.pool()).await.unwrap();
        let r = admin.post_form("/admin/tokens", &format!("/admin/tokens/{id}/revoke"), &[]).await;
        assert_eq!(r.status(), 303);
        assert_eq!(app.http.get(app.url("/api/v1/metrics")).bearer_auth(token).send().await.unwrap().status(), 401);
        let r = admin.post_form("/admin/tokens", "/admin/tokens", &[
            ("username", "dash"), ("scope", "admin"), ("expires_in_days", "-3"),
        ]).await;
        assert_eq!(r.status(), 400);
        let html = r.text().await.unwrap();
        assert!(html.contains("unknown scope"));
        assert!(html.contains("expires_in_days must be"));
        let actions: Vec<String> = app.events().await.into_iter().map(|e| e.event.action).collect();
        assert!(actions.contains(&"token.issued".to_string()));
        assert!(actions.contains(&"token.revoked".to_string()));
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn cookies_are_secure_when_served_over_https() {
    let config = cutpoints::WebConfig {
        secure_cookies: true,
        ..Default::default()
    };
    let app = TestApp::spawn_with(crate::helpers::Backend::Sqlite, config)
        .await
        .unwrap();
    app.add_user("ana", "viewer").await;
    // A client keeps Secure cookies off plain http, so carry them by hand here.
    let page = app.http.get(app.url("/signin")).send().await.unwrap();
    let signin_cookie = set_cookies(&page)
        .into_iter()
        .find(|c| c.starts_with("cutpoints_signin="))
        .unwrap();
    assert!(signin_cookie.contains("Secure"), "{signin_cookie}");
    let token = cookie_value(&signin_cookie);
    let r = app
        .http
        .post(app.url("/signin"))
        .header("cookie", format!("cutpoints_signin={token}"))
        .form(&[
            ("_csrf", token.as_str()),
            ("username", "ana"),
            ("password", PASSWORD),
        ])
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 303);
    let cookie = session_cookie(&r).unwrap();
    assert!(cookie.contains("Secure"), "{cookie}");
    assert!(
        cookie.contains("HttpOnly") && cookie.contains("SameSite=Lax"),
        "{cookie}"
    );
    assert!(r.headers().contains_key("strict-transport-security"));
}
