//! Concurrent decisions against the real server: exactly one consistent outcome, never two
//! versions in force, never a counted approval for a superseded hash.

use std::sync::Arc;

use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

/// Fires all requests at once and returns their statuses and bodies.
async fn all_at_once(
    team: &Arc<Team>,
    calls: Vec<(String, String, String, Option<Value>)>,
) -> Vec<(u16, Value)> {
    let barrier = Arc::new(tokio::sync::Barrier::new(calls.len()));
    let tasks: Vec<_> = calls
        .into_iter()
        .map(|(who, method, path, body)| {
            let team = team.clone();
            let barrier = barrier.clone();
            tokio::spawn(async move {
                barrier.wait().await;
                team.call(&who, &method, &path, body).await
            })
        })
        .collect();
    let mut out = Vec::new();
    for t in tasks {
        out.push(t.await.unwrap());
    }
    out
}

async fn versions(team: &Team) -> Vec<Value> {
    let (_, h) = team
        .call(
            "wren",
            "GET",
            &format!("/api/v1/metrics/{METRIC}/history"),
            None,
        )
        .await;
    h["versions"].as_array().unwrap().clone()
}

/// Adds `n` more reviewers with write tokens named r00, r01, ...
async fn more_reviewers(team: &Team, n: usize) -> Vec<String> {
    let mut names = Vec::new();
    for i in 0..n {
        let name = format!("r{i:02}");
        team.app.add_user(&name, "reviewer,signatory").await;
        names.push(name);
    }
    names
}

async fn tokens_for(team: &Team, names: &[String]) -> Vec<String> {
    let mut out = Vec::new();
    for n in names {
        out.push(team.app.token(n, Scope::Write).await);
    }
    out
}

