//! The managers' digest: one message per period that a manager reads in a minute — one
//! line per lot (state, next batch, order-by date, what changed), the open alerts by
//! severity, the lots still pending, times in the plant's zone. Pure.
//!
//! The HTML part is tables with inline styles only (no `<style>` block, no SVG, no
//! external resources), the form most mail clients keep intact (common practice in HTML
//! e-mail).

use std::fmt::Write as _;

use chrono::{DateTime, Utc};
use chrono_tz::Tz;
use sha2::{Digest, Sha256};

use super::compose::MESSAGE_ID_DOMAIN;
use super::compose::{CAUTIONS, ComposedMessage, body_safe, header_safe, html_escape};
use super::rules::{AlertState, ForecastStatus, LotSnapshot, NextBatchVerdict, Severity};
use crate::model::calendar::show_local;
use crate::model::numbers::fixed_or;

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
    /// The plant's time zone: every time in the digest is shown in it.
    pub zone: Tz,
}

/// One lot of the digest: the rules' snapshot and its sign-off state, if any.
#[derive(Debug, Clone, PartialEq)]
pub struct DigestLot {
    pub snap: LotSnapshot,
    /// "reviewed", "approved", ... as the sign-off record stands; None when never signed.
    pub signoff: Option<String>,
}

/// Everything a digest shows.
#[derive(Debug, Clone)]
pub struct DigestInput<'a> {
    pub lots: &'a [DigestLot],
    /// Lots with cycles on record that nobody registered yet.
    pub pending_lots: usize,
    pub changes: &'a [AlertChange],
    pub open: &'a [OpenAlert],
    pub period: &'a DigestPeriod,
    pub recipients: &'a [String],
    /// Lots counted but not listed: no batch since the history cut-off, no open alert and
    /// nothing changed in the period (`None`: every lot is listed).
    pub resting: Option<RestingLots>,
}

/// Lots a digest counts without listing them: history, not news. A decade of a plant's
/// lots in one message is not read in a minute.
#[derive(Debug, Clone, PartialEq)]
pub struct RestingLots {
    pub count: usize,
    /// Their newest batch started before this date (plant time, `YYYY-MM-DD`).
    pub before: String,
}

/// The headline's words for the lots counted but not listed (empty when there are none).
fn resting_words(d: &DigestInput<'_>) -> String {
    match &d.resting {
        Some(r) if r.count > 0 => format!(
            " {} more without a batch since {} and nothing open are not listed \
             (`turnbook lots` shows every lot).",
            r.count, r.before
        ),
        _ => String::new(),
    }
}

/// The file-notice lot name (notices that belong to no lot).
const NO_LOT: &str = "(no lot)";

fn act(v: Option<f64>) -> String {
    fixed_or(v, 2, "–")
}

/// The trend in a few words, with the order-by date when known.
fn forecast_words(s: &LotSnapshot) -> String {
    let Some(f) = &s.forecast else {
        return "no forecast".into();
    };
    let cyc = |v: Option<f64>| fixed_or(v, 1, "?");
    match f.status {
        ForecastStatus::ReachedAlready => "fitted trend at the criterion".into(),
        ForecastStatus::NotReached => "criterion not reached (model)".into(),
        ForecastStatus::NoSignificantTrend => "stable (no significant loss)".into(),
        ForecastStatus::Withheld => "withheld after a step change".into(),
        ForecastStatus::Ahead | ForecastStatus::UnboundedInterval => {
            match f.dates.as_ref().and_then(|d| {
                Some((
                    d.crossing_early.clone().or(d.crossing_date.clone())?,
                    d.crossing_late.clone(),
                ))
            }) {
                Some((e, Some(l))) => format!("criterion {e} to {l}"),
                Some((e, None)) => format!("criterion from {e}"),
                None => format!(
                    "criterion at cycle {} ({} to {})",
                    cyc(f.x),
                    cyc(f.lower),
                    cyc(f.upper)
                ),
            }
        }
    }
}

