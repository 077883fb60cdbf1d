//! Writes and reads of the records. Each public write is one unit of work in the caller's
//! transaction: one event of the audit chain plus exactly the rows that event describes.

use std::borrow::Cow;
use std::collections::{BTreeSet, HashMap};
use std::sync::LazyLock;

use rusqlite::{OptionalExtension, Transaction, params};
use serde::Serialize;

use super::{Result, StoreError};
use crate::ingest::{CycleRow, LotRow, ParsedFile};
use crate::model::Payload;
use crate::model::Quantity;
use crate::model::cycle::{
    self as view, ATTR_CYCLE_NO, ATTR_FEED_LOT, ATTR_LOT, ATTR_STARTED_AT, CYCLE_COLUMNS, CycleView,
};
use crate::model::event::{
    FileIngestedRef, FileRow, FileRowRef, FileRowsRef, LotRecord, MeasurementRow,
};

/// What the shell knows of a file before it is parsed.
#[derive(Debug, Clone)]
pub struct FileFacts {
    pub path: String,
    pub sha256: String,
    pub size: i64,
    pub mtime: Option<String>,
    pub profile: Option<String>,
    pub site: Option<String>,
    pub seen_at: String,
}

/// What storing one file did.
#[derive(Debug, Clone, Default, Serialize)]
pub struct StoredFile {
    pub file_id: i64,
    pub event_seq: i64,
    pub rows_new: i64,
    pub rows_known: i64,
    pub rows_conflict: i64,
    /// Lots whose records changed (their metrics and fits must be recomputed).
    pub lots_touched: BTreeSet<String>,
    /// Conflicts, as sentences for the user (batch, field, stored vs new, line).
    pub conflicts: Vec<String>,
}

/// The statements run for every stored file, prepared once per transaction by a writer
/// that stores many files in it (the connection's statement cache costs a lookup and a
/// copy of the SQL text per use).
struct FileStatements<'c> {
    event: rusqlite::Statement<'c>,
    file: rusqlite::Statement<'c>,
    source: rusqlite::Statement<'c>,
    cycle_get: rusqlite::Statement<'c>,
    cycle_put: rusqlite::Statement<'c>,
    /// What the rows written change in the kept totals, added by [`FileWriter::finish`].
    tally: super::totals::Tally,
    /// The rows of the last event of many rows read back, by batch (see
    /// [`stored_measurements`]).
    parsed: Option<(i64, HashMap<String, Vec<MeasurementRow>>)>,
}

impl<'c> FileStatements<'c> {
    fn prepare(conn: &'c rusqlite::Connection) -> Result<Self> {
        Ok(FileStatements {
            event: conn.prepare(crate::store::events::INSERT_EVENT)?,
            file: conn.prepare(INSERT_FILE)?,
            source: conn.prepare(INSERT_SOURCE)?,
            cycle_get: conn.prepare(&SELECT_CYCLE)?,
            cycle_put: conn.prepare(&UPSERT_CYCLE)?,
            tally: super::totals::Tally::default(),
            parsed: None,
        })
    }
}

/// A large file while its chunks are stored (see [`FileWriter::begin_large`]), each chunk
/// in a transaction of its own; its progress is kept in `files_in_progress` so that the
/// file resumes after its last stored chunk when offered again.
#[derive(Debug)]
pub struct LargeFile {
    /// Parts (`file-rows` events) written so far.
    part: i64,
    /// Chunks of rows stored so far (a chunk that brings nothing new writes no part).
    chunks_done: i64,
    /// Rows a chunk holds: a resumed file is read in the chunks it began with.
    chunk_rows: usize,
    /// The totals so far; `file_id` is the file's.
    out: StoredFile,
}

impl LargeFile {
    /// The id the file's row will have.
    pub fn file_id(&self) -> i64 {
        self.out.file_id
    }

    /// Chunks of rows stored so far: a resumed file skips these.
    pub fn chunks_done(&self) -> i64 {
        self.chunks_done
    }

    /// Parts (`file-rows` events) written so far.
    pub fn parts(&self) -> i64 {
        self.part
    }

    /// Rows a chunk holds.
    pub fn chunk_rows(&self) -> usize {
        self.chunk_rows
    }
}

/// The large file with this content whose storing began and did not end, if any.
pub fn large_in_progress(conn: &rusqlite::Connection, sha256: &str) -> Result<Option<LargeFile>> {
    let row = conn
        .prepare_cached(
            "SELECT file_id, chunks_done, parts, rows_new, rows_known, rows_conflict, lots,
                 chunk_rows
             FROM files_in_progress WHERE sha256 = ?1",
        )?
        .query_row([sha256], |r| {
            Ok((
                LargeFile {
                    part: r.get(2)?,
                    chunks_done: r.get(1)?,
                    chunk_rows: usize::try_from(r.get::<_, i64>(7)?).unwrap_or(1).max(1),
                    out: StoredFile {
                        file_id: r.get(0)?,
                        rows_new: r.get(3)?,
                        rows_known: r.get(4)?,
                        rows_conflict: r.get(5)?,
                        ..Default::default()
                    },
                },
                r.get::<_, String>(6)?,
            ))
        })
        .optional()?;
    let Some((mut large, lots)) = row else {
        return Ok(None);
    };
    large.out.lots_touched = serde_json::from_str(&lots)?;
    Ok(Some(large))
}

/// A large file's progress row was not as this writer left it: another writer (a second
/// process offered the same content) stores it, and this one stops.
fn not_in_progress(large: &LargeFile) -> StoreError {
    StoreError::Invalid(format!(
        "large file {} is not listed in progress after {} chunks; another writer may be storing it",
        large.out.file_id, large.chunks_done
    ))
}

/// A large file whose storing began and did not end: its id, path and parts so far.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FileInProgress {
    pub file_id: i64,
    pub path: String,
    pub parts: i64,
    pub chunks_done: i64,
}

