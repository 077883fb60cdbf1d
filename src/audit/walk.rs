//! The streaming replay behind `verify`: the events are walked once, in stretches of a
//! few hundred, and the rows each stretch wrote are read back by event and compared at
//! once; then the cycles are rebuilt batch by batch from the events that wrote their
//! values. Memory holds one stretch, one batch and the few per-lot or per-person things
//! (lots, exclusions, sign-offs, the outbox), never a whole table of records.

use std::collections::{BTreeMap, BTreeSet, HashMap, VecDeque};
use std::rc::Rc;

use serde::Serialize;

use super::check::{Finding, LinkRule, SignOffSeen, diff_cycle, diff_rows, push};
use super::outbox::OutboxReplay;
use crate::model::Payload;
use crate::model::cycle as view;
use crate::model::event::{FileRow, LotRecord, MeasurementRow};
use crate::store::replay::StoredEvent;
use crate::store::{self, Connection, Result};

/// Events per stretch: the rows they wrote are read back in one query per table.
const STRETCH_EVENTS: usize = 512;
/// Expected rows per stretch before it is compared early (a few large files).
const STRETCH_ROWS: usize = 20_000;
/// Parsed events kept for rebuilding cycles: a file of many batches is parsed once.
const PARSED_KEPT: usize = 16;
/// Rows of older parsed events kept beside the newest (about 200 bytes each).
const PARSED_ROWS_KEPT: usize = 16_384;

/// A row of `batch_sources`: an event wrote values of a batch from a file line.
#[derive(Debug, Clone, PartialEq, Serialize)]
struct SourceLink {
    batch_id: String,
    line: i64,
    source_file_id: Option<i64>,
}

fn link_key(batch: &str, seq: i64, line: i64) -> String {
    format!("{batch}/{seq}/{line}")
}

/// Measurement ids met so far, as a bitset over the id range (ids come from a counter,
/// so it is dense): a few bits a value where a set of ids took dozens of bytes.
#[derive(Debug, Default)]
struct IdSet {
    base: Option<i64>,
    bits: Vec<u64>,
    below: BTreeSet<i64>,
    max: Option<i64>,
}

impl IdSet {
    /// Insert `id`; false when it was there already.
    fn insert(&mut self, id: i64) -> bool {
        self.max = Some(self.max.map_or(id, |m| m.max(id)));
        let base = *self.base.get_or_insert(id);
        if id < base {
            return self.below.insert(id);
        }
        let off = usize::try_from(id - base).unwrap_or(usize::MAX);
        let (word, bit) = (off / 64, off % 64);
        if word >= self.bits.len() {
            if word > (1 << 28) {
                return self.below.insert(id);
            }
            self.bits.resize(word + 1, 0);
        }
        let was = self.bits[word] & (1 << bit) != 0;
        self.bits[word] |= 1 << bit;
        !was
    }
}

/// The state of one walk over the events after `from` (0: all of them).
pub(super) struct Walk<'c, 'k> {
    conn: &'c Connection,
    pub(super) findings: Vec<Finding>,
    pub(super) rule: LinkRule<'k>,
    pub(super) from: i64,
    pub(super) prev: String,
    expected_seq: i64,
    pub(super) count: i64,
    pub(super) stopped: bool,
    stretch_lo: i64,
    stretch_events: usize,
    files: BTreeMap<i64, (FileRow, i64)>,
    links: BTreeMap<String, (SourceLink, i64)>,
    ids: IdSet,
    lots: BTreeMap<String, (LotRecord, i64)>,
    excluded: HashMap<String, bool>,
    /// Batches whose values or exclusion the walked events wrote (kept for a partial walk).
    touched: BTreeSet<String>,
    pub(super) signoffs: Vec<SignOffSeen>,
    outbox: OutboxReplay,
    /// Large files whose `file-rows` parts were met but not yet their `file-ingested`
    /// event, with the first part's event and the parts met. At the end, only a file
    /// listed in `files_in_progress` (being stored, or stopped and to be resumed) may be
    /// left, with the parts its row counts.
    open_parts: BTreeMap<i64, (i64, i64)>,
}