fn order_by(s: &LotSnapshot) -> Option<String> {
    let d = s.forecast.as_ref().and_then(|f| f.dates.as_ref())?;
    let o = d.order_by.clone()?;
    Some(if d.order_by_passed() {
        format!("{o} (passed)")
    } else {
        o
    })
}

fn next_words(s: &LotSnapshot) -> String {
    match &s.next_batch {
        None => "–".into(),
        Some(n) => format!(
            "{} ({})",
            match n.verdict {
                NextBatchVerdict::Ok => "ok",
                NextBatchVerdict::Marginal => "marginal",
                NextBatchVerdict::Below => "below",
            },
            fixed_or(Some(n.predicted), 2, "?")
        ),
    }
}

fn badge(sev: Option<Severity>) -> (&'static str, &'static str) {
    match sev {
        Some(Severity::Critical) => ("critical", "#c62828"),
        Some(Severity::Warning) => ("warning", "#ef6c00"),
        Some(Severity::Info) => ("info", "#1565c0"),
        None => ("ok", "#2e7d32"),
    }
}

fn local(zone: Tz, ts: &str) -> String {
    crate::model::time::parse_ts(ts)
        .map(|t| show_local(zone, t))
        .unwrap_or_else(|_| ts.to_string())
}

/// Header and data cells of the digest's tables (inline styles only).
const TH: &str = "style=\"text-align:left;padding:4px 8px;border-bottom:2px solid #999;\
                  font-size:13px\"";
const TD: &str = "style=\"padding:4px 8px;border-bottom:1px solid #ddd;font-size:13px;\
                  vertical-align:top\"";

/// The worst open alert of a lot.
fn worst(d: &DigestInput<'_>, lot: &str) -> Option<Severity> {
    d.open
        .iter()
        .filter(|a| a.lot == lot)
        .map(|a| a.severity)
        .max()
}

/// What changed for a lot in the period, in a few words.
fn changed(d: &DigestInput<'_>, lot: &str) -> String {
    let mine: Vec<String> = d
        .changes
        .iter()
        .filter(|c| c.lot == lot)
        .map(|c| {
            let what = c.key.split('|').next().unwrap_or("").replace('-', " ");
            match c.state {
                AlertState::Cleared => format!("{what} cleared"),
                AlertState::Worse | AlertState::Eased => {
                    format!("{what} now {}", c.severity.as_str())
                }
                AlertState::Open => format!("new {} {what}", c.severity.as_str()),
            }
        })
        .collect();
    if mine.is_empty() {
        "no change".into()
    } else {
        mine.join("; ")
    }
}

/// Lots most urgent first: by their worst open alert, then order-by date, then name.
fn urgent_first<'a>(d: &'a DigestInput<'_>) -> Vec<&'a DigestLot> {
    let mut lots: Vec<&DigestLot> = d.lots.iter().collect();
    lots.sort_by(|a, b| {
        worst(d, &b.snap.lot)
            .cmp(&worst(d, &a.snap.lot))
            .then_with(|| match (order_by(&a.snap), order_by(&b.snap)) {
                (Some(x), Some(y)) => x.cmp(&y),
                (Some(_), None) => std::cmp::Ordering::Less,
                (None, Some(_)) => std::cmp::Ordering::Greater,
                (None, None) => std::cmp::Ordering::Equal,
            })
            .then_with(|| a.snap.lot.cmp(&b.snap.lot))
    });
    lots
}

