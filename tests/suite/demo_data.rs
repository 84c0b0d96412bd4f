//! The demo scenario's data, read back through the HTTP API as a dashboard or the pages would:
//! a register with history, versions in force, a scheduled change and open proposals, all
//! recorded at invented past times by the real workflow.

use cutpoints::domain::Timestamp;
use cutpoints::domain::access::Scope;
use serde_json::Value;

use crate::helpers::{Backend, TestApp};
use crate::on_both_backends;

const METRICS: [&str; 5] = [
    "docks.peak_availability",
    "repairs.turnaround",
    "fleet.rides_per_bike",
    "members.monthly_churn",
    "finance.cash_runway",
];
const DAY: i64 = 24 * 60 * 60;
const SIGNATORY: &str = "Odile Marchetti";

async fn get(app: &TestApp, token: &str, path: &str) -> Value {
    let r = app
        .http
        .get(app.url(path))
        .bearer_auth(token)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200, "GET {path}");
    r.json().await.unwrap()
}

fn time(v: &Value) -> Timestamp {
    Timestamp::parse(v.as_str().unwrap_or_else(|| panic!("a time, not {v}"))).unwrap()
}

/// The cut points that need a sign-off when they move.
fn critical_cuts(v: &Value) -> Vec<f64> {
    let names: &[&str] = if v["direction"] == "target_band" {
        &["critical_low", "critical_high"]
    } else {
        &["critical"]
    };
    names
        .iter()
        .map(|n| v["cuts"][n].as_f64().unwrap())
        .collect()
}

/// Within a few seconds of the real time.
fn close_to_real_time(t: Timestamp) -> bool {
    let real = Timestamp::now();
    t > real.plus_seconds(-30) && t <= real.plus_seconds(1)
}

