//! Sign-offs: who may sign (the roster), what a lot's sign-offs add up to (its sign-off
//! state), and the four-eyes rule an approval must pass. Pure rules over plain data; the
//! notebook reads the sign-offs and the lot's fingerprint from the store and asks these.
//!
//! A sign-off is a record: a named signer from the configured roster, the operating-system
//! account the command ran under, what was signed (the SHA-256 fingerprint of the lot's
//! history, [`crate::model::chain::history_fingerprint`]), when, and a comment, all in one
//! event of the audit chain. The account is evidence of where a signature came from, not
//! proof of who typed it.

use serde::{Deserialize, Serialize};

/// One QA signer on the roster (`[[signers]]` in the configuration).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Signer {
    /// The name sign-offs carry, e.g. "M. Ferreira".
    pub name: String,
    /// Operating-system accounts allowed to sign as this signer; empty: any account. An
    /// account listed under two signers is declared shared by them.
    #[serde(default)]
    pub accounts: Vec<String>,
}

/// What a signature means.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Meaning {
    Reviewed,
    Approved,
    Rejected,
}

impl Meaning {
    /// Every meaning, in the order the command line lists them.
    pub const ALL: [Meaning; 3] = [Meaning::Reviewed, Meaning::Approved, Meaning::Rejected];

    /// The word stored in the event and shown to people.
    pub fn as_str(self) -> &'static str {
        match self {
            Meaning::Reviewed => "reviewed",
            Meaning::Approved => "approved",
            Meaning::Rejected => "rejected",
        }
    }

    /// The meaning a stored or typed word names.
    pub fn parse(word: &str) -> Option<Meaning> {
        Meaning::ALL.into_iter().find(|m| m.as_str() == word.trim())
    }
}

/// One sign-off as recorded in the audit chain.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SignOffMark {
    /// The sign-off's event number.
    pub seq: i64,
    pub at: String,
    /// The event's actor (the configured actor, else the OS user).
    pub actor: String,
    /// As stored, e.g. "reviewed".
    pub meaning: String,
    /// The roster name signed as; none for sign-offs made before signers were named.
    pub signer: Option<String>,
    /// The operating-system account the sign-off was made from, when recorded.
    pub os_user: Option<String>,
    /// SHA-256 fingerprint of the lot's history that was signed.
    pub signed_sha256: String,
    /// What the fingerprint covers, e.g. "history of lot X: 12 events up to #40".
    pub what: String,
    pub comment: Option<String>,
}

impl SignOffMark {
    /// Whether this sign-off covers the history whose fingerprint is `current`.
    pub fn covers(&self, current: Option<&str>) -> bool {
        current == Some(self.signed_sha256.as_str())
    }

    /// The signer's name, or how an unnamed (older) sign-off is shown.
    pub fn signer_or_unnamed(&self) -> &str {
        self.signer.as_deref().unwrap_or("(no signer named)")
    }
}

/// Where a lot stands with QA.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SignOffStatus {
    /// No sign-off of the lot.
    None,
    /// Reviewed as the history stands now; an approval by a second signer is due.
    Reviewed,
    /// Approved as the history stands now.
    Approved,
    /// Rejected as the history stands now.
    Rejected,
    /// Signed off before, but events came after: the newest sign-off no longer covers the
    /// history, and a new review is due.
    Stale,
}

impl SignOffStatus {
    pub const ALL: [SignOffStatus; 5] = [
        SignOffStatus::None,
        SignOffStatus::Reviewed,
        SignOffStatus::Approved,
        SignOffStatus::Rejected,
        SignOffStatus::Stale,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            SignOffStatus::None => "none",
            SignOffStatus::Reviewed => "reviewed",
            SignOffStatus::Approved => "approved",
            SignOffStatus::Rejected => "rejected",
            SignOffStatus::Stale => "stale",
        }
    }
}

/// A lot's sign-off state and the sign-off it rests on (for `stale`: the newest one).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SignOffState {
    pub state: SignOffStatus,
    pub by: Option<SignOffMark>,
}

impl Default for SignOffState {
    fn default() -> Self {
        SignOffState::none()
    }
}

impl SignOffState {
    /// A lot nobody signed off.
    pub fn none() -> SignOffState {
        SignOffState {
            state: SignOffStatus::None,
            by: None,
        }
    }

    /// One line for tables and mails, e.g. "approved as M. Ferreira, 2026-11-03T09:12Z".
    pub fn summary(&self) -> String {
        match (&self.by, self.state) {
            (None, _) => "not signed off".to_string(),
            (Some(m), SignOffStatus::Stale) => format!(
                "stale: {} as {} at {}, history changed since",
                m.meaning,
                m.signer_or_unnamed(),
                m.at
            ),
            (Some(m), s) => format!("{} as {} at {}", s.as_str(), m.signer_or_unnamed(), m.at),
        }
    }
}