/// Every large file whose storing began and did not end, by id.
pub fn files_in_progress(conn: &rusqlite::Connection) -> Result<Vec<FileInProgress>> {
    let mut stmt = conn.prepare_cached(
        "SELECT file_id, path, parts, chunks_done FROM files_in_progress ORDER BY file_id",
    )?;
    let rows = stmt
        .query_map([], |r| {
            Ok(FileInProgress {
                file_id: r.get(0)?,
                path: r.get(1)?,
                parts: r.get(2)?,
                chunks_done: r.get(3)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// Writes the records of many files in one transaction, as a backfill's writer does:
/// the statements prepared once and the ids counted once, not looked up per file. Call
/// [`FileWriter::finish`] before the transaction commits.
pub struct FileWriter<'t, 'c> {
    tx: &'t Transaction<'c>,
    st: FileStatements<'t>,
    ids: NextIds,
}

impl<'t, 'c> FileWriter<'t, 'c> {
    pub fn new(tx: &'t Transaction<'c>) -> Result<Self> {
        Ok(FileWriter {
            tx,
            st: FileStatements::prepare(tx)?,
            ids: NextIds::default(),
        })
    }

    /// Record a file whose content was ingested before (as file `of_file_id`).
    pub fn duplicate(&mut self, facts: &FileFacts, of_file_id: i64, actor: &str) -> Result<i64> {
        record_duplicate(self.tx, &mut self.ids, facts, of_file_id, actor)
    }

    /// Record a file that could not be read, with its error and where it was quarantined.
    pub fn rejected(
        &mut self,
        facts: &FileFacts,
        error: &str,
        quarantined: Option<&str>,
        actor: &str,
    ) -> Result<i64> {
        record_rejected(self.tx, &mut self.ids, facts, error, quarantined, actor)
    }

    /// Store the records of one parsed file.
    pub fn parsed(
        &mut self,
        facts: &FileFacts,
        parsed: &ParsedFile,
        actor: &str,
    ) -> Result<StoredFile> {
        record_parsed_in(self.tx, &mut self.st, &mut self.ids, facts, parsed, actor)
    }

    /// Begin storing a large file whose rows come in chunks ([`FileWriter::large_part`],
    /// then [`FileWriter::end_large`], each in this or a later transaction). Its values go
    /// into a run of `file-rows` events, one per chunk, so that no payload holds the whole
    /// file; its id is taken now and the file listed in `files_in_progress` until it ends.
    pub fn begin_large(&mut self, facts: &FileFacts, chunk_rows: usize) -> Result<LargeFile> {
        let file_id = self.ids.take_file(self.tx)?;
        let chunk_rows = chunk_rows.max(1);
        self.tx
            .prepare_cached(
                "INSERT INTO files_in_progress(file_id, sha256, path, chunk_rows, chunks_done,
                     parts, started_at)
                 VALUES (?1, ?2, ?3, ?4, 0, 0, ?5)",
            )?
            .execute(params![
                file_id,
                facts.sha256,
                facts.path,
                chunk_rows as i64,
                facts.seen_at
            ])?;
        Ok(LargeFile {
            part: 0,
            chunks_done: 0,
            chunk_rows,
            out: StoredFile {
                file_id,
                ..Default::default()
            },
        })
    }

    /// Record how far a large file is stored (its chunks, parts and totals so far), in
    /// the transaction that stored its last chunk.
    fn save_progress(&mut self, large: &LargeFile) -> Result<()> {
        let out = &large.out;
        let lots = serde_json::to_string(&out.lots_touched)?;
        let changed = self
            .tx
            .prepare_cached(
                "UPDATE files_in_progress SET chunks_done = ?2, parts = ?3, rows_new = ?4,
                     rows_known = ?5, rows_conflict = ?6, lots = ?7,
                     last_seq = COALESCE(?8, last_seq)
                 WHERE file_id = ?1 AND chunks_done = ?2 - 1",
            )?
            .execute(params![
                out.file_id,
                large.chunks_done,
                large.part,
                out.rows_new,
                out.rows_known,
                out.rows_conflict,
                lots,
                (out.event_seq > 0).then_some(out.event_seq),
            ])?;
        if changed != 1 {
            return Err(not_in_progress(large));
        }
        Ok(())
    }

    /// Store one chunk of a large file's rows: their new and conflicting values in one
    /// `file-rows` event (none when the chunk brings nothing new), their provenance and
    /// the cycles they change.
    pub fn large_part(
        &mut self,
        large: &mut LargeFile,
        facts: &FileFacts,
        rows: &[CycleRow],
        actor: &str,
    ) -> Result<()> {
        large.chunks_done += 1;
        self.large_rows(large, facts, rows, actor)?;
        self.save_progress(large)
    }

    /// The rows of one chunk: a `file-rows` event when they bring anything new.
    fn large_rows(
        &mut self,
        large: &mut LargeFile,
        facts: &FileFacts,
        rows: &[CycleRow],
        actor: &str,
    ) -> Result<()> {
        let out = &mut large.out;
        let first_new = self.ids.first_measurement(self.tx)?;
        let mut next_m = first_new;
        let batches = merge_cycle_rows(self.tx, &mut self.st, rows, out.file_id, &mut next_m, out)?;
        let new_measurements = new_rows(&batches, first_new, next_m);
        if new_measurements.is_empty() {
            return Ok(());
        }
        large.part += 1;
        let mut body = Vec::with_capacity(64 + 128 * new_measurements.len());
        serde_json::to_writer(
            &mut body,
            &FileRowsRef {
                file_id: out.file_id,
                part: large.part,
                measurements: &new_measurements,
            },
        )?;
        let body = String::from_utf8(body).map_err(|e| StoreError::Invalid(e.to_string()))?;
        let seq = crate::store::events::append_prepared(
            self.tx,
            &mut self.st.event,
            &mut self.ids.head,
            &facts.seen_at,
            actor,
            &facts.path,
            "file-rows",
            &body,
        )?;
        self.ids.measurements_to(next_m);
        insert_sources(&mut self.st.source, &new_measurements, seq)?;
        out.event_seq = seq;
        write_cycles(&mut self.st, &batches, first_new, seq, out)
    }

    /// Close a large file: its `file-ingested` event (the file's row with its totals; its
    /// values are in the parts before it) and its `source_files` row.
    pub fn end_large(
        &mut self,
        large: LargeFile,
        facts: &FileFacts,
        actor: &str,
    ) -> Result<StoredFile> {
        let chunks_done = large.chunks_done;
        let mut out = large.out;
        let file = ingested_row(out.file_id, facts, &out);
        let seq = append_ingested(
            self.tx,
            &mut self.st,
            &mut self.ids,
            facts,
            actor,
            &file,
            &[],
            &[],
        )?;
        out.event_seq = seq;
        insert_file_prepared(&mut self.st.file, &file, seq)?;
        self.st.tally.file(file.outcome, file.seen_at);
        let listed = self
            .tx
            .prepare_cached(
                "DELETE FROM files_in_progress WHERE file_id = ?1 AND chunks_done = ?2",
            )?
            .execute([out.file_id, chunks_done])?;
        if listed != 1 {
            return Err(not_in_progress(&LargeFile {
                part: 0,
                chunks_done,
                chunk_rows: 1,
                out,
            }));
        }
        Ok(out)
    }

    /// Record the counters the files took ids from, and the kept totals of the rows.
    pub fn finish(mut self) -> Result<()> {
        self.st.tally.write(self.tx)?;
        self.ids.finish(self.tx)
    }
}

fn next_id(tx: &Transaction<'_>, table: &str) -> Result<i64> {
    let sql = match table {
        // A large file in progress holds its id before its row exists.
        "source_files" => {
            "SELECT MAX(COALESCE((SELECT MAX(id) FROM source_files), 0),
                        COALESCE((SELECT MAX(file_id) FROM files_in_progress), 0)) + 1"
        }
        // Measurements live in the event payloads; their ids are counted in `id_counters`.
        "measurements" => "SELECT next FROM id_counters WHERE name = 'measurement'",
        _ => {
            return Err(StoreError::Invalid(format!(
                "no id counter for table {table}"
            )));
        }
    };
    Ok(tx.prepare_cached(sql)?.query_row([], |r| r.get(0))?)
}

/// Record the next free measurement id (in the same transaction as the rows that took ids).
fn store_next_measurement(tx: &Transaction<'_>, next: i64) -> Result<()> {
    tx.prepare_cached("UPDATE id_counters SET next = ?1 WHERE name = 'measurement'")?
        .execute([next])?;
    Ok(())
}

/// The next free ids of `source_files` and of measurements, read from the database once and
/// then counted, for a writer storing many files in one transaction (which holds the
/// write lock, so nobody else takes ids meanwhile). Start a new one for each transaction.
///
/// It also carries the newest event of the chain, and records the next free measurement id
/// in `id_counters` with [`NextIds::finish`], once, before the transaction commits.
#[derive(Debug, Default, Clone)]
struct NextIds {
    file: Option<i64>,
    measurement: Option<i64>,
    /// The measurement counter as read from the database, to see whether it moved.
    measurement_read: Option<i64>,
    head: crate::store::events::ChainHead,
}

impl NextIds {
    fn take_file(&mut self, tx: &Transaction<'_>) -> Result<i64> {
        let id = match self.file {
            Some(id) => id,
            None => next_id(tx, "source_files")?,
        };
        self.file = Some(id + 1);
        Ok(id)
    }

    /// The first free measurement id; give back the next free one with `measurements_to`.
    fn first_measurement(&mut self, tx: &Transaction<'_>) -> Result<i64> {
        match self.measurement {
            Some(id) => Ok(id),
            None => {
                let id = next_id(tx, "measurements")?;
                self.measurement_read = Some(id);
                Ok(id)
            }
        }
    }

    /// Take ids up to `next_free` (exclusive).
    fn measurements_to(&mut self, next_free: i64) {
        self.measurement = Some(next_free);
    }

    /// Record the next free measurement id, if ids were taken. Call it before the
    /// transaction commits; the `record_*` functions without counters call it themselves.
    fn finish(&mut self, tx: &Transaction<'_>) -> Result<()> {
        if let (Some(next), Some(read)) = (self.measurement, self.measurement_read)
            && next != read
        {
            store_next_measurement(tx, next)?;
            self.measurement_read = Some(next);
        }
        Ok(())
    }
}

/// The id of the file whose content (SHA-256) was ingested before, if any.
pub fn ingested_file_with_hash(conn: &rusqlite::Connection, sha256: &str) -> Result<Option<i64>> {
    Ok(conn
        .prepare_cached(
            "SELECT id FROM source_files
             WHERE sha256 = ?1 COLLATE NOCASE AND outcome = 'ingested'",
        )?
        .query_row([sha256], |r| r.get(0))
        .optional()?)
}

fn file_row(id: i64, f: &FileFacts, outcome: &str) -> FileRow {
    FileRow {
        id,
        sha256: f.sha256.clone(),
        path: f.path.clone(),
        size: f.size,
        mtime: f.mtime.clone(),
        profile: f.profile.clone(),
        site: f.site.clone(),
        seen_at: f.seen_at.clone(),
        outcome: outcome.to_string(),
        error: None,
        rows_new: 0,
        rows_known: 0,
        rows_conflict: 0,
        quarantined: None,
    }
}

const INSERT_FILE: &str = "INSERT INTO source_files(id, sha256, path, size, mtime, profile, site,
         seen_at, outcome, error, rows_new, rows_known, rows_conflict, quarantined, event_seq)
     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15)";

fn insert_file(tx: &Transaction<'_>, r: &FileRow, seq: i64) -> Result<()> {
    let mut stmt = tx.prepare_cached(INSERT_FILE)?;
    insert_file_prepared(&mut stmt, &r.as_ref(), seq)?;
    let mut tally = super::totals::Tally::default();
    tally.file(&r.outcome, &r.seen_at);
    tally.write(tx)
}

fn insert_file_prepared(
    stmt: &mut rusqlite::Statement<'_>,
    r: &FileRowRef<'_>,
    seq: i64,
) -> Result<()> {
    stmt.execute(params![
        r.id,
        r.sha256,
        r.path,
        r.size,
        r.mtime,
        r.profile,
        r.site,
        r.seen_at,
        r.outcome,
        r.error,
        r.rows_new,
        r.rows_known,
        r.rows_conflict,
        r.quarantined,
        seq
    ])?;
    Ok(())
}

/// Record a file whose content was ingested before (as file `of_file_id`).
fn record_duplicate(
    tx: &Transaction<'_>,
    ids: &mut NextIds,
    facts: &FileFacts,
    of_file_id: i64,
    actor: &str,
) -> Result<i64> {
    let id = ids.take_file(tx)?;
    let file = file_row(id, facts, "duplicate");
    let payload = Payload::FileDuplicate {
        file: file.clone(),
        of_file_id,
    };
    store_file_event(tx, ids, facts, actor, &payload, &file)?;
    Ok(id)
}

/// Append a file's event (a duplicate or a rejection) and its `source_files` row.
fn store_file_event(
    tx: &Transaction<'_>,
    ids: &mut NextIds,
    facts: &FileFacts,
    actor: &str,
    payload: &Payload,
    file: &FileRow,
) -> Result<()> {
    let body = crate::model::chain::canonical(payload)?;
    let seq = append_file_event(tx, ids, facts, actor, payload.kind(), &body)?;
    insert_file(tx, file, seq)
}

/// Append the event of a file (seen by the writer as of `facts`), continuing the chain
/// from the transaction's head.
fn append_file_event(
    tx: &Transaction<'_>,
    ids: &mut NextIds,
    facts: &FileFacts,
    actor: &str,
    kind: &str,
    body: &str,
) -> Result<i64> {
    crate::store::events::append_after(
        tx,
        &mut ids.head,
        &facts.seen_at,
        actor,
        &facts.path,
        kind,
        body,
    )
}

/// Record a file that could not be read, with its error and where it was quarantined.
fn record_rejected(
    tx: &Transaction<'_>,
    ids: &mut NextIds,
    facts: &FileFacts,
    error: &str,
    quarantined: Option<&str>,
    actor: &str,
) -> Result<i64> {
    let id = ids.take_file(tx)?;
    let mut file = file_row(id, facts, "rejected");
    file.error = Some(error.to_string());
    file.quarantined = quarantined.map(str::to_string);
    let payload = Payload::FileRejected { file: file.clone() };
    store_file_event(tx, ids, facts, actor, &payload, &file)?;
    Ok(id)
}

/// Load every measurement of a batch, ordered by id, from the payloads of the events that
/// wrote them (found through `batch_sources`).
pub fn measurements_of(conn: &rusqlite::Connection, batch_id: &str) -> Result<Vec<MeasurementRow>> {
    Ok(measurements_up_to(conn, batch_id, i64::MAX)?
        .into_iter()
        .map(|(m, _)| m)
        .collect())
}

/// The measurements of a batch written by events up to `as_of`, each with its event, ordered
/// by id.
pub fn measurements_up_to(
    conn: &rusqlite::Connection,
    batch_id: &str,
    as_of: i64,
) -> Result<Vec<(MeasurementRow, i64)>> {
    let mut stmt = conn.prepare_cached(
        "SELECT e.seq, e.payload FROM events e
         WHERE e.seq IN (SELECT event_seq FROM batch_sources WHERE batch_id = ?1 AND event_seq <= ?2)
         ORDER BY e.seq",
    )?;
    let mut rows = stmt.query(params![batch_id, as_of])?;
    let mut out = Vec::new();
    while let Some(r) = rows.next()? {
        let seq: i64 = r.get(0)?;
        let body: String = r.get(1)?;
        let written: WrittenValues = serde_json::from_str(&body)?;
        out.extend(
            written
                .measurements
                .into_iter()
                .chain(written.measurement)
                .filter(|m| m.batch_id == batch_id)
                .map(|m| (m, seq)),
        );
    }
    out.sort_by_key(|(m, _)| m.id);
    Ok(out)
}

/// Payloads from this size up are parsed once and kept, their rows by batch, for the
/// batches after (a file repeating the batches of a large export meets them in order).
const KEEP_PARSED_FROM: i64 = 64 << 10;
/// Payloads up to this size are kept so (a part of a large export is about 1.5 MB; an
/// event written before parts existed can hold a whole file's rows, and is read per batch).
const KEEP_PARSED_UP_TO: i64 = 16 << 20;

/// [`measurements_of`] for a writer: the rows of a large event are parsed once and kept
/// (one event at a time) rather than parsed again for each of its batches.
fn stored_measurements(
    tx: &Transaction<'_>,
    kept: &mut Option<(i64, HashMap<String, Vec<MeasurementRow>>)>,
    batch_id: &str,
) -> Result<Vec<MeasurementRow>> {
    let mut stmt = tx.prepare_cached(
        "SELECT e.seq, LENGTH(e.payload) FROM events e
         WHERE e.seq IN (SELECT event_seq FROM batch_sources WHERE batch_id = ?1)
         ORDER BY e.seq",
    )?;
    let events = stmt
        .query_map([batch_id], |r| {
            Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?))
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    let kept_size = KEEP_PARSED_FROM..=KEEP_PARSED_UP_TO;
    if !events.iter().any(|(_, len)| kept_size.contains(len)) {
        return measurements_of(tx, batch_id);
    }
    let mut out = Vec::new();
    for (seq, len) in events {
        if !kept_size.contains(&len) {
            out.extend(
                rows_of_event(tx, seq)?
                    .into_iter()
                    .filter(|m| m.batch_id == batch_id),
            );
            continue;
        }
        if kept.as_ref().is_none_or(|(s, _)| *s != seq) {
            let mut by_batch: HashMap<String, Vec<MeasurementRow>> = HashMap::new();
            for m in rows_of_event(tx, seq)? {
                by_batch.entry(m.batch_id.clone()).or_default().push(m);
            }
            *kept = Some((seq, by_batch));
        }
        if let Some((_, by_batch)) = kept {
            out.extend(by_batch.get(batch_id).into_iter().flatten().cloned());
        }
    }
    out.sort_by_key(|m| m.id);
    Ok(out)
}

/// Every measurement row an event's payload holds.
fn rows_of_event(tx: &Transaction<'_>, seq: i64) -> Result<Vec<MeasurementRow>> {
    let body: String = tx
        .prepare_cached("SELECT payload FROM events WHERE seq = ?1")?
        .query_row([seq], |r| r.get(0))?;
    let written: WrittenValues = serde_json::from_str(&body)?;
    Ok(written
        .measurements
        .into_iter()
        .chain(written.measurement)
        .collect())
}

/// The measurement rows of an event's payload (a file's values, or a person's correction);
/// every other field of the payload is skipped.
#[derive(serde::Deserialize)]
struct WrittenValues {
    #[serde(
        default,
        deserialize_with = "crate::model::event::compact_rows::deserialize"
    )]
    measurements: Vec<MeasurementRow>,
    #[serde(default)]
    measurement: Option<MeasurementRow>,
}

