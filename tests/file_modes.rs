//! What turnbook writes is for its user and group only, whatever umask it starts under:
//! the database with its log and shared-memory files, quarantined copies, outbox mails and
//! the chain's witness 0640, the chain's key 0600, folders 0750.

use std::os::unix::fs::PermissionsExt;
use std::path::Path;
use std::process::Command;

mod common;

fn mode(p: &Path) -> u32 {
    std::fs::metadata(p)
        .unwrap_or_else(|e| panic!("{}: {e}", p.display()))
        .permissions()
        .mode()
        & 0o777
}

const CONFIG: &str = r#"
database = "data/t.db"
quarantine = "data/quarantine"

[profiles.reactor]
kind = "cycles"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.conversion = { header = "Conversion", unit = "%" }

[[folders]]
path = "exports"
profile = "reactor"

[alerts.recipients]
qa = ["qa@example.invalid"]

[mail]
transport = "file"
dir = "data/outbox"
from = "turnbook@example.invalid"
"#;

/// A root with the configuration and an exports folder holding one good and one bad
/// export, written world-readable and world-writable.
fn plant(root: &Path) {
    std::fs::write(root.join("turnbook.toml"), CONFIG).unwrap();
    let ex = root.join("exports");
    std::fs::create_dir_all(&ex).unwrap();
    std::fs::write(ex.join("good.csv"), "Batch,Lot,Conversion\nB1,L1,50\n").unwrap();
    std::fs::write(ex.join("bad.csv"), "Batch,Lot,Conversion\nB2,L1,lots\n").unwrap();
    for f in ["good.csv", "bad.csv"] {
        std::fs::set_permissions(ex.join(f), std::fs::Permissions::from_mode(0o666)).unwrap();
    }
}

#[test]
fn the_binary_under_umask_000_writes_0640_files_and_0750_folders() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    plant(root);
    let bin = common::turnbook_binary();
    let run = |args: &str| {
        let out = Command::new("sh")
            .arg("-c")
            .arg(format!(
                "umask 000; exec \"$0\" --config turnbook.toml {args}"
            ))
            .arg(&bin)
            .current_dir(root)
            .output()
            .unwrap();
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stderr).into_owned(),
        )
    };
    let (code, stderr) = run("ingest exports");
    assert_eq!(code, Some(1), "one file is rejected: {stderr}");
    let (code, stderr) = run("mail");
    assert_eq!(code, Some(0), "{stderr}");

    let data = root.join("data");
    assert_eq!(mode(&data), 0o750, "data folder");
    assert_eq!(mode(&data.join("t.db")), 0o640, "database");
    let quarantine = data.join("quarantine");
    assert_eq!(mode(&quarantine), 0o750, "quarantine folder");
    let copies: Vec<_> = std::fs::read_dir(&quarantine)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    assert_eq!(copies.len(), 1, "{copies:?}");
    assert_eq!(mode(&copies[0]), 0o640, "quarantined copy of a 0666 export");
    let outbox = data.join("outbox");
    assert_eq!(mode(&outbox), 0o750, "outbox folder");
    let mails: Vec<_> = std::fs::read_dir(&outbox)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "eml"))
        .collect();
    assert!(!mails.is_empty(), "the quarantine alert was written");
    for m in &mails {
        assert_eq!(mode(m), 0o640, "{}", m.display());
    }
    let cfg = turnbook::config::Config::load(&root.join("turnbook.toml")).unwrap();
    assert_eq!(mode(&cfg.chain_key_path()), 0o600, "chain key");
    assert_eq!(mode(&cfg.head_witness_path()), 0o640, "witness");
}

#[test]
fn the_library_sets_the_modes_itself_and_sqlite_follows_the_database() {
    // SAFETY: umask only affects files created later; this binary's other test runs the
    // turnbook binary, which sets its own umask.
    unsafe {
        libc::umask(0);
    }
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    plant(root);
    let cfg = turnbook::config::Config::load(&root.join("turnbook.toml")).unwrap();
    std::fs::create_dir_all(root.join("data")).unwrap();
    let mut ing = turnbook::notebook::Ingestor::open(cfg.clone()).unwrap();
    let ex = root.join("exports");
    let s = ing
        .ingest_paths(&[ex.join("bad.csv"), ex.join("good.csv")], |_| {})
        .unwrap();
    assert_eq!((s.ingested, s.rejected), (1, 1));
    // The connection is open: the log and shared-memory files exist now.
    let db = cfg.database_path();
    for suffix in ["", "-wal", "-shm"] {
        let p = Path::new(&format!("{}{suffix}", db.display())).to_path_buf();
        assert_eq!(mode(&p), 0o640, "{}", p.display());
    }
    assert_eq!(mode(&cfg.quarantine_dir()), 0o750);
    for e in std::fs::read_dir(cfg.quarantine_dir()).unwrap() {
        assert_eq!(mode(&e.unwrap().path()), 0o640);
    }
    assert_eq!(mode(&cfg.chain_key_path()), 0o600);
    assert_eq!(mode(&cfg.head_witness_path()), 0o640);
}
