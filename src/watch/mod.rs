//! The folder watcher: notices instrument exports as they land and hands each complete
//! file, once, to the ingestion pipeline.
//!
//! - [`WatchFolder`]: one `[[folders]]` entry of the configuration (path, profile, mode…).
//! - [`run`]: the service loop. File events (or polling, for network shares) feed a settle
//!   tracker; a file is offered only when it has stopped changing: a close-after-write
//!   confirmed by a short re-check, or size and modification time unchanged for the
//!   folder's `settle` time. Start-up scans every folder so nothing landed while the
//!   service was down is missed.
//! - [`FileSink`]: what the watcher offers files to (the pipeline); called from one thread.
//! - [`shutdown_signal`], [`shutdown_receiver`]: stop on SIGTERM/SIGINT.
//! - [`write_slowly`]: writes a file like a slow instrument, for tests and demos.
//!
//! Which files are offered: names matching an ignore pattern (the file's or any folder's
//! below the root) are not; directories are not; a symbolic link is followed only if it
//! resolves to a regular file inside the watched folder, and is then deduplicated with its
//! target, so one file version is offered once. A link leading elsewhere, a named pipe, a
//! socket or a device is handed to [`FileSink::refuse`] with a reason, once per version.
//!
//! Wiring, in the `watch` command:
//!
//! ```no_run
//! # use std::sync::Arc;
//! # use turnbook::watch::{FileSink, WatchFolder};
//! # async fn demo(folders: Vec<WatchFolder>, sink: Arc<dyn FileSink>) -> anyhow::Result<()> {
//! let shutdown = turnbook::watch::shutdown_receiver();
//! let stats = turnbook::watch::run(folders, sink, shutdown).await?;
//! tracing::info!(offered = stats.offered, errors = stats.sink_errors, "watcher stopped");
//! # Ok(())
//! # }
//! ```

mod error;
mod events;
mod folder;
mod runner;
mod scan;
mod settle;
mod shutdown;
mod slow;

use std::path::Path;

pub use error::WatchError;
pub use folder::{
    MAX_POLL_INTERVAL_S, MAX_SETTLE_MS, MIN_SETTLE_MS, WatchFolder, WatchMode, default_ignore,
};
pub use runner::{RETRY_FIRST, RETRY_MAX, SHUTDOWN_GRACE, run};
pub use scan::{entry_kind, judge_link};
pub use settle::{CLOSE_RECHECK, SettleTracker, Signal, Stamp, Verdict};
pub use shutdown::{shutdown_receiver, shutdown_signal};
pub use slow::write_slowly;

/// Receives settled files. Implemented by the ingestion pipeline.
///
/// Called from a single worker thread, one file at a time, in the order files settled, so
/// it may block (SQLite) and needs no locking of its own against other calls. It should be
/// idempotent by content: the watcher avoids offering the same (size, modification time)
/// twice in one run, but a restart offers every file again.
pub trait FileSink: Send + Sync + 'static {
    /// Ingests one file found in `folder`.
    ///
    /// Return `Ok` once the file is handled, including a bad file that was recorded and
    /// quarantined: that outcome is final. Return `Err` when ingestion failed and may work
    /// later (database busy, disk full): the error is logged and counted, the watcher goes
    /// on with the next file and offers this version again after a growing pause
    /// ([`RETRY_FIRST`], doubling up to [`RETRY_MAX`]); a changed file is offered at once.
    fn ingest(&self, folder: &WatchFolder, path: &Path) -> anyhow::Result<()>;

    /// Reports an entry of `folder` that is not offered, with `reason` naming what it is
    /// (a link leading out of the folder, a named pipe, ...). Called once per version of
    /// the entry in a run. The pipeline records it like a rejected file; this default only
    /// logs it, so that no entry is passed over without a line.
    fn refuse(&self, folder: &WatchFolder, path: &Path, reason: &str) -> anyhow::Result<()> {
        tracing::warn!(folder = %crate::logs::shown_path(&folder.path), path = %crate::logs::shown_path(path), reason = %reason.escape_debug(),
            "entry not read");
        Ok(())
    }

    /// Called once, when every folder's start-up scan is done and every file it found has
    /// been handled (ingested, or failed and set aside for a retry): the service is ready.
    fn caught_up(&self) {}

    /// True when [`FileSink::ingest_files`] stores files that settled together as one
    /// unit of work; otherwise the watcher calls [`FileSink::ingest`] file by file (and
    /// takes no further file once told to stop).
    fn takes_files_together(&self) -> bool {
        false
    }

    /// Ingests files that settled together, each with its own result, as [`ingest`] does
    /// one (an `Err` of the whole call counts for each). The pipeline stores them in one
    /// transaction and refits each lot they touch once; this default calls [`ingest`]
    /// for each.
    ///
    /// [`ingest`]: FileSink::ingest
    fn ingest_files(
        &self,
        files: &[(&WatchFolder, &Path)],
    ) -> anyhow::Result<Vec<anyhow::Result<()>>> {
        Ok(files
            .iter()
            .map(|(folder, path)| self.ingest(folder, path))
            .collect())
    }

    /// For each file version (path, size and modification time), whether it was recorded
    /// before exactly so: the start-up scan does not offer those. This default knows
    /// none.
    fn recorded(&self, files: &[(&Path, Stamp)]) -> anyhow::Result<Vec<bool>> {
        Ok(vec![false; files.len()])
    }

    /// Files of at least this many bytes go to a lane of their own: a second thread that
    /// calls [`FileSink::ingest_large`] one file at a time, so that storing one does not
    /// hold up the small files settling meanwhile (the sink must then take calls from both
    /// threads at once). None, this default: one lane for every file.
    fn large_lane_from(&self) -> Option<u64> {
        None
    }

    /// Ingests one file offered on the large-file lane (see
    /// [`FileSink::large_lane_from`]); its result means what [`FileSink::ingest`]'s does.
    fn ingest_large(&self, folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        self.ingest(folder, path)
    }

    /// The watcher is stopping: a call in progress should end at its next safe point
    /// (a large file between two of its parts) rather than run to its end.
    fn stopping(&self) {}
}

/// What the watcher did, returned when it stops.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct WatchStats {
    /// Sink calls completed (successful or not).
    pub offered: u64,
    /// Sink calls that returned an error (or panicked).
    pub sink_errors: u64,
}
