//! Length limits on free text (DESIGN.md), counted in characters.

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum TextError {
    #[error("{field} must not be empty")]
    Empty { field: &'static str },
    #[error("{field} must be at least {min} characters")]
    TooShort { field: &'static str, min: usize },
    #[error("{field} is {got} characters long; at most {max} are allowed")]
    TooLong {
        field: &'static str,
        max: usize,
        got: usize,
    },
    #[error("{field} must not contain control characters")]
    Control { field: &'static str },
}

pub const NAME_MAX: usize = 200;
pub const DESCRIPTION_MAX: usize = 10_000;
pub const DATA_SOURCE_MAX: usize = 2_000;
pub const RATIONALE_MAX: usize = 20_000;
pub const UNIT_MAX: usize = 40;
pub const TAG_MAX: usize = 40;
pub const TAGS_MAX: usize = 20;
pub const LABEL_MAX: usize = 200;

/// Checks `text` has between `min` and `max` characters; returns it owned.
pub fn bounded(
    field: &'static str,
    text: &str,
    min: usize,
    max: usize,
) -> Result<String, TextError> {
    let n = text.chars().count();
    if n == 0 && min > 0 {
        return Err(TextError::Empty { field });
    }
    if n < min {
        return Err(TextError::TooShort { field, min });
    }
    if n > max {
        return Err(TextError::TooLong { field, max, got: n });
    }
    Ok(text.to_string())
}

/// A one-line field (name, unit, tag): bounded and free of control characters.
pub fn single_line(
    field: &'static str,
    text: &str,
    min: usize,
    max: usize,
) -> Result<String, TextError> {
    let text = text.trim();
    if text.chars().any(char::is_control) {
        return Err(TextError::Control { field });
    }
    bounded(field, text, min, max)
}

/// A multi-line field (description, rationale): bounded; tabs and line breaks allowed, other
/// control characters refused; CRLF is normalised to LF.
pub fn multi_line(
    field: &'static str,
    text: &str,
    min: usize,
    max: usize,
) -> Result<String, TextError> {
    let text = text.replace("\r\n", "\n");
    if text
        .chars()
        .any(|c| c.is_control() && c != '\n' && c != '\t')
    {
        return Err(TextError::Control { field });
    }
    bounded(field, text.trim_end(), min, max)
}
