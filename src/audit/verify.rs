//! `verify`: walk the chain, then rebuild every record table from the event payloads and
//! compare it with what is stored. The first broken link is reported with what changed.

use std::collections::{BTreeMap, HashMap};

use serde::Serialize;

use crate::model::Payload;
use crate::model::chain::{GENESIS, event_hash};
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
}

impl VerifyReport {
    pub fn ok(&self) -> bool {
        self.findings.is_empty()
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

/// Verify the whole database.
pub fn verify(conn: &Connection) -> Result<VerifyReport> {
    let mut findings = Vec::new();
    let mut files: BTreeMap<i64, (FileRow, i64)> = BTreeMap::new();
    let mut measurements: BTreeMap<i64, (MeasurementRow, i64)> = BTreeMap::new();
    let mut lots: BTreeMap<String, (LotRecord, i64)> = BTreeMap::new();
    let mut excluded: HashMap<String, bool> = HashMap::new();
    let mut first_seq: HashMap<String, i64> = HashMap::new();

    // 1. The chain itself.
    let mut prev = GENESIS.to_string();
    let mut expected_seq = 1i64;
    let mut count = 0i64;
    let mut stopped = false;
    store::replay::for_each_event(conn, |e| {
        let store::replay::StoredEvent {
            seq,
            at,
            actor,
            kind,
            subject,
            payload: body,
            prev_hash,
            hash,
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
        let recomputed = event_hash(&prev, seq, &at, &actor, &kind, &subject, &body);
        if recomputed != hash {
            push(
                &mut findings,
                "events",
                seq,
                "hash",
                &hash,
                format!("{recomputed} (the event's content was altered)"),
            );
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
            Payload::Note { .. } | Payload::SignOff { .. } => {}
        }
        prev = hash;
        expected_seq += 1;
        Ok(true)
    })?;
    if stopped {
        return Ok(VerifyReport {
            events: count,
            head_hash: prev,
            findings,
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
        Some(n) if n > max_id => {}
        found => push(
            &mut findings,
            "id_counters",
            "measurement",
            "next",
            found.map_or("missing".to_string(), |n| n.to_string()),
            format!("more than {max_id}, the largest measurement id in the events"),
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

    Ok(VerifyReport {
        events: count,
        head_hash: prev,
        findings,
    })
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