/// The state a lot's sign-offs (oldest first) put it in, given the fingerprint of its
/// history as it stands (`current`; none when the lot has no history).
///
/// Only sign-offs of the current history count; among them the newest decides, except
/// that a review after an approval of the same history does not take the approval back.
/// When none covers the current history but some exist, the state is `stale`.
pub fn sign_off_state(marks: &[SignOffMark], current: Option<&str>) -> SignOffState {
    let mut state = SignOffState::none();
    for m in marks.iter().filter(|m| m.covers(current)) {
        let next = match Meaning::parse(&m.meaning) {
            Some(Meaning::Reviewed) if state.state == SignOffStatus::Approved => continue,
            Some(Meaning::Reviewed) => SignOffStatus::Reviewed,
            Some(Meaning::Approved) => SignOffStatus::Approved,
            Some(Meaning::Rejected) => SignOffStatus::Rejected,
            None => continue,
        };
        state = SignOffState {
            state: next,
            by: Some(m.clone()),
        };
    }
    match (state.state, marks.last()) {
        (SignOffStatus::None, Some(newest)) => SignOffState {
            state: SignOffStatus::Stale,
            by: Some(newest.clone()),
        },
        _ => state,
    }
}

/// Names compare without regard to case or repeated spaces: "m. ferreira" is
/// "M.  Ferreira".
pub fn same_name(a: &str, b: &str) -> bool {
    let norm = |s: &str| {
        s.split_whitespace()
            .collect::<Vec<_>>()
            .join(" ")
            .to_lowercase()
    };
    norm(a) == norm(b)
}

/// Why someone may not sign as the name they gave.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum SignerRefusal {
    #[error(
        "no signer roster is configured, so sign-offs are refused: add a `[[signers]]` table \
         per QA signer to the configuration (`name = \"...\"`, optionally `accounts = [...]`, \
         the operating-system accounts allowed to sign as them) and sign with `--as NAME`"
    )]
    NoRoster,
    #[error(
        "'{name}' is not on the configuration's signer roster ([[signers]]: {roster}); expected one of those names"
    )]
    NotOnRoster { name: String, roster: String },
    #[error(
        "signer '{name}' signs from the operating-system accounts {accounts} (their \
         `accounts` in [[signers]]), and this command runs as '{account}'"
    )]
    WrongAccount {
        name: String,
        account: String,
        accounts: String,
    },
}

/// The roster entry `name` (compared as [`same_name`]) if the operating-system `account`
/// may sign as it.
pub fn check_signer<'r>(
    roster: &'r [Signer],
    name: &str,
    account: &str,
) -> Result<&'r Signer, SignerRefusal> {
    if roster.is_empty() {
        return Err(SignerRefusal::NoRoster);
    }
    let s = roster
        .iter()
        .find(|s| same_name(&s.name, name))
        .ok_or_else(|| SignerRefusal::NotOnRoster {
            name: name.to_string(),
            roster: roster
                .iter()
                .map(|s| format!("'{}'", s.name))
                .collect::<Vec<_>>()
                .join(", "),
        })?;
    if !s.accounts.is_empty() && !s.accounts.iter().any(|a| a == account) {
        return Err(SignerRefusal::WrongAccount {
            name: s.name.clone(),
            account: account.to_string(),
            accounts: s
                .accounts
                .iter()
                .map(|a| format!("'{a}'"))
                .collect::<Vec<_>>()
                .join(", "),
        });
    }
    Ok(s)
}

/// Why an approval is refused: it needs a review of the same history by someone else.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum FourEyesRefusal {
    #[error(
        "approving needs an earlier `reviewed` sign-off of the lot's history as it stands, by a \
         different signer; there is none{}",
        stale_note(.newest_review)
    )]
    NoReview { newest_review: Option<i64> },
    #[error(
        "the lot's current history was reviewed only by {name} (event {seq}), who cannot also \
         approve it: approval needs a second signer (four eyes)"
    )]
    SameSigner { name: String, seq: i64 },
    #[error(
        "the review of the current history (event {seq}, as {reviewer}) was made from the same \
         operating-system account '{account}' as this approval; two signers sharing an account \
         must both list it under `accounts` in [[signers]], else approval needs a review made \
         from another account"
    )]
    SameAccount {
        seq: i64,
        reviewer: String,
        account: String,
    },
    #[error(
        "the review of the current history (event {seq}) names no signer (it predates the \
         roster); approval needs a review by a named signer"
    )]
    UnnamedReview { seq: i64 },
}

