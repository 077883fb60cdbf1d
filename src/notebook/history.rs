//! Read-only views for people and scripts: status and a lot's history.

use serde::Serialize;

use super::error::{NotebookError, Result as NResult};
use crate::config::Config;
use crate::model::time::format_ts;
use crate::store::{self, Connection};

/// What `status` reports.
#[derive(Debug, Serialize)]
pub struct Status {
    pub database: String,
    pub files_ingested: i64,
    pub files_ingested_last_hour: i64,
    pub files_ingested_last_day: i64,
    pub last_file: Option<String>,
    pub last_ingest_at: Option<String>,
    pub files_quarantined: i64,
    pub duplicates: i64,
    pub conflicts: i64,
    pub lots: i64,
    pub cycles: i64,
    pub pending_cycles: i64,
    /// Attention lines of the lots in view: in use (a batch since the history cut-off, see
    /// `alerts.backfill_history_days`) or with an open alert.
    pub lots_needing_attention: Vec<String>,
    /// Lots left out of `lots_needing_attention`: history, not news.
    pub lots_not_in_view: usize,
    /// Their newest batch started before this plant-local date (`None`: every lot is in view).
    pub history_before: Option<String>,
    pub outbox_waiting: i64,
    /// Lots by sign-off state (none, reviewed, approved, rejected, stale).
    pub signoffs: super::signoffs::SignOffCounts,
    /// Large files whose storing began and did not end (a stop or a crash midway): their
    /// parts so far are stored; the same content offered again is stored to the end.
    pub files_in_progress: Vec<store::records::FileInProgress>,
}

/// Gather the status figures.
pub fn gather_status(conn: &Connection, cfg: &Config) -> store::Result<Status> {
    let now = chrono::Utc::now();
    let hour = format_ts(now - chrono::Duration::hours(1));
    let day = format_ts(now - chrono::Duration::days(1));
    let files = store::queries::file_counts(conn, &hour, &day)?;
    // The lots, read once (a seek a lot) for the counts, the view, the attention lines
    // and the sign-off counts.
    let index = store::lots::LotIndex::read(conn)?;
    let names = index.names();
    let records = store::queries::record_counts(conn, &index)?;
    let open = store::outbox::open_alerts(conn)?;
    let view = super::digesting::lots_in_view(conn, cfg, &index, open.into_iter().map(|a| a.lot))?;
    let (attention, not_in_view) = crate::notebook::lots::lots_needing_attention(
        conn,
        cfg,
        &names,
        view.as_ref().map(|v| &v.0),
    )?;
    Ok(Status {
        database: cfg.database_path().display().to_string(),
        files_ingested: files.ingested,
        files_ingested_last_hour: files.ingested_last_hour,
        files_ingested_last_day: files.ingested_last_day,
        last_file: files.last.as_ref().map(|l| l.0.clone()),
        last_ingest_at: files.last.map(|l| l.1),
        files_quarantined: files.quarantined,
        duplicates: files.duplicates,
        conflicts: records.conflicts,
        lots: records.lots,
        cycles: records.cycles,
        pending_cycles: records.pending_cycles,
        lots_needing_attention: attention,
        lots_not_in_view: not_in_view,
        history_before: view.map(|v| v.1.format("%Y-%m-%d").to_string()),
        outbox_waiting: store::outbox::waiting(conn)?,
        signoffs: super::signoffs::count_states(&names, &super::signoffs::sign_off_states(conn)?),
        files_in_progress: store::records::files_in_progress(conn)?,
    })
}

/// The status of the notebook `cfg` names.
pub fn status(cfg: &Config) -> NResult<Status> {
    let conn = store::open(&cfg.database_path())?;
    Ok(gather_status(&conn, cfg)?)
}

/// One event as shown in a history.
#[derive(Debug, Serialize)]
pub struct HistoryEntry {
    pub seq: i64,
    pub at: String,
    pub actor: String,
    pub kind: String,
    pub subject: String,
    pub payload: serde_json::Value,
    pub hash: String,
    /// What a person wrote with the event, as typed: a note's text, a sign-off's comment,
    /// the reason of a correction, an exclusion or a registration change.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub text: Option<String>,
}

/// The free text of an event's payload (see [`HistoryEntry::text`]).
fn written_text(kind: &str, p: &serde_json::Value) -> Option<String> {
    let field = match kind {
        "note" => "text",
        "sign-off" => "comment",
        "correction" | "exclusion" | "lot-registered" => "reason",
        _ => return None,
    };
    p[field].as_str().map(str::to_string)
}

/// Every event that concerns a lot: its registrations, the files that brought its cycles,
/// corrections, exclusions, notes and sign-offs of its batches.
pub fn lot_history(conn: &Connection, lot: &str) -> store::Result<Vec<HistoryEntry>> {
    Ok(store::queries::lot_events(conn, lot)?
        .into_iter()
        .map(|e| {
            let payload =
                serde_json::from_str(&e.payload).unwrap_or(serde_json::Value::String(e.payload));
            HistoryEntry {
                seq: e.seq,
                at: e.at,
                actor: e.actor,
                text: written_text(&e.kind, &payload),
                kind: e.kind,
                subject: e.subject,
                payload,
                hash: e.hash,
            }
        })
        .collect())
}

/// A lot's history; refused when no event concerns the lot.
pub fn history(cfg: &Config, lot: &str) -> NResult<Vec<HistoryEntry>> {
    let conn = store::open(&cfg.database_path())?;
    let h = lot_history(&conn, lot)?;
    if h.is_empty() {
        return Err(NotebookError::Refused(format!(
            "no events concern lot '{lot}'"
        )));
    }
    Ok(h)
}
