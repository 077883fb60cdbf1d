//! Every entry of a folder is accounted for: a named pipe, a symbolic link leading out of
//! the folder and a link to an export inside it are each reported by `ingest`, the inside
//! link's export is ingested, and the others become rejected records with a reason naming
//! what they are; the service's sink records what the watcher refuses, once.
//!
//! Invented data: one-line exports of an imaginary reactor.

use std::os::unix::fs::symlink;
use std::path::Path;
use std::process::Command;

use turnbook::notebook::{FileOutcome, Ingestor, RefusedEntry};

mod common;

fn mkfifo(path: &Path) {
    let status = Command::new("mkfifo").arg(path).status().unwrap();
    assert!(status.success(), "mkfifo {}", path.display());
}

/// The exports folder of the reactor, with a pipe, a link out, a link in and a plain file.
fn folder_with_odd_entries(root: &Path, outside: &Path) -> std::path::PathBuf {
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(
        outside.join("elsewhere.csv"),
        "Batch,Lot,Conversion\nRD-90001,LOT-X,50.5\n",
    )
    .unwrap();
    std::fs::write(
        dir.join("z-data.csv"),
        "Batch,Lot,Conversion\nRD-00001,LOT-A,41.5\n",
    )
    .unwrap();
    // Sorted first, the link is read before its target: the export is ingested through it.
    symlink(dir.join("z-data.csv"), dir.join("a-link-in.csv")).unwrap();
    symlink(outside.join("elsewhere.csv"), dir.join("b-link-out.csv")).unwrap();
    mkfifo(&dir.join("c-pipe.csv"));
    dir
}

fn rows(conn: &turnbook::store::Connection, sql: &str) -> Vec<(String, String, Option<String>)> {
    let mut st = conn.prepare(sql).unwrap();
    st.query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .unwrap()
        .map(Result::unwrap)
        .collect()
}

#[test]
fn a_backfill_reports_the_pipe_and_both_links() {
    let tmp = tempfile::tempdir().unwrap();
    let outside = tempfile::tempdir().unwrap();
    let cfg = common::reactor_config(tmp.path(), 10);
    let dir = folder_with_odd_entries(tmp.path(), outside.path());
    let listing = turnbook::notebook::files_under(&cfg, std::slice::from_ref(&dir), None).unwrap();
    assert_eq!(listing.len(), 4, "every entry accounted for: {listing:?}");
    let mut seen = Vec::new();
    let summary =
        turnbook::notebook::ingest_files(cfg.clone(), &listing, None, |o| seen.push(o.clone()))
            .unwrap();
    assert_eq!(seen.len(), 4, "{seen:?}");
    assert_eq!(
        (summary.ingested, summary.duplicates, summary.rejected),
        (1, 1, 2)
    );
    assert_eq!(summary.entries_refused, 2);
    let outcome_of = |name: &str| {
        seen.iter()
            .find(|o| match o {
                FileOutcome::Ingested { path, .. }
                | FileOutcome::Duplicate { path, .. }
                | FileOutcome::Rejected { path, .. } => path.ends_with(name),
            })
            .unwrap_or_else(|| panic!("no outcome for {name}: {seen:?}"))
            .clone()
    };
    assert!(matches!(
        outcome_of("a-link-in.csv"),
        FileOutcome::Ingested { .. }
    ));
    assert!(matches!(
        outcome_of("z-data.csv"),
        FileOutcome::Duplicate { .. }
    ));
    let FileOutcome::Rejected { error, .. } = outcome_of("b-link-out.csv") else {
        panic!("the link out is rejected");
    };
    assert!(error.contains("symbolic link to"), "{error}");
    assert!(error.contains("outside the folder"), "{error}");
    let FileOutcome::Rejected { error, .. } = outcome_of("c-pipe.csv") else {
        panic!("the pipe is rejected");
    };
    assert!(error.starts_with("a named pipe (FIFO)"), "{error}");

    // Recorded: each rejected with its reason, nothing copied into quarantine (the file
    // outside must not be copied in), and the export outside was never read.
    let ing = Ingestor::open(cfg.clone()).unwrap();
    let stored = rows(
        ing.conn(),
        "SELECT path, outcome, error FROM source_files ORDER BY path",
    );
    let outcomes: Vec<(&str, &str)> = stored
        .iter()
        .map(|(p, o, _)| (p.rsplit('/').next().unwrap(), o.as_str()))
        .collect();
    assert_eq!(
        outcomes,
        vec![
            ("a-link-in.csv", "ingested"),
            ("b-link-out.csv", "rejected"),
            ("c-pipe.csv", "rejected"),
            ("z-data.csv", "duplicate"),
        ]
    );
    let quarantined = std::fs::read_dir(cfg.quarantine_dir())
        .map(|d| d.count())
        .unwrap_or(0);
    assert_eq!(quarantined, 0, "nothing unread is copied into quarantine");
    let batches: i64 = ing
        .conn()
        .query_row(
            "SELECT COUNT(*) FROM cycles WHERE batch_id = 'RD-90001'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(batches, 0, "the export behind the link out was not read");
}

#[test]
fn the_ingest_command_counts_the_entries_it_did_not_read() {
    let tmp = tempfile::tempdir().unwrap();
    let outside = tempfile::tempdir().unwrap();
    common::reactor_config(tmp.path(), 10);
    let dir = folder_with_odd_entries(tmp.path(), outside.path());
    let out = Command::new(common::turnbook_binary())
        .arg("--config")
        .arg(tmp.path().join("turnbook.toml"))
        .arg("ingest")
        .arg(&dir)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{stdout}\n{stderr}");
    assert!(
        stdout.contains("4 entries: 1 ingested, 1 duplicates, 2 rejected (2 of them not read"),
        "{stdout}"
    );
    let line = |name: &str| {
        stderr
            .lines()
            .find(|l| l.starts_with("rejected ") && l.contains(name))
            .unwrap_or_else(|| panic!("no line for {name}: {stderr}"))
            .to_string()
    };
    assert!(line("c-pipe.csv").contains("named pipe"), "{stderr}");
    assert!(
        line("b-link-out.csv").contains("outside the folder"),
        "{stderr}"
    );
}

#[test]
fn the_service_records_a_refused_entry_once_per_version() {
    let tmp = tempfile::tempdir().unwrap();
    let cfg = common::reactor_config(tmp.path(), 1);
    let dir = tmp.path().join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    let pipe = dir.join("pipe.csv");
    mkfifo(&pipe);
    let mut ing = Ingestor::open(cfg).unwrap();
    ing.tune_for_service().unwrap();
    assert!(!ing.refused_unchanged(&pipe).unwrap());
    let entry = RefusedEntry {
        path: pipe.clone(),
        reason: "a named pipe (FIFO), not a regular file; expected an export file".into(),
    };
    let out = ing.refuse_entries(std::slice::from_ref(&entry)).unwrap();
    let [FileOutcome::Rejected { error, sha256, .. }] = out.as_slice() else {
        panic!("{out:?}");
    };
    assert!(error.contains("named pipe"));
    assert_eq!(sha256, &None, "nothing was read");
    assert!(
        ing.refused_unchanged(&pipe).unwrap(),
        "a restart's scan finds it recorded"
    );
    let (profile, outcome): (Option<String>, String) = ing
        .conn()
        .query_row(
            "SELECT profile, outcome FROM source_files WHERE path = ?1",
            [pipe.display().to_string()],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!(
        (profile.as_deref(), outcome.as_str()),
        (Some("reactor"), "rejected")
    );
}
