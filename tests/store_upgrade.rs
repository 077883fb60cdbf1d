//! Upgrading a store from schema version 4 to version 5 loses and changes nothing.
//!
//! Migration 0005 drops the `measurements` table (one row per value) and replaces it with
//! `batch_sources` (one provenance row per batch, event and file line), an `id_counters` row
//! for the next measurement id, and a `measurements` view that reads the values back out of
//! the event payloads; it also rebuilds the unique index on ingested hashes over
//! `unhex(sha256)`. A QA auditor relies on every value still being there with its origin
//! (file, line, column, raw text, event), on the audit chain still verifying, on a content
//! still being ingested only once, and on new records continuing the old ones without
//! reusing an id. An upgrade runs once per site, on years of records, and cannot be redone,
//! so these tests write a version-4 database by hand, exactly as turnbook wrote them before
//! (migrations 1 to 4 and old-style rows), open it with the current `store::open` and check
//! each of those promises against what was stored before.
//!
//! `audit::verify` is version-5 code (it reads `batch_sources`), so it is only called after
//! the upgrade; before it, the fixture is checked against the rows it was built from.

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

use rusqlite::types::Value;
use rusqlite::{Connection, params};
use sha2::{Digest, Sha256};
use tempfile::TempDir;

use turnbook::audit;
use turnbook::ingest::{CycleRow, MeasuredValue, ParsedFile};
use turnbook::model::Payload;
use turnbook::model::Quantity;
use turnbook::model::chain::{GENESIS, event_hash};
use turnbook::model::cycle::{self as view, CYCLE_COLUMNS, CycleView};
use turnbook::model::event::{FileRow, LotRecord, MeasurementRow};
use turnbook::store::{self, migrate, records};

const LOT: &str = "KV-L-01";
const MEASUREMENT_COLUMNS: &str =
    "id, batch_id, quantity, value, text, kind, source_file_id, line, col, raw, event_seq";

fn sha_of(content: &str) -> String {
    hex::encode(Sha256::digest(content.as_bytes()))
}

/// A `file-ingested` payload as version 4 encoded it: each measurement row an object
/// (the current encoding stores rows as arrays).
#[derive(serde::Serialize)]
#[serde(tag = "kind", rename = "file-ingested")]
struct V4FileIngested<'a> {
    file: &'a FileRow,
    measurements: &'a [MeasurementRow],
    lots: &'a [LotRecord],
}

/// The canonical JSON version 4 stored for a payload.
fn v4_body(payload: &Payload) -> String {
    match payload {
        Payload::FileIngested {
            file,
            measurements,
            lots,
        } => {
            let body = serde_json::to_string(&V4FileIngested {
                file,
                measurements,
                lots,
            })
            .unwrap();
            assert!(body.contains(r#""measurements":[{"id":"#) || measurements.is_empty());
            body
        }
        other => {
            let body = serde_json::to_string(other).unwrap();
            assert_eq!(body, turnbook::model::chain::canonical(other).unwrap());
            body
        }
    }
}

/// The appended end of a hand-written audit chain.
struct Chain {
    seq: i64,
    head: String,
}

impl Chain {
    fn new() -> Chain {
        Chain {
            seq: 0,
            head: GENESIS.to_string(),
        }
    }

    /// Append one event the way version 4 did: canonical JSON payload, hash over the
    /// previous hash and the event's fields.
    fn append(
        &mut self,
        conn: &Connection,
        at: &str,
        actor: &str,
        subject: &str,
        payload: &Payload,
    ) -> i64 {
        let body = v4_body(payload);
        let seq = self.seq + 1;
        let hash = event_hash(&self.head, seq, at, actor, payload.kind(), subject, &body);
        conn.execute(
            "INSERT INTO events(seq, at, actor, kind, subject, payload, prev_hash, hash)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
            params![
                seq,
                at,
                actor,
                payload.kind(),
                subject,
                body,
                self.head,
                hash
            ],
        )
        .unwrap();
        self.seq = seq;
        self.head = hash;
        seq
    }
}

/// One line of an export file, as the values it wrote.
struct Line<'a> {
    batch: &'a str,
    file: i64,
    line: i64,
}

impl Line<'_> {
    fn row(&self, id: i64, quantity: &'static str, kind: &'static str) -> MeasurementRow {
        MeasurementRow {
            id,
            batch_id: self.batch.into(),
            quantity: quantity.into(),
            value: None,
            text: None,
            kind: kind.into(),
            source_file_id: Some(self.file),
            line: Some(self.line),
            col: None,
            raw: None,
        }
    }

    /// A text attribute (lot, started_at), first seen.
    fn text(&self, id: i64, quantity: &'static str, text: &str) -> MeasurementRow {
        MeasurementRow {
            text: Some(text.into()),
            ..self.row(id, quantity, "observed")
        }
    }

    /// The cycle number, first seen.
    fn cycle_no(&self, id: i64, n: f64) -> MeasurementRow {
        MeasurementRow {
            value: Some(n),
            ..self.row(id, "cycle_no", "observed")
        }
    }

    /// A measured value (canonical unit) with its column and the text as it stood.
    fn value(&self, id: i64, q: Quantity, v: f64, col: i64, raw: &str) -> MeasurementRow {
        MeasurementRow {
            value: Some(v),
            col: Some(col),
            raw: Some(raw.into()),
            ..self.row(id, q.key(), "observed")
        }
    }

    /// A measured value that disagrees with the one stored before.
    fn conflict(&self, id: i64, q: Quantity, v: f64, col: i64, raw: &str) -> MeasurementRow {
        MeasurementRow {
            kind: "conflict".into(),
            ..self.value(id, q, v, col, raw)
        }
    }
}

