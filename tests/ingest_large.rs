//! A large export (50,000 rows, over a megabyte) is stored in parts: its values spread
//! over `file-rows` events of bounded size, followed by its `file-ingested` event, all in
//! one transaction. The records are those of any export; `verify` replays them and still
//! catches an edited row; a second copy is a duplicate; a fault on the last line rejects
//! the whole file and stores none of its rows.
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
fn killed_while_storing_a_large_file_nothing_is_half_stored() {
    // `turnbook ingest` of the large file is killed with SIGKILL at growing moments (its
    // one transaction is then either committed or not at all); then it runs to the end.
    // The file is stored exactly once, every row of it, and the chain verifies.
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
    for wait_ms in [200u64, 700, 1500, 3000] {
        let mut child = ingest();
        let t0 = Instant::now();
        while t0.elapsed() < Duration::from_millis(wait_ms) {
            if child.try_wait().unwrap().is_some() {
                break;
            }
            std::thread::sleep(Duration::from_millis(10));
        }
        if child.try_wait().unwrap().is_none() {
            child.kill().unwrap();
            killed += 1;
        }
        child.wait().unwrap();
    }
    assert!(killed > 0, "no run was killed before it finished");
    assert!(ingest().wait().unwrap().success());
    let ing = Ingestor::open(cfg.clone()).unwrap();
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
