//! `turnbook status` and `turnbook history`.

use super::{CmdResult, printable};
use crate::config::Config;

/// `turnbook status`.
pub fn status(cfg: &Config, json: bool) -> CmdResult {
    let s = crate::notebook::status(cfg)?;
    if json {
        return super::print_json(&s);
    }
    println!("database        {}", s.database);
    println!(
        "files ingested  {} (last hour {}, last day {})",
        s.files_ingested, s.files_ingested_last_hour, s.files_ingested_last_day
    );
    match (&s.last_file, &s.last_ingest_at) {
        (Some(f), Some(at)) => println!("last ingested   {f} at {at}"),
        _ => println!("last ingested   nothing yet"),
    }
    println!("quarantined     {}", s.files_quarantined);
    println!("duplicates      {}", s.duplicates);
    println!(
        "conflicts       {} (values kept and flagged; settle with `turnbook correct`)",
        s.conflicts
    );
    println!(
        "lots / cycles   {} / {} ({} cycles pending: lot unknown or not registered)",
        s.lots, s.cycles, s.pending_cycles
    );
    println!("mail waiting    {}", s.outbox_waiting);
    let c = &s.signoffs;
    println!(
        "sign-offs       {} approved, {} reviewed (approval due), {} rejected, {} stale (history changed since), {} none",
        c.approved, c.reviewed, c.rejected, c.stale, c.none
    );
    if s.lots_needing_attention.is_empty() {
        println!("attention       none");
    } else {
        for l in &s.lots_needing_attention {
            println!("attention       {l}");
        }
    }
    for f in &s.files_in_progress {
        println!(
            "part-stored     {} ({} parts stored; the rest is stored when it is offered again)",
            f.path, f.parts
        );
    }
    if let Some(before) = s.history_before.as_ref().filter(|_| s.lots_not_in_view > 0) {
        println!(
            "history         {} lots without a batch since {before} and no open alert are not \
             checked here (`turnbook lots` shows every lot)",
            s.lots_not_in_view
        );
    }
    Ok(0)
}

/// `turnbook history LOT`.
pub fn history(cfg: &Config, lot: &str, json: bool) -> CmdResult {
    let h = crate::notebook::history(cfg, lot)?;
    if json {
        return super::print_json(&labeled_rows(h));
    }
    for e in &h {
        let detail = match e.kind.as_str() {
            "correction" => format!(
                "{} of batch {} -> {} (was {}), reason: {}",
                e.payload["measurement"]["quantity"].as_str().unwrap_or("?"),
                e.payload["measurement"]["batch_id"].as_str().unwrap_or("?"),
                e.payload["measurement"]["value"],
                e.payload["previous"],
                e.payload["reason"].as_str().unwrap_or("")
            ),
            "exclusion" => format!(
                "excluded={} reason: {}",
                e.payload["excluded"],
                e.payload["reason"].as_str().unwrap_or("")
            ),
            "note" => note_line(&e.payload),
            "alert-action" => format!(
                "{} alert {} (episode {}), reason: {}",
                e.payload["action"].as_str().unwrap_or("?"),
                e.payload["alert_key"].as_str().unwrap_or("?"),
                e.payload["episode"],
                e.payload["reason"].as_str().unwrap_or("")
            ),
            "sign-off" => sign_off_line(&e.payload),
            _ => e.subject.clone(),
        };
        println!(
            "#{:<6} {}  {:<10} {:<15} {}",
            e.seq,
            e.at,
            printable(&e.actor),
            e.kind,
            printable(&detail)
        );
    }
    Ok(0)
}

/// A note in a history: what it is on, and its text.
fn note_line(p: &serde_json::Value) -> String {
    let on = match (p["lot"].as_str(), p["batch_id"].as_str()) {
        (_, Some(b)) => format!("on batch {b}"),
        (Some(l), None) => format!("on lot {l}"),
        (None, None) => "note".to_string(),
    };
    format!("{on}: {}", p["text"].as_str().unwrap_or(""))
}

/// A sign-off in a history: meaning, signer and account, what it covers, and its comment.
fn sign_off_line(p: &serde_json::Value) -> String {
    let signer = match (p["signer"].as_str(), p["os_user"].as_str()) {
        (Some(s), Some(u)) => format!(" as {s} (account {u})"),
        (Some(s), None) => format!(" as {s}"),
        _ => " (no signer named)".to_string(),
    };
    let comment = p["comment"]
        .as_str()
        .map_or_else(String::new, |c| format!(", comment: {c}"));
    format!(
        "{}{signer} of {} (SHA-256 {}){comment}",
        p["meaning"].as_str().unwrap_or("?"),
        p["what"].as_str().unwrap_or("?"),
        p["signed_sha256"].as_str().unwrap_or("?")
    )
}

/// History entries with a file event's measurement rows as objects with their column
/// names (the events store them as bare arrays to save space).
fn labeled_rows(mut h: Vec<crate::notebook::HistoryEntry>) -> Vec<crate::notebook::HistoryEntry> {
    for e in &mut h {
        let Some(rows) = e.payload.get("measurements").cloned() else {
            continue;
        };
        if let Ok(rows) = crate::model::event::compact_rows::deserialize(rows)
            && let Ok(v) = serde_json::to_value(rows)
        {
            e.payload["measurements"] = v;
        }
    }
    h
}
