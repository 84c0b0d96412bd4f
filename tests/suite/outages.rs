//! PostgreSQL going away under load, on a throwaway cluster of the test's own: stopped by
//! its administrator and started again, and stalled (its processes stopped) and resumed. The
//! tests check status codes and data, never time: every request is answered (503 with
//! Retry-After while the database is away, never 500), and the server recovers without a
//! restart. How fast the answers come is measured by scripts/measure-outage.sh.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

use serde_json::{Value, json};

use crate::helpers::{Backend, IMPATIENT, TestApp};
use crate::pg_cluster::Cluster;
use crate::workflow_support::{Team, hib};

/// One answer the load got: status, Retry-After, error code, and whether the database was
/// meant to be down when the request was sent.
#[derive(Debug)]
struct Answer {
    status: u16,
    retry_after: Option<String>,
    code: Value,
    while_down: bool,
}

/// Reads and writes in a loop, a proposal read and a comment posted, until `stop`, or until
/// `down_answers` requests sent while the database was down have been answered.
async fn load(
    team: Arc<Team>,
    id: i64,
    who: usize,
    down: Arc<AtomicBool>,
    stop: Arc<AtomicBool>,
    down_answers: usize,
) -> Vec<Answer> {
    let mut answers: Vec<Answer> = Vec::new();
    let mut n = 0;
    while !stop.load(Ordering::SeqCst)
        && answers.iter().filter(|a| a.while_down).count() < down_answers
    {
        n += 1;
        let while_down = down.load(Ordering::SeqCst);
        let req = if n % 2 == 0 {
            team.app
                .http
                .get(team.app.url(&format!("/api/v1/proposals/{id}")))
                .bearer_auth(team.token_of("wren"))
        } else {
            team.app
                .http
                .post(team.app.url(&format!("/api/v1/proposals/{id}/comments")))
                .bearer_auth(team.token_of("hana"))
                .json(&json!({"body": format!("load {who}.{n}")}))
        };
        let r = req.send().await.expect("every request is answered");
        let status = r.status().as_u16();
        let retry_after = r
            .headers()
            .get("retry-after")
            .map(|v| v.to_str().unwrap().to_string());
        let body: Value = r.json().await.unwrap_or(Value::Null);
        answers.push(Answer {
            status,
            retry_after,
            code: body["error"]["code"].clone(),
            while_down,
        });
    }
    answers
}

async fn team_on(cluster: &Cluster) -> (Arc<Team>, i64) {
    let app = TestApp::spawn_on(&cluster.url(), Backend::Postgres, IMPATIENT).await;
    let team = Team::new(app).await;
    let (status, p) = team
        .propose("tomas", hib(40.0, 60.0, 80.0, 90.0, "first"))
        .await;
    assert_eq!(status, 201, "{p}");
    (Arc::new(team), p["id"].as_i64().unwrap())
}

/// Waits until a comment is taken again (the server recovered without a restart).
async fn until_recovered(team: &Team, id: i64) {
    for _ in 0..600 {
        let (status, _) = team
            .act("hana", id, "comments", Some(json!({"body": "after"})))
            .await;
        if status == 201 {
            return;
        }
        tokio::time::sleep(std::time::Duration::from_millis(100)).await;
    }
    panic!("the server did not recover");
}

/// Every answer is a success or a 503 with Retry-After; some 503s came while the database
/// was away; and what was acknowledged is stored, with the record and tables agreeing.
async fn check(team: &Team, id: i64, answers: &[Answer]) {
    let mut seen = std::collections::BTreeMap::new();
    for a in answers {
        *seen
            .entry((a.while_down, a.status, a.code.to_string()))
            .or_insert(0) += 1;
    }
    eprintln!("answers (sent while down, status, code): {seen:?}");
    for a in answers {
        assert!(
            (200..300).contains(&a.status) || a.status == 503,
            "only successes and 503 (RFC 9110 §15.6.4), never 500: {a:?}"
        );
        if a.status == 503 {
            assert!(
                a.retry_after
                    .as_deref()
                    .is_some_and(|s| s.parse::<u64>().is_ok()),
                "{a:?}"
            );
            assert!(a.code == "unavailable" || a.code == "busy", "{a:?}");
        }
    }
    assert!(
        answers.iter().any(|a| a.while_down && a.status == 503),
        "the outage was seen"
    );
    let acknowledged = answers.iter().filter(|a| a.status == 201).count();
    let stored = team.get(id).await["comments"].as_array().unwrap().len();
    // A commit whose answer was lost to the outage may be stored without a 201; nothing
    // acknowledged is lost. The "after" comment of recovery is one more.
    assert!(
        stored > acknowledged,
        "{stored} stored, {acknowledged} acknowledged"
    );
    let (status, v) = team.call("root", "GET", "/api/v1/audit/verify", None).await;
    assert_eq!(status, 200, "{v}");
    assert_eq!(v["ok"], true, "{v}");
}

