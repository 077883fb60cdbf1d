//! Reads of a lot's records, as they stand or as they stood after an event, and the
//! stored fits.

use std::collections::{BTreeSet, HashMap};

use rusqlite::{Connection, OptionalExtension, Transaction};
use serde::Serialize;

use super::{Result, records};
use crate::model::cycle::CycleView;
use crate::model::event::LotRecord;

/// Where a cycle's values came from.
#[derive(Debug, Clone, Serialize)]
pub struct SourceRef {
    pub file_id: i64,
    pub path: String,
    pub sha256: String,
    /// The export profile the file was read with.
    pub profile: Option<String>,
    /// Lines of that file the values were read from.
    pub lines: Vec<i64>,
}

/// A source row as the queries return it: file id, path, SHA-256, profile, line.
type SourceRow = (i64, String, String, Option<String>, Option<i64>);

pub fn sources_of(conn: &Connection, batch: &str, as_of: i64) -> Result<Vec<SourceRef>> {
    let mut stmt = conn.prepare_cached(
        "SELECT f.id, f.path, f.sha256, f.profile, b.line FROM batch_sources b JOIN source_files f ON f.id = b.source_file_id
         WHERE b.batch_id = ?1 AND b.event_seq <= ?2 ORDER BY f.id, b.line",
    )?;
    let rows = stmt.query_map(rusqlite::params![batch, as_of], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
            r.get::<_, Option<String>>(3)?,
            r.get::<_, Option<i64>>(4)?,
        ))
    })?;
    let mut out: Vec<SourceRef> = Vec::new();
    for row in rows {
        add_source(&mut out, row?);
    }
    Ok(out)
}

/// The sources of every batch of a lot in one query (the recompute path), by batch id.
pub fn sources_of_lot(conn: &Connection, lot: &str) -> Result<HashMap<String, Vec<SourceRef>>> {
    let mut stmt = conn.prepare_cached(
        "SELECT b.batch_id, f.id, f.path, f.sha256, f.profile, b.line
         FROM cycles c JOIN batch_sources b ON b.batch_id = c.batch_id
         JOIN source_files f ON f.id = b.source_file_id
         WHERE c.lot = ?1 ORDER BY b.batch_id, f.id, b.line",
    )?;
    let rows = stmt.query_map([lot], |r| {
        Ok((
            r.get::<_, String>(0)?,
            (
                r.get::<_, i64>(1)?,
                r.get::<_, String>(2)?,
                r.get::<_, String>(3)?,
                r.get::<_, Option<String>>(4)?,
                r.get::<_, Option<i64>>(5)?,
            ),
        ))
    })?;
    let mut out: HashMap<String, Vec<SourceRef>> = HashMap::new();
    for row in rows {
        let (batch, src) = row?;
        add_source(out.entry(batch).or_default(), src);
    }
    Ok(out)
}

/// The sources of one batch as it stands now ([`sources_of_lot`] for one batch): a lot
/// streamed cycle by cycle looks up each batch's as it comes.
pub fn sources_of_batch(conn: &Connection, batch: &str) -> Result<Vec<SourceRef>> {
    let mut stmt = conn.prepare_cached(
        "SELECT f.id, f.path, f.sha256, f.profile, b.line
         FROM batch_sources b JOIN source_files f ON f.id = b.source_file_id
         WHERE b.batch_id = ?1 ORDER BY f.id, b.line",
    )?;
    let rows = stmt.query_map([batch], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
            r.get::<_, Option<String>>(3)?,
            r.get::<_, Option<i64>>(4)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        add_source(&mut out, row?);
    }
    Ok(out)
}

fn add_source(out: &mut Vec<SourceRef>, (id, path, sha, profile, line): SourceRow) {
    match out.last_mut() {
        Some(s) if s.file_id == id => {
            if let Some(l) = line
                && !s.lines.contains(&l)
            {
                s.lines.push(l);
            }
        }
        _ => out.push(SourceRef {
            file_id: id,
            path,
            sha256: sha,
            profile,
            lines: line.into_iter().collect(),
        }),
    }
}

