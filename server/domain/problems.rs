//! Validation problems: each field that failed, with a message fit to show beside it, so a
//! form or an API answer can name them all at once.

use serde::Serialize;

/// One field that failed validation, with a message fit to show beside it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct FieldProblem {
    pub field: String,
    pub message: String,
}

/// Every problem found in one submission, so a form can show them all at once.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, utoipa::ToSchema)]
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

    /// Checks `value` with `parse` when it is given, recording the error (if any) against
    /// `field`: for a field that may be left out, as in an edit.
    pub fn check_given<V, T, E: std::fmt::Display>(
        &mut self,
        field: &str,
        value: Option<V>,
        parse: impl FnOnce(V) -> Result<T, E>,
    ) -> Option<T> {
        value.and_then(|v| self.check(field, parse(v)))
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
