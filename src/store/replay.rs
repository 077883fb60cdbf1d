//! The stored rows `verify` compares with its replay of the events, read as stored.

use std::collections::HashMap;

use rusqlite::{Connection, OptionalExtension};

use super::Result;
use crate::model::cycle::{CYCLE_COLUMNS, CycleView};
use crate::model::event::{FileRow, LotRecord};

/// One event exactly as stored.
#[derive(Debug, Clone)]
pub struct StoredEvent {
    pub seq: i64,
    pub at: String,
    pub actor: String,
    pub kind: String,
    pub subject: String,
    pub payload: String,
    pub prev_hash: String,
    pub hash: String,
}

/// Call `each` with every event in sequence order, one row in memory at a time, until it
/// returns false.
pub fn for_each_event(
    conn: &Connection,
    mut each: impl FnMut(StoredEvent) -> Result<bool>,
) -> Result<()> {
    let mut stmt = conn.prepare(
        "SELECT seq, at, actor, kind, subject, payload, prev_hash, hash FROM events ORDER BY seq",
    )?;
    let mut rows = stmt.query([])?;
    while let Some(r) = rows.next()? {
        let e = StoredEvent {
            seq: r.get(0)?,
            at: r.get(1)?,
            actor: r.get(2)?,
            kind: r.get(3)?,
            subject: r.get(4)?,
            payload: r.get(5)?,
            prev_hash: r.get(6)?,
            hash: r.get(7)?,
        };
        if !each(e)? {
            break;
        }
    }
    Ok(())
}