fn stale_note(newest_review: &Option<i64>) -> String {
    match newest_review {
        Some(seq) => {
            format!(" (the review in event {seq} covers an earlier history: events came after it)")
        }
        None => String::new(),
    }
}

/// The four-eyes rule: an approval by `approver` (a roster name) from operating-system
/// `account` needs a `reviewed` sign-off in `marks` that covers the history as it stands
/// (`current`), by a different signer, made from a different account unless the roster
/// lists that account under both signers (declared shared). Returns the review it rests on.
///
/// Names decide who is a second person; the account is checked too because a name is only
/// typed, and one account reviewing and approving under two names is the case the rule
/// exists to stop.
pub fn four_eyes<'m>(
    marks: &'m [SignOffMark],
    current: &str,
    roster: &[Signer],
    approver: &str,
    account: &str,
) -> Result<&'m SignOffMark, FourEyesRefusal> {
    let reviews: Vec<&SignOffMark> = marks
        .iter()
        .filter(|m| Meaning::parse(&m.meaning) == Some(Meaning::Reviewed))
        .collect();
    let covering: Vec<&SignOffMark> = reviews
        .iter()
        .copied()
        .filter(|m| m.covers(Some(current)))
        .collect();
    let lists = |name: &str| {
        roster
            .iter()
            .find(|s| same_name(&s.name, name))
            .is_some_and(|s| s.accounts.iter().any(|a| a == account))
    };
    let mut refusal = FourEyesRefusal::NoReview {
        newest_review: reviews.last().map(|m| m.seq),
    };
    // Newest first: the refusal names the most recent review that came close.
    for m in covering.iter().rev() {
        let Some(reviewer) = &m.signer else {
            refusal = FourEyesRefusal::UnnamedReview { seq: m.seq };
            continue;
        };
        if same_name(reviewer, approver) {
            refusal = FourEyesRefusal::SameSigner {
                name: reviewer.clone(),
                seq: m.seq,
            };
            continue;
        }
        let shared_declared = lists(reviewer) && lists(approver);
        if m.os_user.as_deref() == Some(account) && !shared_declared {
            refusal = FourEyesRefusal::SameAccount {
                seq: m.seq,
                reviewer: reviewer.clone(),
                account: account.to_string(),
            };
            continue;
        }
        return Ok(m);
    }
    Err(refusal)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn mark(seq: i64, meaning: &str, signer: Option<&str>, os: &str, sha: &str) -> SignOffMark {
        SignOffMark {
            seq,
            at: format!("2026-11-0{}T10:00:00.000Z", seq % 9 + 1),
            actor: os.to_string(),
            meaning: meaning.to_string(),
            signer: signer.map(str::to_string),
            os_user: Some(os.to_string()),
            signed_sha256: sha.to_string(),
            what: String::new(),
            comment: None,
        }
    }

    fn roster() -> Vec<Signer> {
        vec![
            Signer {
                name: "M. Ferreira".into(),
                accounts: vec![],
            },
            Signer {
                name: "J. Lindqvist".into(),
                accounts: vec![],
            },
        ]
    }

    #[test]
    fn state_follows_the_sign_offs_of_the_current_history() {
        assert_eq!(sign_off_state(&[], Some("h1")).state, SignOffStatus::None);
        let r = mark(5, "reviewed", Some("M. Ferreira"), "mf", "h1");
        let a = mark(6, "approved", Some("J. Lindqvist"), "jl", "h1");
        let again = mark(7, "reviewed", Some("M. Ferreira"), "mf", "h1");
        let rej = mark(8, "rejected", Some("J. Lindqvist"), "jl", "h1");
        let one = [r.clone()];
        assert_eq!(
            sign_off_state(&one, Some("h1")).state,
            SignOffStatus::Reviewed
        );
        let two = [r.clone(), a.clone()];
        let s = sign_off_state(&two, Some("h1"));
        assert_eq!(
            (s.state, s.by.map(|m| m.seq)),
            (SignOffStatus::Approved, Some(6))
        );
        // A later review of the same history does not take the approval back.
        let three = [r.clone(), a.clone(), again];
        let s = sign_off_state(&three, Some("h1"));
        assert_eq!(
            (s.state, s.by.map(|m| m.seq)),
            (SignOffStatus::Approved, Some(6))
        );
        // A rejection does.
        let four = [r.clone(), a.clone(), rej];
        assert_eq!(
            sign_off_state(&four, Some("h1")).state,
            SignOffStatus::Rejected
        );
        // New data: nothing covers, the newest is named.
        let s = sign_off_state(&two, Some("h2"));
        assert_eq!(
            (s.state, s.by.map(|m| m.seq)),
            (SignOffStatus::Stale, Some(6))
        );
        assert!(s_summary_mentions_change(&sign_off_state(&two, Some("h2"))));
    }

    fn s_summary_mentions_change(s: &SignOffState) -> bool {
        s.summary().contains("history changed since")
    }

    #[test]
    fn an_older_sign_off_reads_and_encodes_as_stored() {
        // The payload of a sign-off made before signers were named, as stored then: it
        // must encode to the same bytes, or its event's hash would no longer verify.
        let old = r#"{"kind":"sign-off","lot":"PD-7","meaning":"approved","signed_sha256":"00","what":"x","comment":null}"#;
        let p: crate::model::Payload = serde_json::from_str(old).unwrap();
        assert_eq!(serde_json::to_string(&p).unwrap(), old);
        let crate::model::Payload::SignOff {
            signer, os_user, ..
        } = p
        else {
            panic!("not a sign-off: {p:?}");
        };
        assert_eq!((signer, os_user), (None, None));
    }

    #[test]
    fn roster_names_and_accounts() {
        assert_eq!(check_signer(&[], "x", "u"), Err(SignerRefusal::NoRoster));
        let mut r = roster();
        assert_eq!(
            check_signer(&r, "m.  ferreira", "u").unwrap().name,
            "M. Ferreira"
        );
        let e = check_signer(&r, "Mallory", "u").unwrap_err();
        assert!(
            e.to_string().contains("'M. Ferreira', 'J. Lindqvist'"),
            "{e}"
        );
        r[0].accounts = vec!["mferreira".into()];
        assert!(check_signer(&r, "M. Ferreira", "mferreira").is_ok());
        let e = check_signer(&r, "M. Ferreira", "jlindqvist").unwrap_err();
        assert!(matches!(e, SignerRefusal::WrongAccount { .. }), "{e}");
    }

    #[test]
    fn four_eyes_needs_another_signer_of_the_same_history() {
        let r = roster();
        // No review at all.
        assert!(matches!(
            four_eyes(&[], "h1", &r, "J. Lindqvist", "jl"),
            Err(FourEyesRefusal::NoReview {
                newest_review: None
            })
        ));
        // A review of an earlier history does not count.
        let old = [mark(3, "reviewed", Some("M. Ferreira"), "mf", "h0")];
        let e = four_eyes(&old, "h1", &r, "J. Lindqvist", "jl").unwrap_err();
        assert!(e.to_string().contains("event 3"), "{e}");
        // The reviewer cannot approve, whatever account they use.
        let own = [mark(4, "reviewed", Some("M. Ferreira"), "mf", "h1")];
        assert!(matches!(
            four_eyes(&own, "h1", &r, "m. ferreira", "other-account"),
            Err(FourEyesRefusal::SameSigner { seq: 4, .. })
        ));
        // Another signer from another account may.
        assert_eq!(
            four_eyes(&own, "h1", &r, "J. Lindqvist", "jl").map(|m| m.seq),
            Ok(4)
        );
        // Another name typed from the reviewer's account is refused...
        assert!(matches!(
            four_eyes(&own, "h1", &r, "J. Lindqvist", "mf"),
            Err(FourEyesRefusal::SameAccount { seq: 4, .. })
        ));
        // ...unless the roster declares the account shared by both signers.
        let mut shared = roster();
        shared[0].accounts = vec!["mf".into(), "lab-pc".into()];
        shared[1].accounts = vec!["lab-pc".into(), "jl".into()];
        let lab = [mark(4, "reviewed", Some("M. Ferreira"), "lab-pc", "h1")];
        assert!(four_eyes(&lab, "h1", &shared, "J. Lindqvist", "lab-pc").is_ok());
        let mf = [mark(4, "reviewed", Some("M. Ferreira"), "mf", "h1")];
        // Listed under one signer only: not declared shared.
        assert!(matches!(
            four_eyes(&mf, "h1", &shared, "J. Lindqvist", "mf"),
            Err(FourEyesRefusal::SameAccount { .. })
        ));
        // A review that names no signer does not count.
        let unnamed = [mark(2, "reviewed", None, "mf", "h1")];
        assert!(matches!(
            four_eyes(&unnamed, "h1", &r, "J. Lindqvist", "jl"),
            Err(FourEyesRefusal::UnnamedReview { seq: 2 })
        ));
        // Of two reviews, the one by someone else counts.
        let both = [
            mark(4, "reviewed", Some("J. Lindqvist"), "jl", "h1"),
            mark(5, "reviewed", Some("M. Ferreira"), "mf", "h1"),
        ];
        assert_eq!(
            four_eyes(&both, "h1", &r, "M. Ferreira", "mf").map(|m| m.seq),
            Ok(4)
        );
    }
}
