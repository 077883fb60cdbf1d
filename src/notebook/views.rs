//! Read-only views for the browser and for plant IT: the lots at a glance, one lot's page,
//! alerts, files, the audit chain, the figures behind health and metrics, and the change
//! counter that tells open pages to refresh. Nothing here writes.

use std::collections::BTreeMap;

use serde::Serialize;

use super::error::Result;
use super::history::{HistoryEntry, lot_history};
use super::lots::{lot_state, no_such_lot};
use super::reports::{build, build_site};
use crate::config::Config;
use crate::report::{self, LotReport, SiteReport};
use crate::store::{self, Connection};

/// Every lot at a glance: the site summary's lines and the sign-off state of each lot
/// that has a sign-off.
#[derive(Debug, Clone, Serialize)]
pub struct Overview {
    pub site: SiteReport,
    pub signoffs: BTreeMap<String, crate::model::signoff::SignOffState>,
}

fn open(cfg: &Config) -> Result<Connection> {
    Ok(store::open(&cfg.database_path())?)
}

/// The lots at a glance, with sign-off states.
pub fn overview(cfg: &Config) -> Result<Overview> {
    let conn = open(cfg)?;
    let site = build_site(&conn, cfg, None)?;
    let signoffs = super::signoffs::sign_off_states(&conn)?;
    Ok(Overview { site, signoffs })
}

/// One lot's page: the report's data and the lot's history.
#[derive(Debug, Serialize)]
pub struct LotPage {
    pub report: LotReport,
    pub history: Vec<HistoryEntry>,
}

/// One lot's page; refused when nothing names the lot.
pub fn lot_page(cfg: &Config, lot: &str) -> Result<LotPage> {
    let conn = open(cfg)?;
    let state = lot_state(&conn, cfg, lot)?;
    if state.record.is_none() && state.cycles.is_empty() {
        return Err(no_such_lot(lot));
    }
    Ok(LotPage {
        report: build(&conn, cfg, &state)?,
        history: lot_history(&conn, lot)?,
    })
}

/// A lot's printable report, the same document `turnbook report` writes, made now.
pub fn lot_report_html(cfg: &Config, lot: &str) -> Result<String> {
    Ok(report::lot_html(&lot_page(cfg, lot)?.report))
}

/// An alert condition that is open now.
#[derive(Debug, Clone, Serialize)]
pub struct OpenAlertLine {
    pub lot: String,
    pub rule: String,
    pub state: String,
    pub severity: String,
    pub since: String,
    pub subject: String,
}

/// A queued alert message.
#[derive(Debug, Clone, Serialize)]
pub struct MessageLine {
    pub queued_at: String,
    pub lot: String,
    pub rule: String,
    pub state: String,
    pub severity: i64,
    pub subject: String,
    pub delivered_at: Option<String>,
}

/// Open alert conditions and the newest messages.
#[derive(Debug, Clone, Serialize)]
pub struct AlertsView {
    pub open: Vec<OpenAlertLine>,
    pub recent: Vec<MessageLine>,
}

/// The alerts page's data: open conditions, and the newest `limit` messages.
pub fn alerts_view(cfg: &Config, limit: i64) -> Result<AlertsView> {
    let conn = open(cfg)?;
    let open = store::outbox::open_alerts(&conn)?
        .into_iter()
        .map(|a| OpenAlertLine {
            lot: a.lot,
            rule: a.rule,
            state: a.state.as_str().to_string(),
            severity: a.severity.as_str().to_string(),
            since: a.since,
            subject: a.subject,
        })
        .collect();
    let recent = store::web::recent_messages(&conn, limit)?
        .into_iter()
        .map(|m| MessageLine {
            queued_at: m.queued_at,
            lot: m.lot,
            rule: m.rule,
            state: m.state,
            severity: m.severity,
            subject: m.subject,
            delivered_at: m.delivered_at,
        })
        .collect();
    Ok(AlertsView { open, recent })
}

