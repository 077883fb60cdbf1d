//! One call for the shell: every candidate model fitted and ranked, the chosen one's
//! forecast, the abrupt-loss checks, the economics and the plot data of a lot.
//!
//! Censored points (conversion at saturation, so the activity is only a lower bound) are
//! left out of the least-squares fit, which assumes exact values; they are counted, and the
//! analysis flags every censored point whose lower bound lies above the fitted curve, since
//! that contradicts the fit.

use serde::{Deserialize, Serialize};

use super::abrupt::{AbruptLoss, cusum_down, prediction_check};
use super::choice::{Candidate, choose};
use super::economics::{EconomicInputs, EconomicResult, economic_replacement};
use super::engine::{FitOptions, FitResult, fit_model};
use super::forecast::{Criterion, Forecast, ForecastStatus, forecast, lifetime_ton, t_quantile};
use super::lm::LmOptions;
use super::models::ModelId;

/// Version of the numerical engine, stored beside each analysis so that a stored result
/// can be traced to the code that produced it.
pub const ENGINE_VERSION: &str = "turnbook-fit 1.0.0";

/// The measured activity of one lot over its cycles.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct LotSeries {
    /// Cycle number (or time on stream).
    pub x: Vec<f64>,
    /// Activity.
    pub y: Vec<f64>,
    /// Per point: true when y is only a lower bound (saturated conversion). Empty = none.
    #[serde(default)]
    pub censored: Vec<bool>,
    /// Per point: TON of that cycle, if known. Empty = none.
    #[serde(default)]
    pub ton: Vec<Option<f64>>,
}

/// What to analyse and how.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AnalysisOptions {
    pub criterion: Criterion,
    /// Confidence of intervals, e.g. 0.90.
    pub confidence: f64,
    /// Models to try; the default is every activity model (not the TON plateau).
    pub candidates: Vec<ModelId>,
    pub cusum_k: f64,
    pub cusum_h: f64,
    pub economics: Option<EconomicInputs>,
    /// Points of the plot grid.
    pub grid_points: usize,
    /// Iteration limit per candidate fit.
    pub max_iterations: usize,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        Self {
            // Half the fresh activity: a project default, to be set per process.
            criterion: Criterion::FractionOfFresh(0.5),
            confidence: 0.90,
            candidates: ModelId::ACTIVITY.to_vec(),
            cusum_k: 0.5,
            cusum_h: 4.5,
            economics: None,
            grid_points: 80,
            max_iterations: 200,
        }
    }
}

/// A parameter with its standard error.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NamedValue {
    pub name: String,
    pub value: f64,
    pub std_error: Option<f64>,
}

/// One tried model in the ranking.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RankEntry {
    pub model: ModelId,
    pub params: Vec<NamedValue>,
    pub rss: Option<f64>,
    pub aicc: Option<f64>,
    /// AICc minus the lowest AICc.
    pub delta_aicc: Option<f64>,
    pub converged: bool,
    /// Why the model was not usable, when it was not.
    pub why_not: Option<String>,
    pub chosen: bool,
}

/// Censored points against the fit.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct CensoredCheck {
    pub count: usize,
    /// x of censored points whose lower bound lies above the fitted curve.
    pub above_fit: Vec<f64>,
}

/// Precomputed curves so that a report can draw without evaluating models.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct PlotData {
    pub x: Vec<f64>,
    pub fit: Vec<Option<f64>>,
    /// Pointwise confidence band of the fitted mean (delta method, Student t).
    pub lower: Vec<Option<f64>>,
    pub upper: Vec<Option<f64>>,
    pub threshold: Option<f64>,
}

/// Everything the shell stores about a lot's fit (as JSON).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotAnalysis {
    pub engine_version: String,
    pub n_points: usize,
    /// Points used by the least-squares fit (finite, not censored).
    pub n_fitted: usize,
    pub ranking: Vec<RankEntry>,
    pub chosen: Option<ModelId>,
    pub fit: Option<FitResult>,
    pub forecast: Option<Forecast>,
    pub censored: CensoredCheck,
    pub abrupt: Option<AbruptLoss>,
    pub economics: Option<EconomicResult>,
    pub plot: Option<PlotData>,
    /// Observed points in x order, for drawing: (x, y, censored).
    pub observed: Vec<(f64, f64, bool)>,
    /// Plain-words remarks (points dropped, nothing fitted, ...).
    pub notes: Vec<String>,
}

