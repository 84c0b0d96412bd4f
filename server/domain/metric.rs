//! A metric's descriptive fields and their validation.

use serde::Serialize;

use super::people::Username;
use super::text::{self, TextError};

/// One field that failed validation, with a message fit to show beside it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct FieldProblem {
    pub field: String,
    pub message: String,
}

/// Every problem found in one submission, so a form can show them all at once.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
#[serde(transparent)]
pub struct Problems(pub Vec<FieldProblem>);

impl Problems {
    /// One problem with one field.
    pub fn single(field: impl Into<String>, message: impl Into<String>) -> Problems {
        let mut p = Problems::default();
        p.add(field, message);
        p
    }

    pub fn add(&mut self, field: impl Into<String>, message: impl Into<String>) {
        self.0.push(FieldProblem {
            field: field.into(),
            message: message.into(),
        });
    }

    /// Records the error of `result` (if any) against `field` and returns the value.
    pub fn check<T, E: std::fmt::Display>(
        &mut self,
        field: &str,
        result: Result<T, E>,
    ) -> Option<T> {
        match result {
            Ok(v) => Some(v),
            Err(e) => {
                self.add(field, e.to_string());
                None
            }
        }
    }

    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    pub fn first_message(&self) -> String {
        self.0
            .first()
            .map(|p| p.message.clone())
            .unwrap_or_default()
    }

    pub fn for_field(&self, field: &str) -> Option<&str> {
        self.0
            .iter()
            .find(|p| p.field == field)
            .map(|p| p.message.as_str())
    }
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
