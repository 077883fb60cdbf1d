//! The README's first command names a relative folder (`demo --dir demo-plant`): the
//! backfill and the live service must record each file under one name, so the service's
//! start-up scan skips what the backfill stored and every live file is waited for.

use std::process::Command;

#[test]
fn a_relative_demo_folder_records_each_file_once_and_completes_every_cycle() {
    let tmp = tempfile::tempdir().unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .current_dir(tmp.path())
        .args(["demo", "--dir", "plant"])
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        !stdout
            .lines()
            .any(|l| l.trim_start().starts_with("turnbook") && l.contains(" duplicate ")),
        "{stdout}"
    );

    let status = Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .current_dir(tmp.path())
        .args(["--config", "plant/turnbook.toml", "status", "--json"])
        .output()
        .unwrap();
    let v: serde_json::Value = serde_json::from_slice(&status.stdout).unwrap();
    assert_eq!(v["duplicates"], 0, "{v}");
    assert_eq!(v["files_quarantined"], 0, "{v}");
    // 14 + 10 + 4 cycles of the three registered lots and the one pending batch.
    assert_eq!(v["cycles"], 29, "{v}");
    assert_eq!(v["pending_cycles"], 1, "{v}");

    // The poisoned lot's tenth cycle arrived live: it is complete, not pending.
    let cycles = Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .current_dir(tmp.path())
        .args([
            "--config",
            "plant/turnbook.toml",
            "cycles",
            "PT-AL-2610-B",
            "--format",
            "json",
        ])
        .output()
        .unwrap();
    let c: serde_json::Value = serde_json::from_slice(&cycles.stdout).unwrap();
    let rows = c["cycles"].as_array().unwrap();
    assert_eq!(rows.len(), 10);
    let last = &rows[9];
    assert!(last["product_mass_g"].is_number(), "{last}");
    assert!(
        !last["flags"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f == "pending"),
        "{last}"
    );
    // Every recorded path is absolute.
    let db = tmp.path().join("plant/turnbook.db");
    let conn = rusqlite::Connection::open(db).unwrap();
    let relative: i64 = conn
        .query_row(
            "SELECT COUNT(*) FROM source_files WHERE path NOT LIKE '/%'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(relative, 0);
}
