//! The report's QA parts: where the lot stands with QA (near the top), every sign-off
//! with who signed as whom, when, what, the comment and whether the history changed
//! since, and the notes people wrote.

use std::fmt::Write as _;

use super::escape::escape_html as esc;
use super::model::{LotReport, SignOffLine};
use super::table::simple_table;
use crate::model::signoff::SignOffStatus;

/// "#41, #42 and 3 more": event numbers, the first few named.
fn event_list(seqs: &[i64]) -> String {
    let named: Vec<String> = seqs.iter().take(5).map(|s| format!("#{s}")).collect();
    match seqs.len() {
        0 => String::new(),
        n if n > 5 => format!("{} and {} more", named.join(", "), n - 5),
        _ => named.join(", "),
    }
}

/// "account mferreira, 2026-11-03T09:12:00.000Z", or the time alone when no account
/// was recorded.
fn who_when(m: &crate::model::signoff::SignOffMark) -> String {
    match &m.os_user {
        Some(u) => format!("account {u}, {}", m.at),
        None => m.at.clone(),
    }
}

/// The sign-off state in one sentence, with the action it calls for.
pub(super) fn signoff_state(out: &mut String, r: &LotReport) {
    let s = &r.signoff_state;
    let (class, text) = match (&s.by, s.state) {
        (None, _) => (
            "bad",
            "Not signed off: no QA review of this lot is recorded.".to_string(),
        ),
        (Some(m), SignOffStatus::Stale) => (
            "bad",
            format!(
                "Stale: the newest sign-off ({} as {}, {}) no longer covers the history, \
                 which changed after it. A new review is due.",
                esc(&m.meaning),
                esc(m.signer_or_unnamed()),
                esc(&m.at)
            ),
        ),
        (Some(m), SignOffStatus::Reviewed) => (
            "warn",
            format!(
                "Reviewed as {} ({}), covering the history as it stands; approval by a \
                 second signer is due.",
                esc(m.signer_or_unnamed()),
                esc(&who_when(m))
            ),
        ),
        (Some(m), st) => (
            if st == SignOffStatus::Approved {
                "ok"
            } else {
                "bad"
            },
            format!(
                "{} as {} ({}), covering the history as it stands.",
                if st == SignOffStatus::Approved {
                    "Approved"
                } else {
                    "Rejected"
                },
                esc(m.signer_or_unnamed()),
                esc(&who_when(m))
            ),
        ),
    };
    let look = if class == "warn" {
        "style=\"color:var(--warn);font-weight:600\"".to_string()
    } else {
        format!("class=\"{class}\"")
    };
    let _ = writeln!(
        out,
        "<section id=\"signoff-state\">\n<h2>QA sign-off</h2>\n<p style=\"border:2px solid \
         var(--line);padding:.4rem .8rem\">State: <span {look} data-state=\"{}\">{}</span> \
         — {text}</p>\n</section>",
        s.state.as_str(),
        s.state.as_str()
    );
}

fn since_cell(s: &SignOffLine) -> String {
    if s.covers_current {
        "<span class=\"ok\">unchanged: covers the history as it stands</span>".to_string()
    } else if s.later_events.is_empty() {
        "<span class=\"bad\">changed: the history no longer reads as signed</span>".to_string()
    } else {
        format!(
            "<span class=\"bad\">changed: {} later event{} ({})</span>",
            s.later_events.len(),
            if s.later_events.len() == 1 { "" } else { "s" },
            event_list(&s.later_events)
        )
    }
}

/// Every sign-off: when, as whom, from which account, what it means and covers, the
/// comment, and whether the history changed since.
pub(super) fn signoff_table(out: &mut String, r: &LotReport) {
    simple_table(
        out,
        "signoffs",
        "Sign-offs",
        &[
            "when",
            "signed as",
            "account (who)",
            "meaning",
            "what was signed",
            "comment",
            "history since",
        ],
        r.signoffs
            .iter()
            .map(|s| {
                vec![
                    esc(&s.at),
                    s.signer
                        .as_deref()
                        .map_or_else(|| "<em>no signer named</em>".to_string(), esc),
                    esc(s.os_user.as_deref().unwrap_or(&s.who)),
                    esc(&s.meaning),
                    format!(
                        "{}<br><span class=\"hash\">SHA-256 {}</span>",
                        esc(&s.what),
                        esc(&s.signed_sha256)
                    ),
                    s.comment.as_deref().map_or_else(String::new, esc),
                    since_cell(s),
                ]
            })
            .collect(),
    );
    out.push_str(
        "<p class=\"meta\">A sign-off names a signer from the configured roster and records \
         the operating-system account it was made from; the account is evidence, not proof \
         of identity. Each sign-off is an event of the audit chain.</p>\n",
    );
}

/// The notes written on the lot and its batches.
pub(super) fn notes_table(out: &mut String, r: &LotReport) {
    simple_table(
        out,
        "notes",
        "Notes",
        &["when", "who", "on", "note"],
        r.notes
            .iter()
            .map(|n| vec![esc(&n.at), esc(&n.who), esc(&n.on), esc(&n.text)])
            .collect(),
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn later_events_are_named_up_to_five() {
        assert_eq!(event_list(&[3]), "#3");
        assert_eq!(
            event_list(&[1, 2, 3, 4, 5, 6, 7]),
            "#1, #2, #3, #4, #5 and 2 more"
        );
    }
}
