//! A backfill recognises every repeated content exactly once, wherever the copy falls:
//! in the same group, in the next, or many groups later, whichever thread looked its hash
//! up first; and a file ingested by another writer while the backfill runs is recognised
//! too (the run must neither ingest it twice nor stop on the database's refusal).
//!
//! Invented data: one-line exports of an imaginary reactor.

use std::path::{Path, PathBuf};

use turnbook::config::Config;
use turnbook::notebook::{FileOutcome, Ingestor};

mod common;

fn config(root: &Path, group: usize) -> Config {
    common::reactor_config(root, group)
}

fn export(batch: usize) -> String {
    format!(
        "Batch,Lot,Conversion\nRD-{batch:05},LOT-A,{}.5\n",
        40 + batch % 50
    )
}

/// Write `n` files; file i holds the content of file `source(i)`.
fn write(root: &Path, n: usize, source: impl Fn(usize) -> usize) -> Vec<PathBuf> {
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    (0..n)
        .map(|i| {
            let p = dir.join(format!("f{i:05}.csv"));
            std::fs::write(&p, export(source(i))).unwrap();
            p
        })
        .collect()
}

fn ingested_files(ing: &Ingestor) -> i64 {
    ing.conn()
        .query_row(
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'",
            [],
            |r| r.get(0),
        )
        .unwrap()
}

#[test]
fn copies_at_every_distance_are_duplicates_of_the_first() {
    // File i repeats file i - d for d cycling through 1, 2, 3, 5, 8, 13, 21 on every
    // third file; the rest are new contents.
    let distances = [1usize, 2, 3, 5, 8, 13, 21];
    let source = |i: usize| {
        if i % 3 == 2 && i >= 21 {
            i - distances[(i / 3) % distances.len()]
        } else {
            i
        }
    };
    // Groups of 1–7 files in one part each, and groups of 7 and 20 files handed over in
    // parts of 2 and 3 files (an export here is 41 bytes).
    for (group, part_bytes, per_part) in [
        (1usize, u64::MAX, 1usize),
        (2, u64::MAX, 2),
        (4, u64::MAX, 4),
        (7, u64::MAX, 7),
        (7, 60, 2),
        (20, 100, 3),
    ] {
        let tmp = tempfile::tempdir().unwrap();
        let files = write(tmp.path(), 400, source);
        assert_eq!(std::fs::metadata(&files[0]).unwrap().len(), 41);
        let mut ing = Ingestor::open(config(tmp.path(), group)).unwrap();
        ing.part_bytes = part_bytes;
        let mut outcomes = Vec::new();
        let summary = ing
            .ingest_paths(&files, |o| outcomes.push(o.clone()))
            .unwrap();
        let parts_of_group = group.div_ceil(per_part);
        let expected_parts = (400 / group) * parts_of_group + (400 % group).div_ceil(per_part);
        assert_eq!(summary.transactions, expected_parts, "group {group}");
        // File i holds export(source(i)); it duplicates the first file holding the same.
        let first_of = |i: usize| (0..=i).find(|&k| source(k) == source(i)).unwrap_or(i);
        let expected_dups = (0..400).filter(|&i| first_of(i) != i).count();
        assert!(expected_dups > 80, "{expected_dups}");
        assert_eq!(summary.duplicates, expected_dups, "group {group}");
        assert_eq!(summary.ingested, 400 - expected_dups, "group {group}");
        assert_eq!(summary.rejected, 0, "group {group}");
        assert_eq!(ingested_files(&ing), (400 - expected_dups) as i64);
        // Each duplicate names the file id of its first copy (ids follow path order).
        let ids: Vec<i64> = outcomes
            .iter()
            .map(|o| match o {
                FileOutcome::Ingested { stored, .. } => stored.file_id,
                _ => 0,
            })
            .collect();
        for (i, o) in outcomes.iter().enumerate() {
            if let FileOutcome::Duplicate { of_file_id, .. } = o {
                assert_eq!(*of_file_id, ids[first_of(i)], "group {group}, file {i}");
            }
        }
        let report = turnbook::notebook::verify(ing.config(), &[]).unwrap();
        assert!(report.ok(), "{:?}", report.findings);
    }
}

