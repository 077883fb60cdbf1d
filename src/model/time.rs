//! Timestamps as the notebook stores them: RFC 3339 in UTC with milliseconds, so that text
//! order is time order. One format for every table, message and report.

use chrono::{DateTime, SecondsFormat, Utc};

/// A timestamp that could not be read as RFC 3339.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("not an RFC 3339 timestamp: {0}")]
pub struct BadTimestamp(pub String);

/// `t` as stored: RFC 3339 UTC with milliseconds.
pub fn format_ts(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Millis, true)
}

/// Parse an RFC 3339 timestamp (any offset) to UTC.
pub fn parse_ts(s: &str) -> Result<DateTime<Utc>, BadTimestamp> {
    DateTime::parse_from_rfc3339(s)
        .map(|t| t.with_timezone(&Utc))
        .map_err(|_| BadTimestamp(s.chars().take(64).collect()))
}

/// A batch's start as instruments give it and the records keep it: local plant time,
/// ISO 8601 without a zone.
pub const LOCAL_FORMAT: &str = "%Y-%m-%dT%H:%M:%S";

/// Read a batch start written in [`LOCAL_FORMAT`].
pub fn parse_local(s: &str) -> Option<chrono::NaiveDateTime> {
    chrono::NaiveDateTime::parse_from_str(s, LOCAL_FORMAT).ok()
}

/// The current time, formatted as stored. The shell's one clock: pure code takes times
/// as arguments.
pub fn now_utc() -> String {
    format_ts(Utc::now())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn timestamps_normalise_to_utc_millis() {
        let t = parse_ts("2026-12-01T10:00:00+02:00").unwrap();
        assert_eq!(format_ts(t), "2026-12-01T08:00:00.000Z");
        assert!(parse_ts("yesterday").is_err());
    }

    #[test]
    fn stored_form_round_trips_and_sorts_as_time() {
        let a = parse_ts("2026-01-02T03:04:05.678Z").unwrap();
        assert_eq!(format_ts(a), "2026-01-02T03:04:05.678Z");
        let b = parse_ts("2026-01-02T05:04:05+02:00").unwrap();
        assert!(format_ts(b) < format_ts(a));
        assert!(parse_ts("yesterday").is_err());
    }
}