fn file_row(id: i64, sha: &str, path: &str, outcome: &str, counts: (i64, i64, i64)) -> FileRow {
    FileRow {
        id,
        sha256: sha.into(),
        path: path.into(),
        size: 412 + id,
        mtime: Some(format!("2025-11-0{id}T17:00:00.000Z")),
        profile: Some("kv-hplc".into()),
        site: Some("pilot-2".into()),
        seen_at: format!("2025-11-0{id}T17:05:00.000Z"),
        outcome: outcome.into(),
        error: None,
        rows_new: counts.0,
        rows_known: counts.1,
        rows_conflict: counts.2,
        quarantined: None,
    }
}

fn insert_file(conn: &Connection, f: &FileRow, seq: i64) {
    conn.execute(
        "INSERT INTO source_files(id, sha256, path, size, mtime, profile, site, seen_at, outcome,
             error, rows_new, rows_known, rows_conflict, quarantined, event_seq)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15)",
        params![
            f.id,
            f.sha256,
            f.path,
            f.size,
            f.mtime,
            f.profile,
            f.site,
            f.seen_at,
            f.outcome,
            f.error,
            f.rows_new,
            f.rows_known,
            f.rows_conflict,
            f.quarantined,
            seq
        ],
    )
    .unwrap();
}

/// The old `measurements` table row of one value.
fn insert_measurement(conn: &Connection, r: &MeasurementRow, seq: i64) {
    conn.execute(
        &format!(
            "INSERT INTO measurements({MEASUREMENT_COLUMNS})
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11)"
        ),
        params![
            r.id,
            r.batch_id,
            r.quantity,
            r.value,
            r.text,
            r.kind,
            r.source_file_id,
            r.line,
            r.col,
            r.raw,
            seq
        ],
    )
    .unwrap();
}

/// The `cycles` row, with the columns `records::upsert_cycle` writes.
fn insert_cycle(conn: &Connection, v: &CycleView) {
    let sql = format!(
        "INSERT OR REPLACE INTO cycles(batch_id, lot, cycle_no, started_at, {}, conflicts, excluded, first_seq)
         VALUES (?1, ?2, ?3, ?4, {}, ?16, ?17, ?18)",
        CYCLE_COLUMNS.join(", "),
        (5..16)
            .map(|i| format!("?{i}"))
            .collect::<Vec<_>>()
            .join(", ")
    );
    let mut p: Vec<&dyn rusqlite::ToSql> = vec![&v.batch_id, &v.lot, &v.cycle_no, &v.started_at];
    for x in &v.values {
        p.push(x);
    }
    p.push(&v.conflicts);
    p.push(&v.excluded);
    p.push(&v.first_seq);
    conn.execute(&sql, p.as_slice()).unwrap();
}

/// A version-4 database as turnbook wrote it, and what was written into it.
struct V4 {
    _dir: TempDir,
    path: PathBuf,
    /// Every measurement with the event that wrote it, by id.
    rows: Vec<(MeasurementRow, i64)>,
    /// SHA-256 of the two ingested files.
    shas: [String; 2],
    /// Sequence number of the last event.
    last_seq: i64,
}

impl V4 {
    fn max_id(&self) -> i64 {
        self.rows.iter().map(|(m, _)| m.id).max().unwrap()
    }
}

/// Apply migrations 1 to 4 exactly as `migrate::apply` does, recording each.
fn schema_v4(conn: &mut Connection) {
    conn.execute_batch(
        "CREATE TABLE IF NOT EXISTS schema_migrations (
             version INTEGER PRIMARY KEY,
             name TEXT NOT NULL,
             applied_at TEXT NOT NULL
         ) STRICT;",
    )
    .unwrap();
    let v4 = &migrate::MIGRATIONS[..4];
    assert_eq!(
        v4.iter().map(|m| m.0).collect::<Vec<_>>(),
        [1, 2, 3, 4],
        "the first four migrations are versions 1 to 4"
    );
    for &(version, name, sql) in v4 {
        let tx = conn.transaction().unwrap();
        tx.execute_batch(sql).unwrap();
        tx.execute(
            "INSERT INTO schema_migrations(version, name, applied_at) VALUES (?1, ?2, ?3)",
            params![version, name, turnbook::model::time::now_utc()],
        )
        .unwrap();
        tx.commit().unwrap();
    }
}

