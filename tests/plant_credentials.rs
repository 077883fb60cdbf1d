//! The SMTP password as a systemd credential: with `LoadCredential=smtp-password:...` in
//! the unit, systemd puts it in `$CREDENTIALS_DIRECTORY/smtp-password`, and `turnbook mail`
//! logs in with it (before any password the configuration names) to a real server on
//! loopback (aiosmtpd via tests/smtp_sink.py, which accepts only the one login). Skipped
//! without aiosmtpd unless CI is set, where it fails.

#![cfg(unix)]

mod common;

use std::io::{BufRead, BufReader};
use std::os::unix::fs::PermissionsExt;
use std::path::Path;
use std::process::{Child, Command, Stdio};

const USER: &str = "turnbook-mailer";
const PASSWORD: &str = "credential-Pd-on-carbon-7";

struct Sink(Child);

impl Drop for Sink {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

#[test]
fn mail_logs_in_with_the_password_from_the_credentials_directory() {
    let Some(python) = common::python_with_aiosmtpd() else {
        let msg = "aiosmtpd not available (pip install aiosmtpd)";
        assert!(std::env::var_os("CI").is_none(), "{msg}");
        eprintln!("skipped: {msg}");
        return;
    };
    let tmp = tempfile::tempdir().unwrap();
    let received = tmp.path().join("received");
    std::fs::create_dir_all(&received).unwrap();
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    // The configuration names a variable holding a wrong password: the credential wins.
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
password_env = "TB_TEST_WRONG_PASSWORD"
timeout_seconds = 5
"#
        ),
    )
    .unwrap();
    let creds = tmp.path().join("credentials");
    std::fs::create_dir(&creds).unwrap();
    let secret = creds.join("smtp-password");
    std::fs::write(&secret, format!("{PASSWORD}\n")).unwrap();
    std::fs::set_permissions(&secret, std::fs::Permissions::from_mode(0o400)).unwrap();

    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/smtp_sink.py");
    let mut child = Command::new(&python)
        .arg(&script)
        .arg(port.to_string())
        .arg(&received)
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
    let _sink = Sink(child);

    let run = |args: &[&str]| {
        Command::new(env!("CARGO_BIN_EXE_turnbook"))
            .arg("--config")
            .arg(tmp.path().join("turnbook.toml"))
            .args(args)
            .env("CREDENTIALS_DIRECTORY", &creds)
            .env("TB_TEST_WRONG_PASSWORD", "not-the-password")
            .env_remove("TURNBOOK_SMTP_URL")
            .env_remove("RUST_LOG")
            .output()
            .unwrap()
    };
    let out = run(&["digest"]);
    assert!(out.status.success(), "{out:?}");
    let out = run(&["mail"]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{out:?}");
    assert!(stdout.contains("1 delivered"), "{stdout}");
    let logins: Vec<String> = std::fs::read_dir(&received)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .map(|p| {
            let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&p).unwrap()).unwrap();
            v["login"].as_str().unwrap_or("").to_string()
        })
        .collect();
    assert_eq!(logins, vec![USER.to_string()]);
}
