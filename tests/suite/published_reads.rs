//! One metric of a set is read from that metric's rows (and cut from the cached current set),
//! and sets are kept between requests: neither may change what is answered. A client that has
//! just written reads its own write.

use cutpoints::domain::Timestamp;
use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::workflow_support::{METRIC, Team, hib};

const OTHER: &str = "docks.turnaround";

async fn get(team: &Team, token: &str, path: &str) -> (u16, Value) {
    let r = team.app.get_as(token, path).await;
    (r.status().as_u16(), r.json().await.unwrap())
}

crate::on_both_backends! {
    async fn one_metric_of_any_set_is_that_metric_of_the_whole_set(app) {
        let team = Team::new(app).await;
        let day = |d: i64| Timestamp::parse("2030-01-01").unwrap().plus_seconds(d * 86_400);
        team.app.store.set_clock(Some(day(10)));
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        team.app.store.set_clock(Some(day(15)));
        let (status, body) = team
            .call("root", "POST", "/api/v1/metrics", Some(json!({"key": OTHER, "name": "Turnaround", "owners": ["tomas"]})))
            .await;
        assert_eq!(status, 201, "{body}");
        team.app.store.set_clock(Some(day(20)));
        let mut body = hib(1.0, 2.5, 3.0, 4.0, "v2 from day 30");
        body["effective_from"] = json!(day(30).to_string());
        team.agree(body).await;
        team.app.store.set_clock(Some(day(40)));
        team.app.add_user("dash", "viewer").await;
        let token = team.app.token("dash", Scope::Read).await;
        let times = [
            String::new(),
            format!("as_of={}", day(5)),
            format!("as_of={}", day(12)),
            format!("as_of={}", day(25)),
            format!("as_of={}", day(35)),
            format!("as_of={}&known_at={}", day(35), day(15)),
            format!("known_at={}", day(16)),
        ];
        // Twice: the second round is answered from what the first kept.
        for round in 0..2 {
            for q in &times {
                let (status, whole) = get(&team, &token, &format!("/api/v1/published?{q}")).await;
                assert_eq!(status, 200, "{q}: {whole}");
                for key in [METRIC, OTHER] {
                    let (status, one) = get(&team, &token, &format!("/api/v1/published/{key}?{q}")).await;
                    let entry = &whole["set"][key];
                    if entry.is_null() {
                        assert_eq!(status, 404, "round {round}, {key} at {q}: {one}");
                        continue;
                    }
                    assert_eq!(status, 200, "round {round}, {key} at {q}: {one}");
                    assert_eq!(one["set"], json!({key: entry}), "round {round}, {key} at {q}");
                    for field in ["set_revision", "in_force_since", "audit_head", "as_of", "known_at"] {
                        assert_eq!(one["meta"][field], whole["meta"][field], "{field}: round {round}, {key} at {q}");
                    }
                    let without = |doc: &Value| {
                        doc["meta"]["metrics_without_version"]
                            .as_array()
                            .is_some_and(|a| a.iter().any(|k| k == key))
                    };
                    assert_eq!(without(&one), without(&whole), "round {round}, {key} at {q}");
                }
            }
        }
        // A past set kept from before changes when a later approval reaches back into it.
        let (_, kept) = get(&team, &token, &format!("/api/v1/published?as_of={}", day(35))).await;
        assert_eq!(kept["set"][METRIC]["version"], 2);
        team.app.store.set_clock(Some(day(41)));
        let mut body = hib(1.0, 2.6, 3.0, 4.0, "v3, recorded late, in force from day 33");
        body["effective_from"] = json!(day(33).to_string());
        team.agree(body).await;
        let (_, now) = get(&team, &token, &format!("/api/v1/published?as_of={}", day(35))).await;
        assert_eq!(now["set"][METRIC]["version"], 3, "{now}");
        let (_, one) = get(&team, &token, &format!("/api/v1/published/{METRIC}?as_of={}", day(35))).await;
        assert_eq!(one["set"][METRIC]["version"], 3, "{one}");
        team.app.store.set_clock(None);
    }

    async fn a_set_read_right_after_an_approval_holds_the_new_version(app) {
        let team = Team::new(app).await;
        team.app.add_user("dash", "viewer").await;
        let token = team.app.token("dash", Scope::Read).await;
        for (n, critical) in [1.0, 1.5, 1.25, 1.75, 1.1].into_iter().enumerate() {
            // Read first, so that a cached set is there to go stale.
            get(&team, &token, "/api/v1/published").await;
            get(&team, &token, &format!("/api/v1/published/{METRIC}")).await;
            team.agree(hib(critical, 2.0, 3.0, 4.0, "moved")).await;
            let version = n as i64 + 1;
            let (_, set) = get(&team, &token, "/api/v1/published").await;
            assert_eq!(set["set"][METRIC]["version"], version, "{set}");
            let (_, one) = get(&team, &token, &format!("/api/v1/published/{METRIC}")).await;
            assert_eq!(one["set"][METRIC]["version"], version, "{one}");
            assert_eq!(one["set"][METRIC]["cuts"]["critical"], critical);
        }
    }
}