const INSERT_SOURCE: &str = "INSERT OR IGNORE INTO batch_sources(batch_id, event_seq, line,
         source_file_id)
     VALUES (?1, ?2, ?3, ?4)";

/// Link a batch to the event that wrote values of it, and to the file line they came from
/// (line 0: entered by a person).
fn insert_source(
    tx: &Transaction<'_>,
    batch_id: &str,
    seq: i64,
    line: i64,
    file_id: Option<i64>,
) -> Result<()> {
    tx.prepare_cached(INSERT_SOURCE)?
        .execute(params![batch_id, seq, line, file_id])?;
    Ok(())
}

/// The provenance links of one event's measurements: one per batch and file line.
fn insert_sources(
    stmt: &mut rusqlite::Statement<'_>,
    ms: &[&MeasurementRow],
    seq: i64,
) -> Result<()> {
    let mut last: Option<(&str, i64)> = None;
    for m in ms {
        let key = (m.batch_id.as_str(), m.line.unwrap_or(0));
        if last == Some(key) {
            continue; // the rows of one line come together
        }
        last = Some(key);
        stmt.execute(params![key.0, seq, key.1, m.source_file_id])?;
    }
    Ok(())
}

static UPSERT_CYCLE: LazyLock<String> = LazyLock::new(|| {
    format!(
        "INSERT OR REPLACE INTO cycles(batch_id, lot, cycle_no, started_at, {}, conflicts, excluded, first_seq)
         VALUES (?1, ?2, ?3, ?4, {}, ?16, ?17, ?18)",
        CYCLE_COLUMNS.join(", "),
        (5..16).map(|i| format!("?{i}")).collect::<Vec<_>>().join(", ")
    )
});

