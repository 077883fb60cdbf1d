//! `turnbook lots` and `turnbook cycles`: the tables of lots and of one lot's cycles.

use std::fmt::Write as _;
use std::io::Write as _;

use super::{CmdResult, Failure, fmt_opt};
use crate::config::Config;
use crate::notebook::{
    CycleLine, LotState, TOF_AVERAGE_DEFINITION, TOF_INITIAL_DEFINITION, cycle_lines,
    cycles_document, known_lot, lot_lines,
};

/// `turnbook lots`.
pub fn lots(cfg: &Config, json: bool) -> CmdResult {
    if json {
        // The document `print_json` would print, from each lot's entry as kept printed.
        let mut out = std::io::BufWriter::with_capacity(1 << 16, std::io::stdout().lock());
        crate::notebook::write_lots_json(cfg, &mut out)?;
        out.flush()?;
        return Ok(0);
    }
    let lines = lot_lines(cfg)?;
    if lines.is_empty() {
        println!(
            "no lots yet: register one (`turnbook register`) or drop a lot sheet into a watched folder"
        );
        return Ok(0);
    }
    println!(
        "{:<16} {:<34} {:>6} {:>9} {:>9} {:<22} {:<9} forecast / flags",
        "lot", "catalyst", "cycles", "activity", "cum. TON", "model", "sign-off"
    );
    for l in &lines {
        let mut tail = forecast_tail(l);
        if l.abrupt_loss {
            tail.push_str("  ABRUPT LOSS");
        }
        if !l.flags.is_empty() {
            let _ = write!(tail, "  [{}]", l.flags.join(", "));
        }
        println!(
            "{:<16} {:<34} {:>6} {:>9} {:>9} {:<22} {:<9} {}",
            l.lot,
            l.catalyst
                .clone()
                .unwrap_or_else(|| "(not registered)".into()),
            l.cycles,
            fmt_opt(l.latest_activity, 3),
            fmt_opt(l.cumulative_ton, 0),
            l.model.clone().unwrap_or_else(|| "-".into()),
            match l.signoff.state {
                crate::model::signoff::SignOffStatus::None => "-",
                s => s.as_str(),
            },
            tail
        );
    }
    Ok(0)
}

/// The forecast column of the lots table: the crossing in cycles and in dates, the
/// order-by date, the next batch's verdict.
fn forecast_tail(l: &crate::notebook::LotLine) -> String {
    let forecast = l.forecast.as_ref().map(|f| {
        let st = f["status"].as_str().unwrap_or("");
        match (f["x"].as_f64(), st) {
            (Some(x), "ahead") => format!(
                "criterion at cycle {x:.1} [{}, {}]",
                f["lower"]
                    .as_f64()
                    .map_or("-inf".into(), |v| format!("{v:.1}")),
                f["upper"]
                    .as_f64()
                    .map_or("+inf".into(), |v| format!("{v:.1}"))
            ),
            _ => st.replace('-', " "),
        }
    });
    let mut tail = forecast.unwrap_or_default();
    if let Some(f) = &l.forecast {
        match (f["crossing_early"].as_str(), f["crossing_late"].as_str()) {
            (Some(e), Some(l)) => {
                let _ = write!(tail, " = {e} to {l}");
            }
            (Some(e), None) => {
                let _ = write!(tail, " = from {e}");
            }
            _ => {}
        }
        if let Some(o) = f["order_by"].as_str() {
            let passed = f["as_of"].as_str().is_some_and(|t| o < t);
            let _ = write!(
                tail,
                "  order by {o}{}",
                if passed { " (passed)" } else { "" }
            );
        }
    }
    if let Some(n) = &l.next_cycle {
        let verdict = serde_json::to_value(n.verdict).unwrap_or_default();
        let _ = write!(tail, "  next batch {}", verdict.as_str().unwrap_or("?"));
    }
    tail
}

/// `turnbook cycles LOT`.
pub fn cycles(cfg: &Config, lot: &str, format: &str) -> CmdResult {
    let s = known_lot(cfg, lot)?;
    let lines = cycle_lines(&s);
    match format {
        "json" => return super::print_json(&cycles_document(&s)),
        "csv" => {
            let rows: Vec<_> = lines.into_iter().map(|l| (s.lot.clone(), l)).collect();
            crate::notebook::write_csv(&rows, std::io::stdout().lock())
                .map_err(|e| Failure::rejected(e.to_string()))?;
        }
        _ => cycles_table(&s, lot, &lines),
    }
    Ok(0)
}

fn cycles_table(s: &LotState, lot: &str, lines: &[CycleLine]) {
    if let Some(r) = &s.record {
        let water = r
            .water_content_wt_pct
            .map(|w| format!(", {w} wt % water: metal on the dry mass"))
            .unwrap_or_default();
        println!(
            "lot {} — {} ({} {} wt %, {} g charged{water})",
            r.lot, r.catalyst, r.metal, r.loading_wt_pct, r.charged_mass_g
        );
    } else {
        println!("lot {lot} — not registered: its cycles are pending");
    }
    let reference = s
        .reference_cycle
        .map_or("no reference cycle yet".to_string(), |n| {
            format!("cycle {n} = 1")
        });
    println!("activity: {} ({reference})", s.activity_basis.definition());
    println!("TOF avg: {TOF_AVERAGE_DEFINITION}; TOF₀: {TOF_INITIAL_DEFINITION}");
    println!(
        "{:>5} {:<12} {:>6} {:>6} {:>7} {:>7} {:>8} {:>8} {:>8} {:>8} {:>7} {:>7} {:>6} {:>8}  flags / sources",
        "cycle",
        "batch",
        "T °C",
        "t h",
        "conv",
        "yield",
        "TON",
        "TON av.",
        "TOFavg/h",
        "TOF₀/h",
        "k h⁻¹",
        "act.",
        "± se",
        "M µg/g"
    );
    for l in lines {
        println!(
            "{:>5} {:<12} {:>6} {:>6} {:>7} {:>7} {:>8} {:>8} {:>8} {:>8} {:>7} {:>7} {:>6} {:>8}  {} | {}",
            l.cycle,
            l.batch_id,
            fmt_opt(l.temperature_c, 1),
            fmt_opt(l.duration_h, 2),
            fmt_opt(l.conversion, 4),
            fmt_opt(l.yield_fraction, 4),
            fmt_opt(l.ton, 1),
            fmt_opt(l.ton_per_metal_available, 1),
            fmt_opt(l.tof_per_h, 1),
            fmt_opt(l.tof_initial_per_h, 1),
            fmt_opt(l.k_app_per_h, 3),
            fmt_opt(l.activity, 3),
            fmt_opt(l.activity_se, 3),
            fmt_opt(l.metal_in_product_ug_g, 2),
            if l.flags.is_empty() {
                "-".to_string()
            } else {
                l.flags.join(" ")
            },
            l.sources
        );
    }
    println!(
        "TON av.: TON per mol metal available (charged less the metal found in earlier products)"
    );
    for a in &s.attention {
        println!("attention: {a}");
    }
}
