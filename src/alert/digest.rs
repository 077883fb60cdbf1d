//! The managers' digest: one message per period summarising every lot, what changed and
//! what is still open; and the schedule that says when the next one is due. Pure.

use std::fmt::Write as _;
use std::str::FromStr;

use chrono::{DateTime, Datelike, Duration, NaiveTime, Utc, Weekday};
use serde::Deserialize;
use sha2::{Digest, Sha256};

use super::compose::{CAUTIONS, ComposedMessage, body_safe, header_safe, html_escape};
use super::outbox::{MESSAGE_ID_DOMAIN, format_ts};
use super::rules::{AlertState, ForecastStatus, LotSnapshot, Severity};

/// An alert whose condition is still open (from the outbox).
#[derive(Debug, Clone, PartialEq)]
pub struct OpenAlert {
    pub key: String,
    pub rule: String,
    pub lot: String,
    pub state: AlertState,
    pub severity: Severity,
    /// When the condition last changed (RFC 3339).
    pub since: String,
    pub subject: String,
}

/// One alert message queued during the period (from the outbox).
#[derive(Debug, Clone, PartialEq)]
pub struct AlertChange {
    pub at: String,
    pub key: String,
    pub lot: String,
    pub state: AlertState,
    pub severity: Severity,
    pub subject: String,
}

/// The period a digest covers.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct DigestPeriod {
    pub from: DateTime<Utc>,
    pub to: DateTime<Utc>,
}

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

fn num(v: Option<f64>) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.3}"),
        _ => "-".into(),
    }
}

fn forecast_summary(s: &LotSnapshot) -> String {
    let Some(f) = &s.forecast else {
        return "no forecast".into();
    };
    match f.status {
        ForecastStatus::ReachedAlready => "criterion already reached".into(),
        ForecastStatus::NotReached => "criterion never reached (model)".into(),
        ForecastStatus::Crossing => format!(
            "crossing at cycle {} ({} to {})",
            num(f.x),
            num(f.lower),
            num(f.upper)
        ),
        ForecastStatus::Unbounded => format!("crossing at cycle {} (unbounded)", num(f.x)),
    }
}

