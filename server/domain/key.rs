//! Metric keys: `[a-z0-9][a-z0-9_.-]{0,63}` (docs/design.md).

use std::fmt;

use serde::{Deserialize, Deserializer, Serialize};

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

    /// A key read back from the database, which held only parsed keys.
    pub fn from_stored(text: String) -> MetricKey {
        MetricKey(text)
    }

    pub fn as_str(&self) -> &str {
        &self.0
    }
}

impl PartialEq<str> for MetricKey {
    fn eq(&self, other: &str) -> bool {
        self.0 == other
    }
}

impl PartialEq<&str> for MetricKey {
    fn eq(&self, other: &&str) -> bool {
        self.0 == *other
    }
}

impl AsRef<str> for MetricKey {
    fn as_ref(&self) -> &str {
        &self.0
    }
}

impl fmt::Display for MetricKey {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl<'de> Deserialize<'de> for MetricKey {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        let text = String::deserialize(deserializer)?;
        MetricKey::parse(&text).map_err(serde::de::Error::custom)
    }
}