static SELECT_CYCLE: LazyLock<String> = LazyLock::new(|| {
    format!(
        "SELECT batch_id, lot, cycle_no, started_at, {}, conflicts, excluded, first_seq
         FROM cycles WHERE batch_id = ?1",
        CYCLE_COLUMNS.join(", ")
    )
});

/// Write (insert or replace) the current view of one cycle, and its change to the kept
/// totals.
pub fn upsert_cycle(tx: &Transaction<'_>, v: &CycleView) -> Result<()> {
    let before: Option<(Option<String>, i64)> = tx
        .prepare_cached("SELECT lot, conflicts FROM cycles WHERE batch_id = ?1")?
        .query_row([&v.batch_id], |r| Ok((r.get(0)?, r.get(1)?)))
        .optional()?;
    let mut stmt = tx.prepare_cached(&UPSERT_CYCLE)?;
    upsert_cycle_prepared(&mut stmt, v)?;
    let mut tally = super::totals::Tally::default();
    tally.cycle(
        before.as_ref().map(|b| (b.0.as_deref(), b.1)),
        (v.lot.as_deref(), v.conflicts),
    );
    tally.write(tx)
}

fn upsert_cycle_prepared(stmt: &mut rusqlite::Statement<'_>, v: &CycleView) -> Result<()> {
    let x = &v.values;
    stmt.execute(params![
        v.batch_id,
        v.lot,
        v.cycle_no,
        v.started_at,
        x[0],
        x[1],
        x[2],
        x[3],
        x[4],
        x[5],
        x[6],
        x[7],
        x[8],
        x[9],
        x[10],
        v.conflicts,
        v.excluded,
        v.first_seq
    ])?;
    Ok(())
}

