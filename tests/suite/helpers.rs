//! The test harness: the real server on port 0 over a fresh database per test, on SQLite
//! and, when `CUTPOINTS_TEST_POSTGRES_URL` names a server, on PostgreSQL.

use std::sync::LazyLock;

use cutpoints::domain::User;
use cutpoints::domain::access::Scope;
use cutpoints::domain::{Roles, Username};
use cutpoints::ops::users::{By, add_with_hash};
use cutpoints::store::{Store, StoreSettings, events};
use cutpoints::{AppState, WebConfig};
use serde_json::Value;
use tokio::net::TcpListener;

/// Every test person's password.
pub const PASSWORD: &str = "correct horse battery staple";

/// Hashed once per test run: argon2id at the OWASP settings costs tens of milliseconds.
static PASSWORD_HASH: LazyLock<String> =
    LazyLock::new(|| cutpoints::auth::password::hash(PASSWORD));

pub const POSTGRES_ENV: &str = "CUTPOINTS_TEST_POSTGRES_URL";

/// The PostgreSQL server the suite makes its databases on: the one `CUTPOINTS_TEST_POSTGRES_URL`
/// names, or else a throwaway cluster of this run's own, started on first use from the
/// installed server binaries and removed when the run ends, however it ends.
pub fn postgres_server() -> Option<String> {
    if let Ok(url) = std::env::var(POSTGRES_ENV) {
        return Some(url);
    }
    static CLUSTER: std::sync::OnceLock<Option<crate::pg_cluster::Cluster>> =
        std::sync::OnceLock::new();
    let cluster =
        tokio::task::block_in_place(|| CLUSTER.get_or_init(crate::pg_cluster::Cluster::start));
    cluster.as_ref().map(|c| c.url())
}

/// A database timeout short enough for tests that wait past it.
pub const IMPATIENT: StoreSettings = StoreSettings {
    timeout: std::time::Duration::from_secs(1),
};

/// True under CI, where a missing prerequisite is a failure, not a skip.
pub fn in_ci() -> bool {
    std::env::var("CI").is_ok_and(|v| v == "true" || v == "1")
}

