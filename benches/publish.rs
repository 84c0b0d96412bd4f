//! Benchmark: serving the published set (not a test; run with scripts/bench-publish.sh).
//!
//! With 10,000 metrics in force on SQLite, measured side by side in one run:
//! - export throughput and p50/p99 latency under wrk, against nginx serving the identical
//!   bytes as a static file;
//! - the 304 path (If-None-Match), the same way;
//! - evaluate: values classified per second in batches of 1,000;
//! - in-process classification of 10 M values against a plain loop summing the same slice.
//!
//! CUTPOINTS_BENCH_METRICS sets the number of metrics (default 10,000); CUTPOINTS_BENCH_SECONDS
//! the length of each wrk run (default 10).

use std::io::Write;
use std::net::TcpListener;
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use cutpoints::domain::Timestamp;
use cutpoints::domain::thresholds::{CutSet, Direction, Shades};
use cutpoints::engine::{Grades, Instructions, grade_all_with};
use cutpoints::store::Store;

fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

fn binary() -> String {
    concat!(env!("CARGO_MANIFEST_DIR"), "/target/release/cutpoints").to_string()
}

/// A register of `n` metrics, each with one version in force, written straight into the
/// tables (the workflow would take hours for this many; the benchmark measures serving).
async fn fixture(url: &str, n: usize) {
    let store = Store::open(url).await.unwrap();
    let now = Timestamp::now().plus_seconds(-86_400).to_string();
    sqlx::query("INSERT INTO users (id, username, display_name, roles, password_hash, active, created_at, updated_at) VALUES (1, 'bench', 'Bench Reader', 'viewer,owner', 'x', 1, $1, $1)")
        .bind(&now)
        .execute(store.pool())
        .await
        .unwrap();
    let mut tx = store.pool().begin().await.unwrap();
    for i in 0..n as i64 {
        let key = format!("fleet.metric_{i:05}");
        sqlx::query("INSERT INTO metrics (id, key, name, description, unit, data_source, created_at, updated_at) VALUES ($1, $2, $3, '', '%', '', $4, $4)")
            .bind(i + 1)
            .bind(&key)
            .bind(format!("Metric number {i}"))
            .bind(&now)
            .execute(&mut *tx)
            .await
            .unwrap();
        sqlx::query("INSERT INTO proposals (id, metric_id, state, author_id, created_at, updated_at, version_number) VALUES ($1, $1, 'approved', 1, $2, $2, 1)")
            .bind(i + 1)
            .bind(&now)
            .execute(&mut *tx)
            .await
            .unwrap();
        let base = (i % 50) as f64;
        sqlx::query("INSERT INTO versions (metric_id, number, proposal_id, revision_number, revision_hash, direction, cut_1, cut_2, cut_3, cut_4, shades, unit, effective_from, approved_at, rationale, canonical_text, approvers, signatory, metric_name) VALUES ($1, 1, $1, 1, 'h', 'higher_is_better', $2, $3, $4, $5, 3, '%', $6, $6, 'Agreed at the quarterly review.', '', '[\"Hana Brook\"]', 'Odile Marchetti', $7)")
            .bind(i + 1)
            .bind(base + 10.0)
            .bind(base + 20.5)
            .bind(base + 30.0)
            .bind(base + 40.25)
            .bind(&now)
            .bind(format!("Metric number {i}"))
            .execute(&mut *tx)
            .await
            .unwrap();
    }
    tx.commit().await.unwrap();
    store.close().await;
}

struct Running(Child);

impl Drop for Running {
    fn drop(&mut self) {
        // SIGTERM, so that nginx's master takes its workers down with it.
        let _ = Command::new("kill")
            .args(["-TERM", &self.0.id().to_string()])
            .status();
        let _ = self.0.wait();
    }
}

