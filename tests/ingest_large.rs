//! A large export (50,000 rows, over a megabyte) is stored in parts: its values spread
//! over `file-rows` events of bounded size, each in a transaction of its own, followed by
//! its `file-ingested` event. The records are those of any export; `verify` replays them
//! and still catches an edited row; a second copy is a duplicate; a fault on the last line
//! rejects the whole file and stores none of its rows. Between parts the write lock is
//! free (another writer stores a file there), a file stopped or killed between parts is
//! resumed after its last stored part, and `verify` is clean at every moment.
//!
//! Invented data: an imaginary reactor's lot of 50,000 one-row batches.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use turnbook::notebook::{self, FileOutcome, Ingestor};

mod common;

const ROWS: usize = 50_000;

fn conversion(n: usize) -> f64 {
    // Two decimals, as an instrument writes them.
    (4000 + (n * 37) % 5000) as f64 / 100.0
}

fn write_export(dir: &Path, name: &str, rows: usize, last_line: Option<&str>) -> PathBuf {
    let mut text = String::with_capacity(rows * 32);
    text.push_str("Batch,Lot,Conversion\n");
    for n in 1..=rows {
        text.push_str(&format!("LG-{n:06},LOT-LARGE,{:.2}\n", conversion(n)));
    }
    if let Some(l) = last_line {
        text.push_str(l);
    }
    std::fs::create_dir_all(dir).unwrap();
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

fn count(ing: &Ingestor, sql: &str) -> i64 {
    ing.conn().query_row(sql, [], |r| r.get(0)).unwrap()
}

#[test]
fn a_large_export_is_stored_in_bounded_parts_and_verifies() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let big = write_export(&root.join("exports"), "large.csv", ROWS, None);
    let size = std::fs::metadata(&big).unwrap().len();
    assert!(
        size > 1 << 20,
        "the export must be a large one: {size} bytes"
    );
    let mut ing = Ingestor::open(cfg.clone()).unwrap();

    let FileOutcome::Ingested { stored, .. } = ing.ingest_file(&big).unwrap() else {
        panic!("the large export was not ingested");
    };
    assert_eq!(stored.rows_conflict, 0);
    assert!(stored.lots_touched.contains("LOT-LARGE"));

    // Every row is a cycle, with its value, in the lot.
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM cycles WHERE lot = 'LOT-LARGE'"),
        ROWS as i64
    );
    let (batch, value): (String, f64) = ing
        .conn()
        .query_row(
            "SELECT batch_id, conversion FROM cycles WHERE batch_id = 'LG-031415'",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!(batch, "LG-031415");
    assert!(
        (value - conversion(31_415) / 100.0).abs() < 1e-12,
        "{value}"
    );
    // Two values a row (lot and conversion), each once in the measurements view.
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM measurements"),
        2 * ROWS as i64
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(DISTINCT id) FROM measurements"),
        2 * ROWS as i64
    );
    // The values are in parts of 2,048 rows, none near the file's size; the file's own
    // event holds none and comes after its parts.
    let parts = count(&ing, "SELECT COUNT(*) FROM events WHERE kind = 'file-rows'");
    assert_eq!(parts, ROWS.div_ceil(2048) as i64);
    let largest = count(&ing, "SELECT MAX(LENGTH(payload)) FROM events");
    assert!(largest < (size / 4) as i64, "a payload of {largest} bytes");
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(*) FROM events WHERE kind = 'file-ingested'
             AND seq > (SELECT MAX(seq) FROM events WHERE kind = 'file-rows')
             AND json_array_length(payload, '$.measurements') = 0"
        ),
        1
    );
    // Provenance: every batch links to its part and to the file.
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(*) FROM batch_sources b JOIN events e ON e.seq = b.event_seq
             WHERE e.kind = 'file-rows' AND b.source_file_id = 1"
        ),
        ROWS as i64
    );

    // verify replays the parts: intact.
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);

    // A second copy is a duplicate, and adds nothing.
    let copy = root.join("exports").join("copy.csv");
    std::fs::copy(&big, &copy).unwrap();
    assert!(matches!(
        ing.ingest_file(&copy).unwrap(),
        FileOutcome::Duplicate { of_file_id: 1, .. }
    ));
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM events WHERE kind = 'file-rows'"),
        parts
    );

    // An edited row of the large file is caught.
    ing.conn()
        .execute(
            "UPDATE cycles SET conversion = 0.5 WHERE batch_id = 'LG-049999'",
            [],
        )
        .unwrap();
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(
        report
            .findings
            .iter()
            .any(|f| f.table == "cycles" && f.row == "LG-049999" && f.field == "conversion"),
        "{:?}",
        report.findings
    );
}

