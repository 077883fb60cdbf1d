//! Cycles into dates: a lot's cadence from its batch starts in the plant's time zone, the
//! date of a forecast crossing and the date by which a replacement must be ordered.
//!
//! Batch starts are the instruments' wall-clock times, kept as written (no zone). They are
//! read in the plant's IANA time zone, so elapsed time is exact across a daylight-saving
//! change (a day with a spring-forward change has 23 hours); dates shown to people are
//! local dates in that zone.

use chrono::{DateTime, Duration, LocalResult, NaiveDate, NaiveDateTime, TimeZone, Utc};
use chrono_tz::Tz;
use serde::{Deserialize, Serialize};

/// How many of the newest batch starts set the cadence: recent enough to follow a change
/// of production plan, long enough to average out a weekend (a project choice).
pub const CADENCE_WINDOW: usize = 10;

/// A plant time zone that is not an IANA name.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{0:?} is not an IANA time zone name (for example \"Europe/Berlin\" or \"UTC\")")]
pub struct BadZone(pub String);

/// Read an IANA zone name.
pub fn zone(name: &str) -> Result<Tz, BadZone> {
    name.trim()
        .parse::<Tz>()
        .map_err(|_| BadZone(name.to_string()))
}

/// A wall-clock time in `tz` as an instant. A time that occurs twice (the autumn change)
/// is read as its first occurrence; a time that does not exist (the spring gap) as the
/// instant one hour later, which is what a clock that was not moved yet would have meant.
pub fn instant(tz: Tz, local: NaiveDateTime) -> DateTime<Utc> {
    match tz.from_local_datetime(&local) {
        LocalResult::Single(t) => t.with_timezone(&Utc),
        LocalResult::Ambiguous(a, _) => a.with_timezone(&Utc),
        LocalResult::None => match tz.from_local_datetime(&(local + Duration::hours(1))) {
            LocalResult::Single(t) | LocalResult::Ambiguous(t, _) => t.with_timezone(&Utc),
            LocalResult::None => Utc.from_utc_datetime(&local),
        },
    }
}

/// The local date of an instant.
pub fn local_date(tz: Tz, t: DateTime<Utc>) -> NaiveDate {
    t.with_timezone(&tz).date_naive()
}

/// `t` for people: local time in the plant's zone, to the minute, with the zone's
/// abbreviation ("2026-12-02 15:04 CET").
pub fn show_local(tz: Tz, t: DateTime<Utc>) -> String {
    t.with_timezone(&tz).format("%Y-%m-%d %H:%M %Z").to_string()
}

/// A lot's pace of production.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cadence {
    pub cycles_per_day: f64,
    /// Cycle number and start of the newest batch.
    pub last_cycle: f64,
    pub last_start: DateTime<Utc>,
}

impl Cadence {
    /// From (cycle number, local start) pairs: the newest [`CADENCE_WINDOW`] starts give
    /// cycles per day = (k − 1) / elapsed days. None with fewer than two starts or no
    /// elapsed time.
    pub fn of(tz: Tz, starts: &[(u32, NaiveDateTime)]) -> Option<Cadence> {
        let mut s: Vec<(u32, DateTime<Utc>)> =
            starts.iter().map(|(n, t)| (*n, instant(tz, *t))).collect();
        s.sort_by_key(|(n, _)| *n);
        let recent = &s[s.len().saturating_sub(CADENCE_WINDOW)..];
        let (first, last) = (recent.first()?, recent.last()?);
        let days = (last.1 - first.1).num_seconds() as f64 / 86_400.0;
        let cycles = f64::from(last.0) - f64::from(first.0);
        (recent.len() >= 2 && days > 0.0 && cycles > 0.0).then(|| Cadence {
            cycles_per_day: cycles / days,
            last_cycle: f64::from(last.0),
            last_start: last.1,
        })
    }

    /// When cycle `x` starts at this cadence (x may be fractional; cycles before the
    /// newest are placed at the newest start).
    pub fn when(&self, x: f64) -> Option<DateTime<Utc>> {
        let days = (x - self.last_cycle).max(0.0) / self.cycles_per_day;
        let secs = days * 86_400.0;
        (secs.is_finite() && secs < 1.0e10)
            .then(|| self.last_start + Duration::seconds(secs.round() as i64))
    }
}

/// A forecast crossing in dates. Dates are local (YYYY-MM-DD) in `time_zone`.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct CrossingDates {
    /// The estimated crossing's date.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub crossing_date: Option<String>,
    /// Dates of the interval's early and late ends (None: unbounded on that side).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub crossing_early: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub crossing_late: Option<String>,
    /// The interval's early end (or the estimate when that end is unbounded) less the
    /// procurement and qualification lead time.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub order_by: Option<String>,
    /// Days from the newest batch start to the early end (or the estimate).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub days_left: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cycles_per_day: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lead_days: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub time_zone: Option<String>,
    /// The local date these dates were worked out on; an order-by date before it has
    /// passed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub as_of: Option<String>,
}

impl CrossingDates {
    /// The order-by date lies before the date these dates were worked out on.
    pub fn order_by_passed(&self) -> bool {
        matches!((&self.order_by, &self.as_of), (Some(o), Some(t)) if o < t)
    }
}

