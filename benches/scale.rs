//! Benchmark: answers at organisation scale (not a test; run with scripts/bench-scale.sh).
//!
//! Builds a register through the product's own operations (`ops`: metrics created, each
//! version proposed, submitted, commented on and approved by two reviewers, the first version
//! of each metric and a few later ones signed off with a password) at two sizes, the full one
//! (2,000 metrics x 20 versions, about 300,000 events and 100,000 comments) and a copy one
//! tenth its size, on SQLite and on PostgreSQL. Each fixture is checked once with
//! `cutpoints audit verify` and kept under `target/scale-fixtures/`, keyed by size, schema
//! version and the generator's own version, so later runs skip building.
//!
//! Then the release binary serves both sizes of one backend at once, and each answer is asked
//! of the two in turn (warm-up first), signed in as an auditor with a session cookie: p50 and
//! p95 at each size, the growth of p50 from one tenth to full size, and the server's RSS.
//!
//! CUTPOINTS_SCALE_METRICS sets the full size's metrics (default 2,000; one tenth of it is the
//! small copy), CUTPOINTS_SCALE_VERSIONS the versions of each (default 20),
//! CUTPOINTS_SCALE_BACKENDS which databases (default `sqlite,postgres`),
//! CUTPOINTS_SCALE_REQUESTS the requests of each answer at each size (default 30), and
//! CUTPOINTS_SCALE_BUDGET the seconds after which an answer stops early once it has five
//! (default 60; the slowest answers take seconds each); CUTPOINTS_SCALE_BUILD_ONLY=1 only
//! builds (or finds) the fixtures.

use std::collections::BTreeMap;
use std::io::{Read, Write};
use std::net::{TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use cutpoints::domain::proposal::{ContentInput, Verdict};
use cutpoints::domain::{Direction, Roles, Timestamp, User, Username};
use cutpoints::ops::metrics::NewMetric;
use cutpoints::ops::proposals as flow;
use cutpoints::ops::users::{By, add_with_hash, hash_password};
use cutpoints::store::Store;

/// Bumped whenever the generated register changes, so cached fixtures are rebuilt.
const GENERATOR: u32 = 1;
/// Everyone's password in the fixture (invented people, invented data).
const PASSWORD: &str = "scale-bench-password-1";
/// The invented history spans about this many days before the build.
const HISTORY_DAYS: i64 = 700;

fn env_or<T: std::str::FromStr>(name: &str, default: T) -> T {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn binary() -> PathBuf {
    root().join("target/release/cutpoints")
}

fn fixtures_dir() -> PathBuf {
    root().join("target/scale-fixtures")
}

fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

/// The newest migration's number for a backend: fixtures are keyed by it.
fn schema_version(backend: &str) -> u32 {
    std::fs::read_dir(root().join("migrations").join(backend))
        .unwrap()
        .filter_map(|e| {
            let name = e.ok()?.file_name().to_string_lossy().to_string();
            name.split('_').next()?.parse().ok()
        })
        .max()
        .unwrap_or(0)
}

#[derive(Clone, Copy, Debug)]
struct Size {
    metrics: usize,
    versions: usize,
}

/// What a built fixture is and holds, kept beside it (its presence marks it complete).
#[derive(Clone, Debug, serde::Serialize, serde::Deserialize)]
struct Meta {
    metrics: usize,
    versions: usize,
    events: i64,
    comments: i64,
    signoffs: i64,
    /// A time half way through the history, for the past set.
    as_of: String,
    /// The metric whose pages and events are asked for, and its latest proposal.
    key: String,
    proposal: i64,
    build_seconds: f64,
    verify: String,
}

// ---------------------------------------------------------------------------------------
// Building a register through the operations.

/// The invented calendar: the store's clock moves forward by a fixed step per operation.
struct Clock<'a> {
    store: &'a Store,
    at: Timestamp,
    step: i64,
}

impl Clock<'_> {
    fn tick(&mut self) {
        self.at = self.at.plus_seconds(self.step);
        self.store.set_clock(Some(self.at));
    }
}