impl<'c, 'k> Walk<'c, 'k> {
    pub(super) fn new(conn: &'c Connection, rule: LinkRule<'k>, from: i64, prev: String) -> Self {
        Walk {
            conn,
            findings: Vec::new(),
            rule,
            from,
            prev,
            expected_seq: from + 1,
            count: 0,
            stopped: false,
            stretch_lo: from + 1,
            stretch_events: 0,
            files: BTreeMap::new(),
            links: BTreeMap::new(),
            ids: IdSet::default(),
            lots: BTreeMap::new(),
            excluded: HashMap::new(),
            touched: BTreeSet::new(),
            signoffs: Vec::new(),
            outbox: OutboxReplay::default(),
            open_parts: BTreeMap::new(),
        }
    }

    fn full(&self) -> bool {
        self.from == 0
    }

    /// Walk every event after `from`.
    pub(super) fn run(&mut self) -> Result<()> {
        let conn = self.conn;
        store::replay::for_each_event_after(conn, self.from, |e| self.event(e))?;
        if !self.stopped {
            self.flush()?;
        }
        Ok(())
    }

    /// Check one event's link and replay what it wrote; false stops the walk.
    fn event(&mut self, e: StoredEvent) -> Result<bool> {
        self.count += 1;
        if e.seq != self.expected_seq {
            let expected = self.expected_seq;
            push(
                &mut self.findings,
                "events",
                e.seq,
                "seq",
                e.seq,
                format!("{expected} (an event is missing)"),
            );
            self.stopped = true;
            return Ok(false);
        }
        if e.prev_hash != self.prev {
            push(
                &mut self.findings,
                "events",
                e.seq,
                "prev_hash",
                &e.prev_hash,
                &self.prev,
            );
            self.stopped = true;
            return Ok(false);
        }
        if !self.rule.check(&mut self.findings, &e, &self.prev) {
            self.stopped = true;
            return Ok(false);
        }
        let payload: Payload = match Payload::from_json(&e.payload) {
            Ok(p) => p,
            Err(err) => {
                push(
                    &mut self.findings,
                    "events",
                    e.seq,
                    "payload",
                    "unreadable",
                    format!("a valid payload ({err})"),
                );
                self.stopped = true;
                return Ok(false);
            }
        };
        if payload.kind() != e.kind {
            push(
                &mut self.findings,
                "events",
                e.seq,
                "kind",
                &e.kind,
                payload.kind(),
            );
        }
        self.replay(e.seq, payload)?;
        self.prev = e.hash;
        self.expected_seq += 1;
        self.stretch_events += 1;
        if self.stretch_events >= STRETCH_EVENTS || self.links.len() >= STRETCH_ROWS {
            self.flush()?;
        }
        Ok(true)
    }

    fn measurement(&mut self, m: &MeasurementRow, seq: i64) {
        if !self.ids.insert(m.id) {
            push(
                &mut self.findings,
                "measurements",
                m.id,
                "id",
                format!("written again by event {seq}"),
                "written once",
            );
        }
        let line = m.line.unwrap_or(0);
        self.links
            .entry(link_key(&m.batch_id, seq, line))
            .or_insert_with(|| {
                (
                    SourceLink {
                        batch_id: m.batch_id.clone(),
                        line,
                        source_file_id: m.source_file_id,
                    },
                    seq,
                )
            });
        if !self.full() && !self.touched.contains(&m.batch_id) {
            self.touched.insert(m.batch_id.clone());
        }
    }

