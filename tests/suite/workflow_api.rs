//! The agreement workflow through the API, rule by rule, on both databases.

use std::io::Write;
use std::process::{Command, Stdio};

use serde_json::{Value, json};

use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

/// SHA-256 as computed by GNU coreutils' `sha256sum`, the reference for content hashes.
fn sha256sum(text: &str) -> Option<String> {
    let mut child = Command::new("sha256sum")
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .ok()?;
    child
        .stdin
        .take()
        .unwrap()
        .write_all(text.as_bytes())
        .unwrap();
    let out = child.wait_with_output().ok()?;
    Some(
        String::from_utf8(out.stdout)
            .ok()?
            .split_whitespace()
            .next()?
            .to_string(),
    )
}

fn id_of(p: &Value) -> i64 {
    p["id"].as_i64().unwrap()
}

on_both_backends! {
    async fn a_proposal_starts_as_a_draft_with_its_canonical_text_and_hash(app) {
        let team = Team::new(app).await;
        let mut body = hib(50.0, 70.0, 80.0, 90.0, "Members walk when docks are empty.\nMorning peaks matter most.");
        body["shades"] = json!(4);
        body["effective_from"] = json!("2027-01-01");
        let (status, p) = team.propose("tomas", body).await;
        assert_eq!(status, 201, "{p}");
        assert_eq!(p["state"], "draft");
        assert_eq!(p["metric"], METRIC);
        let rev = &p["latest_revision"];
        assert_eq!(rev["number"], 1);
        let text = rev["canonical_text"].as_str().unwrap();
        assert_eq!(
            text,
            "direction: higher_is_better\ncritical: 50\nintervene: 70\noutperform: 80\nstretch: 90\nshades: 4\nunit: %\neffective_from: 2027-01-01T00:00:00.000000Z\nrationale:\n  Members walk when docks are empty.\n  Morning peaks matter most.\n"
        );
        match sha256sum(text) {
            Some(reference) => assert_eq!(rev["hash"], reference),
            None => crate::helpers::missing_prerequisite("sha256sum (GNU coreutils)"),
        }
        // Never approved before, so a sign-off will be needed.
        assert_eq!(p["still_needed"], json!({"approvals": 1, "signoff": true, "reasons": ["the metric has never had an approved version"]}));
        assert_eq!(p["still_needed_text"], "1 more reviewer approval; signatory sign-off needed because the metric has never had an approved version");
        let events = team.event_actions().await;
        assert_eq!(events.last().unwrap(), "proposal.created");
    }

    async fn only_owners_and_admins_propose_and_one_proposal_is_open_at_a_time(app) {
        let team = Team::new(app).await;
        for who in ["priya", "hana", "odile", "wren"] {
            let (status, body) = team.propose(who, hib(1.0, 2.0, 3.0, 4.0, "r")).await;
            assert_eq!(status, 403, "{who}: {body}");
        }
        let (status, first) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        assert_eq!(status, 201);
        let (status, second) = team.propose("root", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        assert_eq!(status, 409);
        let message = second["error"]["message"].as_str().unwrap();
        assert!(message.contains(&format!("/api/v1/proposals/{}", id_of(&first))), "{message}");
        // The metric points at its open proposal.
        let (_, metric) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        assert_eq!(metric["open_proposal"]["id"], first["id"]);
        assert_eq!(metric["version_in_force"], Value::Null);
    }

    async fn bad_proposals_are_refused_and_change_nothing(app) {
        let team = Team::new(app).await;
        let before = team.app.event_count().await;
        let cases = [
            (hib(50.0, 40.0, 80.0, 90.0, "r"), "for higher_is_better, intervene (40) must be greater than critical (50)"),
            (hib(1.0, 2.0, 3.0, 4.0, "   "), "rationale must not be empty"),
            (json!({"direction": "sideways", "cuts": {}, "rationale": "r"}), "unknown direction"),
            (json!({"direction": "target_band", "cuts": {"critical": 1}, "rationale": "r"}), "unknown cut point \"critical\" for target_band"),
            (json!({"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "shades": 7, "rationale": "r"}), "shades must be a whole number from 2 to 5"),
            (json!({"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "effective_from": "next tuesday", "rationale": "r"}), "is not a time"),
            (json!({"direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4}, "rationale": "r".repeat(20_001)}), "rationale is 20001 characters long"),
        ];
        for (body, says) in cases {
            let (status, err) = team.propose("tomas", body).await;
            assert_eq!(status, 400, "{says}: {err}");
            assert!(err["error"]["message"].as_str().unwrap().contains(says), "{err}");
        }
        let (status, err) = team.call("tomas", "POST", "/api/v1/metrics/no.such/proposals", Some(hib(1.0, 2.0, 3.0, 4.0, "r"))).await;
        assert_eq!(status, 404, "{err}");
        assert_eq!(team.app.event_count().await, before);
    }

    async fn every_save_is_a_new_revision_with_diffs_and_nothing_is_overwritten(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(50.0, 70.0, 80.0, 90.0, "First thoughts.")).await;
        let id = id_of(&p);
        let first_hash = p["latest_revision"]["hash"].as_str().unwrap().to_string();
        let mut edit = hib(50.0, 75.0, 80.0, 90.0, "First thoughts.\nIntervene earlier.");
        edit["note"] = json!("raise intervene after review comments");
        edit["base_revision_hash"] = json!(first_hash);
        let (status, p) = team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(edit.clone())).await;
        assert_eq!(status, 200, "{p}");
        assert_eq!(p["revisions"].as_array().unwrap().len(), 2);
        assert_eq!(p["revisions"][0]["hash"], first_hash, "revision 1 is kept as it was");
        let rev2 = &p["latest_revision"];
        assert_eq!(rev2["number"], 2);
        assert_eq!(rev2["note"], "raise intervene after review comments");
        let diff = rev2["diff_from_previous"].as_str().unwrap();
        assert!(diff.contains("-intervene: 70\n+intervene: 75\n"), "{diff}");
        assert!(diff.contains("+  Intervene earlier.\n"), "{diff}");
        // Saving against revision 1 again: someone saved in between.
        let (status, err) = team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(edit)).await;
        assert_eq!(status, 409);
        assert!(err["error"]["message"].as_str().unwrap().contains("not the latest revision"));
        // A note is required.
        let mut no_note = hib(50.0, 75.0, 80.0, 90.0, "x");
        no_note["note"] = json!("");
        let (status, _) = team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(no_note)).await;
        assert_eq!(status, 400);
        // Only owners or admins revise.
        let mut other = hib(50.0, 75.0, 80.0, 90.0, "x");
        other["note"] = json!("n");
        let (status, _) = team.call("hana", "PUT", &format!("/api/v1/proposals/{id}"), Some(other.clone())).await;
        assert_eq!(status, 403);
        let (status, p) = team.call("ownsig", "PUT", &format!("/api/v1/proposals/{id}"), Some(other)).await;
        assert_eq!(status, 200);
        assert_eq!(p["latest_revision"]["author"]["username"], "ownsig");
    }

    async fn the_field_level_change_list_reports_absolute_and_relative_change(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 80.0, 90.0, 95.0, "v1")).await;
        let (_, p) = team.propose("tomas", hib(0.0, 75.0, 90.0, 95.5, "v2")).await;
        let changes = &p["changes"];
        assert_eq!(changes["direction_changed"], false);
        let cut = |name: &str| changes["cuts"].as_array().unwrap().iter().find(|c| c["cut"] == name).unwrap().clone();
        let intervene = cut("intervene");
        assert_eq!(intervene["old"], 80.0);
        assert_eq!(intervene["new"], 75.0);
        assert_eq!(intervene["absolute"], -5.0);
        assert_eq!(intervene["relative"], -0.0625);
        assert_eq!(intervene["text"], "intervene 80 -> 75 (-5, -6.25 %)");
        assert_eq!(cut("critical")["text"], "critical 50 -> 0 (-50, -100 %)");
        assert_eq!(cut("stretch")["text"], "stretch 95 -> 95.5 (+0.5, +0.53 %)");
        assert_eq!(cut("outperform")["changed"], false);
        assert_eq!(p["still_needed"]["reasons"], json!(["critical moved 50 -> 0"]));
        // Relative change is n/a when the old value is 0.
        let id = id_of(&p);
        team.act("tomas", id, "withdraw", None).await;
        team.agree(hib(0.0, 75.0, 90.0, 95.5, "v2")).await;
        let (_, p) = team.propose("tomas", hib(-5.0, 75.0, 90.0, 95.5, "v3")).await;
        let critical = p["changes"]["cuts"].as_array().unwrap().iter().find(|c| c["cut"] == "critical").unwrap().clone();
        assert_eq!(critical["relative"], Value::Null);
        assert_eq!(critical["text"], "critical 0 -> -5 (-5, n/a)");
        // A direction change lists both sides and needs a sign-off.
        let id = id_of(&p);
        team.act("tomas", id, "withdraw", None).await;
        let (_, p) = team.propose("tomas", json!({"direction": "target_band", "cuts": {"critical_low": 1, "intervene_low": 2, "intervene_high": 3, "critical_high": 4}, "rationale": "band"})).await;
        assert_eq!(p["changes"]["direction_changed"], true);
        assert_eq!(p["still_needed"]["reasons"], json!(["direction changes higher_is_better -> target_band"]));
    }

    async fn submission_moves_a_draft_into_review_only_once(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        // Reviewers cannot approve a draft.
        let (status, _) = team.approve("hana", id).await;
        assert_eq!(status, 409);
        let (status, _) = team.act("hana", id, "submit", None).await;
        assert_eq!(status, 403);
        let (status, p) = team.act("tomas", id, "submit", None).await;
        assert_eq!(status, 200);
        assert_eq!(p["state"], "in_review");
        let (status, _) = team.act("tomas", id, "submit", None).await;
        assert_eq!(status, 409);
        // Wrong person is answered before wrong state.
        let (status, _) = team.act("wren", id, "submit", None).await;
        assert_eq!(status, 403);
    }

    async fn verdicts_name_the_latest_revision_and_count_once(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let old_hash = team.latest_hash(id).await;
        let mut edit = hib(1.0, 2.5, 3.0, 4.0, "r2");
        edit["note"] = json!("tweak");
        team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(edit)).await;
        let (status, err) = team.act("hana", id, "reviews", Some(json!({"verdict": "approve", "revision_hash": old_hash}))).await;
        assert_eq!(status, 409, "{err}");
        assert!(err["error"]["message"].as_str().unwrap().contains("is not the latest revision"));
        let (status, err) = team.act("hana", id, "reviews", Some(json!({"verdict": "applaud", "revision_hash": old_hash}))).await;
        assert_eq!(status, 400, "{err}");
        let (status, p) = team.approve("hana", id).await;
        assert_eq!(status, 200, "{p}");
        assert_eq!(p["reviews"][0]["counted"], true);
        let (status, _) = team.approve("hana", id).await;
        assert_eq!(status, 409, "a second approval of the same revision");
        // Only reviewers approve; signatories and others may not.
        for who in ["odile", "wren", "priya"] {
            let (status, _) = team.approve(who, id).await;
            assert_eq!(status, 403, "{who}");
        }
        // Still in review: the sign-off for a first version is missing.
        let p = team.get(id).await;
        assert_eq!(p["state"], "in_review");
        assert_eq!(p["still_needed"]["approvals"], 0);
        assert_eq!(p["still_needed"]["signoff"], true);
    }

    async fn a_new_revision_makes_earlier_approvals_and_signoffs_stale(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let (status, _) = team.sign("odile", id).await;
        assert_eq!(status, 200);
        let mut edit = hib(1.0, 2.0, 3.5, 4.0, "r");
        edit["note"] = json!("outperform later");
        let (status, p) = team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(edit)).await;
        assert_eq!(status, 200);
        assert_eq!(p["state"], "in_review", "editing in review stays in review");
        assert_eq!(p["signoffs"][0]["stale"], true);
        assert_eq!(p["signoffs"][0]["counted"], false);
        assert_eq!(p["still_needed"]["signoff"], true);
        // Stale ones stay visible.
        assert_eq!(p["signoffs"].as_array().unwrap().len(), 1);
        let saved = team.app.events().await.into_iter().rfind(|e| e.event.action == "revision.saved").unwrap();
        assert_eq!(saved.event.payload["made_stale"], json!([{"kind": "signoff", "by": "odile", "revision": 1}]));
        // Approve and sign the new revision: approved.
        team.approve("hana", id).await;
        let (status, p) = team.sign("odile", id).await;
        assert_eq!(status, 200, "{p}");
        assert_eq!(p["state"], "approved");
        assert_eq!(p["version"], 1);
    }

    async fn sent_back_proposals_need_a_new_revision_before_resubmitting(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let hash = team.latest_hash(id).await;
        // Signatories may send back too.
        let (status, p) = team.act("odile", id, "reviews", Some(json!({"verdict": "send_back", "revision_hash": hash, "comment": "Justify the stretch line."}))).await;
        assert_eq!(status, 200, "{p}");
        assert_eq!(p["state"], "sent_back");
        assert_eq!(p["reviews"][0]["comment"], "Justify the stretch line.");
        let (status, err) = team.act("tomas", id, "submit", None).await;
        assert_eq!(status, 409);
        assert!(err["error"]["message"].as_str().unwrap().contains("save a new revision"));
        let mut edit = hib(1.0, 2.0, 3.0, 4.5, "r\nStretch justified by last summer.");
        edit["note"] = json!("answers the review");
        let (_, p) = team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(edit)).await;
        assert_eq!(p["state"], "sent_back");
        let (status, p) = team.act("tomas", id, "submit", None).await;
        assert_eq!(status, 200);
        assert_eq!(p["state"], "in_review");
        // Viewers may not send back.
        let hash = team.latest_hash(id).await;
        let (status, _) = team.act("wren", id, "reviews", Some(json!({"verdict": "send_back", "revision_hash": hash}))).await;
        assert_eq!(status, 403);
    }

    async fn signoff_needs_the_signatorys_own_password_and_records_name_time_and_meaning(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(50.0, 70.0, 80.0, 90.0, "r")).await;
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let hash = team.latest_hash(id).await;
        let before = team.app.event_count().await;
        let (status, err) = team.act("odile", id, "signoff", Some(json!({"revision_hash": hash, "password": "not my password"}))).await;
        assert_eq!(status, 401, "{err}");
        assert_eq!(team.get(id).await["signoffs"].as_array().unwrap().len(), 0);
        assert_eq!(team.app.event_count().await, before + 1, "the failed attempt is recorded");
        let (status, _) = team.act("hana", id, "signoff", Some(json!({"revision_hash": hash, "password": crate::helpers::PASSWORD}))).await;
        assert_eq!(status, 403, "reviewers do not sign off");
        let (status, p) = team.sign("odile", id).await;
        assert_eq!(status, 200, "{p}");
        let s = &p["signoffs"][0];
        assert_eq!(s["signed_as"], "odile (display)");
        assert_eq!(s["meaning"], "approved as signatory");
        assert_eq!(s["revision_hash"], hash);
        assert!(s["created_at"].as_str().unwrap().ends_with('Z'));
        let (status, _) = team.sign("odile", id).await;
        assert_eq!(status, 409, "twice");
        // The page-text form of what is still needed.
        assert_eq!(p["still_needed_text"], "1 more reviewer approval");
    }

    async fn signoff_is_needed_exactly_when_direction_or_a_critical_cut_changes(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.0, "v1")).await;
        // Intervene, outperform, stretch, shades and unit may move without a sign-off.
        let mut body = hib(50.0, 72.0, 85.0, 95.0, "v2");
        body["shades"] = json!(4);
        let (_, p) = team.propose("tomas", body).await;
        assert_eq!(p["still_needed"], json!({"approvals": 1, "signoff": false, "reasons": []}));
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let (status, err) = team.sign("odile", id).await;
        assert_eq!(status, 409, "{err}");
        assert!(err["error"]["message"].as_str().unwrap().contains("needs no sign-off"));
        let (status, p) = team.approve("hana", id).await;
        assert_eq!(status, 200);
        assert_eq!(p["state"], "approved");
        assert_eq!(p["version"], 2);
        // Critical moves: sign-off needed, said in words.
        let (_, p) = team.propose("tomas", hib(45.0, 72.0, 85.0, 95.0, "v3")).await;
        assert_eq!(p["still_needed"]["reasons"], json!(["critical moved 50 -> 45"]));
        assert_eq!(p["still_needed_text"], "1 more reviewer approval; signatory sign-off needed because critical moved 50 -> 45");
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let (_, p) = team.approve("hana", id).await;
        assert_eq!(p["state"], "in_review", "the approval alone is not enough");
        let (_, p) = team.sign("odile", id).await;
        assert_eq!(p["state"], "approved");
        // Bands: either critical side needs a sign-off.
        let (_, p) = team.propose("tomas", json!({"direction": "target_band", "cuts": {"critical_low": 1, "intervene_low": 2, "intervene_high": 3, "critical_high": 4}, "rationale": "band"})).await;
        team.act("tomas", id_of(&p), "submit", None).await;
        team.sign("odile", id_of(&p)).await;
        team.approve("hana", id_of(&p)).await;
        let (_, p) = team.propose("tomas", json!({"direction": "target_band", "cuts": {"critical_low": 1, "intervene_low": 2, "intervene_high": 3, "critical_high": 5}, "rationale": "wider"})).await;
        assert_eq!(p["still_needed"]["reasons"], json!(["critical_high moved 4 -> 5"]));
    }

    async fn authors_never_approve_or_sign_and_every_refusal_is_recorded(app) {
        let team = Team::new(app).await;
        // ownsig owns the metric and holds reviewer and signatory roles.
        let (_, p) = team.propose("ownsig", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        team.act("ownsig", id, "submit", None).await;
        let (status, err) = team.approve("ownsig", id).await;
        assert_eq!(status, 403, "{err}");
        assert!(err["error"]["message"].as_str().unwrap().contains("you wrote a revision"));
        let (status, _) = team.sign("ownsig", id).await;
        assert_eq!(status, 403);
        // A person who wrote any revision, not only the first, is an author.
        let mut edit = hib(1.0, 2.0, 3.0, 4.5, "r");
        edit["note"] = json!("stretch");
        team.call("tomas", "PUT", &format!("/api/v1/proposals/{id}"), Some(edit)).await;
        let (status, _) = team.approve("tomas", id).await;
        assert_eq!(status, 403, "tomas is an owner without the reviewer role");
        // One person cannot count twice: vera approves, then may not sign the same revision.
        let (status, _) = team.approve("vera", id).await;
        assert_eq!(status, 200);
        let (status, err) = team.sign("vera", id).await;
        assert_eq!(status, 403, "{err}");
        assert!(err["error"]["message"].as_str().unwrap().contains("approved this revision"));
        let events = team.app.events().await;
        let refused: Vec<_> = events.iter().filter(|e| e.event.action.ends_with(".refused")).collect();
        assert_eq!(refused.len(), 3, "{refused:?}");
        assert_eq!(refused[0].event.actor, "ownsig");
        assert_eq!(refused[0].event.action, "review.refused");
        assert_eq!(refused[1].event.action, "signoff.refused");
        assert_eq!(refused[2].event.actor, "vera");
        assert_eq!(refused[0].event.payload["proposal"], id);
        // Someone else signs: approved, with vera's approval and odile's signature.
        let (status, p) = team.sign("odile", id).await;
        assert_eq!(status, 200);
        assert_eq!(p["state"], "approved");
        let (_, m) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        assert_eq!(m["version_in_force"]["approvers"], json!(["vera (display)"]));
        assert_eq!(m["version_in_force"]["signatory"], "odile (display)");
    }

    async fn the_policy_sets_how_many_distinct_reviewers_must_approve(app) {
        let team = Team::new(app).await;
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        let out = crate::cli::cutpoints(&["policy", "set", "--reviewers-required", "2", "--database-url", &team.app.store_url]);
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        assert_eq!(String::from_utf8_lossy(&out.stdout).trim(), "reviewers_required = 2");
        let out = crate::cli::cutpoints(&["policy", "set", "--reviewers-required", "0", "--database-url", &team.app.store_url]);
        assert_eq!(out.status.code(), Some(1));
        assert!(String::from_utf8_lossy(&out.stderr).contains("from 1 to 10"));
        let changed = team.app.events().await.into_iter().filter(|e| e.event.action == "policy.changed").collect::<Vec<_>>();
        assert_eq!(changed.len(), 1);
        assert_eq!(changed[0].event.payload, json!({"before": {"reviewers_required": 1}, "after": {"reviewers_required": 2}}));
        assert_eq!(changed[0].event.actor, "cli");

        let (_, p) = team.propose("tomas", hib(1.0, 2.5, 3.0, 4.0, "v2")).await;
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let (_, p) = team.approve("hana", id).await;
        assert_eq!(p["state"], "in_review");
        assert_eq!(p["still_needed_text"], "1 more reviewer approval");
        // A deactivated reviewer's approval stops counting.
        cutpoints::ops::users::set_active(&team.app.store, cutpoints::ops::users::By::Operator, "hana", false).await.unwrap();
        let p = team.get(id).await;
        assert_eq!(p["still_needed"]["approvals"], 2);
        cutpoints::ops::users::set_active(&team.app.store, cutpoints::ops::users::By::Operator, "hana", true).await.unwrap();
        let (_, p) = team.approve("emil", id).await;
        assert_eq!(p["state"], "approved");
        let (_, m) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        assert_eq!(m["version_in_force"]["approvers"], json!(["hana (display)", "emil (display)"]));
    }

    async fn a_future_effective_time_schedules_the_version(app) {
        let team = Team::new(app).await;
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        let mut body = hib(1.0, 2.5, 3.0, 4.0, "v2 from next year");
        body["effective_from"] = json!("2100-01-01T00:00:00Z");
        team.agree(body).await;
        let (_, m) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        assert_eq!(m["version_in_force"]["number"], 1, "the previous version stays in force");
        assert_eq!(m["scheduled_version"]["number"], 2);
        assert_eq!(m["scheduled_version"]["status"], "scheduled");
        assert_eq!(m["scheduled_version"]["effective_from"], "2100-01-01T00:00:00.000000Z");
        // An effective time before the latest approved version's is refused.
        let mut early = hib(1.0, 2.7, 3.0, 4.0, "v3");
        early["effective_from"] = json!("2099-06-01");
        let (status, err) = team.propose("tomas", early).await;
        assert_eq!(status, 400, "{err}");
        assert!(err["error"]["message"].as_str().unwrap().contains("earlier than version 2"));
        // "On approval" would also come before it: refused when approval comes.
        let (_, p) = team.propose("tomas", hib(1.0, 2.7, 3.0, 4.0, "v3")).await;
        let id = id_of(&p);
        team.act("tomas", id, "submit", None).await;
        let (status, err) = team.approve("hana", id).await;
        assert_eq!(status, 409, "{err}");
        assert_eq!(team.get(id).await["state"], "in_review");
        let (_, history) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/history"), None).await;
        let statuses: Vec<_> = history["versions"].as_array().unwrap().iter().map(|v| v["status"].clone()).collect();
        assert_eq!(statuses, vec![json!("in_force"), json!("scheduled")]);
    }

    async fn a_backdated_version_is_recorded_as_retroactive(app) {
        let team = Team::new(app).await;
        let mut body = hib(1.0, 2.0, 3.0, 4.0, "agreed in a meeting last spring");
        body["effective_from"] = json!("2020-03-01");
        team.agree(body).await;
        let (_, m) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        let v = &m["version_in_force"];
        assert_eq!(v["effective_from"], "2020-03-01T00:00:00.000000Z");
        assert_eq!(v["retroactive"], true);
        assert!(v["approved_at"].as_str().unwrap() > "2026");
    }

    async fn withdraw_and_reject_follow_who_and_when(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        let (status, _) = team.act("hana", id, "withdraw", None).await;
        assert_eq!(status, 403);
        let (status, _) = team.act("hana", id, "reject", Some(json!({"reason": "no"}))).await;
        assert_eq!(status, 409, "drafts are not rejected");
        team.act("tomas", id, "submit", None).await;
        let (status, _) = team.act("tomas", id, "reject", Some(json!({"reason": "no"}))).await;
        assert_eq!(status, 403, "owners do not reject");
        let (status, _) = team.act("hana", id, "reject", Some(json!({"reason": ""}))).await;
        assert_eq!(status, 400, "a reason is required");
        let (status, p) = team.act("hana", id, "reject", Some(json!({"reason": "Stretch is not realistic."}))).await;
        assert_eq!(status, 200);
        assert_eq!(p["state"], "rejected");
        assert_eq!(p["close_reason"], "Stretch is not realistic.");
        let (status, _) = team.act("tomas", id, "withdraw", None).await;
        assert_eq!(status, 409);
        // A rejected proposal no longer blocks a new one.
        let (status, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "again")).await;
        assert_eq!(status, 201);
        let (status, p) = team.act("priya", id_of(&p), "withdraw", Some(json!({"reason": "superseded by a new plan"}))).await;
        assert_eq!(status, 403, "priya owns another metric, not this one: {p}");
    }

    async fn anyone_signed_in_comments_optionally_on_one_cut_point(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        let (status, p) = team.act("wren", id, "comments", Some(json!({"body": "Is 2 realistic?", "cut": "intervene"}))).await;
        assert_eq!(status, 201, "{p}");
        assert_eq!(p["comments"][0], json!({
            "author": {"username": "wren", "display_name": "wren (display)"},
            "cut": "intervene", "body": "Is 2 realistic?", "revision_number": 1,
            "created_at": p["comments"][0]["created_at"],
        }));
        let (status, err) = team.act("wren", id, "comments", Some(json!({"body": "x", "cut": "critical_low"}))).await;
        assert_eq!(status, 400);
        assert!(err["error"]["message"].as_str().unwrap().contains("unknown cut point"));
        let (status, _) = team.act("wren", id, "comments", Some(json!({"body": "  "}))).await;
        assert_eq!(status, 400);
        let (status, _) = team.act("wren", 9999, "comments", Some(json!({"body": "hello"}))).await;
        assert_eq!(status, 404);
        let (status, _) = team.call("wren", "GET", "/api/v1/proposals/abc", None).await;
        assert_eq!(status, 404);
    }

    async fn history_lists_every_version_with_rationale_approvers_and_diff(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.0, "v1 rationale")).await;
        team.agree(hib(50.0, 75.0, 80.0, 90.0, "v2 rationale")).await;
        let (status, h) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}/history"), None).await;
        assert_eq!(status, 200);
        let versions = h["versions"].as_array().unwrap();
        assert_eq!(versions.len(), 2);
        assert_eq!(versions[0]["status"], "superseded");
        assert_eq!(versions[0]["signatory"], "odile (display)");
        assert_eq!(versions[1]["status"], "in_force");
        assert_eq!(versions[1]["rationale"], "v2 rationale");
        assert_eq!(versions[1]["approvers"], json!(["hana (display)"]));
        assert_eq!(versions[1]["signatory"], Value::Null);
        let diff = versions[1]["diff_from_previous"].as_str().unwrap();
        assert!(diff.contains("-intervene: 70\n+intervene: 75\n"), "{diff}");
        assert_eq!(versions[1]["changes"]["cuts"][1]["text"], "intervene 70 -> 75 (+5, +7.14 %)");
        assert!(versions[0]["approved_at"].as_str().unwrap() <= versions[1]["approved_at"].as_str().unwrap());
    }

    async fn the_inbox_shows_what_waits_for_each_person(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = id_of(&p);
        let (_, mine) = team.call("tomas", "GET", "/api/v1/inbox", None).await;
        assert_eq!(mine["mine"][0]["proposal"], id);
        let (_, hana) = team.call("hana", "GET", "/api/v1/inbox", None).await;
        assert_eq!(hana["to_review"], json!([]), "drafts are not for review yet");
        team.act("tomas", id, "submit", None).await;
        let (_, hana) = team.call("hana", "GET", "/api/v1/inbox", None).await;
        assert_eq!(hana["to_review"][0]["proposal"], id);
        let (_, odile) = team.call("odile", "GET", "/api/v1/inbox", None).await;
        assert_eq!(odile["to_sign"][0]["proposal"], id);
        team.approve("hana", id).await;
        let (_, hana) = team.call("hana", "GET", "/api/v1/inbox", None).await;
        assert_eq!(hana["to_review"], json!([]), "already approved by hana");
    }

    async fn set_revision_counts_versions_both_approved_and_in_effect(app) {
        use cutpoints::domain::Timestamp;
        use cutpoints::store::versions::set_revision;
        let team = Team::new(app).await;
        // Step through invented future times so that every instant is known exactly.
        let t1 = Timestamp::now().plus_seconds(86_400);
        team.app.store.set_clock(Some(t1));
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        let t2 = t1.plus_seconds(86_400);
        team.app.store.set_clock(Some(t2));
        let effective = t1.plus_seconds(10 * 86_400);
        let mut body = hib(1.0, 2.5, 3.0, 4.0, "v2 later");
        body["effective_from"] = json!(effective.to_string());
        team.agree(body).await;
        let mut conn = team.app.store.read().await.unwrap();
        let at = |t: Timestamp| t;
        assert_eq!(set_revision(&mut conn, at(t1.plus_seconds(-1))).await.unwrap(), 0);
        let (_, m) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        let approved_at = m["version_in_force"]["approved_at"].as_str().unwrap().to_string();
        let v1_at = Timestamp::parse(&approved_at).unwrap();
        assert!(v1_at >= t1);
        assert_eq!(set_revision(&mut conn, v1_at).await.unwrap(), 1);
        // Version 2 is approved but not yet in effect: the set has not changed.
        assert_eq!(set_revision(&mut conn, t2.plus_seconds(3600)).await.unwrap(), 1);
        assert_eq!(m["scheduled_version"]["number"], 2);
        assert_eq!(set_revision(&mut conn, effective).await.unwrap(), 2);
        // Once the clock passes its effective time, version 2 is in force with no job run.
        team.app.store.set_clock(Some(effective.plus_seconds(1)));
        let (_, m) = team.call("wren", "GET", &format!("/api/v1/metrics/{METRIC}"), None).await;
        assert_eq!(m["version_in_force"]["number"], 2);
        assert_eq!(m["scheduled_version"], Value::Null);
        team.app.store.set_clock(None);
    }
}

