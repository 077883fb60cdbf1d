//! Composing alert messages: a plain-text part, an HTML part with a small chart of the
//! evidence, and the cautions every message carries.
//!
//! Export text (lot names, file names, reasons) is hostile until proven otherwise: in
//! headers it is folded to one line without control characters (lettre then encodes
//! non-ASCII as RFC 2047 encoded words), and in HTML it is escaped.
//!
//! The chart is a table of bars drawn with `<div>` widths rather than inline SVG, because
//! several widespread mail clients strip `<svg>` from messages while tables with inline
//! styles survive nearly everywhere (common practice in HTML e-mail).

use std::fmt::Write as _;
use std::time::SystemTime;

use lettre::Message;
use lettre::message::{Mailbox, MultiPart};

use super::AlertError;
use super::rules::{Alert, AlertState, EvidenceRow, RuleId};

/// Domain of our Message-IDs; `.invalid` is reserved (RFC 2606), so it can never clash
/// with a real host's identifiers.
pub const MESSAGE_ID_DOMAIN: &str = "turnbook.invalid";

/// Handling caution for spent catalyst (common practice for precious metals on carbon).
pub const CAUTION_HANDLING: &str = "Spent catalysts can be pyrophoric: keep them wet and handle \
     them per site procedure; local codes and licensed practice prevail.";
/// Forecasts come from fitted models.
pub const CAUTION_ADVISORY: &str =
    "Forecasts are advisory: they come from a fitted model and carry its uncertainty.";
/// Release decisions belong to QA.
pub const CAUTION_RELEASE: &str =
    "Batch release follows QA procedures and local regulations, not this message.";

/// Every caution a message can carry (the report and the digest show them all).
pub const CAUTIONS: [&str; 3] = [CAUTION_HANDLING, CAUTION_ADVISORY, CAUTION_RELEASE];

/// The cautions that fit what a message is about: handling where spent catalyst is to be
/// taken out, the advisory note where a forecast speaks, the release note where a batch's
/// product is in question; none on a file notice.
pub fn cautions_for(rule: RuleId) -> &'static [&'static str] {
    match rule {
        RuleId::ReplacementForecast | RuleId::EconomicPoint => &[CAUTION_ADVISORY],
        RuleId::NextBatch => &[CAUTION_ADVISORY, CAUTION_HANDLING],
        RuleId::BelowCriterion => &[CAUTION_HANDLING],
        RuleId::AbruptLoss => &[CAUTION_RELEASE, CAUTION_HANDLING],
        RuleId::MetalInProduct | RuleId::MetalLoss => &[CAUTION_RELEASE],
        RuleId::Quarantine => &[],
    }
}

/// A message ready to send; stored whole in the outbox so delivery never recomposes.
#[derive(Debug, Clone, PartialEq)]
pub struct ComposedMessage {
    /// `<...@...>` form, stable for the alert key, episode, state and severity.
    pub message_id: String,
    /// Message-ID of the episode's first message, for threading follow-ups.
    pub in_reply_to: Option<String>,
    /// One line, no control characters.
    pub subject: String,
    pub text: String,
    pub html: String,
    pub recipients: Vec<String>,
}

/// Fold text to one header-safe line: control characters (CR, LF, NUL, DEL, C1) and
/// Unicode line separators become spaces, runs of whitespace collapse, and the result is
/// cut to `max_chars` characters.
pub fn header_safe(s: &str, max_chars: usize) -> String {
    let mut out = String::with_capacity(s.len().min(max_chars * 4));
    let mut last_space = true;
    let mut n = 0usize;
    for c in s.chars() {
        let c = if c.is_control() || c == '\u{2028}' || c == '\u{2029}' || c.is_whitespace() {
            ' '
        } else {
            c
        };
        if c == ' ' {
            if last_space {
                continue;
            }
            last_space = true;
        } else {
            last_space = false;
        }
        if n == max_chars {
            out.pop_if_space();
            out.push('…');
            return out;
        }
        out.push(c);
        n += 1;
    }
    out.pop_if_space();
    out
}

