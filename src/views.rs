//! Read-only views for people and scripts: status, history, and the fingerprint that a
//! sign-off covers. Lot and cycle tables live in [`crate::analysis`], beside the metrics.

use rusqlite::{Connection, OptionalExtension};
use serde::Serialize;
use sha2::{Digest, Sha256};

use crate::commands::{CmdResult, Failure};
use crate::config::Config;
use crate::store;

pub use crate::analysis::{cycles, lots};

/// What `status` reports.
#[derive(Debug, Serialize)]
pub struct Status {
    pub database: String,
    pub files_ingested: i64,
    pub files_ingested_last_hour: i64,
    pub files_ingested_last_day: i64,
    pub last_file: Option<String>,
    pub last_ingest_at: Option<String>,
    pub files_quarantined: i64,
    pub duplicates: i64,
    pub conflicts: i64,
    pub lots: i64,
    pub cycles: i64,
    pub pending_cycles: i64,
    pub lots_needing_attention: Vec<String>,
    pub outbox_waiting: i64,
}

fn count(conn: &Connection, sql: &str, p: impl rusqlite::Params) -> store::Result<i64> {
    Ok(conn.query_row(sql, p, |r| r.get(0))?)
}

/// Gather the status figures.
pub fn gather_status(conn: &Connection, cfg: &Config) -> store::Result<Status> {
    let hour = (chrono::Utc::now() - chrono::Duration::hours(1))
        .to_rfc3339_opts(chrono::SecondsFormat::Millis, true);
    let day = (chrono::Utc::now() - chrono::Duration::days(1))
        .to_rfc3339_opts(chrono::SecondsFormat::Millis, true);
    let ing = "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'";
    let last: Option<(String, String)> = conn
        .query_row(
            "SELECT path, seen_at FROM source_files WHERE outcome = 'ingested' ORDER BY id DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    let attention = crate::analysis::lots_needing_attention(conn, cfg)?;
    let outbox_waiting = crate::analysis::outbox_waiting(conn)?;
    Ok(Status {
        database: cfg.database_path().display().to_string(),
        files_ingested: count(conn, ing, [])?,
        files_ingested_last_hour: count(conn, &format!("{ing} AND seen_at >= ?1"), [&hour])?,
        files_ingested_last_day: count(conn, &format!("{ing} AND seen_at >= ?1"), [&day])?,
        last_file: last.as_ref().map(|l| l.0.clone()),
        last_ingest_at: last.map(|l| l.1),
        files_quarantined: count(
            conn,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'rejected'",
            [],
        )?,
        duplicates: count(
            conn,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'duplicate'",
            [],
        )?,
        conflicts: count(conn, "SELECT COALESCE(SUM(conflicts), 0) FROM cycles", [])?,
        lots: count(conn, "SELECT COUNT(*) FROM lots", [])?,
        cycles: count(conn, "SELECT COUNT(*) FROM cycles", [])?,
        pending_cycles: count(
            conn,
            "SELECT COUNT(*) FROM cycles c WHERE c.lot IS NULL OR NOT EXISTS (SELECT 1 FROM lots l WHERE l.lot = c.lot)",
            [],
        )?,
        lots_needing_attention: attention,
        outbox_waiting,
    })
}

pub fn status(cfg: &Config, json: bool) -> CmdResult {
    let conn = store::open(&cfg.database_path())?;
    let s = gather_status(&conn, cfg)?;
    if json {
        println!("{}", serde_json::to_string_pretty(&s)?);
        return Ok(0);
    }
    println!("database        {}", s.database);
    println!(
        "files ingested  {} (last hour {}, last day {})",
        s.files_ingested, s.files_ingested_last_hour, s.files_ingested_last_day
    );
    match (&s.last_file, &s.last_ingest_at) {
        (Some(f), Some(at)) => println!("last ingested   {f} at {at}"),
        _ => println!("last ingested   nothing yet"),
    }
    println!("quarantined     {}", s.files_quarantined);
    println!("duplicates      {}", s.duplicates);
    println!(
        "conflicts       {} (values kept and flagged; settle with `turnbook correct`)",
        s.conflicts
    );
    println!(
        "lots / cycles   {} / {} ({} cycles pending: lot unknown or not registered)",
        s.lots, s.cycles, s.pending_cycles
    );
    println!("mail waiting    {}", s.outbox_waiting);
    if s.lots_needing_attention.is_empty() {
        println!("attention       none");
    } else {
        for l in &s.lots_needing_attention {
            println!("attention       {l}");
        }
    }
    Ok(0)
}

/// One event as shown in a history.
#[derive(Debug, Serialize)]
pub struct HistoryEntry {
    pub seq: i64,
    pub at: String,
    pub actor: String,
    pub kind: String,
    pub subject: String,
    pub payload: serde_json::Value,
    pub hash: String,
}

/// Every event that concerns a lot: its registrations, the files that brought its cycles,
/// corrections, exclusions, notes and sign-offs of its batches.
pub fn lot_history(conn: &Connection, lot: &str) -> store::Result<Vec<HistoryEntry>> {
    let mut stmt = conn.prepare(
        "SELECT e.seq, e.at, e.actor, e.kind, e.subject, e.payload, e.hash FROM events e
         WHERE e.subject = ?1
            OR e.subject IN (SELECT batch_id FROM cycles WHERE lot = ?1)
            OR e.seq IN (SELECT b.event_seq FROM batch_sources b JOIN cycles c ON c.batch_id = b.batch_id WHERE c.lot = ?1)
            OR (e.kind = 'file-ingested' AND EXISTS (
                    SELECT 1 FROM json_each(e.payload, '$.lots') j WHERE json_extract(j.value, '$.lot') = ?1))
         ORDER BY e.seq",
    )?;
    let rows = stmt
        .query_map([lot], |r| {
            let body: String = r.get(5)?;
            Ok(HistoryEntry {
                seq: r.get(0)?,
                at: r.get(1)?,
                actor: r.get(2)?,
                kind: r.get(3)?,
                subject: r.get(4)?,
                payload: serde_json::from_str(&body).unwrap_or(serde_json::Value::String(body)),
                hash: r.get(6)?,
            })
        })?
        .collect::<Result<Vec<_>, _>>()?;
    Ok(rows)
}

pub fn history(cfg: &Config, lot: &str, json: bool) -> CmdResult {
    let conn = store::open(&cfg.database_path())?;
    let h = lot_history(&conn, lot)?;
    if h.is_empty() {
        return Err(Failure::rejected(format!("no events concern lot '{lot}'")));
    }
    if json {
        println!("{}", serde_json::to_string_pretty(&h)?);
        return Ok(0);
    }
    for e in &h {
        let detail = match e.kind.as_str() {
            "correction" => format!(
                "{} of batch {} -> {} (was {}), reason: {}",
                e.payload["measurement"]["quantity"].as_str().unwrap_or("?"),
                e.payload["measurement"]["batch_id"].as_str().unwrap_or("?"),
                e.payload["measurement"]["value"],
                e.payload["previous"],
                e.payload["reason"].as_str().unwrap_or("")
            ),
            "exclusion" => format!(
                "excluded={} reason: {}",
                e.payload["excluded"],
                e.payload["reason"].as_str().unwrap_or("")
            ),
            "note" => e.payload["text"].as_str().unwrap_or("").to_string(),
            "sign-off" => format!(
                "{} of {} (SHA-256 {})",
                e.payload["meaning"].as_str().unwrap_or("?"),
                e.payload["what"].as_str().unwrap_or("?"),
                e.payload["signed_sha256"].as_str().unwrap_or("?")
            ),
            _ => e.subject.clone(),
        };
        println!(
            "#{:<6} {}  {:<10} {:<15} {}",
            e.seq, e.at, e.actor, e.kind, detail
        );
    }
    Ok(0)
}

/// What a sign-off of a lot covers: the hashes of every event concerning the lot except
/// sign-offs themselves, in order. Returns a description and its SHA-256.
pub fn lot_fingerprint(conn: &Connection, lot: &str) -> store::Result<(String, String)> {
    let h = lot_history(conn, lot)?;
    let covered: Vec<&HistoryEntry> = h.iter().filter(|e| e.kind != "sign-off").collect();
    if covered.is_empty() {
        return Err(store::StoreError::Invalid(format!(
            "no history to sign for lot '{lot}'"
        )));
    }
    let mut sha = Sha256::new();
    for e in &covered {
        sha.update(e.hash.as_bytes());
        sha.update(b"\n");
    }
    let last = covered.last().map_or(0, |e| e.seq);
    Ok((
        format!(
            "history of lot {lot}: {} events up to #{last}",
            covered.len()
        ),
        hex::encode(sha.finalize()),
    ))
}
