//! The systemd unit in `deploy/`: its hardening scores at most 1.5 in `systemd-analyze
//! security --offline=yes` (lower is better; 1.8 before `ProtectClock`, `ProcSubset`,
//! `SystemCallFilter=~@privileged @resources`, `IPAddressDeny` and the rest), and it
//! declares what the binary does: `Type=notify`, a watchdog, no `ExecReload=`.
//!
//! Needs `systemd-analyze` (apt package `systemd`, installed by `.ci/run`): skipped with a
//! message when missing, a failure when `CI` is set.

use std::process::Command;

const UNIT: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/deploy/turnbook.service");

#[test]
fn the_unit_is_hardened_to_at_most_one_and_a_half() {
    let out = match Command::new("systemd-analyze")
        .args(["security", "--offline=yes", "--no-pager", UNIT])
        .output()
    {
        Ok(out) => out,
        Err(e) => {
            assert!(
                std::env::var_os("CI").is_none(),
                "CI is set but systemd-analyze cannot run: {e}"
            );
            eprintln!("skipped: no systemd-analyze ({e}); apt-get install systemd");
            return;
        }
    };
    let text = String::from_utf8_lossy(&out.stdout);
    let score: f64 = text
        .lines()
        .find_map(|l| l.split("exposure level for turnbook.service:").nth(1))
        .and_then(|rest| rest.split_whitespace().next())
        .and_then(|s| s.parse().ok())
        .unwrap_or_else(|| panic!("no score in {text}{}", String::from_utf8_lossy(&out.stderr)));
    eprintln!("systemd-analyze security score: {score}");
    assert!(score <= 1.5, "score {score}:\n{text}");
}

#[test]
fn the_unit_asks_for_readiness_and_a_watchdog_and_has_no_reload() {
    let unit = std::fs::read_to_string(UNIT).unwrap();
    let set = |key: &str| unit.lines().any(|l| l.trim_start().starts_with(key));
    assert!(set("Type=notify"));
    assert!(set("WatchdogSec="));
    assert!(
        !set("ExecReload="),
        "the service reads its configuration at start only"
    );
    assert!(set("#LoadCredential=smtp-password:"));
}
