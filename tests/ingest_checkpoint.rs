//! A backfill copies its write-ahead log into the database as it goes (a thread of its
//! own copies, the writer then copies what it appended meanwhile), so the log starts over
//! instead of growing with the whole run; nothing is lost or stored twice on the way, and
//! SQLite's own checkpoints are back once the run ends.
//!
//! Invented data: one-line exports of an imaginary reactor.

use std::path::{Path, PathBuf};

use turnbook::notebook::Ingestor;

const FILES: usize = 2_000;

mod common;

fn write(root: &Path) -> Vec<PathBuf> {
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    (0..FILES)
        .map(|i| {
            let p = dir.join(format!("f{i:05}.csv"));
            let text = format!(
                "Batch,Lot,Conversion\nRD-{i:05},LOT-{},{}.5\n",
                i % 3,
                40 + i % 50
            );
            std::fs::write(&p, text).unwrap();
            p
        })
        .collect()
}

fn count(ing: &Ingestor, sql: &str) -> i64 {
    ing.conn().query_row(sql, [], |r| r.get(0)).unwrap()
}

/// Backfill the files with the given checkpoint size; returns the log's size on disk at
/// the end of the run (its high-water mark: a log that starts over is not truncated).
fn backfill(checkpoint_bytes: i64) -> u64 {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = common::reactor_config(root, 50);
    let files = write(root);
    let mut ing = Ingestor::open(cfg).unwrap();
    ing.checkpoint_bytes = checkpoint_bytes;
    let before: i64 = count(&ing, "PRAGMA wal_autocheckpoint");
    let summary = ing.ingest_paths(&files, |_| {}).unwrap();
    assert_eq!(summary.ingested, FILES, "{:?}", summary.errors.first());
    assert_eq!(summary.rejected, 0);

    // Nothing lost, nothing twice.
    assert_eq!(
        count(&ing, "SELECT COUNT(*) FROM source_files"),
        FILES as i64
    );
    assert_eq!(count(&ing, "SELECT COUNT(*) FROM cycles"), FILES as i64);
    assert_eq!(
        count(
            &ing,
            "SELECT COUNT(*) FROM events WHERE kind = 'file-ingested'"
        ),
        FILES as i64
    );
    let ok: String = ing
        .conn()
        .query_row("PRAGMA integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(ok, "ok");
    let report = turnbook::notebook::verify(ing.config(), &[]).unwrap();
    assert!(report.ok(), "{:?}", report.findings.first());

    // SQLite's own checkpoints are back, at the interval they had before the run.
    assert_eq!(count(&ing, "PRAGMA wal_autocheckpoint"), before);

    let log = root.join("t.db-wal");
    let size = std::fs::metadata(&log).map(|m| m.len()).unwrap_or(0);

    // A second run finds every file ingested.
    let again = ing.ingest_paths(&files, |_| {}).unwrap();
    assert_eq!(again.duplicates, FILES);
    assert_eq!(count(&ing, "SELECT COUNT(*) FROM cycles"), FILES as i64);
    size
}

#[test]
fn the_log_starts_over_during_a_backfill_and_nothing_is_lost() {
    // Checkpoints every 64 KB of log (four 16 KB pages) against none during the run.
    let short = backfill(64 << 10);
    let whole = backfill(i64::MAX);
    assert!(whole > 0, "the run without checkpoints left no log");
    assert!(
        short * 4 < whole,
        "the log grew to {short} bytes with checkpoints and {whole} without: it did not start over"
    );
}
