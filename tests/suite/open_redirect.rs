//! After sign-in (and after revoking a token) the browser is sent only to a path on this site.
//!
//! The reference for where a browser goes is the WHATWG URL Standard's basic URL parser: it
//! removes every ASCII tab and newline, trims C0 controls and spaces at both ends, and for
//! http and https reads `\` as `/`. Python's `urllib.parse.urljoin` resolves the result
//! against the site's base URL (it already removes tabs and newlines and trims leading C0
//! controls and spaces; the script adds the backslash rule), and every answered `Location`
//! must stay on the site's scheme, host and port.

use serde_json::{Value, json};

use crate::helpers::{Browser, PASSWORD, TestApp, python_json, session_count};
use crate::on_both_backends;

/// Hostile `next` values, in their decoded form (what the form field or query parameter
/// holds after percent-decoding).
const HOSTILE: &[&str] = &[
    "/\t/evil.example",
    "/\n/evil.example",
    "/\r/evil.example",
    "/\r\n/evil.example",
    "/\u{0}/evil.example",
    "\u{0}//evil.example",
    "/\u{b}/evil.example",
    "\t//evil.example",
    "//\tevil.example",
    " //evil.example",
    "/ /evil.example",
    "\\",
    "\\\\evil.example",
    "/\\evil.example",
    "\\/evil.example",
    "//evil.example",
    "///evil.example",
    "https://evil.example/",
    "http:evil.example",
    "javascript:alert(1)",
    "/\u{85}/evil.example",
    "/\u{3000}/evil.example",
];

/// Where a browser goes for each `Location`, resolved against `base`: `[url, same_site]`.
fn resolve_like_a_browser(base: &str, locations: &[String]) -> Option<Vec<(String, bool)>> {
    let script = r#"
import json, sys
from urllib.parse import urljoin, urlsplit
data = json.load(sys.stdin)
base = data["base"]
def browser_view(location):
    # WHATWG URL Standard, basic URL parser: trim C0 controls and spaces, remove ASCII tab
    # and newline, and for special schemes read a backslash as a slash.
    s = location.strip("".join(chr(c) for c in range(0x21)))
    for c in "\t\n\r":
        s = s.replace(c, "")
    return urljoin(base, s.replace("\\", "/"))
origin = lambda u: (urlsplit(u).scheme, urlsplit(u).hostname, urlsplit(u).port)
print(json.dumps([[browser_view(l), origin(browser_view(l)) == origin(base)] for l in data["locations"]]))
"#;
    let out = python_json(
        script,
        &json!({"base": base, "locations": locations}),
        "urllib.parse resolves the Location headers",
    )?;
    Some(serde_json::from_value(out).unwrap())
}

fn location(r: &reqwest::Response) -> String {
    // Read as bytes: a tab is a legal header byte but not a `to_str` one.
    String::from_utf8_lossy(r.headers()["location"].as_bytes()).into_owned()
}

async fn post_sign_in(browser: &Browser, next: &str) -> reqwest::Response {
    let csrf = browser.csrf_on("/signin").await;
    browser
        .client
        .post(browser.url("/signin"))
        .form(&[
            ("_csrf", csrf.as_str()),
            ("username", "tomas"),
            ("password", PASSWORD),
            ("next", next),
        ])
        .send()
        .await
        .unwrap()
}

fn signin_url(next: &str) -> String {
    format!(
        "/signin?{}",
        serde_urlencoded::to_string([("next", next)]).unwrap()
    )
}

/// Checks every answered Location with the reference resolver.
fn assert_same_site(app: &TestApp, answered: &[(String, String)]) {
    let locations: Vec<String> = answered.iter().map(|(_, l)| l.clone()).collect();
    let Some(resolved) = resolve_like_a_browser(&app.url("/signin"), &locations) else {
        return;
    };
    for ((what, location), (url, same)) in answered.iter().zip(resolved) {
        assert!(
            same,
            "{what}: Location {location:?} takes a browser to {url}"
        );
    }
}

