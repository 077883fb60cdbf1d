//! The application: the one API the command line, the service, the demo and the tests
//! call. It does the work and returns data; it never prints and never decides an exit
//! status.
//!
//! - [`ingestion`]: files from bytes to committed records (hash, parse, merge, store), one
//!   at a time for the service or in parallel groups for a backfill.
//! - [`lots`]: a lot's state (metrics of every cycle, the fit, what needs attention), and
//!   its recomputation when records change.
//! - [`alerts`]: from a lot's state to the alert rules and the outbox.
//! - [`entries`]: register, correct, exclude, note, sign off.
//! - [`history`]: status, a lot's history and the fingerprint a sign-off covers.
//! - [`fits`]: the deactivation fit of a stored lot or of any two-column series.
//! - [`reports`]: the data of a lot's or the site's report, and writing them.
//! - [`daemon`]: the service: watcher, mailer and digest, with an orderly shutdown.

pub mod alerts;
pub mod daemon;
pub mod entries;
mod error;
pub mod fits;
pub mod history;
pub mod ingestion;
pub mod lots;
pub mod recompute;
pub mod reports;

pub use error::{NotebookError, Result};

use crate::config::Config;

/// Walk the audit trail of the notebook `cfg` names and compare every record with the
/// events that wrote it.
pub fn verify(cfg: &Config) -> Result<crate::audit::VerifyReport> {
    let conn = crate::store::open(&cfg.database_path())?;
    Ok(crate::audit::verify(&conn)?)
}