/// Four clients reading and writing while the test breaks and mends the database.
struct Load {
    down: Arc<AtomicBool>,
    stop: Arc<AtomicBool>,
    workers: Vec<tokio::task::JoinHandle<Vec<Answer>>>,
}

impl Load {
    /// Starts the clients; each stops at [`Load::finish`], or after `down_answers` answers to
    /// requests sent while the database was down.
    fn start(team: &Arc<Team>, id: i64, down_answers: usize) -> Load {
        let down = Arc::new(AtomicBool::new(false));
        let stop = Arc::new(AtomicBool::new(false));
        let workers = (0..4)
            .map(|who| {
                tokio::spawn(load(
                    team.clone(),
                    id,
                    who,
                    down.clone(),
                    stop.clone(),
                    down_answers,
                ))
            })
            .collect();
        Load {
            down,
            stop,
            workers,
        }
    }

    fn set_down(&self, down: bool) {
        self.down.store(down, Ordering::SeqCst);
    }

    async fn finish(self) -> Vec<Answer> {
        self.stop.store(true, Ordering::SeqCst);
        let mut answers = Vec::new();
        for w in self.workers {
            answers.extend(w.await.unwrap());
        }
        answers
    }
}

async fn healthz(team: &Team) -> reqwest::Response {
    team.app
        .http
        .get(team.app.url("/healthz"))
        .send()
        .await
        .unwrap()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
#[cfg_attr(
    postgres_binaries_missing,
    ignore = "needs Debian's postgresql package (its server binaries)"
)]
async fn postgres_stopped_and_started_again_under_load_answers_503_and_recovers() {
    let Some(cluster) = Cluster::start() else {
        return;
    };
    let cluster = Arc::new(cluster);
    let (team, id) = team_on(&cluster).await;
    let load = Load::start(&team, id, usize::MAX);
    tokio::time::sleep(std::time::Duration::from_millis(500)).await;
    // The administrator's fast shutdown: sessions end with SQLSTATE 57P01.
    load.set_down(true);
    let c = cluster.clone();
    tokio::task::spawn_blocking(move || c.stop("fast"))
        .await
        .unwrap();
    tokio::time::sleep(std::time::Duration::from_secs(2)).await;
    let r = healthz(&team).await;
    assert_eq!(r.status(), 503, "healthz while the database is down");
    assert!(r.headers().contains_key("retry-after"));
    let c = cluster.clone();
    tokio::task::spawn_blocking(move || c.start_again())
        .await
        .unwrap();
    load.set_down(false);
    until_recovered(&team, id).await;
    let answers = load.finish().await;
    assert_eq!(healthz(&team).await.status(), 200, "healthz after recovery");
    check(&team, id, &answers).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
#[cfg_attr(
    postgres_binaries_missing,
    ignore = "needs Debian's postgresql package (its server binaries)"
)]
async fn a_stalled_postgres_is_answered_with_503_while_it_stalls_and_recovers() {
    let Some(cluster) = Cluster::start() else {
        return;
    };
    let (team, id) = team_on(&cluster).await;
    let load = Load::start(&team, id, 3);
    tokio::time::sleep(std::time::Duration::from_millis(500)).await;
    // Every server process stopped: connections stay open and nothing answers. The stall
    // lasts until every client has had three answers to requests sent during it, so a
    // request that waited for the stall to end would hold the test here.
    cluster.pause();
    load.set_down(true);
    assert_eq!(
        healthz(&team).await.status(),
        503,
        "healthz while the database stalls"
    );
    let mut answers = Vec::new();
    for w in load.workers {
        answers.extend(w.await.unwrap());
    }
    let stalled: Vec<&Answer> = answers.iter().filter(|a| a.while_down).collect();
    assert!(!stalled.is_empty());
    assert!(stalled.iter().all(|a| a.status == 503), "{stalled:?}");
    cluster.resume();
    until_recovered(&team, id).await;
    check(&team, id, &answers).await;
}
