//! Benchmark: verifying one million events (not a test; run with scripts/bench-audit.sh).
//!
//! (a) The chain check itself, on events already in memory as stored (payload as canonical
//!     text): canonical encoding and SHA-256 per event, against `sha256sum` over a file of the
//!     same bytes, in the same run.
//! (b) The chain check with its database reads (`store::events::verify`, the chain part of
//!     `cutpoints audit verify`), on SQLite and (when CUTPOINTS_BENCH_POSTGRES_URL names a
//!     server) PostgreSQL, with the time of reading the rows alone, to show what dominates.
//!     The events are invented, with no tables behind them, so the replay part of `audit
//!     verify` (docs/audit-chain.md) is not measured here.
//!
//! CUTPOINTS_BENCH_EVENTS sets the number of events (default 1,000,000).

use std::io::Write;
use std::process::Command;
use std::time::{Duration, Instant};

use cutpoints::audit::{EventParts, GENESIS_HASH, Verifier, canonical_parts, chain_hash_parts};
use cutpoints::domain::Timestamp;
use cutpoints::store::Store;
use sqlx::Row;

/// One stored event, owning its text.
struct Stored {
    seq: i64,
    at: String,
    actor: String,
    action: String,
    subject: String,
    payload: String,
    prev_hash: String,
    hash: String,
}

impl Stored {
    fn parts(&self) -> EventParts<'_> {
        EventParts {
            seq: self.seq,
            at: &self.at,
            actor: &self.actor,
            action: &self.action,
            subject: &self.subject,
            payload_jcs: &self.payload,
        }
    }
}