#[test]
fn a_fault_on_the_last_line_rejects_the_whole_large_file() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let bad = write_export(
        &root.join("exports"),
        "bad.csv",
        ROWS,
        Some("LG-999999,LOT-LARGE,forty\n"),
    );
    let mut ing = Ingestor::open(cfg).unwrap();
    let FileOutcome::Rejected { error, .. } = ing.ingest_file(&bad).unwrap() else {
        panic!("a file with a bad value must be rejected");
    };
    let last = ROWS + 2;
    assert!(error.contains(&format!("line {last}")), "{error}");
    assert!(
        error.contains("Conversion") || error.contains("conversion"),
        "{error}"
    );
    assert_eq!(count(&ing, "SELECT COUNT(*) FROM cycles"), 0);
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM events WHERE kind = 'file-rows'"),
        0
    );
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'rejected'"
        ),
        1
    );
}

#[test]
fn rows_of_a_large_file_merge_with_stored_batches() {
    // A small export first stores some batches; the large one then brings the same
    // values for them (known), a different one for one of them (a conflict), and new
    // batches: exactly as a file parsed whole would.
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    let small = dir.join("small.csv");
    std::fs::write(
        &small,
        format!(
            "Batch,Lot,Conversion\nLG-000010,LOT-LARGE,{:.2}\nLG-030000,LOT-LARGE,12.25\n",
            conversion(10)
        ),
    )
    .unwrap();
    let big = write_export(&dir, "large.csv", ROWS, None);
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    assert!(matches!(
        ing.ingest_file(&small).unwrap(),
        FileOutcome::Ingested { .. }
    ));
    let FileOutcome::Ingested { stored, .. } = ing.ingest_file(&big).unwrap() else {
        panic!("the large export was not ingested");
    };
    assert_eq!(stored.rows_conflict, 1, "{:?}", stored.conflicts);
    assert!(
        stored.conflicts[0].contains("LG-030000"),
        "{:?}",
        stored.conflicts
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM cycles WHERE lot = 'LOT-LARGE'"),
        ROWS as i64
    );
    // The first value stays; the conflict is counted on the cycle.
    let (value, conflicts): (f64, i64) = ing
        .conn()
        .query_row(
            "SELECT conversion, conflicts FROM cycles WHERE batch_id = 'LG-030000'",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert!((value - 0.1225).abs() < 1e-12, "{value}");
    assert_eq!(conflicts, 1);
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);
}

