//! Verifications recorded, and the audit chain's state for reports and the web view: the
//! last recorded verification plus an incremental check of the events after it, so that
//! showing a lot never replays the whole database.

use std::time::Instant;

use super::chain::{key_for_checking, witnessed_head};
use super::error::Result;
use crate::audit::{VerifyReport, Witnesses};
use crate::config::Config;
use crate::model::chain::{ChainKey, Head, record_mac};
use crate::model::time::now_utc;
use crate::store::replay::VerifyRun;
use crate::store::{self, Connection};

/// What a verification checks: every event and record, or what came after the last one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VerifyScope {
    Full,
    SinceLast,
}

/// A verification as `turnbook verify` ran it: the report, the recorded verification it
/// continued from (for `--since-last`), and the run now recorded.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Verification {
    pub report: VerifyReport,
    /// The recorded verification an incremental check started from (None: a full one).
    pub since: Option<VerifyRun>,
    pub recorded: VerifyRun,
}

/// The newest recorded verification that found the chain intact and whose seal the key
/// confirms (without the key the seal cannot be checked, and the newest intact one is
/// taken: its keyed links are reported unchecked anyway).
pub fn last_trusted_run(conn: &Connection, key: Option<&ChainKey>) -> Result<Option<VerifyRun>> {
    let Some(run) = store::replay::last_verify_run(conn, true)? else {
        return Ok(None);
    };
    let sealed = match (key, &run.mac) {
        (None, _) => true,
        (Some(k), Some(mac)) => *mac == record_mac(k, &run.mac_input()),
        (Some(_), None) => false,
    };
    if !sealed {
        tracing::warn!(
            run = run.id,
            "a recorded verification is not sealed with the chain key: ignored"
        );
    }
    Ok(sealed.then_some(run))
}

fn witnesses<'k>(cfg: &Config, key: Option<&'k ChainKey>, heads: &[Head]) -> Result<Witnesses<'k>> {
    let mut all: Vec<Head> = heads.to_vec();
    all.extend(witnessed_head(&cfg.head_witness_path())?);
    Ok(Witnesses { key, heads: all })
}

/// Run a verification of `scope` and record its result. `--since-last` without a recorded
/// intact verification to start from runs a full one.
pub fn verify_recorded(cfg: &Config, heads: &[Head], scope: VerifyScope) -> Result<Verification> {
    let conn = store::open(&cfg.database_path())?;
    let key = key_for_checking(cfg)?;
    let w = witnesses(cfg, key.as_ref(), heads)?;
    let started = Instant::now();
    let since = match scope {
        VerifyScope::Full => None,
        VerifyScope::SinceLast => last_trusted_run(&conn, key.as_ref())?,
    };
    let mut report = match &since {
        None => {
            let mut r = crate::audit::verify_with(&conn, &w)?;
            let (fits, findings) = super::fitcheck::check_fits(&conn, cfg)?;
            r.findings.extend(findings);
            r.fits = Some(fits);
            r
        }
        Some(run) => crate::audit::verify_since(&conn, &w, &head_of(run))?,
    };
    // With a central store configured, its copy of this site's chain is a witness too.
    let head = store::events::head(&conn)?;
    report
        .findings
        .extend(super::central::check_against_central(cfg, head)?);
    let mut run = VerifyRun {
        id: 0,
        at: now_utc(),
        scope: if since.is_some() {
            "since-last"
        } else {
            "full"
        }
        .into(),
        from_seq: report.from_seq,
        head_seq: report.head_seq,
        head_hash: report.head_hash.clone(),
        ok: report.ok(),
        events: report.events,
        findings: i64::try_from(report.findings.len()).unwrap_or(i64::MAX),
        first_finding: report.findings.first().map(ToString::to_string),
        seconds: started.elapsed().as_secs_f64(),
        mac: None,
    };
    run.mac = key.as_ref().map(|k| record_mac(k, &run.mac_input()));
    run.id = store::replay::record_verify_run(&conn, &run)?;
    Ok(Verification {
        report,
        since,
        recorded: run,
    })
}

fn head_of(run: &VerifyRun) -> Head {
    Head {
        seq: run.head_seq,
        hash: run.head_hash.clone(),
    }
}

/// The audit chain's state as a report or a page shows it.
#[derive(Debug, Clone, serde::Serialize)]
pub struct AuditStatus {
    /// The recorded verification it rests on (None: none recorded, so a full one ran now).
    pub last: Option<VerifyRun>,
    /// The check of the events after it, made now (unrecorded).
    pub report: VerifyReport,
    pub checked_at: String,
    /// The newest recorded verification, when it found the chain broken: it stands until
    /// a later verification finds the chain intact.
    pub failed: Option<VerifyRun>,
}

impl AuditStatus {
    pub fn intact(&self) -> bool {
        self.report.ok() && self.failed.is_none()
    }

    /// The first thing found wrong, in words.
    pub fn first_finding(&self) -> Option<String> {
        match &self.failed {
            Some(run) => Some(format!(
                "the verification of {} found: {}",
                run.at,
                run.first_finding.as_deref().unwrap_or("a finding")
            )),
            None => self.report.findings.first().map(ToString::to_string),
        }
    }

    /// Events whose links the state rests on: the recorded head plus those checked now.
    pub fn events(&self) -> i64 {
        self.report.from_seq + self.report.events
    }

    /// When and how it was verified, in words.
    pub fn when(&self) -> String {
        match &self.last {
            None => format!("{} in full", self.checked_at),
            Some(run) => format!(
                "{} ({} up to event {}); the {} later event(s) checked {}",
                run.at,
                if run.scope == "full" {
                    "in full"
                } else {
                    "incrementally"
                },
                run.head_seq,
                self.report.events,
                self.checked_at
            ),
        }
    }
}

/// The chain's state from the last recorded intact verification plus an incremental check
/// of what came after it; with none recorded, a full verification now (bounded memory,
/// not recorded: reports and pages change nothing). Stored fits are not recomputed here.
pub fn audit_status(cfg: &Config, conn: &Connection) -> Result<AuditStatus> {
    let key = key_for_checking(cfg)?;
    let w = witnesses(cfg, key.as_ref(), &[])?;
    let last = last_trusted_run(conn, key.as_ref())?;
    let failed = store::replay::last_verify_run(conn, false)?
        .filter(|r| !r.ok && last.as_ref().is_none_or(|ok| r.id > ok.id));
    let report = match &last {
        Some(run) => crate::audit::verify_since(conn, &w, &head_of(run))?,
        None => crate::audit::verify_with(conn, &w)?,
    };
    Ok(AuditStatus {
        last,
        report,
        checked_at: now_utc(),
        failed,
    })
}
