//! An alert's lifecycle: what a rule's verdict does to the remembered condition (open,
//! worse, cleared, reopened as a new episode), the identity of each message and the
//! retry schedule of its delivery. Pure; the store keeps the conditions.

use std::time::Duration;

use sha2::{Digest, Sha256};

use super::compose::MESSAGE_ID_DOMAIN;
use super::rules::{Alert, AlertState, Severity};

/// The remembered state of one alert key.
#[derive(Debug, Clone, PartialEq)]
pub struct Condition {
    pub state: AlertState,
    pub severity: Severity,
    pub episode: i64,
    /// Message-ID of the episode's first message, which later ones reply to.
    pub thread: String,
}

/// A Message-ID fixed by what the message says and how many messages its episode had
/// before it (`step`), so a resend after a crash carries the same identifier and
/// receivers can drop the duplicate, while a severity that goes up, down and up again
/// sends each change.
pub fn message_id_for(
    key: &str,
    episode: i64,
    step: i64,
    state: AlertState,
    severity: Severity,
) -> String {
    let mut h = Sha256::new();
    h.update(key.as_bytes());
    h.update([0]);
    h.update(episode.to_le_bytes());
    h.update(state.as_str().as_bytes());
    h.update([severity as u8]);
    if step > 0 {
        // Step 0 (an episode's first message) keeps the identifier it always had.
        h.update(step.to_le_bytes());
    }
    let hexed = hex::encode(h.finalize());
    format!("<{}.alert@{MESSAGE_ID_DOMAIN}>", &hexed[..32])
}

/// Delay before the next attempt after `attempts` failures: 30 s doubling, capped at 1 h.
pub fn backoff(attempts: u32) -> Duration {
    const BASE: u64 = 30;
    const CAP: u64 = 3600;
    let exp = attempts.saturating_sub(1).min(20);
    Duration::from_secs(BASE.saturating_mul(1u64 << exp).min(CAP))
}

/// What to do with one alert given the stored condition: (state to send, episode,
/// severity to remember), or None when nothing changes.
pub fn decide(alert: &Alert, prev: Option<&Condition>) -> Option<(AlertState, i64, Severity)> {
    let active = |c: &Condition| c.state != AlertState::Cleared;
    match (alert.state, prev) {
        (AlertState::Cleared, Some(c)) if active(c) => {
            Some((AlertState::Cleared, c.episode, c.severity))
        }
        (AlertState::Cleared, _) => None,
        (_, Some(c)) if active(c) => match alert.severity.cmp(&c.severity) {
            std::cmp::Ordering::Greater => Some((AlertState::Worse, c.episode, alert.severity)),
            std::cmp::Ordering::Less => Some((AlertState::Eased, c.episode, alert.severity)),
            std::cmp::Ordering::Equal => None,
        },
        (_, Some(c)) => Some((AlertState::Open, c.episode + 1, alert.severity)),
        (_, None) => Some((AlertState::Open, 1, alert.severity)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn backoff_doubles_from_30s_and_caps_at_one_hour() {
        let secs: Vec<u64> = (1..=9).map(|a| backoff(a).as_secs()).collect();
        assert_eq!(secs, [30, 60, 120, 240, 480, 960, 1920, 3600, 3600]);
        assert_eq!(backoff(0).as_secs(), 30);
        assert_eq!(backoff(u32::MAX).as_secs(), 3600);
    }

    #[test]
    fn severity_steps_up_and_down_within_an_episode() {
        use crate::alert::rules::RuleId;
        let alert = |sev| Alert {
            key: "k".into(),
            rule: RuleId::MetalInProduct,
            lot: "L".into(),
            site: String::new(),
            file: None,
            state: AlertState::Open,
            severity: sev,
            subject: String::new(),
            action: String::new(),
            evidence: String::new(),
            recipients: vec![],
            rows: vec![],
            criterion: 0.5,
            link: None,
        };
        let cond = |state, severity| Condition {
            state,
            severity,
            episode: 2,
            thread: "<t>".into(),
        };
        let open_crit = cond(AlertState::Worse, Severity::Critical);
        assert_eq!(
            decide(&alert(Severity::Warning), Some(&open_crit)),
            Some((AlertState::Eased, 2, Severity::Warning))
        );
        assert_eq!(decide(&alert(Severity::Critical), Some(&open_crit)), None);
        let eased = cond(AlertState::Eased, Severity::Warning);
        assert_eq!(
            decide(&alert(Severity::Critical), Some(&eased)),
            Some((AlertState::Worse, 2, Severity::Critical))
        );
        // The second "worse" of an episode is its own message.
        assert_ne!(
            message_id_for("k", 2, 1, AlertState::Worse, Severity::Critical),
            message_id_for("k", 2, 3, AlertState::Worse, Severity::Critical)
        );
    }

    #[test]
    fn message_id_is_stable_and_distinct() {
        let a = message_id_for("k", 1, 0, AlertState::Open, Severity::Warning);
        assert_eq!(
            a,
            message_id_for("k", 1, 0, AlertState::Open, Severity::Warning)
        );
        assert_ne!(
            a,
            message_id_for("k", 2, 0, AlertState::Open, Severity::Warning)
        );
        assert_ne!(
            a,
            message_id_for("k", 1, 0, AlertState::Worse, Severity::Warning)
        );
        assert!(a.starts_with('<') && a.ends_with("@turnbook.invalid>"));
    }
}