#[test]
fn killed_while_storing_a_large_file_it_resumes_and_stores_every_row_once() {
    // `turnbook ingest` of the large file is killed with SIGKILL at growing moments, so
    // that some runs die between (or in) its parts; each run resumes where the last one
    // stopped, and one runs to the end. After every kill `verify` is clean; at the end
    // the file is stored exactly once, every row of it, with a one-pass ingest's totals.
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let big = write_export(&root.join("exports"), "large.csv", ROWS, None);
    let config = root.join("turnbook.toml");
    let ingest = || {
        Command::new(env!("CARGO_BIN_EXE_turnbook"))
            .arg("--config")
            .arg(&config)
            .arg("ingest")
            .arg(&big)
            .env_remove("RUST_LOG")
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap()
    };
    let mut killed = 0;
    let mut partial_seen = 0;
    let mut wait_ms = 300u64;
    // Kill until a run has died with the file part-stored (at most a dozen runs).
    for _ in 0..12 {
        let mut child = ingest();
        let t0 = Instant::now();
        while t0.elapsed() < Duration::from_millis(wait_ms) {
            if child.try_wait().unwrap().is_some() {
                break;
            }
            std::thread::sleep(Duration::from_millis(10));
        }
        let finished = child.try_wait().unwrap().is_some();
        if !finished {
            child.kill().unwrap();
            killed += 1;
        }
        child.wait().unwrap();
        if finished {
            break;
        }
        // Whatever the moment of the kill, the store verifies: a partial file's parts
        // are those its progress row counts.
        let report = notebook::verify(&cfg, &[]).unwrap();
        assert!(report.findings.is_empty(), "{:?}", report.findings);
        let conn = turnbook::store::open(&cfg.database_path()).unwrap();
        let chunks: Option<i64> = conn
            .query_row("SELECT chunks_done FROM files_in_progress", [], |r| {
                r.get(0)
            })
            .ok();
        if chunks.is_some_and(|c| c > 0) {
            partial_seen += 1;
            if partial_seen >= 2 {
                break;
            }
        }
        wait_ms += 300;
    }
    assert!(killed > 0, "no run was killed before it finished");
    assert!(
        partial_seen > 0,
        "no run was killed while the file was part-stored"
    );
    assert!(ingest().wait().unwrap().success());
    let ing = Ingestor::open(cfg.clone()).unwrap();
    assert_eq!(count(&ing, "SELECT COUNT(*) FROM files_in_progress"), 0);
    // The totals of a one-pass ingest, in the closing event and the file's row.
    assert_eq!(
        count(
            &ing,
            "SELECT rows_new * 1000000 + rows_known * 1000 + rows_conflict FROM source_files
             WHERE outcome = 'ingested'"
        ),
        ROWS as i64 * 1_000_000
    );
    assert_eq!(
        count(
            &ing,
            "SELECT json_extract(payload, '$.file.rows_new') FROM events WHERE kind = 'file-ingested'"
        ),
        ROWS as i64
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM events WHERE kind = 'file-rows'"),
        ROWS.div_ceil(2048) as i64
    );
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'"
        ),
        1
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM cycles WHERE lot = 'LOT-LARGE'"),
        ROWS as i64
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM measurements"),
        2 * ROWS as i64
    );
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);
    drop(ing);

    // Offered again, the same file stores nothing new.
    assert!(ingest().wait().unwrap().success());
    let ing = Ingestor::open(cfg.clone()).unwrap();
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM events WHERE kind = 'file-rows'"),
        ROWS.div_ceil(2048) as i64
    );
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'duplicate'"
        ),
        1
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM measurements"),
        2 * ROWS as i64
    );
}

/// What the hook saw after one committed part.
#[derive(Debug, Default)]
struct Seen {
    parts: Vec<i64>,
    small: Option<FileOutcome>,
    findings: Vec<String>,
    cycles_meanwhile: i64,
}

