//! Many plants, one view: `turnbook ship`, `turnbook central verify`, `turnbook central lots`.

use super::{CmdResult, printable};
use crate::config::Config;

/// `turnbook ship`: copy the events the central store lacks, now.
pub fn ship(cfg: &Config, json: bool) -> CmdResult {
    let r = crate::notebook::ship_now(cfg)?;
    if json {
        println!("{}", serde_json::to_string_pretty(&r)?);
        return Ok(0);
    }
    let head = r
        .central_head
        .as_ref()
        .map_or_else(|| "none (nothing to ship)".to_string(), |h| h.to_string());
    println!(
        "site {}: {} event(s) shipped, {} already there; central head {head}; figures of {} \
         lot(s) replaced",
        printable(&r.site),
        r.shipped,
        r.already_there,
        r.figures_replaced
    );
    Ok(0)
}

/// `turnbook central verify`: every site's chain in the central store.
pub fn verify(cfg: &Config, json: bool) -> CmdResult {
    let report = crate::notebook::verify_central(cfg)?;
    let code = if report.ok() { 0 } else { 1 };
    if json {
        println!("{}", serde_json::to_string_pretty(&report)?);
        return Ok(code);
    }
    if report.sites.is_empty() {
        println!("the central store holds no site yet");
    }
    for s in &report.sites {
        let site = printable(&s.site);
        match &s.broken {
            Some(b) => println!(
                "NOT VERIFIED: site {site}: first broken link at {}; {} event(s) before it intact",
                printable(&b.to_string()),
                s.events
            ),
            None => {
                let head = s
                    .head
                    .as_ref()
                    .map_or_else(|| "none".to_string(), |h| h.to_string());
                println!(
                    "site {site}: {} event(s), chain intact, head {head}; {} link(s) recomputed",
                    s.events, s.links_checked
                );
            }
        }
        if s.keyed_unchecked > 0 {
            println!(
                "  site {site}: {} keyed link(s) NOT recomputed (no key file for this site in \
                 [central] site_keys): continuity checked only",
                s.keyed_unchecked
            );
        }
    }
    Ok(code)
}

/// `turnbook central lots`: the company's lots by site.
pub fn lots(cfg: &Config, json: bool) -> CmdResult {
    let lots = crate::notebook::central_lots(cfg)?;
    if json {
        println!("{}", serde_json::to_string_pretty(&lots)?);
        return Ok(0);
    }
    println!(
        "{:<12} {:<16} {:<20} {:<6} {:>6}  {:<20} last sign-off",
        "site", "lot", "catalyst", "metal", "cycles", "last cycle"
    );
    for l in &lots {
        println!(
            "{:<12} {:<16} {:<20} {:<6} {:>6}  {:<20} {}",
            printable(&l.site),
            printable(&l.lot),
            printable(l.catalyst.as_deref().unwrap_or("-")),
            printable(l.metal.as_deref().unwrap_or("-")),
            l.cycles,
            printable(l.last_cycle_started.as_deref().unwrap_or("-")),
            printable(l.last_sign_off.as_deref().unwrap_or("-")),
        );
    }
    Ok(0)
}