/// One line per lot.
fn lots_section(d: &DigestInput<'_>, text: &mut String, html: &mut String) {
    let (th, td) = (TH, TD);
    // One line per lot.
    text.push_str("Lots (most urgent first):\n");
    let _ = write!(
        html,
        "<table cellpadding=\"0\" cellspacing=\"0\" style=\"border-collapse:collapse;\
         width:100%\"><tr><th {th}>state</th><th {th}>lot</th><th {th}>cycles</th>\
         <th {th}>activity</th><th {th}>next batch</th><th {th}>trend</th>\
         <th {th}>order by</th><th {th}>since last digest</th><th {th}>sign-off</th></tr>"
    );
    for l in urgent_first(d) {
        let s = &l.snap;
        let (word, color) = badge(worst(d, &s.lot));
        let ob = order_by(s).unwrap_or_else(|| "–".into());
        let signoff = l.signoff.clone().unwrap_or_else(|| "none".into());
        let _ = writeln!(
            text,
            "- {} [{word}] {} cycles, activity {}, next batch {}, {}, order by {ob}; {}; \
             sign-off {signoff}",
            body_safe(&s.lot),
            s.cycles_done,
            act(s.latest_activity),
            next_words(s),
            forecast_words(s),
            changed(d, &s.lot)
        );
        let _ = write!(
            html,
            "<tr><td {td}><span style=\"background:{color};color:#fff;padding:1px 6px;\
             border-radius:3px;font-size:12px\">{word}</span></td>\
             <td {td}><b style=\"white-space:nowrap\">{}</b><br>\
             <span style=\"color:#666\">{}</span></td>\
             <td {td}>{}</td><td {td}>{}</td><td {td}>{}</td><td {td}>{}</td>\
             <td {td}><b style=\"white-space:nowrap\">{}</b></td><td {td}>{}</td>\
             <td {td}>{}</td></tr>",
            html_escape(&s.lot),
            html_escape(&s.catalyst),
            s.cycles_done,
            act(s.latest_activity),
            html_escape(&next_words(s)),
            html_escape(&forecast_words(s)),
            html_escape(&ob),
            html_escape(&changed(d, &s.lot)),
            html_escape(&signoff)
        );
    }
    html.push_str("</table>");
}

/// The open alerts by severity, file notices apart.
fn open_section(d: &DigestInput<'_>, text: &mut String, html: &mut String) {
    let (td, zone) = (TD, d.period.zone);
    // Open alerts by severity, file notices apart.
    let _ = write!(
        html,
        "<h3 style=\"font-size:16px;margin:16px 0 4px 0\">Open alerts</h3>"
    );
    text.push_str("\nOpen alerts:\n");
    if d.open.is_empty() {
        text.push_str("  none\n");
        html.push_str("<p style=\"font-size:13px\">none</p>");
    } else {
        html.push_str("<table cellpadding=\"0\" cellspacing=\"0\" style=\"border-collapse:collapse;width:100%\">");
        let mut open: Vec<&OpenAlert> = d.open.iter().collect();
        open.sort_by(|a, b| b.severity.cmp(&a.severity).then(a.since.cmp(&b.since)));
        for a in open {
            let (word, color) = badge(Some(a.severity));
            let what = match a.subject.split_once("] ") {
                Some((tag, rest)) if tag.starts_with('[') => rest,
                _ => a.subject.as_str(),
            };
            let lot = if a.lot == NO_LOT { "file" } else { &a.lot };
            let _ = writeln!(
                text,
                "  [{word}] {} (since {})",
                body_safe(what),
                local(zone, &a.since)
            );
            let _ = write!(
                html,
                "<tr><td {td}><span style=\"color:{color};font-weight:bold\">{word}</span></td>\
                 <td {td}><span style=\"white-space:nowrap\">{}</span></td><td {td}>{}</td>\
                 <td {td}><span style=\"white-space:nowrap\">since {}</span></td></tr>",
                html_escape(lot),
                html_escape(what),
                html_escape(&local(zone, &a.since))
            );
        }
        html.push_str("</table>");
    }
}

