//! Helpers shared by the integration tests (each test file uses only some of them).
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

/// The `turnbook` binary cargo built for these tests, checked to answer `--version` (keep
/// one target directory per source tree: a shared one can hold another tree's build).
pub fn turnbook_binary() -> PathBuf {
    let bin = PathBuf::from(env!("CARGO_BIN_EXE_turnbook"));
    let out = Command::new(&bin).arg("--version").output().unwrap();
    assert!(
        String::from_utf8_lossy(&out.stdout).starts_with("turnbook "),
        "{} does not answer --version: {out:?}",
        bin.display()
    );
    bin
}

/// A Python interpreter that has aiosmtpd (the real SMTP server of the mail tests):
/// TURNBOOK_TEST_PYTHON, else python3, else /usr/bin/python3.
pub fn python_with_aiosmtpd() -> Option<String> {
    let mut candidates: Vec<String> = std::env::var("TURNBOOK_TEST_PYTHON").into_iter().collect();
    candidates.extend(["python3".into(), "/usr/bin/python3".into()]);
    candidates.into_iter().find(|py| {
        Command::new(py)
            .args(["-c", "import aiosmtpd"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .status()
            .is_ok_and(|s| s.success())
    })
}

/// The configuration of the ingest tests' imaginary reactor (one-line exports: batch,
/// lot, conversion in %), written into `root`, with `group` files a transaction.
pub fn reactor_config(root: &Path, group: usize) -> turnbook::config::Config {
    let text = format!(
        r#"
database = "t.db"
quarantine = "quarantine"
files_per_transaction = {group}

[profiles.reactor]
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
columns.batch_id = {{ header = "Batch" }}
columns.lot = {{ header = "Lot" }}
columns.conversion = {{ header = "Conversion", unit = "%" }}

[[folders]]
path = "exports"
profile = "reactor"
"#
    );
    let path = root.join("turnbook.toml");
    std::fs::write(&path, text).unwrap();
    turnbook::config::Config::load(&path).unwrap()
}

/// Run the built `turnbook` with `args`, without the caller's SMTP URL or log filter (so a
/// developer's environment cannot send mail or change what a test reads).
pub fn run(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .args(args)
        .env_remove("TURNBOOK_SMTP_URL")
        .env_remove("RUST_LOG")
        .output()
        .unwrap()
}
