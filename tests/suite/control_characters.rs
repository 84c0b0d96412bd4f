//! One rule for every text field, on both databases: a control character (Unicode general
//! category Cc: C0, DEL and C1; multi-line fields still take line breaks and tabs) is refused
//! with a 400 that names the field (RFC 9110 §15.5.1: a malformed request), never a 500, and
//! nothing is stored. PostgreSQL cannot store NUL in text at all, so a field that reached the
//! database unchecked answered 500 there.

use serde_json::{Value, json};

use crate::cli::cutpoints_with_stdin;
use crate::helpers::{Browser, PASSWORD};
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

/// NUL, BEL, ESC, DEL and a C1 control (NEL, U+0085).
const CONTROLS: [char; 5] = ['\u{0}', '\u{7}', '\u{1b}', '\u{7f}', '\u{85}'];

/// Each control inside a text and at its end (where trimming must not hide it).
fn hostile_texts() -> Vec<String> {
    CONTROLS
        .iter()
        .flat_map(|c| [format!("a{c}b"), format!("ab{c}")])
        .collect()
}

/// A JSON request whose `field` holds the hostile text.
struct ApiCase {
    who: &'static str,
    method: &'static str,
    path: String,
    body: Box<dyn Fn(&str) -> Value>,
    field: &'static str,
}

fn api(
    who: &'static str,
    method: &'static str,
    path: String,
    field: &'static str,
    body: impl Fn(&str) -> Value + 'static,
) -> ApiCase {
    ApiCase {
        who,
        method,
        path,
        body: Box::new(body),
        field,
    }
}

fn api_cases(id: i64, hash: &str) -> Vec<ApiCase> {
    let edit = format!("/api/v1/metrics/{METRIC}");
    let propose = "/api/v1/metrics/spare.metric/proposals";
    let proposal = format!("/api/v1/proposals/{id}");
    let step = |s: &str| format!("/api/v1/proposals/{id}/{s}");
    // A valid body with one field replaced.
    let with = |base: Value, field: &'static str, list: bool| {
        move |t: &str| {
            let mut b = base.clone();
            b[field] = if list { json!(["ok", t]) } else { json!(t) };
            b
        }
    };
    let content = hib(1.0, 2.0, 3.0, 4.0, "because");
    let mut revision = content.clone();
    revision["note"] = json!("a note");
    let new_metric = json!({"key": "new.metric", "name": "New"});
    let review = json!({"verdict": "approve", "revision_hash": hash});
    let mut cases = Vec::new();
    for (field, list) in [
        ("key", false),
        ("name", false),
        ("description", false),
        ("unit", false),
        ("data_source", false),
        ("tags", true),
        ("owners", true),
    ] {
        cases.push(api(
            "root",
            "POST",
            "/api/v1/metrics".into(),
            field,
            with(new_metric.clone(), field, list),
        ));
        if field != "key" {
            cases.push(api(
                "root",
                "PATCH",
                edit.clone(),
                field,
                with(json!({}), field, list),
            ));
        }
    }
    for field in ["unit", "rationale", "direction", "effective_from"] {
        cases.push(api(
            "tomas",
            "POST",
            propose.into(),
            field,
            with(content.clone(), field, false),
        ));
    }
    for field in ["note", "rationale", "base_revision_hash"] {
        cases.push(api(
            "tomas",
            "PUT",
            proposal.clone(),
            field,
            with(revision.clone(), field, false),
        ));
    }
    cases.extend([
        api("tomas", "POST", propose.into(), "cuts", move |t| {
            let mut b = hib(1.0, 2.0, 3.0, 4.0, "because");
            b["cuts"] = json!({t: 1});
            b
        }),
        api(
            "hana",
            "POST",
            step("comments"),
            "body",
            with(json!({}), "body", false),
        ),
        api(
            "hana",
            "POST",
            step("comments"),
            "cut",
            with(json!({"body": "fine"}), "cut", false),
        ),
        api(
            "hana",
            "POST",
            step("reviews"),
            "comment",
            with(review.clone(), "comment", false),
        ),
        api(
            "hana",
            "POST",
            step("reviews"),
            "revision_hash",
            with(review.clone(), "revision_hash", false),
        ),
        api(
            "hana",
            "POST",
            step("reviews"),
            "verdict",
            with(review, "verdict", false),
        ),
        api(
            "odile",
            "POST",
            step("signoff"),
            "revision_hash",
            with(json!({"password": PASSWORD}), "revision_hash", false),
        ),
        api(
            "hana",
            "POST",
            step("reject"),
            "reason",
            with(json!({}), "reason", false),
        ),
        api(
            "tomas",
            "POST",
            step("withdraw"),
            "reason",
            with(json!({}), "reason", false),
        ),
        api(
            "wren",
            "POST",
            "/api/v1/classify".into(),
            "direction",
            with(json!({"cuts": {}, "values": [1]}), "direction", false),
        ),
        api(
            "wren",
            "POST",
            "/api/v1/classify".into(),
            "cuts",
            |t| json!({"direction": "higher_is_better", "cuts": {t: 1}, "values": [1]}),
        ),
        api(
            "wren",
            "POST",
            "/api/v1/evaluate".into(),
            "as_of",
            with(json!({"values": []}), "as_of", false),
        ),
    ]);
    cases
}

