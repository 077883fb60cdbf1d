//! The pieces every part of `verify` shares: a finding, the chain's link rule as stored,
//! and row comparisons that name table, row and field.

use serde::Serialize;

use crate::model::chain::{ChainKey, GENESIS, event_hash, key_proof, keyed_event_hash};
use crate::model::cycle::{self as view, CYCLE_COLUMNS};
use crate::store;

/// One discrepancy.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Finding {
    pub table: String,
    /// The row's key (event seq, file id, measurement id, lot, batch id).
    pub row: String,
    pub field: String,
    pub stored: String,
    pub expected: String,
}

impl std::fmt::Display for Finding {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "table {}, row {}, field {}: stored {}, expected {}",
            self.table, self.row, self.field, self.stored, self.expected
        )
    }
}

/// A sign-off met in the walk: its event, lot, meaning and the fingerprint it signed.
pub(super) struct SignOffSeen {
    pub(super) seq: i64,
    pub(super) lot: String,
    pub(super) meaning: String,
    pub(super) signed: String,
}

/// How the chain's links are checked: the keying as stored, and the key if given.
pub(super) struct LinkRule<'a> {
    pub(super) keying: Option<(i64, String)>,
    pub(super) key: Option<&'a ChainKey>,
    pub(super) unchecked: i64,
    pub(super) switch_seen: bool,
}

impl LinkRule<'_> {
    /// Check one event's link; false when it is broken (a finding was pushed).
    pub(super) fn check(
        &mut self,
        out: &mut Vec<Finding>,
        e: &store::replay::StoredEvent,
        prev: &str,
    ) -> bool {
        let keyed = self.keying.as_ref().is_some_and(|(s, _)| e.seq > *s);
        let (recomputed, why) = match (keyed, self.key) {
            (true, None) => {
                self.unchecked += 1;
                return true;
            }
            (true, Some(k)) => (
                keyed_event_hash(
                    k, prev, e.seq, &e.at, &e.actor, &e.kind, &e.subject, &e.payload,
                ),
                "(not linked with the chain key: altered, or written without the key)",
            ),
            (false, _) => (
                event_hash(
                    prev, e.seq, &e.at, &e.actor, &e.kind, &e.subject, &e.payload,
                ),
                "(the event's content was altered)",
            ),
        };
        if recomputed == e.hash {
            return true;
        }
        push(
            out,
            "events",
            e.seq,
            "hash",
            &e.hash,
            format!("{recomputed} {why}"),
        );
        false
    }

    /// A `chain-keyed` event at `seq` with `proof`, whose link continues from `prev`.
    pub(super) fn switch(&mut self, out: &mut Vec<Finding>, seq: i64, prev: &str, proof: &str) {
        match &self.keying {
            Some((s, stored)) if *s == seq => {
                self.switch_seen = true;
                if stored != proof {
                    push(out, "chain_keying", 1, "key_proof", stored, proof);
                }
            }
            _ => push(
                out,
                "events",
                seq,
                "kind",
                "chain-keyed",
                "no switch to the keyed rule here (chain_keying records none at this event)",
            ),
        }
        if let Some(k) = self.key {
            let expected = key_proof(k, prev);
            if expected != proof {
                push(
                    out,
                    "events",
                    seq,
                    "payload.key_proof",
                    proof,
                    format!("{expected} (the switch was not made with this chain key)"),
                );
            }
        }
    }

    /// Keyed links that could not be checked, as one finding.
    pub(super) fn unchecked(&self, out: &mut Vec<Finding>) {
        if self.unchecked > 0 {
            let first = self.keying.as_ref().map_or(0, |k| k.0) + 1;
            push(
                out,
                "events",
                format!("{first} and later"),
                "hash",
                format!("{} keyed link(s) not checked", self.unchecked),
                "checked: keyed links (HMAC-SHA-256) cannot be checked without the chain key",
            );
        }
    }

    /// After the walk: the keying row against the events and the key.
    pub(super) fn finish(&self, out: &mut Vec<Finding>, events: i64) {
        match (&self.keying, self.key) {
            (None, Some(_)) if events > 0 => push(
                out,
                "chain_keying",
                1,
                "(row)",
                "missing (every link plain)",
                "present: a chain key exists, so its chain was keyed",
            ),
            (Some((0, stored)), Some(k)) if *stored != key_proof(k, GENESIS) => push(
                out,
                "chain_keying",
                1,
                "key_proof",
                stored,
                format!(
                    "{} (keyed by another key, or forged)",
                    key_proof(k, GENESIS)
                ),
            ),
            (Some((s, _)), _) if *s > 0 && !self.switch_seen => push(
                out,
                "chain_keying",
                1,
                "switch_seq",
                s,
                "the seq of a chain-keyed event (there is none there)",
            ),
            _ => {}
        }
    }
}

pub(super) fn push(
    out: &mut Vec<Finding>,
    table: &str,
    row: impl ToString,
    field: &str,
    stored: impl ToString,
    expected: impl ToString,
) {
    out.push(Finding {
        table: table.into(),
        row: row.to_string(),
        field: field.into(),
        stored: stored.to_string(),
        expected: expected.to_string(),
    });
}

/// Compare two serialisable rows field by field.
pub(super) fn diff_rows<T: Serialize>(
    out: &mut Vec<Finding>,
    table: &str,
    key: &str,
    stored: &T,
    expected: &T,
) {
    let (Ok(serde_json::Value::Object(s)), Ok(serde_json::Value::Object(e))) =
        (serde_json::to_value(stored), serde_json::to_value(expected))
    else {
        return;
    };
    for (k, ev) in &e {
        let sv = s.get(k).cloned().unwrap_or(serde_json::Value::Null);
        if &sv != ev {
            push(out, table, key, k, &sv, ev);
        }
    }
}

pub(super) fn diff_cycle(out: &mut Vec<Finding>, s: &view::CycleView, e: &view::CycleView) {
    let b = &s.batch_id;
    let opt = |x: &Option<String>| x.clone().unwrap_or_else(|| "NULL".into());
    let num = |x: Option<f64>| x.map_or("NULL".into(), |v| v.to_string());
    if s.lot != e.lot {
        push(out, "cycles", b, "lot", opt(&s.lot), opt(&e.lot));
    }
    if s.cycle_no != e.cycle_no {
        push(
            out,
            "cycles",
            b,
            "cycle_no",
            format!("{:?}", s.cycle_no),
            format!("{:?}", e.cycle_no),
        );
    }
    if s.started_at != e.started_at {
        push(
            out,
            "cycles",
            b,
            "started_at",
            opt(&s.started_at),
            opt(&e.started_at),
        );
    }
    for (i, col) in CYCLE_COLUMNS.iter().enumerate() {
        if s.values[i] != e.values[i] {
            push(out, "cycles", b, col, num(s.values[i]), num(e.values[i]));
        }
    }
    if s.conflicts != e.conflicts {
        push(out, "cycles", b, "conflicts", s.conflicts, e.conflicts);
    }
    if s.excluded != e.excluded {
        push(out, "cycles", b, "excluded", s.excluded, e.excluded);
    }
    if s.first_seq != e.first_seq {
        push(out, "cycles", b, "first_seq", s.first_seq, e.first_seq);
    }
}