/// Read the stored cycle row of a batch.
pub fn cycle(conn: &rusqlite::Connection, batch_id: &str) -> Result<Option<CycleView>> {
    let mut stmt = conn.prepare_cached(&SELECT_CYCLE)?;
    cycle_prepared(&mut stmt, batch_id)
}

fn cycle_prepared(stmt: &mut rusqlite::Statement<'_>, batch_id: &str) -> Result<Option<CycleView>> {
    Ok(stmt.query_row([batch_id], cycle_from_row).optional()?)
}

/// Every stored cycle row (all lots, and batches not yet tied to a lot).
pub fn all_cycles(conn: &rusqlite::Connection) -> Result<Vec<CycleView>> {
    let sql = format!(
        "SELECT batch_id, lot, cycle_no, started_at, {}, conflicts, excluded, first_seq
         FROM cycles ORDER BY first_seq, batch_id",
        CYCLE_COLUMNS.join(", ")
    );
    let mut stmt = conn.prepare(&sql)?;
    let rows = stmt
        .query_map([], cycle_from_row)?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The cycle rows of one lot, ordered by cycle number (given) and then by first sight.
pub fn cycles_of_lot(conn: &rusqlite::Connection, lot: &str) -> Result<Vec<CycleView>> {
    let mut out = Vec::new();
    each_cycle_of_lot(conn, lot, |v| {
        out.push(v);
        Ok(())
    })?;
    Ok(out)
}

/// How many cycles name the lot.
pub fn cycle_count_of_lot(conn: &rusqlite::Connection, lot: &str) -> Result<usize> {
    let n: i64 = conn
        .prepare_cached("SELECT COUNT(*) FROM cycles WHERE lot = ?1")?
        .query_row([lot], |r| r.get(0))?;
    Ok(usize::try_from(n).unwrap_or(0))
}

/// The cycles of a lot in [`cycles_of_lot`]'s order, handed to `each` one at a time as
/// they are read: a lot of 200,000 cycles is then never held twice (as rows and in the
/// caller's own form).
pub fn each_cycle_of_lot(
    conn: &rusqlite::Connection,
    lot: &str,
    mut each: impl FnMut(CycleView) -> Result<()>,
) -> Result<()> {
    let sql = format!(
        "SELECT batch_id, lot, cycle_no, started_at, {}, conflicts, excluded, first_seq
         FROM cycles WHERE lot = ?1
         ORDER BY cycle_no IS NULL, cycle_no, started_at, first_seq",
        CYCLE_COLUMNS.join(", ")
    );
    let mut stmt = conn.prepare(&sql)?;
    let mut rows = stmt.query([lot])?;
    while let Some(r) = rows.next()? {
        each(cycle_from_row(r)?)?;
    }
    Ok(())
}

pub(crate) fn cycle_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<CycleView> {
    let mut v = CycleView {
        batch_id: r.get(0)?,
        lot: r.get(1)?,
        cycle_no: r.get(2)?,
        started_at: r.get(3)?,
        ..Default::default()
    };
    for i in 0..11 {
        v.values[i] = r.get(4 + i)?;
    }
    v.conflicts = r.get(15)?;
    v.excluded = r.get(16)?;
    v.first_seq = r.get(17)?;
    Ok(v)
}

/// Store the records of one parsed file: one event, the file row, every new or
/// conflicting value, lot registrations from a lot sheet, and the updated cycle views.
pub fn record_parsed(
    tx: &Transaction<'_>,
    facts: &FileFacts,
    parsed: &ParsedFile,
    actor: &str,
) -> Result<StoredFile> {
    let mut w = FileWriter::new(tx)?;
    let stored = w.parsed(facts, parsed, actor)?;
    w.finish()?;
    Ok(stored)
}

/// Store the records of one parsed file through a writer's statements and counters.
fn record_parsed_in(
    tx: &Transaction<'_>,
    st: &mut FileStatements<'_>,
    ids: &mut NextIds,
    facts: &FileFacts,
    parsed: &ParsedFile,
    actor: &str,
) -> Result<StoredFile> {
    let file_id = ids.take_file(tx)?;
    let mut out = StoredFile {
        file_id,
        ..Default::default()
    };
    let first_new = ids.first_measurement(tx)?;
    let mut next_m = first_new;
    let (batches, lots) = match parsed {
        ParsedFile::Cycles(rows) => (
            merge_cycle_rows(tx, st, rows, file_id, &mut next_m, &mut out)?,
            Vec::new(),
        ),
        ParsedFile::Lots(rows) => (Vec::new(), changed_lots(tx, rows, facts, &mut out)?),
    };
    let new_measurements = new_rows(&batches, first_new, next_m);

    let file = ingested_row(file_id, facts, &out);
    let seq = append_ingested(tx, st, ids, facts, actor, &file, &new_measurements, &lots)?;
    ids.measurements_to(next_m);
    out.event_seq = seq;
    insert_file_prepared(&mut st.file, &file, seq)?;
    st.tally.file(file.outcome, file.seen_at);
    insert_sources(&mut st.source, &new_measurements, seq)?;
    for l in &lots {
        upsert_lot(tx, l, seq)?;
    }
    write_cycles(st, &batches, first_new, seq, &mut out)?;
    Ok(out)
}

/// The rows a file (or a chunk of one) adds, in id order (the order they were taken in).
fn new_rows<'b>(
    batches: &'b [BatchWork<'_>],
    first_new: i64,
    next_m: i64,
) -> Vec<&'b MeasurementRow> {
    let mut new_measurements: Vec<&MeasurementRow> =
        Vec::with_capacity(usize::try_from(next_m - first_new).unwrap_or(0));
    new_measurements.extend(
        batches
            .iter()
            .flat_map(|b| b.known.iter().filter(|m| m.id >= first_new)),
    );
    if batches.len() > 1 {
        new_measurements.sort_by_key(|m| m.id);
    }
    new_measurements
}

