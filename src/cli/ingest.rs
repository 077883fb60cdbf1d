//! `turnbook ingest` (a backfill of files and folders) and `turnbook verify`.

use super::{CmdResult, IngestArgs, printable, progress_bar};
use crate::config::Config;
use crate::notebook::{self as ingestion, FileOutcome};

/// `turnbook ingest PATH...`.
pub fn ingest(cfg: Config, a: &IngestArgs) -> CmdResult {
    let files = ingestion::files_under(&cfg, &a.paths, a.profile.as_deref())?;
    let json = a.json;
    let bar = progress_bar(files.len() as u64, json);
    let summary = ingestion::ingest_files(cfg, &files, a.profile.clone(), |o| {
        bar.inc(1);
        if json {
            if let Ok(s) = serde_json::to_string(o) {
                println!("{s}");
            }
        } else if let FileOutcome::Rejected { path, error, .. } = o {
            bar.suspend(|| eprintln!("rejected {}: {}", printable(path), printable(error)));
        }
    })?;
    bar.finish_and_clear();
    if !json {
        println!(
            "{} files: {} ingested, {} duplicates, {} rejected; rows: {} new, {} already recorded, {} conflicting",
            files.len(),
            summary.ingested,
            summary.duplicates,
            summary.rejected,
            summary.rows_new,
            summary.rows_known,
            summary.rows_conflict
        );
        for c in &summary.conflicts {
            println!("conflict kept and flagged: {}", printable(c));
        }
    }
    Ok(if summary.rejected > 0 { 1 } else { 0 })
}

/// `turnbook verify`.
pub fn verify(cfg: &Config, json: bool) -> CmdResult {
    let report = crate::notebook::verify(cfg)?;
    if json {
        println!("{}", serde_json::to_string_pretty(&report)?);
    } else if report.ok() {
        println!(
            "verified: {} events, chain intact, every record matches the events that wrote it; head {}",
            report.events, report.head_hash
        );
    } else {
        println!("NOT VERIFIED: {}", report.findings[0]);
        for f in report.findings.iter().skip(1).take(20) {
            println!("  also: {f}");
        }
    }
    Ok(if report.ok() { 0 } else { 1 })
}