trait PopSpace {
    fn pop_if_space(&mut self);
}
impl PopSpace for String {
    fn pop_if_space(&mut self) {
        if self.ends_with(' ') {
            self.pop();
        }
    }
}

/// Text for a plain-text body: line breaks and tabs kept, other control characters
/// (a lone CR, NUL, escape sequences) replaced so nothing can rewrite the terminal or
/// the MIME structure.
pub fn body_safe(s: &str) -> String {
    s.replace("\r\n", "\n")
        .chars()
        .map(|c| {
            if c == '\n' || c == '\t' || !c.is_control() {
                c
            } else {
                ' '
            }
        })
        .collect()
}

/// A name (lot, site, file) folded to one line for a body, so a line break inside it
/// cannot fake a line of the message.
pub fn one_line(s: &str) -> String {
    header_safe(s, 300)
}

/// Escape text for HTML element content and quoted attribute values.
pub fn html_escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 8);
    for c in body_safe(s).chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

fn num(v: f64) -> String {
    crate::model::numbers::fixed_or(Some(v), 4, "n/a")
}

/// Compose the message for one alert in the given state (the outbox decides the state).
pub fn compose_alert(
    alert: &Alert,
    state: AlertState,
    message_id: &str,
    in_reply_to: Option<&str>,
) -> ComposedMessage {
    // A clearing is good news whatever the episode's severity was; say so first.
    let tag = match state {
        AlertState::Open => alert.severity.as_str().to_string(),
        AlertState::Worse => format!("{}, worse", alert.severity.as_str()),
        AlertState::Eased => format!("{}, eased", alert.severity.as_str()),
        AlertState::Cleared => "cleared".to_string(),
    };
    let subject = header_safe(&format!("[{tag}] {}", alert.subject), 200);
    let headline = match state {
        AlertState::Open => "This condition is new.",
        AlertState::Worse => "This condition has become worse since the last message.",
        AlertState::Eased => {
            "This condition still holds, but is less severe than the last message said."
        }
        AlertState::Cleared => "This condition no longer holds; the alert is cleared.",
    };
    let action = match state {
        AlertState::Cleared => "No action needed any more.".to_string(),
        _ => one_line(&alert.action),
    };
    let cautions = match state {
        AlertState::Cleared => &[][..],
        _ => cautions_for(alert.rule),
    };

    let mut text = String::new();
    let _ = writeln!(text, "What to do: {action}\n");
    let _ = writeln!(text, "{}", one_line(&alert.subject));
    let _ = writeln!(text, "{headline}");
    let _ = writeln!(
        text,
        "Lot: {}    Site: {}    Severity: {}\n",
        one_line(&alert.lot),
        one_line(&alert.site),
        alert.severity.as_str()
    );
    text.push_str(&body_safe(&alert.evidence));
    if !alert.rows.is_empty() {
        let _ = writeln!(
            text,
            "\nEvidence (criterion {}):\ncycle  value     source file  SHA-256",
            num(alert.criterion)
        );
        for r in &alert.rows {
            let _ = writeln!(
                text,
                "{:>5}  {:<8}  {}  {}",
                r.cycle,
                num(r.value),
                one_line(&r.source_file),
                one_line(&r.sha256)
            );
        }
    }
    if let Some(link) = &alert.link {
        let _ = writeln!(
            text,
            "\nThe lot's page and printable report: {}",
            one_line(link)
        );
    }
    if !cautions.is_empty() {
        text.push_str("\nCautions:\n");
        for c in cautions {
            let _ = writeln!(text, "- {c}");
        }
    }
    let _ = writeln!(
        text,
        "\nAlert key: {}\nMessage-ID: {message_id}",
        one_line(&alert.key)
    );

    let mut html = String::new();
    html.push_str("<!DOCTYPE html><html><body style=\"font-family:sans-serif\">");
    let _ = write!(
        html,
        "<p style=\"font-size:16px;background:#fff8e1;border-left:4px solid #f9a825;\
         padding:8px\"><b>What to do:</b> {}</p>",
        html_escape(&action)
    );
    let _ = write!(
        html,
        "<h2>{}</h2><p>{}</p><p>Lot <b>{}</b>, site {}, severity {}.</p>",
        html_escape(&one_line(&alert.subject)),
        headline,
        html_escape(&one_line(&alert.lot)),
        html_escape(&one_line(&alert.site)),
        alert.severity.as_str()
    );
    html.push_str("<pre style=\"white-space:pre-wrap\">");
    html.push_str(&html_escape(&alert.evidence));
    html.push_str("</pre>");
    html.push_str(&evidence_chart(&alert.rows, alert.criterion));
    if let Some(link) = &alert.link {
        let _ = write!(
            html,
            "<p><a href=\"{0}\">The lot's page and printable report</a>: {0}</p>",
            html_escape(link)
        );
    }
    if !cautions.is_empty() {
        html.push_str("<h3>Cautions</h3><ul>");
        for c in cautions {
            let _ = write!(html, "<li>{}</li>", html_escape(c));
        }
        html.push_str("</ul>");
    }
    let _ = write!(
        html,
        "<p style=\"color:#666\">Alert key: {}</p></body></html>",
        html_escape(&alert.key)
    );

    ComposedMessage {
        message_id: message_id.to_string(),
        in_reply_to: in_reply_to.map(str::to_string),
        subject,
        text,
        html,
        recipients: alert.recipients.clone(),
    }
}

