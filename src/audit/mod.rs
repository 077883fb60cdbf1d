//! The audit trail's verification: `verify` replays the events to prove the stored
//! records are exactly what the events wrote. The link rule itself lives in
//! [`crate::model::chain`], the appending in the store.

mod check;
mod outbox;
mod verify;
mod walk;

pub mod key;

pub use verify::{
    Finding, FitCheck, SignOffCoverage, VerifyReport, Witnesses, verify, verify_since, verify_with,
};

/// Who is acting: the configured name, else the OS user, else "unknown".
pub fn actor(configured: Option<&str>) -> String {
    if let Some(name) = configured.filter(|n| !n.trim().is_empty()) {
        return name.trim().to_string();
    }
    std::env::var("USER")
        .or_else(|_| std::env::var("LOGNAME"))
        .ok()
        .filter(|u| !u.is_empty())
        .or_else(os_user)
        .unwrap_or_else(|| "unknown".to_string())
}

/// The operating-system account this process runs as, recorded with a sign-off: the real
/// user's login name from /proc and /etc/passwd (not USER, which whoever starts the
/// command sets), else USER or LOGNAME, else "unknown". Evidence of where a signature
/// came from, not proof of who made it.
pub fn os_account() -> String {
    os_user()
        .or_else(|| {
            std::env::var("USER")
                .or_else(|_| std::env::var("LOGNAME"))
                .ok()
                .filter(|u| !u.is_empty())
        })
        .unwrap_or_else(|| "unknown".to_string())
}

/// The name of the process's real user from /proc and /etc/passwd (services often run
/// without USER in their environment).
fn os_user() -> Option<String> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let uid = status
        .lines()
        .find_map(|l| l.strip_prefix("Uid:"))?
        .split_whitespace()
        .next()?
        .to_string();
    let passwd = std::fs::read_to_string("/etc/passwd").ok()?;
    passwd.lines().find_map(|l| {
        let mut f = l.split(':');
        let name = f.next()?;
        let _pw = f.next()?;
        (f.next()? == uid).then(|| name.to_string())
    })
}