/// Write a version-4 database: a lot registration, two ingested files (three batches, one
/// conflicting value), a person's correction and a duplicate of the first file.
fn build_v4() -> V4 {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("turnbook-v4.db");
    let mut conn = Connection::open(&path).unwrap();
    conn.pragma_update(None, "foreign_keys", "ON").unwrap();
    schema_v4(&mut conn);

    let tx = conn.transaction().unwrap();
    let mut chain = Chain::new();
    let mut rows: Vec<(MeasurementRow, i64)> = Vec::new();

    // 1. The lot, registered by a person.
    let lot = LotRecord {
        lot: LOT.into(),
        catalyst: "5% Pd/Al2O3, eggshell".into(),
        metal: "Pd".into(),
        loading_wt_pct: 5.0,
        charged_mass_g: 2.5,
        received: Some("2025-10-28".into()),
        supplier_lot: Some("S-88213".into()),
        cost: Some(1840.5),
        site: Some("pilot-2".into()),
        water_content_wt_pct: None,
        family: None,
    };
    let seq = chain.append(
        &tx,
        "2025-11-01T09:00:00.000Z",
        "m.ortiz",
        LOT,
        &Payload::LotRegistered {
            lot: lot.clone(),
            reason: Some("new lot for the reuse campaign".into()),
        },
    );
    tx.execute(
        "INSERT INTO lots(lot, catalyst, metal, loading_wt_pct, charged_mass_g, received,
             supplier_lot, cost, site, event_seq)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
        params![
            lot.lot,
            lot.catalyst,
            lot.metal,
            lot.loading_wt_pct,
            lot.charged_mass_g,
            lot.received,
            lot.supplier_lot,
            lot.cost,
            lot.site,
            seq
        ],
    )
    .unwrap();

    // 2. The first export: batches KV-U-001 (line 2) and KV-U-002 (line 3). Values carry
    // their unit-conversion noise (e.g. 0.1 + 0.2), which must come back bit for bit.
    let sha1 = sha_of("batch;lot;cycle;start;conv;sel;T\nKV-U-001;...\nKV-U-002;...\n");
    let f1 = file_row(
        1,
        &sha1,
        "/exports/kv/run-2025-11-02.csv",
        "ingested",
        (2, 0, 0),
    );
    let l2 = Line {
        batch: "KV-U-001",
        file: 1,
        line: 2,
    };
    let l3 = Line {
        batch: "KV-U-002",
        file: 1,
        line: 3,
    };
    let ms1 = vec![
        l2.text(1, "lot", LOT),
        l2.cycle_no(2, 1.0),
        l2.text(3, "started_at", "2025-11-02T07:30:00"),
        l2.value(4, Quantity::Conversion, 0.1 + 0.2, 5, "30,000000000000004"),
        l2.value(5, Quantity::Selectivity, 0.97, 6, "97"),
        l2.value(6, Quantity::Temperature, 80.0 + 273.15, 7, "80"),
        l3.text(7, "lot", LOT),
        l3.cycle_no(8, 2.0),
        l3.value(9, Quantity::Conversion, 0.1 + 0.7, 5, "80"),
        l3.value(10, Quantity::MetalCharged, 4.2e-7, 8, "0,42 µmol"),
        l3.value(11, Quantity::Duration, 5400.0, 9, "90"),
    ];
    let seq = chain.append(
        &tx,
        "2025-11-02T17:05:00.000Z",
        "turnbook-svc",
        &f1.path,
        &Payload::FileIngested {
            file: f1.clone(),
            measurements: ms1.clone(),
            lots: vec![],
        },
    );
    insert_file(&tx, &f1, seq);
    rows.extend(ms1.into_iter().map(|r| (r, seq)));

    // 3. The second export: KV-U-002 again with a different conversion (a conflict) and a
    // new selectivity (line 2), and the new batch KV-U-003 (line 3).
    let sha2 = sha_of("batch;lot;cycle;conv;sel\nKV-U-002;...\nKV-U-003;...\n");
    let f2 = file_row(
        2,
        &sha2,
        "/exports/kv/run-2025-11-03.csv",
        "ingested",
        (1, 0, 1),
    );
    let l2 = Line {
        batch: "KV-U-002",
        file: 2,
        line: 2,
    };
    let l3 = Line {
        batch: "KV-U-003",
        file: 2,
        line: 3,
    };
    let ms2 = vec![
        l2.conflict(12, Quantity::Conversion, 0.79, 4, "79"),
        l2.value(13, Quantity::Selectivity, 0.95, 5, "95"),
        l3.text(14, "lot", LOT),
        l3.cycle_no(15, 3.0),
        l3.value(16, Quantity::Conversion, 0.65, 4, "65"),
    ];
    let seq = chain.append(
        &tx,
        "2025-11-03T17:05:00.000Z",
        "turnbook-svc",
        &f2.path,
        &Payload::FileIngested {
            file: f2.clone(),
            measurements: ms2.clone(),
            lots: vec![],
        },
    );
    insert_file(&tx, &f2, seq);
    rows.extend(ms2.into_iter().map(|r| (r, seq)));

    // 4. A person settles the conflict of KV-U-002 with a correction (no file, no line).
    let correction = MeasurementRow {
        id: 17,
        batch_id: "KV-U-002".into(),
        quantity: "conversion".into(),
        value: Some(0.795),
        text: None,
        kind: "correction".into(),
        source_file_id: None,
        line: None,
        col: None,
        raw: None,
    };
    let seq = chain.append(
        &tx,
        "2025-11-04T10:12:00.000Z",
        "m.ortiz",
        "KV-U-002",
        &Payload::Correction {
            measurement: correction.clone(),
            previous: Some(0.1 + 0.7),
            reason: "both chromatograms re-integrated with one baseline".into(),
        },
    );
    rows.push((correction, seq));

    // 5. The first export offered again: recorded as a duplicate, writes no values.
    let f3 = file_row(
        3,
        &sha1,
        "/exports/kv/copy/run-2025-11-02.csv",
        "duplicate",
        (0, 0, 0),
    );
    let seq = chain.append(
        &tx,
        "2025-11-05T17:05:00.000Z",
        "turnbook-svc",
        &f3.path,
        &Payload::FileDuplicate {
            file: f3.clone(),
            of_file_id: 1,
        },
    );
    insert_file(&tx, &f3, seq);
    let last_seq = seq;

    // The old measurements table and the cycle views derived from it.
    for (r, seq) in &rows {
        insert_measurement(&tx, r, *seq);
    }
    let batches: BTreeSet<&str> = rows.iter().map(|(r, _)| r.batch_id.as_str()).collect();
    for b in batches {
        let of_batch: Vec<MeasurementRow> = rows
            .iter()
            .filter(|(r, _)| r.batch_id == b)
            .map(|(r, _)| r.clone())
            .collect();
        let first_seq = rows
            .iter()
            .filter(|(r, _)| r.batch_id == b && r.source_file_id.is_some())
            .map(|(_, s)| *s)
            .min()
            .unwrap();
        insert_cycle(&tx, &view::derive_cycle(b, &of_batch, false, first_seq));
    }
    tx.commit().unwrap();

    let v4 = V4 {
        _dir: dir,
        path,
        rows,
        shas: [sha1, sha2],
        last_seq,
    };
    // The fixture is a version-4 store holding exactly the rows it was built from.
    assert_eq!(schema_version(&conn), 4);
    assert_eq!(object_type(&conn, "measurements").as_deref(), Some("table"));
    assert_eq!(object_type(&conn, "batch_sources"), None);
    assert_eq!(typed_rows(&conn), v4.rows);
    let kv2 = cycle_of(&conn, "KV-U-002");
    assert_eq!(kv2.get(Quantity::Conversion), Some(0.795));
    assert_eq!(kv2.conflicts, 0, "the correction settled the conflict");
    drop(conn);
    v4
}

