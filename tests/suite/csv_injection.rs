//! Every CSV the product writes is safe to open in a spreadsheet. OWASP "CSV Injection": a
//! cell beginning with `=`, `+`, `-`, `@`, tab or carriage return is run as a formula, so such a
//! text cell is written with a single quote in front (OWASP's advice); numbers and times stay
//! as they are. Each file is read back with Python's `csv` module (the reference reader).

use serde_json::{Value, json};

use crate::helpers::python_csv_rows;
use crate::on_both_backends;
use crate::workflow_support::Team;

/// Cells a spreadsheet would run as they are (OWASP CSV Injection).
fn runs_as_formula(cell: &str) -> bool {
    cell.starts_with(['=', '+', '-', '@', '\t', '\r'])
}

/// Hostile metrics: key, name, unit.
const HOSTILE: &[(&str, &str, &str)] = &[
    (
        "hostile.link",
        r#"=HYPERLINK("http://evil.example","click")"#,
        "=2+2",
    ),
    ("hostile.plus", "+1 bikes, honestly", "-%"),
    ("hostile.at", "@SUM(A1:A9)", "'kg"),
    ("hostile.minus", "-2 docks", "@"),
];

/// The text as the CSV writes it: one `'` in front of a formula start or of a quote.
fn neutralised(text: &str) -> String {
    if runs_as_formula(text) || text.starts_with('\'') {
        format!("'{text}")
    } else {
        text.to_string()
    }
}

/// Carries a proposal for `key` to approval: negative cut points, a sign-off, an approval.
async fn agree_on(team: &Team, key: &str, cuts: Value) {
    let body =
        json!({"direction": "higher_is_better", "cuts": cuts, "rationale": "-5 is where we act"});
    let (status, p) = team
        .call(
            "tomas",
            "POST",
            &format!("/api/v1/metrics/{key}/proposals"),
            Some(body),
        )
        .await;
    assert_eq!(status, 201, "{p}");
    let id = p["id"].as_i64().unwrap();
    assert_eq!(team.act("tomas", id, "submit", None).await.0, 200);
    assert_eq!(team.sign("odile", id).await.0, 200);
    let (status, p) = team.approve("hana", id).await;
    assert_eq!(
        (status, p["state"].as_str()),
        (200, Some("approved")),
        "{p}"
    );
}

async fn download(team: &Team, path: &str) -> String {
    let r = team
        .app
        .http
        .get(team.app.url(path))
        .bearer_auth(team.token_of("root"))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200, "{path}");
    r.text().await.unwrap()
}

/// Checks that no cell of the `text` columns would run as a formula.
fn no_formula_in(rows: &[Vec<String>], text_columns: &[usize], what: &str) {
    for row in rows {
        for &c in text_columns {
            assert!(!runs_as_formula(&row[c]), "{what}: {:?} in {row:?}", row[c]);
        }
    }
}

on_both_backends! {
    async fn every_csv_neutralises_formulas_in_text_and_keeps_numbers(app) {
        let team = Team::new(app).await;
        for (key, name, unit) in HOSTILE {
            let (status, m) = team.call("root", "POST", "/api/v1/metrics", Some(json!({
                "key": key, "name": name, "unit": unit, "owners": ["tomas"],
            }))).await;
            assert_eq!(status, 201, "{m}");
            agree_on(&team, key, json!({"critical": -5, "intervene": -1.5, "outperform": 0.25, "stretch": 3})).await;
        }

        // The published set, over HTTP and from the command line (the same bytes).
        let csv = download(&team, "/api/v1/published.csv").await;
        let key_file = team.app.key_file.to_str().unwrap().to_string();
        let out = crate::cli::cutpoints(&["export", "--format", "csv", "--database-url", &team.app.store_url, "--signing-key", &key_file]);
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        assert_eq!(String::from_utf8(out.stdout).unwrap(), csv, "export prints the same CSV");
        let Some(rows) = python_csv_rows(&csv) else { return };
        assert_eq!(rows[0][..6], ["key", "name", "unit", "direction", "critical", "intervene"]);
        no_formula_in(&rows[1..], &[0, 1, 2, 3], "published set");
        for (key, name, unit) in HOSTILE {
            let row = rows.iter().find(|r| r[0] == *key).unwrap_or_else(|| panic!("{key} in {rows:?}"));
            assert_eq!(row[1], neutralised(name));
            assert_eq!(row[2], neutralised(unit));
            // Numeric columns stay numbers: the cut points as the API gives them.
            assert_eq!(row[4..8], ["-5", "-1.5", "0.25", "3"]);
            assert_eq!(row[12], "3", "shades");
            assert_eq!(row[13], "1", "version");
        }
        let link = rows.iter().find(|r| r[0] == "hostile.link").unwrap();
        assert_eq!(link[1], r#"'=HYPERLINK("http://evil.example","click")"#);
        assert_eq!(link[2], "'=2+2");

        // The audit export: actor, action and subject are text; the payload is JCS text (an
        // object, so never a formula start); the names inside it stay as they were.
        let csv = download(&team, "/api/v1/audit.csv").await;
        let Some(rows) = python_csv_rows(&csv) else { return };
        assert_eq!(rows[0], ["seq", "at", "actor", "action", "subject", "payload", "prev_hash", "hash"]);
        no_formula_in(&rows[1..], &[2, 3, 4, 5, 6, 7], "audit export");
        let created: Vec<Value> = rows[1..rows.len() - 1].iter()
            .filter(|r| r[3] == "metric.created")
            .map(|r| serde_json::from_str(&r[5]).unwrap())
            .collect();
        for (_, name, _) in HOSTILE {
            assert!(created.iter().any(|p| p.to_string().contains(&serde_json::to_string(name).unwrap())), "{name} kept in its payload");
        }

        // The history download: periods and values only, never text; -1.5 stays -1.5, and the
        // file still uploads again unchanged.
        let token = team.token_of("tomas");
        let history = "2026-01-05,-1.5\r\n2026-01-12,-5\r\n2026-01-19,2\r\n";
        let path = "/api/v1/metrics/hostile.link/observations";
        let r = team.app.http.post(team.app.url(path)).bearer_auth(&token)
            .header("content-type", "text/csv").body(history).send().await.unwrap();
        assert!(r.status().is_success(), "{}", r.text().await.unwrap());
        let csv = download(&team, &format!("{path}.csv")).await;
        let Some(rows) = python_csv_rows(&csv) else { return };
        let values: Vec<&str> = rows[1..].iter().map(|r| r[1].as_str()).collect();
        assert_eq!(values, ["-1.5", "-5", "2"]);
        assert!(rows[1][0].starts_with("2026-01-05T00:00:00"), "times stay as they are");
        let r = team.app.http.post(team.app.url(&format!("{path}?mode=replace"))).bearer_auth(&token)
            .header("content-type", "text/csv").body(csv.clone()).send().await.unwrap();
        assert!(r.status().is_success(), "{}", r.text().await.unwrap());
        assert_eq!(download(&team, &format!("{path}.csv")).await, csv);
    }
}