/// Comments on the proposal of `metric` in `round`: 0 to 5, 2.5 on average.
fn comments_for(metric: usize, round: usize) -> usize {
    (metric * 7 + round * 3) % 6
}

/// Whether this version moves the worst-level cut, which needs a sign-off: a few only.
fn moves_critical(metric: usize, round: usize, size: Size) -> bool {
    round == size.versions / 2 && metric % 500 == 7
}

fn direction_of(metric: usize) -> Direction {
    if metric % 3 == 1 {
        Direction::LowerIsBetter
    } else {
        Direction::HigherIsBetter
    }
}

/// The cut points of `metric`'s version in `round`: every round moves the inner cuts a
/// little, the worst-level cut stays except where [`moves_critical`] says.
fn cuts(metric: usize, round: usize, size: Size) -> BTreeMap<String, f64> {
    let base = (metric % 50) as f64;
    let r = round as f64;
    let critical_moved = round >= size.versions / 2 && metric % 500 == 7;
    let shift = if critical_moved { 1.0 } else { 0.0 };
    let values = match direction_of(metric) {
        Direction::LowerIsBetter => [
            base + 60.0 + shift,
            base + 50.0 - r * 0.1,
            base + 40.0 - (round % 4) as f64 * 0.5,
            base + 30.0 - (round % 5) as f64 * 0.25,
        ],
        _ => [
            base + 10.0 - shift,
            base + 20.0 + r * 0.1,
            base + 30.0 + (round % 4) as f64 * 0.5,
            base + 40.0 + (round % 5) as f64 * 0.25,
        ],
    };
    direction_of(metric)
        .cut_names()
        .into_iter()
        .map(String::from)
        .zip(values)
        .collect()
}

struct People {
    admin: User,
    owner: User,
    reviewers: [User; 2],
    signatory: User,
}

async fn add_people(store: &Store, clock: &mut Clock<'_>) -> People {
    let hash = hash_password(PASSWORD.to_string()).await;
    let mut add = async |username: &str, name: &str, roles: &str| {
        clock.tick();
        add_with_hash(
            store,
            By::Operator,
            &Username::parse(username).unwrap(),
            name,
            &Roles::parse_list(roles).unwrap(),
            &hash,
        )
        .await
        .unwrap()
    };
    let admin = add("ada", "Ada Lindqvist", "admin").await;
    let owner = add("otto", "Otto Marsh", "owner").await;
    let first = add("rhea", "Rhea Calloway", "reviewer").await;
    let second = add("remy", "Remy Okafor", "reviewer").await;
    let signatory = add("sina", "Sina Varga", "signatory").await;
    add("audra", "Audra Pell", "auditor,viewer").await;
    People {
        admin,
        owner,
        reviewers: [first, second],
        signatory,
    }
}

fn key_of(metric: usize) -> String {
    format!("fleet.metric_{metric:05}")
}

