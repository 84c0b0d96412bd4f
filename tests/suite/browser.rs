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
#[cfg_attr(
    chromium_missing,
    ignore = "needs Debian's chromium and chromium-driver"
)]
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

async fn sign_in_as(client: &Client, base: &str, who: &str) {
    client.goto(&format!("{base}/signin")).await.unwrap();
    fill(client, "username", who).await;
    fill(client, "password", PASSWORD).await;
    click_button(client, "Sign in").await;
    client
        .wait()
        .for_element(Locator::XPath("//button[normalize-space()='Sign out']"))
        .await
        .unwrap();
}

async fn sign_out(client: &Client) {
    click_button(client, "Sign out").await;
    client
        .wait()
        .for_element(Locator::Id("username"))
        .await
        .unwrap();
}

async fn click_link(client: &Client, text: &str) {
    client
        .find(Locator::LinkText(text))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
}

async fn page_text(client: &Client) -> String {
    client
        .find(Locator::Css("main"))
        .await
        .unwrap()
        .text()
        .await
        .unwrap()
}

/// Waits for the page that carries this notice (the one before may still be showing).
async fn wait_notice(client: &Client, text: &str) {
    let xpath = format!("//p[contains(@class, 'notice') and contains(., '{text}')]");
    client
        .wait()
        .for_element(Locator::XPath(&xpath))
        .await
        .unwrap();
}

