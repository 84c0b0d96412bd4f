//! The workflow in the browser's pages (without JavaScript): forms, the proposal page with
//! its diff, change table and decision forms, the inbox and the metric's history.

use crate::helpers::PASSWORD;
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

fn between<'a>(html: &'a str, start: &str, end: &str) -> &'a str {
    let s = html
        .find(start)
        .unwrap_or_else(|| panic!("{start:?} not in page"));
    let rest = &html[s..];
    &rest[..rest.find(end).unwrap_or(rest.len())]
}

on_both_backends! {
    async fn the_proposal_form_shows_each_problem_beside_its_field(app) {
        let team = Team::new(app).await;
        let tomas = team.app.signed_in("tomas").await;
        let form = format!("/metrics/{METRIC}/proposals/new");
        let (status, html) = tomas.get_text(&form).await;
        assert_eq!(status, 200);
        for name in ["critical", "intervene", "outperform", "stretch"] {
            assert!(html.contains(&format!("name=\"{name}\"")), "{name}");
        }
        let (_, band) = tomas.get_text(&format!("{form}?direction=target_band")).await;
        assert!(band.contains("name=\"critical_low\"") && !band.contains("name=\"stretch\""));
        let r = tomas.post_form(&form, &form, &[
            ("direction", "higher_is_better"), ("critical", "50"), ("intervene", "forty"),
            ("outperform", "80"), ("stretch", ""), ("shades", "9"), ("rationale", ""),
            ("effective_from", "soon"),
        ]).await;
        assert_eq!(r.status(), 400);
        let html = r.text().await.unwrap();
        assert!(between(&html, "id=\"cut-intervene-error\"", "</p>").contains("intervene must be a finite number, got &quot;forty&quot;"));
        assert!(between(&html, "id=\"cut-stretch-error\"", "</p>").contains("give stretch a value"));
        // Order problems of the whole set are shown beside the first cut point.
        let r = tomas.post_form(&form, &form, &[
            ("direction", "higher_is_better"), ("critical", "50"), ("intervene", "40"),
            ("outperform", "80"), ("stretch", "90"), ("rationale", "r"),
        ]).await;
        assert_eq!(r.status(), 400);
        let html = r.text().await.unwrap();
        assert!(between(&html, "id=\"cut-critical-error\"", "</p>").contains("intervene (40) must be greater than critical (50)"));
        assert!(html.contains("value=\"40\""), "typed values are kept");
        let r = tomas.post_form(&form, &form, &[
            ("direction", "higher_is_better"), ("critical", "50"), ("intervene", "70"),
            ("outperform", "80"), ("stretch", "90"), ("shades", "9"), ("rationale", " "),
            ("effective_from", "soon"),
        ]).await;
        let html = r.text().await.unwrap();
        assert!(between(&html, "id=\"shades-error\"", "</p>").contains("from 2 to 5"));
        assert!(between(&html, "id=\"rationale-error\"", "</p>").contains("rationale must not be empty"));
        assert!(between(&html, "id=\"effective-error\"", "</p>").contains("is not a time"));
        assert_eq!(team.event_actions().await.iter().filter(|a| *a == "proposal.created").count(), 0);
    }

    async fn a_proposal_goes_from_form_to_version_in_the_pages(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.0, "v1")).await;
        let tomas = team.app.signed_in("tomas").await;
        let form = format!("/metrics/{METRIC}/proposals/new");
        // The form starts from the version in force.
        let (_, html) = tomas.get_text(&form).await;
        assert!(html.contains("id=\"cut-intervene\" name=\"intervene\" inputmode=\"decimal\" value=\"70\""));
        let r = tomas.post_form(&form, &form, &[
            ("direction", "higher_is_better"), ("critical", "45"), ("intervene", "75"),
            ("outperform", "80"), ("stretch", "90"), ("shades", "3"), ("unit", "%"),
            ("effective_from", ""), ("rationale", "Winter review: act sooner."),
        ]).await;
        assert_eq!(r.status(), 303);
        let location = r.headers()["location"].to_str().unwrap().to_string();
        assert!(location.starts_with("/proposals/"), "{location}");
        let id: i64 = location["/proposals/".len()..].split('?').next().unwrap().parse().unwrap();
        let (_, page) = tomas.get_text(&location).await;
        assert!(page.contains("Your proposal was saved as a draft"));
        assert!(page.contains("1 more reviewer approval; signatory sign-off needed because critical moved 50 -&gt; 45"));
        let changes = between(&page, "<table class=\"register changes\">", "</table>");
        assert!(changes.contains("<th scope=\"row\">intervene</th>"));
        assert!(changes.contains("<td>70</td>") && changes.contains("<td>75</td>") && changes.contains("+5") && changes.contains("+7.14 %"));
        // The zone strip of version 1 above the proposal.
        let strip = between(&page, "<svg", "</svg>");
        assert!(strip.contains("Version 1") && strip.contains("Proposed: revision 1"));
        // Added and removed lines differ in more than colour.
        assert!(page.contains("<del><span class=\"visually-hidden\">removed: </span>-intervene: 70</del>"));
        assert!(page.contains("<ins><span class=\"visually-hidden\">added: </span>+intervene: 75</ins>"));

        // Submit, then a reviewer sends it back from the page.
        let r = tomas.post_form(&location, &format!("/proposals/{id}/submit"), &[]).await;
        assert_eq!(r.status(), 303);
        let hana = team.app.signed_in("hana").await;
        let page_url = format!("/proposals/{id}");
        let (_, page) = hana.get_text(&page_url).await;
        assert!(page.contains("value=\"approve\"") && page.contains("value=\"send_back\""));
        assert!(!page.contains("action=\"/proposals/{id}/signoff\""), "reviewers get no sign-off form");
        let hash = team.latest_hash(id).await;
        let r = hana.post_form(&page_url, &format!("/proposals/{id}/reviews"), &[
            ("revision_hash", hash.as_str()), ("verdict", "send_back"), ("comment", "Show the evidence for 45."),
        ]).await;
        assert_eq!(r.status(), 303);
        assert_eq!(team.get(id).await["state"], "sent_back");

        // The owner revises through the form, with a note, and resubmits.
        let edit = format!("/proposals/{id}/edit");
        let (status, html) = tomas.get_text(&edit).await;
        assert_eq!(status, 200);
        assert!(html.contains("name=\"base_revision_hash\" value=\"") && html.contains("value=\"45\""));
        let r = tomas.post_form(&edit, &edit, &[
            ("direction", "higher_is_better"), ("critical", "45"), ("intervene", "75"),
            ("outperform", "80"), ("stretch", "90"), ("shades", "3"), ("unit", "%"),
            ("rationale", "Winter review: act sooner.\nEvidence: 12 empty-dock complaints a week."),
            ("note", "add the evidence"), ("base_revision_hash", hash.as_str()),
        ]).await;
        assert_eq!(r.status(), 303);
        tomas.post_form(&page_url, &format!("/proposals/{id}/submit"), &[]).await;
        let (_, page) = hana.get_text(&page_url).await;
        assert!(page.contains("stale: revision 1 is no longer the latest"));
        let hash = team.latest_hash(id).await;
        let r = hana.post_form(&page_url, &format!("/proposals/{id}/reviews"), &[
            ("revision_hash", hash.as_str()), ("verdict", "approve"),
        ]).await;
        assert_eq!(r.status(), 303);

        // The signatory signs with her password; a wrong one is refused on the page.
        let odile = team.app.signed_in("odile").await;
        let (_, page) = odile.get_text(&page_url).await;
        assert!(page.contains("Needed because critical moved 50 -&gt; 45"));
        let r = odile.post_form(&page_url, &format!("/proposals/{id}/signoff"), &[
            ("revision_hash", hash.as_str()), ("password", "wrong password!"),
        ]).await;
        assert_eq!(r.status(), 401);
        assert!(r.text().await.unwrap().contains("the password is not right"));
        let r = odile.post_form(&page_url, &format!("/proposals/{id}/signoff"), &[
            ("revision_hash", hash.as_str()), ("password", PASSWORD),
        ]).await;
        assert_eq!(r.status(), 303);
        assert!(r.headers()["location"].to_str().unwrap().ends_with("done=in_force"));

        // The metric page shows the new version in force, its history and the strip.
        let (_, metric) = tomas.get_text(&format!("/metrics/{METRIC}")).await;
        assert!(metric.contains("Version 2 is in force since"));
        assert!(metric.contains("signed off by odile (display)"));
        assert!(metric.contains("<li>critical 50 -&gt; 45 (-5, -10 %)</li>"));
        assert!(between(&metric, "<svg", "</svg>").contains("Version 2 (in force)"));
        assert!(metric.contains("Version 1 <span class=\"state state-superseded\">superseded</span>"));
    }

    async fn a_stale_verdict_on_the_page_is_explained(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        let hana = team.app.signed_in("hana").await;
        let page_url = format!("/proposals/{id}");
        let old = team.latest_hash(id).await;
        let mut edit = hib(1.0, 2.5, 3.0, 4.0, "r");
        edit["note"] = serde_json::json!("meanwhile");
        team.call("tomas", "PUT", &page_url.replace("/proposals", "/api/v1/proposals"), Some(edit)).await;
        let r = hana.post_form(&page_url, &format!("/proposals/{id}/reviews"), &[
            ("revision_hash", old.as_str()), ("verdict", "approve"),
        ]).await;
        assert_eq!(r.status(), 409);
        let html = r.text().await.unwrap();
        assert!(html.contains("is not the latest revision"));
        assert!(html.contains("Proposal"), "the proposal is shown again with the reason");
    }

    async fn the_inbox_page_lists_what_waits(app) {
        let team = Team::new(app).await;
        let (_, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        let odile = team.app.signed_in("odile").await;
        let (status, html) = odile.get_text("/inbox").await;
        assert_eq!(status, 200);
        let to_sign = between(&html, "Awaiting my sign-off", "</section>");
        assert!(to_sign.contains(&format!("href=\"/proposals/{id}\"")));
        let (_, html) = team.app.signed_in("hana").await.get_text("/inbox").await;
        assert!(between(&html, "Awaiting my review", "</section>").contains(&format!("href=\"/proposals/{id}\"")));
    }
}
