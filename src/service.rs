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
        ingestor.tune_for_service()?;
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
        if let Err(e) = crate::mail::run_mailer(&db, &mail, mail_shutdown).await {
            tracing::error!(error = %e, "the mailer stopped");
        }
    });
    let digest = tokio::spawn(digest_loop(cfg.clone(), shutdown.clone()));
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
    digest.abort();
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
        .block_on(crate::mail::deliver_due(
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

/// When the last digest was queued.
fn last_digest(
    conn: &rusqlite::Connection,
) -> Result<Option<chrono::DateTime<chrono::Utc>>, Failure> {
    let last: Option<String> = conn.query_row(
        "SELECT MAX(queued_at) FROM alert_outbox WHERE rule = 'digest'",
        [],
        |r| r.get(0),
    )?;
    Ok(last
        .and_then(|s| chrono::DateTime::parse_from_rfc3339(&s).ok())
        .map(|t| t.with_timezone(&chrono::Utc)))
}

/// Compose the managers' digest for the period since the last one and queue it.
pub fn queue_digest(cfg: &Config) -> Result<String, Failure> {
    use crate::alert::digest;
    use crate::store::outbox;
    let mut conn = crate::store::open(&cfg.database_path())?;
    let now = chrono::Utc::now();
    let from = last_digest(&conn)?.unwrap_or_else(|| now - chrono::Duration::days(7));
    let mut snapshots = Vec::new();
    for lot in crate::analysis::lot_names(&conn)? {
        let state = crate::analysis::lot_state(&conn, cfg, &lot)?;
        if let Some(s) = crate::alerting::snapshot(cfg, &state) {
            snapshots.push(s);
        }
    }
    let open = outbox::open_alerts(&conn)?;
    let changes = outbox::changes_since(&conn, &crate::model::time::format_ts(from))?;
    let period = digest::DigestPeriod { from, to: now };
    let msg = digest::compose_digest(
        &snapshots,
        &changes,
        &open,
        &period,
        &cfg.alerts.recipients.managers,
    );
    let tx = conn.transaction().map_err(crate::store::StoreError::from)?;
    let key = format!("digest|{}", crate::model::time::format_ts(now));
    outbox::enqueue_message(&tx, &key, &msg, &crate::model::time::format_ts(now))?;
    tx.commit().map_err(crate::store::StoreError::from)?;
    Ok(msg.subject)
}

/// Queue a digest at every slot of the configured schedule until shutdown.
async fn digest_loop(cfg: Config, mut shutdown: tokio::sync::watch::Receiver<bool>) {
    let Some(schedule) = cfg.alerts.digest else {
        return;
    };
    loop {
        let last = crate::store::open(&cfg.database_path())
            .ok()
            .and_then(|c| last_digest(&c).ok().flatten());
        let now = chrono::Utc::now();
        let due = crate::alert::next_digest_due(last, &schedule, now);
        let wait = (due - now).to_std().unwrap_or(Duration::ZERO);
        tokio::select! {
            _ = tokio::time::sleep(wait) => {}
            _ = shutdown.changed() => return,
        }
        if *shutdown.borrow() {
            return;
        }
        let c = cfg.clone();
        match tokio::task::spawn_blocking(move || queue_digest(&c)).await {
            Ok(Ok(subject)) => tracing::info!(subject = %subject, "digest queued"),
            Ok(Err(f)) => tracing::error!(error = %f.message, "digest not queued"),
            Err(e) => tracing::error!(error = %e, "digest task failed"),
        }
        // Never queue twice for one slot, even if the clock stepped back.
        tokio::time::sleep(Duration::from_secs(1)).await;
    }
}

/// `turnbook digest`: queue the managers' digest now (the service does this on schedule).
pub fn digest_command(cfg: &Config) -> CmdResult {
    let subject = queue_digest(cfg)?;
    println!("queued: {subject}");
    Ok(0)
}
