//! The deactivation fit of a stored lot, or of any two-column series (data from before
//! turnbook) through the same engine.

use super::error::{NotebookError, Result};
use super::lots::{LotState, known_lot};
use crate::config::Config;
use crate::fit::{
    self, AnalysisOptions, Criterion, FitOptions, FitResult, Forecast, LotAnalysis, LotSeries,
    ModelArg, ModelId,
};

/// A stored lot with its analysis; refused when the lot has no computable cycle yet.
pub fn lot_fit(cfg: &Config, lot: &str) -> Result<LotState> {
    let state = known_lot(cfg, lot)?;
    if state.analysis.is_none() {
        return Err(NotebookError::Refused(format!(
            "lot '{lot}' has no cycle with a computable {} yet (pending: {})",
            cfg.fitting.measure,
            state.attention.join("; ")
        )));
    }
    Ok(state)
}

/// What a series fit asked for returns.
#[derive(Debug)]
pub enum SeriesFit {
    /// One named model, with the forecast when a threshold was given.
    Named {
        model: ModelId,
        fit: Box<FitResult>,
        forecast: Option<Box<Forecast>>,
    },
    /// Every candidate ranked by AICc (`auto`).
    Auto(Box<LotAnalysis>),
}

/// How to fit a series.
#[derive(Debug, Clone)]
pub struct SeriesRequest<'a> {
    /// A label for messages, e.g. the file name.
    pub name: &'a str,
    /// The series as CSV text: a header row, x in the first column, y in the second.
    pub csv: &'a str,
    pub model: &'a str,
    /// Start values `name=number` for a named model.
    pub starts: &'a [String],
    pub threshold: Option<f64>,
    pub confidence: f64,
}

/// Fit a two-column series with a named model or `auto`.
pub fn fit_series(req: &SeriesRequest<'_>) -> Result<SeriesFit> {
    let name = req.name;
    let (x, y) = fit::read_series_csv(req.csv)
        .map_err(|e| NotebookError::Refused(format!("{name}: {e}")))?;
    let model = fit::parse_model_arg(req.model)
        .map_err(|e| NotebookError::Usage(format!("--model: {e}")))?;
    let mut start = Vec::new();
    for s in req.starts {
        start.push(
            fit::parse_start_arg(s)
                .map_err(|e| NotebookError::Usage(format!("--start {s}: {e}")))?,
        );
    }
    if !(req.confidence > 0.5 && req.confidence < 1.0) {
        return Err(NotebookError::Usage(
            "--confidence: expected a probability between 0.5 and 1, e.g. 0.9".into(),
        ));
    }
    match model {
        ModelArg::Model(m) => {
            let (x_first, x_last) = x
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                    (a.min(v), b.max(v))
                });
            let opts = FitOptions {
                start,
                ..FitOptions::default()
            };
            let f = fit::fit_model(m, &x, &y, &opts)
                .map_err(|e| NotebookError::Refused(format!("{name}: {e}")))?;
            let forecast = req.threshold.map(|t| {
                Box::new(fit::forecast(
                    &f,
                    Criterion::Absolute(t),
                    req.confidence,
                    x_first,
                    x_last,
                ))
            });
            Ok(SeriesFit::Named {
                model: m,
                fit: Box::new(f),
                forecast,
            })
        }
        ModelArg::Auto => {
            if !start.is_empty() {
                return Err(NotebookError::Usage(
                    "--start needs a named --model, not auto".into(),
                ));
            }
            let opts = AnalysisOptions {
                criterion: req
                    .threshold
                    .map_or(Criterion::FractionOfFresh(0.5), Criterion::Absolute),
                confidence: req.confidence,
                candidates: ModelId::ALL.to_vec(),
                ..AnalysisOptions::default()
            };
            let series = LotSeries {
                x,
                y,
                ..LotSeries::default()
            };
            let a = fit::analyse(&series, &opts);
            if a.fit.is_none() {
                return Err(NotebookError::Refused(format!(
                    "{name}: no model could be fitted ({})",
                    a.notes.join("; ")
                )));
            }
            Ok(SeriesFit::Auto(Box::new(a)))
        }
    }
}
