//! What sign-offs cover and add up to: the fingerprint of a lot's history a sign-off
//! signs, a lot's sign-offs, and the lots' sign-off states for `lots`, `status`, reports,
//! the web view and the digest. (Signing itself is an entry, in `entries`.)

use std::collections::BTreeMap;

use serde::Serialize;

use super::error::Result;
use crate::config::Config;
use crate::model::Payload;
use crate::model::chain::SIGN_OFF_KIND;
use crate::model::signoff::{self, SignOffMark, SignOffState, SignOffStatus};
use crate::store::replay::StoredEvent;
use crate::store::{self, Connection};

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
