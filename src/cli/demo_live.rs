//! The live part of the demo (the service running in-process while a simulated plant
//! writes exports slowly, like real instruments) and the demo's closing summary.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use crate::cli::{CmdResult, Failure};
use crate::config::Config;
use crate::notebook;

/// The simulated plant: writes each file slowly, as instruments do, on a thread of its own.
fn spawn_plant(
    dir: &Path,
    to_write: Vec<(PathBuf, Vec<u8>)>,
) -> tokio::task::JoinHandle<std::io::Result<()>> {
    let root = dir.to_path_buf();
    tokio::task::spawn_blocking(move || -> std::io::Result<()> {
        for (rel, bytes) in &to_write {
            // Write under a temporary name the watcher ignores, then rename: many
            // instrument PCs do the same. The balance export is written in place, slowly.
            let path = root.join(rel);
            if rel.starts_with("exports/balance") {
                crate::watch::write_slowly(&path, bytes, 4, Duration::from_millis(1200))?;
            } else {
                let tmp = path.with_extension("part");
                crate::watch::write_slowly(&tmp, bytes, 3, Duration::from_millis(600))?;
                std::fs::rename(&tmp, &path)?;
            }
            println!("                 plant wrote    {}", rel.display());
        }
        Ok(())
    })
}

/// Print each file the service records until every one of `files` is recorded or 40 s
/// have passed; returns how many were recorded.
async fn wait_for_files(
    dir: &Path,
    cfg: &Config,
    files: &[(PathBuf, Vec<u8>)],
    start_id: i64,
) -> usize {
    let mut last = start_id;
    let deadline = Instant::now() + Duration::from_secs(40);
    // Wait for exactly the files the plant writes now (not whatever else is recorded).
    let root = std::path::absolute(dir).unwrap_or_else(|_| dir.to_path_buf());
    let mut waiting: Vec<PathBuf> = files.iter().map(|(rel, _)| root.join(rel)).collect();
    while !waiting.is_empty() && Instant::now() < deadline {
        tokio::time::sleep(Duration::from_millis(250)).await;
        for f in notebook::files_recorded_after(cfg, last).unwrap_or_default() {
            last = f.id;
            let (outcome, rows) = (&f.outcome, f.rows_new);
            let path = PathBuf::from(&f.path);
            waiting.retain(|w| *w != path);
            let shown = path
                .strip_prefix(&root)
                .map(Path::to_path_buf)
                .unwrap_or_else(|_| path.clone());
            println!(
                "                 turnbook       {outcome} {} ({rows} new rows)",
                shown.display()
            );
        }
    }
    files.len() - waiting.len()
}

/// The web view of the configuration's `[web]` section, on any free loopback port when
/// its own is taken (another demo or service); its address is printed.
fn web_view(cfg: &Config) -> Option<crate::web::Prepared> {
    let web = cfg.web.as_ref()?;
    let prepared = match crate::web::prepare(cfg) {
        Ok(p) => p?,
        Err(e) => {
            let any = std::net::SocketAddr::from(([127, 0, 0, 1], 0));
            match crate::web::prepare_at(cfg, web, any) {
                Ok(p) => {
                    println!("  web view       {e}; taking a free port instead");
                    p
                }
                Err(e) => {
                    println!("  web view       not started: {e}");
                    return None;
                }
            }
        }
    };
    println!(
        "  web view       http://{}/ (open it in a browser: it updates as files land, until the demo ends)",
        prepared.address
    );
    Some(prepared)
}

/// Run the service while the plant writes `batches` (files of each batch) and the ICP
/// report, each in chunks over about a second; stop once every file is recorded.
pub fn run(
    dir: &Path,
    cfg: &Config,
    batches: &[Vec<(PathBuf, Vec<u8>)>],
    icp: &str,
) -> Result<(), Failure> {
    let mut files: Vec<(PathBuf, Vec<u8>)> = batches.iter().flatten().cloned().collect();
    files.push((
        PathBuf::from("exports/icp/icp-report-live.tsv"),
        icp.as_bytes().to_vec(),
    ));
    let rt = notebook::runtime()?;
    let start_id = notebook::newest_file_id(cfg)?;
    let web = web_view(cfg);
    rt.block_on(async {
        let (stop, rx) = tokio::sync::watch::channel(false);
        let service_cfg = cfg.clone();
        let side = web
            .map(crate::web::Prepared::into_task)
            .into_iter()
            .collect();
        let service =
            tokio::spawn(async move { crate::notebook::serve_with(&service_cfg, rx, side).await });
        tokio::time::sleep(Duration::from_millis(800)).await;
        println!(
            "  live           the service is watching; the plant writes its newest exports slowly:"
        );
        let writer = spawn_plant(dir, files.clone());
        let seen = wait_for_files(dir, cfg, &files, start_id).await;
        match writer.await {
            Ok(Ok(())) => {}
            Ok(Err(e)) => {
                return Err(Failure::rejected(format!(
                    "the simulated plant could not write: {e}"
                )));
            }
            Err(e) => {
                return Err(Failure::rejected(format!(
                    "the simulated plant stopped: {e}"
                )));
            }
        }
        if seen < files.len() {
            println!(
                "  live           only {seen} of {} files were recorded within 40 s",
                files.len()
            );
        }
        let _ = stop.send(true);
        match service.await {
            Ok(r) => r.map(|_| ()).map_err(Failure::from),
            Err(e) => Err(Failure::rejected(format!("the service task failed: {e}"))),
        }
    })
}

