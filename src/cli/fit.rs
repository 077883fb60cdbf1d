//! `turnbook fit`: a lot's deactivation fit, or a two-column CSV series.

use super::{Cli, CmdResult, Failure, FitArgs, load};
use crate::config::Config;
use crate::fit;
use crate::notebook::{self as fits, SeriesFit, SeriesRequest};

/// `turnbook fit LOT` or `turnbook fit --series FILE`.
pub fn fit(cli: &Cli, a: &FitArgs) -> CmdResult {
    match (&a.lot, &a.series) {
        (_, Some(file)) => series(file, a),
        (Some(lot), None) => lot_fit(&load(cli)?, lot, a.json),
        (None, None) => Err(Failure::usage("give a LOT or --series FILE")),
    }
}

/// Fit a stored lot and show the ranking, parameters, forecast and abrupt-loss verdict.
fn lot_fit(cfg: &Config, lot: &str, json: bool) -> CmdResult {
    let state = fits::lot_fit(cfg, lot)?;
    let Some(a) = &state.analysis else {
        return Ok(1);
    };
    if json {
        let mut v = serde_json::to_value(a)?;
        if let (Some(f), serde_json::Value::Object(m)) = (&a.fit, &mut v) {
            let summary = fit::fit_json(f, a.forecast.as_ref());
            if let serde_json::Value::Object(s) = summary {
                for (k, val) in s {
                    m.entry(k).or_insert(val);
                }
            }
        }
        if let serde_json::Value::Object(m) = &mut v {
            m.insert("lot".into(), serde_json::Value::String(lot.to_string()));
            m.insert(
                "basis".into(),
                serde_json::Value::String(state.basis.clone()),
            );
            m.insert(
                "prior_lots".into(),
                serde_json::json!(a.pooled.as_ref().map(|p| p.prior.lots.len())),
            );
        }
        super::print_json(&v)?;
    } else {
        println!(
            "lot {lot}: {} against {}",
            cfg.fitting.measure, cfg.fitting.axis
        );
        print!("{}", fit::render_text(a));
        if let Some(h) = fits::lot_causes(cfg, &state) {
            println!("\nWhy it may have dropped (hints, not a diagnosis):");
            for line in h.lines() {
                println!("  {line}");
            }
        }
        println!(
            "Forecasts are advisory: batch release follows QA procedures and local regulations."
        );
    }
    Ok(0)
}

/// Fit a CSV series (header row; x first column, y second).
fn series(file: &std::path::Path, a: &FitArgs) -> CmdResult {
    let text = std::fs::read_to_string(file)
        .map_err(|e| Failure::usage(format!("cannot read --series {}: {e}", file.display())))?;
    let name = file.display().to_string();
    let req = SeriesRequest {
        name: &name,
        csv: &text,
        model: &a.model,
        starts: &a.starts,
        threshold: a.threshold,
        confidence: a.confidence,
    };
    match fits::fit_series(&req)? {
        SeriesFit::Named {
            model,
            fit: f,
            forecast,
        } => {
            let v = fit::fit_json(&f, forecast.as_deref());
            if a.json {
                super::print_json(&v)?;
            } else {
                println!(
                    "model {} on {} points: converged {}, RSS {}, AICc {}",
                    model.id(),
                    f.n,
                    f.converged,
                    v["rss"],
                    v["aicc"]
                );
                for (j, name) in f.param_names.iter().enumerate() {
                    let se = f
                        .std_errors
                        .as_ref()
                        .and_then(|s| s.get(j))
                        .map_or("-".to_string(), |s| format!("{s:.6e}"));
                    println!("  {name:<8} {:>14.8e}  ± {se}", f.params[j]);
                }
                if forecast.is_some() {
                    println!("forecast: {}", serde_json::to_string(&v["forecast"])?);
                }
            }
            Ok(if f.converged { 0 } else { 1 })
        }
        SeriesFit::Auto(an) => {
            let Some(f) = &an.fit else { return Ok(1) };
            if a.json {
                let mut v = fit::fit_json(f, a.threshold.and(an.forecast.as_ref()));
                if let (serde_json::Value::Object(m), serde_json::Value::Object(extra)) =
                    (&mut v, fit::analysis_json(&an))
                {
                    for (k, val) in extra.into_iter().filter(|(k, _)| k != "forecast") {
                        m.entry(k).or_insert(val);
                    }
                }
                super::print_json(&v)?;
            } else {
                print!("{}", fit::render_text(&an));
            }
            Ok(0)
        }
    }
}
