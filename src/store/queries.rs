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

/// A total the triggers of migration 0020 keep (see `schema/0020_kept_counts.sql`).
pub fn kept_total(conn: &Connection, name: &str) -> Result<i64> {
    Ok(conn
        .prepare_cached("SELECT n FROM kept_totals WHERE name = ?1")?
        .query_row([name], |r| r.get(0))
        .optional()?
        .unwrap_or(0))
}

/// Ingested files seen at or after `since` (a stored timestamp): the kept per-minute
/// totals of the minutes after the one `since` falls in, and a count of the rows of that
/// minute. The work is bounded by the window's minutes, not by the files in it.
fn ingested_since(conn: &Connection, since: &str) -> Result<i64> {
    let minute: String = since.chars().take(16).collect();
    // Every timestamp of that minute is `minute` followed by ':' and the seconds; ';'
    // sorts right after ':'.
    let minute_end = format!("{minute};");
    let whole: i64 = conn
        .prepare_cached("SELECT COALESCE(SUM(n), 0) FROM ingested_by_minute WHERE minute > ?1")?
        .query_row([&minute], |r| r.get(0))?;
    let part = count(
        conn,
        "SELECT COUNT(*) FROM source_files
         WHERE outcome = 'ingested' AND seen_at >= ?1 AND seen_at < ?2",
        [since, minute_end.as_str()],
    )?;
    Ok(whole + part)
}

/// File counts; `hour` and `day` are the stored timestamps an hour and a day ago.
pub fn file_counts(conn: &Connection, hour: &str, day: &str) -> Result<FileCounts> {
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
    Ok(FileCounts {
        ingested: kept_total(conn, "files-ingested")?,
        ingested_last_hour: ingested_since(conn, hour)?,
        ingested_last_day: ingested_since(conn, day)?,
        quarantined: kept_total(conn, "files-rejected")?,
        duplicates: kept_total(conn, "files-duplicate")?,
        last,
    })
}

/// Record counts; `lots` names the store's lots (read once by the caller).
pub fn record_counts(conn: &Connection, lots: &super::lots::LotIndex) -> Result<RecordCounts> {
    // Cycles without a lot, and those of each lot nobody registered (few lots, a lookup
    // each in the kept per-lot counts).
    let mut pending = kept_total(conn, "cycles-without-lot")?;
    let mut of_lot =
        conn.prepare_cached("SELECT COALESCE(SUM(n), 0) FROM lot_cycle_counts WHERE lot = ?1")?;
    for lot in lots.unregistered() {
        pending += of_lot.query_row([lot], |r| r.get::<_, i64>(0))?;
    }
    Ok(RecordCounts {
        conflicts: kept_total(conn, "conflicts")?,
        lots: i64::try_from(lots.registered.len()).unwrap_or(i64::MAX),
        cycles: kept_total(conn, "cycles")?,
        pending_cycles: pending,
    })
}

/// The kept totals (migration 0020) that differ from a count of the rows themselves, as
/// (what, kept, counted). `verify` reports them; empty when all agree. Counts every row.
pub fn kept_totals_disagreeing(conn: &Connection) -> Result<Vec<(String, i64, i64)>> {
    let mut out = Vec::new();
    let pairs: [(&str, &str); 6] = [
        (
            "files-ingested",
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'",
        ),
        (
            "files-rejected",
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'rejected'",
        ),
        (
            "files-duplicate",
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'duplicate'",
        ),
        ("cycles", "SELECT COUNT(*) FROM cycles"),
        (
            "cycles-without-lot",
            "SELECT COUNT(*) FROM cycles WHERE lot IS NULL",
        ),
        (
            "conflicts",
            "SELECT COALESCE(SUM(conflicts), 0) FROM cycles WHERE conflicts > 0",
        ),
    ];
    for (name, sql) in pairs {
        let (kept, counted) = (kept_total(conn, name)?, count(conn, sql, [])?);
        if kept != counted {
            out.push((name.to_string(), kept, counted));
        }
    }
    // Each side's keys against the other's: a key missing on one side counts as 0 there.
    let mut grouped = |what: &str, counted: &str, (table, key): (&str, &str)| -> Result<()> {
        let sql = format!(
            "WITH c(key, n) AS ({counted}),
                  k(key, n) AS (SELECT {key}, n FROM {table} WHERE n <> 0),
                  u(key) AS (SELECT key FROM c UNION SELECT key FROM k)
             SELECT u.key, COALESCE(k.n, 0), COALESCE(c.n, 0)
             FROM u LEFT JOIN k USING (key) LEFT JOIN c USING (key)
             WHERE COALESCE(k.n, 0) <> COALESCE(c.n, 0)"
        );
        let mut stmt = conn.prepare(&sql)?;
        let rows = stmt.query_map([], |r| Ok((r.get::<_, String>(0)?, r.get(1)?, r.get(2)?)))?;
        for row in rows {
            let (key, kept, counted): (String, i64, i64) = row?;
            out.push((format!("{what} {key}"), kept, counted));
        }
        Ok(())
    };
    grouped(
        "files ingested in minute",
        "SELECT substr(seen_at, 1, 16), COUNT(*) FROM source_files
         WHERE outcome = 'ingested' GROUP BY 1",
        ("ingested_by_minute", "minute"),
    )?;
    grouped(
        "cycles of lot",
        "SELECT lot, COUNT(*) FROM cycles WHERE lot IS NOT NULL GROUP BY lot",
        ("lot_cycle_counts", "lot"),
    )?;
    Ok(out)
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
