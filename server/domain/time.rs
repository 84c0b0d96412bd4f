//! UTC timestamps in the one format docs/design.md fixes: `YYYY-MM-DDTHH:MM:SS.ffffffZ`.
//!
//! Stored as that fixed-width text on both databases, so that string order is time order and
//! comparisons in SQL work the same on SQLite and PostgreSQL.

use std::fmt;
use std::str::FromStr;

use chrono::{DateTime, NaiveDate, SecondsFormat, SubsecRound, Utc};
use serde::{Deserialize, Deserializer, Serialize, Serializer};

/// A UTC instant truncated to whole microseconds.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Timestamp(DateTime<Utc>);

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error(
    "{0:?} is not a time: expected RFC 3339 such as 2026-03-01T09:30:00Z, or a bare date such as 2026-03-01"
)]
pub struct TimeParseError(pub String);

impl Timestamp {
    pub fn now() -> Timestamp {
        Timestamp::from_datetime(Utc::now())
    }

    pub fn from_datetime(t: DateTime<Utc>) -> Timestamp {
        Timestamp(t.trunc_subsecs(6))
    }

    pub fn as_datetime(&self) -> DateTime<Utc> {
        self.0
    }

    /// Adds a (possibly negative) number of seconds.
    pub fn plus_seconds(&self, seconds: i64) -> Timestamp {
        Timestamp(self.0 + chrono::Duration::seconds(seconds))
    }

    /// Parses any RFC 3339 time (a `+` that arrived as a space in a query string is accepted)
    /// or a bare date, which means 00:00:00Z.
    ///
    /// Only years 0001 to 9999 (in UTC) are times here, so that every stored time has the
    /// same width and text order is time order on every database.
    pub fn parse(text: &str) -> Result<Timestamp, TimeParseError> {
        let trimmed = super::text::trim(text);
        let bad = || TimeParseError(text.to_string());
        // YYYY-MM-DD exactly: chrono's %Y would also take signs and other widths.
        let digits_at = |i: usize| trimmed.as_bytes().get(i).is_some_and(u8::is_ascii_digit);
        let bare = trimmed.len() == 10
            && [0, 1, 2, 3, 5, 6, 8, 9].iter().all(|&i| digits_at(i))
            && trimmed.as_bytes()[4] == b'-'
            && trimmed.as_bytes()[7] == b'-';
        if bare {
            let date = NaiveDate::parse_from_str(trimmed, "%Y-%m-%d").map_err(|_| bad())?;
            let t = date
                .and_hms_opt(0, 0, 0)
                .expect("midnight exists")
                .and_utc();
            return Timestamp(t).in_range().ok_or_else(bad);
        }
        let mut candidate = trimmed.to_string();
        // "2026-03-01T09:30:00 01:00": the '+' of the offset became a space in a query string.
        if let Some(pos) = candidate.rfind(' ').filter(|pos| *pos >= 19) {
            candidate.replace_range(pos..pos + 1, "+");
        }
        DateTime::parse_from_rfc3339(&candidate)
            .ok()
            .and_then(|t| Timestamp::from_datetime(t.with_timezone(&Utc)).in_range())
            .ok_or_else(bad)
    }

    fn in_range(self) -> Option<Timestamp> {
        use chrono::Datelike;
        (1..=9999).contains(&self.0.year()).then_some(self)
    }
}

impl fmt::Display for Timestamp {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0.to_rfc3339_opts(SecondsFormat::Micros, true))
    }
}

impl FromStr for Timestamp {
    type Err = TimeParseError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Timestamp::parse(s)
    }
}

impl Serialize for Timestamp {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        serializer.collect_str(self)
    }
}

/// In the API description: a string in the format above (RFC 3339 `date-time`).
impl utoipa::PartialSchema for Timestamp {
    fn schema() -> utoipa::openapi::RefOr<utoipa::openapi::schema::Schema> {
        use utoipa::openapi::schema::{KnownFormat, ObjectBuilder, SchemaFormat, Type};
        ObjectBuilder::new()
            .schema_type(Type::String)
            .format(Some(SchemaFormat::KnownFormat(KnownFormat::DateTime)))
            .description(Some(
                "A UTC instant, RFC 3339 with microseconds: 2026-03-01T09:30:00.000000Z",
            ))
            .into()
    }
}

impl utoipa::ToSchema for Timestamp {}

impl<'de> Deserialize<'de> for Timestamp {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        let text = String::deserialize(deserializer)?;
        Timestamp::parse(&text).map_err(serde::de::Error::custom)
    }
}
