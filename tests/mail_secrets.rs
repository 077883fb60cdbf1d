//! The SMTP password never reaches a log, whatever RUST_LOG asks for: `turnbook mail`
//! delivers with AUTH to a real server on loopback (aiosmtpd via tests/smtp_sink.py, which
//! requires AUTH and accepts only the one login) at `RUST_LOG=trace`, and its stderr holds
//! neither the password nor any base64 form of it. Skipped without aiosmtpd unless CI is
//! set, where it fails.

mod common;

use std::io::{BufRead, BufReader};
use std::net::TcpListener;
use std::path::Path;
use std::process::{Child, Command, Output, Stdio};

const USER: &str = "turnbook-mailer";
const PASSWORD: &str = "Tr0ub4dor&3-hydrogenation";

struct Sink(Child);

impl Drop for Sink {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

fn start_sink(python: &str, port: u16, out: &Path) -> Sink {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/smtp_sink.py");
    let mut child = Command::new(python)
        .arg(&script)
        .arg(port.to_string())
        .arg(out)
        .arg(format!("{USER}:{PASSWORD}"))
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .unwrap();
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    assert_eq!(line.trim(), "ready");
    Sink(child)
}

/// Standard base64 (RFC 4648) with padding, written out here so the test does not share
/// an encoder with the code under test.
fn base64(bytes: &[u8]) -> String {
    const A: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut s = String::new();
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            *chunk.get(1).unwrap_or(&0),
            *chunk.get(2).unwrap_or(&0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        for i in 0..4 {
            if i <= chunk.len() {
                s.push(char::from(A[((n >> (18 - 6 * i)) & 63) as usize]));
            } else {
                s.push('=');
            }
        }
    }
    s
}

fn run(dir: &Path, args: &[&str], rust_log: &str) -> Output {
    Command::new(common::turnbook_binary())
        .arg("--config")
        .arg(dir.join("turnbook.toml"))
        .args(args)
        .env("RUST_LOG", rust_log)
        .env("TB_TEST_SMTP_PASSWORD", PASSWORD)
        .env_remove("TURNBOOK_SMTP_URL")
        .env_remove("TURNBOOK_LOG_JSON")
        .output()
        .unwrap()
}

#[test]
fn smtp_auth_at_trace_level_leaves_no_credential_in_the_log() {
    let Some(python) = common::python_with_aiosmtpd() else {
        let msg = "aiosmtpd not available (pip install aiosmtpd)";
        assert!(std::env::var_os("CI").is_none(), "{msg}");
        eprintln!("skipped: {msg}");
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
    std::fs::write(
        tmp.path().join("turnbook.toml"),
        format!(
            r#"
database = "t.db"
quarantine = "quarantine"

[alerts.recipients]
managers = ["plant-manager@example.org"]

[mail]
transport = "smtp"
host = "127.0.0.1"
port = {port}
security = "plain"
from = "turnbook@example.org"
username = "{USER}"
password_env = "TB_TEST_SMTP_PASSWORD"
timeout_seconds = 5
"#
        ),
    )
    .unwrap();
    let _sink = start_sink(&python, port, &received);

    for _ in 0..2 {
        let out = run(tmp.path(), &["digest"], "warn");
        assert!(out.status.success(), "{out:?}");
    }
    let mut stderr = String::new();
    for filter in ["trace", "lettre=trace,turnbook=trace", "trace,lettre=trace"] {
        let out = run(tmp.path(), &["mail"], filter);
        let stdout = String::from_utf8_lossy(&out.stdout);
        assert!(out.status.success(), "{out:?}");
        stderr.push_str(&String::from_utf8_lossy(&out.stderr));
        if filter == "trace" {
            assert!(stdout.contains("2 delivered"), "{stdout}");
        }
    }
    // Every message arrived, sent under the login the server required.
    let mut logins = Vec::new();
    for e in std::fs::read_dir(&received).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_some_and(|x| x == "json") {
            let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&p).unwrap()).unwrap();
            logins.push(v["login"].as_str().unwrap_or("").to_string());
        }
    }
    assert_eq!(logins, vec![USER.to_string(), USER.to_string()]);
    // Logging was on: the run wrote trace-level lines of its own dependencies.
    assert!(
        stderr
            .lines()
            .filter(|l| l.contains("TRACE") || l.contains("DEBUG"))
            .count()
            >= 5,
        "expected a verbose log at RUST_LOG=trace:\n{stderr}"
    );
    let forbidden = [
        PASSWORD.to_string(),
        base64(PASSWORD.as_bytes()),
        base64(format!("\0{USER}\0{PASSWORD}").as_bytes()),
        base64(format!("{USER}\0{PASSWORD}").as_bytes()),
        "AUTH PLAIN".to_string(),
    ];
    for f in &forbidden {
        assert!(
            !stderr.contains(f.as_str()),
            "{f:?} found in the log:\n{stderr}"
        );
    }
}

#[test]
fn the_test_encoder_is_standard_base64() {
    // RFC 4648 section 10 test vectors.
    for (plain, enc) in [
        ("", ""),
        ("f", "Zg=="),
        ("fo", "Zm8="),
        ("foo", "Zm9v"),
        ("foob", "Zm9vYg=="),
        ("fooba", "Zm9vYmE="),
        ("foobar", "Zm9vYmFy"),
    ] {
        assert_eq!(base64(plain.as_bytes()), enc);
    }
}
