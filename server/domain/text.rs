//! Length limits on free text (docs/design.md), counted in characters, and the one rule on control
//! characters for every text field: a control character (Unicode general category Cc: the C0
//! controls, DEL and the C1 controls) is refused wherever it stands; only multi-line fields
//! take line breaks and tabs. Trimming removes spaces, never a control character, so one at
//! either end is refused too rather than silently dropped.

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

/// True when `text` holds a control character (Unicode general category Cc).
pub fn has_control(text: &str) -> bool {
    text.chars().any(char::is_control)
}

/// `text` without the spaces at its ends (Unicode White_Space), leaving any control character
/// in place for the field's rule to refuse.
pub fn trim(text: &str) -> &str {
    text.trim_matches(|c: char| c.is_whitespace() && !c.is_control())
}

/// Refuses a control character anywhere in a one-line text.
pub fn no_control(field: &'static str, text: &str) -> Result<(), TextError> {
    if has_control(text) {
        Err(TextError::Control { field })
    } else {
        Ok(())
    }
}

/// A one-line field (name, unit, tag, label, display name): bounded and free of control
/// characters.
pub fn single_line(
    field: &'static str,
    text: &str,
    min: usize,
    max: usize,
) -> Result<String, TextError> {
    no_control(field, text)?;
    bounded(field, trim(text), min, max)
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