/// One recorded file, as the files page lists it.
pub use crate::store::web::FileRow as FileLine;

/// Files by outcome, and the newest files.
#[derive(Debug, Clone, Serialize)]
pub struct FilesView {
    pub ingested: i64,
    pub duplicates: i64,
    pub quarantined: i64,
    pub files: Vec<FileLine>,
}

/// The files page's data: counts by outcome and the newest `limit` files.
pub fn files_view(cfg: &Config, limit: i64) -> Result<FilesView> {
    let conn = open(cfg)?;
    let c = store::queries::file_counts(&conn, "", "")?;
    let files = store::web::recent_files(&conn, limit)?;
    Ok(FilesView {
        ingested: c.ingested,
        duplicates: c.duplicates,
        quarantined: c.quarantined,
        files,
    })
}

/// The audit chain: its state as last verified and checked since, and its newest event.
#[derive(Debug, Clone, Serialize)]
pub struct AuditView {
    pub verified_at: String,
    pub intact: bool,
    pub events: i64,
    pub findings: Vec<String>,
    pub head_seq: Option<i64>,
    pub head_at: Option<String>,
    pub head_hash: Option<String>,
}

/// The chain's state (the last recorded verification and an incremental check of what
/// came after it) and its head.
pub fn audit_view(cfg: &Config) -> Result<AuditView> {
    let conn = open(cfg)?;
    let status = super::verifying::audit_status(cfg, &conn)?;
    let head = store::web::chain_head(&conn)?;
    let mut findings: Vec<String> = status
        .report
        .findings
        .iter()
        .map(ToString::to_string)
        .collect();
    if let Some(f) = status.failed.as_ref().and_then(|_| status.first_finding()) {
        findings.insert(0, f);
    }
    Ok(AuditView {
        verified_at: status.when(),
        intact: status.intact(),
        events: status.events(),
        findings,
        head_seq: head.as_ref().map(|h| h.seq),
        head_at: head.as_ref().map(|h| h.at.clone()),
        head_hash: head.map(|h| h.hash),
    })
}

/// The figures behind `/healthz` and `/metrics`, read in one go.
#[derive(Debug, Clone, Serialize)]
pub struct OpsFigures {
    pub files_ingested: i64,
    pub duplicates: i64,
    pub quarantined: i64,
    pub outbox_waiting: i64,
    pub outbox_oldest_queued_at: Option<String>,
    pub last_ingest_at: Option<String>,
    pub events: i64,
    /// Fits computed and stored since the database began.
    pub fits_stored: i64,
}

/// Read the operations figures; an error means the database is not reachable.
pub fn ops_figures(cfg: &Config) -> Result<OpsFigures> {
    let conn = store::connect(&cfg.database_path())?;
    let c = store::queries::file_counts(&conn, "", "")?;
    let head = store::web::chain_head(&conn)?;
    Ok(OpsFigures {
        files_ingested: c.ingested,
        duplicates: c.duplicates,
        quarantined: c.quarantined,
        outbox_waiting: store::outbox::waiting(&conn)?,
        outbox_oldest_queued_at: store::web::oldest_waiting(&conn)?,
        last_ingest_at: c.last.map(|l| l.1),
        events: head.map_or(0, |h| h.seq),
        fits_stored: store::web::fits_stored(&conn)?,
    })
}

/// A watch on the database: its version moves whenever another connection commits.
pub struct ChangeWatch {
    conn: Connection,
}

impl ChangeWatch {
    /// Open a connection kept for watching the database `cfg` names.
    pub fn open(cfg: &Config) -> Result<Self> {
        Ok(ChangeWatch {
            conn: store::open(&cfg.database_path())?,
        })
    }

    /// The current version; compare it with an earlier one to learn of a commit.
    pub fn version(&self) -> Result<i64> {
        Ok(store::bulk::data_version(&self.conn)?)
    }
}
