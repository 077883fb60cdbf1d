//! The service under systemd's `Type=notify` protocol, with a listener of our own on the
//! notify socket: READY=1 comes once the start-up scan has handled every file waiting in
//! the export folder, WATCHDOG=1 pings follow at half the watchdog interval, a SIGHUP is
//! logged and ignored (no exit 129), and SIGTERM still stops it cleanly.

#![cfg(target_os = "linux")]

mod common;

use std::os::unix::net::UnixDatagram;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn signal(pid: u32, sig: &str) {
    let ok = Command::new("kill")
        .args([sig, &pid.to_string()])
        .status()
        .unwrap();
    assert!(ok.success());
}

/// Messages received on `sock` until `until` says stop or `limit` passes.
fn receive(
    sock: &UnixDatagram,
    limit: Duration,
    mut until: impl FnMut(&str) -> bool,
) -> Vec<String> {
    let end = Instant::now() + limit;
    let mut got = Vec::new();
    let mut buf = [0u8; 4096];
    while Instant::now() < end {
        if let Ok(n) = sock.recv(&mut buf) {
            let m = String::from_utf8_lossy(&buf[..n]).into_owned();
            let stop = until(&m);
            got.push(m);
            if stop {
                break;
            }
        }
    }
    got
}

fn ingested_files(db: &std::path::Path) -> i64 {
    let conn = rusqlite::Connection::open(db).unwrap();
    conn.query_row(
        "SELECT count(*) FROM source_files WHERE outcome = 'ingested'",
        [],
        |r| r.get(0),
    )
    .unwrap()
}

#[test]
fn ready_comes_after_the_start_up_scan_then_watchdog_pings_and_sighup_is_survived() {
    let tmp = tempfile::tempdir().unwrap();
    common::reactor_config(tmp.path(), 1);
    let exports = tmp.path().join("exports");
    std::fs::create_dir(&exports).unwrap();
    // Files that landed while the service was down: the start-up scan must take them in
    // before the service calls itself ready.
    for i in 0..5 {
        std::fs::write(
            exports.join(format!("run-{i}.csv")),
            format!("Batch,Lot,Conversion\nB-{i},L-1,{}\n", 90 - i),
        )
        .unwrap();
    }
    let sock_path = tmp.path().join("notify.sock");
    let sock = UnixDatagram::bind(&sock_path).unwrap();
    sock.set_read_timeout(Some(Duration::from_millis(200)))
        .unwrap();

    let mut child = Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .arg("--config")
        .arg(tmp.path().join("turnbook.toml"))
        .arg("watch")
        .env_remove("TURNBOOK_SMTP_URL")
        .env_remove("RUST_LOG")
        .env("NOTIFY_SOCKET", &sock_path)
        .env("WATCHDOG_USEC", "1000000")
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let pid = child.id();

    let mut ready_at_files = None;
    let db = tmp.path().join("t.db");
    let before_ready = receive(&sock, Duration::from_secs(30), |m| {
        if m.lines().any(|l| l == "READY=1") {
            ready_at_files = Some(ingested_files(&db));
            true
        } else {
            false
        }
    });
    assert_eq!(
        ready_at_files,
        Some(5),
        "READY=1 with every waiting file ingested; got {before_ready:?}"
    );

    // Watchdog pings at half the 1 s interval.
    let mut pings = 0;
    receive(&sock, Duration::from_secs(3), |m| {
        pings += usize::from(m == "WATCHDOG=1");
        false
    });
    assert!(pings >= 3, "{pings} pings in 3 s");

    // SIGHUP does not end the service: it keeps pinging.
    signal(pid, "-HUP");
    let mut after_hup = 0;
    receive(&sock, Duration::from_secs(2), |m| {
        after_hup += usize::from(m == "WATCHDOG=1");
        false
    });
    assert!(after_hup >= 2, "{after_hup} pings after SIGHUP");
    assert!(
        child.try_wait().unwrap().is_none(),
        "SIGHUP ended the service"
    );

    signal(pid, "-TERM");
    let out = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    assert!(stderr.contains("SIGHUP received and ignored"), "{stderr}");
}

#[test]
fn without_a_notify_socket_the_service_sends_nothing_and_runs() {
    // The same binary runs under any supervisor: no NOTIFY_SOCKET, no messages, no error.
    let tmp = tempfile::tempdir().unwrap();
    common::reactor_config(tmp.path(), 1);
    std::fs::create_dir(tmp.path().join("exports")).unwrap();
    let mut child = Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .arg("--config")
        .arg(tmp.path().join("turnbook.toml"))
        .arg("watch")
        .env_remove("NOTIFY_SOCKET")
        .env("WATCHDOG_USEC", "1000000")
        .env_remove("RUST_LOG")
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(1500));
    assert!(child.try_wait().unwrap().is_none());
    signal(child.id(), "-TERM");
    let out = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    assert!(!stderr.contains("cannot notify"), "{stderr}");
}
