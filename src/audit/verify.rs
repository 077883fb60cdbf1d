//! `verify`: walk the chain, then rebuild every record table from the event payloads and
//! compare it with what is stored. The first broken link is reported with what changed.

use std::collections::HashMap;

use serde::Serialize;

pub use super::check::Finding;
use super::check::{LinkRule, SignOffSeen, push};
use crate::model::chain::{ChainKey, GENESIS, Head, SIGN_OFF_KIND, history_fingerprint};
use crate::store::{self, Connection, Result};

/// The outcome of a verification.
#[derive(Debug, Clone, Serialize)]
pub struct VerifyReport {
    pub events: i64,
    pub head_hash: String,
    pub findings: Vec<Finding>,
    /// The event after which links are keyed (0: from the first), None for a plain chain.
    pub keyed_after: Option<i64>,
    /// Keyed links that could not be checked because the key was not available.
    pub unchecked_keyed_links: i64,
    /// Published heads checked against the chain.
    pub heads_checked: usize,
    /// Each sign-off, and whether it still covers its lot's history. Not a finding: a
    /// later event about a lot is the normal course of things, and asks for a new review.
    pub signoffs: Vec<SignOffCoverage>,
    /// The stored fits recomputed from the records (set by the application, which can
    /// fit; a differing fit is also a finding).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fits: Option<FitCheck>,
    /// The verified head the walk started after (0: a full verification from the first
    /// event; else only the events after it and the rows they wrote were checked).
    pub from_seq: i64,
    /// The newest event whose link checked out.
    pub head_seq: i64,
}

/// The lots' newest stored fits against a recomputation from the records.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct FitCheck {
    /// Recomputed and identical.
    pub identical: usize,
    /// Recomputed and different (each is a finding).
    pub differing: usize,
    /// Stored by another engine version: not compared (a new version may change results).
    pub other_engine: usize,
    /// Computed under other settings than the configuration now: not compared.
    pub other_configuration: usize,
    /// Older than the lot's newest record (recomputed at the next start): not compared.
    pub stale: usize,
    /// Young lots whose fit rests on their family's stored fits, which move on: not compared.
    pub family_prior: usize,
}

/// Whether a sign-off's fingerprint still matches the history of its lot.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SignOffCoverage {
    /// The sign-off event.
    pub seq: i64,
    pub lot: String,
    pub meaning: String,
    pub signed_sha256: String,
    /// The fingerprint of the lot's history as it stands.
    pub current_sha256: String,
    /// True when the sign-off still covers the lot's whole history.
    pub covers: bool,
    /// Events concerning the lot after the sign-off (sign-offs aside), oldest first.
    pub later_events: Vec<i64>,
    /// When it no longer covers: why, in words.
    pub reason: Option<String>,
}

impl std::fmt::Display for SignOffCoverage {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "sign-off #{} of lot {} ({}): ",
            self.seq, self.lot, self.meaning
        )?;
        match &self.reason {
            None => write!(f, "still covers the lot's history"),
            Some(why) => write!(f, "no longer covers the lot's history: {why}"),
        }
    }
}