fn wait_for(port: u16) {
    for _ in 0..200 {
        if std::net::TcpStream::connect(("127.0.0.1", port)).is_ok() {
            return;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    panic!("nothing listens on port {port}");
}

/// What one wrk run reports.
#[derive(Debug, Default, Clone, Copy)]
struct Load {
    requests_per_second: f64,
    p50_ms: f64,
    p99_ms: f64,
}

fn ms(text: &str) -> f64 {
    let t = text.trim();
    if let Some(v) = t.strip_suffix("us") {
        v.parse::<f64>().unwrap() / 1000.0
    } else if let Some(v) = t.strip_suffix("ms") {
        v.parse().unwrap()
    } else if let Some(v) = t.strip_suffix('s') {
        v.parse::<f64>().unwrap() * 1000.0
    } else {
        panic!("latency {t:?}")
    }
}

fn wrk(url: &str, headers: &[String], script: Option<&Path>, seconds: u64) -> Load {
    let mut cmd = Command::new("wrk");
    cmd.args(["-t2", "-c32", &format!("-d{seconds}s"), "--latency"]);
    for h in headers {
        cmd.args(["-H", h]);
    }
    if let Some(s) = script {
        cmd.arg("-s").arg(s);
    }
    let out = cmd.arg(url).output().expect("wrk (Debian package wrk)");
    let text = String::from_utf8_lossy(&out.stdout).to_string();
    assert!(!text.contains("Non-2xx or 3xx responses"), "{url}: {text}");
    let mut load = Load::default();
    for line in text.lines() {
        let words: Vec<&str> = line.split_whitespace().collect();
        match words.as_slice() {
            ["Requests/sec:", v] => load.requests_per_second = v.parse().unwrap(),
            ["50%", v] => load.p50_ms = ms(v),
            ["99%", v] => load.p99_ms = ms(v),
            _ => {}
        }
    }
    assert!(load.requests_per_second > 0.0, "{text}");
    load
}

fn rss_kib(pid: u32) -> u64 {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).unwrap_or_default();
    status
        .lines()
        .find_map(|l| l.strip_prefix("VmRSS:"))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse().ok())
        .unwrap_or(0)
}

fn nginx_rss_kib(prefix: &Path) -> u64 {
    // The master and its workers.
    let master: u32 = std::fs::read_to_string(prefix.join("nginx.pid"))
        .unwrap()
        .trim()
        .parse()
        .unwrap();
    let children = std::fs::read_to_string(format!("/proc/{master}/task/{master}/children"))
        .unwrap_or_default();
    rss_kib(master)
        + children
            .split_whitespace()
            .filter_map(|p| p.parse().ok())
            .map(rss_kib)
            .sum::<u64>()
}

fn header_of(url: &str, name: &str, extra: &[String]) -> String {
    let mut cmd = Command::new("curl");
    cmd.args(["-s", "-o", "/dev/null", "-D", "-"]);
    for h in extra {
        cmd.args(["-H", h]);
    }
    let out = cmd.arg(url).output().unwrap();
    String::from_utf8_lossy(&out.stdout)
        .lines()
        .find_map(|l| {
            let (k, v) = l.split_once(':')?;
            k.eq_ignore_ascii_case(name).then(|| v.trim().to_string())
        })
        .unwrap_or_else(|| panic!("no {name} from {url}"))
}

fn row(name: &str, ours: Load, theirs: Load) {
    println!(
        "| {name} | {:.0} req/s, p50 {:.2} ms, p99 {:.2} ms | {:.0} req/s, p50 {:.2} ms, p99 {:.2} ms | {:.2}x | {:.2}x |",
        ours.requests_per_second,
        ours.p50_ms,
        ours.p99_ms,
        theirs.requests_per_second,
        theirs.p50_ms,
        theirs.p99_ms,
        ours.requests_per_second / theirs.requests_per_second,
        ours.p99_ms / theirs.p99_ms,
    );
}

