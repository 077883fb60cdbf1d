//! The long-running shell: the folder watcher feeding the pipeline, and the mailer
//! draining the outbox, until SIGTERM or SIGINT.

use std::path::Path;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use crate::commands::{CmdResult, Failure};
use crate::config::Config;
use crate::pipeline::{FileOutcome, Ingestor};
use crate::watch::{self, FileSink, WatchFolder};

/// The pipeline as the watcher's sink: one writer, one file per transaction.
pub struct PipelineSink {
    ingestor: Mutex<Ingestor>,
}

impl PipelineSink {
    pub fn new(cfg: Config) -> Result<Self, Failure> {
        let mut ingestor = Ingestor::open(cfg)?;
        ingestor.skip_unchanged = true;
        Ok(PipelineSink {
            ingestor: Mutex::new(ingestor),
        })
    }
}

impl FileSink for PipelineSink {
    fn ingest(&self, _folder: &WatchFolder, path: &Path) -> anyhow::Result<()> {
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
        match ing.ingest_file(path)? {
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
        Ok(())
    }
}

/// Run the watcher and the mailer until `shutdown` turns true.
pub async fn serve(
    cfg: &Config,
    shutdown: tokio::sync::watch::Receiver<bool>,
) -> Result<watch::WatchStats, Failure> {
    let sink: Arc<dyn FileSink> = Arc::new(PipelineSink::new(cfg.clone())?);
    let db = cfg.database_path();
    let mail = cfg.resolved_mail();
    let mail_shutdown = shutdown.clone();
    let mailer = tokio::spawn(async move {
        if let Err(e) = crate::alert::run_mailer(&db, &mail, mail_shutdown).await {
            tracing::error!(error = %e, "the mailer stopped");
        }
    });
    let stats = watch::run(cfg.resolved_folders(), sink, shutdown)
        .await
        .map_err(|e| Failure::usage(format!("cannot watch the configured folders: {e:#}")))?;
    // The mailer saw the same shutdown; give it a moment to finish a delivery in flight.
    if tokio::time::timeout(Duration::from_secs(3), mailer)
        .await
        .is_err()
    {
        tracing::warn!("the mailer did not stop within 3 s; leaving it");
    }
    Ok(stats)
}

fn runtime() -> Result<tokio::runtime::Runtime, Failure> {
    tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Failure::rejected(format!("cannot start the async runtime: {e}")))
}

/// `turnbook watch`.
pub fn watch_command(cfg: &Config) -> CmdResult {
    if cfg.folders.is_empty() {
        return Err(Failure::usage(format!(
            "configuration {}: no [[folders]] to watch; expected at least one",
            cfg.source.display()
        )));
    }
    let rt = runtime()?;
    rt.block_on(async {
        let shutdown = watch::shutdown_receiver();
        tracing::info!(folders = cfg.folders.len(), database = %cfg.database_path().display(), "turnbook watching");
        let stats = serve(cfg, shutdown).await?;
        tracing::info!(offered = stats.offered, errors = stats.sink_errors, "turnbook stopped");
        Ok(0)
    })
}

/// `turnbook mail`: deliver what the outbox holds now, once.
pub fn mail_command(cfg: &Config) -> CmdResult {
    let rt = runtime()?;
    let report = rt
        .block_on(crate::alert::deliver_due(
            &cfg.database_path(),
            &cfg.resolved_mail(),
            chrono::Utc::now(),
        ))
        .map_err(|e| Failure::rejected(format!("mail delivery failed: {e}")))?;
    println!(
        "mail: {} attempted, {} delivered, {} failed (failed ones are retried with backoff)",
        report.attempted, report.delivered, report.failed
    );
    Ok(if report.failed > 0 { 1 } else { 0 })
}