fn schema_version(conn: &Connection) -> i64 {
    conn.query_row(
        "SELECT COALESCE(MAX(version), 0) FROM schema_migrations",
        [],
        |r| r.get(0),
    )
    .unwrap()
}

fn object_type(conn: &Connection, name: &str) -> Option<String> {
    conn.query_row(
        "SELECT type FROM sqlite_master WHERE name = ?1",
        [name],
        |r| r.get(0),
    )
    .ok()
}

fn cycle_of(conn: &Connection, batch: &str) -> CycleView {
    records::cycle(conn, batch).unwrap().unwrap()
}

/// Every row of a query, each column as SQLite holds it (storage class and value).
fn dump(conn: &Connection, sql: &str) -> Vec<Vec<Value>> {
    let mut stmt = conn.prepare(sql).unwrap();
    let n = stmt.column_count();
    stmt.query_map([], |r| (0..n).map(|i| r.get::<_, Value>(i)).collect())
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

/// `measurements` (the table before the upgrade, the view after it), every column.
fn measurement_values(conn: &Connection) -> Vec<Vec<Value>> {
    dump(
        conn,
        &format!("SELECT {MEASUREMENT_COLUMNS} FROM measurements ORDER BY id"),
    )
}

/// `measurements` as typed rows, each with its event.
fn typed_rows(conn: &Connection) -> Vec<(MeasurementRow, i64)> {
    let mut stmt = conn
        .prepare(&format!(
            "SELECT {MEASUREMENT_COLUMNS} FROM measurements ORDER BY id"
        ))
        .unwrap();
    stmt.query_map([], |r| {
        Ok((
            MeasurementRow {
                id: r.get(0)?,
                batch_id: r.get(1)?,
                quantity: r.get::<_, String>(2)?.into(),
                value: r.get(3)?,
                text: r.get(4)?,
                kind: r.get::<_, String>(5)?.into(),
                source_file_id: r.get(6)?,
                line: r.get(7)?,
                col: r.get(8)?,
                raw: r.get(9)?,
            },
            r.get(10)?,
        ))
    })
    .unwrap()
    .collect::<Result<_, _>>()
    .unwrap()
}

/// The record tables the upgrade must leave alone, every row and column.
fn untouched_tables(conn: &Connection) -> Vec<Vec<Vec<Value>>> {
    [
        "SELECT * FROM events ORDER BY seq",
        "SELECT * FROM source_files ORDER BY id",
        // The columns lots had before; columns added later (family) are checked apart.
        "SELECT lot, catalyst, metal, loading_wt_pct, charged_mass_g, received, supplier_lot,
             cost, site, event_seq FROM lots ORDER BY lot",
        "SELECT * FROM cycles ORDER BY batch_id",
    ]
    .iter()
    .map(|sql| dump(conn, sql))
    .collect()
}

fn batch_sources(conn: &Connection) -> Vec<(String, i64, i64, Option<i64>)> {
    let mut stmt = conn
        .prepare(
            "SELECT batch_id, event_seq, line, source_file_id FROM batch_sources
             ORDER BY batch_id, event_seq, line",
        )
        .unwrap();
    stmt.query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

fn measurement_counter(conn: &Connection) -> i64 {
    conn.query_row(
        "SELECT next FROM id_counters WHERE name = 'measurement'",
        [],
        |r| r.get(0),
    )
    .unwrap()
}

fn assert_verifies(conn: &Connection) {
    let report = audit::verify(conn).unwrap();
    assert!(report.ok(), "verify found: {:#?}", report.findings);
}

fn page_size(conn: &Connection) -> i64 {
    conn.query_row("PRAGMA page_size", [], |r| r.get(0))
        .unwrap()
}

#[test]
fn a_new_database_takes_the_store_page_size_and_keeps_it() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("new.db");
    let conn = store::open(&path).unwrap();
    assert_eq!(page_size(&conn), store::PAGE_SIZE);
    let mode: String = conn
        .query_row("PRAGMA journal_mode", [], |r| r.get(0))
        .unwrap();
    assert_eq!(mode, "wal");
    drop(conn);
    // Read back by a connection that sets nothing: the size is in the file.
    let plain = Connection::open(&path).unwrap();
    assert_eq!(page_size(&plain), store::PAGE_SIZE);
    assert_eq!(schema_version(&plain), migrate::latest());
}

/// Open the version-4 file with the current store, which upgrades it.
fn upgrade(path: &Path) -> Connection {
    store::open(path).unwrap()
}

#[test]
fn an_upgrade_from_version_4_keeps_every_value_with_its_origin() {
    let v4 = build_v4();
    let before = Connection::open(&v4.path).unwrap();
    let old_values = measurement_values(&before);
    let old_tables = untouched_tables(&before);
    drop(before);
    assert_eq!(old_values.len(), v4.rows.len());

    let conn = upgrade(&v4.path);

    // The page size of a database is fixed when it is created: the old file keeps SQLite's
    // default while new ones take the store's.
    assert_eq!(page_size(&conn), 4096);
    assert_ne!(store::PAGE_SIZE, 4096);

    // The schema is the newest, every migration recorded once.
    assert_eq!(schema_version(&conn), 20);
    assert_eq!(schema_version(&conn), migrate::latest());
    // 0019: no large file in progress; provenance rows no longer a foreign key to files.
    assert_eq!(
        dump(&conn, "SELECT COUNT(*) FROM files_in_progress"),
        vec![vec![Value::Integer(0)]]
    );
    assert_eq!(
        dump(
            &conn,
            "SELECT COUNT(*) FROM pragma_foreign_key_list('batch_sources') WHERE \"table\" = 'source_files'"
        ),
        vec![vec![Value::Integer(0)]]
    );
    let recorded: Vec<(i64, String)> = {
        let mut stmt = conn
            .prepare("SELECT version, name FROM schema_migrations ORDER BY version")
            .unwrap();
        stmt.query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
            .unwrap()
            .collect::<Result<_, _>>()
            .unwrap()
    };
    let known: Vec<(i64, String)> = migrate::MIGRATIONS
        .iter()
        .map(|m| (m.0, m.1.to_string()))
        .collect();
    assert_eq!(recorded, known);
    assert_eq!(object_type(&conn, "measurements").as_deref(), Some("view"));

    // The events, files, lots and cycle views are byte for byte what they were.
    assert_eq!(untouched_tables(&conn), old_tables);
    // A lot registered before families existed has none.
    assert_eq!(
        dump(&conn, "SELECT COUNT(*) FROM lots WHERE family IS NOT NULL"),
        vec![vec![Value::Integer(0)]]
    );

    // One provenance row per distinct batch, event and line of the old rows; line 0 and no
    // file for the person's correction.
    let expected: BTreeSet<(String, i64, i64, Option<i64>)> = v4
        .rows
        .iter()
        .map(|(r, seq)| {
            (
                r.batch_id.clone(),
                *seq,
                r.line.unwrap_or(0),
                r.source_file_id,
            )
        })
        .collect();
    let links = batch_sources(&conn);
    assert_eq!(links.len(), expected.len(), "{links:?}");
    assert_eq!(links.iter().cloned().collect::<BTreeSet<_>>(), expected);
    assert_eq!(
        links.len(),
        5,
        "001 line 2, 002 line 2 and 3, 003 line 3, the correction"
    );
    let correction_seq = v4
        .rows
        .iter()
        .find(|(r, _)| r.kind == "correction")
        .map(|(_, s)| *s)
        .unwrap();
    assert!(links.contains(&("KV-U-002".into(), correction_seq, 0, None)));

    // The next measurement id follows the old ones.
    assert_eq!(measurement_counter(&conn), v4.max_id() + 1);

    // The view gives back the old rows: every column, same storage class, same bits.
    let new_values = measurement_values(&conn);
    assert_eq!(new_values, old_values);
    assert_eq!(typed_rows(&conn), v4.rows);
    let conv: f64 = conn
        .query_row("SELECT value FROM measurements WHERE id = 4", [], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(conv.to_bits(), (0.1_f64 + 0.2).to_bits());

    // The store's own reader finds each batch's rows through `batch_sources`.
    for batch in ["KV-U-001", "KV-U-002", "KV-U-003"] {
        let expected: Vec<MeasurementRow> = v4
            .rows
            .iter()
            .filter(|(r, _)| r.batch_id == batch)
            .map(|(r, _)| r.clone())
            .collect();
        assert!(!expected.is_empty());
        assert_eq!(records::measurements_of(&conn, batch).unwrap(), expected);
        let with_seq: Vec<(MeasurementRow, i64)> = v4
            .rows
            .iter()
            .filter(|(r, _)| r.batch_id == batch)
            .cloned()
            .collect();
        assert_eq!(
            records::measurements_up_to(&conn, batch, i64::MAX).unwrap(),
            with_seq
        );
    }
    // As it stood before the correction: the conflict, not yet settled.
    let before_correction =
        records::measurements_up_to(&conn, "KV-U-002", correction_seq - 1).unwrap();
    assert_eq!(before_correction.len(), 7);
    assert!(
        before_correction
            .iter()
            .all(|(r, _)| r.kind != "correction")
    );

    // The audit chain and every record replay clean.
    let report = audit::verify(&conn).unwrap();
    assert!(report.ok(), "verify found: {:#?}", report.findings);
    assert_eq!(report.events, v4.last_seq);

    // Opening again changes nothing (the upgrade ran once).
    drop(conn);
    let again = upgrade(&v4.path);
    assert_eq!(schema_version(&again), migrate::latest());
    assert_eq!(measurement_values(&again), old_values);
    assert_eq!(measurement_counter(&again), v4.max_id() + 1);
}

#[test]
fn the_upgraded_hash_index_still_refuses_a_second_ingestion() {
    let v4 = build_v4();
    let mut conn = upgrade(&v4.path);

    // The index keeps its name; since 0014 it holds the hex text compared without regard
    // to case (as `unhex` compared it), so SQLite before 3.41 can read and check it.
    let (table, sql): (String, String) = conn
        .query_row(
            "SELECT tbl_name, sql FROM sqlite_master
             WHERE type = 'index' AND name = 'source_files_ingested_once'",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    let sql = sql.split_whitespace().collect::<Vec<_>>().join(" ");
    assert_eq!(table, "source_files");
    assert!(sql.starts_with("CREATE UNIQUE INDEX"), "{sql}");
    assert!(
        sql.contains("ON source_files(sha256 COLLATE NOCASE)"),
        "{sql}"
    );
    assert!(!sql.contains("unhex"), "{sql}");
    assert!(sql.contains("WHERE outcome = 'ingested'"), "{sql}");

    // The store's lookup finds the old files by hash, through that index.
    assert_eq!(
        records::ingested_file_with_hash(&conn, &v4.shas[0]).unwrap(),
        Some(1)
    );
    assert_eq!(
        records::ingested_file_with_hash(&conn, &v4.shas[1]).unwrap(),
        Some(2)
    );
    assert_eq!(
        records::ingested_file_with_hash(&conn, &sha_of("never seen")).unwrap(),
        None
    );
    let plan = dump(
        &conn,
        "EXPLAIN QUERY PLAN SELECT id FROM source_files
         WHERE sha256 = '00' COLLATE NOCASE AND outcome = 'ingested'",
    );
    assert!(
        plan.iter().flatten().any(|v| matches!(
            v, Value::Text(t) if t.contains("source_files_ingested_once")
        )),
        "{plan:?}"
    );

    // A second ingested row of an old content is refused by the database; another
    // duplicate record of it is not. (Probed in a transaction that is rolled back.)
    {
        let tx = conn.transaction().unwrap();
        let err = tx
            .execute(
                "INSERT INTO source_files(sha256, path, size, seen_at, outcome, event_seq)
                 VALUES (?1, '/exports/kv/again.csv', 1, '2025-11-06T00:00:00.000Z', 'ingested', 2)",
                [&v4.shas[0]],
            )
            .unwrap_err();
        assert!(
            err.to_string().contains("UNIQUE constraint failed"),
            "{err}"
        );
        // The same hash written in capitals is the same content, refused alike.
        let err = tx
            .execute(
                "INSERT INTO source_files(sha256, path, size, seen_at, outcome, event_seq)
                 VALUES (?1, '/exports/kv/again.csv', 1, '2025-11-06T00:00:00.000Z', 'ingested', 2)",
                [&v4.shas[0].to_uppercase()],
            )
            .unwrap_err();
        assert!(
            err.to_string().contains("UNIQUE constraint failed"),
            "{err}"
        );
        tx.execute(
            "INSERT INTO source_files(sha256, path, size, seen_at, outcome, event_seq)
             VALUES (?1, '/exports/kv/again.csv', 1, '2025-11-06T00:00:00.000Z', 'duplicate', 2)",
            [&v4.shas[1]],
        )
        .unwrap();
    }
    assert_verifies(&conn);
}

fn value(q: Quantity, v: f64, column: u32, raw: &str) -> MeasuredValue {
    MeasuredValue {
        quantity: q,
        value: v,
        column,
        raw: raw.into(),
    }
}

#[test]
fn records_after_the_upgrade_continue_the_old_ids_and_verify() {
    let v4 = build_v4();
    let mut conn = upgrade(&v4.path);
    let old_values = measurement_values(&conn);
    let old_max = v4.max_id();

    // A third export: KV-U-003 exactly as stored (known), KV-U-001 with another
    // selectivity (a conflict with a pre-upgrade value) and the new batch KV-U-004.
    let parsed = ParsedFile::Cycles(vec![
        CycleRow {
            line: 2,
            batch_id: "KV-U-003".into(),
            lot: Some(LOT.into()),
            cycle_no: Some(3),
            started_at: None,
            feed_lot: None,
            values: vec![value(Quantity::Conversion, 0.65, 4, "65")],
        },
        CycleRow {
            line: 3,
            batch_id: "KV-U-001".into(),
            lot: None,
            cycle_no: None,
            started_at: None,
            feed_lot: None,
            values: vec![value(Quantity::Selectivity, 0.96, 5, "96")],
        },
        CycleRow {
            line: 4,
            batch_id: "KV-U-004".into(),
            lot: Some(LOT.into()),
            cycle_no: Some(4),
            started_at: None,
            feed_lot: None,
            values: vec![value(Quantity::Conversion, 0.6, 4, "60")],
        },
    ]);
    let facts = records::FileFacts {
        path: "/exports/kv/run-2025-11-07.csv".into(),
        sha256: sha_of("batch;lot;cycle;conv;sel\nKV-U-003;...\nKV-U-001;...\nKV-U-004;...\n"),
        size: 388,
        mtime: Some("2025-11-07T17:00:00.000Z".into()),
        profile: Some("kv-hplc".into()),
        site: Some("pilot-2".into()),
        seen_at: "2025-11-07T17:05:00.000Z".into(),
    };
    let tx = conn.transaction().unwrap();
    let stored = records::record_parsed(&tx, &facts, &parsed, "turnbook-svc").unwrap();
    tx.commit().unwrap();
    assert_eq!(stored.file_id, 4);
    assert_eq!(stored.event_seq, v4.last_seq + 1);
    assert_eq!(
        (stored.rows_new, stored.rows_known, stored.rows_conflict),
        (1, 1, 1),
        "{:?}",
        stored.conflicts
    );

    // The new values take the ids after the old ones, in file order.
    let new_rows: Vec<(MeasurementRow, i64)> = typed_rows(&conn)
        .into_iter()
        .filter(|(_, seq)| *seq == stored.event_seq)
        .collect();
    let ids: Vec<i64> = new_rows.iter().map(|(r, _)| r.id).collect();
    assert_eq!(ids, (old_max + 1..=old_max + 4).collect::<Vec<_>>());
    let first = &new_rows[0].0;
    assert_eq!(
        (
            first.batch_id.as_str(),
            first.quantity.as_ref(),
            first.kind.as_ref()
        ),
        ("KV-U-001", "selectivity", "conflict")
    );
    assert_eq!(measurement_counter(&conn), old_max + 5);
    // The old rows are still the first ones, unchanged.
    assert_eq!(
        &measurement_values(&conn)[..old_values.len()],
        &old_values[..]
    );

    // Provenance of the new values, next to the migrated links.
    let links = batch_sources(&conn);
    assert!(links.contains(&("KV-U-001".into(), stored.event_seq, 3, Some(4))));
    assert!(links.contains(&("KV-U-004".into(), stored.event_seq, 4, Some(4))));
    assert!(
        !links
            .iter()
            .any(|l| l.0 == "KV-U-003" && l.1 == stored.event_seq),
        "a known row writes no value and no link"
    );
    let kv1 = cycle_of(&conn, "KV-U-001");
    assert_eq!(kv1.conflicts, 1);
    assert_eq!(
        kv1.get(Quantity::Selectivity),
        Some(0.97),
        "first value stays"
    );
    assert_eq!(kv1.first_seq, 2, "first seen before the upgrade");
    assert_verifies(&conn);

    // A person's correction after the upgrade takes the next id too.
    let tx = conn.transaction().unwrap();
    let seq = records::correct(
        &tx,
        "KV-U-001",
        "selectivity",
        0.965,
        "selectivity recalculated with the response factor of 2025-11",
        "m.ortiz",
        "2025-11-08T09:00:00.000Z",
    )
    .unwrap();
    tx.commit().unwrap();
    let last = records::measurements_of(&conn, "KV-U-001")
        .unwrap()
        .pop()
        .unwrap();
    assert_eq!((last.id, last.kind.as_ref()), (old_max + 5, "correction"));
    assert_eq!(measurement_counter(&conn), old_max + 6);
    assert!(batch_sources(&conn).contains(&("KV-U-001".into(), seq, 0, None)));
    let kv1 = cycle_of(&conn, "KV-U-001");
    assert_eq!(
        (kv1.get(Quantity::Selectivity), kv1.conflicts),
        (Some(0.965), 0)
    );
    assert_verifies(&conn);
}

/// Migration 0006 rebuilt `source_files` for its CHECK: the rows, the references to them
/// and the foreign keys survive it, the check still refuses any other outcome, and storing
/// a file's row no longer builds a temporary index per row.
#[test]
fn the_rebuilt_file_table_keeps_its_rows_and_checks_without_a_temporary_index() {
    let v4 = build_v4();
    let conn = upgrade(&v4.path);
    let fk_on: bool = conn
        .query_row("PRAGMA foreign_keys", [], |r| r.get(0))
        .unwrap();
    assert!(fk_on, "foreign keys are back on after the migrations");
    let orphans: i64 = conn
        .query_row("SELECT COUNT(*) FROM pragma_foreign_key_check", [], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(orphans, 0);
    let indexes: Vec<String> = conn
        .prepare(
            "SELECT name FROM sqlite_schema WHERE type = 'index' AND tbl_name = 'source_files' \
             AND sql IS NOT NULL ORDER BY name",
        )
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    // (0012 adds the index by event that verify reads each stretch of events' rows with;
    // 0013 the one by outcome and time that the time-window counts read.)
    assert_eq!(
        indexes,
        [
            "source_files_event",
            "source_files_ingested_once",
            "source_files_outcome_seen",
            "source_files_path"
        ]
    );
    let insert = "INSERT INTO source_files(sha256, path, size, seen_at, outcome, event_seq) \
                  VALUES ('00', 'x', 1, 'now', ?1, (SELECT MAX(seq) FROM events))";
    let refused = conn.execute(insert, ["imported"]).unwrap_err();
    assert!(
        refused.to_string().contains("CHECK constraint failed"),
        "{refused}"
    );
    for ok in ["ingested", "duplicate", "rejected"] {
        let tx = conn.unchecked_transaction().unwrap();
        tx.execute(insert, [ok]).unwrap();
        tx.rollback().unwrap();
    }
    let plan: Vec<String> = conn
        .prepare(&format!("EXPLAIN {insert}"))
        .unwrap()
        .query_map(["ingested"], |r| r.get(1))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert!(
        !plan.iter().any(|op| op == "OpenEphemeral"),
        "the insert builds a temporary table: {plan:?}"
    );
}

#[test]
fn a_connection_has_more_lookaside_slots_than_sqlite_gives_by_default() {
    let dir = tempfile::tempdir().unwrap();
    let conn = store::open(&dir.path().join("t.db")).unwrap();
    // Hold many statements at once, as a writer does, and see how many slots they filled.
    let held: Vec<rusqlite::Statement<'_>> = (0..60)
        .map(|i| {
            conn.prepare(&format!("SELECT {i}, batch_id FROM cycles WHERE lot = ?1"))
                .unwrap()
        })
        .collect();
    let (mut now, mut most) = (0, 0);
    // SAFETY: the handle is this open connection's; the two outputs are plain ints.
    let rc = unsafe {
        rusqlite::ffi::sqlite3_db_status(
            conn.handle(),
            rusqlite::ffi::SQLITE_DBSTATUS_LOOKASIDE_USED,
            &mut now,
            &mut most,
            0,
        )
    };
    assert_eq!(rc, rusqlite::ffi::SQLITE_OK);
    // SQLite's default buffer, 40 slots of 1,200 bytes, holds about 125 slots of its two
    // sizes (123 were filled here without the change); the store's holds more than 800.
    assert!(most > 200, "lookaside slots used at most: {most}");
    drop(held);
}

/// 0017 moves each lot's alert snapshot out of `lot_states` into `lot_snapshots`: the
/// line, what the state was made by and the snapshot (NULL for a lot nobody registered)
/// all survive, and the lines' table no longer holds the snapshots.
#[test]
fn the_upgrade_to_0017_keeps_each_lot_state_and_its_snapshot() {
    let dir = TempDir::new().unwrap();
    let path = dir.path().join("v16.db");
    let mut conn = Connection::open(&path).unwrap();
    conn.execute_batch(
        "CREATE TABLE schema_migrations (version INTEGER PRIMARY KEY, name TEXT NOT NULL,
             applied_at TEXT NOT NULL) STRICT;",
    )
    .unwrap();
    for &(version, name, sql) in migrate::MIGRATIONS.iter().filter(|m| m.0 <= 16) {
        let tx = conn.transaction().unwrap();
        tx.execute_batch(sql).unwrap();
        tx.execute(
            "INSERT INTO schema_migrations(version, name, applied_at) VALUES (?1, ?2, 'then')",
            params![version, name],
        )
        .unwrap();
        tx.commit().unwrap();
    }
    let rows = [
        ("LOT-A", 7, "{\"lot\":\"LOT-A\"}", Some("{\"rules\":1}")),
        ("LOT-B", 9, "{\"lot\":\"LOT-B\"}", None),
    ];
    for (lot, seq, line, snapshot) in rows {
        conn.execute(
            "INSERT INTO lot_states(lot, after_seq, engine_version, config_sha256, computed_at,
                 line, snapshot) VALUES (?1, ?2, 'engine 1', 'cfg', 'at', ?3, ?4)",
            params![lot, seq, line, snapshot],
        )
        .unwrap();
    }
    drop(conn);

    let conn = upgrade(&path);
    assert_eq!(schema_version(&conn), migrate::latest());
    let columns: Vec<String> = conn
        .prepare("SELECT name FROM pragma_table_info('lot_states')")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert!(!columns.iter().any(|c| c == "snapshot"), "{columns:?}");
    for (lot, seq, line, snapshot) in rows {
        let (s, l, e, p): (i64, String, String, Option<String>) = conn
            .query_row(
                "SELECT s.after_seq, s.line, s.engine_version, p.snapshot
                 FROM lot_states s JOIN lot_snapshots p ON p.lot = s.lot WHERE s.lot = ?1",
                [lot],
                |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)),
            )
            .unwrap();
        assert_eq!((s, l.as_str(), e.as_str()), (seq, line, "engine 1"));
        assert_eq!(p.as_deref(), snapshot);
    }
}

