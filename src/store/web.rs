//! Reads for the browser view and the operations endpoints: files by outcome, sign-offs,
//! the chain's head and the outbox's oldest waiting message.

use rusqlite::{Connection, OptionalExtension};

use super::Result;

/// One recorded file, as the files page lists it.
#[derive(Debug, Clone, serde::Serialize)]
pub struct FileRow {
    pub id: i64,
    pub path: String,
    pub sha256: String,
    pub seen_at: String,
    pub outcome: String,
    pub error: Option<String>,
    pub quarantined: Option<String>,
    pub rows_new: i64,
    pub rows_known: i64,
    pub rows_conflict: i64,
}

/// The newest `limit` recorded files, newest first.
pub fn recent_files(conn: &Connection, limit: i64) -> Result<Vec<FileRow>> {
    let mut stmt = conn.prepare(
        "SELECT id, path, sha256, seen_at, outcome, error, quarantined, rows_new, rows_known,
                rows_conflict
         FROM source_files ORDER BY id DESC LIMIT ?1",
    )?;
    let rows = stmt
        .query_map([limit], |r| {
            Ok(FileRow {
                id: r.get(0)?,
                path: r.get(1)?,
                sha256: r.get(2)?,
                seen_at: r.get(3)?,
                outcome: r.get(4)?,
                error: r.get(5)?,
                quarantined: r.get(6)?,
                rows_new: r.get(7)?,
                rows_known: r.get(8)?,
                rows_conflict: r.get(9)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// One sign-off event: its lot (the subject) and its payload as stored.
#[derive(Debug, Clone)]
pub struct SignOffRow {
    pub seq: i64,
    pub at: String,
    pub actor: String,
    pub lot: String,
    pub payload: String,
}

/// Every sign-off, oldest first.
pub fn sign_offs(conn: &Connection) -> Result<Vec<SignOffRow>> {
    let mut stmt = conn.prepare(
        "SELECT seq, at, actor, subject, payload FROM events WHERE kind = 'sign-off' ORDER BY seq",
    )?;
    let rows = stmt
        .query_map([], |r| {
            Ok(SignOffRow {
                seq: r.get(0)?,
                at: r.get(1)?,
                actor: r.get(2)?,
                lot: r.get(3)?,
                payload: r.get(4)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The newest event of the audit chain: sequence number, time and hash.
#[derive(Debug, Clone)]
pub struct ChainHead {
    pub seq: i64,
    pub at: String,
    pub hash: String,
}

/// The chain's newest event, none when the chain is empty.
pub fn chain_head(conn: &Connection) -> Result<Option<ChainHead>> {
    Ok(conn
        .query_row(
            "SELECT seq, at, hash FROM events ORDER BY seq DESC LIMIT 1",
            [],
            |r| {
                Ok(ChainHead {
                    seq: r.get(0)?,
                    at: r.get(1)?,
                    hash: r.get(2)?,
                })
            },
        )
        .optional()?)
}

/// How many fits have been computed and stored: fits are only ever appended (a lot's
/// history keeps every one), so the newest id counts them.
pub fn fits_stored(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row("SELECT COALESCE(MAX(id), 0) FROM fits", [], |r| r.get(0))?)
}

/// When the oldest message still waiting for delivery was queued.
pub fn oldest_waiting(conn: &Connection) -> Result<Option<String>> {
    Ok(conn.query_row(
        "SELECT MIN(queued_at) FROM alert_outbox WHERE delivered_at IS NULL",
        [],
        |r| r.get(0),
    )?)
}

/// One queued alert message.
#[derive(Debug, Clone)]
pub struct MessageRow {
    pub queued_at: String,
    pub lot: String,
    pub rule: String,
    pub state: String,
    pub severity: i64,
    pub subject: String,
    pub delivered_at: Option<String>,
}

/// The newest `limit` alert messages (digests left out), newest first.
pub fn recent_messages(conn: &Connection, limit: i64) -> Result<Vec<MessageRow>> {
    let mut stmt = conn.prepare(
        "SELECT queued_at, lot, rule, state, severity, subject, delivered_at FROM alert_outbox
         WHERE rule <> 'digest' ORDER BY id DESC LIMIT ?1",
    )?;
    let rows = stmt
        .query_map([limit], |r| {
            Ok(MessageRow {
                queued_at: r.get(0)?,
                lot: r.get(1)?,
                rule: r.get(2)?,
                state: r.get(3)?,
                severity: r.get(4)?,
                subject: r.get(5)?,
                delivered_at: r.get(6)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}
