//! `turnbook status` and `turnbook history`.

use super::CmdResult;
use crate::config::Config;

/// `turnbook status`.
pub fn status(cfg: &Config, json: bool) -> CmdResult {
    let s = crate::notebook::status(cfg)?;
    if json {
        println!("{}", serde_json::to_string_pretty(&s)?);
        return Ok(0);
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
    if s.lots_needing_attention.is_empty() {
        println!("attention       none");
    } else {
        for l in &s.lots_needing_attention {
            println!("attention       {l}");
        }
    }
    Ok(0)
}

/// `turnbook history LOT`.
pub fn history(cfg: &Config, lot: &str, json: bool) -> CmdResult {
    let h = crate::notebook::history(cfg, lot)?;
    if json {
        println!("{}", serde_json::to_string_pretty(&h)?);
        return Ok(0);
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
            "note" => e.payload["text"].as_str().unwrap_or("").to_string(),
            "alert-action" => format!(
                "{} alert {} (episode {}), reason: {}",
                e.payload["action"].as_str().unwrap_or("?"),
                e.payload["alert_key"].as_str().unwrap_or("?"),
                e.payload["episode"],
                e.payload["reason"].as_str().unwrap_or("")
            ),
            "sign-off" => format!(
                "{} of {} (SHA-256 {})",
                e.payload["meaning"].as_str().unwrap_or("?"),
                e.payload["what"].as_str().unwrap_or("?"),
                e.payload["signed_sha256"].as_str().unwrap_or("?")
            ),
            _ => e.subject.clone(),
        };
        println!(
            "#{:<6} {}  {:<10} {:<15} {}",
            e.seq, e.at, e.actor, e.kind, detail
        );
    }
    Ok(0)
}