/// Write the current view of each batch given new values (ids from `first_new`) by the
/// event `seq`; a batch first seen now takes `seq` as its first sight.
fn write_cycles(
    st: &mut FileStatements<'_>,
    batches: &[BatchWork<'_>],
    first_new: i64,
    seq: i64,
    out: &mut StoredFile,
) -> Result<()> {
    for b in batches {
        if !b.known.iter().any(|m| m.id >= first_new) {
            continue; // nothing new for this batch
        }
        let v = view::derive_cycle(b.batch_id, &b.known, b.excluded, b.first_seq.unwrap_or(seq));
        if let Some(l) = &v.lot
            && !out.lots_touched.contains(l)
        {
            out.lots_touched.insert(l.clone());
        }
        upsert_cycle_prepared(&mut st.cycle_put, &v)?;
        st.tally.cycle(
            b.before.as_ref().map(|b| (b.0.as_deref(), b.1)),
            (v.lot.as_deref(), v.conflicts),
        );
    }
    Ok(())
}

/// Merge a cycle export's rows into the batches they touch; returns each touched batch
/// with its measurements, the stored ones and then the ones this file adds (new rows are
/// kept once, here, and referred to by the payload).
fn merge_cycle_rows<'p>(
    tx: &Transaction<'_>,
    st: &mut FileStatements<'_>,
    rows: &'p [CycleRow],
    file_id: i64,
    next_m: &mut i64,
    out: &mut StoredFile,
) -> Result<Vec<BatchWork<'p>>> {
    let mut batches: Vec<BatchWork<'p>> = Vec::new();
    let mut batch_index: HashMap<&str, usize> = HashMap::new();
    for row in rows {
        // Most files touch a batch or two: a scan finds them sooner than a hash.
        let found = if batches.len() <= FEW_BATCHES {
            batches.iter().position(|b| b.batch_id == row.batch_id)
        } else {
            batch_index.get(row.batch_id.as_str()).copied()
        };
        let b = match found {
            Some(b) => b,
            None => {
                let existing = cycle_prepared(&mut st.cycle_get, &row.batch_id)?;
                let known = if existing.is_some() {
                    stored_measurements(tx, &mut st.parsed, &row.batch_id)?
                } else {
                    Vec::new()
                };
                batches.push(BatchWork {
                    batch_id: &row.batch_id,
                    first_seq: existing.as_ref().map(|c| c.first_seq),
                    before: existing.as_ref().map(|c| (c.lot.clone(), c.conflicts)),
                    excluded: existing.as_ref().is_some_and(|c| c.excluded),
                    known,
                });
                if batches.len() > FEW_BATCHES {
                    if batch_index.is_empty() {
                        batch_index
                            .extend(batches.iter().enumerate().map(|(i, b)| (b.batch_id, i)));
                    } else {
                        batch_index.insert(&row.batch_id, batches.len() - 1);
                    }
                }
                batches.len() - 1
            }
        };
        merge_row(row, file_id, &mut batches[b].known, next_m, out);
    }
    Ok(batches)
}

/// The registrations of a lot sheet that are new or changed.
fn changed_lots(
    tx: &Transaction<'_>,
    rows: &[LotRow],
    facts: &FileFacts,
    out: &mut StoredFile,
) -> Result<Vec<LotRecord>> {
    let mut lots = Vec::new();
    for row in rows {
        let rec = lot_record(row, facts.site.clone());
        match lot(tx, &rec.lot)? {
            Some(old) if old == rec => out.rows_known += 1,
            _ => {
                out.rows_new += 1;
                out.lots_touched.insert(rec.lot.clone());
                lots.push(rec);
            }
        }
    }
    Ok(lots)
}

/// The file row of an ingested file.
fn ingested_row<'f>(file_id: i64, facts: &'f FileFacts, out: &StoredFile) -> FileRowRef<'f> {
    FileRowRef {
        id: file_id,
        sha256: &facts.sha256,
        path: &facts.path,
        size: facts.size,
        mtime: facts.mtime.as_deref(),
        profile: facts.profile.as_deref(),
        site: facts.site.as_deref(),
        seen_at: &facts.seen_at,
        outcome: "ingested",
        error: None,
        rows_new: out.rows_new,
        rows_known: out.rows_known,
        rows_conflict: out.rows_conflict,
        quarantined: None,
    }
}

/// Append the file's `file-ingested` event, its payload written once without regrowing.
#[allow(clippy::too_many_arguments)]
fn append_ingested(
    tx: &Transaction<'_>,
    st: &mut FileStatements<'_>,
    ids: &mut NextIds,
    facts: &FileFacts,
    actor: &str,
    file: &FileRowRef<'_>,
    new_measurements: &[&MeasurementRow],
    lots: &[LotRecord],
) -> Result<i64> {
    // Sized for a typical file's payload, so that it is written without regrowing.
    let mut body = Vec::with_capacity(512 + 128 * new_measurements.len());
    serde_json::to_writer(
        &mut body,
        &FileIngestedRef {
            file: *file,
            measurements: new_measurements,
            lots,
        },
    )?;
    // serde_json writes only UTF-8.
    let body = String::from_utf8(body).map_err(|e| StoreError::Invalid(e.to_string()))?;
    crate::store::events::append_prepared(
        tx,
        &mut st.event,
        &mut ids.head,
        &facts.seen_at,
        actor,
        &facts.path,
        "file-ingested",
        &body,
    )
}

/// Batches of a file found by a scan; beyond, by a hash map.
const FEW_BATCHES: usize = 8;

