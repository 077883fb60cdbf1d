//! Sign-offs: a named signer from the roster signs a lot's history as it stands, with the
//! operating-system account recorded beside the name; an approval needs an earlier review
//! of the same history by someone else (the four-eyes rule, [`signoff::four_eyes`]). Also
//! the lots' sign-off states for `lots`, `status`, reports, the web view and the digest.

use std::collections::BTreeMap;

use serde::Serialize;

use super::chain::{Receipt, write_entry};
use super::error::{NotebookError, Result};
use crate::config::Config;
use crate::model::Payload;
use crate::model::chain::SIGN_OFF_KIND;
use crate::model::signoff::{self, Meaning, SignOffMark, SignOffState, SignOffStatus};
use crate::store::replay::StoredEvent;
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
    Ok(marks_in(&store::queries::lot_events(conn, lot)?, lot))
}

/// The sign-offs of `lot` among its events, oldest first.
fn marks_in(events: &[StoredEvent], lot: &str) -> Vec<SignOffMark> {
    events
        .iter()
        .filter(|e| e.kind == SIGN_OFF_KIND && e.subject == lot)
        .filter_map(|e| {
            let payload = serde_json::from_str(&e.payload).ok()?;
            mark_of(e.seq, &e.at, &e.actor, payload)
        })
        .collect()
}

/// What a sign-off of a lot covers: the hashes of every event concerning the lot except
/// sign-offs themselves, in order ([`crate::model::chain::history_fingerprint`]). Returns
/// a description and the SHA-256; refused when no event concerns the lot.
pub fn lot_fingerprint(conn: &Connection, lot: &str) -> store::Result<(String, String)> {
    fingerprint_of(&store::queries::lot_events(conn, lot)?, lot)
}

fn fingerprint_of(events: &[StoredEvent], lot: &str) -> store::Result<(String, String)> {
    let covered: Vec<&StoredEvent> = events.iter().filter(|e| e.kind != SIGN_OFF_KIND).collect();
    let Some(last) = covered.last() else {
        return Err(store::StoreError::Invalid(format!(
            "no history to sign for lot '{lot}'"
        )));
    };
    let sha = crate::model::chain::history_fingerprint(covered.iter().map(|e| e.hash.as_str()));
    Ok((
        format!(
            "history of lot {lot}: {} events up to #{}",
            covered.len(),
            last.seq
        ),
        sha,
    ))
}

/// The fingerprint of a lot's history as it stands; none when no event concerns it.
fn current_fingerprint(events: &[StoredEvent]) -> Option<String> {
    fingerprint_of(events, "").ok().map(|f| f.1)
}

/// One lot's sign-off state.
pub fn lot_sign_off_state(conn: &Connection, lot: &str) -> store::Result<SignOffState> {
    let events = store::queries::lot_events(conn, lot)?;
    Ok(signoff::sign_off_state(
        &marks_in(&events, lot),
        current_fingerprint(&events).as_deref(),
    ))
}

/// The sign-off state of every lot that has a sign-off (a lot absent from the map has
/// none). Reads every sign-off in one query and the history of the signed lots only.
pub fn sign_off_states(conn: &Connection) -> store::Result<BTreeMap<String, SignOffState>> {
    let mut signed: BTreeMap<String, ()> = BTreeMap::new();
    for row in store::web::sign_offs(conn)? {
        signed.insert(row.lot, ());
    }
    let mut out = BTreeMap::new();
    for lot in signed.into_keys() {
        let state = lot_sign_off_state(conn, &lot)?;
        out.insert(lot, state);
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