on_both_backends! {
    async fn a_proposal_read_says_what_the_caller_may_do_next(app) {
        // Decided by the same rules the steps apply, from who the caller is.
        let team = Team::new(app).await;
        let (status, p) = team.propose("tomas", hib(50.0, 70.0, 80.0, 90.0, "First agreed set.")).await;
        assert_eq!(status, 201, "{p}");
        let id = id_of(&p);
        let allowed = |who: &'static str| {
            let team = &team;
            async move {
                let (status, body) = team.call(who, "GET", &format!("/api/v1/proposals/{id}"), None).await;
                assert_eq!(status, 200, "{body}");
                body["allowed"].clone()
            }
        };
        let none = json!({"revise": false, "submit": false, "approve": false, "send_back": false, "sign": false, "withdraw": false, "reject": false});
        // A draft: its author may revise, submit and withdraw it; a reviewer may do nothing yet.
        assert_eq!(allowed("tomas").await, json!({"revise": true, "submit": true, "approve": false, "send_back": false, "sign": false, "withdraw": true, "reject": false}));
        assert_eq!(allowed("kofi").await, none);
        assert_eq!(allowed("wren").await, none);
        let (status, body) = team.act("tomas", id, "submit", None).await;
        assert_eq!(status, 200, "{body}");
        // In review: a reviewer may approve, send back or reject; a signatory may sign (this
        // set has never been approved), send back or reject; the author may not approve their
        // own.
        assert_eq!(allowed("kofi").await, json!({"revise": false, "submit": false, "approve": true, "send_back": true, "sign": false, "withdraw": false, "reject": true}));
        assert_eq!(allowed("odile").await, json!({"revise": false, "submit": false, "approve": false, "send_back": true, "sign": true, "withdraw": false, "reject": true}));
        assert_eq!(allowed("tomas").await["approve"], false);
        assert_eq!(allowed("tomas").await["withdraw"], true);
        // Once kofi approved, he may not approve again.
        let (status, body) = team.approve("kofi", id).await;
        assert_eq!(status, 200, "{body}");
        assert_eq!(allowed("kofi").await["approve"], false);
    }
}