/// In-process classification of `n` values, for each instruction set this processor has,
/// against summing them: (instructions, seconds streaming, seconds into one result) and the
/// summing loop's seconds. Best of three runs each.
fn classification(n: usize) -> (Vec<(Instructions, f64, f64)>, f64) {
    let cuts = CutSet::new(Direction::HigherIsBetter, [10.0, 20.5, 30.0, 40.25]).unwrap();
    let mut x: u64 = 0x9E37_79B9_7F4A_7C15;
    // Values spread over every zone, in no order a branch predictor could learn.
    let plain: Vec<f64> = (0..n)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            (x % 5_000) as f64 / 100.0
        })
        .collect();
    let best = |f: &mut dyn FnMut()| {
        (0..3)
            .map(|_| {
                let t = Instant::now();
                f();
                t.elapsed().as_secs_f64()
            })
            .fold(f64::MAX, f64::min)
    };
    let sum = best(&mut || {
        let total: f64 = plain.iter().sum();
        std::hint::black_box(total);
    });
    let mut rows = Vec::new();
    for instructions in Instructions::available() {
        let mut out = Grades::default();
        // A chunk at a time into one reused buffer, as a caller grading millions of values
        // would (what the caller then does with each chunk is not measured).
        let streaming = best(&mut || {
            for chunk in plain.chunks(4096) {
                grade_all_with(instructions, &cuts, Shades::default(), chunk, &mut out);
                std::hint::black_box(&out);
            }
        });
        // All ten million grades kept in one result (about 100 MB of columns).
        let mut all = Grades::default();
        grade_all_with(instructions, &cuts, Shades::default(), &plain, &mut all);
        let whole = best(&mut || {
            grade_all_with(instructions, &cuts, Shades::default(), &plain, &mut all);
            std::hint::black_box(&all);
        });
        rows.push((instructions, streaming, whole));
    }
    (rows, sum)
}

fn print_classification(rows: &[(Instructions, f64, f64)], sum: f64, n: usize) {
    let ns = |s: f64| s * 1e9 / n as f64;
    for (instructions, streaming, whole) in rows {
        println!(
            "| in-process classification of 10 M values, {instructions:?}, a chunk of 4,096 at a time | {:.1} ms ({:.2} ns/value) | a plain loop summing the same values, {:.1} ms ({:.2} ns/value) | {:.2}x |",
            streaming * 1000.0,
            ns(*streaming),
            sum * 1000.0,
            ns(sum),
            sum / streaming
        );
        println!(
            "| the same, {instructions:?}, all 10 M grades kept in one result | {:.1} ms ({:.2} ns/value) | the same loop | {:.2}x |",
            whole * 1000.0,
            ns(*whole),
            sum / whole
        );
    }
}

