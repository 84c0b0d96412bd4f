//! A cast of people with write tokens and one metric, for the workflow tests.

use std::collections::HashMap;
use std::sync::Mutex;

use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::helpers::TestApp;

pub const METRIC: &str = "docks.peak_availability";

pub struct Team {
    pub app: TestApp,
    tokens: Mutex<HashMap<String, String>>,
}

/// Who is who: (username, roles).
pub const CAST: &[(&str, &str)] = &[
    ("root", "admin"),
    ("tomas", "owner"),
    ("priya", "owner"),
    ("hana", "reviewer"),
    ("emil", "reviewer"),
    ("kofi", "reviewer"),
    ("odile", "signatory"),
    ("sam", "signatory"),
    ("vera", "reviewer,signatory"),
    ("ownsig", "owner,signatory,reviewer"),
    ("wren", "viewer"),
];

impl Team {
    pub async fn new(app: TestApp) -> Team {
        let mut tokens = HashMap::new();
        for (name, roles) in CAST {
            app.add_user(name, roles).await;
            tokens.insert(name.to_string(), app.token(name, Scope::Write).await);
        }
        let team = Team {
            app,
            tokens: Mutex::new(tokens),
        };
        let (status, body) = team
            .call(
                "root",
                "POST",
                "/api/v1/metrics",
                Some(json!({"key": METRIC, "name": "Peak dock availability", "unit": "%", "owners": ["tomas", "ownsig"]})),
            )
            .await;
        assert_eq!(status, 201, "{body}");
        team
    }

    /// Gives a person added after the cast a write token for [`Team::call`].
    pub async fn register_token(&self, who: &str) {
        let token = self.app.token(who, Scope::Write).await;
        self.tokens.lock().unwrap().insert(who.to_string(), token);
    }

    /// The write token of a person of the cast.
    pub fn token_of(&self, who: &str) -> String {
        self.tokens.lock().unwrap()[who].clone()
    }

    pub async fn call(
        &self,
        who: &str,
        method: &str,
        path: &str,
        body: Option<Value>,
    ) -> (u16, Value) {
        let method = reqwest::Method::from_bytes(method.as_bytes()).unwrap();
        let mut req = self
            .app
            .http
            .request(method, self.app.url(path))
            .bearer_auth(self.tokens.lock().unwrap()[who].clone());
        if let Some(b) = body {
            req = req.json(&b);
        }
        let r = req.send().await.unwrap();
        let status = r.status().as_u16();
        let text = r.text().await.unwrap();
        let value = if text.is_empty() {
            Value::Null
        } else {
            serde_json::from_str(&text).unwrap_or_else(|_| panic!("not JSON: {text}"))
        };
        (status, value)
    }

    /// Proposes cuts for the metric as `who`; returns the proposal.
    pub async fn propose(&self, who: &str, body: Value) -> (u16, Value) {
        self.call(
            who,
            "POST",
            &format!("/api/v1/metrics/{METRIC}/proposals"),
            Some(body),
        )
        .await
    }

    pub async fn get(&self, id: i64) -> Value {
        let (status, body) = self
            .call("wren", "GET", &format!("/api/v1/proposals/{id}"), None)
            .await;
        assert_eq!(status, 200, "{body}");
        body
    }

    pub async fn latest_hash(&self, id: i64) -> String {
        self.get(id).await["latest_revision"]["hash"]
            .as_str()
            .unwrap()
            .to_string()
    }

    pub async fn act(&self, who: &str, id: i64, step: &str, body: Option<Value>) -> (u16, Value) {
        self.call(who, "POST", &format!("/api/v1/proposals/{id}/{step}"), body)
            .await
    }

    pub async fn approve(&self, who: &str, id: i64) -> (u16, Value) {
        let hash = self.latest_hash(id).await;
        self.act(
            who,
            id,
            "reviews",
            Some(json!({"verdict": "approve", "revision_hash": hash})),
        )
        .await
    }

    pub async fn sign(&self, who: &str, id: i64) -> (u16, Value) {
        let hash = self.latest_hash(id).await;
        self.act(
            who,
            id,
            "signoff",
            Some(json!({"revision_hash": hash, "password": crate::helpers::PASSWORD})),
        )
        .await
    }

    /// Proposes, submits, and carries the proposal to approval (with a sign-off where one is
    /// needed); returns its id.
    pub async fn agree(&self, body: Value) -> i64 {
        let (status, p) = self.propose("tomas", body).await;
        assert_eq!(status, 201, "{p}");
        let id = p["id"].as_i64().unwrap();
        let (status, p) = self.act("tomas", id, "submit", None).await;
        assert_eq!(status, 200, "{p}");
        if p["still_needed"]["signoff"] == true {
            let (status, p) = self.sign("odile", id).await;
            assert_eq!(status, 200, "{p}");
        }
        let (status, p) = self.approve("hana", id).await;
        assert_eq!(status, 200, "{p}");
        assert_eq!(p["state"], "approved", "{p}");
        id
    }

    pub async fn event_actions(&self) -> Vec<String> {
        self.app
            .events()
            .await
            .into_iter()
            .map(|e| e.event.action)
            .collect()
    }
}

/// A higher_is_better proposal body.
pub fn hib(critical: f64, intervene: f64, outperform: f64, stretch: f64, rationale: &str) -> Value {
    json!({
        "direction": "higher_is_better",
        "cuts": {"critical": critical, "intervene": intervene, "outperform": outperform, "stretch": stretch},
        "rationale": rationale,
    })
}
