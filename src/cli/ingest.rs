//! `turnbook ingest` (a backfill of files and folders) and `turnbook verify`.

use super::{CmdResult, IngestArgs, printable, progress_bar};
use crate::config::Config;
use crate::notebook::{self as ingestion, FileOutcome};

/// `turnbook ingest PATH...`.
pub fn ingest(cfg: Config, a: &IngestArgs) -> CmdResult {
    let files = ingestion::files_under(&cfg, &a.paths, a.profile.as_deref())?;
    let json = a.json;
    let bar = progress_bar(files.len() as u64, json);
    let database = cfg.database_path();
    let mut stored = 0usize;
    let summary = ingestion::ingest_files(cfg, &files, a.profile.clone(), |o| {
        stored += 1;
        bar.inc(1);
        if json {
            if let Ok(s) = serde_json::to_string(o) {
                println!("{s}");
            }
        } else if let FileOutcome::Rejected { path, error, .. } = o {
            bar.suspend(|| eprintln!("rejected {}: {}", printable(path), printable(error)));
        }
    })
    .map_err(|e| stopped(e, &database, stored, files.len()))?;
    bar.finish_and_clear();
    if !json {
        // Entries not read (links leading out, pipes...) are named when there are any.
        let (what, not_read) = match summary.entries_refused {
            0 => ("files", String::new()),
            n => (
                "entries",
                format!(
                    " ({n} of them not read: links leading out of their folder, pipes, \
                     sockets, devices)"
                ),
            ),
        };
        println!(
            "{} {what}: {} ingested, {} duplicates, {} rejected{not_read}; rows: {} new, {} \
             already recorded, {} conflicting",
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

/// A backfill that stopped: what failed, in which database, and what is already stored
/// (committed files are kept; the same command skips them and goes on).
fn stopped(
    e: crate::notebook::NotebookError,
    database: &std::path::Path,
    stored: usize,
    total: usize,
) -> super::Failure {
    let mut f = super::Failure::from(e);
    f.message = format!(
        "{} (database {}; {stored} of {total} file(s) were stored before this and are kept; \
         the same command skips them and goes on)",
        f.message,
        database.display()
    );
    f
}

/// `turnbook verify`.
pub fn verify(cfg: &Config, args: &super::VerifyArgs) -> CmdResult {
    let scope = if args.since_last {
        crate::notebook::VerifyScope::SinceLast
    } else {
        crate::notebook::VerifyScope::Full
    };
    let done = crate::notebook::verify_recorded(cfg, &args.heads, scope)?;
    let report = &done.report;
    if args.json {
        super::print_json(report)?;
    } else if let (Some(since), true) = (&done.since, report.ok()) {
        println!(
            "verified since the last verification ({} at {}, head {}): {} later event(s) \
             linked, every row they wrote matches; head {}:{}",
            since.scope, since.at, since.head_seq, report.events, report.head_seq, report.head_hash
        );
    } else if report.ok() {
        let keyed = match report.keyed_after {
            None => "plain links".to_string(),
            Some(0) => "every link keyed and checked".to_string(),
            Some(s) => format!("plain links up to event {s}, keyed links after it checked"),
        };
        println!(
            "verified: {} events, chain intact ({keyed}), every record matches the events \
             that wrote it; {} published head(s) held; head {}:{}",
            report.events, report.heads_checked, report.head_seq, report.head_hash
        );
    } else {
        if report.unchecked_keyed_links > 0 {
            println!(
                "NOT VERIFIED: {} keyed link(s) after event {} cannot be checked without the \
                 chain key ({} not readable)",
                report.unchecked_keyed_links,
                report.keyed_after.unwrap_or(0),
                cfg.chain_key_path().display()
            );
        }
        for (i, f) in report.findings.iter().take(21).enumerate() {
            let lead = if i == 0 && report.unchecked_keyed_links == 0 {
                "NOT VERIFIED: "
            } else {
                "  also: "
            };
            println!("{lead}{f}");
        }
    }
    if !args.json {
        if let Some(f) = &report.fits {
            println!(
                "stored fits: {} identical to a recomputation from the records, {} differing; \
                 not compared: {} by another engine version, {} under other settings, {} older \
                 than their lot's records, {} resting on a family prior",
                f.identical,
                f.differing,
                f.other_engine,
                f.other_configuration,
                f.stale,
                f.family_prior
            );
        }
        // Apart from the verdict: a sign-off that no longer covers is not tampering.
        for s in &report.signoffs {
            println!("{}", printable(&s.to_string()));
        }
    }
    Ok(if report.ok() { 0 } else { 1 })
}
