//! The long-running service: the folder watcher feeding ingestion, the mailer draining the
//! outbox, the digest on its schedule and any task the caller adds (the web view), until
//! SIGTERM or SIGINT.
//!
//! Shutdown: one signal (a `watch` channel) reaches every task; the service then waits
//! for each task it started to finish, whichever of them ended first and why.

use std::future::Future;
use std::path::Path;
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use super::error::{NotebookError, Result};
use super::ingestion::{FileOutcome, Ingestor};
use super::sdnotify::Liveness;
use crate::config::Config;
use crate::mail::DeliveryReport;
use crate::store;
use crate::watch::{self, FileSink, WatchFolder};

/// The pipeline as the watcher's sink: files settled together stored in one transaction,
/// and a lane of its own for large exports (see [`FileSink::large_lane_from`]): a second
/// writer on its own connection, whose parts each take the write lock briefly, so that
/// small files are stored between them (SQLite's busy wait orders the two writers).
pub struct PipelineSink {
    ingestor: Mutex<Ingestor>,
    /// The large-file lane's writer is opened per file (an idle service keeps only one
    /// connection); the lock keeps the lane to one file at a time.
    large: Mutex<()>,
    cfg: Config,
    /// Set when the service stops: a large file stops between two of its parts.
    stop: Arc<AtomicBool>,
    /// Calls of the small-file lane in progress: the large lane lets them write first.
    small_calls: Arc<AtomicUsize>,
    /// Whether a call is in progress and since when, for the watchdog.
    live: Arc<Liveness>,
}

impl PipelineSink {
    pub fn new(cfg: Config) -> Result<Self> {
        let mut ingestor = Ingestor::open(cfg.clone())?;
        ingestor.tune_for_service()?;
        Ok(PipelineSink {
            ingestor: Mutex::new(ingestor),
            large: Mutex::new(()),
            cfg,
            stop: Arc::default(),
            small_calls: Arc::default(),
            live: Arc::default(),
        })
    }
}

/// File content stored in one transaction when files settle together: bounds what one
/// call holds in memory (a large export goes alone).
const TOGETHER_BYTES: u64 = 8 << 20;

/// Log what became of a file the service offered.
fn log_outcome(outcome: &FileOutcome) {
    match outcome {
        FileOutcome::Duplicate {
            path, of_file_id, ..
        } => {
            tracing::info!(path = %path, of_file_id, "content ingested before; recorded as a duplicate")
        }
        FileOutcome::Rejected { path, error, .. } => {
            tracing::warn!(path = %path, error = %error, "file rejected and quarantined")
        }
        FileOutcome::Ingested { .. } => {}
    }
}

impl PipelineSink {
    /// The idle service holds its working memory, not its peak: called when the start-up
    /// scan is done. A failure only costs memory, so it is logged, not returned.
    fn release_memory(&self) {
        match self.ingestor.lock() {
            Ok(ing) => {
                if let Err(e) = ing.release_memory() {
                    tracing::warn!(error = %e, "could not shrink the store's cache");
                }
            }
            Err(_) => tracing::warn!("the ingestor was poisoned by an earlier panic"),
        }
    }
}

impl FileSink for PipelineSink {
    fn caught_up(&self) {
        tracing::info!("start-up scan done; every file found was handled");
        self.release_memory();
        super::sdnotify::notify("READY=1\nSTATUS=watching; start-up scan done");
    }

    fn ingest(&self, _folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        let _busy = self.live.busy();
        let _first = SmallCall::new(&self.small_calls);
        let mut ing = self
            .ingestor
            .lock()
            .map_err(|_| anyhow::anyhow!("the ingestor was poisoned by an earlier panic"))?;
        if ing.skip_unchanged && ing.unchanged_since_recorded(path)? {
            tracing::debug!(path = %path.display(), "unchanged since it was recorded; skipped");
            return Ok(());
        }
        // A database error is returned so the watcher offers the file again later; a bad
        // file is an outcome (recorded, quarantined), not an error.
        log_outcome(&ing.ingest_file(path)?);
        Ok(())
    }

    fn takes_files_together(&self) -> bool {
        true
    }

    fn large_lane_from(&self) -> Option<u64> {
        Some(super::ingestion::LARGE_FILE_BYTES as u64)
    }

