//! The real `turnbook watch` process, end to end: a temporary plant (configuration,
//! database, quarantine, export folders), the service spawned as a child process, files
//! written into its folders, and the database read back with rusqlite.
//!
//! Every wait is bounded; a test that times out fails with what it saw.

#![cfg(unix)]

mod common;

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

use rusqlite::{Connection, OpenFlags};
use sha2::{Digest, Sha256};

const SETTLE_MS: u64 = 300;

/// The binary under test, checked once.
fn binary() -> &'static Path {
    static BIN: OnceLock<PathBuf> = OnceLock::new();
    BIN.get_or_init(common::turnbook_binary)
}

/// A temporary plant: one configuration, one database, one or two watched folders.
struct Plant {
    dir: tempfile::TempDir,
    config: PathBuf,
}

impl Plant {
    /// `folders`: (subfolder, mode) pairs; mode is "events" or "poll".
    fn new(folders: &[(&str, &str)]) -> Plant {
        let dir = tempfile::tempdir().unwrap();
        let mut toml = String::from(
            r#"database = "plant.db"
quarantine = "quarantine"
actor = "service-test"

[profiles.simple]
kind = "cycles"
delimiter = ","
decimal = "."
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.conversion = { header = "Conversion", unit = "%" }
columns.duration = { header = "Time", unit = "min" }

[mail]
transport = "file"
dir = "outbox"
from = "turnbook@plant.test"
"#,
        );
        for (name, mode) in folders {
            fs::create_dir_all(dir.path().join(name)).unwrap();
            toml.push_str(&format!(
                "\n[[folders]]\npath = \"{name}\"\nprofile = \"simple\"\nmode = \"{mode}\"\n\
                 settle = {SETTLE_MS}\npoll_interval = 1\n"
            ));
        }
        let config = dir.path().join("turnbook.toml");
        fs::write(&config, toml).unwrap();
        Plant { dir, config }
    }

    fn folder(&self, name: &str) -> PathBuf {
        // The service records canonical paths.
        fs::canonicalize(self.dir.path().join(name)).unwrap()
    }

    fn log_path(&self) -> PathBuf {
        self.dir.path().join("service.log")
    }

    fn log(&self) -> String {
        fs::read_to_string(self.log_path()).unwrap_or_default()
    }

    /// Starts `turnbook watch` and waits until it watches its folders.
    fn start(&self) -> Service {
        let log = fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(self.log_path())
            .unwrap();
        let before = self.log().matches("\"message\":\"watching\"").count();
        let child = Command::new(binary())
            .arg("--log-json")
            .arg("--config")
            .arg(&self.config)
            .arg("watch")
            .stdin(Stdio::null())
            .stdout(log.try_clone().unwrap())
            .stderr(log)
            .spawn()
            .unwrap();
        let mut service = Service { child: Some(child) };
        let folders = fs::read_to_string(&self.config)
            .unwrap()
            .matches("[[folders]]")
            .count();
        let ready = wait_until(Duration::from_secs(20), || {
            self.log().matches("\"message\":\"watching\"").count() >= before + folders
        });
        if !ready {
            service.kill();
            panic!("the service did not start watching:\n{}", self.log());
        }
        service
    }

    fn db(&self) -> Connection {
        let conn = Connection::open_with_flags(
            self.dir.path().join("plant.db"),
            OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX,
        )
        .unwrap();
        conn.busy_timeout(Duration::from_secs(5)).unwrap();
        conn
    }

    /// For waits: `None` while the database or its tables do not exist yet.
    fn try_count(&self, sql: &str) -> Option<i64> {
        if !self.dir.path().join("plant.db").exists() {
            return None;
        }
        self.db().query_row(sql, [], |r| r.get(0)).ok()
    }

    /// For assertions: a bad query fails the test instead of reading as zero.
    fn count(&self, sql: &str) -> i64 {
        self.db()
            .query_row(sql, [], |r| r.get(0))
            .unwrap_or_else(|e| panic!("{sql}: {e}"))
    }