/// A batch a file touches, while the file is stored.
struct BatchWork<'a> {
    batch_id: &'a str,
    first_seq: Option<i64>,
    /// The stored row's lot and conflicts (None: the batch is new), for the kept totals.
    before: Option<(Option<String>, i64)>,
    excluded: bool,
    /// Its measurements by id: the stored ones, then those this file adds.
    known: Vec<MeasurementRow>,
}

/// Classify each value of a row against what the batch already holds and append the
/// measurements to add to `known` (so later rows of the same file see them).
fn merge_row(
    row: &CycleRow,
    file_id: i64,
    known: &mut Vec<MeasurementRow>,
    next_id: &mut i64,
    out: &mut StoredFile,
) {
    enum V<'a> {
        Num(f64),
        Text(&'a str),
    }
    // At most one row per value of the line: grown once here, not row by row.
    known.reserve(3 + row.values.len());
    let (mut any_new, mut any_conflict) = (false, false);
    let mut merge = |q: &'static str, v: V<'_>, col: Option<i64>, raw: Option<&str>| {
        let cur = view::current(known, q);
        let same = match (cur, &v) {
            (None, _) => None,
            (Some(c), V::Num(x)) => Some(c.value.is_some_and(|y| view::same_value(*x, y))),
            (Some(c), V::Text(t)) => Some(c.text.as_deref() == Some(*t)),
        };
        let kind = match same {
            Some(true) => return,
            Some(false) => {
                any_conflict = true;
                if let Some(c) = cur {
                    let new = match &v {
                        V::Num(x) => x.to_string(),
                        V::Text(t) => format!("'{t}'"),
                    };
                    out.conflicts.push(conflict_note(row, q, c, &new));
                }
                "conflict"
            }
            None => {
                any_new = true;
                "observed"
            }
        };
        let (value, text) = match v {
            V::Num(x) => (Some(x), None),
            V::Text(t) => (None, Some(t.to_string())),
        };
        known.push(MeasurementRow {
            id: *next_id,
            batch_id: row.batch_id.clone(),
            quantity: Cow::Borrowed(q),
            value,
            text,
            kind: Cow::Borrowed(kind),
            source_file_id: Some(file_id),
            line: i64::try_from(row.line).ok(),
            col,
            raw: raw.map(str::to_string),
        });
        *next_id += 1;
    };
    if let Some(lot) = &row.lot {
        merge(ATTR_LOT, V::Text(lot), None, None);
    }
    if let Some(n) = row.cycle_no {
        merge(ATTR_CYCLE_NO, V::Num(f64::from(n)), None, None);
    }
    if let Some(t) = &row.started_at {
        merge(ATTR_STARTED_AT, V::Text(t), None, None);
    }
    if let Some(f) = &row.feed_lot {
        merge(ATTR_FEED_LOT, V::Text(f), None, None);
    }
    for mv in &row.values {
        merge(
            mv.quantity.key(),
            V::Num(mv.value),
            Some(i64::from(mv.column)),
            Some(mv.raw.as_str()),
        );
    }
    *out.row_count(any_conflict, any_new) += 1;
}

impl StoredFile {
    /// The count a row belongs to: conflicting, else new, else known.
    fn row_count(&mut self, conflict: bool, new: bool) -> &mut i64 {
        match (conflict, new) {
            (true, _) => &mut self.rows_conflict,
            (false, true) => &mut self.rows_new,
            (false, false) => &mut self.rows_known,
        }
    }
}

/// How a conflict between a stored value and a file's is reported.
fn conflict_note(row: &CycleRow, q: &str, stored: &MeasurementRow, new: &str) -> String {
    format!(
        "batch '{}', field '{}': stored {} (file #{}), this file has {new} (line {})",
        row.batch_id,
        q,
        show(stored.value, stored.text.as_deref()),
        stored.source_file_id.map_or("-".into(), |i| i.to_string()),
        row.line
    )
}

fn show(v: Option<f64>, t: Option<&str>) -> String {
    match (v, t) {
        (Some(x), _) => x.to_string(),
        (None, Some(t)) => format!("'{t}'"),
        _ => "nothing".into(),
    }
}

fn lot_record(row: &LotRow, site: Option<String>) -> LotRecord {
    LotRecord {
        site,
        ..row.record.clone()
    }
}

fn upsert_lot(tx: &Transaction<'_>, l: &LotRecord, seq: i64) -> Result<()> {
    tx.prepare_cached(
        "INSERT OR REPLACE INTO lots(lot, catalyst, metal, loading_wt_pct, charged_mass_g,
             received, supplier_lot, cost, site, water_content_wt_pct, family, event_seq)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
    )?
    .execute(params![
        l.lot,
        l.catalyst,
        l.metal,
        l.loading_wt_pct,
        l.charged_mass_g,
        l.received,
        l.supplier_lot,
        l.cost,
        l.site,
        l.water_content_wt_pct,
        l.family,
        seq
    ])?;
    tx.prepare_cached("INSERT OR IGNORE INTO lot_registrations(lot, event_seq) VALUES (?1, ?2)")?
        .execute(params![l.lot, seq])?;
    Ok(())
}

/// The current registration of a lot.
pub fn lot(conn: &rusqlite::Connection, name: &str) -> Result<Option<LotRecord>> {
    Ok(conn
        .prepare_cached(
            "SELECT lot, catalyst, metal, loading_wt_pct, charged_mass_g, received, supplier_lot, cost, site,
                 water_content_wt_pct, family
             FROM lots WHERE lot = ?1",
        )?
        .query_row([name], lot_from_row)
        .optional()?)
}