#[test]
fn a_small_file_is_stored_between_the_parts_of_a_large_one() {
    // Parts of 500 rows. After the third committed part, a second writer (its own
    // connection, as the service's lane for small files has) stores a small export and
    // `verify` runs: the write lock is free between parts, the partial file verifies, and
    // its cycles so far are visible. The small file's event lies between the large file's
    // parts; the large file's totals are a one-pass ingest's.
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let dir = root.join("exports");
    let big = write_export(&dir, "large.csv", ROWS, None);
    let small = dir.join("small.csv");
    std::fs::write(
        &small,
        "Batch,Lot,Conversion\nSM-001,LOT-SMALL,41.00\nSM-002,LOT-SMALL,40.50\n",
    )
    .unwrap();
    let seen = std::sync::Arc::new(std::sync::Mutex::new(Seen::default()));
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    ing.parts.rows = 500;
    {
        let (seen, cfg, small) = (seen.clone(), cfg.clone(), small.clone());
        ing.parts.after_part = Some(Box::new(move |done| {
            let mut seen = seen.lock().unwrap();
            seen.parts.push(done.parts);
            if done.parts != 3 {
                return;
            }
            let mut other = Ingestor::open(cfg.clone()).unwrap();
            seen.small = Some(other.ingest_file(&small).unwrap());
            seen.cycles_meanwhile = count(
                &other,
                "SELECT COUNT(*) FROM cycles WHERE lot = 'LOT-LARGE'",
            );
            drop(other);
            let report = notebook::verify(&cfg, &[]).unwrap();
            seen.findings = report.findings.iter().map(|f| format!("{f:?}")).collect();
        }));
    }
    let FileOutcome::Ingested { stored, .. } = ing.ingest_file(&big).unwrap() else {
        panic!("the large export was not ingested");
    };
    let seen = seen.lock().unwrap();
    assert_eq!(seen.parts.len(), ROWS.div_ceil(500));
    assert!(
        matches!(seen.small, Some(FileOutcome::Ingested { .. })),
        "{:?}",
        seen.small
    );
    assert!(seen.findings.is_empty(), "{:?}", seen.findings);
    assert_eq!(seen.cycles_meanwhile, 1500);
    // The small file's event lies between the large file's parts.
    let small_seq = count(
        &ing,
        "SELECT event_seq FROM source_files WHERE path LIKE '%small.csv'",
    );
    let between = count(
        &ing,
        &format!(
            "SELECT (SELECT COUNT(*) FROM events WHERE kind = 'file-rows' AND seq < {small_seq})
                  * 1000 + (SELECT COUNT(*) FROM events WHERE kind = 'file-rows' AND seq > {small_seq})"
        ),
    );
    assert_eq!(between, 3 * 1000 + (ROWS.div_ceil(500) as i64 - 3));
    assert!(stored.event_seq > small_seq);
    // Ids: the large file took its id first, the small one the next.
    assert_eq!(stored.file_id, 1);
    assert_eq!(
        count(
            &ing,
            "SELECT id FROM source_files WHERE path LIKE '%small.csv'"
        ),
        2
    );
    assert_eq!(
        (stored.rows_new, stored.rows_known, stored.rows_conflict),
        (ROWS as i64, 0, 0)
    );
    assert_eq!(count(&ing, "SELECT COUNT(*) FROM files_in_progress"), 0);
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM cycles WHERE lot = 'LOT-LARGE'"),
        ROWS as i64
    );
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);
}