/// Query parameters, each a text field of its endpoint.
const QUERIES: &[(&str, &str)] = &[
    ("/api/v1/audit", "actor"),
    ("/api/v1/audit", "action"),
    ("/api/v1/audit", "metric"),
    ("/api/v1/audit", "from"),
    ("/api/v1/audit.csv", "actor"),
    ("/api/v1/audit/as-of", "metric"),
    ("/api/v1/audit/verify", "known_head"),
    ("/api/v1/metrics", "q"),
    ("/api/v1/metrics", "tag"),
    ("/api/v1/metrics", "owner"),
    ("/api/v1/published", "as_of"),
    ("/api/v1/published.csv", "known_at"),
    (
        "/api/v1/metrics/docks.peak_availability/observations",
        "from",
    ),
];

fn field_named(body: &Value, field: &str) -> bool {
    body["error"]["fields"].as_array().is_some_and(|fields| {
        fields.iter().any(|f| {
            f["field"].as_str().is_some_and(|n| {
                n == field
                    || n.starts_with(&format!("{field}["))
                    || n.starts_with(&format!("{field}."))
            })
        })
    })
}

const CONTROL: &str = "must not contain control characters";

/// Forms, each posted with one field holding the hostile text: who posts it, the page that
/// carries the form (for its CSRF token), the action, the field, and what the 400 page says
/// about it. `ID` stands for the proposal in review.
const PAGE_CASES: &[(&str, &str, &str, &str, &str)] = &[
    ("root", "/metrics/new", "/metrics/new", "name", CONTROL),
    (
        "root",
        "/metrics/new",
        "/metrics/new",
        "description",
        CONTROL,
    ),
    ("root", "/metrics/new", "/metrics/new", "unit", CONTROL),
    (
        "root",
        "/metrics/new",
        "/metrics/new",
        "data_source",
        CONTROL,
    ),
    (
        "root",
        "/metrics/new",
        "/metrics/new",
        "key",
        "is not a metric key",
    ),
    (
        "root",
        "/metrics/new",
        "/metrics/new",
        "tags",
        "without commas or control characters",
    ),
    (
        "root",
        "/metrics/new",
        "/metrics/new",
        "owners",
        "is not a username",
    ),
    ("root", EDIT_METRIC, EDIT_METRIC, "name", CONTROL),
    ("root", EDIT_METRIC, EDIT_METRIC, "description", CONTROL),
    ("root", EDIT_METRIC, EDIT_METRIC, "unit", CONTROL),
    ("root", EDIT_METRIC, EDIT_METRIC, "data_source", CONTROL),
    ("tomas", PROPOSE, PROPOSE, "unit", CONTROL),
    ("tomas", PROPOSE, PROPOSE, "rationale", CONTROL),
    (
        "tomas",
        "/proposals/ID/edit",
        "/proposals/ID/edit",
        "unit",
        CONTROL,
    ),
    (
        "tomas",
        "/proposals/ID/edit",
        "/proposals/ID/edit",
        "rationale",
        CONTROL,
    ),
    (
        "tomas",
        "/proposals/ID/edit",
        "/proposals/ID/edit",
        "note",
        CONTROL,
    ),
    (
        "hana",
        "/proposals/ID",
        "/proposals/ID/comments",
        "body",
        CONTROL,
    ),
    (
        "hana",
        "/proposals/ID",
        "/proposals/ID/reviews",
        "comment",
        CONTROL,
    ),
    (
        "hana",
        "/proposals/ID",
        "/proposals/ID/reviews",
        "revision_hash",
        "revision_hash must be",
    ),
    (
        "hana",
        "/proposals/ID",
        "/proposals/ID/reject",
        "reason",
        CONTROL,
    ),
    (
        "tomas",
        "/proposals/ID",
        "/proposals/ID/withdraw",
        "reason",
        CONTROL,
    ),
    (
        "root",
        "/admin/users/new",
        "/admin/users/new",
        "username",
        "is not a username",
    ),
    (
        "root",
        "/admin/users/new",
        "/admin/users/new",
        "display_name",
        CONTROL,
    ),
    (
        "root",
        "/admin/users/new",
        "/admin/users/new",
        "password",
        CONTROL,
    ),
    (
        "root",
        "/admin/users/wren",
        "/admin/users/wren",
        "display_name",
        CONTROL,
    ),
    (
        "root",
        "/admin/users/wren",
        "/admin/users/wren/password",
        "password",
        CONTROL,
    ),
    (
        "root",
        "/admin/tokens",
        "/admin/tokens",
        "username",
        "is not a username",
    ),
    ("root", "/admin/tokens", "/admin/tokens", "label", CONTROL),
];

