//! People: accounts and how a person is shown, usernames, display names, roles and password
//! rules.

use std::collections::BTreeSet;
use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use super::Timestamp;
use super::text::{self, TextError};

/// A person with an account.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct User {
    #[serde(skip)]
    pub id: i64,
    pub username: Username,
    pub display_name: String,
    pub roles: Roles,
    pub active: bool,
    pub created_at: Timestamp,
}

/// A person as shown beside what they did, with what the rules need to know now.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Person {
    #[serde(skip)]
    pub id: i64,
    pub username: Username,
    pub display_name: String,
    #[serde(skip)]
    pub active: bool,
    #[serde(skip)]
    pub roles: Roles,
}

/// A person as an answer names them: a metric's owner, a proposal's author, a reviewer.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct PersonRef {
    #[schema(value_type = String)]
    pub username: Username,
    pub display_name: String,
}

impl From<&Person> for PersonRef {
    fn from(p: &Person) -> PersonRef {
        PersonRef {
            username: p.username.clone(),
            display_name: p.display_name.clone(),
        }
    }
}

#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(transparent)]
pub struct Username(String);

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error(
    "{0:?} is not a username: use 1 to 64 characters of a-z, 0-9, '_', '.' or '-', starting with a letter or digit"
)]
pub struct UsernameError(pub String);

impl Username {
    pub fn parse(text: &str) -> Result<Username, UsernameError> {
        // Same alphabet as metric keys: safe in URLs, paths and CSV without quoting.
        super::key::MetricKey::parse(text)
            .map(|k| Username(k.as_str().to_string()))
            .map_err(|_| UsernameError(text.to_string()))
    }
}

super::validated_text::validated_text!(Username);

/// A display name: 1 to 200 characters on one line, shown beside every decision a person
/// makes.
pub fn display_name(text: &str) -> Result<String, TextError> {
    text::single_line("display_name", text, 1, 200)
}

/// What a person may do. One person may hold several roles; `owner` marks people who may be
/// named owners of metrics (ownership itself is per metric).
#[derive(
    Clone,
    Copy,
    Debug,
    PartialEq,
    Eq,
    PartialOrd,
    Ord,
    Hash,
    Serialize,
    Deserialize,
    utoipa::ToSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    Admin,
    Owner,
    Reviewer,
    Signatory,
    Auditor,
    Viewer,
}

impl Role {
    pub const ALL: [Role; 6] = [
        Role::Admin,
        Role::Owner,
        Role::Reviewer,
        Role::Signatory,
        Role::Auditor,
        Role::Viewer,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Role::Admin => "admin",
            Role::Owner => "owner",
            Role::Reviewer => "reviewer",
            Role::Signatory => "signatory",
            Role::Auditor => "auditor",
            Role::Viewer => "viewer",
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("unknown role {0:?}: expected admin, owner, reviewer, signatory, auditor or viewer")]
pub struct RoleError(pub String);

impl FromStr for Role {
    type Err = RoleError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Role::ALL
            .into_iter()
            .find(|r| r.as_str() == text::trim(s))
            .ok_or_else(|| RoleError(s.to_string()))
    }
}

/// A set of roles, stored as a comma-separated list in a fixed order.
#[derive(Clone, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Roles(BTreeSet<Role>);

impl Roles {
    pub fn new(roles: impl IntoIterator<Item = Role>) -> Roles {
        Roles(roles.into_iter().collect())
    }

    /// Parses `admin,reviewer`; blanks are ignored, an unknown name is an error.
    pub fn parse_list(text: &str) -> Result<Roles, RoleError> {
        text.split(',')
            .map(text::trim)
            .filter(|s| !s.is_empty())
            .map(Role::from_str)
            .collect::<Result<BTreeSet<_>, _>>()
            .map(Roles)
    }

    pub fn has(&self, role: Role) -> bool {
        self.0.contains(&role)
    }

    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    pub fn iter(&self) -> impl Iterator<Item = Role> + '_ {
        self.0.iter().copied()
    }

    pub fn to_list(&self) -> String {
        self.iter().map(Role::as_str).collect::<Vec<_>>().join(",")
    }
}

/// A new password: the length rule of OWASP ASVS 4.0.3 §2.1.1 (at least 12 characters) and
/// §2.1.2 (at most 128); any printable character is allowed (§2.1.4: spaces, any language,
/// emoji) and nothing else is imposed (§2.1.9). Control characters are not printable and are
/// refused like in every other text field. A password being checked (sign-in, sign-off) is only
/// ever right or wrong, whatever it holds.
pub fn check_password(password: &str) -> Result<(), TextError> {
    text::no_control("password", password)?;
    let n = password.chars().count();
    if n < 12 {
        Err(TextError::TooShort {
            field: "password",
            min: 12,
        })
    } else if n > 128 {
        Err(TextError::TooLong {
            field: "password",
            max: 128,
            got: n,
        })
    } else {
        Ok(())
    }
}