/// Builds the register into an empty database; returns what it holds.
async fn build(url: &str, size: Size) -> Meta {
    let started = Instant::now();
    let store = Store::open(url).await.unwrap();
    let operations = size.metrics * (2 + size.versions * 7) + 10;
    let real_now = Timestamp::now();
    let mut clock = Clock {
        store: &store,
        at: real_now.plus_seconds(-HISTORY_DAYS * 86_400 - 86_400),
        step: (HISTORY_DAYS * 86_400 / operations as i64).max(1),
    };
    let people = add_people(&store, &mut clock).await;
    clock.tick();
    flow::set_reviewers_required(&store, By::Operator, 2)
        .await
        .unwrap();
    for m in 0..size.metrics {
        clock.tick();
        let input = NewMetric {
            key: key_of(m),
            name: format!("Fleet metric number {m}"),
            description: "An invented metric of an invented fleet.".into(),
            unit: "%".into(),
            owners: vec!["otto".into()],
            data_source: "fleet telemetry (invented)".into(),
            review_cadence_months: Some(12),
            tags: vec!["fleet".into()],
        };
        cutpoints::ops::metrics::create(&store, &people.admin, &input)
            .await
            .unwrap();
    }
    let chosen = size.metrics / 2;
    let mut as_of = String::new();
    let mut proposal = 0;
    for round in 0..size.versions {
        if round == size.versions / 2 {
            as_of = clock.at.to_string();
        }
        eprintln!(
            "  round {} of {} ({:.0} s)",
            round + 1,
            size.versions,
            started.elapsed().as_secs_f64()
        );
        for m in 0..size.metrics {
            let id = version(&store, &mut clock, &people, m, round, size).await;
            if m == chosen {
                proposal = id;
            }
        }
    }
    store.set_clock(None);
    cutpoints::publish::signing::load_or_create(&store, &key_file(url))
        .await
        .unwrap();
    let count = async |sql: &'static str| -> i64 {
        sqlx::query_scalar(sql)
            .fetch_one(store.pool())
            .await
            .unwrap()
    };
    let events = count("SELECT COUNT(*) FROM events").await;
    let comments = count("SELECT COUNT(*) FROM comments").await;
    let signoffs = count("SELECT COUNT(*) FROM signoffs").await;
    store.close().await;
    let build_seconds = started.elapsed().as_secs_f64();
    let verify = verify(url);
    Meta {
        metrics: size.metrics,
        versions: size.versions,
        events,
        comments,
        signoffs,
        as_of,
        key: key_of(chosen),
        proposal,
        build_seconds,
        verify,
    }
}

/// One version of one metric, through the workflow: proposed, submitted, commented on,
/// approved by both reviewers, and signed off where a sign-off is needed.
async fn version(
    store: &Store,
    clock: &mut Clock<'_>,
    people: &People,
    m: usize,
    round: usize,
    size: Size,
) -> i64 {
    let owner = &people.owner;
    let content = ContentInput {
        direction: direction_of(m).as_str().into(),
        cuts: cuts(m, round, size),
        shades: None,
        unit: None,
        effective_from: None,
        rationale: format!(
            "Review {} of the cut points after a quarter of invented readings from the fleet.",
            round + 1
        ),
    };
    clock.tick();
    let id = flow::propose(store, owner, &key_of(m), &content)
        .await
        .unwrap();
    clock.tick();
    flow::submit(store, owner, id).await.unwrap();
    for c in 0..comments_for(m, round) {
        clock.tick();
        let by = match c % 3 {
            0 => &people.reviewers[0],
            1 => owner,
            _ => &people.reviewers[1],
        };
        let cut = (c % 2 == 0).then_some(direction_of(m).cut_names()[1]);
        let body = format!(
            "Comment {} on review {}: the intervene cut against last quarter's readings.",
            c + 1,
            round + 1
        );
        flow::comment(store, by, id, &body, cut).await.unwrap();
    }
    let hash = flow::get(store, id, None)
        .await
        .unwrap()
        .view
        .latest_revision
        .hash;
    let mut recorded = None;
    for reviewer in &people.reviewers {
        clock.tick();
        recorded = flow::review(store, reviewer, id, Verdict::Approve, &hash, "")
            .await
            .unwrap()
            .version;
    }
    if round == 0 || moves_critical(m, round, size) {
        assert!(recorded.is_none(), "a sign-off is needed for {m} {round}");
        clock.tick();
        recorded = flow::sign_off(store, &people.signatory, id, &hash, PASSWORD)
            .await
            .unwrap()
            .version;
    }
    assert_eq!(recorded, Some(round as i64 + 1), "metric {m} round {round}");
    id
}

/// `cutpoints audit verify` on the fixture: its output, which must start with `ok`.
fn verify(url: &str) -> String {
    let out = Command::new(binary())
        .args(["audit", "verify", "--database-url", url])
        .output()
        .expect("build the release binary first: cargo build --release");
    let text = String::from_utf8_lossy(&out.stdout).trim().to_string();
    assert!(
        out.status.success() && text.starts_with("ok"),
        "audit verify of {url}: {text} {}",
        String::from_utf8_lossy(&out.stderr)
    );
    text
}

