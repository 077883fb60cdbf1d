//! `turnbook fit`: a lot's deactivation fit from the store, or any two-column series
//! (data from before turnbook) through the same engine.

use std::path::Path;

use crate::commands::{CmdResult, Failure};
use crate::config::Config;
use crate::fit::{self, AnalysisOptions, Criterion, FitOptions, LotSeries, ModelArg, ModelId};
use crate::store;

/// Fit a stored lot and show the ranking, parameters, forecast and abrupt-loss verdict.
pub fn lot(cfg: &Config, lot: &str, json: bool) -> CmdResult {
    let conn = store::open(&cfg.database_path())?;
    let state = crate::analysis::lot_state(&conn, cfg, lot)?;
    if state.record.is_none() && state.cycles.is_empty() {
        return Err(Failure::rejected(format!(
            "no lot '{lot}' is registered and no cycle names it"
        )));
    }
    let Some(a) = &state.analysis else {
        return Err(Failure::rejected(format!(
            "lot '{lot}' has no cycle with a computable {} yet (pending: {})",
            cfg.fitting.measure,
            state.attention.join("; ")
        )));
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
            m.insert("lot".into(), serde_json::Value::String(lot.to_string()));
            m.insert(
                "basis".into(),
                serde_json::Value::String(state.basis.clone()),
            );
        }
        println!("{}", serde_json::to_string_pretty(&v)?);
    } else {
        println!(
            "lot {lot}: {} against {}",
            cfg.fitting.measure, cfg.fitting.axis
        );
        print!("{}", fit::render_text(a));
        println!(
            "Forecasts are advisory: batch release follows QA procedures and local regulations."
        );
    }
    Ok(0)
}

/// Fit a CSV series (header row; x first column, y second).
pub fn series(
    file: &Path,
    model: &str,
    starts: &[String],
    threshold: Option<f64>,
    confidence: f64,
    json: bool,
) -> CmdResult {
    let text = std::fs::read_to_string(file)
        .map_err(|e| Failure::usage(format!("cannot read --series {}: {e}", file.display())))?;
    let (x, y) = fit::read_series_csv(&text)
        .map_err(|e| Failure::rejected(format!("{}: {e}", file.display())))?;
    let model = fit::parse_model_arg(model).map_err(|e| Failure::usage(format!("--model: {e}")))?;
    let mut start = Vec::new();
    for s in starts {
        start.push(
            fit::parse_start_arg(s).map_err(|e| Failure::usage(format!("--start {s}: {e}")))?,
        );
    }
    if !(confidence > 0.5 && confidence < 1.0) {
        return Err(Failure::usage(
            "--confidence: expected a probability between 0.5 and 1, e.g. 0.9",
        ));
    }
    let (x_first, x_last) = x
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    match model {
        ModelArg::Model(m) => {
            let opts = FitOptions {
                start,
                ..FitOptions::default()
            };
            let f = fit::fit_model(m, &x, &y, &opts)
                .map_err(|e| Failure::rejected(format!("{}: {e}", file.display())))?;
            let fc = threshold
                .map(|t| fit::forecast(&f, Criterion::Absolute(t), confidence, x_first, x_last));
            if json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(&fit::fit_json(&f, fc.as_ref()))?
                );
            } else {
                let v = fit::fit_json(&f, fc.as_ref());
                println!(
                    "model {} on {} points: converged {}, RSS {}, AICc {}",
                    m.id(),
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
                if fc.is_some() {
                    println!("forecast: {}", serde_json::to_string(&v["forecast"])?);
                }
            }
            Ok(if f.converged { 0 } else { 1 })
        }
        ModelArg::Auto => {
            if !start.is_empty() {
                return Err(Failure::usage("--start needs a named --model, not auto"));
            }
            let opts = AnalysisOptions {
                criterion: threshold.map_or(Criterion::FractionOfFresh(0.5), Criterion::Absolute),
                confidence,
                candidates: ModelId::ALL.to_vec(),
                ..AnalysisOptions::default()
            };
            let a = fit::analyse(
                &LotSeries {
                    x,
                    y,
                    ..LotSeries::default()
                },
                &opts,
            );
            let Some(f) = &a.fit else {
                return Err(Failure::rejected(format!(
                    "{}: no model could be fitted ({})",
                    file.display(),
                    a.notes.join("; ")
                )));
            };
            if json {
                let mut v = fit::fit_json(f, threshold.and(a.forecast.as_ref()));
                if let (serde_json::Value::Object(m), serde_json::Value::Object(extra)) =
                    (&mut v, fit::analysis_json(&a))
                {
                    for (k, val) in extra.into_iter().filter(|(k, _)| k != "forecast") {
                        m.entry(k).or_insert(val);
                    }
                }
                println!("{}", serde_json::to_string_pretty(&v)?);
            } else {
                print!("{}", fit::render_text(&a));
            }
            Ok(0)
        }
    }
}
