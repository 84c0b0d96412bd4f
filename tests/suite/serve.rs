//! The binary as an operator runs it: `cutpoints demo` and `cutpoints serve`, stopped with
//! SIGTERM.

use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Stdio};

use crate::helpers::{Browser, TestApp};

/// Sends SIGTERM the way a service manager stops the server.
fn terminate(child: &Child) {
    let status = Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status()
        .expect("run kill");
    assert!(status.success());
}

/// Reads the child's standard output until a line contains `marker`; returns that line.
fn read_until(reader: &mut impl BufRead, marker: &str) -> String {
    let mut seen = String::new();
    loop {
        let mut line = String::new();
        let n = reader.read_line(&mut line).expect("read output");
        assert!(n > 0, "output ended before {marker:?}: {seen}");
        seen.push_str(&line);
        if line.contains(marker) {
            return line;
        }
    }
}

fn spawn(args: &[&str]) -> Child {
    Command::new(env!("CARGO_BIN_EXE_cutpoints"))
        .args(args)
        .env_remove("CUTPOINTS_DATABASE_URL")
        .env_remove("CUTPOINTS_DEMO_DATABASE_URL")
        .env("CUTPOINTS_LOG", "warn")
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("start cutpoints")
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_demo_serves_the_signed_in_register_and_stops_on_sigterm() {
    let mut child = spawn(&["demo", "--bind", "127.0.0.1:0"]);
    let mut out = BufReader::new(child.stdout.take().unwrap());
    let line = read_until(&mut out, "Open http://");
    let base = line
        .split_whitespace()
        .find(|w| w.starts_with("http://"))
        .unwrap()
        .trim_end_matches('/')
        .to_string();
    // The logins are printed: every role has one, with its password.
    let mut logins = String::new();
    for _ in 0..cutpoints::cli::demo::PEOPLE.len() + 1 {
        out.read_line(&mut logins).unwrap();
    }
    for p in cutpoints::cli::demo::PEOPLE {
        assert!(
            logins.contains(p.username) && logins.contains(&p.password()),
            "{logins}"
        );
    }

    let app_like = Browser {
        client: reqwest::Client::builder()
            .cookie_store(true)
            .redirect(reqwest::redirect::Policy::none())
            .build()
            .unwrap(),
        base: base.clone(),
    };
    let health = app_like.get("/healthz").await;
    assert_eq!(health.status(), 200);
    let admin = &cutpoints::cli::demo::PEOPLE[0];
    assert_eq!(
        app_like
            .sign_in(admin.username, &admin.password())
            .await
            .status(),
        303
    );
    let (status, html) = app_like.get_text("/metrics").await;
    assert_eq!(status, 200);
    assert!(html.contains("5 metrics."), "{html}");
    for name in [
        "Peak dock availability",
        "Repair turnaround",
        "Rides per bike per day",
        "Monthly member churn",
        "Cash runway",
    ] {
        assert!(html.contains(name), "{name}");
    }

    terminate(&child);
    let status = child.wait().unwrap();
    assert!(status.success(), "graceful shutdown exits 0: {status}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn serve_runs_on_the_named_database_and_stops_on_sigterm() {
    let app = TestApp::spawn(crate::helpers::Backend::Sqlite)
        .await
        .unwrap();
    app.add_user("rosa", "admin").await;
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    let bind = format!("127.0.0.1:{port}");
    let mut child = Command::new(env!("CARGO_BIN_EXE_cutpoints"))
        .args(["serve", "--bind", &bind])
        .env("CUTPOINTS_DATABASE_URL", &app.store_url)
        .env("CUTPOINTS_SIGNING_KEY", &app.key_file)
        .env("CUTPOINTS_LOG", "warn")
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let browser = Browser {
        client: reqwest::Client::builder()
            .cookie_store(true)
            .redirect(reqwest::redirect::Policy::none())
            .build()
            .unwrap(),
        base: format!("http://{bind}"),
    };
    // Wait until it listens (a readiness wait, not a speed check).
    let mut up = false;
    for _ in 0..200 {
        if let Ok(r) = browser.client.get(browser.url("/healthz")).send().await {
            up = r.status() == 200;
            break;
        }
        tokio::time::sleep(std::time::Duration::from_millis(50)).await;
    }
    assert!(up, "serve answers /healthz");
    assert_eq!(
        browser
            .sign_in("rosa", crate::helpers::PASSWORD)
            .await
            .status(),
        303
    );
    terminate(&child);
    assert!(child.wait().unwrap().success());
}

crate::on_both_backends! {
    async fn serve_answers_from_several_threads_sharing_one_pool_and_refuses_a_taken_port(app) {
        app.add_user("rosa", "admin").await;
        let token = app.token("rosa", cutpoints::domain::access::Scope::Read).await;
        let port = std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port();
        let bind = format!("127.0.0.1:{port}");
        let start = |threads: &str| {
            Command::new(env!("CARGO_BIN_EXE_cutpoints"))
                .args(["serve", "--bind", &bind, "--http-threads", threads])
                .env("CUTPOINTS_DATABASE_URL", &app.store_url)
                .env("CUTPOINTS_SIGNING_KEY", &app.key_file)
                .env("CUTPOINTS_LOG", "warn")
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .spawn()
                .unwrap()
        };
        let mut child = start("3");
        let base = format!("http://{bind}");
        let http = reqwest::Client::new();
        let mut up = false;
        for _ in 0..200 {
            if let Ok(r) = http.get(format!("{base}/healthz")).send().await {
                up = r.status() == 200;
                break;
            }
            tokio::time::sleep(std::time::Duration::from_millis(50)).await;
        }
        assert!(up, "serve answers /healthz");
        // Many connections at once, spread by the kernel over the threads, each reading the
        // database through the one shared pool.
        let calls = (0..48).map(|i| {
            let http = reqwest::Client::new();
            let url = if i % 2 == 0 { format!("{base}/api/v1/metrics") } else { format!("{base}/api/v1/published") };
            let token = token.clone();
            tokio::spawn(async move { http.get(url).bearer_auth(token).send().await.unwrap().status().as_u16() })
        });
        for call in calls {
            assert_eq!(call.await.unwrap(), 200);
        }
        // A second server on the same port is refused, as without shared sockets.
        let second = start("2").wait_with_output().unwrap();
        assert!(!second.status.success());
        assert!(String::from_utf8_lossy(&second.stderr).contains("cannot listen"), "{}", String::from_utf8_lossy(&second.stderr));
        terminate(&child);
        assert!(child.wait().unwrap().success(), "graceful shutdown on every thread");
    }
}