    /// What one event wrote, into the stretch's expected rows and the walk's state.
    fn replay(&mut self, seq: i64, payload: Payload) -> Result<()> {
        match payload {
            Payload::FileIngested {
                file,
                measurements,
                lots,
            } => {
                for m in &measurements {
                    self.measurement(m, seq);
                }
                for l in lots {
                    self.lots.insert(l.lot.clone(), (l, seq));
                }
                self.open_parts.remove(&file.id);
                self.files.insert(file.id, (file, seq));
            }
            Payload::FileRows {
                file_id,
                measurements,
                ..
            } => {
                for m in &measurements {
                    self.measurement(m, seq);
                    if m.source_file_id != Some(file_id) {
                        push(
                            &mut self.findings,
                            "events",
                            seq,
                            "source_file_id",
                            format!("{:?} in measurement {}", m.source_file_id, m.id),
                            format!("{file_id}, the file the part belongs to"),
                        );
                    }
                }
                self.open_parts.entry(file_id).or_insert((seq, 0)).1 += 1;
            }
            Payload::FileDuplicate { file, .. } | Payload::FileRejected { file } => {
                self.files.insert(file.id, (file, seq));
            }
            Payload::LotRegistered { lot, .. } => {
                self.lots.insert(lot.lot.clone(), (lot, seq));
            }
            Payload::Correction { measurement, .. } => self.measurement(&measurement, seq),
            Payload::Exclusion {
                batch_id, excluded, ..
            } => {
                if !self.full() {
                    self.touched.insert(batch_id.clone());
                }
                self.excluded.insert(batch_id, excluded);
            }
            Payload::ChainKeyed { key_proof, .. } => {
                self.rule
                    .switch(&mut self.findings, seq, &self.prev, &key_proof);
            }
            Payload::SignOff {
                lot,
                meaning,
                signed_sha256,
                ..
            } => self.signoffs.push(SignOffSeen {
                seq,
                lot,
                meaning,
                signed: signed_sha256,
            }),
            Payload::AlertQueued(q) => self.outbox.queued(seq, q),
            Payload::MailOutcome(d) => self.outbox.outcome(&mut self.findings, seq, d),
            Payload::OutboxChained {
                first_outbox_id,
                legacy_rows,
            } => self
                .outbox
                .marker(&mut self.findings, seq, first_outbox_id, legacy_rows),
            Payload::Note { .. } | Payload::AlertAction { .. } => {}
        }
        Ok(())
    }

    /// Compare the rows the stretch's events wrote with the stored ones, and start the
    /// next stretch.
    fn flush(&mut self) -> Result<()> {
        let (lo, hi) = (self.stretch_lo, self.expected_seq - 1);
        if hi >= lo {
            let stored = store::replay::file_rows_between(self.conn, lo, hi)?;
            let expected = std::mem::take(&mut self.files);
            compare_keyed(
                &mut self.findings,
                "source_files",
                stored
                    .into_iter()
                    .map(|(f, s)| (f.id.to_string(), (f, s)))
                    .collect(),
                expected
                    .into_iter()
                    .map(|(k, v)| (k.to_string(), v))
                    .collect(),
            );
            let stored: BTreeMap<String, (SourceLink, i64)> =
                store::replay::links_between(self.conn, lo, hi)?
                    .into_iter()
                    .map(|l| {
                        (
                            link_key(&l.batch_id, l.event_seq, l.line),
                            (
                                SourceLink {
                                    batch_id: l.batch_id,
                                    line: l.line,
                                    source_file_id: l.source_file_id,
                                },
                                l.event_seq,
                            ),
                        )
                    })
                    .collect();
            let expected = std::mem::take(&mut self.links);
            compare_keyed(&mut self.findings, "batch_sources", stored, expected);
        }
        self.stretch_lo = self.expected_seq;
        self.stretch_events = 0;
        Ok(())
    }

    /// After the walk: rows no walked event can have written, the id counter, the lots,
    /// the cycles and the outbox.
    pub(super) fn finish(mut self) -> Result<(Vec<Finding>, Vec<SignOffSeen>)> {
        let head = self.expected_seq - 1;
        let out = &mut self.findings;
        store::replay::file_rows_outside(self.conn, head, |f, s| {
            push(
                out,
                "source_files",
                f.id,
                "(row)",
                format!(
                    "present (event_seq {})",
                    s.map_or("NULL".into(), |s| s.to_string())
                ),
                "absent (no event wrote it)",
            );
        })?;
        store::replay::links_outside(self.conn, head, |l| {
            push(
                out,
                "batch_sources",
                link_key(&l.batch_id, l.event_seq, l.line),
                "(row)",
                "present",
                "absent (no event wrote it)",
            );
        })?;
        self.check_open_parts()?;
        self.check_counter()?;
        self.check_lots()?;
        self.check_cycles()?;
        let outbox = std::mem::take(&mut self.outbox);
        let (full, from) = (self.full(), self.from);
        outbox.compare(self.conn, &mut self.findings, full, from)?;
        Ok((self.findings, self.signoffs))
    }

