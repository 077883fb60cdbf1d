//! The database is plain SQLite that the system's own `sqlite3` (Debian 12 ships 3.40.1)
//! reads, checks, dumps and restores: backup scripts and QA staff use that shell, not
//! turnbook's bundled library. The restored copy must still verify.
//!
//! Needs the `sqlite3` command (apt package `sqlite3`, installed by `.ci/run`): skipped
//! with a message when it is missing, a failure when `CI` is set.

mod common;

use std::path::Path;
use std::process::{Command, Stdio};

/// The system's sqlite3 shell, or None (a skip outside CI).
fn sqlite3() -> Option<String> {
    let found = Command::new("sqlite3")
        .arg("--version")
        .output()
        .ok()
        .filter(|o| o.status.success())
        .map(|o| String::from_utf8_lossy(&o.stdout).into_owned());
    if found.is_none() {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but the sqlite3 command is missing (apt-get install sqlite3)"
        );
        eprintln!("skipped: no sqlite3 command (apt-get install sqlite3)");
    }
    found
}

/// Run `sqlite3 DB` with `input` on stdin; stdout, after asserting success.
fn shell(db: &Path, input: &str) -> String {
    let mut child = Command::new("sqlite3")
        .arg(db)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    {
        use std::io::Write;
        let mut stdin = child.stdin.take().unwrap();
        stdin.write_all(input.as_bytes()).unwrap();
    }
    let out = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        out.status.success() && stderr.trim().is_empty(),
        "sqlite3 {} failed on {input:?}: {stderr}",
        db.display()
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

fn version_at_least(version: &str, min: (u32, u32)) -> bool {
    let mut parts = version
        .split_whitespace()
        .next()
        .unwrap_or("")
        .split('.')
        .map(|p| p.parse::<u32>().unwrap_or(0));
    let (major, minor) = (parts.next().unwrap_or(0), parts.next().unwrap_or(0));
    (major, minor) >= min
}

#[test]
fn the_system_sqlite3_checks_dumps_and_restores_a_demo_database_that_still_verifies() {
    let Some(version) = sqlite3() else { return };
    // The README's minimum: STRICT tables need 3.37.
    assert!(version_at_least(&version, (3, 37)), "{version}");
    let tmp = tempfile::tempdir().unwrap();
    let plant = tmp.path().join("plant");
    let out = common::run(&["demo", "--dir", plant.to_str().unwrap(), "--no-live"]);
    assert!(out.status.success(), "{out:?}");
    let db = plant.join("turnbook.db");

    assert_eq!(shell(&db, "PRAGMA integrity_check;\n").trim(), "ok");
    assert_eq!(shell(&db, "PRAGMA foreign_key_check;\n").trim(), "");
    // Reading the figures views and the hash index's table needs no function the shell lacks.
    let cycles: i64 = shell(&db, "SELECT count(*) FROM cycle_results;\n")
        .trim()
        .parse()
        .unwrap();
    assert!(cycles > 20, "{cycles}");
    shell(&db, "SELECT count(*) FROM lot_results;\n");

    // `.dump` into a new file, restored into a new database beside a copy of the
    // configuration, chain key and head witness.
    let dump = shell(&db, ".dump\n");
    assert!(!dump.contains("unhex("), "the dump needs SQLite 3.41");
    let restored = tmp.path().join("restored");
    std::fs::create_dir(&restored).unwrap();
    for f in ["turnbook.toml", "turnbook.key", "turnbook.head"] {
        if plant.join(f).exists() {
            std::fs::copy(plant.join(f), restored.join(f)).unwrap();
        }
    }
    std::fs::write(tmp.path().join("dump.sql"), &dump).unwrap();
    let restored_db = restored.join("turnbook.db");
    shell(
        &restored_db,
        &format!(".read {}\n", tmp.path().join("dump.sql").display()),
    );
    assert_eq!(
        shell(&restored_db, "PRAGMA integrity_check;\n").trim(),
        "ok"
    );

    // An UPDATE of `source_files` through the shell works (it maintains the hash index),
    // and the index still refuses a second ingestion of one content.
    shell(&restored_db, "UPDATE source_files SET path = path;\n");
    let refused = Command::new("sqlite3")
        .arg(&restored_db)
        .arg(
            "INSERT INTO source_files(sha256, path, size, seen_at, outcome, event_seq) \
             SELECT upper(sha256), 'again', 1, seen_at, 'ingested', event_seq \
             FROM source_files WHERE outcome = 'ingested' LIMIT 1;",
        )
        .output()
        .unwrap();
    assert!(
        String::from_utf8_lossy(&refused.stderr).contains("UNIQUE constraint failed"),
        "{refused:?}"
    );

    // The restored copy verifies: every record matches the events that wrote it.
    let config = restored.join("turnbook.toml");
    let out = common::run(&["--config", config.to_str().unwrap(), "verify"]);
    assert!(
        out.status.success(),
        "verify of the restored copy: {}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
}