#[tokio::main(flavor = "current_thread")]
async fn main() {
    let n: usize = std::env::var("CUTPOINTS_BENCH_METRICS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000);
    let seconds: u64 = std::env::var("CUTPOINTS_BENCH_SECONDS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10);
    if std::env::var("CUTPOINTS_BENCH_ONLY").as_deref() == Ok("classify") {
        let (rows, sum) = classification(10_000_000);
        print_classification(&rows, sum, 10_000_000);
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let url = format!("sqlite://{}", dir.path().join("bench.db").display());
    eprintln!("writing {n} metrics with versions in force...");
    fixture(&url, n).await;
    let key = dir.path().join("signing.key");
    let token = {
        let out = Command::new(binary())
            .args([
                "token",
                "issue",
                "--username",
                "bench",
                "--scope",
                "read",
                "--database-url",
                &url,
            ])
            .output()
            .expect("build the release binary first: cargo build --release");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8(out.stdout).unwrap().trim().to_string()
    };
    let port = free_port();
    let server = Running(
        Command::new(binary())
            .args([
                "serve",
                "--database-url",
                &url,
                "--bind",
                &format!("127.0.0.1:{port}"),
            ])
            .arg("--signing-key")
            .arg(&key)
            .env("CUTPOINTS_LOG", "warn")
            .stdout(Stdio::null())
            .spawn()
            .unwrap(),
    );
    wait_for(port);
    let auth = format!("Authorization: Bearer {token}");
    let ours_url = format!("http://127.0.0.1:{port}/api/v1/published");
    let body = Command::new("curl")
        .args(["-s", "-H", &auth, &ours_url])
        .output()
        .unwrap()
        .stdout;
    assert!(body.len() > 1000, "the set was served");

    // nginx serving the identical bytes.
    let prefix = dir.path().join("nginx");
    std::fs::create_dir_all(prefix.join("html")).unwrap();
    std::fs::create_dir_all(prefix.join("logs")).unwrap();
    std::fs::write(prefix.join("html/published.json"), &body).unwrap();
    let nginx_port = free_port();
    let conf = format!(
        "worker_processes auto;\npid {pid};\nerror_log {p}/logs/error.log;\nevents {{ worker_connections 1024; }}\nhttp {{\n  access_log off;\n  sendfile on;\n  server {{\n    listen 127.0.0.1:{nginx_port};\n    root {p}/html;\n    location / {{ default_type application/json; add_header Cache-Control no-cache; }}\n  }}\n}}\n",
        pid = prefix.join("nginx.pid").display(),
        p = prefix.display()
    );
    std::fs::write(prefix.join("nginx.conf"), conf).unwrap();
    let nginx = Running(
        Command::new("nginx")
            .args([
                "-p",
                prefix.to_str().unwrap(),
                "-c",
                prefix.join("nginx.conf").to_str().unwrap(),
                "-g",
                "daemon off;",
            ])
            .spawn()
            .expect("nginx (Debian package nginx)"),
    );
    wait_for(nginx_port);
    let nginx_url = format!("http://127.0.0.1:{nginx_port}/published.json");

    // Export and the 304 path, side by side.
    let export_ours = wrk(&ours_url, std::slice::from_ref(&auth), None, seconds);
    let export_nginx = wrk(&nginx_url, &[], None, seconds);
    let our_etag = header_of(&ours_url, "etag", std::slice::from_ref(&auth));
    let nginx_etag = header_of(&nginx_url, "etag", &[]);
    let not_modified_ours = wrk(
        &ours_url,
        &[auth.clone(), format!("If-None-Match: {our_etag}")],
        None,
        seconds,
    );
    let not_modified_nginx = wrk(
        &nginx_url,
        &[format!("If-None-Match: {nginx_etag}")],
        None,
        seconds,
    );
    let server_rss = rss_kib(server.0.id());
    let nginx_rss = nginx_rss_kib(&prefix);

    // Evaluate: batches of 1,000 values across the register.
    let values: Vec<String> = (0..1000)
        .map(|i| {
            format!(
                r#"{{"metric":"fleet.metric_{:05}","value":{}}}"#,
                (i * 7) % n,
                (i % 60) as f64 + 0.5
            )
        })
        .collect();
    let payload = format!(r#"{{"values":[{}]}}"#, values.join(","));
    let script = dir.path().join("evaluate.lua");
    let mut f = std::fs::File::create(&script).unwrap();
    writeln!(f, "wrk.method = \"POST\"").unwrap();
    writeln!(f, "wrk.headers[\"Content-Type\"] = \"application/json\"").unwrap();
    writeln!(f, "wrk.body = [[{payload}]]").unwrap();
    drop(f);
    let evaluate = wrk(
        &format!("http://127.0.0.1:{port}/api/v1/evaluate"),
        std::slice::from_ref(&auth),
        Some(&script),
        seconds,
    );
    drop(nginx);
    drop(server);

    let (rows, sum_s) = classification(10_000_000);
    let classify_s = rows.last().expect("the baseline is always measured").1;

    println!(
        "## Serving the published set ({n} metrics in force, SQLite, {} KB body)\n",
        body.len() / 1024
    );
    println!("wrk -t2 -c32 -d{seconds}s --latency, on the same 2-core machine as both servers.\n");
    println!(
        "| path | cutpoints | nginx, same bytes as a static file | throughput ratio | p99 ratio |"
    );
    println!("|---|---|---|---|---|");
    row(
        "export (GET /api/v1/published, token checked, all headers)",
        export_ours,
        export_nginx,
    );
    row(
        "304 (If-None-Match with the current ETag)",
        not_modified_ours,
        not_modified_nginx,
    );
    println!(
        "\nMemory after the runs: cutpoints {} MiB RSS, nginx (master and workers) {} MiB RSS.\n",
        server_rss / 1024,
        nginx_rss / 1024
    );
    let evaluated = evaluate.requests_per_second * 1000.0;
    let in_process = 10_000_000.0 / classify_s;
    println!("## Evaluate and classification\n");
    println!("| what | rate | reference | ratio |");
    println!("|---|---|---|---|");
    println!(
        "| POST /api/v1/evaluate, 1,000 values a request | {:.0} values/s ({:.0} req/s, p99 {:.1} ms) | in-process classification, {:.0} values/s | {:.3}x |",
        evaluated,
        evaluate.requests_per_second,
        evaluate.p99_ms,
        in_process,
        evaluated / in_process
    );
    print_classification(&rows, sum_s, 10_000_000);
}
