//! `turnbook alerts`, `turnbook ack` and `turnbook close`.

use super::{AlertActArgs, AlertsArgs, CmdResult, printable};
use crate::config::Config;
use crate::notebook::{self, AlertAct};

/// `turnbook alerts`.
pub fn list(cfg: &Config, a: &AlertsArgs) -> CmdResult {
    let alerts = notebook::list_alerts(cfg, a.all)?;
    if a.json {
        super::print_json(&alerts)?;
        return Ok(0);
    }
    if alerts.is_empty() {
        println!(
            "no {}alerts",
            if a.all { "" } else { "open or acknowledged " }
        );
        return Ok(0);
    }
    println!(
        "{:>4}  {:<8}  {:<12}  {:<20}  {:<22}  subject",
        "id", "severity", "state", "since", "kind"
    );
    for e in &alerts {
        println!(
            "{:>4}  {:<8}  {:<12}  {:<20}  {:<22}  {}",
            e.id,
            e.severity,
            e.state,
            e.since_local,
            e.kind,
            printable(&e.subject)
        );
        for act in &e.actions {
            println!(
                "      {} by {} at {} (event {}): {}",
                act.action,
                printable(&act.actor),
                act.at,
                act.event,
                printable(&act.reason)
            );
        }
    }
    Ok(0)
}

/// `turnbook ack` and `turnbook close`.
pub fn act(cfg: &Config, a: &AlertActArgs, act: AlertAct) -> CmdResult {
    let r = notebook::act_on_alert(cfg, &a.alert, act, &a.reason)?;
    println!(
        "alert {} {} by {} (event {})",
        printable(&a.alert),
        act.word(),
        printable(&r.actor),
        r.seq
    );
    Ok(0)
}