/// A chain of invented but typical events: revisions with their content, approvals, comments.
fn build_chain(n: i64) -> Vec<Stored> {
    let start = Timestamp::parse("2024-01-01T00:00:00Z").unwrap();
    let mut prev = GENESIS_HASH.to_string();
    let mut buffer = Vec::new();
    let mut out = Vec::with_capacity(n as usize);
    for seq in 1..=n {
        let metric = format!("metric:fleet.m{:04}", seq % 5000);
        let (action, payload) = match seq % 4 {
            0 => (
                "revision.saved",
                format!(
                    r#"{{"content":{{"cuts":{{"critical":{},"intervene":70,"outperform":80.5,"stretch":90}},"direction":"higher_is_better","effective_from":null,"rationale":"Members walk when docks are empty; morning peaks matter most.","shades":3,"unit":"%"}},"hash":"{}","made_stale":[],"note":"tighten after the winter review","proposal":{},"revision":{}}}"#,
                    50 + seq % 7,
                    &prev[..64],
                    seq / 4,
                    seq % 5 + 1
                ),
            ),
            1 => (
                "review.given",
                format!(r#"{{"comment":"","hash":"{}","proposal":{},"revision":2,"verdict":"approve"}}"#, &prev[..64], seq / 4),
            ),
            2 => (
                "comment.added",
                format!(r#"{{"body":"Is 70 realistic with \"winter\" data?\nPlease show the evidence.","cut":"intervene","proposal":{},"revision":1}}"#, seq / 4),
            ),
            _ => ("metric.edited", r#"{"after":{"description":"Share of docks with a bike."},"before":{"description":""}}"#.to_string()),
        };
        let s = Stored {
            seq,
            at: start.plus_seconds(seq * 37).to_string(),
            actor: ["hana", "tomas", "odile", "emil"][(seq % 4) as usize].to_string(),
            action: action.to_string(),
            subject: metric,
            payload,
            prev_hash: prev.clone(),
            hash: String::new(),
        };
        let hash = chain_hash_parts(&prev, &s.parts(), &mut buffer);
        prev.clone_from(&hash);
        out.push(Stored { hash, ..s });
    }
    out
}

fn seconds(d: Duration) -> f64 {
    d.as_secs_f64()
}

/// (a): the chain check in memory, and sha256sum over the same bytes.
fn in_memory(chain: &[Stored]) -> (f64, f64, usize) {
    // The same bytes the check hashes: prev_hash || JCS(event), event after event.
    let mut bytes = Vec::new();
    let mut buffer = Vec::new();
    for s in chain {
        bytes.extend_from_slice(s.prev_hash.as_bytes());
        buffer.clear();
        canonical_parts(&s.parts(), &mut buffer);
        bytes.extend_from_slice(&buffer);
    }
    let total = bytes.len();
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("canonical.bin");
    std::fs::File::create(&file)
        .unwrap()
        .write_all(&bytes)
        .unwrap();
    drop(bytes);
    // Best of three for each, measured side by side.
    let mut ours = f64::MAX;
    let mut theirs = f64::MAX;
    for _ in 0..3 {
        let t = Instant::now();
        let mut v = Verifier::new(None);
        for s in chain {
            v.push_parts(&s.parts(), &s.prev_hash, &s.hash)
                .expect("the chain holds");
        }
        let (count, _) = v.finish().unwrap();
        assert_eq!(count as usize, chain.len());
        ours = ours.min(seconds(t.elapsed()));
        let t = Instant::now();
        let status = Command::new("sha256sum")
            .arg(&file)
            .stdout(std::process::Stdio::null())
            .status()
            .unwrap();
        assert!(status.success());
        theirs = theirs.min(seconds(t.elapsed()));
    }
    (ours, theirs, total)
}

async fn load(store: &Store, chain: &[Stored]) {
    const ROWS: usize = 500;
    for batch in chain.chunks(10_000) {
        let mut tx = store.pool().begin().await.unwrap();
        for rows in batch.chunks(ROWS) {
            let placeholders: Vec<String> = (0..rows.len())
                .map(|i| {
                    let b = i * 8;
                    format!(
                        "(${},${},${},${},${},${},${},${})",
                        b + 1,
                        b + 2,
                        b + 3,
                        b + 4,
                        b + 5,
                        b + 6,
                        b + 7,
                        b + 8
                    )
                })
                .collect();
            let sql = format!(
                "INSERT INTO events (seq, at, actor, action, subject, payload, prev_hash, hash) VALUES {}",
                placeholders.join(",")
            );
            let mut q = sqlx::query(sqlx::AssertSqlSafe(sql));
            for s in rows {
                q = q
                    .bind(s.seq)
                    .bind(&s.at)
                    .bind(&s.actor)
                    .bind(&s.action)
                    .bind(&s.subject)
                    .bind(&s.payload)
                    .bind(&s.prev_hash)
                    .bind(&s.hash);
            }
            q.execute(&mut *tx).await.unwrap();
        }
        tx.commit().await.unwrap();
    }
    let last = chain.last().unwrap();
    sqlx::query("UPDATE chain_head SET seq = $1, hash = $2, at = $3 WHERE id = 1")
        .bind(last.seq)
        .bind(&last.hash)
        .bind(&last.at)
        .execute(store.pool())
        .await
        .unwrap();
}

/// Reads every row the way verify does, without checking: the database's share of the time.
async fn read_only(store: &Store) -> f64 {
    let t = Instant::now();
    let mut conn = store.pool().acquire().await.unwrap();
    let mut after = 0i64;
    let mut n = 0;
    loop {
        let rows = sqlx::query(
            "SELECT seq, at, actor, action, subject, payload, prev_hash, hash FROM events WHERE seq > $1 ORDER BY seq LIMIT 10000",
        )
        .bind(after)
        .fetch_all(&mut *conn)
        .await
        .unwrap();
        for row in &rows {
            let _: String = row.try_get("payload").unwrap();
            after = row.try_get("seq").unwrap();
            n += 1;
        }
        if rows.len() < 10_000 {
            break;
        }
    }
    assert!(n > 0);
    seconds(t.elapsed())
}

/// The chain check with its reads, as `cutpoints audit verify` runs it before the replay.
async fn chain_verify(store: &Store, expected: &str) -> f64 {
    let t = Instant::now();
    let (count, head) = cutpoints::store::events::verify(store, None)
        .await
        .unwrap()
        .expect("the chain holds");
    let elapsed = seconds(t.elapsed());
    assert_eq!(format!("ok {count} {head}"), expected);
    elapsed
}

async fn on_database(label: &str, url: &str, chain: &[Stored]) {
    let store = Store::open(url).await.unwrap();
    let t = Instant::now();
    load(&store, chain).await;
    let loaded = seconds(t.elapsed());
    let expected = format!("ok {} {}", chain.len(), chain.last().unwrap().hash);
    let mut read = f64::MAX;
    for _ in 0..3 {
        read = read.min(read_only(&store).await);
    }
    let mut whole = f64::MAX;
    for _ in 0..3 {
        whole = whole.min(chain_verify(&store, &expected).await);
    }
    println!(
        "| {label} | {:.2} s | {:.0} | {:.2} s | {:.0} % |",
        whole,
        chain.len() as f64 / whole,
        read,
        100.0 * read / whole
    );
    eprintln!("({label}: loading the events took {loaded:.1} s)");
    store.close().await;
}

#[tokio::main(flavor = "multi_thread", worker_threads = 2)]
async fn main() {
    let n: i64 = std::env::var("CUTPOINTS_BENCH_EVENTS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1_000_000);
    eprintln!("building a chain of {n} events...");
    let chain = build_chain(n);
    let (ours, theirs, bytes) = in_memory(&chain);
    let mb = bytes as f64 / 1e6;
    println!("## Chain check in memory ({n} events, {mb:.0} MB of canonical bytes)\n");
    println!("| what | time | throughput | ratio to sha256sum |");
    println!("|---|---|---|---|");
    println!(
        "| cutpoints chain check (encode + SHA-256 per event) | {ours:.3} s | {:.0} MB/s | {:.2}x |",
        mb / ours,
        theirs / ours
    );
    println!(
        "| sha256sum over the same bytes | {theirs:.3} s | {:.0} MB/s | 1.00x |",
        mb / theirs
    );
    println!("\n## The chain check with its database reads (`store::events::verify`)\n");
    println!("| database | time | events/s | reading rows alone | reading's share |");
    println!("|---|---|---|---|---|");
    let dir = tempfile::tempdir().unwrap();
    let sqlite = format!("sqlite://{}", dir.path().join("bench.db").display());
    on_database("SQLite", &sqlite, &chain).await;
    match std::env::var("CUTPOINTS_BENCH_POSTGRES_URL") {
        Ok(admin) => {
            let name = format!("cutpoints_bench_{}", std::process::id());
            let admin_store = Store::connect(&admin).await.unwrap();
            sqlx::query(sqlx::AssertSqlSafe(format!("CREATE DATABASE {name}")))
                .execute(admin_store.pool())
                .await
                .unwrap();
            let url = format!("{}/{name}", admin.rsplit_once('/').unwrap().0);
            on_database("PostgreSQL", &url, &chain).await;
            sqlx::query(sqlx::AssertSqlSafe(format!(
                "DROP DATABASE {name} WITH (FORCE)"
            )))
            .execute(admin_store.pool())
            .await
            .unwrap();
        }
        Err(_) => eprintln!("CUTPOINTS_BENCH_POSTGRES_URL is not set: PostgreSQL skipped"),
    }
}