on_both_backends! {
    async fn many_reviewers_approving_at_once_make_exactly_one_version(app) {
        let team = Team::new(app).await;
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.5, 3.0, 4.0, "v2")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        let hash = team.latest_hash(id).await;
        let reviewers = more_reviewers(&team, 24).await;
        let tokens = tokens_for(&team, &reviewers).await;
        let team = Arc::new(team);
        // Each reviewer calls with their own token.
        let barrier = Arc::new(tokio::sync::Barrier::new(tokens.len()));
        let tasks: Vec<_> = tokens.into_iter().map(|token| {
            let team = team.clone();
            let barrier = barrier.clone();
            let hash = hash.clone();
            tokio::spawn(async move {
                barrier.wait().await;
                let r = team.app.http.post(team.app.url(&format!("/api/v1/proposals/{id}/reviews")))
                    .bearer_auth(token)
                    .json(&json!({"verdict": "approve", "revision_hash": hash}))
                    .send().await.unwrap();
                r.status().as_u16()
            })
        }).collect();
        let mut statuses = Vec::new();
        for t in tasks { statuses.push(t.await.unwrap()); }
        assert_eq!(statuses.iter().filter(|s| **s == 200).count(), 1, "{statuses:?}");
        assert!(statuses.iter().all(|s| *s == 200 || *s == 409), "{statuses:?}");
        let p = team.get(id).await;
        assert_eq!(p["state"], "approved");
        assert_eq!(p["reviews"].as_array().unwrap().len(), 1);
        let v = versions(&team).await;
        assert_eq!(v.len(), 2);
        assert_eq!(v.iter().filter(|v| v["status"] == "in_force").count(), 1);
    }

    async fn an_approval_racing_a_new_revision_never_counts_for_the_old_hash(app) {
        let team = Arc::new(Team::new(app).await);
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        for round in 0..6 {
            let (_, p) = team.propose("tomas", hib(1.0, 2.0 + round as f64 / 10.0 + 0.05, 3.0, 4.0, "next")).await;
            let id = p["id"].as_i64().unwrap();
            team.act("tomas", id, "submit", None).await;
            let hash = team.latest_hash(id).await;
            let mut edit = hib(1.0, 2.0 + round as f64 / 10.0 + 0.07, 3.0, 4.0, "edited");
            edit["note"] = json!("race");
            let out = all_at_once(&team, vec![
                ("hana".into(), "POST".into(), format!("/api/v1/proposals/{id}/reviews"), Some(json!({"verdict": "approve", "revision_hash": hash}))),
                ("tomas".into(), "PUT".into(), format!("/api/v1/proposals/{id}"), Some(edit)),
            ]).await;
            let p = team.get(id).await;
            let (approve, revise) = (out[0].0, out[1].0);
            match (approve, revise) {
                // The approval came first and completed it: the edit found it approved.
                (200, 409) => {
                    assert_eq!(p["state"], "approved");
                    assert_eq!(p["revisions"].as_array().unwrap().len(), 1);
                    let v = versions(&team).await;
                    assert_eq!(v.last().unwrap()["revision_hash"], hash);
                }
                // The edit came first: the approval named a superseded hash.
                (409, 200) => {
                    assert_eq!(p["state"], "in_review");
                    assert_eq!(p["revisions"].as_array().unwrap().len(), 2);
                    assert!(p["reviews"].as_array().unwrap().is_empty());
                    // Finish it for the next round.
                    let (_, done) = team.approve("hana", id).await;
                    assert_eq!(done["state"], "approved");
                }
                other => panic!("round {round}: inconsistent outcome {other:?}: {out:?}"),
            }
        }
        let v = versions(&team).await;
        assert_eq!(v.len(), 7);
        assert_eq!(v.iter().filter(|v| v["status"] == "in_force").count(), 1);
        let numbers: Vec<i64> = v.iter().map(|v| v["number"].as_i64().unwrap()).collect();
        assert_eq!(numbers, (1..=7).collect::<Vec<_>>());
    }

    async fn signatories_signing_at_once_sign_once(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "first version")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        team.approve("hana", id).await;
        let hash = team.latest_hash(id).await;
        let signers = more_reviewers(&team, 12).await;
        let team = Arc::new(team);
        let calls = signers.iter().map(|s| (
            s.clone(), "POST".to_string(), format!("/api/v1/proposals/{id}/signoff"),
            Some(json!({"revision_hash": hash, "password": crate::helpers::PASSWORD})),
        )).collect();
        // The cast's tokens do not include the new people: give them tokens first.
        for s in &signers {
            team.register_token(s).await;
        }
        let out = all_at_once(&team, calls).await;
        let ok = out.iter().filter(|(s, _)| *s == 200).count();
        assert_eq!(ok, 1, "{:?}", out.iter().map(|o| o.0).collect::<Vec<_>>());
        assert!(out.iter().all(|(s, _)| *s == 200 || *s == 409));
        let p = team.get(id).await;
        assert_eq!(p["state"], "approved");
        assert_eq!(p["signoffs"].as_array().unwrap().len(), 1);
        assert_eq!(versions(&team).await.len(), 1);
    }

    async fn owners_proposing_at_once_open_exactly_one_proposal(app) {
        let team = Arc::new(Team::new(app).await);
        let mut calls = Vec::new();
        for i in 0..20 {
            let who = if i % 2 == 0 { "tomas" } else { "ownsig" };
            calls.push((who.to_string(), "POST".to_string(), format!("/api/v1/metrics/{METRIC}/proposals"), Some(hib(1.0, 2.0, 3.0, 4.0 + i as f64, "race"))));
        }
        let out = all_at_once(&team, calls).await;
        assert_eq!(out.iter().filter(|(s, _)| *s == 201).count(), 1);
        assert!(out.iter().all(|(s, _)| *s == 201 || *s == 409));
        let (_, m) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        let winner = out.iter().find(|(s, _)| *s == 201).unwrap();
        assert_eq!(m["open_proposal"]["id"], winner.1["id"]);
        let created = team.event_actions().await.into_iter().filter(|a| a == "proposal.created").count();
        assert_eq!(created, 1);
    }
}