    /// A large file on its own writer: its parts commit one by one while the other lane
    /// stores the small files settling meanwhile.
    fn ingest_large(&self, _folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
        let _one = self
            .large
            .lock()
            .map_err(|_| anyhow::anyhow!("the large-file lane was poisoned by an earlier panic"))?;
        let mut ing = Ingestor::open(self.cfg.clone())?;
        ing.tune_for_service()?;
        ing.parts.stop = Some(Arc::clone(&self.stop));
        ing.parts.yield_to = Some(Arc::clone(&self.small_calls));
        if ing.unchanged_since_recorded(path)? {
            tracing::debug!(path = %path.display(), "unchanged since it was recorded; skipped");
            return Ok(());
        }
        log_outcome(&ing.ingest_file(path)?);
        drop(ing);
        super::heap::release_heap();
        Ok(())
    }

    fn stopping(&self) {
        self.stop.store(true, Ordering::SeqCst);
    }

    /// Files that settled together, stored in transactions of up to [`TOGETHER_BYTES`]
    /// of content (each lot they touch refitted once per transaction); a database error
    /// fails the files of its transaction only.
    fn ingest_files(
        &self,
        files: &[(&WatchFolder, &Path)],
    ) -> anyhow::Result<Vec<anyhow::Result<()>>> {
        let _first = SmallCall::new(&self.small_calls);
        let mut ing = self
            .ingestor
            .lock()
            .map_err(|_| anyhow::anyhow!("the ingestor was poisoned by an earlier panic"))?;
        let mut results: Vec<anyhow::Result<()>> = Vec::with_capacity(files.len());
        let mut group: Vec<std::path::PathBuf> = Vec::new();
        let mut bytes = 0u64;
        for (i, (_, path)) in files.iter().enumerate() {
            if ing.skip_unchanged && ing.unchanged_since_recorded(path)? {
                tracing::debug!(path = %path.display(), "unchanged since it was recorded; skipped");
                // Stored files keep their order: flush what is pending first.
                store_together(&mut ing, &mut group, &mut results);
                results.push(Ok(()));
                bytes = 0;
                continue;
            }
            group.push(path.to_path_buf());
            bytes += std::fs::metadata(path).map_or(0, |m| m.len());
            if bytes >= TOGETHER_BYTES || i + 1 == files.len() {
                store_together(&mut ing, &mut group, &mut results);
                bytes = 0;
            }
        }
        Ok(results)
    }

    /// An entry the watcher does not offer (a link leading out of the folder, a named
    /// pipe, ...) is recorded as a rejected file, once per version of the entry.
    fn refuse(&self, _folder: &WatchFolder, path: &Path, reason: &str) -> anyhow::Result<()> {
        let mut ing = self
            .ingestor
            .lock()
            .map_err(|_| anyhow::anyhow!("the ingestor was poisoned by an earlier panic"))?;
        if ing.skip_unchanged && ing.refused_unchanged(path)? {
            tracing::debug!(path = %path.display(), "refused before, unchanged; not recorded again");
            return Ok(());
        }
        let entry = super::listing::RefusedEntry {
            path: path.to_path_buf(),
            reason: reason.to_string(),
        };
        ing.refuse_entries(std::slice::from_ref(&entry))?;
        tracing::warn!(path = %path.display().to_string().escape_debug(),
            reason = %reason.escape_debug(), "entry not read; recorded as rejected");
        Ok(())
    }

    fn recorded(&self, files: &[(&Path, watch::Stamp)]) -> anyhow::Result<Vec<bool>> {
        let ing = self
            .ingestor
            .lock()
            .map_err(|_| anyhow::anyhow!("the ingestor was poisoned by an earlier panic"))?;
        let versions: Vec<(&Path, u64, Option<std::time::SystemTime>)> = files
            .iter()
            .map(|(p, s)| (*p, s.size, s.modified))
            .collect();
        Ok(ing.recorded_versions(&versions)?)
    }
}

/// A call of the small-file lane in progress, counted while it lasts.
struct SmallCall<'a>(&'a AtomicUsize);

