//! Sign-offs: a named signer from the roster signs a lot's history as it stands, with the
//! operating-system account recorded beside the name; an approval needs an earlier review
//! of the same history by someone else (the four-eyes rule, [`signoff::four_eyes`]). Also
//! the lots' sign-off states for `lots`, `status`, reports, the web view and the digest.

use std::collections::BTreeMap;

use serde::Serialize;

use super::entries::{Receipt, write_entry};
use super::error::{NotebookError, Result};
use super::history::{HistoryEntry, lot_fingerprint, lot_history};
use crate::config::Config;
use crate::model::Payload;
use crate::model::signoff::{self, Meaning, SignOffMark, SignOffState, SignOffStatus};
use crate::store::{self, Connection, records};

/// What a sign-off asks for: the lot, what it means, the roster name and a comment.
#[derive(Debug, Clone, Copy)]
pub struct SignOffRequest<'a> {
    pub lot: &'a str,
    /// "reviewed", "approved" or "rejected".
    pub meaning: &'a str,
    /// The roster name to sign as (`--as`).
    pub signer: &'a str,
    pub comment: Option<&'a str>,
}

/// A sign-off as written, with what it covers.
#[derive(Debug, Clone, PartialEq)]
pub struct SignedOff {
    pub receipt: Receipt,
    pub covers: String,
    pub sha256: String,
    /// The roster name as the roster spells it.
    pub signer: String,
    /// The operating-system account recorded.
    pub os_user: String,
    /// For an approval: the review it rests on.
    pub review: Option<SignOffMark>,
}

/// Sign off a lot's history as it stands, as a roster signer; this process's
/// operating-system account ([`crate::audit::os_account`]) is recorded with the name.
pub fn sign_off(cfg: &Config, req: &SignOffRequest<'_>) -> Result<SignedOff> {
    sign_off_from(cfg, req, &crate::audit::os_account())
}

/// Sign off as [`sign_off`] does, with the operating-system account given by the caller
/// (a front end that knows its user another way; tests).
pub fn sign_off_from(cfg: &Config, req: &SignOffRequest<'_>, account: &str) -> Result<SignedOff> {
    let meaning = Meaning::parse(req.meaning).ok_or_else(|| {
        NotebookError::Usage(format!(
            "--meaning {}: expected reviewed, approved or rejected",
            req.meaning
        ))
    })?;
    let signer = signoff::check_signer(&cfg.signers, req.signer, account)
        .map_err(|e| {
            NotebookError::Refused(format!("{e} (configuration {})", cfg.source.display()))
        })?
        .name
        .clone();
    let lot = req.lot;
    let ((seq, covers, sha256, review), actor) = write_entry(cfg, |tx, actor, at| {
        let (what, sha) = lot_fingerprint(tx, lot)?;
        let review = if meaning == Meaning::Approved {
            let marks = lot_marks(tx, lot)?;
            let r =
                signoff::four_eyes(&marks, &sha, &cfg.signers, &signer, account).map_err(|e| {
                    store::StoreError::Invalid(format!("lot '{lot}' cannot be approved: {e}"))
                })?;
            Some(r.clone())
        } else {
            None
        };
        let p = Payload::SignOff {
            lot: lot.to_string(),
            meaning: meaning.as_str().to_string(),
            signed_sha256: sha.clone(),
            what: what.clone(),
            comment: req.comment.map(str::to_string),
            signer: Some(signer.clone()),
            os_user: Some(account.to_string()),
        };
        let seq = records::append_event(tx, lot, &p, actor, at)?;
        Ok((seq, what, sha, review))
    })?;
    Ok(SignedOff {
        receipt: Receipt { seq, actor },
        covers,
        sha256,
        signer,
        os_user: account.to_string(),
        review,
    })
}