/// Owner proposes, reviewer sends back, owner revises, reviewer approves, signatory signs with
/// her password, and the metric page shows the version in force with its zone strip.
async fn the_whole_agreement(base: &str, client: &Client) {
    let metric = format!("{base}/metrics/{}", crate::workflow_support::METRIC);
    sign_in_as(client, base, "tomas").await;
    client.goto(&metric).await.unwrap();
    click_link(client, "Propose new thresholds").await;
    for (name, value) in [
        ("critical", "50"),
        ("intervene", "70"),
        ("outperform", "80"),
        ("stretch", "90"),
    ] {
        fill(client, &format!("cut-{name}"), value).await;
    }
    fill(
        client,
        "rationale",
        "Members walk when docks are empty at 08:00.",
    )
    .await;
    click_button(client, "Save as draft").await;
    wait_notice(client, "saved as a draft").await;
    let proposal = client.current_url().await.unwrap().path().to_string();
    click_button(client, "Submit for review").await;
    wait_notice(client, "Submitted for review.").await;
    sign_out(client).await;

    sign_in_as(client, base, "hana").await;
    client.goto(&format!("{base}/inbox")).await.unwrap();
    client
        .find(Locator::Css(&format!("a[href='{proposal}']")))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    client
        .wait()
        .for_element(Locator::Css("input[value='send_back']"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    fill(
        client,
        "review-comment",
        "Why 70? Show last winter's numbers.",
    )
    .await;
    click_button(client, "Record verdict").await;
    wait_notice(client, "sent back to its owners").await;
    sign_out(client).await;

    sign_in_as(client, base, "tomas").await;
    client.goto(&format!("{base}{proposal}")).await.unwrap();
    click_link(client, "Revise").await;
    fill(client, "cut-intervene", "72").await;
    fill(client, "note", "intervene 72 after the winter numbers").await;
    click_button(client, "Save revision").await;
    wait_notice(client, "A new revision was saved.").await;
    click_button(client, "Submit for review").await;
    wait_notice(client, "Submitted for review.").await;
    sign_out(client).await;

    sign_in_as(client, base, "hana").await;
    client.goto(&format!("{base}{proposal}")).await.unwrap();
    client
        .find(Locator::Css("input[value='approve']"))
        .await
        .unwrap()
        .click()
        .await
        .unwrap();
    click_button(client, "Record verdict").await;
    wait_notice(client, "Your approval was recorded.").await;
    assert!(
        page_text(client)
            .await
            .contains("signatory sign-off needed")
    );
    sign_out(client).await;

    sign_in_as(client, base, "odile").await;
    client.goto(&format!("{base}{proposal}")).await.unwrap();
    fill(client, "signoff-password", PASSWORD).await;
    click_button(client, "Sign off as odile (display)").await;
    wait_notice(client, "Approved: the new version is recorded.").await;

    client.goto(&metric).await.unwrap();
    let text = page_text(client).await;
    assert!(text.contains("Version 1 is in force since"), "{text}");
    assert!(text.contains("signed off by odile (display)"));
    let strip = client.find(Locator::Css("figure.strip svg")).await.unwrap();
    assert_eq!(strip.attr("role").await.unwrap().as_deref(), Some("img"));
    let labels = client
        .find_all(Locator::Css("figure.strip svg text"))
        .await
        .unwrap();
    let mut words = String::new();
    for l in labels {
        words.push_str(&l.text().await.unwrap());
        words.push(' ');
    }
    for zone in ["critical", "intervene", "steady", "outperform", "stretch"] {
        assert!(words.contains(zone), "the strip names {zone}: {words}");
    }
    assert!(words.contains("intervene 72"), "{words}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
#[cfg_attr(
    chromium_missing,
    ignore = "needs Debian's chromium and chromium-driver"
)]
async fn in_chromium_a_proposal_is_sent_back_revised_approved_and_signed() {
    let Some((driver, chromium)) = start_driver().await else {
        return;
    };
    let app = TestApp::spawn(Backend::Sqlite).await.unwrap();
    let team = crate::workflow_support::Team::new(app).await;
    let client = browser(&driver, &chromium).await;
    let flow = tokio::spawn({
        let client = client.clone();
        let base = team.app.base.clone();
        async move { the_whole_agreement(&base, &client).await }
    });
    let result = flow.await;
    let _ = client.close().await;
    if let Err(e) = result {
        std::panic::resume_unwind(e.into_panic());
    }
    let (_, m) = team
        .call(
            "wren",
            "GET",
            &format!("/api/v1/metrics/{}", crate::workflow_support::METRIC),
            None,
        )
        .await;
    assert_eq!(m["version_in_force"]["cuts"]["intervene"], 72.0);
    assert_eq!(
        m["version_in_force"]["approvers"],
        serde_json::json!(["hana (display)"])
    );
}

/// The owner uploads a CSV file through the metric page's form (a real multipart post, its
/// CSRF token inside), then sees the history summarised and drawn.
async fn upload_history_through_the_form(base: &str, client: &Client, file: &std::path::Path) {
    let metric = format!("{base}/metrics/{}", crate::workflow_support::METRIC);
    sign_in_as(client, base, "tomas").await;
    client.goto(&metric).await.unwrap();
    let input = client.find(Locator::Id("history-file")).await.unwrap();
    input.send_keys(&file.display().to_string()).await.unwrap();
    click_button(client, "Upload").await;
    wait_notice(client, "periods stored or updated").await;
    let text = page_text(client).await;
    assert!(
        text.contains("The history was uploaded: 25 periods"),
        "{text}"
    );
    assert!(text.contains("25 periods from 2026-01-05"), "{text}");
    let chart = client.find(Locator::Css("figure.chart svg")).await.unwrap();
    assert_eq!(chart.attr("role").await.unwrap().as_deref(), Some("img"));
    let desc = client
        .find(Locator::Css("figure.chart svg desc"))
        .await
        .unwrap()
        .html(true)
        .await
        .unwrap();
    assert!(desc.contains("25"), "{desc}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
#[cfg_attr(
    chromium_missing,
    ignore = "needs Debian's chromium and chromium-driver"
)]
async fn in_chromium_an_owner_uploads_history_and_sees_it_drawn() {
    let Some((driver, chromium)) = start_driver().await else {
        return;
    };
    let app = TestApp::spawn(Backend::Sqlite).await.unwrap();
    let team = crate::workflow_support::Team::new(app).await;
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("history.csv");
    let start = chrono::NaiveDate::from_ymd_opt(2026, 1, 5).unwrap();
    let csv: String = std::iter::once("period_start,value\n".to_string())
        .chain((0..25).map(|i| format!("{},{}\n", start + chrono::Duration::weeks(i), 60 + i % 7)))
        .collect();
    std::fs::write(&file, csv).unwrap();
    let client = browser(&driver, &chromium).await;
    let flow = tokio::spawn({
        let client = client.clone();
        let base = team.app.base.clone();
        let file = file.clone();
        async move { upload_history_through_the_form(&base, &client, &file).await }
    });
    let result = flow.await;
    let _ = client.close().await;
    if let Err(e) = result {
        std::panic::resume_unwind(e.into_panic());
    }
    let (_, listed) = team
        .call(
            "wren",
            "GET",
            &format!(
                "/api/v1/metrics/{}/observations",
                crate::workflow_support::METRIC
            ),
            None,
        )
        .await;
    assert_eq!(listed["observations"].as_array().unwrap().len(), 25);
}