/// The evidence as a table-bar chart: one row per cycle, bar width proportional to the
/// value, bars below the criterion in red.
pub fn evidence_chart(rows: &[EvidenceRow], criterion: f64) -> String {
    if rows.is_empty() {
        return String::new();
    }
    const WIDTH_PX: f64 = 240.0;
    let max = rows
        .iter()
        .map(|r| r.value)
        .chain(std::iter::once(criterion))
        .filter(|v| v.is_finite() && *v > 0.0)
        .fold(0.0_f64, f64::max);
    let px = |v: f64| -> u32 {
        if max > 0.0 && v.is_finite() && v > 0.0 {
            // bounded to 0..=WIDTH_PX, so the cast cannot overflow
            (v / max * WIDTH_PX).round().clamp(0.0, WIDTH_PX) as u32
        } else {
            0
        }
    };
    let mut h = String::new();
    let _ = write!(
        h,
        "<table style=\"border-collapse:collapse;font-size:13px\" cellpadding=\"3\">\
         <tr><th align=\"right\">cycle</th><th align=\"right\">value</th>\
         <th align=\"left\">(criterion {} at {} px)</th><th align=\"left\">source file</th>\
         <th align=\"left\">SHA-256</th></tr>",
        num(criterion),
        px(criterion)
    );
    for r in rows {
        let below = r.value.is_finite() && r.value < criterion;
        let color = if below { "#c62828" } else { "#2e7d32" };
        let sha_short: String = r.sha256.chars().take(12).collect();
        let _ = write!(
            h,
            "<tr><td align=\"right\">{}</td><td align=\"right\">{}</td>\
             <td><div style=\"background:{color};width:{}px;height:10px\"></div></td>\
             <td>{}</td><td><code title=\"{}\">{}</code></td></tr>",
            r.cycle,
            num(r.value),
            px(r.value),
            html_escape(&r.source_file),
            html_escape(&r.sha256),
            html_escape(&sha_short)
        );
    }
    h.push_str("</table>");
    h
}

fn parse_mailbox(addr: &str) -> Result<Mailbox, AlertError> {
    addr.parse::<Mailbox>().map_err(|e| AlertError::Address {
        addr: header_safe(addr, 120),
        reason: e.to_string(),
    })
}