    /// Parts with no closing event after them: a file in progress, with as many parts as
    /// its progress row counts (a partial walk sees only the parts after its start).
    fn check_open_parts(&mut self) -> Result<()> {
        let listed: BTreeMap<i64, i64> = store::records::files_in_progress(self.conn)?
            .into_iter()
            .map(|f| (f.file_id, f.parts))
            .collect();
        let open = std::mem::take(&mut self.open_parts);
        for (file_id, parts) in &listed {
            if self.full() && *parts > 0 && !open.contains_key(file_id) {
                push(
                    &mut self.findings,
                    "files_in_progress",
                    file_id,
                    "parts",
                    parts,
                    "0: no part of the file is in the events",
                );
            }
        }
        for (file_id, (seq, met)) in open {
            match listed.get(&file_id) {
                Some(parts) if *parts == met || (!self.full() && *parts > met) => {}
                Some(parts) => push(
                    &mut self.findings,
                    "files_in_progress",
                    file_id,
                    "parts",
                    parts,
                    format!("{met}, the parts its events hold"),
                ),
                None => push(
                    &mut self.findings,
                    "events",
                    seq,
                    "file_id",
                    format!("a part of file {file_id} with no file-ingested event after it"),
                    "the file's file-ingested event after its parts, or the file in progress",
                ),
            }
        }
        Ok(())
    }