/// Every registered lot, by name.
pub fn all_lots(conn: &rusqlite::Connection) -> Result<Vec<LotRecord>> {
    let mut stmt = conn.prepare(
        "SELECT lot, catalyst, metal, loading_wt_pct, charged_mass_g, received, supplier_lot, cost, site,
             water_content_wt_pct, family
         FROM lots ORDER BY lot",
    )?;
    let rows = stmt
        .query_map([], lot_from_row)?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

pub(crate) fn lot_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<LotRecord> {
    Ok(LotRecord {
        lot: r.get(0)?,
        catalyst: r.get(1)?,
        metal: r.get(2)?,
        loading_wt_pct: r.get(3)?,
        charged_mass_g: r.get(4)?,
        received: r.get(5)?,
        supplier_lot: r.get(6)?,
        cost: r.get(7)?,
        site: r.get(8)?,
        water_content_wt_pct: r.get(9)?,
        family: r.get(10)?,
    })
}

/// Register a lot, or change its registration, by a person's command.
pub fn register_lot(
    tx: &Transaction<'_>,
    rec: &LotRecord,
    reason: Option<&str>,
    actor: &str,
    at: &str,
) -> Result<i64> {
    if lot(tx, &rec.lot)?.as_ref() == Some(rec) {
        return Err(StoreError::Invalid(format!(
            "lot '{}' is already registered with exactly these values",
            rec.lot
        )));
    }
    let payload = Payload::LotRegistered {
        lot: rec.clone(),
        reason: reason.map(str::to_string),
    };
    let seq = crate::store::events::append(tx, at, actor, &rec.lot, &payload)?;
    upsert_lot(tx, rec, seq)?;
    Ok(seq)
}

/// Correct one value of a batch. The earlier values stay in their events (and so in the
/// `measurements` view).
pub fn correct(
    tx: &Transaction<'_>,
    batch_id: &str,
    quantity: &str,
    value: f64,
    reason: &str,
    actor: &str,
    at: &str,
) -> Result<i64> {
    let Some(existing) = cycle(tx, batch_id)? else {
        return Err(StoreError::Invalid(format!(
            "no batch '{batch_id}' is recorded"
        )));
    };
    if quantity != ATTR_CYCLE_NO && Quantity::from_key(quantity).is_none() {
        return Err(StoreError::Invalid(format!(
            "'{quantity}' is not a correctable field; expected cycle_no or one of {}",
            Quantity::ALL.map(|q| q.key()).join(", ")
        )));
    }
    if !value.is_finite() {
        return Err(StoreError::Invalid(
            "a corrected value must be a finite number".into(),
        ));
    }
    if quantity == ATTR_CYCLE_NO {
        refuse_cycle_collision(tx, &existing, value)?;
    }
    let mut rows = measurements_of(tx, batch_id)?;
    let previous = view::current(&rows, quantity).and_then(|m| m.value);
    let m = MeasurementRow {
        id: next_id(tx, "measurements")?,
        batch_id: batch_id.to_string(),
        quantity: quantity.to_string().into(),
        value: Some(value),
        text: None,
        kind: "correction".into(),
        source_file_id: None,
        line: None,
        col: None,
        raw: None,
    };
    let payload = Payload::Correction {
        measurement: m.clone(),
        previous,
        reason: reason.to_string(),
    };
    let seq = crate::store::events::append(tx, at, actor, batch_id, &payload)?;
    store_next_measurement(tx, m.id + 1)?;
    insert_source(tx, batch_id, seq, 0, None)?;
    rows.push(m);
    let v = view::derive_cycle(batch_id, &rows, existing.excluded, existing.first_seq);
    upsert_cycle(tx, &v)?;
    Ok(seq)
}

/// A cycle number another batch of the same lot already has is refused.
fn refuse_cycle_collision(tx: &Transaction<'_>, batch: &CycleView, cycle_no: f64) -> Result<()> {
    let Some(lot) = &batch.lot else {
        return Ok(());
    };
    let other: Option<String> = tx
        .query_row(
            "SELECT batch_id FROM cycles WHERE lot = ?1 AND cycle_no = ?2 AND batch_id <> ?3",
            params![lot, cycle_no as i64, batch.batch_id],
            |r| r.get(0),
        )
        .optional()?;
    match other {
        Some(o) => Err(StoreError::Invalid(format!(
            "cycle_no = {cycle_no}: batch '{o}' of lot '{lot}' is cycle {cycle_no} already; expected a cycle number no other batch of the lot has"
        ))),
        None => Ok(()),
    }
}

/// Exclude a cycle from fits (or take it back), with the reason.
pub fn set_excluded(
    tx: &Transaction<'_>,
    batch_id: &str,
    excluded: bool,
    reason: &str,
    actor: &str,
    at: &str,
) -> Result<i64> {
    let Some(mut v) = cycle(tx, batch_id)? else {
        return Err(StoreError::Invalid(format!(
            "no batch '{batch_id}' is recorded"
        )));
    };
    let payload = Payload::Exclusion {
        batch_id: batch_id.to_string(),
        excluded,
        reason: reason.to_string(),
    };
    let seq = crate::store::events::append(tx, at, actor, batch_id, &payload)?;
    v.excluded = excluded;
    upsert_cycle(tx, &v)?;
    Ok(seq)
}

/// Append any other event that writes no record rows (notes, sign-offs).
pub fn append_event(
    tx: &Transaction<'_>,
    subject: &str,
    payload: &Payload,
    actor: &str,
    at: &str,
) -> Result<i64> {
    crate::store::events::append(tx, at, actor, subject, payload)
}

/// The feed (or substrate) lot of each batch of a lot that recorded one: batch id → the
/// first observed value (feed lots are not corrected by hand).
pub fn feed_lots_of_lot(
    conn: &rusqlite::Connection,
    lot: &str,
) -> Result<std::collections::BTreeMap<String, String>> {
    // The `measurements` view would read every event of the store (SQLite does not push
    // the lot into it): only the events that wrote rows of the lot's batches are read, and
    // their rows taken apart as the view does. Corrections are not `observed` rows.
    let mut st = conn.prepare_cached(
        "SELECT x.batch_id, x.text FROM (
             SELECT CASE m.type WHEN 'array' THEN json_extract(m.value, '$[0]')
                        ELSE json_extract(m.value, '$.id') END AS id,
                    CASE m.type WHEN 'array' THEN json_extract(m.value, '$[1]')
                        ELSE json_extract(m.value, '$.batch_id') END AS batch_id,
                    CASE m.type WHEN 'array' THEN json_extract(m.value, '$[2]')
                        ELSE json_extract(m.value, '$.quantity') END AS quantity,
                    CASE m.type WHEN 'array' THEN json_extract(m.value, '$[4]')
                        ELSE json_extract(m.value, '$.text') END AS text,
                    CASE m.type WHEN 'array' THEN json_extract(m.value, '$[5]')
                        ELSE json_extract(m.value, '$.kind') END AS kind
             FROM (SELECT DISTINCT b.event_seq AS seq FROM cycles c
                       JOIN batch_sources b ON b.batch_id = c.batch_id WHERE c.lot = ?1) s
             JOIN events e ON e.seq = s.seq
                 AND (e.kind = 'file-ingested' OR e.kind = 'file-rows'),
                  json_each(e.payload, '$.measurements') m) x
         WHERE x.quantity = ?2 AND x.kind = 'observed' AND x.text IS NOT NULL
           AND x.batch_id IN (SELECT batch_id FROM cycles WHERE lot = ?1)
         ORDER BY x.id",
    )?;
    let rows = st.query_map(params![lot, ATTR_FEED_LOT], |r| {
        Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?))
    })?;
    let mut out = std::collections::BTreeMap::new();
    for row in rows {
        let (batch, text) = row?;
        out.entry(batch).or_insert(text);
    }
    Ok(out)
}
