//! UTC record times as whole microseconds since the Unix epoch.
//!
//! One integer form is hashed and stored; the RFC 3339 text form is only for people.

use chrono::{DateTime, SecondsFormat, TimeZone, Utc};
use serde::{Deserialize, Serialize};

/// A UTC instant, microseconds since 1970-01-01T00:00:00Z.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Timestamp(pub i64);

impl Timestamp {
    /// The instant as a chrono UTC date-time.
    pub fn to_datetime(self) -> DateTime<Utc> {
        Utc.timestamp_micros(self.0)
            .single()
            .unwrap_or(DateTime::<Utc>::MIN_UTC)
    }

    /// Converts a chrono UTC date-time.
    pub fn from_datetime(at: DateTime<Utc>) -> Self {
        Timestamp(at.timestamp_micros())
    }

    /// Parses RFC 3339 text such as `2026-11-03T09:15:00Z`.
    pub fn parse_rfc3339(text: &str) -> Option<Self> {
        DateTime::parse_from_rfc3339(text.trim())
            .ok()
            .map(|t| Self::from_datetime(t.with_timezone(&Utc)))
    }
}

impl std::fmt::Display for Timestamp {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let text = self
            .to_datetime()
            .to_rfc3339_opts(SecondsFormat::AutoSi, true);
        f.write_str(&text)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trips_through_rfc3339_text() {
        let t = Timestamp::parse_rfc3339("2026-11-03T09:15:00.125Z").unwrap();
        assert_eq!(t.to_string(), "2026-11-03T09:15:00.125Z");
        assert_eq!(Timestamp::parse_rfc3339(&t.to_string()), Some(t));
    }
}
