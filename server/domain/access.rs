//! How people and machines prove who they are: a browser session, and an API token's scope
//! and what is known of it (never its secret).

use serde::Serialize;

use super::{Timestamp, User};

/// A signed-in browser session.
#[derive(Clone, Debug)]
pub struct Session {
    pub id_hash: String,
    pub csrf_token: String,
    pub user: User,
}

/// What a token may do.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Scope {
    /// GET requests only.
    Read,
    /// Everything the token's owner may do.
    Write,
}

impl Scope {
    pub fn as_str(self) -> &'static str {
        match self {
            Scope::Read => "read",
            Scope::Write => "write",
        }
    }

    pub fn parse(text: &str) -> Result<Scope, String> {
        match text {
            "read" => Ok(Scope::Read),
            "write" => Ok(Scope::Write),
            other => Err(format!("unknown scope {other:?}: expected read or write")),
        }
    }
}

#[derive(Clone, Debug, Serialize)]
pub struct TokenInfo {
    pub id: i64,
    pub username: String,
    pub prefix: String,
    pub scope: Scope,
    pub label: String,
    pub created_at: Timestamp,
    pub expires_at: Option<Timestamp>,
    pub revoked_at: Option<Timestamp>,
    pub last_used_at: Option<Timestamp>,
}

impl TokenInfo {
    pub fn is_usable(&self, now: Timestamp) -> bool {
        self.revoked_at.is_none() && self.expires_at.is_none_or(|t| t > now)
    }
}