on_both_backends! {
    async fn the_demo_register_has_history_versions_in_force_and_open_proposals(app) {
        let (app, people) = TestApp::spawn_demo(app.backend).await.unwrap();
        assert_eq!(people.len(), cutpoints::cli::demo::PEOPLE.len());
        // The clock is back on real time for the running demo.
        assert!(close_to_real_time(app.store.now()), "{}", app.store.now());
        let token = app.token("samir", Scope::Read).await;
        let now = Timestamp::now();

        let mut open = Vec::new();
        let mut versions_seen = 0;
        let mut revised = 0;
        for key in METRICS {
            let metric = get(&app, &token, &format!("/api/v1/metrics/{key}")).await;
            assert!(metric["version_in_force"].is_object(), "{key} has a version in force");
            assert_eq!(metric["version_in_force"]["status"], "in_force", "{key}");
            if let Some(p) = metric["open_proposal"].as_object() {
                open.push(get(&app, &token, p["url"].as_str().unwrap()).await);
            }
            let scheduled = &metric["scheduled_version"];
            if key == "finance.cash_runway" {
                assert_eq!(scheduled["status"], "scheduled", "{metric}");
                assert!(time(&scheduled["effective_from"]) > now.plus_seconds(60 * DAY));
                assert!(time(&scheduled["approved_at"]) < now);
            } else {
                assert!(scheduled.is_null(), "{key}: {scheduled}");
            }

            let history = get(&app, &token, &format!("/api/v1/metrics/{key}/history")).await;
            let versions = history["versions"].as_array().unwrap();
            let expected = match key {
                "docks.peak_availability" => 3,
                "repairs.turnaround" | "members.monthly_churn" | "finance.cash_runway" => 2,
                _ => 1,
            };
            assert_eq!(versions.len(), expected, "{key}: {history}");
            versions_seen += versions.len();
            let mut previous: Option<&Value> = None;
            for v in versions {
                let approved_at = time(&v["approved_at"]);
                assert!(approved_at < now.plus_seconds(-DAY), "{key} v{} in the past", v["number"]);
                assert!(!v["approvers"].as_array().unwrap().is_empty(), "{key}: {v}");
                assert!(!v["rationale"].as_str().unwrap().is_empty());
                let needs_signoff = previous.is_none_or(|p| {
                    p["direction"] != v["direction"] || critical_cuts(p) != critical_cuts(v)
                });
                if needs_signoff {
                    assert_eq!(v["signatory"], SIGNATORY, "{key} v{}", v["number"]);
                } else {
                    assert!(v["signatory"].is_null(), "{key} v{}", v["number"]);
                }
                if let Some(p) = previous {
                    assert!(approved_at > time(&p["approved_at"]), "{key}: approvals in order");
                    assert!(v["diff_from_previous"].as_str().unwrap().contains('+'));
                }
                if v["revision_number"].as_i64().unwrap() > 1 {
                    revised += 1;
                    let id = v["proposal_id"].as_i64().unwrap();
                    let p = get(&app, &token, &format!("/api/v1/proposals/{id}")).await;
                    let revisions = p["revisions"].as_array().unwrap();
                    assert!(!revisions[1]["note"].as_str().unwrap().is_empty(), "{p}");
                    assert!(p["reviews"].as_array().unwrap().iter().any(|r| {
                        r["verdict"] == "send_back" && r["stale"] == true
                            && !r["comment"].as_str().unwrap().is_empty()
                    }), "{p}");
                }
                previous = Some(v);
            }
        }
        assert!(revised >= 1, "one version was sent back and revised before approval");

        // Exactly one open proposal in each state a reader's inbox shows.
        let in_review: Vec<_> = open
            .iter()
            .filter(|p| p["state"] == "in_review" && p["still_needed"]["approvals"] != 0)
            .collect();
        assert_eq!(in_review.len(), 1, "{open:?}");
        assert!(!in_review[0]["comments"].as_array().unwrap().is_empty());
        let sent_back: Vec<_> = open.iter().filter(|p| p["state"] == "sent_back").collect();
        assert_eq!(sent_back.len(), 1, "{open:?}");
        assert!(sent_back[0]["reviews"].as_array().unwrap().iter().any(|r| {
            r["verdict"] == "send_back" && !r["comment"].as_str().unwrap().is_empty()
        }));
        let awaiting: Vec<_> = open
            .iter()
            .filter(|p| {
                p["state"] == "in_review"
                    && p["still_needed"]["approvals"] == 0
                    && p["still_needed"]["signoff"] == true
            })
            .collect();
        assert_eq!(awaiting.len(), 1, "{open:?}");
        assert!(!awaiting[0]["still_needed"]["reasons"].as_array().unwrap().is_empty());
        assert_eq!(open.len(), 3, "{open:?}");

        // Every metric has a year or more of invented history, and each open proposal has
        // a backtest with something to warn about, shown on its page.
        let mut warned = 0;
        let mut codes = std::collections::BTreeSet::new();
        let mut note = |bt: &Value| {
            for w in bt["warnings"].as_array().unwrap() {
                codes.insert(w["code"].as_str().unwrap().to_string());
            }
        };
        for key in METRICS {
            let e = get(&app, &token, &format!("/api/v1/metrics/{key}/evidence")).await;
            note(&e["backtest"]);
            assert!(e["count"].as_u64().unwrap() >= 12, "{key}: {e}");
            let span = time(&e["last_period"]).as_datetime() - time(&e["first_period"]).as_datetime();
            assert!(span.num_days() >= 365, "{key}: {e}");
            assert!(time(&e["last_period"]) < now);
            assert!(e["limits"].is_object() && e["backtest"].is_object(), "{key}: {e}");
        }
        for p in &open {
            let id = p["id"].as_i64().unwrap();
            let b = get(&app, &token, &format!("/api/v1/proposals/{id}/backtest")).await;
            assert!(b["count"].as_u64().unwrap() >= 24, "{b}");
            note(&b["backtest"]);
            warned += usize::from(!b["backtest"]["warnings"].as_array().unwrap().is_empty());
        }
        assert!(warned >= 2, "the demo shows warnings");
        for code in ["too_little_history", "intervene_within_routine_variation", "never_reached"] {
            assert!(codes.contains(code), "the demo shows {code}: {codes:?}");
        }
        let browser = crate::helpers::Browser::new(&app);
        let hana = cutpoints::cli::demo::PEOPLE.iter().find(|p| p.username == "hana").unwrap();
        assert_eq!(browser.sign_in("hana", &hana.password()).await.status(), 303);
        let id = open[0]["id"].as_i64().unwrap();
        let (status, html) = browser.get_text(&format!("/proposals/{id}")).await;
        assert_eq!(status, 200);
        for part in ["history and zones", "What each set would have said", "Warnings about"] {
            assert!(html.contains(part), "{part}");
        }
        let upload_events = app.events().await.into_iter().filter(|e| e.event.action == "observations.uploaded").count();
        assert_eq!(upload_events, METRICS.len());

        // The log holds the whole story, in time order, starting about eighteen months ago.
        let events = app.events().await;
        let approved = events.iter().filter(|e| e.event.action == "version.approved").count();
        assert_eq!(approved, versions_seen);
        for action in ["proposal.created", "proposal.submitted", "comment.added", "review.given",
            "signoff.given", "revision.saved"] {
            assert!(events.iter().any(|e| e.event.action == action), "{action}");
        }
        assert!(events.windows(2).all(|w| w[0].event.at <= w[1].event.at));
        let first = events.first().unwrap().event.at;
        assert!(first < now.plus_seconds(-500 * DAY) && first > now.plus_seconds(-560 * DAY));
        assert!(events.last().unwrap().event.at < now);
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_failed_seeding_still_puts_the_clock_back_on_real_time() {
    let (app, _) = TestApp::spawn_demo(Backend::Sqlite).await.unwrap();
    // A second run fails at once (the people exist already), with the clock set to the past.
    assert!(cutpoints::cli::demo::seed(&app.store).await.is_err());
    assert!(close_to_real_time(app.store.now()), "{}", app.store.now());
}
