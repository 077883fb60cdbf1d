//! Property tests: whatever text an export carries, composed messages stay well formed:
//! one-line ASCII headers, the subject decoding back to the folded text, escaped HTML.

use std::time::SystemTime;

use mail_parser::MessageParser;
use proptest::prelude::*;
use turnbook::alert::{Alert, AlertState, Severity, compose_alert};
use turnbook::alert::{EvidenceRow, RuleId};
use turnbook::alert::{header_safe, html_escape};

fn alert(lot: &str, file: &str) -> Alert {
    Alert {
        key: format!("quarantine|{lot}|{file}"),
        rule: RuleId::Quarantine,
        lot: lot.into(),
        site: "North".into(),
        file: Some(file.into()),
        state: AlertState::Open,
        severity: Severity::Warning,
        subject: format!("Lot {lot}: file quarantined: {file}"),
        action: "Fix the file.".into(),
        evidence: format!("File {file} was quarantined.\nReason: {lot}\n"),
        recipients: vec!["qa@example.org".into()],
        rows: vec![EvidenceRow {
            cycle: 1,
            value: 0.9,
            source_file: file.into(),
            sha256: "00".repeat(32),
        }],
        criterion: 0.5,
        link: None,
    }
}

proptest! {
    #[test]
    fn header_safe_output_has_no_control_characters(s in any::<String>(), max in 0usize..300) {
        let h = header_safe(&s, max);
        let bad = |c: char| c.is_control() || c == '\u{2028}' || c == '\u{2029}';
        prop_assert!(!h.chars().any(bad), "control character in {:?}", h);
        prop_assert!(h.chars().count() <= max + 1);
        prop_assert!(!h.starts_with(' ') && !h.ends_with(' '));
    }

    #[test]
    fn html_escape_leaves_no_markup(s in any::<String>()) {
        let e = html_escape(&s);
        prop_assert!(!e.contains('<') && !e.contains('>') && !e.contains('"') && !e.contains('\''));
    }

    #[test]
    fn any_lot_and_file_name_gives_a_well_formed_message(
        lot in "[\\PC\r\n\t<>&\"]{0,40}",
        file in any::<String>(),
    ) {
        let a = alert(&lot, &file);
        let m = compose_alert(&a, AlertState::Open, "<p1@turnbook.invalid>", None);
        let raw = m
            .to_message("turnbook@example.org", SystemTime::UNIX_EPOCH)
            .map_err(|e| TestCaseError::fail(e.to_string()))?
            .formatted();
        let text = String::from_utf8_lossy(&raw);
        let head = text.split("\r\n\r\n").next().unwrap_or("");
        prop_assert!(head.is_ascii());
        let parsed = MessageParser::default().parse(&raw);
        prop_assert!(parsed.is_some());
        let parsed = parsed.unwrap_or_default();
        prop_assert_eq!(parsed.subject().unwrap_or(""), m.subject.as_str());
        let names: Vec<String> = parsed.headers().iter().map(|h| h.name().to_ascii_lowercase()).collect();
        for n in ["subject", "from", "to", "message-id", "date"] {
            prop_assert_eq!(names.iter().filter(|x| x.as_str() == n).count(), 1, "{}", n);
        }
        let html = parsed.body_html(0).map(|c| c.into_owned()).unwrap_or_default();
        prop_assert!(html.contains(&html_escape(&header_safe(&lot, 300))));
    }
}