/// Every `source_files` row with the event that wrote it, by id.
pub fn file_rows(conn: &Connection) -> Result<Vec<(FileRow, i64)>> {
    let mut stmt = conn.prepare(
        "SELECT id, sha256, path, size, mtime, profile, site, seen_at, outcome, error,
                rows_new, rows_known, rows_conflict, quarantined, event_seq FROM source_files ORDER BY id",
    )?;
    let rows = stmt
        .query_map([], |r| {
            Ok((
                FileRow {
                    id: r.get(0)?,
                    sha256: r.get(1)?,
                    path: r.get(2)?,
                    size: r.get(3)?,
                    mtime: r.get(4)?,
                    profile: r.get(5)?,
                    site: r.get(6)?,
                    seen_at: r.get(7)?,
                    outcome: r.get(8)?,
                    error: r.get(9)?,
                    rows_new: r.get(10)?,
                    rows_known: r.get(11)?,
                    rows_conflict: r.get(12)?,
                    quarantined: r.get(13)?,
                },
                r.get::<_, i64>(14)?,
            ))
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The next measurement id the counter will give, if the counter exists.
pub fn next_measurement_id(conn: &Connection) -> Result<Option<i64>> {
    Ok(conn
        .query_row(
            "SELECT next FROM id_counters WHERE name = 'measurement'",
            [],
            |r| r.get(0),
        )
        .optional()?)
}

/// One stored provenance link.
#[derive(Debug, Clone)]
pub struct LinkRow {
    pub batch_id: String,
    pub event_seq: i64,
    pub line: i64,
    pub source_file_id: Option<i64>,
}

/// Every provenance link, by batch, event and line.
pub fn source_links(conn: &Connection) -> Result<Vec<LinkRow>> {
    let mut stmt = conn.prepare(
        "SELECT batch_id, event_seq, line, source_file_id FROM batch_sources
         ORDER BY batch_id, event_seq, line",
    )?;
    let rows = stmt
        .query_map([], |r| {
            Ok(LinkRow {
                batch_id: r.get(0)?,
                event_seq: r.get(1)?,
                line: r.get(2)?,
                source_file_id: r.get(3)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The event that last wrote each lot's registration.
pub fn lot_event_seqs(conn: &Connection) -> Result<HashMap<String, i64>> {
    let mut stmt = conn.prepare("SELECT lot, event_seq FROM lots")?;
    let rows = stmt
        .query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?)))?
        .collect::<std::result::Result<_, _>>()?;
    Ok(rows)
}

/// One alert condition as stored, or as the outbox implies it.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ConditionRow {
    pub rule: String,
    pub lot: String,
    pub state: String,
    pub severity: i64,
    pub episode: i64,
    pub thread_message_id: String,
    pub changed_at: String,
}

/// Every alert condition, by key.
pub fn alert_conditions(conn: &Connection) -> Result<Vec<(String, ConditionRow)>> {
    let mut stmt = conn.prepare(
        "SELECT alert_key, rule, lot, state, severity, episode, thread_message_id, changed_at
         FROM alert_condition ORDER BY alert_key",
    )?;
    let rows = stmt
        .query_map([], |r| {
            Ok((
                r.get(0)?,
                ConditionRow {
                    rule: r.get(1)?,
                    lot: r.get(2)?,
                    state: r.get(3)?,
                    severity: r.get(4)?,
                    episode: r.get(5)?,
                    thread_message_id: r.get(6)?,
                    changed_at: r.get(7)?,
                },
            ))
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// One alert message of the outbox (digests aside), in the order queued.
#[derive(Debug, Clone)]
pub struct AlertMessageRow {
    pub id: i64,
    pub alert_key: String,
    pub rule: String,
    pub lot: String,
    pub episode: i64,
    pub state: String,
    pub severity: i64,
    pub message_id: String,
    pub queued_at: String,
}

/// Every alert message of the outbox, oldest first (digests are tied to no condition).
pub fn alert_messages(conn: &Connection) -> Result<Vec<AlertMessageRow>> {
    let mut stmt = conn.prepare(
        "SELECT id, alert_key, rule, lot, episode, state, severity, message_id, queued_at
         FROM alert_outbox WHERE rule <> 'digest' ORDER BY id",
    )?;
    let rows = stmt
        .query_map([], |r| {
            Ok(AlertMessageRow {
                id: r.get(0)?,
                alert_key: r.get(1)?,
                rule: r.get(2)?,
                lot: r.get(3)?,
                episode: r.get(4)?,
                state: r.get(5)?,
                severity: r.get(6)?,
                message_id: r.get(7)?,
                queued_at: r.get(8)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

// ---- Streaming reads: verify compares a stretch of events at a time, so it never holds
// a whole table (issue: a decade of records in bounded memory).

/// A read transaction over `conn`: every read of one verification sees one snapshot,
/// while the service goes on writing beside it (WAL).
pub fn snapshot(conn: &Connection) -> Result<rusqlite::Transaction<'_>> {
    Ok(rusqlite::Transaction::new_unchecked(
        conn,
        rusqlite::TransactionBehavior::Deferred,
    )?)
}

/// Call `each` with every event after `after`, in sequence order, one row at a time,
/// until it returns false.
pub fn for_each_event_after(
    conn: &Connection,
    after: i64,
    mut each: impl FnMut(StoredEvent) -> Result<bool>,
) -> Result<()> {
    let mut stmt = conn.prepare(
        "SELECT seq, at, actor, kind, subject, payload, prev_hash, hash FROM events
         WHERE seq > ?1 ORDER BY seq",
    )?;
    let mut rows = stmt.query([after])?;
    while let Some(r) = rows.next()? {
        let e = StoredEvent {
            seq: r.get(0)?,
            at: r.get(1)?,
            actor: r.get(2)?,
            kind: r.get(3)?,
            subject: r.get(4)?,
            payload: r.get(5)?,
            prev_hash: r.get(6)?,
            hash: r.get(7)?,
        };
        if !each(e)? {
            break;
        }
    }
    Ok(())
}

/// One event's kind and payload, by seq.
pub fn event_payload(conn: &Connection, seq: i64) -> Result<Option<(String, String)>> {
    Ok(conn
        .prepare_cached("SELECT kind, payload FROM events WHERE seq = ?1")?
        .query_row([seq], |r| Ok((r.get(0)?, r.get(1)?)))
        .optional()?)
}

/// The stored hash of the event `seq`, if it exists.
pub fn event_hash_at(conn: &Connection, seq: i64) -> Result<Option<String>> {
    Ok(conn
        .prepare_cached("SELECT hash FROM events WHERE seq = ?1")?
        .query_row([seq], |r| r.get(0))
        .optional()?)
}

const FILE_COLUMNS: &str = "id, sha256, path, size, mtime, profile, site, seen_at, outcome, \
     error, rows_new, rows_known, rows_conflict, quarantined, event_seq";

fn file_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<(FileRow, Option<i64>)> {
    Ok((
        FileRow {
            id: r.get(0)?,
            sha256: r.get(1)?,
            path: r.get(2)?,
            size: r.get(3)?,
            mtime: r.get(4)?,
            profile: r.get(5)?,
            site: r.get(6)?,
            seen_at: r.get(7)?,
            outcome: r.get(8)?,
            error: r.get(9)?,
            rows_new: r.get(10)?,
            rows_known: r.get(11)?,
            rows_conflict: r.get(12)?,
            quarantined: r.get(13)?,
        },
        r.get(14)?,
    ))
}

/// The `source_files` rows written by the events `lo..=hi`, by event and id.
pub fn file_rows_between(conn: &Connection, lo: i64, hi: i64) -> Result<Vec<(FileRow, i64)>> {
    let sql = format!(
        "SELECT {FILE_COLUMNS} FROM source_files WHERE event_seq BETWEEN ?1 AND ?2
         ORDER BY event_seq, id"
    );
    let mut stmt = conn.prepare_cached(&sql)?;
    let rows = stmt
        .query_map([lo, hi], file_from_row)?
        .map(|r| r.map(|(f, s)| (f, s.unwrap_or(-1))))
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// Call `each` with every `source_files` row no event up to `head` can have written (its
/// event missing, before the first or after `head`).
pub fn file_rows_outside(
    conn: &Connection,
    head: i64,
    mut each: impl FnMut(FileRow, Option<i64>),
) -> Result<()> {
    // Two ranges of the index `source_files_event` (`event_seq` is NOT NULL in the
    // schema): the OR of them made SQLite read every file's row, so a check of the few
    // events after a verified head took time in proportion to the whole store.
    let sql = format!(
        "SELECT {FILE_COLUMNS} FROM source_files WHERE id IN (
             SELECT id FROM source_files WHERE event_seq < 1
             UNION ALL SELECT id FROM source_files WHERE event_seq > ?1)
         ORDER BY id"
    );
    let mut stmt = conn.prepare(&sql)?;
    let mut rows = stmt.query([head])?;
    while let Some(r) = rows.next()? {
        let (f, s) = file_from_row(r)?;
        each(f, s);
    }
    Ok(())
}

/// The provenance links written by the events `lo..=hi`, by event, batch and line.
pub fn links_between(conn: &Connection, lo: i64, hi: i64) -> Result<Vec<LinkRow>> {
    let mut stmt = conn.prepare_cached(
        "SELECT batch_id, event_seq, line, source_file_id FROM batch_sources
         WHERE event_seq BETWEEN ?1 AND ?2 ORDER BY event_seq, batch_id, line",
    )?;
    let rows = stmt
        .query_map([lo, hi], link_from_row)?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

fn link_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<LinkRow> {
    Ok(LinkRow {
        batch_id: r.get(0)?,
        event_seq: r.get(1)?,
        line: r.get(2)?,
        source_file_id: r.get(3)?,
    })
}

/// Call `each` with every provenance link no event up to `head` can have written.
pub fn links_outside(conn: &Connection, head: i64, mut each: impl FnMut(LinkRow)) -> Result<()> {
    // The two ranges one after the other, each through the index `batch_sources_event`
    // (the OR of them walked every link of the store), in the same order.
    const COLUMNS: &str = "SELECT batch_id, event_seq, line, source_file_id FROM batch_sources";
    const ORDER: &str = "ORDER BY event_seq, batch_id, line";
    let mut before = conn.prepare(&format!("{COLUMNS} WHERE event_seq < 1 {ORDER}"))?;
    let mut rows = before.query([])?;
    while let Some(r) = rows.next()? {
        each(link_from_row(r)?);
    }
    let mut after = conn.prepare(&format!("{COLUMNS} WHERE event_seq > ?1 {ORDER}"))?;
    let mut rows = after.query([head])?;
    while let Some(r) = rows.next()? {
        each(link_from_row(r)?);
    }
    Ok(())
}

/// The events that wrote values of `batch`, oldest first.
pub fn batch_event_seqs(conn: &Connection, batch: &str) -> Result<Vec<i64>> {
    let mut stmt = conn.prepare_cached(
        "SELECT DISTINCT event_seq FROM batch_sources WHERE batch_id = ?1 ORDER BY event_seq",
    )?;
    let rows = stmt
        .query_map([batch], |r| r.get(0))?
        .collect::<std::result::Result<Vec<i64>, _>>()?;
    Ok(rows)
}

/// One stored cycle row by batch.
pub fn cycle_row(conn: &Connection, batch: &str) -> Result<Option<CycleView>> {
    let sql = format!(
        "SELECT batch_id, lot, cycle_no, started_at, {}, conflicts, excluded, first_seq
         FROM cycles WHERE batch_id = ?1",
        CYCLE_COLUMNS.join(", ")
    );
    Ok(conn
        .prepare_cached(&sql)?
        .query_row([batch], super::records::cycle_from_row)
        .optional()?)
}

/// Walk the stored cycles and the batches that have provenance links together, by batch
/// id (both in their primary-key order: no sort, one row of each in memory): `each` gets
/// a batch, its stored cycle row if any and the events that wrote its values.
pub fn for_each_batch(
    conn: &Connection,
    mut each: impl FnMut(&str, Option<CycleView>, &[i64]) -> Result<()>,
) -> Result<()> {
    let sql = format!(
        "SELECT batch_id, lot, cycle_no, started_at, {}, conflicts, excluded, first_seq
         FROM cycles ORDER BY batch_id",
        CYCLE_COLUMNS.join(", ")
    );
    let mut cyc_stmt = conn.prepare(&sql)?;
    let mut cycles = cyc_stmt.query([])?;
    let mut src_stmt =
        conn.prepare("SELECT batch_id, event_seq FROM batch_sources ORDER BY batch_id, event_seq")?;
    let mut sources = src_stmt.query([])?;
    let mut cyc = next_cycle(&mut cycles)?;
    let mut src: Option<(String, i64)> = next_source(&mut sources)?;
    let mut seqs: Vec<i64> = Vec::new();
    loop {
        let batch = match (&cyc, &src) {
            (None, None) => break,
            (Some(c), None) => c.batch_id.clone(),
            (None, Some(s)) => s.0.clone(),
            (Some(c), Some(s)) => std::cmp::min(&c.batch_id, &s.0).clone(),
        };
        seqs.clear();
        while let Some((b, seq)) = src.as_ref().filter(|s| s.0 == batch) {
            let _ = b;
            if seqs.last() != Some(seq) {
                seqs.push(*seq);
            }
            src = next_source(&mut sources)?;
        }
        let stored = match cyc.take() {
            Some(c) if c.batch_id == batch => {
                cyc = next_cycle(&mut cycles)?;
                Some(c)
            }
            other => {
                cyc = other;
                None
            }
        };
        each(&batch, stored, &seqs)?;
    }
    Ok(())
}

fn next_cycle(rows: &mut rusqlite::Rows<'_>) -> Result<Option<CycleView>> {
    Ok(match rows.next()? {
        Some(r) => Some(super::records::cycle_from_row(r)?),
        None => None,
    })
}

fn next_source(rows: &mut rusqlite::Rows<'_>) -> Result<Option<(String, i64)>> {
    Ok(match rows.next()? {
        Some(r) => Some((r.get(0)?, r.get(1)?)),
        None => None,
    })
}

/// One registered lot with the event that last wrote it.
pub fn lot_row(conn: &Connection, lot: &str) -> Result<Option<(LotRecord, i64)>> {
    let rec = super::records::lot(conn, lot)?;
    let seq: Option<i64> = conn
        .prepare_cached("SELECT event_seq FROM lots WHERE lot = ?1")?
        .query_row([lot], |r| r.get(0))
        .optional()?;
    Ok(rec.map(|r| (r, seq.unwrap_or(-1))))
}

/// One outbox row, every column (the texts as stored).
#[derive(Debug, Clone)]
pub struct OutboxRow {
    pub id: i64,
    pub alert_key: String,
    pub rule: String,
    pub lot: String,
    pub episode: i64,
    pub state: String,
    pub severity: i64,
    pub message_id: String,
    pub in_reply_to: Option<String>,
    pub subject: String,
    pub body_text: String,
    pub body_html: String,
    pub recipients: String,
    pub queued_at: String,
    pub attempts: i64,
    pub next_attempt_at: Option<String>,
    pub last_error: Option<String>,
    pub delivered_at: Option<String>,
    pub server_reply: Option<String>,
}

const OUTBOX_COLUMNS: &str = "id, alert_key, rule, lot, episode, state, severity, message_id, \
     in_reply_to, subject, body_text, body_html, recipients, queued_at, attempts, \
     next_attempt_at, last_error, delivered_at, server_reply";

fn outbox_from_row(r: &rusqlite::Row<'_>) -> rusqlite::Result<OutboxRow> {
    Ok(OutboxRow {
        id: r.get(0)?,
        alert_key: r.get(1)?,
        rule: r.get(2)?,
        lot: r.get(3)?,
        episode: r.get(4)?,
        state: r.get(5)?,
        severity: r.get(6)?,
        message_id: r.get(7)?,
        in_reply_to: r.get(8)?,
        subject: r.get(9)?,
        body_text: r.get(10)?,
        body_html: r.get(11)?,
        recipients: r.get(12)?,
        queued_at: r.get(13)?,
        attempts: r.get(14)?,
        next_attempt_at: r.get(15)?,
        last_error: r.get(16)?,
        delivered_at: r.get(17)?,
        server_reply: r.get(18)?,
    })
}

/// Call `each` with every outbox row from id `first` on, by id, one at a time.
pub fn for_each_outbox_row(
    conn: &Connection,
    first: i64,
    mut each: impl FnMut(OutboxRow),
) -> Result<()> {
    let sql = format!("SELECT {OUTBOX_COLUMNS} FROM alert_outbox WHERE id >= ?1 ORDER BY id");
    let mut stmt = conn.prepare(&sql)?;
    let mut rows = stmt.query([first])?;
    while let Some(r) = rows.next()? {
        each(outbox_from_row(r)?);
    }
    Ok(())
}

/// One outbox row by id.
pub fn outbox_row(conn: &Connection, id: i64) -> Result<Option<OutboxRow>> {
    let sql = format!("SELECT {OUTBOX_COLUMNS} FROM alert_outbox WHERE id = ?1");
    Ok(conn
        .prepare_cached(&sql)?
        .query_row([id], outbox_from_row)
        .optional()?)
}

/// How many outbox rows lie below id `first` (queued before the outbox was in the chain).
pub fn outbox_rows_before(conn: &Connection, first: i64) -> Result<i64> {
    Ok(conn.query_row(
        "SELECT COUNT(*) FROM alert_outbox WHERE id < ?1",
        [first],
        |r| r.get(0),
    )?)
}

/// The outbox's switch-over as stored: first row in the chain, rows before it, marker event.
pub fn outbox_chain(conn: &Connection) -> Result<Option<(i64, i64, Option<i64>)>> {
    Ok(conn
        .query_row(
            "SELECT first_outbox_id, legacy_rows, marker_seq FROM outbox_chain WHERE id = 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .optional()?)
}

/// One alert condition by key.
pub fn alert_condition(conn: &Connection, key: &str) -> Result<Option<ConditionRow>> {
    Ok(conn
        .prepare_cached(
            "SELECT rule, lot, state, severity, episode, thread_message_id, changed_at
             FROM alert_condition WHERE alert_key = ?1",
        )?
        .query_row([key], |r| {
            Ok(ConditionRow {
                rule: r.get(0)?,
                lot: r.get(1)?,
                state: r.get(2)?,
                severity: r.get(3)?,
                episode: r.get(4)?,
                thread_message_id: r.get(5)?,
                changed_at: r.get(6)?,
            })
        })
        .optional()?)
}

/// One recorded verification.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct VerifyRun {
    pub id: i64,
    pub at: String,
    /// `full` or `since-last`.
    pub scope: String,
    pub from_seq: i64,
    pub head_seq: i64,
    pub head_hash: String,
    pub ok: bool,
    pub events: i64,
    pub findings: i64,
    pub first_finding: Option<String>,
    pub seconds: f64,
    pub mac: Option<String>,
}

impl VerifyRun {
    /// The text a run's MAC covers: every figure but the id and the MAC itself.
    pub fn mac_input(&self) -> String {
        format!(
            "verify-run\n{}\n{}\n{}\n{}\n{}\n{}\n{}\n{}\n{}",
            self.at,
            self.scope,
            self.from_seq,
            self.head_seq,
            self.head_hash,
            self.ok,
            self.events,
            self.findings,
            self.first_finding.as_deref().unwrap_or("")
        )
    }
}

/// Record a verification; returns its id.
pub fn record_verify_run(conn: &Connection, run: &VerifyRun) -> Result<i64> {
    conn.execute(
        "INSERT INTO verify_runs (at, scope, from_seq, head_seq, head_hash, ok, events, findings,
                                  first_finding, seconds, mac)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11)",
        rusqlite::params![
            run.at,
            run.scope,
            run.from_seq,
            run.head_seq,
            run.head_hash,
            run.ok,
            run.events,
            run.findings,
            run.first_finding,
            run.seconds,
            run.mac
        ],
    )?;
    Ok(conn.last_insert_rowid())
}

/// The newest recorded verification (`ok_only`: the newest that found the chain intact).
pub fn last_verify_run(conn: &Connection, ok_only: bool) -> Result<Option<VerifyRun>> {
    Ok(conn
        .query_row(
            "SELECT id, at, scope, from_seq, head_seq, head_hash, ok, events, findings,
                    first_finding, seconds, mac
             FROM verify_runs WHERE ok = 1 OR ?1 = 0 ORDER BY id DESC LIMIT 1",
            [ok_only],
            |r| {
                Ok(VerifyRun {
                    id: r.get(0)?,
                    at: r.get(1)?,
                    scope: r.get(2)?,
                    from_seq: r.get(3)?,
                    head_seq: r.get(4)?,
                    head_hash: r.get(5)?,
                    ok: r.get(6)?,
                    events: r.get(7)?,
                    findings: r.get(8)?,
                    first_finding: r.get(9)?,
                    seconds: r.get(10)?,
                    mac: r.get(11)?,
                })
            },
        )
        .optional()?)
}

/// Whether `batch` stands excluded from fits: the payload of its newest exclusion event.
pub fn last_exclusion(conn: &Connection, batch: &str) -> Result<Option<String>> {
    Ok(conn
        .prepare_cached(
            "SELECT payload FROM events WHERE kind = 'exclusion' AND subject = ?1
             ORDER BY seq DESC LIMIT 1",
        )?
        .query_row([batch], |r| r.get(0))
        .optional()?)
}

/// The lots that have a stored fit, by name (verify recomputes them one at a time).
pub fn fitted_lots(conn: &Connection) -> Result<Vec<String>> {
    let mut stmt = conn.prepare("SELECT DISTINCT lot FROM fits ORDER BY lot")?;
    let rows = stmt
        .query_map([], |r| r.get(0))?
        .collect::<std::result::Result<Vec<String>, _>>()?;
    Ok(rows)
}

/// A lot's newest stored fit, its analysis left empty (see [`fit_analysis`]), and the
/// fit's id: verify recomputes the lot before it reads the stored analysis (megabytes for
/// a lot of many cycles), so the two are not held at once.
pub fn newest_fit(conn: &Connection, lot: &str) -> Result<Option<(i64, super::lots::StoredFit)>> {
    Ok(conn
        .prepare_cached(
            "SELECT id, lot, after_seq, engine_version, config_sha256 FROM fits
             WHERE lot = ?1 ORDER BY id DESC LIMIT 1",
        )?
        .query_row([lot], |r| {
            Ok((
                r.get(0)?,
                super::lots::StoredFit {
                    lot: r.get(1)?,
                    after_seq: r.get(2)?,
                    engine_version: r.get(3)?,
                    config_sha256: r.get(4)?,
                    analysis: String::new(),
                },
            ))
        })
        .optional()?)
}

/// The stored analysis of the fit `id` (as [`newest_fit`] names it).
pub fn fit_analysis(conn: &Connection, id: i64) -> Result<Option<String>> {
    Ok(conn
        .prepare_cached("SELECT analysis FROM fits WHERE id = ?1")?
        .query_row([id], |r| r.get(0))
        .optional()?)
}