const EDIT_METRIC: &str = "/metrics/docks.peak_availability/edit";
const PROPOSE: &str = "/metrics/spare.metric/proposals/new";

/// The valid fields a form is posted with besides the hostile one.
fn other_fields(action: &str, hash: &str) -> Vec<(&'static str, String)> {
    let fields: &[(&str, &str)] = match action {
        "/metrics/new" => &[("key", "page.metric"), ("name", "Page")],
        EDIT_METRIC => &[
            ("name", "Peak dock availability"),
            ("unit", "%"),
            ("owners", "tomas, ownsig"),
        ],
        PROPOSE | "/proposals/ID/edit" => &[
            ("direction", "higher_is_better"),
            ("critical", "1"),
            ("intervene", "2"),
            ("outperform", "3"),
            ("stretch", "4"),
            ("unit", "%"),
            ("rationale", "because"),
            ("note", "a note"),
            ("base_revision_hash", "HASH"),
        ],
        "/proposals/ID/reviews" => &[("verdict", "approve"), ("revision_hash", "HASH")],
        "/admin/users/new" => &[
            ("username", "page.person"),
            ("display_name", "Page Person"),
            ("role", "viewer"),
            ("password", PASSWORD),
        ],
        "/admin/users/wren" => &[("role", "viewer")],
        "/admin/tokens" => &[("scope", "read"), ("username", "wren"), ("label", "ok")],
        _ => &[],
    };
    fields
        .iter()
        .map(|(k, v)| (*k, v.replace("HASH", hash)))
        .collect()
}

/// A metric with no open proposal (for proposing) and a proposal in review on the team's
/// metric: its id and latest hash.
async fn setup(team: &Team) -> (i64, String) {
    let (status, body) = team
        .call(
            "root",
            "POST",
            "/api/v1/metrics",
            Some(json!({"key": "spare.metric", "name": "Spare", "owners": ["tomas"]})),
        )
        .await;
    assert_eq!(status, 201, "{body}");
    let (status, p) = team.propose("tomas", hib(1.0, 2.0, 3.0, 4.0, "r")).await;
    assert_eq!(status, 201, "{p}");
    let id = p["id"].as_i64().unwrap();
    assert_eq!(team.act("tomas", id, "submit", None).await.0, 200);
    (id, team.latest_hash(id).await)
}

