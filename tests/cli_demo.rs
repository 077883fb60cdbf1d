//! The real binary on the demonstration plant: what `demo` writes, `lots --json`, a second
//! `demo` into the same folder, and a second backfill that finds only duplicates.

use std::path::Path;
use std::process::{Command, Output};

use mail_parser::MessageParser;

fn turnbook(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .args(args)
        .env_remove("TURNBOOK_SMTP_URL")
        .output()
        .unwrap()
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn files_with_ext(dir: &Path, ext: &str) -> Vec<std::path::PathBuf> {
    let mut v: Vec<_> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == ext))
        .collect();
    v.sort();
    v
}

fn count(db: &Path, sql: &str) -> i64 {
    let conn = rusqlite::Connection::open(db).unwrap();
    conn.query_row(sql, [], |r| r.get(0)).unwrap()
}

#[test]
fn demo_writes_plant_database_alerts_and_reports_and_refuses_a_used_folder() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("plant");
    let d = dir.to_str().unwrap();
    // The full demo, live part included: the simulated plant and the service.
    let out = turnbook(&["demo", "--dir", d]);
    assert_eq!(out.status.code(), Some(0), "stderr: {}", text(&out.stderr));
    assert!(!text(&out.stderr).contains("panicked"));
    assert!(dir.join("turnbook.toml").is_file());
    assert!(dir.join("turnbook.db").is_file());
    let exports = dir.join("exports");
    let mut listing = turnbook::notebook::Listing::default();
    turnbook::notebook::collect_files(&exports, &mut listing).unwrap();
    let n_exports = listing.files;
    assert!(n_exports.len() >= 10, "{} export files", n_exports.len());

    let mails = files_with_ext(&dir.join("outbox"), "eml");
    let subjects: Vec<String> = mails
        .iter()
        .map(|p| {
            let raw = std::fs::read(p).unwrap();
            let msg = MessageParser::default().parse(&raw).unwrap();
            msg.subject().unwrap_or_default().to_string()
        })
        .collect();
    assert!(
        subjects.iter().any(|s| s.contains("order replacement")),
        "no replacement-forecast alert among {subjects:?}"
    );
    assert!(
        subjects.iter().any(|s| s.contains("abrupt loss")),
        "no abrupt-loss alert among {subjects:?}"
    );
    let reports = files_with_ext(&dir.join("reports"), "html");
    assert!(!reports.is_empty());
    for r in &reports {
        let html = std::fs::read_to_string(r).unwrap();
        assert!(
            html.contains("<html") && html.contains("</html>"),
            "{}",
            r.display()
        );
    }

    let cfg = dir.join("turnbook.toml");
    let out = turnbook(&["--config", cfg.to_str().unwrap(), "lots", "--json"]);
    assert_eq!(out.status.code(), Some(0), "stderr: {}", text(&out.stderr));
    let lots: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let lots = lots.as_array().expect("an array of lots");
    assert!(lots.len() >= 2);
    for l in lots {
        assert!(l["lot"].is_string(), "{l}");
        assert!(l["cycles"].as_u64().is_some(), "{l}");
    }
    let total: u64 = lots.iter().map(|l| l["cycles"].as_u64().unwrap()).sum();
    let db_cycles = count(
        &dir.join("turnbook.db"),
        "SELECT COUNT(*) FROM cycles WHERE lot IS NOT NULL",
    );
    assert_eq!(total as i64, db_cycles);

    // A second demo into the same, now non-empty folder is a usage error.
    let out = turnbook(&["demo", "--dir", d, "--no-live"]);
    assert_eq!(out.status.code(), Some(2), "stderr: {}", text(&out.stderr));
    assert!(
        text(&out.stderr).contains("not empty"),
        "{}",
        text(&out.stderr)
    );
}