/// A start for `model` from the optimum of a simpler model it contains, when one was
/// fitted: the power law is first order at m = 1 and second order at m = 2, so it starts
/// from whichever of those fits the lot better (its RSS is the power law's there). None
/// means the model's own start grid. The caller falls back to the grid when the warm
/// start does not converge.
fn warm_start(
    model: ModelId,
    fits: &[(ModelId, Result<FitResult, String>)],
) -> Option<Vec<(String, f64)>> {
    if model != ModelId::Power {
        return None;
    }
    let (f, m) = fits
        .iter()
        .filter_map(|(id, r)| {
            let order = match id {
                ModelId::FirstOrder => 1.0,
                ModelId::SecondOrder => 2.0,
                _ => return None,
            };
            r.as_ref()
                .ok()
                .filter(|f| f.converged && f.params.iter().all(|v| v.is_finite()))
                .map(|f| (f, order))
        })
        .min_by(|a, b| a.0.rss.total_cmp(&b.0.rss))?;
    Some(vec![
        ("a0".to_string(), *f.params.first()?),
        ("kd".to_string(), *f.params.get(1)?),
        ("m".to_string(), m),
    ])
}

fn finite_or_none(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// Analyses one lot. Never fails: what cannot be computed is absent, with a note.
pub fn analyse(series: &LotSeries, opts: &AnalysisOptions) -> LotAnalysis {
    let mut notes = Vec::new();
    let n_points = series.x.len().min(series.y.len());
    if series.x.len() != series.y.len() {
        notes.push(format!(
            "x has {} values and y {}; only the first {n_points} pairs are used",
            series.x.len(),
            series.y.len()
        ));
    }
    let mut pts: Vec<(f64, f64, bool, Option<f64>)> = Vec::with_capacity(n_points);
    let mut dropped = 0;
    for i in 0..n_points {
        let (x, y) = (series.x[i], series.y[i]);
        if !(x.is_finite() && y.is_finite()) {
            dropped += 1;
            continue;
        }
        let c = series.censored.get(i).copied().unwrap_or(false);
        let t = series.ton.get(i).copied().flatten();
        pts.push((x, y, c, t));
    }
    if dropped > 0 {
        notes.push(format!(
            "{dropped} points with non-finite x or y were left out"
        ));
    }
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let (fx, fy): (Vec<f64>, Vec<f64>) = pts.iter().filter(|p| !p.2).map(|p| (p.0, p.1)).unzip();
    let n_censored = pts.iter().filter(|p| p.2).count();
    let mut out = LotAnalysis {
        engine_version: ENGINE_VERSION.to_string(),
        n_points,
        n_fitted: fx.len(),
        ranking: Vec::new(),
        chosen: None,
        fit: None,
        forecast: None,
        censored: CensoredCheck {
            count: n_censored,
            above_fit: Vec::new(),
        },
        abrupt: None,
        economics: None,
        plot: None,
        observed: pts.iter().map(|p| (p.0, p.1, p.2)).collect(),
        notes,
    };

    // A lot's candidate that needs more than this is wandering along a degenerate valley
    // (e.g. two sites collapsing into one); it is reported as not converged instead.
    // Ten digits in the parameters are far more than a forecast can use, and the last
    // digits of the NIST-grade defaults cost iterations on every lot.
    let fit_opts = FitOptions {
        lm: LmOptions {
            max_iterations: opts.max_iterations,
            ftol: 1e-12,
            xtol: 1e-10,
            gtol: 1e-10,
            ..LmOptions::default()
        },
        ..FitOptions::default()
    };
    let mut fits: Vec<(ModelId, Result<FitResult, String>)> = Vec::new();
    for &m in &opts.candidates {
        let r = if fx.len() <= m.n_params() + 1 {
            Err(format!(
                "{} points are too few for {} parameters (AICc needs n > p + 1)",
                fx.len(),
                m.n_params()
            ))
        } else {
            let warm = warm_start(m, &fits).and_then(|start| {
                let opts = FitOptions {
                    start,
                    ..fit_opts.clone()
                };
                fit_model(m, &fx, &fy, &opts).ok().filter(|f| f.converged)
            });
            match warm {
                Some(f) => Ok(f),
                None => fit_model(m, &fx, &fy, &fit_opts).map_err(|e| e.to_string()),
            }
        };
        match &r {
            Ok(f) if !f.converged => {
                tracing::debug!(
                    model = m.id(),
                    reason = f.reason.describe(),
                    "fit not converged"
                )
            }
            Err(e) => tracing::debug!(model = m.id(), error = %e, "fit not attempted"),
            _ => {}
        }
        fits.push((m, r));
    }
    let cands: Vec<Candidate> = fits
        .iter()
        .map(|(m, r)| match r {
            Ok(f) => Candidate {
                p: m.n_params(),
                aicc: f.aicc,
                usable: f.converged && f.params.iter().all(|v| v.is_finite()),
            },
            Err(_) => Candidate {
                p: m.n_params(),
                aicc: None,
                usable: false,
            },
        })
        .collect();
    let chosen_idx = choose(&cands);
    let best_aicc = cands
        .iter()
        .filter(|c| c.usable)
        .filter_map(|c| c.aicc)
        .min_by(|a, b| a.total_cmp(b));
    for (i, (m, r)) in fits.iter().enumerate() {
        let entry = match r {
            Ok(f) => RankEntry {
                model: *m,
                params: f
                    .param_names
                    .iter()
                    .enumerate()
                    .map(|(j, name)| NamedValue {
                        name: name.clone(),
                        value: f.params[j],
                        std_error: f.std_errors.as_ref().and_then(|s| finite_or_none(s[j])),
                    })
                    .collect(),
                rss: finite_or_none(f.rss),
                aicc: f.aicc,
                delta_aicc: f.aicc.zip(best_aicc).map(|(a, b)| a - b),
                converged: f.converged,
                why_not: (!f.converged).then(|| f.reason.describe().to_string()),
                chosen: chosen_idx == Some(i),
            },
            Err(e) => RankEntry {
                model: *m,
                params: Vec::new(),
                rss: None,
                aicc: None,
                delta_aicc: None,
                converged: false,
                why_not: Some(e.clone()),
                chosen: false,
            },
        };
        out.ranking.push(entry);
    }
    out.ranking.sort_by(|a, b| match (a.aicc, b.aicc) {
        (Some(x), Some(y)) => x.total_cmp(&y),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => std::cmp::Ordering::Equal,
    });
    let Some(ci) = chosen_idx else {
        out.notes
            .push("no model could be fitted and chosen".to_string());
        return out;
    };
    let (model, Ok(fit)) = (&fits[ci].0, &fits[ci].1) else {
        return out;
    };
    let model = *model;
    out.chosen = Some(model);

    let (x_first, x_last) = (fx[0], fx[fx.len() - 1]);
    let mut fc = forecast(fit, opts.criterion, opts.confidence, x_first, x_last);
    if pts.iter().any(|p| p.3.is_some())
        && let Some(xs) = fc.x
    {
        let ax: Vec<f64> = pts.iter().map(|p| p.0).collect();
        let ay: Vec<f64> = pts.iter().map(|p| p.1).collect();
        let at: Vec<Option<f64>> = pts.iter().map(|p| p.3).collect();
        fc.lifetime_ton = lifetime_ton(fit, &ax, &ay, &at, xs);
    }

    out.censored.above_fit = pts
        .iter()
        .filter(|p| p.2 && fit.predict(p.0) < p.1)
        .map(|p| p.0)
        .collect();

    // Abrupt loss: the newest fitted point against the fit on the points before it.
    let prediction = if fx.len() > model.n_params() + 1 {
        let k = fx.len() - 1;
        let opts_prev = FitOptions {
            start: fit
                .param_names
                .iter()
                .cloned()
                .zip(fit.params.iter().copied())
                .collect(),
            ..fit_opts.clone()
        };
        fit_model(model, &fx[..k], &fy[..k], &opts_prev)
            .ok()
            .filter(|f| f.converged)
            .and_then(|f| prediction_check(&f, fx[k], fy[k], opts.confidence))
    } else {
        None
    };
    let cusum = fit.sigma.filter(|s| *s > 0.0).map(|s| {
        let z: Vec<f64> = fx
            .iter()
            .zip(&fy)
            .map(|(&x, &y)| (y - fit.predict(x)) / s)
            .collect();
        cusum_down(&z, opts.cusum_k, opts.cusum_h)
    });
    let suspected = prediction.as_ref().is_some_and(|p| p.below)
        || cusum.as_ref().is_some_and(|c| c.last > c.h);
    out.abrupt = Some(AbruptLoss {
        prediction,
        cusum,
        suspected,
    });

    out.economics = opts
        .economics
        .as_ref()
        .and_then(|e| economic_replacement(fit, e));

    // Plot grid: from the first cycle (or 0) to past the forecast, within reason.
    let span = (x_last - x_first).max(1.0);
    let mut x_end = x_last;
    if let Some(xs) = fc.x.filter(|_| fc.status != ForecastStatus::ReachedAlready) {
        x_end = x_end.max((fc.upper.unwrap_or(xs)).min(x_last + 3.0 * span) * 1.05);
    }
    let x_start = x_first.min(0.0);
    let np = opts.grid_points.clamp(2, 10_000);
    let t = t_quantile(opts.confidence, fit.dof);
    let mut plot = PlotData {
        threshold: fc.threshold,
        x: Vec::with_capacity(np),
        fit: Vec::with_capacity(np),
        lower: Vec::with_capacity(np),
        upper: Vec::with_capacity(np),
    };
    for i in 0..np {
        let x = x_start + (x_end - x_start) * i as f64 / (np - 1) as f64;
        let y = fit.predict(x);
        let half = t.zip(fit.mean_variance(x)).map(|(t, v)| t * v.sqrt());
        plot.x.push(x);
        plot.fit.push(finite_or_none(y));
        plot.lower.push(half.and_then(|h| finite_or_none(y - h)));
        plot.upper.push(half.and_then(|h| finite_or_none(y + h)));
    }
    out.plot = Some(plot);
    out.forecast = Some(fc);
    out.fit = Some(fit.clone());
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn series(n: usize, f: impl Fn(f64) -> f64) -> LotSeries {
        let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
        let y = x
            .iter()
            .enumerate()
            .map(|(i, &v)| f(v) + if i % 2 == 0 { 0.004 } else { -0.004 })
            .collect();
        LotSeries {
            x,
            y,
            ..LotSeries::default()
        }
    }

    #[test]
    fn first_order_lot_is_analysed_end_to_end() {
        let s = series(25, |x| (-0.02 * x).exp());
        let a = analyse(&s, &AnalysisOptions::default());
        assert_eq!(a.ranking.len(), 6);
        let chosen = a.chosen.expect("a model");
        // Several models fit a clean exponential equally well; the rule must pick a
        // 2-parameter one.
        assert_eq!(chosen.n_params(), 2, "{:?}", a.ranking);
        let fc = a.forecast.as_ref().expect("forecast");
        assert_eq!(fc.status, ForecastStatus::Ahead);
        let abrupt = a.abrupt.as_ref().expect("abrupt");
        assert!(!abrupt.suspected, "{abrupt:?}");
        let plot = a.plot.as_ref().expect("plot");
        assert_eq!(plot.x.len(), 80);
        let js = serde_json::to_string(&a).expect("serialise");
        let back: LotAnalysis = serde_json::from_str(&js).expect("deserialise");
        assert_eq!(back.chosen, a.chosen);
        assert_eq!(back.ranking.len(), a.ranking.len());
    }

    #[test]
    fn sudden_drop_is_suspected() {
        let mut s = series(20, |x| (-0.02 * x).exp());
        if let Some(last) = s.y.last_mut() {
            *last -= 0.3;
        }
        let a = analyse(&s, &AnalysisOptions::default());
        let ab = a.abrupt.expect("abrupt");
        assert!(ab.suspected);
        assert!(ab.prediction.expect("check").below);
    }

    #[test]
    fn censored_points_are_excluded_and_flagged() {
        let mut s = series(15, |x| (-0.05 * x).exp());
        s.censored = vec![false; 15];
        s.censored[3] = true;
        s.y[3] = 1.5; // a lower bound above the curve: contradicts the fit
        s.censored[5] = true;
        s.y[5] = 0.1; // a lower bound far below: consistent
        let a = analyse(&s, &AnalysisOptions::default());
        assert_eq!(a.censored.count, 2);
        assert_eq!(a.n_fitted, 13);
        assert_eq!(a.censored.above_fit, vec![4.0]);
    }

    #[test]
    fn hostile_input_gives_notes_not_panics() {
        let s = LotSeries {
            x: vec![1.0, f64::NAN, 3.0],
            y: vec![1.0, 0.9],
            ..LotSeries::default()
        };
        let a = analyse(&s, &AnalysisOptions::default());
        assert_eq!(a.chosen, None);
        assert!(a.notes.len() >= 2, "{:?}", a.notes);
        let empty = analyse(&LotSeries::default(), &AnalysisOptions::default());
        assert_eq!(empty.chosen, None);
        assert!(empty.ranking.iter().all(|r| r.why_not.is_some()));
    }
}