/// Compose the digest for managers. Lots are listed most urgent first: by their worst
/// open alert, then by order-by date, then by name.
pub fn compose_digest(d: &DigestInput<'_>) -> ComposedMessage {
    let period = d.period;
    let zone = period.zone;
    let from = crate::model::time::format_ts(period.from);
    let to = crate::model::time::format_ts(period.to);
    let id_hash = hex::encode(Sha256::digest(format!("digest|{from}|{to}").as_bytes()));
    let message_id = format!("<{}.digest@{MESSAGE_ID_DOMAIN}>", &id_hash[..32]);
    let count = |s: Severity| d.open.iter().filter(|a| a.severity == s).count();
    let (crit, warn, info) = (
        count(Severity::Critical),
        count(Severity::Warning),
        count(Severity::Info),
    );
    let day = |t: DateTime<Utc>| t.with_timezone(&zone).format("%Y-%m-%d").to_string();
    let subject = header_safe(
        &format!(
            "Catalyst digest {} to {}: {crit} critical, {warn} warning; {} lots{}",
            day(period.from),
            day(period.to),
            d.lots.len() + d.pending_lots + d.resting.as_ref().map_or(0, |r| r.count),
            if d.pending_lots > 0 {
                format!(" ({} pending)", d.pending_lots)
            } else {
                String::new()
            }
        ),
        200,
    );
    let mut text = String::new();
    let mut html = String::from(
        "<!DOCTYPE html><html><body style=\"margin:0;padding:16px;background:#f5f5f5;\
         font-family:Arial,Helvetica,sans-serif;color:#222\">\
         <table role=\"presentation\" width=\"100%\" cellpadding=\"0\" cellspacing=\"0\" \
         style=\"max-width:900px;background:#ffffff;border:1px solid #ddd\"><tr>\
         <td style=\"padding:16px\">",
    );
    let _ = writeln!(
        text,
        "Catalyst digest, {} to {}\n",
        show_local(zone, period.from),
        show_local(zone, period.to)
    );
    let _ = write!(
        html,
        "<h2 style=\"margin:0 0 4px 0;font-size:20px\">Catalyst digest</h2>\
         <p style=\"margin:0 0 12px 0;color:#555;font-size:13px\">{} to {}</p>",
        html_escape(&show_local(zone, period.from)),
        html_escape(&show_local(zone, period.to))
    );
    // The headline: open alerts by severity, pending lots, lots only counted.
    let resting = resting_words(d);
    let _ = writeln!(
        text,
        "Open alerts: {crit} critical, {warn} warning, {info} info. Lots: {} registered, {} \
         pending registration.{resting}\n",
        d.lots.len(),
        d.pending_lots
    );
    let _ = write!(
        html,
        "<p style=\"font-size:15px;margin:0 0 12px 0\">Open alerts: \
         <b style=\"color:#c62828\">{crit} critical</b>, \
         <b style=\"color:#ef6c00\">{warn} warning</b>, {info} info. \
         Lots: {} registered, {} pending registration.{}</p>",
        d.lots.len(),
        d.pending_lots,
        html_escape(&resting)
    );
    lots_section(d, &mut text, &mut html);
    open_section(d, &mut text, &mut html);

    if let Some(head) = &period.chain_head {
        let _ = writeln!(
            text,
            "\nAudit chain head: {head}\n(keep this line: `turnbook verify --head {head}` proves \
             later that no entry up to it was removed or altered)"
        );
        let _ = write!(
            html,
            "<p style=\"font-size:12px;color:#555;margin-top:16px\">Audit chain head: \
             <code>{}</code> (keep this line: <code>turnbook verify --head {}</code> proves \
             later that no entry up to it was removed or altered)</p>",
            html_escape(head),
            html_escape(head)
        );
    }
    html.push_str("<p style=\"font-size:12px;color:#555\">");
    text.push_str("\nCautions:\n");
    for c in CAUTIONS {
        let _ = writeln!(text, "- {c}");
        let _ = write!(html, "{}<br>", html_escape(c));
    }
    html.push_str("</p></td></tr></table></body></html>");

    ComposedMessage {
        message_id,
        in_reply_to: None,
        subject,
        text,
        html,
        recipients: d.recipients.to_vec(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(s: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc)
    }

    fn snap(lot: &str, activity: f64) -> LotSnapshot {
        LotSnapshot {
            lot: lot.into(),
            catalyst: "Pd/C".into(),
            metal: "Pd".into(),
            site: "North".into(),
            cycles_done: 4,
            latest_activity: Some(activity),
            criterion: 0.6,
            forecast: None,
            next_batch: None,
            abrupt: None,
            metal_in_product: None,
            metal_loss_fraction: None,
            economic_cycle: None,
            quarantined: vec![],
            evidence: vec![],
        }
    }

    fn open(lot: &str, sev: Severity, subject: &str) -> OpenAlert {
        OpenAlert {
            key: format!("below-criterion|{lot}"),
            rule: "below-criterion".into(),
            lot: lot.into(),
            state: AlertState::Open,
            severity: sev,
            since: "2026-12-01T00:00:00.000Z".into(),
            subject: subject.into(),
        }
    }

    #[test]
    fn digest_lists_lots_most_urgent_first_in_local_time_and_escapes() {
        let lots = vec![
            DigestLot {
                snap: snap("A-CALM", 0.95),
                signoff: Some("approved".into()),
            },
            DigestLot {
                snap: snap("<b>L1</b>", 0.55),
                signoff: None,
            },
        ];
        let alerts = vec![
            open(
                "<b>L1</b>",
                Severity::Critical,
                "[critical] <b>L1</b>: below",
            ),
            open(NO_LOT, Severity::Warning, "[warning] file set aside: x.csv"),
        ];
        let p = DigestPeriod {
            from: t("2026-11-30T07:30:00Z"),
            to: t("2026-12-01T07:30:00Z"),
            chain_head: Some("54:ab12".into()),
            zone: crate::model::calendar::zone("Europe/Berlin").unwrap(),
        };
        let m = compose_digest(&DigestInput {
            lots: &lots,
            pending_lots: 1,
            changes: &[],
            open: &alerts,
            period: &p,
            recipients: &["m@example.org".into()],
            resting: None,
        });
        assert_eq!(
            m.subject,
            "Catalyst digest 2026-11-30 to 2026-12-01: 1 critical, 1 warning; 3 lots (1 pending)"
        );
        assert!(m.text.contains("Audit chain head: 54:ab12"), "{}", m.text);
        // Times in the plant's zone, to the minute.
        assert!(m.text.contains("2026-11-30 08:30 CET"), "{}", m.text);
        assert!(!m.text.contains(".000Z"), "{}", m.text);
        // The lot with the critical alert comes first although its name sorts last.
        let first = m.text.find("<b>L1</b> [critical]").unwrap();
        let second = m.text.find("A-CALM [ok]").unwrap();
        assert!(first < second, "{}", m.text);
        assert!(m.text.contains("sign-off approved"));
        // File notices are not a lot called "(no lot)".
        assert!(!m.text.contains(NO_LOT) && !m.html.contains("(no lot)"));
        assert!(m.html.contains("&lt;b&gt;L1&lt;/b&gt;"));
        assert!(!m.html.contains("<b>L1"));
        assert!(!m.html.contains("<style") && !m.html.contains("<svg"));
        assert_eq!(m.recipients, vec!["m@example.org"]);
        let again = compose_digest(&DigestInput {
            lots: &[],
            pending_lots: 0,
            changes: &[],
            open: &[],
            period: &p,
            recipients: &[],
            resting: None,
        });
        assert_eq!(m.message_id, again.message_id);
        // Lots only counted: in the subject's total and the headline, not as lines.
        let counted = compose_digest(&DigestInput {
            lots: &lots[..1],
            pending_lots: 0,
            changes: &[],
            open: &[],
            period: &p,
            recipients: &[],
            resting: Some(RestingLots {
                count: 988,
                before: "2026-09-02".into(),
            }),
        });
        assert!(
            counted.subject.ends_with("; 989 lots"),
            "{}",
            counted.subject
        );
        assert!(
            counted
                .text
                .contains("988 more without a batch since 2026-09-02 and nothing open"),
            "{}",
            counted.text
        );
        let listed = counted
            .text
            .split("Lots (most urgent first):")
            .nth(1)
            .and_then(|t| t.split("\nOpen alerts:").next())
            .unwrap_or_default();
        assert_eq!(listed.matches("\n- ").count(), 1, "{}", counted.text);
    }
}