fn key_file(url: &str) -> PathBuf {
    let name: String = url
        .rsplit(['/', ':'])
        .next()
        .unwrap()
        .chars()
        .map(|c| if c.is_ascii_alphanumeric() { c } else { '_' })
        .collect();
    fixtures_dir().join(format!("{name}.signing.key"))
}

fn fixture_name(backend: &str, size: Size) -> String {
    format!(
        "{backend}_{}x{}_s{}_g{GENERATOR}",
        size.metrics,
        size.versions,
        schema_version(backend)
    )
}

fn read_meta(path: &Path) -> Option<Meta> {
    serde_json::from_slice(&std::fs::read(path).ok()?).ok()
}

/// The SQLite fixture of `size`: built unless already cached.
async fn sqlite_fixture(size: Size) -> (String, Meta) {
    let name = fixture_name("sqlite", size);
    let db = fixtures_dir().join(format!("{name}.db"));
    let url = format!("sqlite://{}", db.display());
    let meta_path = fixtures_dir().join(format!("{name}.json"));
    if let Some(meta) = read_meta(&meta_path) {
        eprintln!("{name}: cached");
        return (url, meta);
    }
    for suffix in ["", "-wal", "-shm"] {
        let _ = std::fs::remove_file(format!("{}{suffix}", db.display()));
    }
    let _ = std::fs::remove_file(key_file(&url));
    eprintln!("{name}: building");
    let meta = build(&url, size).await;
    std::fs::write(&meta_path, serde_json::to_vec_pretty(&meta).unwrap()).unwrap();
    (url, meta)
}

// ---------------------------------------------------------------------------------------
// A PostgreSQL cluster of the benchmark's own, kept under target/ between runs.

