//! Metric keys: `[a-z0-9][a-z0-9_.-]{0,63}` (docs/design.md).

use serde::Serialize;

#[derive(Clone, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(transparent)]
pub struct MetricKey(String);

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error(
    "{0:?} is not a metric key: use 1 to 64 characters of a-z, 0-9, '_', '.' or '-', starting with a letter or digit"
)]
pub struct MetricKeyError(pub String);

impl MetricKey {
    pub const MAX_LEN: usize = 64;

    pub fn parse(text: &str) -> Result<MetricKey, MetricKeyError> {
        let bytes = text.as_bytes();
        let first_ok = bytes
            .first()
            .is_some_and(|b| b.is_ascii_lowercase() || b.is_ascii_digit());
        let rest_ok = bytes.iter().skip(1).all(|b| {
            b.is_ascii_lowercase() || b.is_ascii_digit() || matches!(b, b'_' | b'.' | b'-')
        });
        if first_ok && rest_ok && bytes.len() <= Self::MAX_LEN {
            Ok(MetricKey(text.to_string()))
        } else {
            Err(MetricKeyError(text.to_string()))
        }
    }
}

super::validated_text::validated_text!(MetricKey);
