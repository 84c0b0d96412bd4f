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

/// The one writer every CSV goes through, without a server.
mod writer {
    use cutpoints::domain::Timestamp;
    use cutpoints::domain::csv_out::{Cell, CsvOut, text_cell, text_of_cell};

    #[test]
    fn text_that_a_spreadsheet_would_run_gets_a_quote_in_front() {
        // OWASP "CSV Injection": cells beginning with = + - @ tab or carriage return.
        for (text, written) in [
            ("=2+2", "'=2+2"),
            (
                "=HYPERLINK(\"http://evil.example\",\"click\")",
                "'=HYPERLINK(\"http://evil.example\",\"click\")",
            ),
            ("+1", "'+1"),
            ("-5", "'-5"),
            ("@SUM(A1)", "'@SUM(A1)"),
            ("\tx", "'\tx"),
            ("\rx", "'\rx"),
            ("'already quoted", "''already quoted"),
        ] {
            assert_eq!(text_cell(text), written, "{text:?}");
            assert_eq!(text_of_cell(&text_cell(text)), text, "undone: {text:?}");
        }
    }

    #[test]
    fn other_text_is_written_as_it_is() {
        for text in [
            "",
            "Peak dock availability",
            "%",
            "a=b",
            "1-2",
            " =x",
            "user:tomas",
        ] {
            assert_eq!(text_cell(text), text);
            assert_eq!(text_of_cell(&text_cell(text)), text);
        }
    }

    #[test]
    fn numbers_and_times_are_not_text() {
        let at = Timestamp::parse("2026-03-01T00:00:00Z").unwrap();
        let mut out = CsvOut::new(&["name", "cut", "none", "at"], 0);
        out.row(&[
            Cell::Text("-x"),
            Cell::number(Some(-5.0)),
            Cell::number(None),
            Cell::Time(at),
        ]);
        out.row(&[
            Cell::Text("a,\"b\""),
            Cell::number(Some(-1.5)),
            Cell::Number("3".into()),
            Cell::Time(at),
        ]);
        assert_eq!(
            String::from_utf8(out.finish()).unwrap(),
            "name,cut,none,at\r\n'-x,-5,,2026-03-01T00:00:00.000000Z\r\n\"a,\"\"b\"\"\",-1.5,3,2026-03-01T00:00:00.000000Z\r\n"
        );
    }
}

/// The audit export: a verifier undoes the rule and the chain still verifies.
mod audit_export {
    use serde_json::json;

    use cutpoints::audit::{Entry, Event, chain_hash};
    use cutpoints::domain::Timestamp;
    use cutpoints::domain::csv_out::text_of_cell;
    use cutpoints::ops::audit::{Extract, ExtractSummary};
    use cutpoints::web::api::audit::extract_csv;

    /// A verifier that reads the CSV removes the one quote added to text cells and gets back
    /// the event's own bytes, so the chain still verifies.
    #[test]
    fn text_cells_are_neutralised_and_the_event_can_be_rebuilt() {
        let event = Event {
            seq: 1,
            at: Timestamp::parse("2026-03-01T00:00:00Z").unwrap(),
            actor: "=cmd|' /C calc'!A0".into(),
            action: "+metric.created".into(),
            subject: "@metric:x".into(),
            payload: json!({"name": "=2+2", "cut": -5}),
        };
        let hash = chain_hash(&"0".repeat(64), &event);
        let extract = Extract {
            entries: vec![Entry {
                event: event.clone(),
                prev_hash: "0".repeat(64),
                hash: hash.clone(),
            }],
            summary: ExtractSummary {
                count: 1,
                first_seq: Some(1),
                last_seq: Some(1),
                head_seq: 1,
                head_hash: hash.clone(),
                next_after: None,
            },
        };
        let bytes = extract_csv(&extract);
        let mut reader = csv::Reader::from_reader(bytes.as_slice());
        let row = reader.records().next().unwrap().unwrap();
        assert_eq!(&row[2], "'=cmd|' /C calc'!A0");
        assert_eq!(&row[3], "'+metric.created");
        assert_eq!(&row[4], "'@metric:x");
        assert_eq!(
            &row[5], r#"{"cut":-5,"name":"=2+2"}"#,
            "an object payload is as it was"
        );
        let rebuilt = Event {
            seq: row[0].parse().unwrap(),
            at: Timestamp::parse(&row[1]).unwrap(),
            actor: text_of_cell(&row[2]).into(),
            action: text_of_cell(&row[3]).into(),
            subject: text_of_cell(&row[4]).into(),
            payload: serde_json::from_str(text_of_cell(&row[5])).unwrap(),
        };
        assert_eq!(chain_hash(&row[6], &rebuilt), row[7]);
    }
}
