//! Logs as plant IT reads them: JSON fields in Display form (a folder is "/srv/...", not
//! "\"/srv/...\""), and journald priorities as `<N>` line prefixes when stderr is the
//! journal's stream (`$JOURNAL_STREAM` names its device and inode).

#![cfg(unix)]

mod common;

use std::os::unix::fs::MetadataExt;
use std::process::{Command, Stdio};
use std::time::Duration;

/// Run the service for a moment on a reactor configuration with its stderr in a file;
/// returns that file's text.
fn service_log(
    extra_env: impl Fn(&std::fs::File) -> Vec<(String, String)>,
    args: &[&str],
) -> (String, std::path::PathBuf) {
    let tmp = tempfile::tempdir().unwrap();
    common::reactor_config(tmp.path(), 1);
    let exports = tmp.path().join("exports");
    std::fs::create_dir(&exports).unwrap();
    std::fs::write(exports.join("bad.csv"), "nothing a profile reads\n").unwrap();
    let log_path = tmp.path().join("stderr.log");
    let log = std::fs::File::create(&log_path).unwrap();
    let mut c = Command::new(env!("CARGO_BIN_EXE_turnbook"));
    c.arg("--config")
        .arg(tmp.path().join("turnbook.toml"))
        .args(args)
        .arg("watch");
    c.env_remove("RUST_LOG")
        .env_remove("JOURNAL_STREAM")
        .env_remove("NOTIFY_SOCKET");
    for (k, v) in extra_env(&log) {
        c.env(k, v);
    }
    let mut child = c.stdout(Stdio::null()).stderr(log).spawn().unwrap();
    std::thread::sleep(Duration::from_millis(2500));
    Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(child.wait().unwrap().success());
    let text = std::fs::read_to_string(&log_path).unwrap();
    (text, exports.canonicalize().unwrap())
}

#[test]
fn json_logs_hold_paths_in_display_form() {
    let (text, exports) = service_log(|_| Vec::new(), &["--log-json"]);
    let lines: Vec<serde_json::Value> = text
        .lines()
        .map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("{e}: {l}")))
        .collect();
    let watching = lines
        .iter()
        .find(|l| l["fields"]["message"] == "watching")
        .unwrap_or_else(|| panic!("{text}"));
    assert_eq!(
        watching["fields"]["folder"],
        exports.to_str().unwrap(),
        "{watching}"
    );
    assert!(!text.contains("\\\"/"), "a Debug-quoted path: {text}");
}

#[test]
fn lines_to_the_journal_carry_their_priority() {
    let (text, _) = service_log(
        |f| {
            let m = f.metadata().unwrap();
            vec![("JOURNAL_STREAM".into(), format!("{}:{}", m.dev(), m.ino()))]
        },
        &[],
    );
    // info (6) for the start, warn (4) for the rejected file.
    assert!(
        text.lines()
            .any(|l| l.starts_with("<6>") && l.contains("turnbook watching")),
        "{text}"
    );
    assert!(
        text.lines()
            .any(|l| l.starts_with("<4>") && l.contains("rejected")),
        "{text}"
    );
    assert!(
        text.lines()
            .filter(|l| !l.is_empty())
            .all(|l| l.starts_with('<')),
        "{text}"
    );

    // Without the journal, no prefixes.
    let (plain, _) = service_log(|_| Vec::new(), &[]);
    assert!(plain.contains("turnbook watching"), "{plain}");
    assert!(!plain.lines().any(|l| l.starts_with("<6>")), "{plain}");
}
