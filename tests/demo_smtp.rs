//! `turnbook demo` with TURNBOOK_SMTP_URL set sends its alerts over SMTP to a real server
//! on loopback (aiosmtpd via tests/smtp_sink.py) instead of writing .eml files. Skipped
//! without aiosmtpd unless CI is set, where it fails.

mod common;

use std::io::{BufRead, BufReader};
use std::net::TcpListener;
use std::path::Path;
use std::process::{Child, Command, Stdio};

use mail_parser::MessageParser;

struct Sink(Child);

impl Drop for Sink {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

#[test]
fn demo_sends_its_alerts_over_smtp_when_asked() {
    let Some(python) = common::python_with_aiosmtpd() else {
        if std::env::var_os("CI").is_some() {
            panic!("aiosmtpd is not installed; CI must install it (pip install aiosmtpd)");
        }
        eprintln!("skipped: aiosmtpd is not installed");
        return;
    };
    let tmp = tempfile::tempdir().unwrap();
    let received = tmp.path().join("received");
    std::fs::create_dir_all(&received).unwrap();
    let port = TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/smtp_sink.py");
    let mut child = Command::new(&python)
        .arg(&script)
        .arg(port.to_string())
        .arg(&received)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .unwrap();
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    assert_eq!(line.trim(), "ready");
    let _sink = Sink(child);

    let dir = tmp.path().join("plant");
    let out = Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .args(["demo", "--no-live", "--dir"])
        .arg(&dir)
        .env("TURNBOOK_SMTP_URL", format!("smtp://127.0.0.1:{port}"))
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("sent over SMTP"), "{stdout}");

    let mut subjects = Vec::new();
    for e in std::fs::read_dir(&received).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_some_and(|x| x == "eml") {
            let bytes = std::fs::read(&p).unwrap();
            let msg = MessageParser::default().parse(&bytes).unwrap();
            subjects.push(msg.subject().unwrap_or("").to_string());
            // Cautions fit the message: the abrupt loss (spent catalyst to be held and
            // handled) and the digest carry the handling caution.
            let body = msg.body_text(0).unwrap();
            let subject = msg.subject().unwrap_or("");
            if subject.contains("abrupt loss") || subject.contains("digest") {
                assert!(body.contains("pyrophoric"), "{subject}");
            }
        }
    }
    subjects.sort();
    assert!(
        subjects
            .iter()
            .any(|s| s.contains("PD-C-2611-A") && s.contains("order replacement")),
        "{subjects:?}"
    );
    assert!(
        subjects
            .iter()
            .any(|s| s.contains("PT-AL-2610-B") && s.contains("abrupt")),
        "{subjects:?}"
    );
    assert!(
        subjects.iter().any(|s| s.contains("digest")),
        "{subjects:?}"
    );
    // Sent over SMTP, so nothing was written as files.
    let files = std::fs::read_dir(dir.join("outbox"))
        .map(|d| d.count())
        .unwrap_or(0);
    assert_eq!(files, 0);
}
