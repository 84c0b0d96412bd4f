//! End to end in Debian's headless Chromium, driven over WebDriver (chromedriver).

use std::net::TcpListener as StdListener;
use std::path::PathBuf;
use std::process::{Child, Command, Stdio};
use std::time::Duration;

use fantoccini::{Client, ClientBuilder, Locator};
use serde_json::json;

use crate::helpers::{Backend, PASSWORD, TestApp, missing_prerequisite};

fn find_program(names: &[&str]) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    names.iter().find_map(|name| {
        std::env::split_paths(&path)
            .map(|dir| dir.join(name))
            .find(|p| p.is_file())
    })
}

/// chromedriver on a free port; killed when dropped.
struct Driver {
    child: Child,
    url: String,
    _profile: tempfile::TempDir,
}

impl Drop for Driver {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

async fn start_driver() -> Option<(Driver, PathBuf)> {
    let Some(chromium) = find_program(&["chromium", "chromium-browser"]) else {
        missing_prerequisite("Chromium (Debian package chromium)");
        return None;
    };
    let Some(chromedriver) = find_program(&["chromedriver"]) else {
        missing_prerequisite("chromedriver (Debian package chromium-driver)");
        return None;
    };
    let port = StdListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    let profile = tempfile::tempdir().unwrap();
    let child = Command::new(chromedriver)
        .arg(format!("--port={port}"))
        // Crash reports and settings go to the throwaway profile, not ~/.config.
        .env("XDG_CONFIG_HOME", profile.path())
        .env("HOME", profile.path())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start chromedriver");
    let url = format!("http://127.0.0.1:{port}");
    // Wait for the driver to accept connections (a readiness wait, not a speed check).
    for _ in 0..200 {
        if std::net::TcpStream::connect(("127.0.0.1", port)).is_ok() {
            break;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    Some((
        Driver {
            child,
            url,
            _profile: profile,
        },
        chromium,
    ))
}

async fn browser(driver: &Driver, chromium: &PathBuf) -> Client {
    let data_dir = driver._profile.path().join("chromium");
    let caps = json!({
        "goog:chromeOptions": {
            "binary": chromium,
            "args": [
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-dev-shm-usage",
                "--no-first-run",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
                format!("--user-data-dir={}", data_dir.display()),
            ]
        }
    });
    let caps = caps.as_object().unwrap().clone();
    ClientBuilder::new(hyper_util::client::legacy::connect::HttpConnector::new())
        .capabilities(caps)
        .connect(&driver.url)
        .await
        .expect("a WebDriver session in Chromium")
}

async fn fill(client: &Client, id: &str, text: &str) {
    let field = client.find(Locator::Id(id)).await.unwrap();
    field.clear().await.unwrap();
    field.send_keys(text).await.unwrap();
}

async fn click_button(client: &Client, label: &str) {
    let xpath = format!("//button[normalize-space()='{label}']");
    client
        .find(Locator::XPath(&xpath))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
}

/// Signs in, adds a metric through the form, and finds it in the register.
async fn sign_in_add_a_metric_and_see_it_listed(base: &str, client: &Client) {
    client.goto(&format!("{base}/metrics")).await.unwrap();
    // Sent to the sign-in page first.
    assert_eq!(client.current_url().await.unwrap().path(), "/signin");
    fill(client, "username", "rosa").await;
    fill(client, "password", PASSWORD).await;
    click_button(client, "Sign in").await;
    client
        .wait()
        .for_element(Locator::XPath("//h1[normalize-space()='Metric register']"))
        .await
        .unwrap();
    assert_eq!(client.current_url().await.unwrap().path(), "/metrics");

    client
        .find(Locator::LinkText("Add a metric"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    client.wait().for_element(Locator::Id("key")).await.unwrap();
    // First with a mistake: the form comes back with the message beside the field.
    fill(client, "key", "Repair Time").await;
    fill(client, "name", "Repair turnaround").await;
    click_button(client, "Add metric").await;
    let error = client
        .wait()
        .for_element(Locator::Id("key-error"))
        .await
        .unwrap();
    assert!(error.text().await.unwrap().contains("is not a metric key"));
    // The name typed is still there.
    let name = client.find(Locator::Id("name")).await.unwrap();
    assert_eq!(
        name.prop("value").await.unwrap().as_deref(),
        Some("Repair turnaround")
    );

    fill(client, "key", "repairs.turnaround").await;
    fill(client, "unit", "hours").await;
    fill(client, "owners", "tomas").await;
    fill(client, "review_cadence_months", "6").await;
    fill(client, "tags", "fleet, workshop").await;
    click_button(client, "Add metric").await;
    client
        .wait()
        .for_element(Locator::Css("p.notice"))
        .await
        .unwrap();
    assert_eq!(
        client.current_url().await.unwrap().path(),
        "/metrics/repairs.turnaround"
    );

    client
        .find(Locator::LinkText("Register"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    let link = client
        .wait()
        .for_element(Locator::Css("a[href='/metrics/repairs.turnaround']"))
        .await
        .unwrap();
    assert_eq!(link.text().await.unwrap(), "repairs.turnaround");
    let page = client.source().await.unwrap();
    assert!(page.contains("Repair turnaround"));
    assert!(page.contains("tomas (display)"));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn in_chromium_an_admin_signs_in_adds_a_metric_and_sees_it_listed() {
    let Some((driver, chromium)) = start_driver().await else {
        return;
    };
    let app = TestApp::spawn(Backend::Sqlite).await.unwrap();
    app.add_user("rosa", "admin").await;
    app.add_user("tomas", "owner").await;
    let client = browser(&driver, &chromium).await;
    // Run the flow, then close the browser whatever happened, so no Chromium outlives us.
    let flow = tokio::spawn({
        let client = client.clone();
        let base = app.base.clone();
        async move { sign_in_add_a_metric_and_see_it_listed(&base, &client).await }
    });
    let result = flow.await;
    let _ = client.close().await;
    if let Err(e) = result {
        std::panic::resume_unwind(e.into_panic());
    }
    let m = cutpoints::store::metrics::get(&app.store, "repairs.turnaround")
        .await
        .unwrap();
    assert_eq!(m.unit, "hours");
    assert_eq!(m.tags, ["fleet", "workshop"]);
}