    fn rows_for(&self, path: &Path) -> Vec<FileRow> {
        let conn = self.db();
        let mut stmt = conn
            .prepare(
                "SELECT outcome, sha256, size, error, quarantined FROM source_files \
                 WHERE path = ?1 ORDER BY id",
            )
            .unwrap();
        stmt.query_map([path.display().to_string()], |r| {
            Ok(FileRow {
                outcome: r.get(0)?,
                sha256: r.get(1)?,
                size: r.get(2)?,
                error: r.get(3)?,
                quarantined: r.get(4)?,
            })
        })
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
    }

    /// Waits until `path` has at least one source_files row; the time it took.
    fn wait_recorded(&self, path: &Path, limit: Duration) -> Duration {
        let t0 = Instant::now();
        let sql = format!(
            "SELECT COUNT(*) FROM source_files WHERE path = '{}'",
            path.display().to_string().replace('\'', "''")
        );
        assert!(
            wait_until(limit, || self.try_count(&sql).is_some_and(|n| n > 0)),
            "{} was not recorded within {limit:?}; log:\n{}",
            path.display(),
            self.log()
        );
        t0.elapsed()
    }
}

#[derive(Debug)]
struct FileRow {
    outcome: String,
    sha256: String,
    size: i64,
    error: Option<String>,
    quarantined: Option<String>,
}

/// The running child; killed if a test panics before stopping it.
struct Service {
    child: Option<Child>,
}

impl Service {
    fn pid(&self) -> String {
        self.child.as_ref().unwrap().id().to_string()
    }

    fn running(&mut self) -> bool {
        self.child
            .as_mut()
            .is_some_and(|c| c.try_wait().unwrap().is_none())
    }

    /// SIGTERM, then the exit status and how long the process took to exit (at most 10 s).
    fn terminate(mut self) -> (ExitStatus, Duration) {
        let t0 = Instant::now();
        let ok = Command::new("kill")
            .args(["-TERM", &self.pid()])
            .status()
            .unwrap();
        assert!(ok.success());
        let mut child = self.child.take().unwrap();
        loop {
            if let Some(status) = child.try_wait().unwrap() {
                return (status, t0.elapsed());
            }
            if t0.elapsed() > Duration::from_secs(10) {
                let _ = child.kill();
                let _ = child.wait();
                panic!("the service ignored SIGTERM for 10 s");
            }
            std::thread::sleep(Duration::from_millis(10));
        }
    }

    /// Stops it cleanly, asserting the promise of test 6 on the way.
    fn stop(self) {
        let (status, took) = self.terminate();
        assert_eq!(status.code(), Some(0), "exit status after SIGTERM");
        assert!(took < Duration::from_secs(5), "took {took:?} to stop");
    }

    fn kill(&mut self) {
        if let Some(mut child) = self.child.take() {
            let _ = child.kill();
            let _ = child.wait();
        }
    }
}

impl Drop for Service {
    fn drop(&mut self) {
        self.kill();
    }
}