    /// Measurement ids are counted in `id_counters`; the next one must lie past every id
    /// the events hold, or a later value would take an id already given. A partial walk
    /// checks it when its events gave ids (the newest ids are theirs).
    fn check_counter(&mut self) -> Result<()> {
        let max_id = self.ids.max.unwrap_or(0);
        if !self.full() && self.ids.max.is_none() {
            return Ok(());
        }
        match store::replay::next_measurement_id(self.conn)? {
            Some(n) if n == max_id + 1 => {}
            found => push(
                &mut self.findings,
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
        Ok(())
    }

    fn check_lots(&mut self) -> Result<()> {
        let expected = std::mem::take(&mut self.lots);
        if self.full() {
            let seqs: HashMap<String, i64> = store::replay::lot_event_seqs(self.conn)?;
            let stored = store::records::all_lots(self.conn)?
                .into_iter()
                .map(|l| {
                    let s = seqs.get(&l.lot).copied().unwrap_or(-1);
                    (l.lot.clone(), (l, s))
                })
                .collect();
            compare_keyed(&mut self.findings, "lots", stored, expected);
            return Ok(());
        }
        for (name, (e, eseq)) in &expected {
            match store::replay::lot_row(self.conn, name)? {
                None => push(
                    &mut self.findings,
                    "lots",
                    name,
                    "(row)",
                    "missing",
                    "present",
                ),
                Some((s, sseq)) => {
                    diff_rows(&mut self.findings, "lots", name, &s, e);
                    if sseq != *eseq {
                        push(&mut self.findings, "lots", name, "event_seq", sseq, eseq);
                    }
                }
            }
        }
        Ok(())
    }

    /// Each cycle row rebuilt from the events that wrote its batch's values: every batch
    /// on a full walk, the batches the walked events touched on a partial one.
    fn check_cycles(&mut self) -> Result<()> {
        let conn = self.conn;
        let mut parsed = ParsedEvents::default();
        let mut out = std::mem::take(&mut self.findings);
        if self.full() {
            let excluded = &self.excluded;
            store::replay::for_each_batch(conn, |batch, stored, seqs| {
                let ex = excluded.get(batch).copied().unwrap_or(false);
                check_batch(conn, &mut parsed, &mut out, batch, stored, seqs, ex)
            })?;
        } else {
            for batch in std::mem::take(&mut self.touched) {
                let seqs = store::replay::batch_event_seqs(conn, &batch)?;
                let stored = store::replay::cycle_row(conn, &batch)?;
                let ex = match self.excluded.get(&batch) {
                    Some(ex) => *ex,
                    None => stored_exclusion(conn, &batch)?,
                };
                check_batch(conn, &mut parsed, &mut out, &batch, stored, &seqs, ex)?;
            }
        }
        self.findings = out;
        Ok(())
    }
}

/// The measurements of a parsed event and whether it was a file's (which sets a cycle's
/// first sight), with each batch's rows found by its id: a part of a large export holds
/// 2,048 batches, and scanning its 20,000 rows for each of them made `verify` quadratic.
struct Parsed {
    from_file: bool,
    rows: Vec<MeasurementRow>,
    by_batch: HashMap<String, Vec<usize>>,
}

impl Parsed {
    fn new(from_file: bool, rows: Vec<MeasurementRow>) -> Self {
        let mut by_batch: HashMap<String, Vec<usize>> = HashMap::new();
        for (i, m) in rows.iter().enumerate() {
            match by_batch.get_mut(m.batch_id.as_str()) {
                Some(v) => v.push(i),
                None => {
                    by_batch.insert(m.batch_id.clone(), vec![i]);
                }
            }
        }
        Parsed {
            from_file,
            rows,
            by_batch,
        }
    }

    /// The rows of `batch`, in the event's order.
    fn rows_of<'a>(&'a self, batch: &str) -> impl Iterator<Item = &'a MeasurementRow> + 'a {
        self.by_batch
            .get(batch)
            .into_iter()
            .flatten()
            .filter_map(|&i| self.rows.get(i))
    }
}

/// The few events parsed last: at most [`PARSED_KEPT`] events and, beyond the newest,
/// [`PARSED_ROWS_KEPT`] rows (a large export's parts are thousands of rows each).
#[derive(Default)]
struct ParsedEvents(VecDeque<(i64, Rc<Parsed>)>);

impl ParsedEvents {
    fn get(&mut self, conn: &Connection, seq: i64) -> Result<Rc<Parsed>> {
        if let Some((_, p)) = self.0.iter().find(|(s, _)| *s == seq) {
            return Ok(Rc::clone(p));
        }
        let payload = store::replay::event_payload(conn, seq)?
            .and_then(|(_, body)| Payload::from_json(&body).ok());
        let p = Rc::new(match payload {
            Some(
                Payload::FileIngested { measurements, .. } | Payload::FileRows { measurements, .. },
            ) => Parsed::new(true, measurements),
            Some(Payload::Correction { measurement, .. }) => Parsed::new(false, vec![measurement]),
            _ => Parsed::new(false, Vec::new()),
        });
        let mut rows: usize = self.0.iter().map(|(_, p)| p.rows.len()).sum();
        while !self.0.is_empty() && (self.0.len() >= PARSED_KEPT || rows > PARSED_ROWS_KEPT) {
            if let Some((_, old)) = self.0.pop_front() {
                rows -= old.rows.len();
            }
        }
        self.0.push_back((seq, Rc::clone(&p)));
        Ok(p)
    }
}

/// Rebuild one batch's cycle from the events `seqs` and compare it with `stored`.
fn check_batch(
    conn: &Connection,
    parsed: &mut ParsedEvents,
    out: &mut Vec<Finding>,
    batch: &str,
    stored: Option<view::CycleView>,
    seqs: &[i64],
    excluded: bool,
) -> Result<()> {
    let mut rows: BTreeMap<i64, MeasurementRow> = BTreeMap::new();
    let mut first_seq = None;
    for &seq in seqs {
        let p = parsed.get(conn, seq)?;
        for m in p.rows_of(batch) {
            if p.from_file && first_seq.is_none() {
                first_seq = Some(seq);
            }
            rows.insert(m.id, m.clone());
        }
    }
    if rows.is_empty() {
        if let Some(s) = stored {
            push(
                out,
                "cycles",
                &s.batch_id,
                "(row)",
                "present",
                "absent (no event wrote it)",
            );
        }
        return Ok(());
    }
    let ms: Vec<MeasurementRow> = rows.into_values().collect();
    let expected = view::derive_cycle(batch, &ms, excluded, first_seq.unwrap_or(0));
    match stored {
        None => push(out, "cycles", batch, "(row)", "missing", "present"),
        Some(s) => diff_cycle(out, &s, &expected),
    }
    Ok(())
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

/// A batch's exclusion as its newest exclusion event left it (events before a partial
/// walk's start were verified before).
fn stored_exclusion(conn: &Connection, batch: &str) -> Result<bool> {
    Ok(store::replay::last_exclusion(conn, batch)?
        .and_then(|body| Payload::from_json(&body).ok())
        .is_some_and(|p| matches!(p, Payload::Exclusion { excluded: true, .. })))
}