#[test]
fn a_content_another_writer_ingests_during_the_run_is_a_duplicate() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    // 60 distinct files, one per transaction. While the run is at its third file, another
    // writer ingests a copy of the fourth, whose hash the run's reader has most likely
    // looked up already (it reads ahead): the run must find the copy all the same.
    let files = write(root, 60, |i| i);
    let copy = root.join("late-copy.csv");
    std::fs::write(&copy, export(3)).unwrap();
    let cfg = config(root, 1);
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    let mut other = Ingestor::open(cfg).unwrap();
    other.profile_override = Some("reactor".into());
    let mut outcomes = Vec::new();
    let summary = ing
        .ingest_paths(&files, |o| {
            outcomes.push(o.clone());
            if outcomes.len() == 3 {
                // Give the reader time to look the next groups up.
                std::thread::sleep(std::time::Duration::from_millis(200));
                let o = other.ingest_file(&copy).unwrap();
                assert!(matches!(o, FileOutcome::Ingested { .. }), "{o:?}");
            }
        })
        .unwrap();
    assert_eq!((summary.ingested, summary.duplicates), (59, 1));
    assert!(
        matches!(&outcomes[3], FileOutcome::Duplicate { path, .. } if path.ends_with("f00003.csv")),
        "{:?}",
        outcomes[3]
    );
    assert_eq!(ingested_files(&ing), 60);
    let report = turnbook::notebook::verify(ing.config(), &[]).unwrap();
    assert!(report.ok(), "{:?}", report.findings);
}

/// A file is opened once, without following links: a link is still followed and judged by
/// its target's folder (here a link from outside every folder to an export inside one), a
/// plain file by its own place, and a named pipe is refused at once instead of blocking
/// the reader until something writes to it.
#[cfg(unix)]
#[test]
fn links_are_judged_by_their_target_and_a_pipe_does_not_block() {
    let root = tempfile::tempdir().unwrap();
    let files = write(root.path(), 1, |i| i);
    let elsewhere = root.path().join("elsewhere");
    std::fs::create_dir_all(&elsewhere).unwrap();
    let link = elsewhere.join("link.csv");
    std::os::unix::fs::symlink(&files[0], &link).unwrap();
    let stray = elsewhere.join("stray.csv");
    std::fs::write(&stray, export(7)).unwrap();
    let pipe = root.path().join("exports").join("pipe.csv");
    let made = std::process::Command::new("mkfifo")
        .arg(&pipe)
        .status()
        .unwrap();
    assert!(made.success());

    let mut ing = Ingestor::open(config(root.path(), 10)).unwrap();
    let (tx, rx) = std::sync::mpsc::channel();
    let paths = vec![link.clone(), stray.clone(), pipe.clone(), files[0].clone()];
    std::thread::spawn(move || {
        let mut outcomes = Vec::new();
        ing.ingest_paths(&paths, |o| outcomes.push(o.clone()))
            .unwrap();
        tx.send(outcomes).unwrap();
    });
    let outcomes = rx
        .recv_timeout(std::time::Duration::from_secs(60))
        .expect("the run ends (a pipe must not block it)");
    assert_eq!(outcomes.len(), 4);
    // The link's target lies in the reactor folder: ingested with its profile.
    assert!(
        matches!(&outcomes[0], FileOutcome::Ingested { path, .. } if path.ends_with("link.csv")),
        "{:?}",
        outcomes[0]
    );
    // The same content outside every folder has no profile.
    assert!(
        matches!(&outcomes[1], FileOutcome::Rejected { error, .. } if error.contains("not under any configured folder")),
        "{:?}",
        outcomes[1]
    );
    assert!(
        matches!(&outcomes[2], FileOutcome::Rejected { error, .. } if error.contains("not a regular file")),
        "{:?}",
        outcomes[2]
    );
    // The target itself, read through its own path, is the content the link brought.
    assert!(
        matches!(&outcomes[3], FileOutcome::Duplicate { .. }),
        "{:?}",
        outcomes[3]
    );
}