/// Compose the digest for managers. Lots are listed in the order given.
pub fn compose_digest(
    snapshots: &[LotSnapshot],
    changes_since_last: &[AlertChange],
    open_alerts: &[OpenAlert],
    period: &DigestPeriod,
    recipients: &[String],
) -> ComposedMessage {
    let from = format_ts(period.from);
    let to = format_ts(period.to);
    let id_hash = hex::encode(Sha256::digest(format!("digest|{from}|{to}").as_bytes()));
    let message_id = format!("<{}.digest@{MESSAGE_ID_DOMAIN}>", &id_hash[..32]);
    let subject = header_safe(
        &format!(
            "turnbook digest {} to {}: {} lots, {} open alerts",
            period.from.format("%Y-%m-%d"),
            period.to.format("%Y-%m-%d"),
            snapshots.len(),
            open_alerts.len()
        ),
        200,
    );

    let mut text = String::new();
    let mut html = String::from("<!DOCTYPE html><html><body style=\"font-family:sans-serif\">");
    let _ = writeln!(text, "Digest for {from} to {to}\n");
    let _ = write!(
        html,
        "<h2>Digest for {} to {}</h2>",
        html_escape(&from),
        html_escape(&to)
    );

    let _ = writeln!(text, "Open alerts ({}):", open_alerts.len());
    html.push_str("<h3>Open alerts</h3><ul>");
    if open_alerts.is_empty() {
        text.push_str("  none\n");
        html.push_str("<li>none</li>");
    }
    for a in open_alerts {
        let _ = writeln!(
            text,
            "  [{}] {} (since {})",
            a.severity.as_str(),
            body_safe(&a.subject),
            a.since
        );
        let _ = write!(
            html,
            "<li><b>{}</b> {} (since {})</li>",
            a.severity.as_str(),
            html_escape(&a.subject),
            html_escape(&a.since)
        );
    }
    html.push_str("</ul>");

    let _ = writeln!(
        text,
        "\nChanges in the period ({}):",
        changes_since_last.len()
    );
    html.push_str("<h3>Changes in the period</h3><ul>");
    if changes_since_last.is_empty() {
        text.push_str("  none\n");
        html.push_str("<li>none</li>");
    }
    for c in changes_since_last {
        let _ = writeln!(
            text,
            "  {} {} [{}] {}",
            c.at,
            c.state.as_str(),
            c.severity.as_str(),
            body_safe(&c.subject)
        );
        let _ = write!(
            html,
            "<li>{} {} [{}] {}</li>",
            html_escape(&c.at),
            c.state.as_str(),
            c.severity.as_str(),
            html_escape(&c.subject)
        );
    }
    html.push_str("</ul>");

    text.push_str("\nLots:\nlot | catalyst | site | cycles | activity | criterion | forecast\n");
    html.push_str(
        "<h3>Lots</h3><table cellpadding=\"3\" style=\"border-collapse:collapse\">\
         <tr><th>lot</th><th>catalyst</th><th>site</th><th>cycles</th><th>activity</th>\
         <th>criterion</th><th>forecast</th></tr>",
    );
    for s in snapshots {
        let fc = forecast_summary(s);
        let _ = writeln!(
            text,
            "{} | {} | {} | {} | {} | {} | {}",
            body_safe(&s.lot),
            body_safe(&s.catalyst),
            body_safe(&s.site),
            s.cycles_done,
            num(s.latest_activity),
            num(Some(s.criterion)),
            fc
        );
        let _ = write!(
            html,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td>\
             <td>{}</td></tr>",
            html_escape(&s.lot),
            html_escape(&s.catalyst),
            html_escape(&s.site),
            s.cycles_done,
            num(s.latest_activity),
            num(Some(s.criterion)),
            html_escape(&fc)
        );
    }
    html.push_str("</table><h3>Cautions</h3><ul>");
    text.push_str("\nCautions:\n");
    for c in CAUTIONS {
        let _ = writeln!(text, "- {c}");
        let _ = write!(html, "<li>{}</li>", html_escape(c));
    }
    html.push_str("</ul></body></html>");

    ComposedMessage {
        message_id,
        in_reply_to: None,
        subject,
        text,
        html,
        recipients: recipients.to_vec(),
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

    #[test]
    fn digest_lists_and_escapes() {
        let snap = LotSnapshot {
            lot: "<b>L1</b>".into(),
            catalyst: "Pd/C".into(),
            metal: "Pd".into(),
            site: "North".into(),
            cycles_done: 4,
            latest_activity: Some(0.7),
            criterion: 0.6,
            forecast: None,
            abrupt: None,
            metal_in_product: None,
            metal_loss_fraction: None,
            economic_cycle: None,
            quarantined: vec![],
            evidence: vec![],
        };
        let open = OpenAlert {
            key: "k".into(),
            rule: "below-criterion".into(),
            lot: "L1".into(),
            state: AlertState::Open,
            severity: Severity::Critical,
            since: "2026-12-01T00:00:00.000Z".into(),
            subject: "Lot <b>L1</b>: below".into(),
        };
        let p = DigestPeriod {
            from: t("2026-11-30T07:30:00Z"),
            to: t("2026-12-01T07:30:00Z"),
        };
        let m = compose_digest(&[snap], &[], &[open], &p, &["m@example.org".into()]);
        assert_eq!(
            m.subject,
            "turnbook digest 2026-11-30 to 2026-12-01: 1 lots, 1 open alerts"
        );
        assert!(m.html.contains("&lt;b&gt;L1&lt;/b&gt;"));
        assert!(!m.html.contains("<b>L1"));
        assert!(m.text.contains("[critical] Lot <b>L1</b>: below"));
        assert!(m.text.contains("0.700"));
        assert!(m.text.contains("pyrophoric"));
        assert_eq!(m.recipients, vec!["m@example.org"]);
        let m2 = compose_digest(&[], &[], &[], &p, &[]);
        assert_eq!(m.message_id, m2.message_id);
    }
}