#[test]
fn second_backfill_adds_nothing_and_reports_every_file_as_a_duplicate() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("plant");
    let out = turnbook(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
    assert_eq!(out.status.code(), Some(0), "stderr: {}", text(&out.stderr));
    let cfg = dir.join("turnbook.toml");
    let db = dir.join("turnbook.db");
    let exports = dir.join("exports");
    let mut listing = turnbook::notebook::Listing::default();
    turnbook::notebook::collect_files(&exports, &mut listing).unwrap();
    let files = listing.files;
    let n = files.len() as i64;
    let cycles_before = count(&db, "SELECT COUNT(*) FROM cycles");
    let measurements_before = count(&db, "SELECT COUNT(*) FROM measurements");
    let dup_before = count(
        &db,
        "SELECT COUNT(*) FROM source_files WHERE outcome = 'duplicate'",
    );

    let out = turnbook(&[
        "--config",
        cfg.to_str().unwrap(),
        "ingest",
        exports.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "stderr: {}", text(&out.stderr));
    let stdout = text(&out.stdout);
    assert!(
        stdout.contains(&format!(
            "{n} files: 0 ingested, {n} duplicates, 0 rejected; rows: 0 new"
        )),
        "summary: {stdout}"
    );
    assert_eq!(count(&db, "SELECT COUNT(*) FROM cycles"), cycles_before);
    assert_eq!(
        count(&db, "SELECT COUNT(*) FROM measurements"),
        measurements_before
    );
    assert_eq!(
        count(
            &db,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'duplicate'"
        ) - dup_before,
        n
    );
    // Each duplicate names the file it repeats, through its event.
    assert_eq!(
        count(
            &db,
            "SELECT COUNT(*) FROM events WHERE kind = 'file-duplicate'"
        ) - dup_before,
        n
    );
    let out = turnbook(&["--config", cfg.to_str().unwrap(), "verify"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stdout));
}

/// Every row of the cycle view, in a stable order, as text.
fn cycle_dump(db: &Path) -> Vec<String> {
    let conn = rusqlite::Connection::open(db).unwrap();
    let mut stmt = conn
        .prepare("SELECT * FROM cycles ORDER BY batch_id")
        .unwrap();
    let n = stmt.column_count();
    stmt.query_map([], |r| {
        let cells: Vec<String> = (0..n)
            .map(|i| format!("{:?}", r.get_ref(i).unwrap()))
            .collect();
        Ok(cells.join("|"))
    })
    .unwrap()
    .map(|r| r.unwrap())
    .collect()
}

#[test]
fn small_transactions_give_the_same_records_in_path_order() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("plant");
    let out = turnbook(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
    assert_eq!(out.status.code(), Some(0), "stderr: {}", text(&out.stderr));
    // The same exports backfilled again, four files a transaction, into a second database.
    let toml = std::fs::read_to_string(dir.join("turnbook.toml")).unwrap();
    let small = toml
        .replacen("database = \"turnbook.db\"", "database = \"small.db\"", 1)
        .replacen(
            "files_per_transaction = 4000",
            "files_per_transaction = 4",
            1,
        );
    assert_ne!(small, toml);
    let cfg = dir.join("small.toml");
    std::fs::write(&cfg, small).unwrap();
    let exports = dir.join("exports");
    let mut listing = turnbook::notebook::Listing::default();
    turnbook::notebook::collect_files(&exports, &mut listing).unwrap();
    let files = listing.files;
    // Repeat one content under a new name so that a duplicate falls inside a later group.
    let copy = exports.join("hplc").join("zz-copy-of-first.csv");
    std::fs::copy(exports.join("hplc").join("KV4-H-001.csv"), &copy).unwrap();
    let out = turnbook(&[
        "--config",
        cfg.to_str().unwrap(),
        "ingest",
        "--json",
        exports.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "stderr: {}", text(&out.stderr));
    // One JSON object per file, in sorted path order.
    let lines: Vec<serde_json::Value> = text(&out.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let mut expected = files.clone();
    expected.push(copy.clone());
    expected.sort();
    let printed: Vec<String> = lines
        .iter()
        .map(|v| v["path"].as_str().unwrap().to_string())
        .collect();
    let expected: Vec<String> = expected.iter().map(|p| p.display().to_string()).collect();
    assert_eq!(printed, expected);
    let dups: Vec<&serde_json::Value> = lines
        .iter()
        .filter(|v| v["outcome"] == "duplicate")
        .collect();
    assert_eq!(dups.len(), 1);
    assert_eq!(dups[0]["path"], copy.display().to_string());
    // File ids follow the path order, and the cycle view is exactly the one-group result.
    let small_db = dir.join("small.db");
    let conn = rusqlite::Connection::open(&small_db).unwrap();
    let paths: Vec<String> = conn
        .prepare("SELECT path FROM source_files ORDER BY id")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .map(|r| r.unwrap())
        .collect();
    assert_eq!(paths, expected);
    let big = cycle_dump(&dir.join("turnbook.db"));
    assert!(!big.is_empty());
    assert_eq!(cycle_dump(&small_db), big);
    let out = turnbook(&["--config", cfg.to_str().unwrap(), "verify"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stdout));
}