impl<'a> SmallCall<'a> {
    fn new(calls: &'a AtomicUsize) -> Self {
        calls.fetch_add(1, Ordering::SeqCst);
        SmallCall(calls)
    }
}

impl Drop for SmallCall<'_> {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Ordering::SeqCst);
    }
}

/// Store `group` (if any) in one transaction, adding each file's result, and empty it.
fn store_together(
    ing: &mut Ingestor,
    group: &mut Vec<std::path::PathBuf>,
    results: &mut Vec<anyhow::Result<()>>,
) {
    if group.is_empty() {
        return;
    }
    let stored = ing.ingest_together(group);
    let group = std::mem::take(group);
    match stored {
        Ok(outcomes) => {
            outcomes.iter().for_each(log_outcome);
            results.extend(group.iter().map(|_| Ok(())));
        }
        Err(e) => {
            let e = anyhow::Error::from(e);
            results.extend(group.iter().map(|_| Err(anyhow::anyhow!("{e:#}"))));
        }
    }
}

/// What a task started beside the watcher is given: the service's one stop signal, and
/// whether the watcher still runs.
#[derive(Clone)]
pub struct ServiceContext {
    pub stop: tokio::sync::watch::Receiver<bool>,
    pub watching: Arc<AtomicBool>,
}

/// A task the caller adds to the service (the web view): started with the others, told to
/// stop by the same signal and awaited like them.
pub type SideTask = (
    &'static str,
    Box<dyn FnOnce(ServiceContext) -> Pin<Box<dyn Future<Output = ()> + Send>> + Send>,
);

/// Run the watcher, the mailer and the digest schedule until `shutdown` turns true, or
/// until one of them fails; then tell the others to stop and wait for every one.
pub async fn serve(
    cfg: &Config,
    shutdown: tokio::sync::watch::Receiver<bool>,
) -> Result<watch::WatchStats> {
    serve_with(cfg, shutdown, Vec::new()).await
}

/// [`serve`], with `side` tasks started beside the watcher and stopped with it.
pub async fn serve_with(
    cfg: &Config,
    shutdown: tokio::sync::watch::Receiver<bool>,
    side: Vec<SideTask>,
) -> Result<watch::WatchStats> {
    let pipeline = PipelineSink::new(cfg.clone())?;
    let live = Arc::clone(&pipeline.live);
    let sink: Arc<dyn FileSink> = Arc::new(pipeline);
    // The central shipper, when configured: it only reads the database.
    let shipper = super::central::shipper(cfg)?;
    // The tasks' own stop signal: the caller's shutdown, or the failure of one of them.
    let (stop_tx, stop_rx) = tokio::sync::watch::channel(false);
    let stop_tx = Arc::new(stop_tx);
    let relay = tokio::spawn(relay_shutdown(shutdown, Arc::clone(&stop_tx)));
    let db = cfg.database_path();
    let mail = cfg.resolved_mail();
    let mail_stop = stop_rx.clone();
    let mail_failed = Arc::clone(&stop_tx);
    let mailer = tokio::spawn(async move {
        if let Err(e) = crate::mail::run_mailer(&db, &mail, mail_stop).await {
            tracing::error!(error = %e, "the mailer stopped; stopping the service");
            let _ = mail_failed.send(true);
        }
    });
    let digest = tokio::spawn(digest_loop(cfg.clone(), stop_rx.clone()));
    let watching = Arc::new(AtomicBool::new(true));
    let watchdog = tokio::spawn(super::sdnotify::watchdog(live, stop_rx.clone()));
    let hangup = tokio::spawn(super::sdnotify::log_hangups(stop_rx.clone()));
    let mut tasks = vec![
        ("mailer", mailer),
        ("digest", digest),
        ("signal relay", relay),
        ("watchdog", watchdog),
        ("hangup", hangup),
    ];
    for (name, start) in side {
        let ctx = ServiceContext {
            stop: stop_rx.clone(),
            watching: Arc::clone(&watching),
        };
        tasks.push((name, tokio::spawn(start(ctx))));
    }
    if let Some((name, start)) = shipper {
        let ctx = ServiceContext {
            stop: stop_rx.clone(),
            watching: Arc::clone(&watching),
        };
        tasks.push((name, tokio::spawn(start(ctx))));
    }
    let watched = watch::run(cfg.resolved_folders(), sink, stop_rx).await;
    watching.store(false, Ordering::SeqCst);
    // Whatever ended the watcher, every other task is told and awaited.
    let _ = stop_tx.send(true);
    for (name, task) in tasks {
        if let Err(e) = task.await {
            tracing::error!(task = name, error = %e, "a service task ended abnormally");
        }
    }
    watched.map_err(|e| {
        NotebookError::Usage(format!(
            "cannot watch the configured folders: {}",
            crate::logs::anyhow_once(&e)
        ))
    })
}