/// 0018 adds the table of kept printed `lots --json` entries, empty: a store from before
/// keeps every state, and its list prints from the states until the writer's open keeps
/// the entries (`tests/lots_printed.rs`).
#[test]
fn the_upgrade_to_0018_keeps_each_state_and_starts_with_no_printed_entry() {
    let dir = TempDir::new().unwrap();
    let path = dir.path().join("v17.db");
    let mut conn = Connection::open(&path).unwrap();
    conn.execute_batch(
        "CREATE TABLE schema_migrations (version INTEGER PRIMARY KEY, name TEXT NOT NULL,
             applied_at TEXT NOT NULL) STRICT;",
    )
    .unwrap();
    for &(version, name, sql) in migrate::MIGRATIONS.iter().filter(|m| m.0 <= 17) {
        let tx = conn.transaction().unwrap();
        tx.execute_batch(sql).unwrap();
        tx.execute(
            "INSERT INTO schema_migrations(version, name, applied_at) VALUES (?1, ?2, 'then')",
            params![version, name],
        )
        .unwrap();
        tx.commit().unwrap();
    }
    conn.execute(
        "INSERT INTO lot_states(lot, after_seq, engine_version, config_sha256, computed_at, line)
         VALUES ('LOT-A', 7, 'engine 1', 'cfg', 'at', '{\"lot\":\"LOT-A\"}')",
        [],
    )
    .unwrap();
    drop(conn);

    let conn = upgrade(&path);
    assert_eq!(schema_version(&conn), migrate::latest());
    let (seq, line): (i64, String) = conn
        .query_row(
            "SELECT after_seq, line FROM lot_states WHERE lot = 'LOT-A'",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!((seq, line.as_str()), (7, "{\"lot\":\"LOT-A\"}"));
    let printed: i64 = conn
        .query_row("SELECT COUNT(*) FROM lot_printed", [], |r| r.get(0))
        .unwrap();
    assert_eq!(printed, 0);
}