fn is_root() -> bool {
    Command::new("id")
        .arg("-u")
        .output()
        .is_ok_and(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
}

/// The newest installed PostgreSQL's server binaries.
fn server_binaries() -> PathBuf {
    let mut found: Vec<(u32, PathBuf)> = std::fs::read_dir("/usr/lib/postgresql")
        .expect("PostgreSQL's server binaries (Debian's postgresql package)")
        .filter_map(|e| {
            let e = e.ok()?;
            let version = e.file_name().to_str()?.parse().ok()?;
            let bin = e.path().join("bin");
            bin.join("initdb").exists().then_some((version, bin))
        })
        .collect();
    found.sort();
    found.pop().expect("an installed PostgreSQL").1
}

struct Cluster {
    bin: PathBuf,
    dir: PathBuf,
    port: u16,
    as_postgres: bool,
}

impl Cluster {
    fn run(&self, program: &str, args: &[&str]) -> std::process::Output {
        let exe = self.bin.join(program);
        let mut c = if self.as_postgres {
            let mut c = Command::new("runuser");
            c.args(["-u", "postgres", "--"]).arg(&exe);
            c
        } else {
            Command::new(&exe)
        };
        c.args(args).current_dir("/").output().unwrap()
    }

    fn data(&self) -> String {
        self.dir.join("data").display().to_string()
    }

    /// Starts the cluster kept under target/ (made on first use), with a watchdog that stops
    /// it when this process ends, however it ends.
    fn start() -> Cluster {
        let bin = server_binaries();
        let major = bin
            .parent()
            .and_then(|p| p.file_name())
            .unwrap()
            .to_string_lossy()
            .to_string();
        let cluster = Cluster {
            dir: fixtures_dir().join(format!("postgres-{major}")),
            bin,
            port: free_port(),
            as_postgres: is_root(),
        };
        let data = cluster.data();
        if !Path::new(&data).join("PG_VERSION").exists() {
            let _ = std::fs::remove_dir_all(&cluster.dir);
            std::fs::create_dir_all(&cluster.dir).unwrap();
            if cluster.as_postgres {
                let owned = Command::new("chown")
                    .args(["postgres:postgres", cluster.dir.to_str().unwrap()])
                    .status()
                    .unwrap();
                assert!(owned.success());
            }
            let out = cluster.run(
                "initdb",
                &["-D", &data, "-A", "trust", "-U", "postgres", "-E", "UTF8"],
            );
            assert!(
                out.status.success(),
                "initdb: {}",
                String::from_utf8_lossy(&out.stderr)
            );
        } else if Path::new(&data).join("postmaster.pid").exists() {
            // Left running by a run that was killed before its watchdog stopped it.
            let _ = cluster.run("pg_ctl", &["-D", &data, "-m", "fast", "-w", "stop"]);
        }
        let options = format!(
            "-p {} -k {} -c listen_addresses=127.0.0.1 -c synchronous_commit=off",
            cluster.port,
            cluster.dir.display()
        );
        let log = cluster.dir.join("log");
        let out = cluster.run(
            "pg_ctl",
            &[
                "-D",
                &data,
                "-l",
                log.to_str().unwrap(),
                "-o",
                &options,
                "-w",
                "start",
            ],
        );
        assert!(
            out.status.success(),
            "pg_ctl start: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let as_postgres = if cluster.as_postgres {
            "runuser -u postgres -- "
        } else {
            ""
        };
        let script = format!(
            "while kill -0 {pid} 2>/dev/null; do sleep 1; done; \
             {as_postgres}'{pg_ctl}' -D '{data}' -m fast -w stop >/dev/null 2>&1",
            pid = std::process::id(),
            pg_ctl = cluster.bin.join("pg_ctl").display(),
        );
        let watchdog = Command::new("setsid")
            .args(["--fork", "sh", "-c", &script])
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .status()
            .expect("setsid (util-linux)");
        assert!(watchdog.success());
        cluster
    }

    fn url(&self, database: &str) -> String {
        format!("postgres://postgres@127.0.0.1:{}/{database}", self.port)
    }
}

impl Drop for Cluster {
    fn drop(&mut self) {
        let _ = self.run("pg_ctl", &["-D", &self.data(), "-m", "fast", "-w", "stop"]);
    }
}

/// The PostgreSQL fixture of `size` in the cluster: built unless already cached.
async fn postgres_fixture(cluster: &Cluster, size: Size) -> (String, Meta) {
    let name = fixture_name("postgres", size);
    let url = cluster.url(&name);
    let meta_path = fixtures_dir().join(format!("{name}.json"));
    let admin = sqlx::postgres::PgPool::connect(&cluster.url("postgres"))
        .await
        .unwrap();
    let exists: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM pg_database WHERE datname = $1")
        .bind(&name)
        .fetch_one(&admin)
        .await
        .unwrap();
    if exists == 1
        && let Some(meta) = read_meta(&meta_path)
    {
        admin.close().await;
        eprintln!("{name}: cached");
        return (url, meta);
    }
    // The name is made here of letters, digits and underscores.
    sqlx::query(sqlx::AssertSqlSafe(format!(
        "DROP DATABASE IF EXISTS {name}"
    )))
    .execute(&admin)
    .await
    .unwrap();
    sqlx::query(sqlx::AssertSqlSafe(format!("CREATE DATABASE {name}")))
        .execute(&admin)
        .await
        .unwrap();
    admin.close().await;
    let _ = std::fs::remove_file(key_file(&url));
    eprintln!("{name}: building");
    let meta = build(&url, size).await;
    std::fs::write(&meta_path, serde_json::to_vec_pretty(&meta).unwrap()).unwrap();
    (url, meta)
}

// ---------------------------------------------------------------------------------------
// Serving and asking.

struct Server {
    child: Child,
    port: u16,
    cookie: String,
    meta: Meta,
}

impl Drop for Server {
    fn drop(&mut self) {
        let _ = Command::new("kill")
            .args(["-TERM", &self.child.id().to_string()])
            .status();
        let _ = self.child.wait();
    }
}

impl Server {
    async fn start(url: &str, meta: Meta) -> Server {
        // A fresh session for the auditor (sessions are not part of the record).
        let store = Store::open(url).await.unwrap();
        let (secret, _) =
            cutpoints::ops::access::sign_in(&store, "audra", PASSWORD, "127.0.0.1", None)
                .await
                .unwrap();
        store.close().await;
        let port = free_port();
        let child = Command::new(binary())
            .args([
                "serve",
                "--database-url",
                url,
                "--bind",
                &format!("127.0.0.1:{port}"),
            ])
            .arg("--signing-key")
            .arg(key_file(url))
            .env("CUTPOINTS_LOG", "warn")
            .stdout(Stdio::null())
            .spawn()
            .expect("build the release binary first: cargo build --release");
        for _ in 0..400 {
            if TcpStream::connect(("127.0.0.1", port)).is_ok() {
                break;
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        Server {
            child,
            port,
            cookie: format!("cutpoints_session={secret}"),
            meta,
        }
    }

    fn rss_mib(&self) -> f64 {
        let status = std::fs::read_to_string(format!("/proc/{}/status", self.child.id())).unwrap();
        let kib: f64 = status
            .lines()
            .find_map(|l| l.strip_prefix("VmRSS:"))
            .and_then(|v| v.split_whitespace().next())
            .and_then(|v| v.parse().ok())
            .unwrap();
        kib / 1024.0
    }

    /// One request on a fresh connection, its body read to the end; the seconds it took.
    /// A 503 (the server found the database slow to answer and refuses for a moment) is
    /// counted in `refused`, waited out and asked again; only the answer that succeeds counts.
    fn ask(&self, path: &str, refused: &mut usize) -> f64 {
        loop {
            match self.ask_once(path) {
                Some(seconds) => return seconds,
                None => {
                    *refused += 1;
                    assert!(*refused < 120, "{path}: the server keeps answering 503");
                    std::thread::sleep(Duration::from_secs(1));
                }
            }
        }
    }

    fn ask_once(&self, path: &str) -> Option<f64> {
        let started = Instant::now();
        let mut stream = TcpStream::connect(("127.0.0.1", self.port)).unwrap();
        write!(
            stream,
            "GET {path} HTTP/1.1\r\nHost: 127.0.0.1:{}\r\nCookie: {}\r\nAccept: */*\r\nConnection: close\r\n\r\n",
            self.port, self.cookie
        )
        .unwrap();
        let mut answer = Vec::new();
        stream.read_to_end(&mut answer).unwrap();
        let seconds = started.elapsed().as_secs_f64();
        let head = String::from_utf8_lossy(&answer[..answer.len().min(200)]).to_string();
        if head.starts_with("HTTP/1.1 503") {
            return None;
        }
        assert!(
            head.starts_with("HTTP/1.1 200"),
            "{path}: {}",
            head.lines().next().unwrap_or("no answer")
        );
        Some(seconds)
    }
}

/// The answers measured: a name and the path asked, given the fixture.
/// An answer's name and how its path is made from the fixture.
type Answer = (&'static str, fn(&Meta) -> String);

fn answers() -> [Answer; 10] {
    [
        // First, so that the memory it keeps is seen on a server that has answered nothing.
        ("`GET /api/v1/audit/exceptions`", |_| {
            "/api/v1/audit/exceptions".into()
        }),
        ("`/audit` index page", |_| "/audit".into()),
        ("`GET /api/v1/audit/verify`", |_| {
            "/api/v1/audit/verify".into()
        }),
        ("`GET /api/v1/published/{key}`", |m| {
            format!("/api/v1/published/{}", m.key)
        }),
        ("`GET /api/v1/published?as_of=`", |m| {
            format!("/api/v1/published?as_of={}", m.as_of)
        }),
        ("`GET /api/v1/audit?metric=KEY&limit=100`", |m| {
            format!("/api/v1/audit?metric={}&limit=100", m.key)
        }),
        ("`GET /api/v1/audit?limit=100`", |_| {
            "/api/v1/audit?limit=100".into()
        }),
        ("`/published` page", |_| "/published".into()),
        ("metric page `/metrics/{key}`", |m| {
            format!("/metrics/{}", m.key)
        }),
        ("proposal page `/proposals/{id}`", |m| {
            format!("/proposals/{}", m.proposal)
        }),
    ]
}

struct Row {
    answer: &'static str,
    backend: &'static str,
    tenth: (f64, f64),
    full: (f64, f64),
    samples: usize,
    /// The full-size server's RSS before the answer's first request and after its last.
    rss_full_mib: (f64, f64),
    note: String,
}

/// p50 and p95 by nearest rank.
fn percentiles(mut v: Vec<f64>) -> (f64, f64) {
    v.sort_by(f64::total_cmp);
    let rank = |p: f64| v[((p * v.len() as f64).ceil() as usize).clamp(1, v.len()) - 1];
    (rank(0.50), rank(0.95))
}

fn measure(backend: &'static str, small: &Server, large: &Server) -> Vec<Row> {
    let requests: usize = env_or("CUTPOINTS_SCALE_REQUESTS", 30);
    let budget = Duration::from_secs(env_or("CUTPOINTS_SCALE_BUDGET", 60));
    let mut rows = Vec::new();
    for (answer, path) in answers() {
        let (small_path, large_path) = (path(&small.meta), path(&large.meta));
        let is_exceptions = answer.contains("exceptions");
        let before = (small.rss_mib(), large.rss_mib());
        // Warm-up: one of each, more where they are quick.
        let mut refused = 0;
        let first = large.ask(&large_path, &mut refused);
        small.ask(&small_path, &mut refused);
        if first < 0.5 {
            for _ in 0..3 {
                small.ask(&small_path, &mut refused);
                large.ask(&large_path, &mut refused);
            }
        }
        let after_first = (small.rss_mib(), large.rss_mib());
        let started = Instant::now();
        let (mut a, mut b) = (Vec::new(), Vec::new());
        for i in 0..requests {
            if i >= 5 && started.elapsed() > budget {
                break;
            }
            // Alternating, and which goes first alternates too.
            if i % 2 == 0 {
                a.push(small.ask(&small_path, &mut refused));
                b.push(large.ask(&large_path, &mut refused));
            } else {
                b.push(large.ask(&large_path, &mut refused));
                a.push(small.ask(&small_path, &mut refused));
            }
        }
        let samples = a.len();
        let mut note = if is_exceptions {
            format!(
                "RSS one tenth {:.0} -> {:.0} (first) -> {:.0} MiB, full {:.0} -> {:.0} (first) -> {:.0} MiB",
                before.0,
                after_first.0,
                small.rss_mib(),
                before.1,
                after_first.1,
                large.rss_mib()
            )
        } else {
            String::new()
        };
        if refused > 0 {
            note.push_str(&format!(
                "{}{refused} requests answered 503 and asked again",
                if note.is_empty() { "" } else { "; " }
            ));
        }
        let row = Row {
            answer,
            backend,
            tenth: percentiles(a),
            full: percentiles(b),
            samples,
            rss_full_mib: (before.1, large.rss_mib()),
            note,
        };
        eprintln!(
            "  {answer}: {} / {} against {} / {}; full-size RSS {:.0} -> {:.0} MiB {}",
            show(row.tenth.0),
            show(row.tenth.1),
            show(row.full.0),
            show(row.full.1),
            row.rss_full_mib.0,
            row.rss_full_mib.1,
            row.note
        );
        rows.push(row);
    }
    rows
}

fn show(seconds: f64) -> String {
    if seconds >= 1.0 {
        format!("{seconds:.2} s")
    } else if seconds >= 0.01 {
        format!("{:.0} ms", seconds * 1000.0)
    } else {
        format!("{:.1} ms", seconds * 1000.0)
    }
}

struct Measured {
    backend: &'static str,
    metas: (Meta, Meta),
    rows: Vec<Row>,
    rss_start: (f64, f64),
    rss_after: (f64, f64),
}

async fn run_backend(backend: &'static str, sizes: (Size, Size)) -> Measured {
    let cluster = (backend == "postgres").then(Cluster::start);
    let fixture = async |size: Size| match &cluster {
        Some(c) => postgres_fixture(c, size).await,
        None => sqlite_fixture(size).await,
    };
    let (small_url, small_meta) = fixture(sizes.0).await;
    let (large_url, large_meta) = fixture(sizes.1).await;
    if std::env::var("CUTPOINTS_SCALE_BUILD_ONLY").as_deref() == Ok("1") {
        return Measured {
            backend,
            metas: (small_meta, large_meta),
            rows: Vec::new(),
            rss_start: (0.0, 0.0),
            rss_after: (0.0, 0.0),
        };
    }
    let small = Server::start(&small_url, small_meta.clone()).await;
    let large = Server::start(&large_url, large_meta.clone()).await;
    eprintln!("{backend}: measuring");
    let rss_start = (small.rss_mib(), large.rss_mib());
    let rows = measure(backend, &small, &large);
    let rss_after = (small.rss_mib(), large.rss_mib());
    drop(small);
    drop(large);
    drop(cluster);
    Measured {
        backend,
        metas: (small_meta, large_meta),
        rows,
        rss_start,
        rss_after,
    }
}

#[tokio::main(flavor = "current_thread")]
async fn main() {
    let metrics: usize = env_or("CUTPOINTS_SCALE_METRICS", 2_000);
    let versions: usize = env_or("CUTPOINTS_SCALE_VERSIONS", 20);
    let backends =
        std::env::var("CUTPOINTS_SCALE_BACKENDS").unwrap_or_else(|_| "sqlite,postgres".into());
    let full = Size { metrics, versions };
    let tenth = Size {
        metrics: (metrics / 10).max(1),
        versions,
    };
    std::fs::create_dir_all(fixtures_dir()).unwrap();
    let mut all = Vec::new();
    for backend in ["sqlite", "postgres"] {
        if backends.split(',').any(|b| b.trim() == backend) {
            all.push(run_backend(backend, (tenth, full)).await);
        }
    }

    println!("## Answers at one tenth and at full size\n");
    for m in &all {
        for meta in [&m.metas.0, &m.metas.1] {
            println!(
                "- {}, {} metrics x {} versions: {} events, {} comments, {} sign-offs; built in {:.0} s; `audit verify`: {}",
                m.backend,
                meta.metrics,
                meta.versions,
                meta.events,
                meta.comments,
                meta.signoffs,
                meta.build_seconds,
                meta.verify
            );
        }
    }
    println!();
    println!(
        "| answer | backend | one tenth p50 / p95 | full p50 / p95 | growth (p50) | requests each | full-size server RSS before -> after |"
    );
    println!("|---|---|---|---|---|---|---|");
    for m in &all {
        for r in &m.rows {
            println!(
                "| {} | {} | {} / {} | {} / {} | {:.1}x | {} | {:.0} -> {:.0} MiB |",
                r.answer,
                r.backend,
                show(r.tenth.0),
                show(r.tenth.1),
                show(r.full.0),
                show(r.full.1),
                r.full.0 / r.tenth.0,
                r.samples,
                r.rss_full_mib.0,
                r.rss_full_mib.1
            );
        }
    }
    println!();
    for m in &all {
        for r in m.rows.iter().filter(|r| !r.note.is_empty()) {
            println!("- {}, {}: {}", m.backend, r.answer, r.note);
        }
        println!(
            "- {}: server RSS when started, one tenth {:.0} MiB, full size {:.0} MiB; after the run, {:.0} MiB and {:.0} MiB",
            m.backend, m.rss_start.0, m.rss_start.1, m.rss_after.0, m.rss_after.1
        );
    }
}
