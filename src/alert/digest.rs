//! The managers' digest: one message per period summarising every lot, what changed and
//! what is still open. Pure.

use std::fmt::Write as _;

use chrono::{DateTime, Utc};
use sha2::{Digest, Sha256};

use super::compose::MESSAGE_ID_DOMAIN;
use super::compose::{CAUTIONS, ComposedMessage, body_safe, header_safe, html_escape};
use super::rules::{AlertState, ForecastStatus, LotSnapshot, Severity};
use crate::model::numbers::fixed_or;
use crate::model::time::format_ts;

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
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DigestPeriod {
    pub from: DateTime<Utc>,
    pub to: DateTime<Utc>,
    /// The audit chain's newest event as `SEQ:HASH`, published in the digest so that a
    /// later `verify --head` can prove no newest entry was removed.
    pub chain_head: Option<String>,
}

fn num(v: Option<f64>) -> String {
    fixed_or(v, 3, "-")
}

fn forecast_summary(s: &LotSnapshot) -> String {
    let Some(f) = &s.forecast else {
        return "no forecast".into();
    };
    match f.status {
        ForecastStatus::ReachedAlready => "criterion already reached".into(),
        ForecastStatus::NotReached => "criterion never reached (model)".into(),
        ForecastStatus::Ahead => format!(
            "crossing at cycle {} ({} to {})",
            num(f.x),
            num(f.lower),
            num(f.upper)
        ),
        ForecastStatus::UnboundedInterval => format!("crossing at cycle {} (unbounded)", num(f.x)),
        ForecastStatus::NoSignificantTrend => "no significant loss of activity".into(),
        ForecastStatus::Withheld => "forecast withheld after a step change".into(),
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
    html.push_str("</table>");
    if let Some(head) = &period.chain_head {
        let _ = writeln!(
            text,
            "\nAudit chain head: {head}\n(keep this line: `turnbook verify --head {head}` proves \
             later that no entry up to it was removed or altered)"
        );
        let _ = write!(
            html,
            "<p>Audit chain head: <code>{}</code> (keep this line: <code>turnbook verify \
             --head {}</code> proves later that no entry up to it was removed or altered)</p>",
            html_escape(head),
            html_escape(head)
        );
    }
    html.push_str("<h3>Cautions</h3><ul>");
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
            next_batch: None,
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
            chain_head: Some("54:ab12".into()),
        };
        let m = compose_digest(&[snap], &[], &[open], &p, &["m@example.org".into()]);
        assert!(
            m.text.contains("Audit chain head: 54:ab12")
                && m.text.contains("verify --head 54:ab12"),
            "{}",
            m.text
        );
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
