//! The database side of the one writer: a backfill's settings, its log hook and
//! checkpoints on a thread of their own, the readers' hash lookups, and the long-running
//! service's smaller footprint. The choices and their measured costs are explained where
//! the ingestion sets them.

use std::path::Path;
use std::sync::Arc;
use std::sync::atomic::{AtomicI64, Ordering};

use rusqlite::hooks::Wal;
use rusqlite::{Connection, OpenFlags};

use super::Result;

/// Settings of a backfill's writer: statements kept prepared, a page cache of
/// `cache_kib` (negative: KiB, as SQLite takes it) and SQLite's own checkpoints every
/// `checkpoint_bytes` of log.
pub fn tune_writer(
    conn: &mut Connection,
    statements: usize,
    cache_kib: i64,
    checkpoint_bytes: i64,
) -> Result<()> {
    conn.set_prepared_statement_cache_capacity(statements);
    conn.pragma_update(None, "cache_size", cache_kib)?;
    let pages = checkpoint_bytes / page_size(conn)?.max(512);
    conn.pragma_update(None, "wal_autocheckpoint", pages)?;
    Ok(())
}

/// Settings of the service's writer, one file at a time: a small page cache and
/// checkpoints every `checkpoint_pages`.
pub fn tune_service(conn: &Connection, cache_kib: i64, checkpoint_pages: i64) -> Result<()> {
    conn.pragma_update(None, "cache_size", cache_kib)?;
    conn.pragma_update(None, "wal_autocheckpoint", checkpoint_pages)?;
    Ok(())
}

/// Hand the connection's page cache and other memory SQLite can spare back to the heap
/// (`PRAGMA shrink_memory`): an idle service keeps no pages of its start-up scan.
pub fn shrink_memory(conn: &Connection) -> Result<()> {
    conn.execute_batch("PRAGMA shrink_memory")?;
    Ok(())
}

/// The database's page size in bytes.
pub fn page_size(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row("PRAGMA page_size", [], |r| r.get(0))?)
}

/// SQLite's checkpoint interval, in pages.
pub fn autocheckpoint(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row("PRAGMA wal_autocheckpoint", [], |r| r.get(0))?)
}

/// Commits sync the log (`full`, the default) or leave it to the next sync.
/// Whether commits sync the log to disk at once (`synchronous` FULL or stronger).
pub fn full_sync(conn: &Connection) -> Result<bool> {
    let level: i64 = conn.query_row("PRAGMA synchronous", [], |r| r.get(0))?;
    Ok(level >= 2)
}

pub fn set_full_sync(conn: &Connection, full: bool) -> Result<()> {
    conn.pragma_update(None, "synchronous", if full { "FULL" } else { "NORMAL" })?;
    Ok(())
}

/// Count the log's frames after each commit into `frames`. Installing the hook stops
/// SQLite's own checkpoints until [`restore_checkpoints`].
pub fn count_log_frames(conn: &mut Connection, frames: Arc<AtomicI64>) -> Result<()> {
    conn.wal_hook(Some(move |_: &mut Wal, pages: std::ffi::c_int| {
        frames.store(i64::from(pages), Ordering::Relaxed);
        Ok(())
    }))?;
    Ok(())
}

/// Remove the log hook and give SQLite back its checkpoints every `pages` pages.
pub fn restore_checkpoints(conn: &mut Connection, pages: i64) -> Result<()> {
    conn.wal_hook(None::<fn(&mut Wal, std::ffi::c_int) -> rusqlite::Result<()>>)?;
    conn.pragma_update(None, "wal_autocheckpoint", pages)?;
    Ok(())
}

/// Copy the log into the database as far as no reader needs it (never waits).
pub fn checkpoint(conn: &Connection) -> Result<()> {
    conn.query_row("PRAGMA wal_checkpoint(PASSIVE)", [], |_| Ok(()))?;
    Ok(())
}

/// A connection of its own for a checkpointing thread.
pub fn open_for_checkpoints(db_path: &Path) -> Result<Connection> {
    let c = Connection::open(db_path)?;
    c.busy_timeout(std::time::Duration::from_secs(10))?;
    set_full_sync(&c, false)?;
    Ok(c)
}

/// A read-only connection for a reader thread's hash lookups.
pub fn open_for_lookups(db_path: &Path) -> Result<Connection> {
    let conn = Connection::open_with_flags(
        db_path,
        OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )?;
    super::more_lookaside(&conn);
    conn.busy_timeout(std::time::Duration::from_secs(10))?;
    Ok(conn)
}

/// `PRAGMA data_version`: it moves only when another connection commits, and reading it
/// writes nothing (the web view's change counter polls it).
pub fn data_version(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row("PRAGMA data_version", [], |r| r.get(0))?)
}

/// For each digest (empty: none), the file ingested before with that content, all looked
/// up in one read snapshot.
pub fn ingested_with_hashes<'a>(
    conn: &mut Connection,
    digests: impl Iterator<Item = &'a str>,
) -> Result<Vec<Option<i64>>> {
    let tx = conn.transaction()?;
    let mut found = Vec::new();
    for d in digests {
        found.push(if d.is_empty() {
            None
        } else {
            super::records::ingested_file_with_hash(&tx, d)?
        });
    }
    tx.finish()?;
    Ok(found)
}

/// True when a file at `path` with this size and mtime was recorded before.
pub fn recorded_unchanged(
    conn: &Connection,
    path: &str,
    size: i64,
    mtime: Option<&str>,
) -> Result<bool> {
    let n: i64 = conn
        .prepare_cached(
            "SELECT COUNT(*) FROM source_files WHERE path = ?1 AND size = ?2 AND mtime IS ?3",
        )?
        .query_row(rusqlite::params![path, size, mtime], |r| r.get(0))?;
    Ok(n > 0)
}

/// For each file version (path, size, mtime as stored), whether a row records exactly it:
/// one pass over the recorded files in path order, merged with the versions sorted by
/// path, so that a start-up with tens of thousands of files costs one index walk rather
/// than a query each, and holds nothing of the table in memory.
pub fn recorded_among(
    conn: &Connection,
    versions: &[(String, i64, Option<String>)],
) -> Result<Vec<bool>> {
    let mut order: Vec<usize> = (0..versions.len()).collect();
    order.sort_by(|a, b| versions[*a].0.cmp(&versions[*b].0));
    let mut known = vec![false; versions.len()];
    let mut stmt = conn.prepare("SELECT path, size, mtime FROM source_files ORDER BY path")?;
    let mut rows = stmt.query([])?;
    let mut i = 0;
    while let Some(row) = rows.next()? {
        let path: String = row.get(0)?;
        while i < order.len() && versions[order[i]].0 < path {
            i += 1;
        }
        if i == order.len() {
            break;
        }
        let (size, mtime): (i64, Option<String>) = (row.get(1)?, row.get(2)?);
        let mut j = i;
        while j < order.len() && versions[order[j]].0 == path {
            let v = &versions[order[j]];
            if v.1 == size && v.2 == mtime {
                known[order[j]] = true;
            }
            j += 1;
        }
    }
    Ok(known)
}