impl ComposedMessage {
    /// Build the MIME message: multipart/alternative with the text and HTML parts.
    pub fn to_message(&self, from: &str, date: SystemTime) -> Result<Message, AlertError> {
        if self.recipients.is_empty() {
            return Err(AlertError::Build("no recipients".into()));
        }
        let mut b = Message::builder()
            .from(parse_mailbox(from)?)
            .subject(header_safe(&self.subject, 200))
            .date(date)
            .message_id(Some(self.message_id.clone()));
        if let Some(parent) = &self.in_reply_to {
            b = b.in_reply_to(parent.clone()).references(parent.clone());
        }
        for r in &self.recipients {
            b = b.to(parse_mailbox(r)?);
        }
        b.multipart(MultiPart::alternative_plain_html(
            self.text.clone(),
            self.html.clone(),
        ))
        .map_err(|e| AlertError::Build(e.to_string()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::alert::rules::{RuleId, Severity};

    fn alert(lot: &str) -> Alert {
        Alert {
            key: format!("below-criterion|{lot}"),
            rule: RuleId::BelowCriterion,
            lot: lot.into(),
            site: "North".into(),
            file: None,
            state: AlertState::Open,
            severity: Severity::Critical,
            subject: format!("Lot {lot}: activity below replacement criterion"),
            action: "Replace the lot.".into(),
            evidence: "Latest activity 0.5\n".into(),
            recipients: vec!["chem@example.org".into()],
            rows: vec![
                EvidenceRow {
                    cycle: 1,
                    value: 1.0,
                    source_file: "<i>a</i>.csv".into(),
                    sha256: "ab".repeat(32),
                },
                EvidenceRow {
                    cycle: 2,
                    value: 0.5,
                    source_file: "b.csv".into(),
                    sha256: "cd".repeat(32),
                },
            ],
            criterion: 0.6,
            link: None,
        }
    }

    #[test]
    fn header_safe_removes_line_breaks_and_controls() {
        assert_eq!(header_safe("a\r\nBcc: x@y\u{0}z", 100), "a Bcc: x@y z");
        assert_eq!(header_safe("  \u{2028}a\t\tb ", 100), "a b");
        assert_eq!(header_safe("Ωmega Ä", 100), "Ωmega Ä");
        assert_eq!(header_safe("abcdef", 3), "abc…");
    }

    #[test]
    fn html_is_escaped() {
        let m = compose_alert(&alert("<b>L\"1</b>"), AlertState::Open, "<x@y>", None);
        assert!(m.html.contains("&lt;b&gt;L&quot;1&lt;/b&gt;"));
        assert!(!m.html.contains("<b>L"));
        assert!(m.html.contains("&lt;i&gt;a&lt;/i&gt;.csv"));
        // A below-criterion message is about taking spent catalyst out: the handling
        // caution, and only it.
        assert!(m.text.contains(CAUTION_HANDLING));
        assert!(!m.text.contains(CAUTION_ADVISORY));
        assert!(m.html.contains("pyrophoric"));
        assert!(m.text.starts_with("What to do: Replace the lot."));
        // A file notice carries no caution at all; a cleared message none either.
        let mut q = alert("L1");
        q.rule = RuleId::Quarantine;
        let mq = compose_alert(&q, AlertState::Open, "<x@y>", None);
        assert!(CAUTIONS.iter().all(|c| !mq.text.contains(c)));
        let mc = compose_alert(&alert("L1"), AlertState::Cleared, "<x@y>", None);
        assert!(!mc.text.contains("Cautions"));
        assert!(
            mc.text
                .starts_with("What to do: No action needed any more.")
        );
    }

    #[test]
    fn chart_bars_scale_and_color() {
        let a = alert("L1");
        let h = evidence_chart(&a.rows, a.criterion);
        assert!(h.contains("background:#2e7d32;width:240px"));
        assert!(h.contains("background:#c62828;width:120px"));
        assert!(h.contains("criterion 0.6000 at 144 px"));
        assert_eq!(evidence_chart(&[], 0.5), "");
    }

    #[test]
    fn subject_carries_state_and_is_one_line() {
        let m = compose_alert(&alert("L\r\n1"), AlertState::Worse, "<x@y>", Some("<p@y>"));
        assert_eq!(
            m.subject,
            "[critical, worse] Lot L 1: activity below replacement criterion"
        );
        assert!(m.text.contains("become worse"));
        let c = compose_alert(&alert("L1"), AlertState::Cleared, "<x@y>", None);
        assert_eq!(
            c.subject,
            "[cleared] Lot L1: activity below replacement criterion"
        );
    }
}