on_both_backends! {
    async fn every_api_text_field_refuses_control_characters_naming_the_field(app) {
        let team = Team::new(app).await;
        let (id, hash) = setup(&team).await;
        let events = team.app.event_count().await;
        for case in api_cases(id, &hash) {
            for text in hostile_texts() {
                let (status, body) = team.call(case.who, case.method, &case.path, Some((case.body)(&text))).await;
                assert_eq!(status, 400, "{} {} {}={text:?}: {body}", case.method, case.path, case.field);
                assert!(field_named(&body, case.field), "{} {} {}={text:?}: error.fields names it: {body}", case.method, case.path, case.field);
            }
        }
        for (path, param) in QUERIES {
            for text in hostile_texts() {
                let query = serde_urlencoded::to_string([(param, text.as_str())]).unwrap();
                let (status, body) = team.call("root", "GET", &format!("{path}?{query}"), None).await;
                assert_eq!(status, 400, "{path}?{param}={text:?}: {body}");
                assert!(field_named(&body, param), "{path}?{param}={text:?}: {body}");
            }
        }
        // A key in the path is no key at all.
        let (status, body) = team.call("root", "GET", "/api/v1/metrics/a%00b", None).await;
        assert_eq!(status, 400, "{body}");
        assert_eq!(team.app.event_count().await, events, "nothing was stored");
        assert_eq!(team.get(id).await["comments"], json!([]));
    }

    async fn every_form_refuses_control_characters_beside_the_field(app) {
        let team = Team::new(app).await;
        let (id, hash) = setup(&team).await;
        let events = team.app.event_count().await;
        let mut browsers = std::collections::HashMap::new();
        for who in ["root", "tomas", "hana"] {
            browsers.insert(who, team.app.signed_in(who).await);
        }
        for (who, form_page, action, field, says) in PAGE_CASES {
            let (form_page, action_path) = (form_page.replace("ID", &id.to_string()), action.replace("ID", &id.to_string()));
            let mut fields = other_fields(action, &hash);
            fields.retain(|(k, _)| k != field);
            for text in hostile_texts() {
                let mut all: Vec<(&str, &str)> = fields.iter().map(|(k, v)| (*k, v.as_str())).collect();
                all.push((field, text.as_str()));
                if action.ends_with("/password") {
                    all.push(("password_again", text.as_str()));
                }
                let r = browsers[who].post_form(&form_page, &action_path, &all).await;
                let status = r.status().as_u16();
                let html = r.text().await.unwrap();
                assert_eq!(status, 400, "{action_path} {field}={text:?}");
                assert!(html.contains(says), "{action_path} {field}={text:?} says {says:?}");
            }
        }
        // An address naming no person is no person (not a 500 on PostgreSQL).
        let r = browsers["root"].get("/admin/users/a%00b").await;
        assert_eq!(r.status(), 404);
        assert_eq!(team.app.event_count().await, events, "nothing was stored");
    }

    async fn sign_in_and_sign_off_never_fail_on_control_characters(app) {
        let team = Team::new(app).await;
        let (id, hash) = setup(&team).await;
        // A username with a control character is no username: 400 naming it, nothing counted.
        for text in hostile_texts() {
            let r = Browser::new(&team.app).sign_in(&format!("tomas{text}"), PASSWORD).await;
            assert_eq!(r.status(), 400, "{text:?}");
            assert!(r.text().await.unwrap().contains("username must not contain control characters"));
        }
        let events = team.app.event_count().await;
        // A password being checked is only right or wrong: the form again, or a 401.
        for c in CONTROLS {
            let r = Browser::new(&team.app).sign_in("wren", &format!("{PASSWORD}{c}")).await;
            assert_eq!(r.status(), 200, "{c:?}: the form again");
            let (status, body) = team.act("odile", id, "signoff", Some(json!({"revision_hash": hash, "password": format!("x{c}y")}))).await;
            assert_eq!(status, 401, "{c:?}: {body}");
            use cutpoints::store::throttle::{Scope, clear};
            clear(&team.app.store, Scope::Account, "wren").await.unwrap();
            clear(&team.app.store, Scope::Account, "odile").await.unwrap();
        }
        assert_eq!(team.app.event_count().await, events + 2 * CONTROLS.len() as i64, "one failure event each");
    }

    async fn the_command_line_refuses_control_characters_naming_the_field(app) {
        let url = team_url(&app);
        for c in ['\u{7}', '\u{1b}', '\u{7f}', '\u{85}'] {
            let display = format!("Rosa{c}L");
            let out = cutpoints_with_stdin(&["user", "add", "--username", "rosa", "--role", "viewer", "--display-name", &display, "--password-stdin", "--database-url", &url], "a long enough password\n");
            assert_eq!(out.status.code(), Some(1), "{c:?}");
            assert!(String::from_utf8_lossy(&out.stderr).contains("display_name must not contain control characters"), "{c:?}");
        }
        // A password read from standard input may hold a NUL.
        let out = cutpoints_with_stdin(&["user", "add", "--username", "rosa", "--role", "viewer", "--password-stdin", "--database-url", &url], "a long enough\u{0}password\n");
        assert_eq!(out.status.code(), Some(1));
        assert!(String::from_utf8_lossy(&out.stderr).contains("password must not contain control characters"));
        app.add_user("rosa", "viewer").await;
        for c in ['\u{7}', '\u{1b}', '\u{7f}', '\u{85}'] {
            let label = format!("ci{c}");
            let out = cutpoints_with_stdin(&["token", "issue", "--username", "rosa", "--label", &label, "--database-url", &url], "");
            assert_eq!(out.status.code(), Some(1), "{c:?}");
            assert!(String::from_utf8_lossy(&out.stderr).contains("label must not contain control characters"), "{c:?}");
        }
        assert!(cutpoints::store::tokens::list(&app.store, None).await.unwrap().is_empty());
        assert_eq!(cutpoints::store::users::list(&app.store).await.unwrap().len(), 1);
    }
}

