//! Counts and event lists for the status and history views.

use rusqlite::{Connection, OptionalExtension};

use super::Result;
use super::replay::StoredEvent;

/// Files by outcome.
#[derive(Debug, Clone, Default)]
pub struct FileCounts {
    pub ingested: i64,
    pub ingested_last_hour: i64,
    pub ingested_last_day: i64,
    pub quarantined: i64,
    pub duplicates: i64,
    /// Path and time of the newest ingested file.
    pub last: Option<(String, String)>,
}

/// Records by kind.
#[derive(Debug, Clone, Default)]
pub struct RecordCounts {
    pub conflicts: i64,
    pub lots: i64,
    pub cycles: i64,
    /// Cycles whose lot is unknown or not registered.
    pub pending_cycles: i64,
}

fn count(conn: &Connection, sql: &str, p: impl rusqlite::Params) -> Result<i64> {
    Ok(conn.query_row(sql, p, |r| r.get(0))?)
}

/// File counts; `hour` and `day` are the stored timestamps an hour and a day ago.
pub fn file_counts(conn: &Connection, hour: &str, day: &str) -> Result<FileCounts> {
    let ing = "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'";
    // `+outcome`: the rows are walked from the newest id back to the first ingested one
    // (at once, almost always). Through the outcome index SQLite fetched and sorted every
    // ingested file's row: 9 ms at 40,000 files.
    let last = conn
        .query_row(
            "SELECT path, seen_at FROM source_files WHERE +outcome = 'ingested' ORDER BY id DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    let by_outcome = |o: &str| {
        count(
            conn,
            "SELECT COUNT(*) FROM source_files WHERE outcome = ?1",
            [o],
        )
    };
    Ok(FileCounts {
        ingested: count(conn, ing, [])?,
        ingested_last_hour: count(conn, &format!("{ing} AND seen_at >= ?1"), [hour])?,
        ingested_last_day: count(conn, &format!("{ing} AND seen_at >= ?1"), [day])?,
        quarantined: by_outcome("rejected")?,
        duplicates: by_outcome("duplicate")?,
        last,
    })
}

/// Record counts; `lots` names the store's lots (read once by the caller).
pub fn record_counts(conn: &Connection, lots: &super::lots::LotIndex) -> Result<RecordCounts> {
    // Cycles without a lot, and those of each lot nobody registered (an index range a lot,
    // few lots): no further seek per lot.
    let mut pending = count(conn, "SELECT COUNT(*) FROM cycles WHERE lot IS NULL", [])?;
    let mut of_lot = conn.prepare_cached("SELECT COUNT(*) FROM cycles WHERE lot = ?1")?;
    for lot in lots.unregistered() {
        pending += of_lot.query_row([lot], |r| r.get::<_, i64>(0))?;
    }
    Ok(RecordCounts {
        // The partial index `cycles_conflicting` (0016) holds only cycles with conflicts.
        conflicts: count(
            conn,
            "SELECT COALESCE(SUM(conflicts), 0) FROM cycles WHERE conflicts > 0",
            [],
        )?,
        lots: i64::try_from(lots.registered.len()).unwrap_or(i64::MAX),
        cycles: count(conn, "SELECT COUNT(*) FROM cycles", [])?,
        pending_cycles: pending,
    })
}

/// Every event that concerns a lot: its registrations, the files that brought its cycles,
/// corrections, exclusions, notes and sign-offs of its batches, in order. Each part is an
/// index lookup, so the time follows the lot's events, not the store's.
pub fn lot_events(conn: &Connection, lot: &str) -> Result<Vec<StoredEvent>> {
    let mut stmt = conn.prepare(
        "SELECT e.seq, e.at, e.actor, e.kind, e.subject, e.payload, e.prev_hash, e.hash FROM events e
         WHERE e.seq IN (
             SELECT seq FROM events WHERE subject = ?1 AND kind <> 'file-ingested'
             UNION SELECT x.seq FROM cycles c JOIN events x ON x.subject = c.batch_id
                 AND x.kind <> 'file-ingested' WHERE c.lot = ?1
             UNION SELECT b.event_seq FROM cycles c JOIN batch_sources b ON b.batch_id = c.batch_id
                 WHERE c.lot = ?1
             UNION SELECT event_seq FROM lot_registrations WHERE lot = ?1)
         ORDER BY e.seq",
    )?;
    let rows = stmt
        .query_map([lot], |r| {
            Ok(StoredEvent {
                seq: r.get(0)?,
                at: r.get(1)?,
                actor: r.get(2)?,
                kind: r.get(3)?,
                subject: r.get(4)?,
                payload: r.get(5)?,
                prev_hash: r.get(6)?,
                hash: r.get(7)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The id of the newest file record, 0 when none.
pub fn newest_file_id(conn: &Connection) -> Result<i64> {
    Ok(
        conn.query_row("SELECT COALESCE(MAX(id), 0) FROM source_files", [], |r| {
            r.get(0)
        })?,
    )
}

/// A file as recorded: id, path, outcome and the rows it brought.
#[derive(Debug, Clone)]
pub struct FileRecorded {
    pub id: i64,
    pub path: String,
    pub outcome: String,
    pub rows_new: i64,
}

/// Files recorded after id `after`, oldest first.
pub fn files_after(conn: &Connection, after: i64) -> Result<Vec<FileRecorded>> {
    let mut stmt = conn.prepare(
        "SELECT id, path, outcome, rows_new FROM source_files WHERE id > ?1 ORDER BY id",
    )?;
    let rows = stmt
        .query_map([after], |r| {
            Ok(FileRecorded {
                id: r.get(0)?,
                path: r.get(1)?,
                outcome: r.get(2)?,
                rows_new: r.get(3)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The sequence number of the newest event, 0 when none.
pub fn newest_event(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row("SELECT COALESCE(MAX(seq), 0) FROM events", [], |r| r.get(0))?)
}