/// The lot's registration as it stood after event `as_of`, replayed from the events.
pub fn lot_record_as_of(conn: &Connection, lot: &str, as_of: i64) -> Result<Option<LotRecord>> {
    let mut stmt = conn.prepare(
        "SELECT payload FROM events WHERE seq <= ?1 AND kind IN ('lot-registered', 'file-ingested') ORDER BY seq",
    )?;
    let mut found = None;
    let rows = stmt.query_map([as_of], |r| r.get::<_, String>(0))?;
    for body in rows {
        match crate::model::Payload::from_json(&body?)? {
            crate::model::Payload::LotRegistered { lot: l, .. } if l.lot == lot => found = Some(l),
            crate::model::Payload::FileIngested { lots, .. } => {
                if let Some(l) = lots.into_iter().rev().find(|l| l.lot == lot) {
                    found = Some(l);
                }
            }
            _ => {}
        }
    }
    Ok(found)
}

/// The lot's cycles as they stood after event `as_of`: every measurement and exclusion up
/// to that event, through the same derivation as the current view.
pub fn cycles_as_of(conn: &Connection, lot: &str, as_of: i64) -> Result<Vec<CycleView>> {
    let mut stmt = conn.prepare(
        "SELECT DISTINCT batch_id FROM batch_sources WHERE event_seq <= ?1 ORDER BY batch_id",
    )?;
    let batches = stmt
        .query_map([as_of], |r| r.get::<_, String>(0))?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    let mut out = Vec::new();
    for b in batches {
        let rows = records::measurements_up_to(conn, &b, as_of)?;
        let first_seq = rows.iter().map(|r| r.1).min().unwrap_or(0);
        let rows: Vec<_> = rows.into_iter().map(|r| r.0).collect();
        let excluded = conn
            .query_row(
                "SELECT payload FROM events WHERE kind = 'exclusion' AND subject = ?1 AND seq <= ?2 ORDER BY seq DESC LIMIT 1",
                rusqlite::params![b, as_of],
                |r| r.get::<_, String>(0),
            )
            .optional()?
            .and_then(|p| serde_json::from_str::<serde_json::Value>(&p).ok())
            .and_then(|v| v["excluded"].as_bool())
            .unwrap_or(false);
        let v = crate::model::cycle::derive_cycle(&b, &rows, excluded, first_seq);
        if v.lot.as_deref() == Some(lot) {
            out.push(v);
        }
    }
    out.sort_by(|a, b| {
        (a.cycle_no.is_none(), a.cycle_no, &a.started_at, a.first_seq).cmp(&(
            b.cycle_no.is_none(),
            b.cycle_no,
            &b.started_at,
            b.first_seq,
        ))
    });
    Ok(out)
}

/// Every lot name that has a registration or cycles.
pub fn lot_names(conn: &Connection) -> Result<Vec<String>> {
    let mut stmt = conn.prepare_cached(
        "SELECT lot FROM lots UNION SELECT lot FROM lot_cycle_counts WHERE n > 0 ORDER BY 1",
    )?;
    let rows = stmt
        .query_map([], |r| r.get(0))?
        .collect::<std::result::Result<Vec<String>, _>>()?;
    Ok(rows)
}

/// The newest event that wrote records of a lot.
pub fn newest_seq_of(conn: &Connection, lot: &str) -> Result<i64> {
    // Each part is an index-only lookup: batch_sources by (batch_id, event_seq), lots by
    // name, exclusions through their partial index.
    Ok(conn
        .prepare_cached(
            "SELECT MAX(s) FROM (
             SELECT (SELECT MAX(b.event_seq) FROM batch_sources b WHERE b.batch_id = c.batch_id) AS s
                 FROM cycles c WHERE c.lot = ?1
             UNION ALL SELECT event_seq FROM lots WHERE lot = ?1
             UNION ALL SELECT MAX(e.seq) FROM cycles c JOIN events e
                 ON e.subject = c.batch_id AND e.kind = 'exclusion' WHERE c.lot = ?1)",
        )?
        .query_row([lot], |r| r.get::<_, Option<i64>>(0))?
        .unwrap_or(0))
}