on_both_backends! {
    async fn sign_in_never_redirects_to_another_site(app) {
        app.add_user("tomas", "owner").await;
        let signed_in = app.signed_in("tomas").await;
        let mut answered: Vec<(String, String)> = Vec::new();
        for next in HOSTILE.iter().copied().chain(["/%09/evil.example"]) {
            // The form: one new session per successful sign-in, and a redirect (RFC 9110
            // §15.4.4: 303 See Other), never an error after the session was made.
            let before = session_count(&app).await;
            let r = post_sign_in(&Browser::new(&app), next).await;
            assert_eq!(r.status(), 303, "POST next={next:?}");
            assert_eq!(session_count(&app).await, before + 1, "POST next={next:?}: exactly one session");
            answered.push((format!("POST next={next:?}"), location(&r)));

            // The sign-in page of a signed-in visitor redirects at once.
            let r = signed_in.get(&signin_url(next)).await;
            assert_eq!(r.status(), 303, "GET next={next:?}");
            answered.push((format!("GET next={next:?}"), location(&r)));

            // A visitor gets the form, which carries only a path on this site.
            let (status, html) = Browser::new(&app).get_text(&signin_url(next)).await;
            assert_eq!(status, 200, "form next={next:?}");
            let field = html.split("name=\"next\" value=\"").nth(1).unwrap();
            let kept = &field[..field.find('"').unwrap()];
            answered.push((format!("form next={next:?}"), kept.to_string()));
            if HOSTILE.contains(&next) {
                assert_eq!(kept, "/metrics", "next={next:?} falls back to the default page");
            }
        }
        // The address of the report, exactly as sent: the query decodes to a tab.
        let r = signed_in.get("/signin?next=/%09/evil.example").await;
        assert_eq!(r.status(), 303);
        assert_eq!(location(&r), "/metrics");
        answered.push(("GET /signin?next=/%09/evil.example".into(), location(&r)));
        assert_same_site(&app, &answered);
    }

    async fn a_path_on_this_site_is_still_followed_after_sign_in(app) {
        app.add_user("tomas", "owner").await;
        let r = post_sign_in(&Browser::new(&app), "/metrics/x?y=1").await;
        assert_eq!(r.status(), 303);
        assert_eq!(location(&r), "/metrics/x?y=1");
        let signed_in = app.signed_in("tomas").await;
        let r = signed_in.get(&signin_url("/metrics/x?y=1")).await;
        assert_eq!(location(&r), "/metrics/x?y=1");
    }

    async fn a_failed_sign_in_makes_no_session_whatever_next_holds(app) {
        app.add_user("tomas", "owner").await;
        for next in HOSTILE {
            let browser = Browser::new(&app);
            let csrf = browser.csrf_on("/signin").await;
            let r = browser.client.post(browser.url("/signin")).form(&[
                ("_csrf", csrf.as_str()), ("username", "tomas"), ("password", "not the password"),
                ("next", next),
            ]).send().await.unwrap();
            assert_eq!(r.status(), 200, "next={next:?}: the form again");
            let html = r.text().await.unwrap();
            assert!(html.contains("name=\"next\" value=\"/metrics\""), "next={next:?}");
            assert_eq!(session_count(&app).await, 0, "next={next:?}");
            // Keep under the throttle: the failures are not what is tested here.
            use cutpoints::store::throttle::{Scope, clear};
            clear(&app.store, Scope::Account, "tomas").await.unwrap();
            clear(&app.store, Scope::Address, "127.0.0.1").await.unwrap();
        }
    }

    async fn revoking_a_token_returns_only_to_an_admin_page(app) {
        app.add_user("root", "admin").await;
        app.add_user("tomas", "owner").await;
        let admin = app.signed_in("root").await;
        let mut answered: Vec<(String, String)> = Vec::new();
        for back in HOSTILE.iter().copied().chain(["/admin/\t/evil.example", "/admin/users/tomas"]) {
            app.token("tomas", cutpoints::domain::access::Scope::Read).await;
            let tokens: Value = json!(cutpoints::store::tokens::list(&app.store, Some("tomas")).await.unwrap());
            let id = tokens.as_array().unwrap().iter().rfind(|t| t["revoked_at"].is_null()).unwrap()["id"].as_i64().unwrap();
            let r = admin.post_form("/admin/tokens", &format!("/admin/tokens/{id}/revoke"), &[("back", back)]).await;
            assert_eq!(r.status(), 303, "back={back:?}");
            let to = location(&r);
            if back == "/admin/users/tomas" {
                assert_eq!(to, back);
            } else {
                assert_eq!(to, "/admin/tokens", "back={back:?}");
            }
            answered.push((format!("back={back:?}"), to));
        }
        assert_same_site(&app, &answered);
    }
}

/// The rule itself, without a server.
mod rule {
    use cutpoints::web::redirect::same_site_path;

    #[test]
    fn paths_on_this_site_are_kept() {
        for path in [
            "/",
            "/metrics",
            "/metrics/x?y=1",
            "/a/b#c",
            "/%09/evil.example",
        ] {
            assert_eq!(same_site_path(path), Some(path), "{path:?}");
        }
    }

    #[test]
    fn anything_a_browser_could_read_as_another_site_is_refused() {
        for path in [
            "",
            "metrics",
            "//evil.example",
            "/\\evil.example",
            "\\\\evil.example",
            "/\t/evil.example",
            "/\n/evil.example",
            "/\r/evil.example",
            "/\u{0}/evil.example",
            "/\u{b}/evil.example",
            "/ /evil.example",
            " //evil.example",
            "/\u{85}/evil.example",
            "/\u{3000}/evil.example",
            "https://evil.example/",
            "javascript:alert(1)",
        ] {
            assert_eq!(same_site_path(path), None, "{path:?}");
        }
    }
}
