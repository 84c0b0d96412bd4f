//! A sign-off asks who and when before the password: the wrong person gets the same 403
//! whatever password came (RFC 9110 §15.5.4: the server understood and refuses), never a 401
//! that would tell a right password from a wrong one, and nothing is recorded or counted
//! against them. The right person at the wrong time gets 409 before any password check; the
//! API contract checks 403 before 409.

use serde_json::{Value, json};

use crate::helpers::{Browser, PASSWORD};
use crate::on_both_backends;
use crate::workflow_support::{Team, hib};

const WRONG: &str = "not the password at all";

/// People who may not sign: a viewer, an auditor, an owner, a reviewer.
const MAY_NOT_SIGN: &[&str] = &["wren", "audra", "tomas", "hana"];

async fn throttle_rows(team: &Team, username: &str) -> i64 {
    sqlx::query_scalar(sqlx::AssertSqlSafe(format!(
        "SELECT COUNT(*) FROM signin_throttle WHERE subject = '{username}'"
    )))
    .fetch_one(team.app.store.pool())
    .await
    .unwrap()
}

/// A submitted proposal that needs a sign-off (the metric's first version), by `author`.
async fn submitted(team: &Team, author: &str) -> (i64, String) {
    let (status, p) = team.propose(author, hib(50.0, 70.0, 80.0, 90.0, "r")).await;
    assert_eq!(status, 201, "{p}");
    let id = p["id"].as_i64().unwrap();
    let (status, p) = team.act(author, id, "submit", None).await;
    assert_eq!(status, 200, "{p}");
    assert_eq!(p["still_needed"]["signoff"], true);
    (id, team.latest_hash(id).await)
}

async fn api_signoff(team: &Team, who: &str, id: i64, hash: &str, password: &str) -> (u16, Value) {
    team.act(
        who,
        id,
        "signoff",
        Some(json!({"revision_hash": hash, "password": password})),
    )
    .await
}

async fn page_signoff(browser: &Browser, id: i64, hash: &str, password: &str) -> u16 {
    let page = format!("/proposals/{id}");
    let r = browser
        .post_form(
            &page,
            &format!("/proposals/{id}/signoff"),
            &[("revision_hash", hash), ("password", password)],
        )
        .await;
    r.status().as_u16()
}

async fn team_with_auditor(app: crate::helpers::TestApp) -> Team {
    let team = Team::new(app).await;
    team.app.add_user("audra", "auditor").await;
    team.register_token("audra").await;
    team
}

on_both_backends! {
    async fn people_who_may_not_sign_get_the_same_403_whatever_the_password(app) {
        let team = team_with_auditor(app).await;
        let (id, hash) = submitted(&team, "tomas").await;
        let events = team.app.event_count().await;
        for who in MAY_NOT_SIGN {
            let (wrong, wrong_body) = api_signoff(&team, who, id, &hash, WRONG).await;
            let (right, right_body) = api_signoff(&team, who, id, &hash, PASSWORD).await;
            assert_eq!((wrong, right), (403, 403), "{who}: {wrong_body} / {right_body}");
            assert_eq!(wrong_body, right_body, "{who}: the answer does not depend on the password");

            let browser = team.app.signed_in(who).await;
            let wrong = page_signoff(&browser, id, &hash, WRONG).await;
            let right = page_signoff(&browser, id, &hash, PASSWORD).await;
            assert_eq!((wrong, right), (403, 403), "{who} on the page");
            assert_eq!(throttle_rows(&team, who).await, 0, "{who}: nothing counted");
        }
        assert_eq!(team.app.event_count().await, events, "no event for people who may not sign");
        assert!(team.get(id).await["signoffs"].as_array().unwrap().is_empty());
    }

    async fn an_author_is_refused_before_the_password_and_the_refusal_is_recorded(app) {
        let team = Team::new(app).await;
        // ownsig owns the metric, holds the signatory role and wrote the proposal.
        let (id, hash) = submitted(&team, "ownsig").await;
        let (wrong, wrong_body) = api_signoff(&team, "ownsig", id, &hash, WRONG).await;
        let (right, right_body) = api_signoff(&team, "ownsig", id, &hash, PASSWORD).await;
        assert_eq!((wrong, right), (403, 403));
        assert_eq!(wrong_body, right_body);
        let browser = team.app.signed_in("ownsig").await;
        assert_eq!(page_signoff(&browser, id, &hash, WRONG).await, 403);
        let actions = team.event_actions().await;
        assert_eq!(actions.iter().filter(|a| *a == "signoff.refused").count(), 3);
        assert!(!actions.iter().any(|a| a == "signoff.password_failed"));
        assert_eq!(throttle_rows(&team, "ownsig").await, 0);
    }

    async fn the_wrong_moment_answers_409_before_the_password(app) {
        let team = Team::new(app).await;
        // A draft: not yet in review.
        let (_, p) = team.propose("tomas", hib(50.0, 70.0, 80.0, 90.0, "r")).await;
        let id = p["id"].as_i64().unwrap();
        let hash = team.latest_hash(id).await;
        let events = team.app.event_count().await;
        let (status, body) = api_signoff(&team, "odile", id, &hash, WRONG).await;
        assert_eq!(status, 409, "{body}");
        assert_eq!(team.app.event_count().await, events);
        // In review, but a stale revision hash.
        team.act("tomas", id, "submit", None).await;
        let events = team.app.event_count().await;
        let (status, body) = api_signoff(&team, "odile", id, &"0".repeat(64), WRONG).await;
        assert_eq!(status, 409, "{body}");
        let browser = team.app.signed_in("odile").await;
        assert_eq!(page_signoff(&browser, id, &"0".repeat(64), WRONG).await, 409);
        assert_eq!(team.app.event_count().await, events);
        assert_eq!(throttle_rows(&team, "odile").await, 0);
        // The right person at the right moment: a wrong password is a 401, recorded and
        // counted; the right one signs.
        let (status, _) = api_signoff(&team, "odile", id, &hash, WRONG).await;
        assert_eq!(status, 401);
        assert_eq!(team.event_actions().await.last().unwrap(), "signoff.password_failed");
        assert_eq!(throttle_rows(&team, "odile").await, 1);
        let (status, p) = api_signoff(&team, "odile", id, &hash, PASSWORD).await;
        assert_eq!(status, 200, "{p}");
        assert_eq!(p["signoffs"].as_array().unwrap().len(), 1);
    }
}