/// Deliver the alerts, write the reports and print what the demo produced.
pub fn finish(dir: &Path, cfg: &Config) -> CmdResult {
    let smtp = std::env::var(crate::mail::SMTP_URL_ENV)
        .ok()
        .filter(|s| !s.trim().is_empty());
    qa_entries(cfg)?;
    let digest = crate::notebook::queue_digest(cfg)?;
    let mail = notebook::deliver_now(cfg)
        .map_err(|e| Failure::rejected(format!("mail delivery failed: {e}")))?;
    let reports = dir.join("reports");
    crate::notebook::write_all_reports(cfg, &reports)?;
    println!();
    crate::cli::lots::lots(cfg, false)?;
    println!();
    println!("The deactivating lot, PD-C-2611-A:");
    let state = crate::notebook::known_lot(cfg, "PD-C-2611-A")?;
    if let Some(a) = &state.analysis {
        for line in crate::fit::render_text(a).lines().filter(|l| {
            l.starts_with("Chosen")
                || l.starts_with("Forecast")
                || l.contains("lifetime TON")
                || l.trim_start().starts_with("activity")
                || l.trim_start().starts_with("fit ")
        }) {
            println!("  {line}");
        }
    }
    println!();
    match smtp {
        Some(_) => println!(
            "  mail           {} alert(s) sent over SMTP ({} failed)",
            mail.delivered, mail.failed
        ),
        None => {
            let dir = cfg.resolved_mail().dir;
            let n = std::fs::read_dir(&dir)
                .map(|d| {
                    d.filter_map(|e| e.ok())
                        .filter(|e| e.path().extension().is_some_and(|x| x == "eml"))
                        .count()
                })
                .unwrap_or(0);
            println!(
                "  mail           {n} message(s) in {} (open them in a mail client), the last: {digest}",
                dir.display()
            )
        }
    }
    println!(
        "  reports        {} (one per lot, CSV beside each, site.html)",
        reports.display()
    );
    println!("  database       {}", cfg.database_path().display());
    println!();
    println!("Try: turnbook --config {} status", cfg.source.display());
    println!(
        "     turnbook --config {} cycles PT-AL-2610-B",
        cfg.source.display()
    );
    println!("     turnbook --config {} verify", cfg.source.display());
    if let Some(w) = &cfg.web {
        println!(
            "     turnbook --config {} watch    (the service; web view on http://{}/)",
            cfg.source.display(),
            w.listen
        );
    }
    println!("Spent catalysts can be pyrophoric: keep them wet and follow the site's procedures.");
    Ok(0)
}

/// The QA part of the scenario: a note on the Pt lot's poisoned batch, and a review of the
/// Pd lot by the roster's first signer with a comment. Approval is left to a second
/// signer (four eyes), which one demo run cannot be.
fn qa_entries(cfg: &Config) -> Result<(), Failure> {
    crate::notebook::note(
        cfg,
        None,
        Some("KV4-K-010"),
        "Feed drum changed before this batch; a retained sample of the new drum went to the \
         analytical lab.",
    )?;
    let Some(signer) = cfg.signers.first() else {
        return Ok(());
    };
    let s = crate::notebook::sign_off(
        cfg,
        &crate::notebook::SignOffRequest {
            lot: "PD-C-2611-A",
            meaning: "reviewed",
            signer: &signer.name,
            comment: Some(
                "Cycles checked against the batch records and the balance print-outs; \
                 the slow activity loss is as expected for Pd/C in this step.",
            ),
        },
    )?;
    println!(
        "  sign-off       PD-C-2611-A reviewed as {} (event {}); approval needs a second signer",
        s.signer, s.receipt.seq
    );
    Ok(())
}