/// Reports a missing prerequisite: a skip on a developer's machine, a failure under CI.
pub fn missing_prerequisite(what: &str) {
    if in_ci() {
        panic!("CI=true but {what} is missing: CI must not pass by skipping");
    }
    eprintln!("SKIPPED: {what} is missing (this would fail under CI=true)");
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Backend {
    Sqlite,
    Postgres,
}

pub struct TestApp {
    pub base: String,
    pub store: Store,
    /// The database URL, for running the command line against the same database.
    pub store_url: String,
    pub backend: Backend,
    /// A client without cookies, for API calls.
    pub http: reqwest::Client,
    shutdown: Option<tokio::sync::oneshot::Sender<()>>,
    /// The signing key file of this app (its folder lives as long as the app).
    pub key_file: std::path::PathBuf,
    _folder: tempfile::TempDir,
    postgres: Option<(String, String)>,
}

fn random_suffix() -> String {
    let mut bytes = [0u8; 8];
    getrandom::fill(&mut bytes).expect("randomness");
    hex::encode(bytes)
}

impl TestApp {
    /// The app on the given backend, or `None` (after reporting it) when PostgreSQL is not
    /// configured.
    pub async fn spawn(backend: Backend) -> Option<TestApp> {
        Self::spawn_with(backend, WebConfig::default()).await
    }

    pub async fn spawn_with(backend: Backend, config: WebConfig) -> Option<TestApp> {
        Self::spawn_inner(backend, config, StoreSettings::default(), false)
            .await
            .map(|(app, _)| app)
    }

    /// The app with a short database timeout, for tests of what happens past it.
    pub async fn spawn_impatient(backend: Backend) -> Option<TestApp> {
        Self::spawn_inner(backend, WebConfig::default(), IMPATIENT, false)
            .await
            .map(|(app, _)| app)
    }

    /// An app whose database was seeded with the demo scenario before anything else was
    /// recorded (the scenario's invented past must come first in the event record).
    pub async fn spawn_demo(backend: Backend) -> Option<(TestApp, Vec<User>)> {
        Self::spawn_inner(
            backend,
            WebConfig::default(),
            StoreSettings::default(),
            true,
        )
        .await
    }

    async fn spawn_inner(
        backend: Backend,
        config: WebConfig,
        settings: StoreSettings,
        demo: bool,
    ) -> Option<(TestApp, Vec<User>)> {
        // Server-side errors (a template that fails, a database error) show in the output of
        // the test that caused them.
        let _ = tracing_subscriber::fmt()
            .with_env_filter("cutpoints=warn")
            .with_test_writer()
            .try_init();
        let (url, folder, postgres) = match backend {
            Backend::Sqlite => {
                let folder = tempfile::tempdir().expect("temp folder");
                let url = format!("sqlite://{}", folder.path().join("test.db").display());
                (url, Some(folder), None)
            }
            Backend::Postgres => {
                let Some(admin_url) = postgres_server() else {
                    missing_prerequisite(&format!(
                        "PostgreSQL (neither {POSTGRES_ENV} nor Debian's postgresql package, whose server binaries the suite starts a cluster with)"
                    ));
                    return None;
                };
                let name = format!("cutpoints_test_{}", random_suffix());
                let admin = Store::connect(&admin_url)
                    .await
                    .unwrap_or_else(|e| panic!("cannot reach PostgreSQL at {admin_url}: {e}"));
                sqlx::query(sqlx::AssertSqlSafe(format!("CREATE DATABASE {name}")))
                    .execute(admin.pool())
                    .await
                    .expect("create test database");
                admin.pool().close().await;
                let url = replace_database(&admin_url, &name);
                (url, None, Some((admin_url, name)))
            }
        };
        Some(Self::start(url, folder, postgres, backend, config, settings, demo).await)
    }

    /// The app on a database of the caller's (a throwaway cluster), which it neither creates
    /// nor drops.
    pub async fn spawn_on(url: &str, backend: Backend, settings: StoreSettings) -> TestApp {
        let (app, _) = Self::start(
            url.to_string(),
            None,
            None,
            backend,
            WebConfig::default(),
            settings,
            false,
        )
        .await;
        app
    }

    async fn start(
        url: String,
        folder: Option<tempfile::TempDir>,
        postgres: Option<(String, String)>,
        backend: Backend,
        config: WebConfig,
        settings: StoreSettings,
        demo: bool,
    ) -> (TestApp, Vec<User>) {
        let store = Store::open_with(&url, settings)
            .await
            .expect("open and migrate");
        let people = if demo {
            cutpoints::cli::demo::seed(&store)
                .await
                .expect("the demo seeds")
        } else {
            Vec::new()
        };
        let folder = folder.unwrap_or_else(|| tempfile::tempdir().expect("temp folder"));
        let key_file = folder.path().join("signing.key");
        let signer = cutpoints::publish::signing::load_or_create(&store, &key_file)
            .await
            .expect("a signing key");
        let listener = TcpListener::bind("127.0.0.1:0").await.expect("bind");
        let base = format!("http://{}", listener.local_addr().unwrap());
        let (tx, rx) = tokio::sync::oneshot::channel::<()>();
        let state = AppState::new(store.clone(), config, signer);
        tokio::spawn(async move {
            cutpoints::serve(listener, state, async {
                let _ = rx.await;
            })
            .await
            .expect("server runs");
        });
        let app = TestApp {
            base,
            store,
            store_url: url,
            backend,
            http: reqwest::Client::builder()
                .redirect(reqwest::redirect::Policy::none())
                .build()
                .unwrap(),
            shutdown: Some(tx),
            key_file,
            _folder: folder,
            postgres,
        };
        (app, people)
    }

    pub fn url(&self, path: &str) -> String {
        format!("{}{}", self.base, path)
    }

    /// Adds a person with [`PASSWORD`] (hashed once for the whole run).
    pub async fn add_user(&self, username: &str, roles: &str) -> User {
        let hash = tokio::task::spawn_blocking(|| PASSWORD_HASH.clone())
            .await
            .unwrap();
        add_with_hash(
            &self.store,
            By::Operator,
            &Username::parse(username).unwrap(),
            &format!("{username} (display)"),
            &Roles::parse_list(roles).unwrap(),
            &hash,
        )
        .await
        .expect("add user")
    }

    /// Issues a token for `username` through the same path as `cutpoints token issue`.
    pub async fn token(&self, username: &str, scope: Scope) -> String {
        cutpoints::ops::users::issue_token(&self.store, By::Operator, username, scope, "test", None)
            .await
            .expect("issue token")
            .0
    }

    /// `GET path` with `token` as the bearer credential.
    pub async fn get_as(&self, token: &str, path: &str) -> reqwest::Response {
        self.http
            .get(self.url(path))
            .bearer_auth(token)
            .send()
            .await
            .unwrap()
    }

    /// A browser-like client (cookies kept, redirects not followed) signed in as `username`.
    pub async fn signed_in(&self, username: &str) -> Browser {
        let browser = Browser::new(self);
        let response = browser.sign_in(username, PASSWORD).await;
        assert_eq!(response.status(), 303, "sign-in of {username} redirects");
        browser
    }

    /// Runs SQL on the app's database as its owner (for tests that play an attacker).
    pub async fn exec(&self, sql: &str) {
        sqlx::query(sqlx::AssertSqlSafe(sql.to_string()))
            .execute(self.store.pool())
            .await
            .unwrap_or_else(|e| panic!("{sql}: {e}"));
    }

    /// Drops the triggers that refuse changes to `tables` (`events` and the tables whose rows
    /// are written once): what someone with the database owner's rights does first.
    pub async fn drop_change_guards(&self, tables: &[&str]) {
        for table in tables {
            let (row, whole) = match (self.backend, *table) {
                (Backend::Sqlite, t) => (format!("{t}_no_update"), format!("{t}_no_delete")),
                (Backend::Postgres, "events") => (
                    "events_no_update ON events".into(),
                    "events_no_truncate ON events".into(),
                ),
                (Backend::Postgres, t) => (
                    format!("{t}_no_change ON {t}"),
                    format!("{t}_no_truncate ON {t}"),
                ),
            };
            self.exec(&format!("DROP TRIGGER {row}")).await;
            self.exec(&format!("DROP TRIGGER {whole}")).await;
        }
    }

    /// Every event, in order.
    pub async fn events(&self) -> Vec<cutpoints::audit::Entry> {
        events::list(&self.store, 0, 1_000_000, None).await.unwrap()
    }

    pub async fn event_count(&self) -> i64 {
        events::count(&self.store).await.unwrap()
    }
}

impl Drop for TestApp {
    fn drop(&mut self) {
        if let Some(tx) = self.shutdown.take() {
            let _ = tx.send(());
        }
        if let Some((admin_url, name)) = self.postgres.take() {
            // Drop the test database from a thread of its own: Drop cannot await.
            let _ = std::thread::spawn(move || {
                let rt = tokio::runtime::Builder::new_current_thread()
                    .enable_all()
                    .build()
                    .unwrap();
                rt.block_on(async {
                    if let Ok(admin) = Store::connect(&admin_url).await {
                        let _ = sqlx::query(sqlx::AssertSqlSafe(format!(
                            "DROP DATABASE IF EXISTS {name} WITH (FORCE)"
                        )))
                        .execute(admin.pool())
                        .await;
                        admin.pool().close().await;
                    }
                });
            })
            .join();
        }
    }
}

/// `postgres://user@host:port/db?x` with `db` replaced.
fn replace_database(url: &str, name: &str) -> String {
    let (head, query) = match url.split_once('?') {
        Some((h, q)) => (h, Some(q)),
        None => (url, None),
    };
    let scheme_end = head.find("://").map(|i| i + 3).unwrap_or(0);
    let base = match head[scheme_end..].find('/') {
        Some(i) => &head[..scheme_end + i],
        None => head,
    };
    match query {
        Some(q) => format!("{base}/{name}?{q}"),
        None => format!("{base}/{name}"),
    }
}

/// A client that behaves like a browser: it keeps cookies and can post forms with the page's
/// CSRF token.
pub struct Browser {
    pub client: reqwest::Client,
    pub base: String,
}

impl Browser {
    pub fn new(app: &TestApp) -> Browser {
        Browser {
            client: reqwest::Client::builder()
                .cookie_store(true)
                .redirect(reqwest::redirect::Policy::none())
                .build()
                .unwrap(),
            base: app.base.clone(),
        }
    }

    pub fn url(&self, path: &str) -> String {
        format!("{}{}", self.base, path)
    }

    pub async fn get(&self, path: &str) -> reqwest::Response {
        self.client.get(self.url(path)).send().await.unwrap()
    }

    pub async fn get_text(&self, path: &str) -> (u16, String) {
        let r = self.get(path).await;
        let status = r.status().as_u16();
        (status, r.text().await.unwrap())
    }

    /// The CSRF token of the form on `path`.
    pub async fn csrf_on(&self, path: &str) -> String {
        let (_, html) = self.get_text(path).await;
        csrf_in(&html).unwrap_or_else(|| panic!("no CSRF field on {path}"))
    }

    pub async fn sign_in(&self, username: &str, password: &str) -> reqwest::Response {
        let csrf = self.csrf_on("/signin").await;
        self.client
            .post(self.url("/signin"))
            .form(&[
                ("_csrf", csrf.as_str()),
                ("username", username),
                ("password", password),
                ("next", "/metrics"),
            ])
            .send()
            .await
            .unwrap()
    }

    /// Posts a form, adding the CSRF token found on `form_page`.
    pub async fn post_form(
        &self,
        form_page: &str,
        action: &str,
        fields: &[(&str, &str)],
    ) -> reqwest::Response {
        let csrf = self.csrf_on(form_page).await;
        let mut all: Vec<(&str, &str)> = vec![("_csrf", csrf.as_str())];
        all.extend_from_slice(fields);
        self.client
            .post(self.url(action))
            .form(&all)
            .send()
            .await
            .unwrap()
    }

    /// The session's CSRF token for API calls, from `/api/v1/me`.
    pub async fn api_csrf(&self) -> String {
        let me: Value = self.get("/api/v1/me").await.json().await.unwrap();
        me["csrf_token"].as_str().unwrap().to_string()
    }
}

pub fn csrf_in(html: &str) -> Option<String> {
    let marker = "name=\"_csrf\" value=\"";
    let start = html.find(marker)? + marker.len();
    let end = html[start..].find('"')? + start;
    Some(html[start..end].to_string())
}

/// Runs each test body once per backend: `NAME::sqlite` and `NAME::postgres`.
#[macro_export]
macro_rules! on_both_backends {
    ($(async fn $name:ident($app:ident) $body:block)*) => {
        $crate::on_both_backends! { with $crate::helpers::TestApp::spawn; $(async fn $name($app) $body)* }
    };
    (with $spawn:path; $(async fn $name:ident($app:ident) $body:block)*) => {$(
        mod $name {
            #[allow(unused_imports)]
            use super::*;
            async fn run($app: $crate::helpers::TestApp) $body

            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn sqlite() {
                let app = $spawn($crate::helpers::Backend::Sqlite)
                    .await
                    .expect("SQLite is always available");
                run(app).await
            }

            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            #[cfg_attr(postgres_missing, ignore = "needs PostgreSQL: install Debian's postgresql package or set CUTPOINTS_TEST_POSTGRES_URL")]
            async fn postgres() {
                if let Some(app) = $spawn($crate::helpers::Backend::Postgres).await {
                    run(app).await
                }
            }
        }
    )*};
}

/// Checks `svg` with the reference parser, Python's `xml.etree.ElementTree`; false when
/// python3 is missing (reported as a skip, a failure under CI).
pub fn parses_as_xml(svg: &str) -> bool {
    let script = "import json, sys, xml.etree.ElementTree as ET\nET.fromstring(json.load(sys.stdin))\nprint('true')";
    python_json(script, &Value::from(svg), "reference XML parser").is_some()
}

/// Runs a Python 3 script with `input` as JSON on its stdin and reads its stdout as JSON: for
/// checks against Python's standard library (`csv`, `urllib.parse`) as the outside reference.
/// `None` when python3 is missing (reported as a skip, a failure under CI).
pub fn python_json(script: &str, input: &Value, what: &str) -> Option<Value> {
    use std::io::Write;
    use std::process::{Command, Stdio};
    let child = Command::new("python3")
        .args(["-c", script])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn();
    let Ok(mut child) = child else {
        missing_prerequisite(&format!("python3 ({what})"));
        return None;
    };
    child
        .stdin
        .take()
        .unwrap()
        .write_all(input.to_string().as_bytes())
        .unwrap();
    let output = child.wait_with_output().unwrap();
    assert!(
        output.status.success(),
        "python3 failed: {}",
        String::from_utf8_lossy(&output.stderr)
    );
    Some(serde_json::from_slice(&output.stdout).expect("the script prints JSON"))
}

/// The records of a CSV text as Python's `csv` module reads them (the reference reader).
pub fn python_csv_rows(text: &str) -> Option<Vec<Vec<String>>> {
    let script = "import csv, io, json, sys\nprint(json.dumps(list(csv.reader(io.StringIO(json.load(sys.stdin), newline='')))))";
    python_json(
        script,
        &Value::from(text),
        "its csv module is the reference CSV reader",
    )
    .map(|rows| serde_json::from_value(rows).unwrap())
}

/// The number of sessions stored.
pub async fn session_count(app: &TestApp) -> i64 {
    sqlx::query_scalar("SELECT COUNT(*) FROM sessions")
        .fetch_one(app.store.pool())
        .await
        .unwrap()
}