#[test]
fn a_large_file_stopped_between_parts_resumes_with_one_pass_totals() {
    // A small export first stores two of the batches (one the same, one conflicting).
    // The large file is stopped after its fifth part (as the service stops on SIGTERM),
    // verified in that state, then offered again: it resumes after its fifth chunk, and
    // its totals, rows and parts are those of an ingest in one pass.
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    let small = dir.join("small.csv");
    std::fs::write(
        &small,
        format!(
            "Batch,Lot,Conversion\nLG-000010,LOT-LARGE,{:.2}\nLG-030000,LOT-LARGE,12.25\n",
            conversion(10)
        ),
    )
    .unwrap();
    let big = write_export(&dir, "large.csv", ROWS, None);
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    assert!(matches!(
        ing.ingest_file(&small).unwrap(),
        FileOutcome::Ingested { .. }
    ));
    let stop = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
    ing.parts.stop = Some(stop.clone());
    ing.parts.after_part = Some(Box::new(move |done| {
        if done.parts == 5 {
            stop.store(true, std::sync::atomic::Ordering::SeqCst);
        }
    }));
    let error = ing.ingest_file(&big).unwrap_err().to_string();
    assert!(error.contains("stopped after 5"), "{error}");
    drop(ing);
    let ing = Ingestor::open(cfg.clone()).unwrap();
    assert_eq!(
        count(
            &ing,
            "SELECT parts * 100 + chunks_done FROM files_in_progress"
        ),
        505
    );
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(*) FROM source_files WHERE path LIKE '%large.csv'"
        ),
        0
    );
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);
    // `status` names the part-stored file.
    let status = notebook::status(&cfg).unwrap();
    assert_eq!(status.files_in_progress.len(), 1);
    assert!(status.files_in_progress[0].path.ends_with("large.csv"));
    assert_eq!(status.files_in_progress[0].parts, 5);
    drop(ing);

    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    let FileOutcome::Ingested { stored, .. } = ing.ingest_file(&big).unwrap() else {
        panic!("the resumed export was not ingested");
    };
    assert_eq!(
        (stored.rows_new, stored.rows_known, stored.rows_conflict),
        (ROWS as i64 - 2, 1, 1)
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM events WHERE kind = 'file-rows'"),
        ROWS.div_ceil(2048) as i64
    );
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM cycles WHERE lot = 'LOT-LARGE'"),
        ROWS as i64
    );
    // Every value once: the small file's four, the large file's new and conflicting ones.
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(DISTINCT id) * 10 + COUNT(*) - COUNT(DISTINCT id) FROM measurements"
        ),
        (4 + 2 * (ROWS as i64 - 2) + 1) * 10
    );
    assert_eq!(count(&ing, "SELECT COUNT(*) FROM files_in_progress"), 0);
    assert!(notebook::status(&cfg).unwrap().files_in_progress.is_empty());
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);
}

