//! When the managers' digest is due: a daily or weekly slot in UTC. Pure.

use std::str::FromStr;

use chrono::{DateTime, Datelike, Duration, NaiveTime, Utc, Weekday};
use serde::Deserialize;

/// When digests go out, in UTC: `"daily HH:MM"` or `"weekly DAY HH:MM"` (DAY as
/// mon, tue, ... or the full English name).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(try_from = "String")]
pub enum DigestSchedule {
    Daily { at: NaiveTime },
    Weekly { day: Weekday, at: NaiveTime },
}

impl FromStr for DigestSchedule {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let parts: Vec<&str> = s.split_whitespace().collect();
        let time = |t: &str| {
            NaiveTime::parse_from_str(t, "%H:%M")
                .map_err(|_| format!("digest time {t:?}: expected HH:MM"))
        };
        match parts.as_slice() {
            ["daily", t] => Ok(DigestSchedule::Daily { at: time(t)? }),
            ["weekly", d, t] => Ok(DigestSchedule::Weekly {
                day: d
                    .parse::<Weekday>()
                    .map_err(|_| format!("digest day {d:?}: expected mon..sun"))?,
                at: time(t)?,
            }),
            _ => Err(format!(
                "digest schedule {s:?}: expected \"daily HH:MM\" or \"weekly DAY HH:MM\""
            )),
        }
    }
}

impl TryFrom<String> for DigestSchedule {
    type Error = String;
    fn try_from(s: String) -> Result<Self, Self::Error> {
        s.parse()
    }
}

/// First scheduled time strictly after `t` (or at `t` when `inclusive`).
fn slot_after(t: DateTime<Utc>, schedule: &DigestSchedule, inclusive: bool) -> DateTime<Utc> {
    let (at, step, first_offset) = match *schedule {
        DigestSchedule::Daily { at } => (at, 1, 0),
        DigestSchedule::Weekly { day, at } => {
            let ahead = (7 + day.num_days_from_monday() - t.weekday().num_days_from_monday()) % 7;
            (at, 7, i64::from(ahead))
        }
    };
    // Checked arithmetic: at the ends of the calendar the answer is `t` itself (due now)
    // rather than a panic.
    let Some(mut slot) = t
        .date_naive()
        .checked_add_signed(Duration::days(first_offset))
        .map(|d| d.and_time(at).and_utc())
    else {
        return t;
    };
    while slot < t || (slot == t && !inclusive) {
        match slot.checked_add_signed(Duration::days(step)) {
            Some(next) => slot = next,
            None => return t,
        }
    }
    slot
}

/// When the next digest is due. After a digest at `last`, the next slot after it (which
/// may already be past `now`: then it is due at once, and missed slots are not repeated);
/// with no digest yet, the first slot at or after `now`.
pub fn next_digest_due(
    last: Option<DateTime<Utc>>,
    schedule: &DigestSchedule,
    now: DateTime<Utc>,
) -> DateTime<Utc> {
    match last {
        Some(l) => slot_after(l, schedule, false),
        None => slot_after(now, schedule, true),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(s: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc)
    }

    #[test]
    fn daily_schedule() {
        let d: DigestSchedule = "daily 07:30".parse().unwrap();
        // never sent: first slot at or after now
        assert_eq!(
            next_digest_due(None, &d, t("2026-12-01T06:00:00Z")),
            t("2026-12-01T07:30:00Z")
        );
        assert_eq!(
            next_digest_due(None, &d, t("2026-12-01T07:30:00Z")),
            t("2026-12-01T07:30:00Z")
        );
        assert_eq!(
            next_digest_due(None, &d, t("2026-12-01T08:00:00Z")),
            t("2026-12-02T07:30:00Z")
        );
        // sent at the slot: next day; missed several days: due at once, once
        let last = t("2026-12-01T07:30:00Z");
        assert_eq!(
            next_digest_due(Some(last), &d, t("2026-12-01T09:00:00Z")),
            t("2026-12-02T07:30:00Z")
        );
        assert_eq!(
            next_digest_due(Some(last), &d, t("2026-12-05T09:00:00Z")),
            t("2026-12-02T07:30:00Z")
        );
    }

    #[test]
    fn weekly_schedule() {
        // 2026-12-01 is a Tuesday (proleptic Gregorian calendar).
        let w: DigestSchedule = "weekly mon 06:00".parse().unwrap();
        assert_eq!(
            next_digest_due(None, &w, t("2026-12-01T10:00:00Z")),
            t("2026-12-07T06:00:00Z")
        );
        assert_eq!(
            next_digest_due(
                Some(t("2026-12-07T06:00:00Z")),
                &w,
                t("2026-12-07T06:01:00Z")
            ),
            t("2026-12-14T06:00:00Z")
        );
        let tue: DigestSchedule = "weekly tuesday 12:00".parse().unwrap();
        assert_eq!(
            next_digest_due(None, &tue, t("2026-12-01T10:00:00Z")),
            t("2026-12-01T12:00:00Z")
        );
        // the end of the calendar does not panic
        let _ = next_digest_due(None, &w, DateTime::<Utc>::MAX_UTC);
        let _ = next_digest_due(Some(DateTime::<Utc>::MIN_UTC), &w, DateTime::<Utc>::MAX_UTC);
        assert!("hourly".parse::<DigestSchedule>().is_err());
        assert!("daily 25:00".parse::<DigestSchedule>().is_err());
        assert!("weekly xyz 10:00".parse::<DigestSchedule>().is_err());
    }
}