/// Pass the caller's shutdown on to the tasks' stop signal; ends when either is given.
async fn relay_shutdown(
    mut shutdown: tokio::sync::watch::Receiver<bool>,
    stop: Arc<tokio::sync::watch::Sender<bool>>,
) {
    let mut stopped = stop.subscribe();
    loop {
        if *shutdown.borrow() || *stopped.borrow() {
            let _ = stop.send(true);
            return;
        }
        tokio::select! {
            r = shutdown.changed() => if r.is_err() { return },
            r = stopped.changed() => if r.is_err() { return },
        }
    }
}

/// The one async runtime builder of the notebook: two workers are plenty for a watcher,
/// a mailer and a digest timer.
pub fn runtime() -> Result<tokio::runtime::Runtime> {
    tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| NotebookError::Refused(format!("cannot start the async runtime: {e}")))
}

/// Run the service on the configured folders until SIGTERM or SIGINT.
pub fn run_service(cfg: &Config) -> Result<watch::WatchStats> {
    run_service_with(cfg, Vec::new())
}

/// [`run_service`], with `side` tasks beside the watcher, stopped by the same signal.
pub fn run_service_with(cfg: &Config, side: Vec<SideTask>) -> Result<watch::WatchStats> {
    if cfg.folders.is_empty() {
        return Err(NotebookError::Usage(format!(
            "configuration {}: no [[folders]] to watch; expected at least one",
            cfg.source.display()
        )));
    }
    runtime()?.block_on(async {
        let shutdown = watch::shutdown_receiver();
        tracing::info!(folders = cfg.folders.len(), database = %cfg.database_path().display(), "turnbook watching");
        let stats = serve_with(cfg, shutdown, side).await?;
        tracing::info!(offered = stats.offered, errors = stats.sink_errors, "turnbook stopped");
        Ok(stats)
    })
}

/// Deliver what the outbox holds now, once, whatever the backoff of earlier failures.
pub fn deliver_now(cfg: &Config) -> Result<DeliveryReport> {
    // Each delivery outcome is an event: load the chain key for this database first.
    drop(super::chain::open_writer(cfg)?);
    Ok(runtime()?.block_on(crate::mail::deliver_all_waiting(
        &cfg.database_path(),
        &cfg.resolved_mail(),
        chrono::Utc::now(),
    ))?)
}

/// Queue a digest at every slot of the configured schedule until shutdown.
async fn digest_loop(cfg: Config, mut shutdown: tokio::sync::watch::Receiver<bool>) {
    let Some(schedule) = cfg.alerts.digest else {
        return;
    };
    loop {
        let last = store::open(&cfg.database_path())
            .ok()
            .and_then(|c| store::outbox::last_digest(&c).ok().flatten());
        let now = chrono::Utc::now();
        let due = crate::alert::next_digest_due(last, &schedule, now);
        let wait = (due - now).to_std().unwrap_or(Duration::ZERO);
        if *shutdown.borrow() {
            return;
        }
        tokio::select! {
            _ = tokio::time::sleep(wait) => {}
            _ = shutdown.changed() => return,
        }
        if *shutdown.borrow() {
            return;
        }
        let c = cfg.clone();
        match tokio::task::spawn_blocking(move || super::digesting::queue_digest(&c)).await {
            Ok(Ok(subject)) => tracing::info!(subject = %subject, "digest queued"),
            Ok(Err(e)) => tracing::error!(error = %e, "digest not queued"),
            Err(e) => tracing::error!(error = %e, "digest task failed"),
        }
        // Never queue twice for one slot, even if the clock stepped back.
        tokio::time::sleep(Duration::from_secs(1)).await;
    }
}