/// Dates of a crossing at cycle `x` with interval ends `early`/`late`, and the order-by
/// date `lead_days` before the early end (the estimate when the early end is unbounded).
pub fn crossing_dates(
    tz: Tz,
    cadence: &Cadence,
    x: f64,
    early: Option<f64>,
    late: Option<f64>,
    lead_days: Option<f64>,
) -> Option<CrossingDates> {
    let day = |t: DateTime<Utc>| local_date(tz, t).format("%Y-%m-%d").to_string();
    let at = cadence.when(x)?;
    let early_at = early.and_then(|e| cadence.when(e));
    let first = early_at.unwrap_or(at);
    let order_by = lead_days
        .filter(|d| d.is_finite() && *d >= 0.0)
        .map(|d| first - Duration::seconds((d * 86_400.0).round() as i64));
    Some(CrossingDates {
        crossing_date: Some(day(at)),
        crossing_early: early_at.map(day),
        crossing_late: late.and_then(|l| cadence.when(l)).map(day),
        order_by: order_by.map(day),
        days_left: Some((first - cadence.last_start).num_seconds() as f64 / 86_400.0),
        cycles_per_day: Some(cadence.cycles_per_day),
        lead_days,
        time_zone: Some(tz.name().to_string()),
        as_of: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn at(s: &str) -> NaiveDateTime {
        NaiveDateTime::parse_from_str(s, "%Y-%m-%dT%H:%M:%S").unwrap()
    }

    /// Worked by hand. Europe/Berlin moves from CET (UTC+1) to CEST (UTC+2) at 02:00 on
    /// Sunday 2027-03-28. Batches start at 08:00 local on 26–30 March (cycles 1–5):
    /// 07:00Z on the 26th and 27th, 06:00Z on the 28th–30th, so the five starts span
    /// 4 days − 1 hour = 95 h and the cadence is 4 / (95/24) = 1.010526 cycles per day.
    /// Crossing at cycle 12: 7 cycles ahead = 7 × 95/96 d = 166.25 h after 2027-03-30
    /// 06:00Z = 2027-04-06 04:15Z (06:15 CEST): 2027-04-06. Early end cycle 10: 5 ahead =
    /// 118.75 h = 2027-04-04 04:45Z (06:45 CEST): 2027-04-04. Late end cycle 14.8: 9.8
    /// ahead = 232.75 h = 2027-04-08 22:45Z = 2027-04-09 00:45 CEST: 2027-04-09 (the local
    /// date, one day after the UTC one). Lead time 14 d before the early end: 2027-03-21
    /// 04:45Z, which is 05:45 CET (before the change): order by 2027-03-21. Days left:
    /// 118.75/24 = 4.948.
    #[test]
    fn crossing_and_order_by_dates_across_a_daylight_saving_change() {
        let tz = zone("Europe/Berlin").unwrap();
        let starts: Vec<(u32, NaiveDateTime)> = (26..=30)
            .enumerate()
            .map(|(i, d)| (i as u32 + 1, at(&format!("2027-03-{d}T08:00:00"))))
            .collect();
        let c = Cadence::of(tz, &starts).unwrap();
        assert!((c.cycles_per_day - 4.0 / (95.0 / 24.0)).abs() < 1e-12);
        let d = crossing_dates(tz, &c, 12.0, Some(10.0), Some(14.8), Some(14.0)).unwrap();
        assert_eq!(d.crossing_date.as_deref(), Some("2027-04-06"));
        assert_eq!(d.crossing_early.as_deref(), Some("2027-04-04"));
        assert_eq!(d.crossing_late.as_deref(), Some("2027-04-09"));
        assert_eq!(d.order_by.as_deref(), Some("2027-03-21"));
        assert!((d.days_left.unwrap() - 118.75 / 24.0).abs() < 1e-4);
        assert_eq!(d.time_zone.as_deref(), Some("Europe/Berlin"));
        // The same starts read as UTC: 4 days exactly, one cycle per day.
        let u = Cadence::of(chrono_tz::UTC, &starts).unwrap();
        assert!((u.cycles_per_day - 1.0).abs() < 1e-12);
    }

    #[test]
    fn no_cadence_without_elapsed_time_and_unbounded_ends_stay_open() {
        let tz = chrono_tz::UTC;
        assert!(Cadence::of(tz, &[(1, at("2027-01-01T08:00:00"))]).is_none());
        let same = [
            (1, at("2027-01-01T08:00:00")),
            (2, at("2027-01-01T08:00:00")),
        ];
        assert!(Cadence::of(tz, &same).is_none());
        let c = Cadence::of(
            tz,
            &[
                (1, at("2027-01-01T00:00:00")),
                (3, at("2027-01-02T00:00:00")),
            ],
        )
        .unwrap();
        assert!((c.cycles_per_day - 2.0).abs() < 1e-12);
        let d = crossing_dates(tz, &c, 7.0, None, None, Some(1.0)).unwrap();
        // 4 cycles ahead at 2 a day = 2 days: 2027-01-04; no early end, so the order-by
        // date counts back from the estimate: 2027-01-03.
        assert_eq!(d.crossing_date.as_deref(), Some("2027-01-04"));
        assert_eq!(d.crossing_early, None);
        assert_eq!(d.order_by.as_deref(), Some("2027-01-03"));
        assert!(zone("Mars/Olympus").is_err());
    }

    #[test]
    fn wall_clock_times_in_the_gap_and_the_overlap() {
        let tz = zone("Europe/Berlin").unwrap();
        // 02:30 on 2027-03-28 does not exist: read as 03:30 CEST = 01:30Z.
        assert_eq!(
            instant(tz, at("2027-03-28T02:30:00")).to_rfc3339(),
            "2027-03-28T01:30:00+00:00"
        );
        // 02:30 on 2027-10-31 happens twice: the first (CEST) = 00:30Z.
        assert_eq!(
            instant(tz, at("2027-10-31T02:30:00")).to_rfc3339(),
            "2027-10-31T00:30:00+00:00"
        );
        let t = Utc.with_ymd_and_hms(2026, 12, 2, 14, 4, 0).unwrap();
        assert_eq!(show_local(tz, t), "2026-12-02 15:04 CET");
    }
}
