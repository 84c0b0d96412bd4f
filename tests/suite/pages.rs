//! The server-rendered pages: the register list and search, a metric's page, the add and edit
//! forms, and what every page carries.

use crate::helpers::{Browser, TestApp};
use crate::on_both_backends;

async fn seed(app: &TestApp) {
    use cutpoints::ops::metrics::{NewMetric, create};
    let root = app.add_user("root", "admin").await;
    app.add_user("tomas", "owner").await;
    app.add_user("priya", "owner").await;
    for (key, name, owner, tags) in [
        (
            "docks.peak_availability",
            "Peak dock availability",
            "tomas",
            vec!["fleet"],
        ),
        (
            "repairs.turnaround",
            "Repair turnaround",
            "tomas",
            vec!["fleet", "workshop"],
        ),
        (
            "members.monthly_churn",
            "Monthly member churn",
            "priya",
            vec!["members"],
        ),
    ] {
        let input = NewMetric {
            key: key.into(),
            name: name.into(),
            owners: vec![owner.into()],
            tags: tags.into_iter().map(String::from).collect(),
            description: "A <b>bold</b> claim & more".into(),
            ..Default::default()
        };
        create(&app.store, &root, &input).await.unwrap();
    }
}

on_both_backends! {
    async fn signed_out_visitors_are_sent_to_sign_in_and_back(app) {
        seed(&app).await;
        let browser = Browser::new(&app);
        let r = browser.get("/metrics/repairs.turnaround").await;
        assert_eq!(r.status(), 303);
        let location = r.headers()["location"].to_str().unwrap().to_string();
        assert_eq!(location, "/signin?next=%2Fmetrics%2Frepairs.turnaround");
        let (_, html) = browser.get_text(&location).await;
        assert!(html.contains("name=\"next\" value=\"/metrics/repairs.turnaround\""));
        let csrf = crate::helpers::csrf_in(&html).unwrap();
        let r = browser.client.post(browser.url("/signin")).form(&[
            ("_csrf", csrf.as_str()), ("username", "tomas"), ("password", crate::helpers::PASSWORD),
            ("next", "/metrics/repairs.turnaround"),
        ]).send().await.unwrap();
        assert_eq!(r.headers()["location"], "/metrics/repairs.turnaround");
        // Only paths on this site are followed after sign-in.
        let other = Browser::new(&app);
        let csrf = other.csrf_on("/signin").await;
        let r = other.client.post(other.url("/signin")).form(&[
            ("_csrf", csrf.as_str()), ("username", "tomas"), ("password", crate::helpers::PASSWORD),
            ("next", "//evil.example/"),
        ]).send().await.unwrap();
        assert_eq!(r.headers()["location"], "/metrics");
    }

    async fn the_register_lists_and_searches_metrics(app) {
        seed(&app).await;
        let b = app.signed_in("tomas").await;
        let (status, html) = b.get_text("/metrics").await;
        assert_eq!(status, 200);
        assert!(html.contains("3 metrics."));
        assert!(html.contains("href=\"/metrics/repairs.turnaround\""));
        assert!(!html.contains("Add a metric"), "only admins see the add link");
        let (_, html) = b.get_text("/metrics?tag=workshop").await;
        assert!(html.contains("1 metric match."));
        assert!(html.contains("Repair turnaround"));
        let (_, html) = b.get_text("/metrics?owner=priya").await;
        assert!(html.contains("Monthly member churn") && !html.contains("Repair turnaround"));
        let (_, html) = b.get_text("/metrics?q=DOCK").await;
        assert!(html.contains("Peak dock availability") && !html.contains("Monthly member churn"));
        // A malformed page number is read as the first page.
        let (status, _) = b.get_text("/metrics?page=zero").await;
        assert_eq!(status, 200);
    }

    async fn the_register_pages_through_many_metrics(app) {
        use cutpoints::ops::metrics::{NewMetric, create};
        let root = app.add_user("root", "admin").await;
        for i in 0..27 {
            let input = NewMetric { key: format!("m{i:02}"), name: format!("Metric {i}"), ..Default::default() };
            create(&app.store, &root, &input).await.unwrap();
        }
        let b = app.signed_in("root").await;
        let (_, first) = b.get_text("/metrics").await;
        assert!(first.contains("Page 1 of 2"));
        assert!(first.contains("rel=\"next\""));
        assert!(first.contains("m24") && !first.contains("m25"));
        let (_, second) = b.get_text("/metrics?page=2").await;
        assert!(second.contains("m26") && !second.contains("m24<"));
        assert!(second.contains("rel=\"prev\""));
    }

    async fn a_metric_page_shows_its_details_escaped(app) {
        seed(&app).await;
        let b = app.signed_in("priya").await;
        let (status, html) = b.get_text("/metrics/repairs.turnaround").await;
        assert_eq!(status, 200);
        assert!(html.contains("Repair turnaround"));
        assert!(html.contains("tomas (display)"));
        assert!(html.contains("A &lt;b&gt;bold&lt;&#x2F;b&gt; claim &amp; more") || html.contains("A &lt;b&gt;bold&lt;/b&gt; claim &amp; more"), "{html}");
        assert!(!html.contains("<b>bold</b>"));
        assert!(!html.contains("Edit details"), "priya does not own it");
        let (status, _) = b.get_text("/metrics/no.such.metric").await;
        assert_eq!(status, 404);
        let (status, html) = b.get_text("/metrics/Not%20A%20Key").await;
        assert_eq!(status, 404);
        assert!(html.contains("is not a metric key"));
    }

    async fn admins_add_metrics_through_the_form(app) {
        seed(&app).await;
        let admin = app.signed_in("root").await;
        let r = admin.post_form("/metrics/new", "/metrics/new", &[
            ("key", "finance.cash_runway"), ("name", "Cash runway"), ("unit", "months"),
            ("owners", "priya, tomas"), ("review_cadence_months", "3"), ("tags", "finance, Board"),
            ("description", "Months of cash."), ("data_source", "ledger"),
        ]).await;
        assert_eq!(r.status(), 303);
        assert_eq!(r.headers()["location"], "/metrics/finance.cash_runway?saved=created");
        let (_, html) = admin.get_text("/metrics/finance.cash_runway?saved=created").await;
        assert!(html.contains("The metric was added to the register."));
        let m = cutpoints::store::metrics::get(&app.store, "finance.cash_runway").await.unwrap();
        assert_eq!(m.owners.iter().map(|o| o.username.as_str()).collect::<Vec<_>>(), ["priya", "tomas"]);
        assert_eq!(m.tags, ["finance", "board"]);
        assert_eq!(m.review_cadence_months, Some(3));
        // The key is taken now: shown beside the key field.
        let r = admin.post_form("/metrics/new", "/metrics/new", &[("key", "finance.cash_runway"), ("name", "Again")]).await;
        assert_eq!(r.status(), 409);
        assert!(r.text().await.unwrap().contains("id=\"key-error\">a metric with key"));
    }

    async fn non_admins_cannot_add_metrics(app) {
        seed(&app).await;
        let b = app.signed_in("tomas").await;
        assert_eq!(b.get("/metrics/new").await.status(), 403);
        let r = b.post_form("/metrics", "/metrics/new", &[("key", "x.y"), ("name", "X")]).await;
        assert_eq!(r.status(), 403);
        assert_eq!(cutpoints::store::metrics::count(&app.store).await.unwrap(), 3);
    }

    async fn owners_edit_details_but_not_ownership(app) {
        seed(&app).await;
        let b = app.signed_in("tomas").await;
        let (_, page) = b.get_text("/metrics/repairs.turnaround").await;
        assert!(page.contains("Edit details"));
        let (status, form) = b.get_text("/metrics/repairs.turnaround/edit").await;
        assert_eq!(status, 200);
        assert!(!form.contains("name=\"owners\""), "owners are for admins to change");
        let r = b.post_form("/metrics/repairs.turnaround/edit", "/metrics/repairs.turnaround/edit", &[
            ("name", "Repair turnaround (median)"), ("unit", "hours"), ("description", "Median."),
            ("data_source", ""), ("review_cadence_months", ""), ("tags", "fleet"),
            ("owners", "priya"),
        ]).await;
        assert_eq!(r.status(), 303);
        let m = cutpoints::store::metrics::get(&app.store, "repairs.turnaround").await.unwrap();
        assert_eq!(m.name, "Repair turnaround (median)");
        assert_eq!(m.review_cadence_months, None);
        assert_eq!(m.owners[0].username, "tomas", "the owners field was ignored");
        let r = b.post_form("/metrics/repairs.turnaround/edit", "/metrics/repairs.turnaround/edit", &[
            ("name", ""), ("review_cadence_months", "200"),
        ]).await;
        assert_eq!(r.status(), 400);
        let html = r.text().await.unwrap();
        assert!(html.contains("name must not be empty"));
        assert!(html.contains("from 1 to 120"));
        // Someone who does not own it cannot edit it.
        let p = app.signed_in("priya").await;
        assert_eq!(p.get("/metrics/repairs.turnaround/edit").await.status(), 403);
    }

    async fn every_page_carries_the_safety_note_and_no_script(app) {
        seed(&app).await;
        let b = app.signed_in("root").await;
        for path in ["/metrics", "/metrics/repairs.turnaround", "/metrics/new", "/admin/users", "/admin/tokens", "/no/such/page"] {
            let (_, html) = b.get_text(path).await;
            assert!(html.contains("do not replace regulatory limits"), "{path}");
            assert!(html.contains("defer to local"), "{path}");
            assert!(!html.contains("<script"), "{path}");
        }
        let (_, html) = Browser::new(&app).get_text("/signin").await;
        assert!(html.contains("do not replace regulatory limits"));
    }
}