/// One row of `fits`: the analysis of `lot` as computed after event `after`.
#[allow(clippy::too_many_arguments)]
pub fn store_fit(
    tx: &Transaction<'_>,
    lot: &str,
    after: i64,
    basis: &str,
    model: Option<&str>,
    analysis_json: &str,
    (engine_version, config_sha256): (&str, &str),
    at: &str,
) -> Result<()> {
    tx.prepare_cached(
        "INSERT INTO fits(lot, computed_at, after_seq, engine_version, basis, model, analysis,
             config_sha256)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
    )?
    .execute(rusqlite::params![
        lot,
        at,
        after,
        engine_version,
        basis,
        model,
        analysis_json,
        config_sha256
    ])?;
    Ok(())
}

/// The newest stored fit of a lot, as `verify` recomputes it.
#[derive(Debug, Clone)]
pub struct StoredFit {
    pub lot: String,
    pub after_seq: i64,
    pub engine_version: String,
    pub config_sha256: Option<String>,
    pub analysis: String,
}

/// Each lot's newest stored fit, by lot.
pub fn newest_fits(conn: &Connection) -> Result<Vec<StoredFit>> {
    let mut st = conn.prepare(
        "SELECT f.lot, f.after_seq, f.engine_version, f.config_sha256, f.analysis FROM fits f
         WHERE f.id = (SELECT MAX(g.id) FROM fits g WHERE g.lot = f.lot) ORDER BY f.lot",
    )?;
    let rows = st.query_map([], |r| {
        Ok(StoredFit {
            lot: r.get(0)?,
            after_seq: r.get(1)?,
            engine_version: r.get(2)?,
            config_sha256: r.get(3)?,
            analysis: r.get(4)?,
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<Vec<_>>>()?)
}

/// The event after which a lot was last fitted, if ever.
pub fn fitted_after(conn: &Connection, lot: &str) -> Result<Option<i64>> {
    Ok(conn
        .query_row(
            "SELECT MAX(after_seq) FROM fits WHERE lot = ?1",
            [lot],
            |r| r.get(0),
        )
        .optional()?
        .flatten())
}

/// True when a lot is registered or a cycle names it.
pub fn lot_exists(conn: &Connection, lot: &str) -> Result<bool> {
    Ok(conn.query_row(
        "SELECT EXISTS (SELECT 1 FROM lots WHERE lot = ?1)
             OR EXISTS (SELECT 1 FROM cycles WHERE lot = ?1)",
        [lot],
        |r| r.get(0),
    )?)
}

/// A registered lot as a candidate member of a population: its family and catalyst
/// description, and when it went into service.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ServiceStart {
    pub lot: String,
    pub family: Option<String>,
    pub catalyst: String,
    /// The earliest recorded start of its cycles, up to the event asked for.
    pub first_started: Option<String>,
    /// The first event that recorded one of its cycles, up to the event asked for.
    pub first_seq: Option<i64>,
}

/// Every registered lot with its family, catalyst description and start of service (its
/// cycles up to event `as_of`), in one query; the matching rule is the application's.
pub fn service_starts(conn: &Connection, as_of: i64) -> Result<Vec<ServiceStart>> {
    let mut stmt = conn.prepare_cached(
        "SELECT l.lot, l.family, l.catalyst, MIN(c.started_at), MIN(c.first_seq)
         FROM lots l LEFT JOIN cycles c ON c.lot = l.lot AND c.first_seq <= ?1
         GROUP BY l.lot ORDER BY l.lot",
    )?;
    let rows = stmt
        .query_map([as_of], |r| {
            Ok(ServiceStart {
                lot: r.get(0)?,
                family: r.get(1)?,
                catalyst: r.get(2)?,
                first_started: r.get(3)?,
                first_seq: r.get(4)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The ranking (JSON) and the number of trend cycles of a lot's newest stored analysis on
/// `basis` computed up to event `as_of`; None when there is none (or it holds no fit).
/// Only these two parts are taken out of the stored JSON, by SQLite.
pub fn stored_ranking(
    conn: &Connection,
    lot: &str,
    basis: &str,
    as_of: i64,
) -> Result<Option<(String, i64)>> {
    Ok(conn
        .prepare_cached(
            "SELECT json_extract(analysis, '$.ranking'), json_extract(analysis, '$.trend_cycles')
             FROM fits WHERE lot = ?1 AND basis = ?2 AND after_seq <= ?3 AND model IS NOT NULL
             ORDER BY id DESC LIMIT 1",
        )?
        .query_row(rusqlite::params![lot, basis, as_of], |r| {
            Ok((r.get::<_, Option<String>>(0)?, r.get::<_, Option<i64>>(1)?))
        })
        .optional()?
        .and_then(|(r, n)| r.zip(n)))
}

/// Note lots whose records a transaction changed without recomputing them (a backfill's
/// groups): the closing recompute, or the next open after a crash, takes them from here.
pub fn mark_to_recompute<'a>(
    tx: &Transaction<'_>,
    lots: impl IntoIterator<Item = &'a str>,
) -> Result<()> {
    let mut stmt = tx.prepare_cached("INSERT OR IGNORE INTO lots_to_recompute(lot) VALUES (?1)")?;
    for lot in lots {
        stmt.execute([lot])?;
    }
    Ok(())
}

/// Lots whose records changed with no recompute since (see [`mark_to_recompute`]).
pub fn lots_to_recompute(conn: &Connection) -> Result<std::collections::BTreeSet<String>> {
    let mut stmt = conn.prepare_cached("SELECT lot FROM lots_to_recompute")?;
    let rows = stmt
        .query_map([], |r| r.get(0))?
        .collect::<std::result::Result<_, _>>()?;
    Ok(rows)
}

/// What a stored lot state was computed by and from: the newest event it was made of,
/// the engine version and the configuration's analysis fingerprint.
#[derive(Debug, Clone, Copy)]
pub struct StateMade<'a> {
    pub after_seq: i64,
    pub engine_version: &'a str,
    pub config_sha256: &'a str,
}

/// Keep a lot's current state (its `lots` line and the alert rules' snapshot, as JSON),
/// in the transaction that recomputed it; the lot is no longer waiting for a recompute.
pub fn store_state(
    tx: &Transaction<'_>,
    lot: &str,
    made: StateMade<'_>,
    at: &str,
    (line_json, snapshot_json): (&str, Option<&str>),
) -> Result<()> {
    tx.prepare_cached(
        "INSERT OR REPLACE INTO lot_states(lot, after_seq, engine_version, config_sha256,
             computed_at, line) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
    )?
    .execute(rusqlite::params![
        lot,
        made.after_seq,
        made.engine_version,
        made.config_sha256,
        at,
        line_json,
    ])?;
    // The snapshot has a table of its own (0017), so that reading the lines does not read
    // the snapshots' pages.
    tx.prepare_cached("INSERT OR REPLACE INTO lot_snapshots(lot, snapshot) VALUES (?1, ?2)")?
        .execute(rusqlite::params![lot, snapshot_json])?;
    tx.prepare_cached("DELETE FROM lots_to_recompute WHERE lot = ?1")?
        .execute([lot])?;
    // The printed entry of the state replaced goes with it (0018): one is kept again only
    // by [`store_printed`], so an entry never outlives its state.
    tx.prepare_cached("DELETE FROM lot_printed WHERE lot = ?1")?
        .execute([lot])?;
    Ok(())
}

/// A lot's stored `lots` line when it was made after event `after_seq` by `engine_version`
/// under `config_sha256` (verify compares it with the line recomputed from the records).
pub fn stored_line(
    conn: &Connection,
    lot: &str,
    after_seq: i64,
    (engine_version, config_sha256): (&str, &str),
) -> Result<Option<String>> {
    Ok(conn
        .prepare_cached(
            "SELECT line FROM lot_states WHERE lot = ?1 AND after_seq = ?2
               AND engine_version = ?3 AND config_sha256 = ?4",
        )?
        .query_row(
            rusqlite::params![lot, after_seq, engine_version, config_sha256],
            |r| r.get(0),
        )
        .optional()?)
}

/// Which part of a stored state to read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StatePart {
    /// The `lots` line.
    Line,
    /// The alert rules' snapshot (absent for a lot nobody registered).
    Snapshot,
}

/// The stored states made by `engine_version` under `config_sha256`, by lot, leaving out
/// lots waiting for a recompute (their stored state is older than their records).
pub fn current_states(
    conn: &Connection,
    (engine_version, config_sha256): (&str, &str),
    part: StatePart,
) -> Result<HashMap<String, Option<String>>> {
    let mut stmt = conn.prepare_cached(match part {
        StatePart::Line => {
            "SELECT s.lot, s.line FROM lot_states s
         WHERE s.engine_version = ?1 AND s.config_sha256 = ?2
           AND NOT EXISTS (SELECT 1 FROM lots_to_recompute r WHERE r.lot = s.lot)"
        }
        StatePart::Snapshot => {
            "SELECT s.lot, p.snapshot FROM lot_states s JOIN lot_snapshots p ON p.lot = s.lot
         WHERE s.engine_version = ?1 AND s.config_sha256 = ?2
           AND NOT EXISTS (SELECT 1 FROM lots_to_recompute r WHERE r.lot = s.lot)"
        }
    })?;
    let rows = stmt
        .query_map([engine_version, config_sha256], |r| {
            Ok((r.get(0)?, r.get(1)?))
        })?
        .collect::<std::result::Result<_, _>>()?;
    Ok(rows)
}

/// One lot's stored state as [`current_states`] gives it: `None` when no usable state is
/// stored, `Some(None)` for a lot nobody registered (snapshot part). A primary-key read.
pub fn current_state_of(
    conn: &Connection,
    (engine_version, config_sha256): (&str, &str),
    part: StatePart,
    lot: &str,
) -> Result<Option<Option<String>>> {
    let mut stmt = conn.prepare_cached(match part {
        StatePart::Line => {
            "SELECT s.line FROM lot_states s
         WHERE s.lot = ?3 AND s.engine_version = ?1 AND s.config_sha256 = ?2
           AND NOT EXISTS (SELECT 1 FROM lots_to_recompute r WHERE r.lot = s.lot)"
        }
        StatePart::Snapshot => {
            "SELECT p.snapshot FROM lot_states s JOIN lot_snapshots p ON p.lot = s.lot
         WHERE s.lot = ?3 AND s.engine_version = ?1 AND s.config_sha256 = ?2
           AND NOT EXISTS (SELECT 1 FROM lots_to_recompute r WHERE r.lot = s.lot)"
        }
    })?;
    Ok(stmt
        .query_row([engine_version, config_sha256, lot], |r| r.get(0))
        .optional()?)
}

/// The registered lots (those with a lot record), by name.
pub fn registered_lots(conn: &Connection) -> Result<BTreeSet<String>> {
    let mut stmt = conn.prepare_cached("SELECT lot FROM lots")?;
    let rows = stmt
        .query_map([], |r| r.get(0))?
        .collect::<std::result::Result<BTreeSet<String>, _>>()?;
    Ok(rows)
}

/// Lots whose stored state was made by another engine version or under other analysis
/// settings: after an upgrade or a settings change they are recomputed once, not on every
/// read.
pub fn outdated_states(
    conn: &Connection,
    (engine_version, config_sha256): (&str, &str),
) -> Result<BTreeSet<String>> {
    let mut stmt = conn.prepare_cached(
        "SELECT lot FROM lot_states WHERE engine_version <> ?1 OR config_sha256 <> ?2",
    )?;
    let rows = stmt
        .query_map([engine_version, config_sha256], |r| r.get(0))?
        .collect::<std::result::Result<BTreeSet<String>, _>>()?;
    Ok(rows)
}

/// The newest batch start any cycle records (local time text as stored), if any.
pub fn newest_batch_start(conn: &Connection) -> Result<Option<String>> {
    Ok(conn
        .prepare_cached("SELECT MAX(started_at) FROM cycles")?
        .query_row([], |r| r.get(0))?)
}

/// Lots with a batch that started at or after `since` (local time text as stored) or
/// whose start is unknown: through the index `cycles_started`, so the cost follows these
/// batches, not the store's history. (Lots with no batch yet are in use too: see
/// [`LotIndex::without_cycles`].)
pub fn lots_batched_since(conn: &Connection, since: &str) -> Result<BTreeSet<String>> {
    // The index named: SQLite otherwise took `lot IS NOT NULL` to the index `cycles_lot`,
    // walked every cycle's entry and read its row (286 pages at 40,000 cycles).
    let mut stmt = conn.prepare_cached(
        "SELECT lot FROM cycles INDEXED BY cycles_started WHERE started_at >= ?1 AND lot IS NOT NULL
         UNION SELECT lot FROM cycles INDEXED BY cycles_started WHERE started_at IS NULL AND lot IS NOT NULL",
    )?;
    let rows = stmt
        .query_map([since], |r| r.get(0))?
        .collect::<std::result::Result<BTreeSet<String>, _>>()?;
    Ok(rows)
}

/// The lots the store names, read once for a view that needs them several ways (names,
/// lots nobody registered, lots with no batch): the registered lots, and the lots the
/// cycles name, from the per-lot cycle counts migration 0020 keeps. Each further
/// question is answered from these sets instead of another read.
#[derive(Debug, Clone, Default)]
pub struct LotIndex {
    pub registered: BTreeSet<String>,
    pub with_cycles: BTreeSet<String>,
}

impl LotIndex {
    pub fn read(conn: &Connection) -> Result<Self> {
        let mut stmt = conn.prepare_cached("SELECT lot FROM lot_cycle_counts WHERE n > 0")?;
        let with_cycles = stmt
            .query_map([], |r| r.get(0))?
            .collect::<std::result::Result<BTreeSet<String>, _>>()?;
        Ok(LotIndex {
            registered: registered_lots(conn)?,
            with_cycles,
        })
    }

    /// Every lot name, sorted as [`lot_names`] gives them.
    pub fn names(&self) -> Vec<String> {
        self.registered.union(&self.with_cycles).cloned().collect()
    }

    /// Lots some cycle names and nobody registered.
    pub fn unregistered(&self) -> impl Iterator<Item = &String> {
        self.with_cycles.difference(&self.registered)
    }

    /// Registered lots with no cycle yet.
    pub fn without_cycles(&self) -> impl Iterator<Item = &String> {
        self.registered.difference(&self.with_cycles)
    }
}

/// Keep a lot's `lots --json` entry in its printed form (`head`, `tail`: see
/// `notebook::export::PrintedLine`), made by the printing code `form`, beside the state
/// [`store_state`] just stored in this transaction: the row takes what that state was made
/// by, and is used only while the state is.
pub fn store_printed(
    tx: &Transaction<'_>,
    lot: &str,
    (form, cycles): (&str, usize),
    (head, tail): (&str, Option<&str>),
) -> Result<()> {
    tx.prepare_cached(
        "INSERT OR REPLACE INTO lot_printed(lot, engine_version, config_sha256, form, cycles,
             head, tail)
         SELECT lot, engine_version, config_sha256, ?2, ?3, ?4, ?5 FROM lot_states
         WHERE lot = ?1",
    )?
    .execute(rusqlite::params![
        lot,
        form,
        i64::try_from(cycles).unwrap_or(i64::MAX),
        head,
        tail
    ])?;
    Ok(())
}

/// True when the kept printed entries usable now (as [`each_printed`] gives them) account
/// for every cycle that names a lot: their states' cycle counts add up to the number of
/// such cycles (the per-lot counts migration 0020 keeps), so no lot with cycles is without
/// one and the lots to list are the registered ones and those of the entries.
pub fn printed_cover_cycles(
    conn: &Connection,
    (engine_version, config_sha256): (&str, &str),
    form: &str,
) -> Result<bool> {
    Ok(conn
        .prepare_cached(
            "SELECT (SELECT COALESCE(SUM(p.cycles), 0) FROM lot_printed p
                     WHERE p.engine_version = ?1 AND p.config_sha256 = ?2 AND p.form = ?3
                       AND NOT EXISTS (SELECT 1 FROM lots_to_recompute r WHERE r.lot = p.lot))
                  = (SELECT COALESCE(SUM(n), 0) FROM lot_cycle_counts)",
        )?
        .query_row([engine_version, config_sha256, form], |r| r.get(0))?)
}

/// Bytes of the database a listing maps into memory (SQLite caps it at its own maximum).
const LISTING_MAP_BYTES: i64 = 1 << 31;

/// Let a read-only listing read the database's pages through a memory map instead of
/// copying each into SQLite's page cache: `lots --json` at 1,000 lots read 172 pages
/// (2.7 MB) through as many reads and freshly touched cache memory, the largest part of
/// its cost that grew with the lots (SQLite's documentation, "Memory-Mapped I/O"). The
/// documented risk, a crash rather than an error on a failing disk, costs a command that
/// writes nothing no data; the writer and the service keep ordinary reads.
pub fn map_for_listing(conn: &Connection) -> Result<()> {
    conn.pragma_update(None, "mmap_size", LISTING_MAP_BYTES)?;
    Ok(())
}

/// The printed entries of the states [`current_states`] would give, made by the printing
/// code `form`, handed to `each` as (lot, its state's cycle count, head, tail) in lot
/// order (that of [`lot_names`]) as they are read, without a copy.
pub fn each_printed<E: From<super::StoreError>>(
    conn: &Connection,
    (engine_version, config_sha256): (&str, &str),
    form: &str,
    mut each: impl FnMut(&str, i64, &str, Option<&str>) -> std::result::Result<(), E>,
) -> std::result::Result<(), E> {
    fn text<'r>(r: &'r rusqlite::Row<'_>, i: usize) -> Result<Option<&'r str>> {
        Ok(r.get_ref(i)?
            .as_str_or_null()
            .map_err(rusqlite::Error::from)?)
    }
    let mut stmt = conn
        .prepare_cached(
            "SELECT p.lot, p.head, p.tail, p.cycles FROM lot_printed p
         WHERE p.engine_version = ?1 AND p.config_sha256 = ?2 AND p.form = ?3
           AND NOT EXISTS (SELECT 1 FROM lots_to_recompute r WHERE r.lot = p.lot)
         ORDER BY p.lot",
        )
        .map_err(super::StoreError::from)?;
    let mut rows = stmt
        .query([engine_version, config_sha256, form])
        .map_err(super::StoreError::from)?;
    while let Some(r) = rows.next().map_err(super::StoreError::from)? {
        let (Some(lot), Some(head)) = (text(r, 0)?, text(r, 1)?) else {
            continue;
        };
        let cycles: i64 = r.get(3).map_err(super::StoreError::from)?;
        each(lot, cycles, head, text(r, 2)?)?;
    }
    Ok(())
}

/// A lot's kept printed entry as stored, with what made it.
#[derive(Debug, Clone)]
pub struct KeptPrinted {
    pub form: String,
    pub engine_version: String,
    pub config_sha256: String,
    pub head: String,
    pub tail: Option<String>,
}

/// One lot's printed entry as stored, whatever made it (`verify` compares it with the
/// entry printed from its stored line).
pub fn printed_of(conn: &Connection, lot: &str) -> Result<Option<KeptPrinted>> {
    Ok(conn
        .prepare_cached(
            "SELECT form, engine_version, config_sha256, head, tail FROM lot_printed
             WHERE lot = ?1",
        )?
        .query_row([lot], |r| {
            Ok(KeptPrinted {
                form: r.get(0)?,
                engine_version: r.get(1)?,
                config_sha256: r.get(2)?,
                head: r.get(3)?,
                tail: r.get(4)?,
            })
        })
        .optional()?)
}

/// The stored lines of the current states (as [`current_states`] gives them) with no
/// printed entry by the printing code `form`: a store from before printed entries were
/// kept, or from a build that printed otherwise. By lot.
pub fn lines_to_print(
    conn: &Connection,
    (engine_version, config_sha256): (&str, &str),
    form: &str,
) -> Result<Vec<(String, String)>> {
    let mut stmt = conn.prepare_cached(
        "SELECT s.lot, s.line FROM lot_states s
         WHERE s.engine_version = ?1 AND s.config_sha256 = ?2
           AND NOT EXISTS (SELECT 1 FROM lots_to_recompute r WHERE r.lot = s.lot)
           AND NOT EXISTS (SELECT 1 FROM lot_printed p WHERE p.lot = s.lot AND p.form = ?3
               AND p.engine_version = s.engine_version AND p.config_sha256 = s.config_sha256)",
    )?;
    let rows = stmt
        .query_map([engine_version, config_sha256, form], |r| {
            Ok((r.get(0)?, r.get(1)?))
        })?
        .collect::<std::result::Result<_, _>>()?;
    Ok(rows)
}