/// A stored sign-off event as a mark; none when the payload is not a sign-off (`verify`
/// reports a payload that does not read).
fn mark_of(seq: i64, at: &str, actor: &str, payload: serde_json::Value) -> Option<SignOffMark> {
    match serde_json::from_value::<Payload>(payload).ok()? {
        Payload::SignOff {
            meaning,
            signed_sha256,
            what,
            comment,
            signer,
            os_user,
            ..
        } => Some(SignOffMark {
            seq,
            at: at.to_string(),
            actor: actor.to_string(),
            meaning,
            signer,
            os_user,
            signed_sha256,
            what,
            comment,
        }),
        _ => None,
    }
}

/// A lot's sign-offs, oldest first.
pub fn lot_marks(conn: &Connection, lot: &str) -> store::Result<Vec<SignOffMark>> {
    Ok(marks_in(&lot_history(conn, lot)?, lot))
}

/// The sign-offs of `lot` in a history read already, oldest first.
pub(super) fn marks_in(history: &[HistoryEntry], lot: &str) -> Vec<SignOffMark> {
    history
        .iter()
        .filter(|e| e.kind == crate::model::chain::SIGN_OFF_KIND && e.subject == lot)
        .filter_map(|e| mark_of(e.seq, &e.at, &e.actor, e.payload.clone()))
        .collect()
}

/// The fingerprint of a lot's history as it stands; none when no event concerns it.
fn current_fingerprint(conn: &Connection, lot: &str) -> store::Result<Option<String>> {
    match lot_fingerprint(conn, lot) {
        Ok((_, sha)) => Ok(Some(sha)),
        Err(store::StoreError::Invalid(_)) => Ok(None),
        Err(e) => Err(e),
    }
}

/// One lot's sign-off state.
pub fn lot_sign_off_state(conn: &Connection, lot: &str) -> store::Result<SignOffState> {
    let marks = lot_marks(conn, lot)?;
    if marks.is_empty() {
        return Ok(SignOffState::none());
    }
    Ok(signoff::sign_off_state(
        &marks,
        current_fingerprint(conn, lot)?.as_deref(),
    ))
}

/// The sign-off state of every lot that has a sign-off (a lot absent from the map has
/// none). Reads every sign-off in one query and fingerprints only the signed lots.
pub fn sign_off_states(conn: &Connection) -> store::Result<BTreeMap<String, SignOffState>> {
    let mut by_lot: BTreeMap<String, Vec<SignOffMark>> = BTreeMap::new();
    for row in store::web::sign_offs(conn)? {
        let Ok(payload) = serde_json::from_str(&row.payload) else {
            continue;
        };
        if let Some(m) = mark_of(row.seq, &row.at, &row.actor, payload) {
            by_lot.entry(row.lot).or_default().push(m);
        }
    }
    let mut out = BTreeMap::new();
    for (lot, marks) in by_lot {
        let current = current_fingerprint(conn, &lot)?;
        out.insert(lot, signoff::sign_off_state(&marks, current.as_deref()));
    }
    Ok(out)
}

/// How many lots are in each sign-off state.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct SignOffCounts {
    pub none: usize,
    pub reviewed: usize,
    pub approved: usize,
    pub rejected: usize,
    pub stale: usize,
}

impl SignOffCounts {
    fn add(&mut self, s: SignOffStatus) {
        let n = match s {
            SignOffStatus::None => &mut self.none,
            SignOffStatus::Reviewed => &mut self.reviewed,
            SignOffStatus::Approved => &mut self.approved,
            SignOffStatus::Rejected => &mut self.rejected,
            SignOffStatus::Stale => &mut self.stale,
        };
        *n += 1;
    }
}

/// Count the lots (`lots`: every lot the notebook names) by sign-off state.
pub fn count_states(lots: &[String], states: &BTreeMap<String, SignOffState>) -> SignOffCounts {
    let mut c = SignOffCounts::default();
    for lot in lots {
        c.add(states.get(lot).map_or(SignOffStatus::None, |s| s.state));
    }
    c
}

/// Every lot's sign-off state, for the digest and other callers that hold a
/// configuration rather than a connection.
pub fn sign_off_overview(cfg: &Config) -> Result<BTreeMap<String, SignOffState>> {
    let conn = store::open(&cfg.database_path())?;
    Ok(sign_off_states(&conn)?)
}
