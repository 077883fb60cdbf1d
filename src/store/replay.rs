//! The stored rows `verify` compares with its replay of the events, read as stored.

use std::collections::HashMap;

use rusqlite::{Connection, OptionalExtension};

use super::Result;
use crate::model::event::FileRow;

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

/// A provenance link as stored: (batch id, event seq, line, source file id).
pub type StoredLink = (String, i64, i64, Option<i64>);

/// Every provenance link.
pub fn source_links(conn: &Connection) -> Result<Vec<StoredLink>> {
    let mut stmt = conn.prepare(
        "SELECT batch_id, event_seq, line, source_file_id FROM batch_sources
         ORDER BY batch_id, event_seq, line",
    )?;
    let rows = stmt
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))?
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
