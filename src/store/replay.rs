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
