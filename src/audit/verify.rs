//! `verify`: walk the chain, then rebuild every record table from the event payloads and
//! compare it with what is stored. The first broken link is reported with what changed.

use std::collections::{BTreeMap, HashMap};

use serde::Serialize;

use crate::model::Payload;
use crate::model::chain::{
    ChainKey, GENESIS, Head, SIGN_OFF_KIND, event_hash, history_fingerprint, key_proof,
    keyed_event_hash,
};
use crate::model::cycle::{self as view, CYCLE_COLUMNS};
use crate::model::event::{FileRow, LotRecord, MeasurementRow};
use crate::store::records::{all_cycles, all_lots};
use crate::store::{self, Connection, Result};

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

/// A sign-off met in the walk: its event, lot, meaning and the fingerprint it signed.
struct SignOffSeen {
    seq: i64,
    lot: String,
    meaning: String,
    signed: String,
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

/// How the chain's links are checked: the keying as stored, and the key if given.
struct LinkRule<'a> {
    keying: Option<(i64, String)>,
    key: Option<&'a ChainKey>,
    unchecked: i64,
    switch_seen: bool,
}

impl LinkRule<'_> {
    /// Check one event's link; false when it is broken (a finding was pushed).
    fn check(
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
    fn switch(&mut self, out: &mut Vec<Finding>, seq: i64, prev: &str, proof: &str) {
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
    fn unchecked(&self, out: &mut Vec<Finding>) {
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
    fn finish(&self, out: &mut Vec<Finding>, events: i64) {
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

/// Each published head must be an event the chain still holds, with the same hash.
fn check_heads(out: &mut Vec<Finding>, heads: &[Head], seen: &HashMap<i64, String>) {
    for h in heads {
        match seen.get(&h.seq) {
            None => push(
                out,
                "events",
                h.seq,
                "(row)",
                "missing",
                format!("present: the published head {h} (newest events deleted)"),
            ),
            Some(hash) if *hash != h.hash => push(
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
}

fn push(
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
fn diff_rows<T: Serialize>(
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

/// Replay one measurement; an id given twice is a finding (ids are unique by construction,
/// and only the event log holds them now).
fn insert_measurement(
    findings: &mut Vec<Finding>,
    measurements: &mut BTreeMap<i64, (MeasurementRow, i64)>,
    m: MeasurementRow,
    seq: i64,
) {
    let id = m.id;
    if let Some((_, earlier)) = measurements.insert(id, (m, seq)) {
        push(
            findings,
            "measurements",
            id,
            "id",
            format!("written again by event {seq}"),
            format!("written once (first by event {earlier})"),
        );
    }
}

/// A row of `batch_sources`: an event wrote values of a batch from a file line.
#[derive(Debug, Clone, PartialEq, Serialize)]
struct SourceLink {
    batch_id: String,
    line: i64,
    source_file_id: Option<i64>,
}

impl SourceLink {
    fn key(&self, seq: i64) -> String {
        format!("{}/{seq}/{}", self.batch_id, self.line)
    }
}

/// Verify the whole database with no key and no published head.
pub fn verify(conn: &Connection) -> Result<VerifyReport> {
    verify_with(conn, &Witnesses::default())
}

/// Verify the whole database, checking keyed links with `w.key` and the heads `w.heads`.
pub fn verify_with(conn: &Connection, w: &Witnesses<'_>) -> Result<VerifyReport> {
    let mut findings = Vec::new();
    let mut rule = LinkRule {
        keying: store::events::keying(conn)?,
        key: w.key,
        unchecked: 0,
        switch_seen: false,
    };
    let head_seqs: std::collections::HashSet<i64> = w.heads.iter().map(|h| h.seq).collect();
    let mut head_hashes: HashMap<i64, String> = HashMap::new();
    let mut files: BTreeMap<i64, (FileRow, i64)> = BTreeMap::new();
    let mut measurements: BTreeMap<i64, (MeasurementRow, i64)> = BTreeMap::new();
    let mut lots: BTreeMap<String, (LotRecord, i64)> = BTreeMap::new();
    let mut excluded: HashMap<String, bool> = HashMap::new();
    let mut first_seq: HashMap<String, i64> = HashMap::new();
    let mut signoffs: Vec<SignOffSeen> = Vec::new();

    // 1. The chain itself.
    let mut prev = GENESIS.to_string();
    let mut expected_seq = 1i64;
    let mut count = 0i64;
    let mut stopped = false;
    store::replay::for_each_event(conn, |e| {
        if head_seqs.contains(&e.seq) {
            head_hashes.insert(e.seq, e.hash.clone());
        }
        if e.seq == expected_seq && e.prev_hash == prev && !rule.check(&mut findings, &e, &prev) {
            count += 1;
            stopped = true;
            return Ok(false);
        }
        let store::replay::StoredEvent {
            seq,
            kind,
            payload: body,
            prev_hash,
            hash,
            ..
        } = e;
        count += 1;
        if seq != expected_seq {
            push(
                &mut findings,
                "events",
                seq,
                "seq",
                seq,
                format!("{expected_seq} (an event is missing)"),
            );
            stopped = true;
            return Ok(false);
        }
        if prev_hash != prev {
            push(&mut findings, "events", seq, "prev_hash", &prev_hash, &prev);
            stopped = true;
            return Ok(false);
        }
        let payload: Payload = match serde_json::from_str(&body) {
            Ok(p) => p,
            Err(e) => {
                push(
                    &mut findings,
                    "events",
                    seq,
                    "payload",
                    "unreadable",
                    format!("a valid payload ({e})"),
                );
                stopped = true;
                return Ok(false);
            }
        };
        if payload.kind() != kind {
            push(&mut findings, "events", seq, "kind", &kind, payload.kind());
        }
        // 2. Replay what the event wrote.
        match payload {
            Payload::FileIngested {
                file,
                measurements: ms,
                lots: ls,
            } => {
                for m in ms {
                    first_seq.entry(m.batch_id.clone()).or_insert(seq);
                    insert_measurement(&mut findings, &mut measurements, m, seq);
                }
                for l in ls {
                    lots.insert(l.lot.clone(), (l, seq));
                }
                files.insert(file.id, (file, seq));
            }
            Payload::FileDuplicate { file, .. } | Payload::FileRejected { file } => {
                files.insert(file.id, (file, seq));
            }
            Payload::LotRegistered { lot, .. } => {
                lots.insert(lot.lot.clone(), (lot, seq));
            }
            Payload::Correction { measurement, .. } => {
                insert_measurement(&mut findings, &mut measurements, measurement, seq);
            }
            Payload::Exclusion {
                batch_id,
                excluded: ex,
                ..
            } => {
                excluded.insert(batch_id, ex);
            }
            Payload::ChainKeyed { key_proof, .. } => {
                rule.switch(&mut findings, seq, &prev, &key_proof);
            }
            Payload::SignOff {
                lot,
                meaning,
                signed_sha256,
                ..
            } => signoffs.push(SignOffSeen {
                seq,
                lot,
                meaning,
                signed: signed_sha256,
            }),
            Payload::Note { .. } | Payload::AlertAction { .. } => {}
        }
        prev = hash;
        expected_seq += 1;
        Ok(true)
    })?;
    if !stopped {
        rule.finish(&mut findings, count);
    }
    check_heads(&mut findings, &w.heads, &head_hashes);
    rule.unchecked(&mut findings);
    if stopped {
        return Ok(VerifyReport {
            events: count,
            head_hash: prev,
            findings,
            keyed_after: rule.keying.map(|k| k.0),
            unchecked_keyed_links: rule.unchecked,
            heads_checked: w.heads.len(),
            signoffs: Vec::new(),
            fits: None,
        });
    }

    // 3. Stored tables against the replay.
    let stored_files = store::replay::file_rows(conn)?;
    compare_keyed(
        &mut findings,
        "source_files",
        stored_files
            .into_iter()
            .map(|(f, s)| (f.id.to_string(), (f, s)))
            .collect(),
        files.into_iter().map(|(k, v)| (k.to_string(), v)).collect(),
    );

    // Measurement ids are counted in `id_counters`; the next one must lie past every id
    // the events hold, or a later value would take an id already given.
    let next_measurement = store::replay::next_measurement_id(conn)?;
    let max_id = measurements.keys().next_back().copied().unwrap_or(0);
    match next_measurement {
        Some(n) if n == max_id + 1 => {}
        found => push(
            &mut findings,
            "id_counters",
            "measurement",
            "next",
            found.map_or("missing".to_string(), |n| n.to_string()),
            format!(
                "{}, one past the largest measurement id in the events",
                max_id + 1
            ),
        ),
    }

    // Batches and their measurements, for the cycle views below, and the provenance links
    // the events imply: one per batch, event and file line (line 0 for a person's entry).
    let mut by_batch: BTreeMap<String, Vec<MeasurementRow>> = BTreeMap::new();
    let mut expected_links: BTreeMap<String, (SourceLink, i64)> = BTreeMap::new();
    for (m, seq) in measurements.values() {
        let link = SourceLink {
            batch_id: m.batch_id.clone(),
            line: m.line.unwrap_or(0),
            source_file_id: m.source_file_id,
        };
        expected_links.entry(link.key(*seq)).or_insert((link, *seq));
        by_batch
            .entry(m.batch_id.clone())
            .or_default()
            .push(m.clone());
    }
    let stored_links: Vec<(SourceLink, i64)> = store::replay::source_links(conn)?
        .into_iter()
        .map(|l| {
            (
                SourceLink {
                    batch_id: l.batch_id,
                    line: l.line,
                    source_file_id: l.source_file_id,
                },
                l.event_seq,
            )
        })
        .collect();
    compare_keyed(
        &mut findings,
        "batch_sources",
        stored_links
            .into_iter()
            .map(|(l, s)| (l.key(s), (l, s)))
            .collect(),
        expected_links,
    );

    let stored_lots: BTreeMap<String, (LotRecord, i64)> = {
        let seqs: HashMap<String, i64> = store::replay::lot_event_seqs(conn)?;
        all_lots(conn)?
            .into_iter()
            .map(|l| {
                let s = seqs.get(&l.lot).copied().unwrap_or(-1);
                (l.lot.clone(), (l, s))
            })
            .collect()
    };
    compare_keyed(&mut findings, "lots", stored_lots, lots);

    let stored_cycles: BTreeMap<String, view::CycleView> = all_cycles(conn)?
        .into_iter()
        .map(|c| (c.batch_id.clone(), c))
        .collect();
    for (batch, ms) in &by_batch {
        let expected = view::derive_cycle(
            batch,
            ms,
            excluded.get(batch).copied().unwrap_or(false),
            first_seq.get(batch).copied().unwrap_or(0),
        );
        match stored_cycles.get(batch) {
            None => push(
                &mut findings,
                "cycles",
                batch,
                "(row)",
                "missing",
                "present",
            ),
            Some(s) => diff_cycle(&mut findings, s, &expected),
        }
    }
    for batch in stored_cycles.keys().filter(|b| !by_batch.contains_key(*b)) {
        push(
            &mut findings,
            "cycles",
            batch,
            "(row)",
            "present",
            "absent (no event wrote it)",
        );
    }

    check_conditions(conn, &mut findings)?;

    Ok(VerifyReport {
        events: count,
        head_hash: prev,
        findings,
        keyed_after: rule.keying.map(|k| k.0),
        unchecked_keyed_links: rule.unchecked,
        heads_checked: w.heads.len(),
        signoffs: signoff_coverage(conn, signoffs)?,
        fits: None,
    })
}

/// Each alert condition against what its messages in the outbox imply: every change of a
/// condition queues one message in the same transaction, so the newest message of a key
/// gives its state, severity and episode, the message that opened the episode its thread,
/// and its time the condition's. (Both tables can still be edited alike: the outbox is not
/// in the events.)
fn check_conditions(conn: &Connection, findings: &mut Vec<Finding>) -> Result<()> {
    use store::replay::ConditionRow;
    let mut implied: BTreeMap<String, (ConditionRow, i64)> = BTreeMap::new();
    for m in store::replay::alert_messages(conn)? {
        let thread = match implied.get(&m.alert_key) {
            Some((c, _)) if m.state != "open" => c.thread_message_id.clone(),
            _ => m.message_id.clone(),
        };
        let row = ConditionRow {
            rule: m.rule,
            lot: m.lot,
            state: m.state,
            severity: m.severity,
            episode: m.episode,
            thread_message_id: thread,
            changed_at: m.queued_at,
        };
        implied.insert(m.alert_key, (row, m.id));
    }
    let stored: BTreeMap<String, ConditionRow> =
        store::replay::alert_conditions(conn)?.into_iter().collect();
    for (key, (expected, id)) in &implied {
        match stored.get(key) {
            None => push(
                findings,
                "alert_condition",
                key,
                "(row)",
                "missing",
                format!("present (outbox message {id} records it)"),
            ),
            Some(s) => diff_rows(findings, "alert_condition", key, s, expected),
        }
    }
    for key in stored.keys().filter(|k| !implied.contains_key(*k)) {
        push(
            findings,
            "alert_condition",
            key,
            "(row)",
            "present",
            "absent (no outbox message records it)",
        );
    }
    Ok(())
}

fn diff_cycle(out: &mut Vec<Finding>, s: &view::CycleView, e: &view::CycleView) {
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

fn compare_keyed<T: Serialize>(
    out: &mut Vec<Finding>,
    table: &str,
    stored: BTreeMap<String, (T, i64)>,
    expected: BTreeMap<String, (T, i64)>,
) {
    for (k, (e, eseq)) in &expected {
        match stored.get(k) {
            None => push(out, table, k, "(row)", "missing", "present"),
            Some((s, sseq)) => {
                diff_rows(out, table, k, s, e);
                if sseq != eseq {
                    push(out, table, k, "event_seq", sseq, eseq);
                }
            }
        }
    }
    for k in stored.keys().filter(|k| !expected.contains_key(*k)) {
        push(
            out,
            table,
            k,
            "(row)",
            "present",
            "absent (no event wrote it)",
        );
    }
}
