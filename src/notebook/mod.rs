//! The application: the one API the command line, the service, the demo and the tests
//! call. It does the work and returns data; it never prints and never decides an exit
//! status.
//!
//! - `ingestion`: files from bytes to committed records (hash, parse, merge, store), one
//!   at a time for the service or in parallel groups for a backfill.
//! - `lots`: a lot's state (metrics of every cycle, the fit, what needs attention), and
//!   its recomputation when records change.
//! - `alerts`: from a lot's state to the alert rules and the outbox.
//! - `entries`: register, correct, exclude, note, sign off.
//! - `signoffs`: the fingerprint a sign-off covers, a lot's sign-offs and the lots'
//!   sign-off states.
//! - `history`: status and a lot's history.
//! - `fits`: the deactivation fit of a stored lot or of any two-column series.
//! - `reports`: the data of a lot's or the site's report, and writing them.
//! - `daemon`: the service: watcher, mailer and digest, with an orderly shutdown.
//! - `views`: read-only views for the browser and for operations, and the change watch.

mod alerts;
mod causes;
mod central;
mod chain;
mod daemon;
mod dates;
mod digesting;
mod entries;
mod error;
mod export;
mod family;
mod fitcheck;
mod fits;
mod heap;
mod history;
mod ingestion;
mod large_lot;
mod listing;
mod lot_list;
mod lots;
mod recompute;
mod reports;
mod sdnotify;
mod signoffs;
mod verifying;
mod views;

pub use alerts::{AlertActionLine, AlertEntry, list_alerts};
pub use causes::lot_causes;
pub use central::{
    BrokenLink, CentralVerifyReport, ChainWalk, ShipReport, SiteChain, central_lots, ship_now,
    verify_central,
};
pub use daemon::{
    ServiceContext, SideTask, deliver_now, run_service, run_service_with, runtime, serve,
    serve_with,
};
pub use digesting::queue_digest;
pub use entries::{
    AlertAct, Corrected, Receipt, Registered, SignedOff, act_on_alert, correct, exclude, note,
    register, sign_off,
};
pub use entries::{SignOffRequest, sign_off_from};
pub use error::{NotebookError, Result};
pub use export::lot_lines_json;
pub use export::{
    Cell, EXPORT_SCHEMA, ExportError, JSON_SCHEMA, NameKind, cells, closest, export_lines,
    round_sig, suggest_name, with_schema, write_csv, write_jsonl,
};
pub use export::{LotsJsonWriter, PrintedLine};
pub use fits::{SeriesFit, SeriesRequest, fit_series, lot_fit};
pub use history::{HistoryEntry, Status, history, status};
pub use ingestion::{
    FileOutcome, Ingestor, RunSummary, files_recorded_after, files_under, ingest_files,
    newest_file_id,
};
pub use large_lot::{STREAM_FROM, recomputed_outputs};
pub use listing::{Listing, RefusedEntry, collect_files};
pub use lot_list::{ListedFrom, write_lots_json};
pub use lots::{
    CycleLine, CycleState, CyclesDocument, LotLine, LotState, TOF_AVERAGE_DEFINITION,
    TOF_INITIAL_DEFINITION, cycle_lines, cycles_document, known_lot, lot_lines, lot_series,
    lot_state, lot_state_as_of,
};
pub use recompute::recompute_stale;
pub use reports::{write_all_reports, write_lot_report, write_site_csv, write_site_report};
pub use signoffs::{
    SignOffCounts, lot_fingerprint, lot_marks, lot_sign_off_state, sign_off_overview,
    sign_off_states,
};
pub use verifying::{AuditStatus, Verification, VerifyScope, audit_status, verify_recorded};
pub use views::{
    AlertsView, AuditView, ChangeWatch, FileLine, FilesView, LotPage, MessageLine, OpenAlertLine,
    OpsFigures, Overview, alerts_view, audit_view, files_view, lot_page, lot_report_html,
    ops_figures, overview,
};

use crate::config::Config;

/// Walk the audit trail of the notebook `cfg` names and compare every record with the
/// events that wrote it; keyed links are checked when the chain key's file is readable,
/// and the chain must hold the head in the witness file and every head in `heads`. The
/// result is recorded (see [`verify_recorded`]).
pub fn verify(
    cfg: &Config,
    heads: &[crate::model::chain::Head],
) -> Result<crate::audit::VerifyReport> {
    Ok(verify_recorded(cfg, heads, VerifyScope::Full)?.report)
}