fn wait_until(limit: Duration, mut done: impl FnMut() -> bool) -> bool {
    let t0 = Instant::now();
    loop {
        if done() {
            return true;
        }
        if t0.elapsed() > limit {
            return false;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
}

fn export(rows: &[(&str, &str, &str, &str)]) -> Vec<u8> {
    let mut s = String::from("Batch,Lot,Conversion,Time\n");
    for (b, l, c, t) in rows {
        s.push_str(&format!("{b},{l},{c},{t}\n"));
    }
    s.into_bytes()
}

fn sha_hex(bytes: &[u8]) -> String {
    hex::encode(Sha256::digest(bytes))
}

/// Writes a file and closes it (one create-write-close).
fn drop_file(path: &Path, bytes: &[u8]) {
    let mut f = fs::File::create(path).unwrap();
    f.write_all(bytes).unwrap();
    f.sync_all().unwrap();
}

#[test]
fn a_file_written_over_three_seconds_is_ingested_once_complete() {
    let plant = Plant::new(&[("hplc", "events")]);
    let service = plant.start();
    let path = plant.folder("hplc").join("slow-export.csv");
    let conv: Vec<String> = (0..240).map(|i| format!("{}.25", 40 + i % 55)).collect();
    let batches: Vec<String> = (0..240).map(|i| format!("SLOW-{i:04}")).collect();
    let rows: Vec<(&str, &str, &str, &str)> = batches
        .iter()
        .zip(&conv)
        .map(|(b, c)| (b.as_str(), "LOT-S1", c.as_str(), "45"))
        .collect();
    let bytes = export(&rows);
    // 40 pieces over 3 s through one handle: 77 ms pauses, well inside the settle time.
    let t0 = Instant::now();
    turnbook::watch::write_slowly(&path, &bytes, 40, Duration::from_secs(3)).unwrap();
    let wrote_for = t0.elapsed();
    assert!(wrote_for >= Duration::from_millis(2900), "{wrote_for:?}");
    plant.wait_recorded(&path, Duration::from_secs(10));
    // Leave time for a second (wrong) record to show up.
    std::thread::sleep(Duration::from_millis(3 * SETTLE_MS));
    let rows = plant.rows_for(&path);
    assert_eq!(rows.len(), 1, "one record for the file: {rows:?}");
    assert_eq!(rows[0].outcome, "ingested", "{rows:?}");
    assert_eq!(rows[0].sha256, sha_hex(&bytes));
    assert_eq!(rows[0].size, bytes.len() as i64);
    assert_eq!(
        plant.count("SELECT COUNT(*) FROM source_files WHERE outcome = 'rejected'"),
        0
    );
    assert_eq!(plant.count("SELECT COUNT(*) FROM cycles"), 240);
    service.stop();
}

#[test]
fn a_file_that_landed_while_down_is_ingested_at_start_and_a_restart_records_nothing_new() {
    let plant = Plant::new(&[("hplc", "events"), ("icp", "events")]);
    // First run creates the database, then stops.
    plant.start().stop();
    assert_eq!(plant.count("SELECT COUNT(*) FROM source_files"), 0);

    // Files land in both folders while the service is down.
    let a = plant.folder("hplc").join("while-down-a.csv");
    let b = plant.folder("icp").join("while-down-b.csv");
    drop_file(&a, &export(&[("DOWN-1", "LOT-D", "71.5", "30")]));
    drop_file(&b, &export(&[("DOWN-2", "LOT-D", "64.0", "30")]));
    let service = plant.start();
    plant.wait_recorded(&a, Duration::from_secs(10));
    plant.wait_recorded(&b, Duration::from_secs(10));
    for p in [&a, &b] {
        let rows = plant.rows_for(p);
        assert_eq!(rows.len(), 1, "{rows:?}");
        assert_eq!(rows[0].outcome, "ingested", "{rows:?}");
    }
    service.stop();
    let files_before = plant.count("SELECT COUNT(*) FROM source_files");
    let events_before = plant.count("SELECT COUNT(*) FROM events");
    assert_eq!(files_before, 2);

    // A clean restart with no new files: the start-up scan offers both again; they are
    // skipped (same path, size, mtime). A file written after the start settles after them
    // (same settle time, one worker in settle order), so once it is recorded the old ones
    // have been through the pipeline.
    let service = plant.start();
    let sentinel = plant.folder("hplc").join("after-restart.csv");
    drop_file(&sentinel, &export(&[("AFTER-1", "LOT-D", "60.0", "30")]));
    plant.wait_recorded(&sentinel, Duration::from_secs(10));
    std::thread::sleep(Duration::from_millis(2 * SETTLE_MS));
    assert_eq!(
        plant.count("SELECT COUNT(*) FROM source_files"),
        files_before + 1,
        "only the new file is recorded after a restart"
    );
    assert_eq!(
        plant.count("SELECT COUNT(*) FROM source_files WHERE outcome <> 'ingested'"),
        0
    );
    assert!(plant.count("SELECT COUNT(*) FROM events") > events_before);
    service.stop();
}

#[test]
fn poll_mode_finds_files_by_scanning_within_interval_plus_settle() {
    let plant = Plant::new(&[("share", "poll")]);
    let service = plant.start();
    let mut latencies = Vec::new();
    for i in 0..3 {
        let path = plant.folder("share").join(format!("polled-{i}.csv"));
        drop_file(
            &path,
            &export(&[(&format!("POLL-{i}"), "LOT-P", "55.0", "20")]),
        );
        latencies.push(plant.wait_recorded(&path, Duration::from_secs(10)));
        let rows = plant.rows_for(&path);
        assert_eq!(rows.len(), 1);
        assert_eq!(rows[0].outcome, "ingested");
    }
    for took in &latencies {
        // No file event is used: a close event would let the file through after a 100 ms
        // re-check; a scan must see it unchanged for the whole settle time.
        assert!(
            *took >= Duration::from_millis(SETTLE_MS),
            "picked up in {took:?}, faster than the settle time: not by polling; {latencies:?}"
        );
        // Found by the next scan (1 s), then settled; 1.5 s of slack for a loaded machine.
        assert!(
            *took <= Duration::from_millis(1000 + SETTLE_MS + 1500),
            "picked up in {took:?}; {latencies:?}"
        );
    }
    service.stop();
}

#[test]
fn a_broken_file_is_quarantined_and_the_next_file_is_still_ingested() {
    let plant = Plant::new(&[("hplc", "events")]);
    let mut service = plant.start();
    let bad = plant.folder("hplc").join("broken.csv");
    let bad_bytes = export(&[
        ("BAD-1", "LOT-Q", "61.0", "30"),
        ("BAD-2", "LOT-Q", "sixty", "30"),
    ]);
    drop_file(&bad, &bad_bytes);
    plant.wait_recorded(&bad, Duration::from_secs(10));
    let good = plant.folder("hplc").join("good.csv");
    drop_file(&good, &export(&[("GOOD-1", "LOT-Q", "58.5", "30")]));
    plant.wait_recorded(&good, Duration::from_secs(10));

    let rows = plant.rows_for(&bad);
    assert_eq!(rows.len(), 1, "{rows:?}");
    let row = &rows[0];
    assert_eq!(row.outcome, "rejected");
    assert_eq!(row.sha256, sha_hex(&bad_bytes));
    let error = row.error.as_deref().unwrap_or("");
    assert!(
        error.contains("line 3") && error.contains("conversion") && error.contains("sixty"),
        "the error names line, field and value: {error}"
    );
    // Copied into quarantine, byte for byte; the source stays where it was.
    let copy = PathBuf::from(row.quarantined.as_deref().expect("a quarantine copy"));
    let copy = if copy.is_relative() {
        plant.dir.path().join(copy)
    } else {
        copy
    };
    assert_eq!(
        fs::canonicalize(copy.parent().unwrap()).unwrap(),
        fs::canonicalize(plant.dir.path().join("quarantine")).unwrap()
    );
    assert_eq!(fs::read(&copy).unwrap(), bad_bytes);
    assert_eq!(fs::read(&bad).unwrap(), bad_bytes);
    // Nothing of the bad file was stored, the good one was.
    assert_eq!(
        plant.count("SELECT COUNT(*) FROM cycles WHERE batch_id LIKE 'BAD-%'"),
        0
    );
    let good_rows = plant.rows_for(&good);
    assert_eq!(good_rows.len(), 1);
    assert_eq!(good_rows[0].outcome, "ingested");
    assert_eq!(
        plant.count("SELECT COUNT(*) FROM cycles WHERE batch_id = 'GOOD-1'"),
        1
    );
    assert!(service.running(), "the service is still running");
    service.stop();
}

#[test]
fn sigterm_while_a_file_is_being_written_exits_zero_within_five_seconds() {
    let plant = Plant::new(&[("hplc", "events")]);
    let service = plant.start();
    let path = plant.folder("hplc").join("interrupted.csv");
    let bytes = export(&[("TERM-1", "LOT-T", "50.0", "30")]);
    let writer = {
        let path = path.clone();
        std::thread::spawn(move || {
            turnbook::watch::write_slowly(&path, &bytes, 20, Duration::from_secs(2))
        })
    };
    std::thread::sleep(Duration::from_millis(700));
    let (status, took) = service.terminate();
    assert_eq!(status.code(), Some(0), "{}", plant.log());
    assert!(took < Duration::from_secs(5), "stopped in {took:?}");
    writer.join().unwrap().unwrap();
    assert!(plant.log().contains("turnbook stopped"), "{}", plant.log());
    // It was still settling: not recorded now, and offered at the next start.
    assert_eq!(plant.count("SELECT COUNT(*) FROM source_files"), 0);
    let service = plant.start();
    plant.wait_recorded(&path, Duration::from_secs(10));
    assert_eq!(plant.rows_for(&path)[0].outcome, "ingested");
    service.stop();
}

#[test]
fn a_pipe_and_a_link_out_are_recorded_once_and_a_link_in_is_ingested() {
    use std::os::unix::fs::symlink;
    let plant = Plant::new(&[("hplc", "events")]);
    let outside = tempfile::tempdir().unwrap();
    let hplc = plant.folder("hplc");
    // Present before the start: the catch-up scan finds them.
    let pipe = hplc.join("pipe.csv");
    let status = Command::new("mkfifo").arg(&pipe).status().unwrap();
    assert!(status.success());
    let secret = outside.path().join("elsewhere.csv");
    fs::write(&secret, export(&[("OUT-1", "LOT-X", "50.0", "30")])).unwrap();
    let link_out = hplc.join("link-out.csv");
    symlink(&secret, &link_out).unwrap();
    // The folder is not recursive: the archived export is reached through its link only.
    fs::create_dir_all(hplc.join("archive")).unwrap();
    let kept = hplc.join("archive").join("kept.csv");
    fs::write(&kept, export(&[("IN-1", "LOT-I", "66.0", "30")])).unwrap();
    let link_in = hplc.join("link-in.csv");
    symlink(&kept, &link_in).unwrap();

    let service = plant.start();
    for p in [&pipe, &link_out, &link_in] {
        plant.wait_recorded(p, Duration::from_secs(10));
    }
    let row = |p: &Path| -> (String, String) {
        plant
            .db()
            .query_row(
                "SELECT outcome, COALESCE(error, '') FROM source_files WHERE path = ?1",
                [p.display().to_string()],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )
            .unwrap()
    };
    let (outcome, error) = row(&pipe);
    assert_eq!(outcome, "rejected");
    assert!(error.starts_with("a named pipe (FIFO)"), "{error}");
    let (outcome, error) = row(&link_out);
    assert_eq!(outcome, "rejected");
    assert!(error.contains("outside the folder"), "{error}");
    assert_eq!(row(&link_in).0, "ingested");
    assert_eq!(
        plant.count("SELECT COUNT(*) FROM cycles WHERE batch_id = 'OUT-1'"),
        0,
        "the export behind the link out was not read"
    );
    service.stop();
    let before = plant.count("SELECT COUNT(*) FROM source_files");
    assert_eq!(before, 3);

    // A restart scans them again: nothing is recorded twice.
    let service = plant.start();
    let sentinel = hplc.join("after-restart.csv");
    drop_file(&sentinel, &export(&[("AFTER-2", "LOT-I", "60.0", "30")]));
    plant.wait_recorded(&sentinel, Duration::from_secs(10));
    std::thread::sleep(Duration::from_millis(2 * SETTLE_MS));
    assert_eq!(
        plant.count("SELECT COUNT(*) FROM source_files"),
        before + 1,
        "log:\n{}",
        plant.log()
    );
    service.stop();
}