/// Each sign-off against the history of its lot as it stands, and as it stood before the
/// sign-off (the events concerning the lot, sign-offs aside, are those `sign_off` covers).
fn signoff_coverage(conn: &Connection, seen: Vec<SignOffSeen>) -> Result<Vec<SignOffCoverage>> {
    let mut histories: HashMap<String, Vec<(i64, String)>> = HashMap::new();
    let mut out = Vec::with_capacity(seen.len());
    for s in seen {
        if !histories.contains_key(&s.lot) {
            let events = store::queries::lot_events(conn, &s.lot)?
                .into_iter()
                .filter(|e| e.kind != SIGN_OFF_KIND)
                .map(|e| (e.seq, e.hash))
                .collect();
            histories.insert(s.lot.clone(), events);
        }
        let history = histories.get(&s.lot).map_or(&[][..], Vec::as_slice);
        let current = history_fingerprint(history.iter().map(|(_, h)| h.as_str()));
        let then = history_fingerprint(
            history
                .iter()
                .filter(|(seq, _)| *seq < s.seq)
                .map(|(_, h)| h.as_str()),
        );
        let later: Vec<i64> = history
            .iter()
            .map(|(seq, _)| *seq)
            .filter(|seq| *seq > s.seq)
            .collect();
        let covers = current == s.signed;
        let reason = match (covers, then == s.signed) {
            (true, _) => None,
            (false, true) => Some(format!(
                "{} later event(s) concern the lot ({})",
                later.len(),
                later
                    .iter()
                    .map(|q| format!("#{q}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            )),
            (false, false) => Some(
                "the history up to the sign-off reads differently from what was signed \
                 (events before it changed, or came to concern the lot later)"
                    .into(),
            ),
        };
        out.push(SignOffCoverage {
            seq: s.seq,
            lot: s.lot,
            meaning: s.meaning,
            signed_sha256: s.signed,
            current_sha256: current,
            covers,
            later_events: later,
            reason,
        });
    }
    Ok(out)
}

impl VerifyReport {
    /// Every link checked and every record matching: the chain is intact. Keyed links
    /// left unchecked are a finding, so a chain is never called intact unchecked.
    pub fn ok(&self) -> bool {
        self.findings.is_empty()
    }
}

/// What a verification checks beyond the database itself.
#[derive(Debug, Default)]
pub struct Witnesses<'a> {
    /// The chain key, to check keyed links with.
    pub key: Option<&'a ChainKey>,
    /// Heads published outside the database, each of which the chain must still hold.
    pub heads: Vec<Head>,
}

/// Each published head must be an event the chain still holds, with the same hash.
fn check_heads(conn: &Connection, out: &mut Vec<Finding>, heads: &[Head]) -> Result<()> {
    for h in heads {
        match store::replay::event_hash_at(conn, h.seq)? {
            None => push(
                out,
                "events",
                h.seq,
                "(row)",
                "missing",
                format!("present: the published head {h} (newest events deleted)"),
            ),
            Some(hash) if hash != h.hash => push(
                out,
                "events",
                h.seq,
                "hash",
                hash,
                format!(
                    "{} (the published head {h}: the event was rewritten)",
                    h.hash
                ),
            ),
            Some(_) => {}
        }
    }
    Ok(())
}

/// Verify the whole database with no key and no published head.
pub fn verify(conn: &Connection) -> Result<VerifyReport> {
    verify_with(conn, &Witnesses::default())
}

/// Verify the whole database, checking keyed links with `w.key` and the heads `w.heads`:
/// one streaming walk over the events, in memory bounded by a stretch of events and one
/// batch, not by the size of the database.
pub fn verify_with(conn: &Connection, w: &Witnesses<'_>) -> Result<VerifyReport> {
    run(conn, w, 0, GENESIS.to_string())
}

/// Verify only what came after a verified head `since` (`SEQ:HASH`): the head must still
/// be in the chain as it was, the links after it are checked and the rows the later
/// events wrote compared (cycles rebuilt from all the events of each batch they touched).
/// Rows older events wrote are not compared again: that is the full verification's job.
pub fn verify_since(conn: &Connection, w: &Witnesses<'_>, since: &Head) -> Result<VerifyReport> {
    let snap = store::replay::snapshot(conn)?;
    match store::replay::event_hash_at(&snap, since.seq)? {
        Some(h) if h == since.hash => {}
        found => {
            let mut findings = Vec::new();
            push(
                &mut findings,
                "events",
                since.seq,
                "hash",
                found.as_deref().unwrap_or("missing"),
                format!(
                    "{} (the head verified last: the event was rewritten or deleted)",
                    since.hash
                ),
            );
            return Ok(VerifyReport {
                events: 0,
                head_hash: since.hash.clone(),
                findings,
                keyed_after: None,
                unchecked_keyed_links: 0,
                heads_checked: 0,
                signoffs: Vec::new(),
                fits: None,
                from_seq: since.seq,
                head_seq: since.seq,
            });
        }
    }
    drop(snap);
    run(conn, w, since.seq, since.hash.clone())
}

/// Walk the events after `from` (whose hash is `prev`) and compare what they wrote.
fn run(conn: &Connection, w: &Witnesses<'_>, from: i64, prev: String) -> Result<VerifyReport> {
    let snap = store::replay::snapshot(conn)?;
    let keying = store::events::keying(&snap)?;
    let rule = LinkRule {
        switch_seen: keying.as_ref().is_some_and(|k| k.0 <= from && from > 0),
        keying,
        key: w.key,
        unchecked: 0,
    };
    let mut walk = super::walk::Walk::new(&snap, rule, from, prev);
    walk.run()?;
    let (events, head_hash, stopped) = (walk.count, walk.prev.clone(), walk.stopped);
    let head_seq = from + events - i64::from(stopped);
    if !stopped {
        let n = if from == 0 { events } else { from + events };
        walk.rule.finish(&mut walk.findings, n);
    }
    let mut findings = std::mem::take(&mut walk.findings);
    check_heads(&snap, &mut findings, &w.heads)?;
    walk.rule.unchecked(&mut findings);
    let keyed_after = walk.rule.keying.as_ref().map(|k| k.0);
    let unchecked = walk.rule.unchecked;
    let signoffs = if stopped {
        Vec::new()
    } else {
        walk.findings = findings;
        let (f, seen) = walk.finish()?;
        findings = f;
        if from == 0 {
            // The totals triggers keep for the views, recounted from the rows.
            for (what, kept, counted) in store::queries::kept_totals_disagreeing(&snap)? {
                push(&mut findings, "kept_totals", what, "n", kept, counted);
            }
            signoff_coverage(&snap, seen)?
        } else {
            Vec::new()
        }
    };
    Ok(VerifyReport {
        events,
        head_hash,
        findings,
        keyed_after,
        unchecked_keyed_links: unchecked,
        heads_checked: w.heads.len(),
        signoffs,
        fits: None,
        from_seq: from,
        head_seq,
    })
}
