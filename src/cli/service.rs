//! The service and its one-off steps: `watch`, `mail`, `digest`.

use super::CmdResult;
use crate::config::Config;
use crate::notebook as daemon;

/// `turnbook watch`: the service, until SIGTERM or SIGINT; with a `[web]` section it also
/// serves the read-only web view, whose settings are checked before anything starts.
pub fn watch(cfg: &Config) -> CmdResult {
    let web = crate::web::prepare(cfg).map_err(|e| super::Failure::usage(e.to_string()))?;
    let side = web
        .map(crate::web::Prepared::into_task)
        .into_iter()
        .collect();
    daemon::run_service_with(cfg, side)?;
    Ok(0)
}

/// `turnbook mail`: deliver what the outbox holds now, once.
pub fn mail(cfg: &Config) -> CmdResult {
    let report = daemon::deliver_now(cfg)
        .map_err(|e| super::Failure::rejected(format!("mail delivery failed: {e}")))?;
    println!(
        "mail: {} attempted, {} delivered, {} failed (failed ones are retried with backoff)",
        report.attempted, report.delivered, report.failed
    );
    Ok(if report.failed > 0 { 1 } else { 0 })
}

/// `turnbook digest`: queue the managers' digest now (the service does this on schedule).
pub fn digest(cfg: &Config) -> CmdResult {
    let subject = daemon::queue_digest(cfg)?;
    println!("queued: {subject}");
    Ok(0)
}