#[test]
fn a_large_lot_nobody_registered_is_recomputed_as_the_whole_state_would_be() {
    // A lot nobody registered is recomputed by streaming its cycles from the store (it
    // has no analysis to hold them for). What that stores must be what the lot's whole
    // state gives: `verify` recomputes the line and the figures from the whole state
    // and compares them, here with a conflicting, an excluded and a later cycle.
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let dir = root.join("exports");
    let big = write_export(&dir, "large.csv", ROWS, None);
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    assert!(matches!(
        ing.ingest_file(&big).unwrap(),
        FileOutcome::Ingested { .. }
    ));
    let later = dir.join("later.csv");
    std::fs::write(
        &later,
        "Batch,Lot,Conversion\nLG-000007,LOT-LARGE,1.00\nLG-900000,LOT-LARGE,55.00\n",
    )
    .unwrap();
    assert!(matches!(
        ing.ingest_file(&later).unwrap(),
        FileOutcome::Ingested { .. }
    ));
    drop(ing);
    notebook::exclude(&cfg, "LG-000011", true, "sample spilled").unwrap();

    let ing = Ingestor::open(cfg.clone()).unwrap();
    let (line, figures): (String, i64) = ing
        .conn()
        .query_row(
            "SELECT s.line, (SELECT COUNT(*) FROM cycle_figures WHERE lot = s.lot)
             FROM lot_states s WHERE s.lot = 'LOT-LARGE'",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    let line: serde_json::Value = serde_json::from_str(&line).unwrap();
    assert_eq!(line["cycles"], ROWS + 1);
    assert_eq!(figures, ROWS as i64 + 1);
    assert_eq!(
        line["flags"],
        serde_json::json!(["conflict", "excluded", "pending"])
    );
    let flags = |batch: &str| -> String {
        ing.conn()
            .query_row(
                "SELECT flags FROM cycle_figures WHERE batch_id = ?1",
                [batch],
                |r| r.get(0),
            )
            .unwrap()
    };
    assert_eq!(flags("LG-000007"), r#"["conflict","pending"]"#);
    assert_eq!(flags("LG-000011"), r#"["excluded","pending"]"#);
    assert_eq!(flags("LG-900000"), r#"["pending"]"#);
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);

    // A stored figure off by one flag is a finding: the check compares.
    ing.conn()
        .execute(
            "UPDATE cycle_figures SET flags = '[\"pending\"]' WHERE batch_id = 'LG-000011'",
            [],
        )
        .unwrap();
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(
        report.findings.iter().any(|f| f.table == "cycle_figures"),
        "{:?}",
        report.findings
    );
}

/// Send SIGTERM to `child` and wait (at most 10 s) for it to exit; its exit status.
fn terminate(child: &mut std::process::Child) -> std::process::ExitStatus {
    let ok = Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(ok.success());
    let t0 = Instant::now();
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            return status;
        }
        if t0.elapsed() > Duration::from_secs(10) {
            let _ = child.kill();
            let _ = child.wait();
            panic!("the service ignored SIGTERM for 10 s");
        }
        std::thread::sleep(Duration::from_millis(10));
    }
}

/// Poll `sql` (one integer) on the store until `done` holds, at most `limit`.
fn wait_for_count(db: &Path, sql: &str, limit: Duration, done: impl Fn(i64) -> bool) -> i64 {
    let t0 = Instant::now();
    loop {
        let n = turnbook::store::open(db)
            .ok()
            .and_then(|c| c.query_row(sql, [], |r| r.get::<_, i64>(0)).ok())
            .unwrap_or(-1);
        if done(n) {
            return n;
        }
        assert!(t0.elapsed() < limit, "{sql} gave {n} after {limit:?}");
        std::thread::sleep(Duration::from_millis(20));
    }
}

#[test]
fn the_service_stops_a_large_file_between_parts_on_sigterm_and_resumes_it() {
    // `turnbook watch` stores the large export on its lane for large files; SIGTERM once a
    // few parts are committed: the service exits cleanly with the file part-stored (and
    // verifying), and the next start resumes it to the end, every row once.
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 100);
    let config = root.join("turnbook.toml");
    let db = cfg.database_path();
    std::fs::create_dir_all(root.join("exports")).unwrap();
    let watch = || {
        Command::new(env!("CARGO_BIN_EXE_turnbook"))
            .arg("--config")
            .arg(&config)
            .arg("watch")
            .env_remove("RUST_LOG")
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap()
    };
    let mut service = watch();
    let staged = write_export(&root.join("staging"), "large.csv", ROWS, None);
    std::thread::sleep(Duration::from_millis(500));
    std::fs::rename(&staged, root.join("exports").join("large.csv")).unwrap();
    let chunks = "SELECT COALESCE(MAX(chunks_done), 0) FROM files_in_progress";
    wait_for_count(&db, chunks, Duration::from_secs(30), |n| n >= 2);
    let status = terminate(&mut service);
    assert_eq!(status.code(), Some(0), "exit status after SIGTERM");
    let stopped_at = wait_for_count(&db, chunks, Duration::from_secs(1), |n| n >= 0);
    let parts = ROWS.div_ceil(2048) as i64;
    assert!(
        (2..parts).contains(&stopped_at),
        "stopped after {stopped_at} of {parts} chunks"
    );
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);

    let mut service = watch();
    let ingested = "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'";
    wait_for_count(&db, ingested, Duration::from_secs(60), |n| n == 1);
    assert_eq!(terminate(&mut service).code(), Some(0));
    let ing = Ingestor::open(cfg.clone()).unwrap();
    assert_eq!(count(&ing, "SELECT COUNT(*) FROM files_in_progress"), 0);
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM events WHERE kind = 'file-rows'"),
        parts
    );
    assert_eq!(
        count(
            &ing,
            "SELECT rows_new FROM source_files WHERE outcome = 'ingested'"
        ),
        ROWS as i64
    );
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(DISTINCT id) * 10 + COUNT(*) - COUNT(DISTINCT id) FROM measurements"
        ),
        2 * ROWS as i64 * 10
    );
    let report = notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);
}
