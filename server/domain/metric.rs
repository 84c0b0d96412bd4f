//! A metric of the register: the entity, its descriptive fields and their validation.

use serde::Serialize;
use serde_json::{Map, Value, json};

use super::people::{PersonRef, Username};
use super::text::{self, TextError};
use super::{MetricKey, Timestamp};

/// A metric of the register, as stored.
#[derive(Clone, Debug, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Metric {
    #[serde(skip)]
    pub id: i64,
    #[schema(value_type = String)]
    pub key: MetricKey,
    pub name: String,
    pub description: String,
    pub unit: String,
    pub owners: Vec<PersonRef>,
    pub data_source: String,
    pub review_cadence_months: Option<i64>,
    pub tags: Vec<String>,
    pub created_at: Timestamp,
    pub updated_at: Timestamp,
}

impl Metric {
    /// The subject of the metric's events: `metric:KEY`.
    pub fn subject(&self) -> String {
        subject(self.key.as_str())
    }

    pub fn is_owner(&self, username: &Username) -> bool {
        self.owners.iter().any(|o| &o.username == username)
    }

    /// The descriptive fields as they appear in an event's before/after.
    pub fn fields_json(&self) -> Map<String, Value> {
        let mut map = Map::new();
        map.insert("name".into(), json!(self.name));
        map.insert("description".into(), json!(self.description));
        map.insert("unit".into(), json!(self.unit));
        map.insert(
            "owners".into(),
            json!(
                self.owners
                    .iter()
                    .map(|o| o.username.as_str())
                    .collect::<Vec<_>>()
            ),
        );
        map.insert("data_source".into(), json!(self.data_source));
        map.insert(
            "review_cadence_months".into(),
            json!(self.review_cadence_months),
        );
        map.insert("tags".into(), json!(self.tags));
        map
    }
}

/// The subject of a metric's events.
pub fn subject(key: &str) -> String {
    format!("metric:{key}")
}

pub const CADENCE_MAX_MONTHS: i64 = 120;

/// The descriptive fields of a metric, validated.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct MetricFields {
    pub name: String,
    pub description: String,
    pub unit: String,
    pub owners: Vec<Username>,
    pub data_source: String,
    pub review_cadence_months: Option<i64>,
    pub tags: Vec<String>,
}

pub fn name(value: &str) -> Result<String, TextError> {
    text::single_line("name", value, 1, text::NAME_MAX)
}

pub fn description(value: &str) -> Result<String, TextError> {
    text::multi_line("description", value, 0, text::DESCRIPTION_MAX)
}

pub fn unit(value: &str) -> Result<String, TextError> {
    text::single_line("unit", value, 0, text::UNIT_MAX)
}

pub fn data_source(value: &str) -> Result<String, TextError> {
    text::multi_line("data_source", value, 0, text::DATA_SOURCE_MAX)
}

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("review_cadence_months must be a whole number from 1 to {CADENCE_MAX_MONTHS}, got {0}")]
pub struct CadenceError(pub i64);

pub fn review_cadence(value: Option<i64>) -> Result<Option<i64>, CadenceError> {
    match value {
        Some(n) if !(1..=CADENCE_MAX_MONTHS).contains(&n) => Err(CadenceError(n)),
        other => Ok(other),
    }
}

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum TagError {
    #[error("at most {max} tags are allowed, got {got}", max = text::TAGS_MAX)]
    TooMany { got: usize },
    #[error("tag {0:?} must be 1 to {max} characters without commas or control characters", max = text::TAG_MAX)]
    Bad(String),
}

/// Tags are trimmed, lower-cased, de-duplicated and kept in the order given.
pub fn tags<S: AsRef<str>>(values: &[S]) -> Result<Vec<String>, TagError> {
    let mut out: Vec<String> = Vec::new();
    for raw in values {
        let tag = text::trim(raw.as_ref()).to_lowercase();
        if tag.contains(',') || text::single_line("tag", &tag, 1, text::TAG_MAX).is_err() {
            return Err(TagError::Bad(raw.as_ref().to_string()));
        }
        if !out.contains(&tag) {
            out.push(tag);
        }
    }
    if out.len() > text::TAGS_MAX {
        return Err(TagError::TooMany { got: out.len() });
    }
    Ok(out)
}

/// Splits a form's comma-separated list, dropping blanks.
pub fn split_list(list: &str) -> Vec<String> {
    list.split(',')
        .map(text::trim)
        .filter(|s| !s.is_empty())
        .map(str::to_string)
        .collect()
}

/// Owners are usernames, de-duplicated in the order given.
pub fn owners<S: AsRef<str>>(values: &[S]) -> Result<Vec<Username>, super::people::UsernameError> {
    let mut out: Vec<Username> = Vec::new();
    for raw in values {
        let u = Username::parse(text::trim(raw.as_ref()))?;
        if !out.contains(&u) {
            out.push(u);
        }
    }
    Ok(out)
}