fn team_url(app: &crate::helpers::TestApp) -> String {
    app.store_url.clone()
}

/// The rule itself (`domain::text`), without a server.
mod rule {
    use cutpoints::domain::text::{TextError, multi_line, single_line, trim};

    #[test]
    fn control_characters_are_refused_wherever_they_stand() {
        // Unicode general category Cc: C0, DEL, C1.
        for c in [
            '\u{0}', '\u{7}', '\u{1b}', '\u{7f}', '\u{85}', '\u{9f}', '\t', '\n',
        ] {
            for text in [format!("a{c}b"), format!("ab{c}"), format!("{c}ab")] {
                assert_eq!(
                    single_line("name", &text, 1, 10),
                    Err(TextError::Control { field: "name" }),
                    "{text:?}"
                );
            }
        }
    }

    #[test]
    fn multi_line_text_keeps_line_breaks_and_tabs_only() {
        assert_eq!(multi_line("note", "a\r\n\tb\n", 1, 10).unwrap(), "a\n\tb");
        for c in ['\u{0}', '\u{7}', '\u{1b}', '\u{7f}', '\u{85}', '\r'] {
            assert!(
                multi_line("note", &format!("a{c}b"), 1, 10).is_err(),
                "{c:?}"
            );
        }
    }

    #[test]
    fn trimming_removes_spaces_but_not_control_characters() {
        assert_eq!(trim(" \u{a0}x\u{3000} "), "x");
        assert_eq!(trim(" x\u{85}"), "x\u{85}");
        assert_eq!(trim("\tx"), "\tx");
    }
}
