//! Crash safety of the real `turnbook watch` process: 2,000 small exports land over time
//! while the service is killed with SIGKILL at seeded pseudo-random moments and started
//! again each time. After a final clean run every file is ingested exactly once, every
//! cycle is stored once, SQLite is intact and `turnbook verify` accepts the audit chain.

#![cfg(unix)]

mod common;

use std::collections::BTreeSet;
use std::fs;
use std::io::Write;
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use rusqlite::{Connection, OpenFlags};

const FILES: usize = 2000;
const LOTS: usize = 40;
const SEED: u64 = 0x7e57_c4a1_2026;

/// SplitMix64: a small seeded generator, so every run kills at the same offsets.
struct Mix(u64);

impl Mix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }

    fn between(&mut self, lo: u64, hi: u64) -> u64 {
        lo + self.next() % (hi - lo + 1)
    }
}

fn spawn(bin: &Path, config: &Path, log: &Path) -> Child {
    let log = fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(log)
        .unwrap();
    Command::new(bin)
        .arg("--log-json")
        .arg("--config")
        .arg(config)
        .arg("watch")
        .stdin(Stdio::null())
        .stdout(log.try_clone().unwrap())
        .stderr(log)
        .spawn()
        .unwrap()
}

fn ingested(db: &Path) -> i64 {
    if !db.exists() {
        return 0;
    }
    let Ok(conn) = Connection::open_with_flags(db, OpenFlags::SQLITE_OPEN_READ_ONLY) else {
        return 0;
    };
    let _ = conn.busy_timeout(Duration::from_secs(2));
    conn.query_row(
        "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'",
        [],
        |r| r.get(0),
    )
    .unwrap_or(0)
}

fn scalar(conn: &Connection, sql: &str) -> i64 {
    conn.query_row(sql, [], |r| r.get(0)).unwrap()
}

fn export(i: usize) -> String {
    format!(
        "Batch,Lot,Conversion,Time\nCR-{i:05},LOT-{:02},{}.{},{}\n",
        i % LOTS,
        30 + (i * 7) % 65,
        i % 10,
        20 + i % 40
    )
}

#[test]
fn killed_at_random_moments_every_file_is_ingested_exactly_once() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let inbox = root.join("inbox");
    fs::create_dir_all(&inbox).unwrap();
    let config = root.join("turnbook.toml");
    fs::write(
        &config,
        r#"database = "plant.db"
quarantine = "quarantine"

[profiles.simple]
kind = "cycles"
delimiter = ","
decimal = "."
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.conversion = { header = "Conversion", unit = "%" }
columns.duration = { header = "Time", unit = "min" }

[[folders]]
path = "inbox"
profile = "simple"
mode = "events"
settle = 250

[mail]
transport = "file"
dir = "outbox"
from = "turnbook@plant.test"
"#,
    )
    .unwrap();
    let bin = common::turnbook_binary();
    let db = root.join("plant.db");
    let log = root.join("service.log");

    // The instruments: bursts of 25 files every 150 ms (about 12 s in all), each file
    // created, written and closed in the watched folder.
    let written = Arc::new(AtomicBool::new(false));
    let writer = {
        let (inbox, written) = (inbox.clone(), written.clone());
        std::thread::spawn(move || {
            for i in 0..FILES {
                let mut f = fs::File::create(inbox.join(format!("cycle-{i:05}.csv"))).unwrap();
                f.write_all(export(i).as_bytes()).unwrap();
                drop(f);
                if i % 25 == 24 {
                    std::thread::sleep(Duration::from_millis(150));
                }
            }
            written.store(true, Ordering::SeqCst);
        })
    };

    // The service lives 150 ms to 1.5 s, then is killed with SIGKILL, until the files are
    // all written and at least 12 kills were done.
    let mut rng = Mix(SEED);
    let mut kills = 0;
    let mut kills_mid_backlog = 0;
    let t0 = Instant::now();
    while !(written.load(Ordering::SeqCst) && kills >= 12) {
        assert!(
            t0.elapsed() < Duration::from_secs(120),
            "kill phase ran too long"
        );
        let mut child = spawn(&bin, &config, &log);
        std::thread::sleep(Duration::from_millis(rng.between(150, 1500)));
        child.kill().unwrap(); // SIGKILL on Unix
        child.wait().unwrap();
        kills += 1;
        let n = ingested(&db);
        if n > 0 && (n as usize) < FILES {
            kills_mid_backlog += 1;
        }
    }
    writer.join().unwrap();
    let before_final = ingested(&db);
    eprintln!(
        "{kills} kills ({kills_mid_backlog} with files still to ingest), {before_final} ingested before the final run, {:.1} s",
        t0.elapsed().as_secs_f64()
    );
    assert!(
        kills_mid_backlog >= 5,
        "the kills must hit a running backlog"
    );

    // A final clean run takes the rest, then stops on SIGTERM.
    let mut child = spawn(&bin, &config, &log);
    let deadline = Instant::now() + Duration::from_secs(90);
    while ingested(&db) < FILES as i64 && Instant::now() < deadline {
        std::thread::sleep(Duration::from_millis(100));
    }
    // Room for anything that would be recorded twice.
    std::thread::sleep(Duration::from_millis(800));
    let term = Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(term.success());
    let status = child.wait().unwrap();
    assert_eq!(status.code(), Some(0), "the final run stops cleanly");

    let conn = Connection::open_with_flags(&db, OpenFlags::SQLITE_OPEN_READ_ONLY).unwrap();
    let integrity: String = conn
        .query_row("PRAGMA integrity_check", [], |r| r.get(0))
        .unwrap();
    assert_eq!(integrity, "ok");
    let n = FILES as i64;
    assert_eq!(
        scalar(
            &conn,
            "SELECT COUNT(DISTINCT sha256) FROM source_files WHERE outcome = 'ingested'"
        ),
        n
    );
    assert_eq!(
        scalar(
            &conn,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'"
        ),
        n
    );
    assert_eq!(
        scalar(
            &conn,
            "SELECT COUNT(*) FROM source_files WHERE outcome <> 'ingested'"
        ),
        0,
        "no file rejected or recorded again as a duplicate"
    );
    assert_eq!(scalar(&conn, "SELECT COUNT(*) FROM cycles"), n);
    let batches: BTreeSet<String> = conn
        .prepare("SELECT batch_id FROM cycles")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    let expected: BTreeSet<String> = (0..FILES).map(|i| format!("CR-{i:05}")).collect();
    assert_eq!(batches, expected);
    assert_eq!(
        scalar(
            &conn,
            "SELECT COUNT(*) FROM (SELECT batch_id, quantity FROM measurements \
             GROUP BY batch_id, quantity HAVING COUNT(*) > 1)"
        ),
        0,
        "no value stored twice"
    );
    assert_eq!(
        scalar(&conn, "SELECT COUNT(*) FROM cycles WHERE conflicts > 0"),
        0
    );
    drop(conn);

    let verify = Command::new(&bin)
        .arg("--config")
        .arg(&config)
        .arg("verify")
        .output()
        .unwrap();
    assert!(
        verify.status.success(),
        "verify: {}\n{}",
        String::from_utf8_lossy(&verify.stdout),
        String::from_utf8_lossy(&verify.stderr)
    );
}
