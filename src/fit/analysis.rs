//! One call for the shell: every candidate model fitted and ranked, the model-averaged
//! forecast, the step-change monitoring, the next batch, the economics and the plot data
//! of a lot.
//!
//! Order of the work: the cycles are monitored for a step change first ([`super::abrupt`]).
//! When the CUSUM signals and a level-shift model beats every single-regime model by AICc,
//! the lot's trend (the ranking, the chosen fit, the fresh activity and so a
//! fraction-of-fresh criterion) is fitted on the cycles before the change only; the
//! forecast is withheld until the new level has [`MIN_NEW_LEVEL`] cycles, and then comes
//! from the new level's own trend against the criterion anchored before the change.
//! Otherwise every cycle is used. The forecast averages the usable candidates with Akaike
//! weights ([`super::average`]); a single candidate gives its own forecast.
//!
//! With a family prior ([`AnalysisOptions::prior`]), a young lot's forecast and next cycle
//! are the posterior ones of [`super::population`], the lot-alone ones kept beside them in
//! [`LotAnalysis::pooled`]; an accepted step change keeps precedence (the prior is then
//! only shown).
//!
//! Physical bounds hold by default (see [`physical_bounds`]); a fit that ends at a bound,
//! or that did not converge, is shown as such, without ΔAICc or weight, and is never
//! chosen nor averaged.
//!
//! Points with standard errors are weighted ([`super::weights`]: relative weights 1/sd², s²
//! still estimated from the weighted residuals); every fit of the lot, its AICc (weighted
//! RSS), the level-shift model and the prediction checks use the same weights. Without
//! standard errors the fits are unweighted.
//!
//! Censored points (conversion at saturation, so the activity is only a lower bound) enter
//! the lot's trend as bounds: every candidate is then fitted by the censored likelihood
//! ([`super::censored`]), started from its least-squares fit on the exact points, and the
//! ranking, the average and the forecast use those fits. The step-change monitoring and the
//! level-shift model stay on the exact points (their AICc against the exact points'
//! least-squares fits). The analysis still flags every censored point whose lower bound
//! lies above the fitted curve, since that contradicts the fit.

use serde::{Deserialize, Serialize};

use super::abrupt::{AbruptLoss, LevelShift, fit_level_shift, monitor, prediction_check_weighted};
use super::average::{Averaged, ModelWeight, NextCycle};
use super::censored::fit_censored;
use super::choice::{Candidate, choose};
use super::economics::{EconomicInputs, EconomicResult, economic_replacement};
use super::engine::{FitOptions, FitResult, fit_model};
use super::forecast::{
    Criterion, Forecast, ForecastStatus, forecast_with, lifetime_ton, t_quantile,
};
use super::lm::LmOptions;
use super::models::ModelId;
use super::population::{FamilyPrior, LotEstimate, Pooled, pooled};
use super::weights::{SdFunction, point_weights};

/// Version of the numerical engine, stored beside each analysis so that a stored result
/// can be traced to the code that produced it.
pub const ENGINE_VERSION: &str = "turnbook-fit 1.3.2";

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
    /// Per point: standard error of y (propagated from the assay's uncertainty), if known.
    /// Empty = unweighted.
    #[serde(default)]
    pub sd: Vec<Option<f64>>,
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
    /// Hold the physical bounds of [`physical_bounds`] (the default).
    #[serde(default = "yes")]
    pub physical_bounds: bool,
    /// The family's prior for a young lot ([`super::population`]): when given, the
    /// headline forecast and next cycle are the pooled ones, the lot-alone ones stay in
    /// [`LotAnalysis::pooled`]. None: the lot alone.
    #[serde(default)]
    pub prior: Option<FamilyPrior>,
}

fn yes() -> bool {
    true
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
            physical_bounds: true,
            prior: None,
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
    /// A parameter ended at a physical bound (or a_inf above a0).
    #[serde(default)]
    pub at_bound: bool,
    /// Akaike weight in the averaged forecast (None: not averaged).
    #[serde(default)]
    pub weight: Option<f64>,
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
    /// The averaged models and their Akaike weights, heaviest first.
    #[serde(default)]
    pub weights: Vec<ModelWeight>,
    /// The next cycle's predicted activity against the criterion.
    #[serde(default)]
    pub next_cycle: Option<NextCycle>,
    /// Cycles the lot's trend was fitted on (all fitted cycles, or those before a change).
    #[serde(default)]
    pub trend_cycles: usize,
    /// With a family prior: the pooled fit and forecast, and the lot-alone forecast.
    #[serde(default)]
    pub pooled: Option<Pooled>,
}

/// Cycles of a new level after a step change before its own trend is fitted and a
/// forecast offered again (a two-parameter trend with two degrees of freedom left).
pub const MIN_NEW_LEVEL: usize = 4;

/// The documented range of the power-law order m: from zero order (a straight fall to
/// zero, m = 0) to m = 5, beyond which a catalyst's deactivation order is not physical.
pub const POWER_M_RANGE: (f64, f64) = (0.0, 5.0);

/// Physical bounds by parameter name: rates (kd) ≥ 0, activities a0, a_inf, ton_max ≥ 0,
/// the power-law order m in [`POWER_M_RANGE`]; a_inf ≤ a0 is checked after the fit. The
/// straight line is left free (a rising line is how a stable lot shows), and so are two
/// sites, whose edges variable projection recognises as degenerate fits.
pub fn physical_bounds(m: ModelId) -> Vec<(String, f64, f64)> {
    let inf = f64::INFINITY;
    let b = |n: &str, lo: f64, hi: f64| (n.to_string(), lo, hi);
    match m {
        ModelId::Linear | ModelId::TwoSite => Vec::new(),
        ModelId::FirstOrder | ModelId::SecondOrder => vec![b("a0", 0.0, inf), b("kd", 0.0, inf)],
        ModelId::FirstOrderResidual => {
            vec![b("a0", 0.0, inf), b("a_inf", 0.0, inf), b("kd", 0.0, inf)]
        }
        ModelId::Power => vec![
            b("a0", 0.0, inf),
            b("kd", 0.0, inf),
            b("m", POWER_M_RANGE.0, POWER_M_RANGE.1),
        ],
        ModelId::PowerResidual => vec![
            b("a0", 0.0, inf),
            b("a_inf", 0.0, inf),
            b("kd", 0.0, inf),
            b("m", POWER_M_RANGE.0, POWER_M_RANGE.1),
        ],
        ModelId::Plateau => vec![b("ton_max", 0.0, inf), b("kd", 0.0, inf)],
    }
}

/// Whether a fitted parameter sits on one of `bounds` (or a_inf exceeds a0).
fn at_bound(f: &FitResult, bounds: &[(String, f64, f64)]) -> bool {
    let on = |v: f64, b: f64| b.is_finite() && (v - b).abs() <= 1e-9 * (1.0 + b.abs());
    let hit = bounds.iter().any(|(name, lo, hi)| {
        f.param(name)
            .is_some_and(|v| on(v, *lo) || on(v, *hi) || v < *lo || v > *hi)
    });
    let inverted = matches!(
        f.model,
        ModelId::FirstOrderResidual | ModelId::PowerResidual
    ) && matches!((f.param("a0"), f.param("a_inf")), (Some(a0), Some(ai)) if ai > a0);
    !bounds.is_empty() && (hit || inverted)
}

/// A fit that ends on a physical bound, for use when no interior fit exists: it keeps the
/// covariance of the unconstrained problem at that point, which still carries the bounded
/// parameter's uncertainty (holding that parameter fixed instead gave intervals far too
/// narrow in simulation). None without a covariance.
fn held_at_bounds(f: &FitResult) -> Option<FitResult> {
    f.covariance.as_ref().map(|_| f.clone())
}

/// Starts for `model` from the optima of simpler models it contains, when they were
/// fitted, best (lowest RSS) first: the power law is first order at m = 1 and second order
/// at m = 2, so it starts from whichever of those fits the lot better (its RSS is the power
/// law's there); the power law with residual activity is first order with residual
/// activity at m = 1 and the power law at a_inf = 0, and starts from both in turn. Empty
/// means the model's own start grid. The caller falls back to the grid when no warm start
/// converges.
fn warm_starts(model: ModelId, fits: &[Fitted]) -> Vec<Vec<(String, f64)>> {
    let mut found: Vec<(f64, Vec<f64>)> = fits
        .iter()
        .filter_map(|c| {
            let f = c.usable_fit()?;
            let p = &f.params;
            let start = match (model, c.model) {
                (ModelId::Power, ModelId::FirstOrder) => vec![p[0], p[1], 1.0],
                (ModelId::Power, ModelId::SecondOrder) => vec![p[0], p[1], 2.0],
                (ModelId::PowerResidual, ModelId::FirstOrderResidual) => {
                    vec![p[0], p[1], p[2], 1.0]
                }
                (ModelId::PowerResidual, ModelId::Power) => vec![p[0], 0.0, p[1], p[2]],
                _ => return None,
            };
            (start.len() == model.n_params()).then_some((f.rss, start))
        })
        .collect();
    found.sort_by(|a, b| a.0.total_cmp(&b.0));
    // The power law keeps its single best start.
    if model == ModelId::Power {
        found.truncate(1);
    }
    found
        .into_iter()
        .map(|(_, v)| {
            model
                .param_names()
                .iter()
                .map(|n| n.to_string())
                .zip(v)
                .collect()
        })
        .collect()
}

fn finite_or_none(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// One candidate's fit.
#[derive(Debug, Clone)]
struct Fitted {
    model: ModelId,
    result: Result<FitResult, String>,
    at_bound: bool,
    /// For a fit at a bound: the fit with those parameters held there.
    held: Option<FitResult>,
}

impl Fitted {
    /// The fit when it may be chosen and averaged: converged, finite, off the bounds, with
    /// an AICc.
    fn usable_fit(&self) -> Option<&FitResult> {
        self.result.as_ref().ok().filter(|f| {
            f.converged
                && !self.at_bound
                && f.aicc.is_some()
                && f.params.iter().all(|v| v.is_finite())
        })
    }
}

/// Fits every candidate to (x, y) by least squares, weighted by `w` when given.
fn fit_candidates(
    x: &[f64],
    y: &[f64],
    w: Option<&[f64]>,
    candidates: &[ModelId],
    fit_opts: &FitOptions,
    bounded: bool,
) -> Vec<Fitted> {
    let mut fits: Vec<Fitted> = Vec::with_capacity(candidates.len());
    for &m in candidates {
        let bounds = if bounded {
            physical_bounds(m)
        } else {
            Vec::new()
        };
        let opts = FitOptions {
            bounds: bounds.clone(),
            weights: w.map(<[f64]>::to_vec),
            ..fit_opts.clone()
        };
        let r = if x.len() <= m.n_params() + 1 {
            Err(format!(
                "{} points are too few for {} parameters (AICc needs n > p + 1)",
                x.len(),
                m.n_params()
            ))
        } else {
            // The first warm start that converges inside the bounds; else the first that
            // ends on a bound, which has found the constrained optimum: the grid would only
            // find it again, slowly.
            let mut on_bound = None;
            let mut warm = None;
            for start in warm_starts(m, &fits) {
                let o = FitOptions {
                    start,
                    ..opts.clone()
                };
                let Ok(f) = fit_model(m, x, y, &o) else {
                    continue;
                };
                let bound = at_bound(&f, &bounds);
                if f.converged && !bound {
                    warm = Some(f);
                    break;
                }
                if on_bound.is_none() && (f.converged || bound) {
                    on_bound = Some(f);
                }
            }
            match warm.or(on_bound) {
                Some(f) => Ok(f),
                None => fit_model(m, x, y, &opts).map_err(|e| e.to_string()),
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
        fits.push(Fitted::new(m, r, &bounds));
    }
    fits
}

impl Fitted {
    /// A candidate from its fit (or why there is none), judged against its `bounds`.
    fn new(
        model: ModelId,
        result: Result<FitResult, String>,
        bounds: &[(String, f64, f64)],
    ) -> Self {
        let at_bound = result.as_ref().is_ok_and(|f| at_bound(f, bounds));
        let held = match &result {
            Ok(f) if at_bound && f.params.iter().all(|v| v.is_finite()) => held_at_bounds(f),
            _ => None,
        };
        Fitted {
            model,
            result,
            at_bound,
            held,
        }
    }
}

/// The points of a stretch of the lot with censored points among them, and the candidates
/// refitted to it by the censored likelihood; None when the stretch has no censored point.
struct Bounded {
    fits: Vec<Fitted>,
    /// x of every point of the stretch (exact and censored), in order.
    x: Vec<f64>,
    censored: usize,
}

/// The candidates `ls` (least-squares fits to the exact points with lo ≤ x < hi) refitted
/// to every point in that stretch by the censored likelihood ([`fit_censored`]), each
/// started from its least-squares optimum. `pts` are (x, y, censored) in x order, `w` their
/// weights. A candidate whose exact-point fit did not converge keeps that verdict; one with
/// too few exact points for a least-squares AICc is fitted to them only for a start.
fn bounded_trend(
    pts: &[(f64, f64, bool)],
    w: Option<&[f64]>,
    (lo, hi): (f64, f64),
    ls: &[Fitted],
    fit_opts: &FitOptions,
    bounded: bool,
) -> Option<Bounded> {
    let idx: Vec<usize> = (0..pts.len())
        .filter(|&i| pts[i].0 >= lo && pts[i].0 < hi)
        .collect();
    let n_c = idx.iter().filter(|&&i| pts[i].2).count();
    if n_c == 0 {
        return None;
    }
    let x: Vec<f64> = idx.iter().map(|&i| pts[i].0).collect();
    let y: Vec<f64> = idx.iter().map(|&i| pts[i].1).collect();
    let c: Vec<bool> = idx.iter().map(|&i| pts[i].2).collect();
    let w: Option<Vec<f64>> = w.map(|w| idx.iter().map(|&i| w[i]).collect());
    let exact: Vec<usize> = (0..x.len()).filter(|&i| !c[i]).collect();
    let (n, n_e) = (x.len(), exact.len());
    let fits = ls
        .iter()
        .map(|cand| {
            let m = cand.model;
            let p = m.n_params();
            let bounds = if bounded {
                physical_bounds(m)
            } else {
                Vec::new()
            };
            let opts = FitOptions {
                bounds: bounds.clone(),
                weights: w.clone(),
                ..fit_opts.clone()
            };
            let start = match &cand.result {
                _ if n <= p + 1 => Err(format!(
                    "{n} points are too few for {p} parameters (AICc needs n > p + 1)"
                )),
                _ if n_e <= p => Err(format!(
                    "{n_e} uncensored points are too few for {p} parameters in a censored fit"
                )),
                Ok(f) if f.converged || cand.at_bound => Ok(f.params.clone()),
                Ok(f) => Err(f.reason.describe().to_string()),
                Err(_) => {
                    let ex: Vec<f64> = exact.iter().map(|&i| x[i]).collect();
                    let ey: Vec<f64> = exact.iter().map(|&i| y[i]).collect();
                    let o = FitOptions {
                        weights: w.as_ref().map(|w| exact.iter().map(|&i| w[i]).collect()),
                        ..opts.clone()
                    };
                    fit_model(m, &ex, &ey, &o)
                        .map_err(|e| e.to_string())
                        .map(|f| f.params)
                }
            };
            let r = start.and_then(|s| {
                let o = FitOptions {
                    start: m
                        .param_names()
                        .iter()
                        .map(|n| n.to_string())
                        .zip(s)
                        .collect(),
                    ..opts
                };
                fit_censored(m, &x, &y, &c, &o).map_err(|e| e.to_string())
            });
            if let Ok(f) = &r
                && !f.converged
            {
                tracing::debug!(
                    model = m.id(),
                    reason = f.reason.describe(),
                    "censored fit not converged"
                );
            }
            Fitted::new(m, r, &bounds)
        })
        .collect();
    Some(Bounded {
        fits,
        x,
        censored: n_c,
    })
}

/// The fit the choice rule picks among `fits`, when one is usable.
fn best_usable(fits: &[Fitted]) -> Option<&FitResult> {
    let cands: Vec<Candidate> = fits
        .iter()
        .map(|c| Candidate {
            p: c.model.n_params(),
            aicc: c.result.as_ref().ok().and_then(|f| f.aicc),
            usable: c.usable_fit().is_some(),
        })
        .collect();
    fits.get(choose(&cands)?)?.usable_fit()
}

/// The ranking of `fits` and the index of the chosen one.
fn rank(fits: &[Fitted], weights: &[ModelWeight]) -> (Vec<RankEntry>, Option<usize>) {
    let cands: Vec<Candidate> = fits
        .iter()
        .map(|c| Candidate {
            p: c.model.n_params(),
            aicc: c.result.as_ref().ok().and_then(|f| f.aicc),
            usable: c.usable_fit().is_some(),
        })
        .collect();
    let chosen_idx = choose(&cands);
    let best_aicc = cands
        .iter()
        .filter(|c| c.usable)
        .filter_map(|c| c.aicc)
        .min_by(|a, b| a.total_cmp(b));
    let mut ranking = Vec::with_capacity(fits.len());
    for (i, c) in fits.iter().enumerate() {
        let usable = cands[i].usable;
        let entry = match &c.result {
            Ok(f) => RankEntry {
                model: c.model,
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
                delta_aicc: if usable {
                    f.aicc.zip(best_aicc).map(|(a, b)| a - b)
                } else {
                    None
                },
                converged: f.converged,
                at_bound: c.at_bound,
                weight: weights
                    .iter()
                    .find(|w| w.model == c.model && usable)
                    .map(|w| w.weight),
                why_not: if !f.converged {
                    Some(f.reason.describe().to_string())
                } else if c.at_bound {
                    Some("a parameter ended at its physical bound".to_string())
                } else {
                    None
                },
                chosen: chosen_idx == Some(i),
            },
            Err(e) => RankEntry {
                model: c.model,
                params: Vec::new(),
                rss: None,
                aicc: None,
                delta_aicc: None,
                converged: false,
                at_bound: false,
                weight: None,
                why_not: Some(e.clone()),
                chosen: false,
            },
        };
        ranking.push(entry);
    }
    // Usable fits by AICc first; then the others, which never rank above them.
    ranking.sort_by(|a, b| {
        let key = |r: &RankEntry| (r.delta_aicc.is_none(), r.aicc.is_none());
        key(a).cmp(&key(b)).then_with(|| match (a.aicc, b.aicc) {
            (Some(x), Some(y)) => x.total_cmp(&y),
            _ => std::cmp::Ordering::Equal,
        })
    });
    (ranking, chosen_idx)
}

/// The step between cycles: the median of the last few differences of x (1 if unknown).
fn cycle_step(x: &[f64]) -> f64 {
    let mut d: Vec<f64> = x
        .windows(2)
        .rev()
        .take(5)
        .map(|w| w[1] - w[0])
        .filter(|v| *v > 0.0)
        .collect();
    if d.is_empty() {
        return 1.0;
    }
    d.sort_by(f64::total_cmp);
    d[d.len() / 2]
}

/// The next cycle from an average.
fn next_from_average(avg: &Averaged<'_>, x_next: f64, confidence: f64) -> Option<NextCycle> {
    let (pred, se, s2) = avg.predict(x_next);
    NextCycle::new(x_next, pred, se, s2, avg.t(confidence)?, avg.threshold)
}

/// The next cycle from a level-shift model.
fn next_from_shift(
    s: &LevelShift,
    x_next: f64,
    confidence: f64,
    threshold: f64,
) -> Option<NextCycle> {
    let se = s.mean_variance(x_next)?.sqrt();
    let s2 = s.sigma? * s.sigma?;
    NextCycle::new(
        x_next,
        s.predict(x_next),
        se,
        s2,
        t_quantile(confidence, s.dof)?,
        threshold,
    )
}

impl RankEntry {
    /// This lot-alone fit as an estimate for a family prior (see
    /// [`LotEstimate::new`]); `n` is the number of cycles it was fitted on.
    pub fn family_estimate(&self, lot: &str, n: usize) -> Option<LotEstimate> {
        let get = |name: &str| self.params.iter().find(|p| p.name == name);
        let (a0, kd) = (get("a0")?, get("kd")?);
        LotEstimate::new(
            lot,
            self.model,
            self.converged && !self.at_bound,
            (a0.value, a0.std_error?),
            (kd.value, kd.std_error?),
            self.rss?,
            n,
        )
    }
}

impl LotAnalysis {
    /// The lot-alone fit of `model` in the ranking (fitted on the trend's cycles) as an
    /// estimate for its family's prior.
    pub fn family_estimate(&self, lot: &str, model: ModelId) -> Option<LotEstimate> {
        self.ranking
            .iter()
            .find(|r| r.model == model)?
            .family_estimate(lot, self.trend_cycles)
    }
}

/// Applies a family prior to a lot's analysis `out`: stores the pooled result in
/// `out.pooled` and returns the headline forecast, the pooled one when it could be
/// computed, else `lot_alone`. `out.next_cycle` follows the headline. After an accepted
/// step change (`change`) the lot's own levels decide (a withheld forecast stays withheld)
/// and the prior is only shown.
#[allow(clippy::too_many_arguments)]
fn with_prior(
    out: &mut LotAnalysis,
    prior: &FamilyPrior,
    opts: &AnalysisOptions,
    (x, y, w): (&[f64], &[f64], Option<&[f64]>),
    change: Option<usize>,
    x_next: f64,
    lot_alone: Option<Forecast>,
) -> Option<Forecast> {
    let alone_next = out.next_cycle.take();
    let mut p = if change.is_some() {
        let mut d = pooled(
            prior,
            (&[], &[], None),
            opts.criterion,
            opts.confidence,
            x_next,
            &LmOptions::default(),
            lot_alone.clone(),
            alone_next.clone(),
        );
        d.why_not =
            Some("a step change was accepted: the lot's own levels decide the forecast".into());
        d
    } else {
        let lm = LmOptions {
            max_iterations: opts.max_iterations,
            ftol: 1e-12,
            xtol: 1e-10,
            gtol: 1e-10,
            ..LmOptions::default()
        };
        pooled(
            prior,
            (x, y, w),
            opts.criterion,
            opts.confidence,
            x_next,
            &lm,
            lot_alone.clone(),
            alone_next.clone(),
        )
    };
    let headline = if p.headline { p.forecast.clone() } else { None };
    let fc = match headline {
        Some(f) => {
            out.next_cycle = p.next_cycle.clone();
            Some(f)
        }
        None => {
            p.headline = false;
            out.next_cycle = alone_next;
            lot_alone
        }
    };
    out.pooled = Some(p);
    fc
}

/// Analyses one lot. Never fails: what cannot be computed is absent, with a note.
pub fn analyse(series: &LotSeries, opts: &AnalysisOptions) -> LotAnalysis {
    analyse_columns(Columns::of(series.clone()), opts)
}

/// [`analyse`] of a series it may free: the series' own columns become the analysis's,
/// so a lot of 200,000 cycles holds them once while its models are fitted.
pub fn analyse_owned(series: LotSeries, opts: &AnalysisOptions) -> LotAnalysis {
    analyse_columns(Columns::of(series), opts)
}

/// The points as the analysis reports them, (x, y, censored).
fn observed(xs: &[f64], ys: &[f64], flags: &[bool]) -> Vec<(f64, f64, bool)> {
    (0..xs.len()).map(|i| (xs[i], ys[i], flags[i])).collect()
}

/// A series' usable points in x order, as columns, with the notes on what was left out.
struct Columns {
    xs: Vec<f64>,
    ys: Vec<f64>,
    /// Censored (y only a lower bound).
    flags: Vec<bool>,
    /// TON of each point; empty when no point has one.
    tons: Vec<Option<f64>>,
    /// Standard error of each y; empty when no point has one.
    sds: Vec<Option<f64>>,
    /// Pairs in the series (usable or not).
    n_points: usize,
    notes: Vec<String>,
}

impl Columns {
    /// Keeps the pairs with finite x and y, in place, then orders them by x (stably: equal
    /// x keep the series' order).
    fn of(series: LotSeries) -> Self {
        let LotSeries {
            mut x,
            mut y,
            censored,
            ton,
            sd,
        } = series;
        let mut notes = Vec::new();
        let n_points = x.len().min(y.len());
        if x.len() != y.len() {
            notes.push(format!(
                "x has {} values and y {}; only the first {n_points} pairs are used",
                x.len(),
                y.len()
            ));
        }
        let has_ton = ton.iter().take(n_points).any(Option::is_some);
        let has_sd = sd.iter().take(n_points).any(Option::is_some);
        let mut flags = Vec::with_capacity(n_points);
        let mut tons = Vec::with_capacity(if has_ton { n_points } else { 0 });
        let mut sds = Vec::with_capacity(if has_sd { n_points } else { 0 });
        let mut kept = 0;
        for i in 0..n_points {
            let (xi, yi) = (x[i], y[i]);
            if !(xi.is_finite() && yi.is_finite()) {
                continue;
            }
            x[kept] = xi;
            y[kept] = yi;
            kept += 1;
            flags.push(censored.get(i).copied().unwrap_or(false));
            if has_ton {
                tons.push(ton.get(i).copied().flatten());
            }
            if has_sd {
                sds.push(sd.get(i).copied().flatten());
            }
        }
        drop((censored, ton, sd));
        x.truncate(kept);
        y.truncate(kept);
        let dropped = n_points - kept;
        if dropped > 0 {
            notes.push(format!(
                "{dropped} points with non-finite x or y were left out"
            ));
        }
        // Empty when no usable point has one: the weights are then None either way.
        if tons.iter().all(Option::is_none) {
            tons = Vec::new();
        }
        if sds.iter().all(Option::is_none) {
            sds = Vec::new();
        }
        let sorted = x.windows(2).all(|w| w[0].total_cmp(&w[1]).is_le());
        if !sorted {
            // A stable sort of the indices by x: the order a stable sort of the points gives.
            let mut idx: Vec<usize> = (0..kept).collect();
            idx.sort_by(|&a, &b| x[a].total_cmp(&x[b]));
            fn permuted<T: Copy>(v: &[T], idx: &[usize]) -> Vec<T> {
                if v.is_empty() {
                    return Vec::new();
                }
                idx.iter().map(|&i| v[i]).collect()
            }
            x = permuted(&x, &idx);
            y = permuted(&y, &idx);
            flags = permuted(&flags, &idx);
            tons = permuted(&tons, &idx);
            sds = permuted(&sds, &idx);
        }
        Columns {
            xs: x,
            ys: y,
            flags,
            tons,
            sds,
            n_points,
            notes,
        }
    }
}

fn analyse_columns(cols: Columns, opts: &AnalysisOptions) -> LotAnalysis {
    let Columns {
        xs,
        ys,
        flags,
        tons,
        sds,
        n_points,
        mut notes,
    } = cols;
    let n_censored = flags.iter().filter(|c| **c).count();
    // The exact points: all of them (the columns themselves) unless some are censored.
    let (fx_own, fy_own): (Vec<f64>, Vec<f64>) = if n_censored == 0 {
        (Vec::new(), Vec::new())
    } else {
        (0..xs.len())
            .filter(|&i| !flags[i])
            .map(|i| (xs[i], ys[i]))
            .unzip()
    };
    let (fx, fy): (&[f64], &[f64]) = if n_censored == 0 {
        (&xs, &ys)
    } else {
        (&fx_own, &fy_own)
    };
    // (x, y, censored) of every point, for the fits with censored cycles as bounds; empty
    // without censored cycles (those fits are then not made).
    let xyc: Vec<(f64, f64, bool)> = if n_censored == 0 {
        Vec::new()
    } else {
        (0..xs.len()).map(|i| (xs[i], ys[i], flags[i])).collect()
    };
    // Relative weights of every point, and of the exact points alone.
    let mut pw = point_weights(&sds, &flags);
    let exact_of = |w: &Vec<f64>| -> Vec<f64> {
        w.iter()
            .zip(&flags)
            .filter(|(_, c)| !**c)
            .map(|(w, _)| *w)
            .collect()
    };
    let mut fw_own: Option<Vec<f64>> = pw.as_ref().map(exact_of);
    if pw.is_some() {
        let known = sds.iter().filter(|s| s.is_some_and(|v| v > 0.0)).count();
        notes.push(format!(
            "weighted by 1/sd² from the standard errors of {known} of {} cycles",
            xs.len()
        ));
    }
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
        // Filled from the columns at the end: the fits come first.
        observed: Vec::new(),
        notes,
        weights: Vec::new(),
        next_cycle: None,
        trend_cycles: fx.len(),
        pooled: None,
    };

    // The TON plateau describes cumulative TON, not activity: with activity models in the
    // list it is not a candidate.
    let mut candidates = opts.candidates.clone();
    if candidates.contains(&ModelId::Plateau) && candidates.iter().any(|m| *m != ModelId::Plateau) {
        candidates.retain(|m| *m != ModelId::Plateau);
        out.notes.push(
            "plateau (a cumulative-TON model) is not tried among the activity models".to_string(),
        );
    }

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
    let bounded = opts.physical_bounds;

    // 1. Monitoring for a step change, and the single-regime fits on every cycle.
    let mut mon = monitor(fx, fy, opts.cusum_k, opts.cusum_h);
    // The normal scores are the monitor's working; only the CUSUM path is reported. Freed
    // before the fits (8 bytes a point).
    if let Some(m) = mon.as_mut() {
        m.z = Vec::new();
    }
    let mut all_fits = fit_candidates(fx, fy, fw_own.as_deref(), &candidates, &fit_opts, bounded);
    // Weights at the fitted values when the standard errors are a function of activity
    // (see super::weights): the first fit gives the activities, the fits are repeated.
    if pw.is_some()
        && let Some(func) = SdFunction::fit(&ys, &sds, &flags)
        && let Some(pilot) = best_usable(&all_fits)
    {
        let at_fit: Vec<Option<f64>> = (0..xs.len())
            .map(|i| {
                let y = if flags[i] {
                    ys[i]
                } else {
                    pilot.predict(xs[i])
                };
                func.at(y).or(sds[i])
            })
            .collect();
        pw = point_weights(&at_fit, &flags);
        fw_own = pw.as_ref().map(exact_of);
        all_fits = fit_candidates(fx, fy, fw_own.as_deref(), &candidates, &fit_opts, bounded);
        out.notes.push(
            "the standard errors follow the activity: weights taken at the fitted activities"
                .to_string(),
        );
    }
    let fw = fw_own.as_deref();
    let suspected = mon.as_ref().is_some_and(|m| m.alarm);
    let change_guess = mon.as_ref().and_then(|m| m.change_index);
    let mut shift = None;
    let mut change: Option<usize> = None;
    if suspected && let Some(at) = change_guess {
        let best_single = all_fits
            .iter()
            .filter_map(|c| c.usable_fit().and_then(|f| f.aicc))
            .min_by(|a, b| a.total_cmp(b));
        if let Some(mut s) = fit_level_shift(fx, fy, fw, at, &fit_opts.lm, opts.confidence) {
            s.delta_vs_single = s.aicc.zip(best_single).map(|(a, b)| a - b);
            let wins = match (s.aicc, best_single) {
                (Some(a), Some(b)) => a < b,
                (Some(_), None) => true,
                _ => false,
            };
            if wins && let Some(i) = fx.iter().position(|&x| x >= s.at) {
                change = Some(i);
            }
            shift = Some(s);
        }
    }

    // 2. The lot's trend: every cycle, or the cycles before an accepted change; with the
    // censored cycles of that stretch as bounds, when it has any.
    let pre_fits;
    let with_bounds;
    let (lo, hi) = (f64::NEG_INFINITY, f64::INFINITY);
    let (ls_fits, stretch) = match change {
        Some(i) => {
            let w = fw.map(|w| &w[..i]);
            pre_fits = fit_candidates(&fx[..i], &fy[..i], w, &candidates, &fit_opts, bounded);
            (&pre_fits, (lo, fx[i]))
        }
        None => (&all_fits, (lo, hi)),
    };
    let mut least_squares = true;
    let (trend_fits, tx) =
        match bounded_trend(&xyc, pw.as_deref(), stretch, ls_fits, &fit_opts, bounded) {
            Some(b) => {
                least_squares = false;
                out.notes.push(format!(
                "{} censored cycles entered the fit as lower bounds (censored normal likelihood)",
                b.censored
            ));
                with_bounds = b;
                (&with_bounds.fits, &with_bounds.x[..])
            }
            None => match change {
                Some(i) => (ls_fits, &fx[..i]),
                None => (ls_fits, fx),
            },
        };
    out.trend_cycles = tx.len();
    let mut usable: Vec<&FitResult> = trend_fits
        .iter()
        .filter_map(|c| c.usable_fit())
        .filter(|f| f.covariance.is_some())
        .collect();
    if usable.is_empty() {
        // No interior fit: the fits that end at a physical bound, held there.
        usable = trend_fits.iter().filter_map(|c| c.held.as_ref()).collect();
        if !usable.is_empty() {
            out.notes.push(
                "every fit ends at a physical bound; the forecast holds those parameters there"
                    .to_string(),
            );
        }
    }
    // With least-squares fits, the data go along for the models tested by their profile.
    let avg = Averaged::new(&usable, opts.criterion).map(|a| {
        let end = change.unwrap_or(fx.len());
        if least_squares {
            a.with_data(&fx[..end], &fy[..end], fw.map(|w| &w[..end]))
        } else {
            a
        }
    });
    // The observed range: the exact cycles, widened by censored ones the trend used.
    let (x_first, x_last) = match (fx.first(), fx.last()) {
        (Some(&a), Some(&b)) => (
            tx.first().map_or(a, |&t| t.min(a)),
            tx.last().map_or(b, |&t| t.max(b)),
        ),
        _ => (0.0, 0.0),
    };
    if let Some(avg) = &avg {
        let tl = tx.last().copied().unwrap_or(x_last);
        out.weights = avg.weights(tx[0], tl);
    }
    let (ranking, chosen_idx) = rank(trend_fits, &out.weights);
    out.ranking = ranking;
    let chosen = chosen_idx
        .and_then(|i| {
            let c = &trend_fits[i];
            c.result.as_ref().ok().map(|f| (c.model, f))
        })
        .or_else(|| {
            trend_fits
                .iter()
                .filter_map(|c| c.held.as_ref().map(|f| (c.model, f)))
                .min_by(|a, b| {
                    let k = |f: &FitResult| f.aicc.unwrap_or(f64::INFINITY);
                    k(a.1).total_cmp(&k(b.1))
                })
        });
    let Some((model, fit)) = chosen else {
        out.notes
            .push("no model could be fitted and chosen".to_string());
        if let Some(prior) = &opts.prior {
            let x_next = x_last + cycle_step(fx);
            let fc = with_prior(&mut out, prior, opts, (fx, fy, fw), change, x_next, None);
            out.forecast = fc;
        }
        out.abrupt = mon.map(|m| AbruptLoss {
            prediction: None,
            cusum: Some(m.cusum),
            suspected,
            change_at: None,
            checks: Vec::new(),
            shift,
        });
        out.observed = observed(&xs, &ys, &flags);
        return out;
    };
    out.chosen = Some(model);
    let x_next = x_last + cycle_step(fx);

    // 3. The forecast and the next cycle (the pooled ones when a family prior is given).
    let mut fc = match (&avg, change) {
        (None, _) => {
            out.notes
                .push("no fit has a covariance: no forecast".to_string());
            Forecast::empty(ForecastStatus::NotReached, None, opts.confidence)
        }
        (Some(avg), None) => {
            out.next_cycle = next_from_average(avg, x_next, opts.confidence);
            forecast_with(
                avg,
                avg.threshold,
                opts.confidence,
                avg.dof,
                x_first,
                x_last,
            )
        }
        (Some(avg), Some(i)) => {
            let threshold = avg.threshold;
            let m_new = fx.len() - i;
            if m_new < MIN_NEW_LEVEL {
                let mut f = Forecast::empty(
                    ForecastStatus::Withheld,
                    threshold.is_finite().then_some(threshold),
                    opts.confidence,
                );
                f.withheld_since = Some(fx[i]);
                f.more_cycles_needed = Some(MIN_NEW_LEVEL - m_new);
                out.next_cycle = shift
                    .as_ref()
                    .and_then(|s| next_from_shift(s, x_next, opts.confidence, threshold));
                f
            } else {
                // The new level's own trend, against the criterion anchored before it.
                let post_c: Vec<ModelId> = candidates
                    .iter()
                    .copied()
                    .filter(|m| m.n_params() == 2)
                    .collect();
                let w = fw.map(|w| &w[i..]);
                let post = fit_candidates(&fx[i..], &fy[i..], w, &post_c, &fit_opts, bounded);
                let post =
                    bounded_trend(&xyc, pw.as_deref(), (fx[i], hi), &post, &fit_opts, bounded)
                        .map_or(post, |b| b.fits);
                let post_usable: Vec<&FitResult> = post
                    .iter()
                    .filter_map(|c| c.usable_fit())
                    .filter(|f| f.covariance.is_some())
                    .collect();
                match Averaged::new(&post_usable, Criterion::Absolute(threshold)) {
                    Some(pa) => {
                        out.next_cycle = next_from_average(&pa, x_next, opts.confidence);
                        forecast_with(&pa, threshold, opts.confidence, pa.dof, fx[i], x_last)
                    }
                    None => Forecast::empty(
                        ForecastStatus::NotReached,
                        threshold.is_finite().then_some(threshold),
                        opts.confidence,
                    ),
                }
            }
        }
    };
    if let Some(prior) = &opts.prior {
        let alone = Some(fc.clone());
        fc = with_prior(&mut out, prior, opts, (fx, fy, fw), change, x_next, alone).unwrap_or(fc);
    }
    if !tons.is_empty()
        && let Some(x_star) = fc.x
    {
        fc.lifetime_ton = lifetime_ton(fit, &xs, &ys, &tons, x_star);
    }

    // Empty `xyc` without censored cycles: none lies above the fit.
    out.censored.above_fit = xyc
        .iter()
        .filter(|p| p.2 && fit.predict(p.0) < p.1)
        .map(|p| p.0)
        .collect();

    // 4. Abrupt loss: each cycle since the change against the fit on the cycles before it
    // (with no change suspected: the newest cycle against the fit on the cycles before it).
    let refit_before = |k: usize| {
        if k <= model.n_params() + 1 {
            return None;
        }
        let opts_prev = FitOptions {
            start: fit
                .param_names
                .iter()
                .cloned()
                .zip(fit.params.iter().copied())
                .collect(),
            bounds: if bounded {
                physical_bounds(model)
            } else {
                Vec::new()
            },
            weights: fw.map(|w| w[..k].to_vec()),
            ..fit_opts.clone()
        };
        fit_model(model, &fx[..k], &fy[..k], &opts_prev)
            .ok()
            .filter(|f| f.converged)
    };
    let split = change.or(change_guess.filter(|_| suspected));
    let mut checks = Vec::new();
    let prediction = match split {
        Some(i) => {
            let before = if change == Some(i) {
                Some(fit.clone())
            } else {
                refit_before(i)
            };
            if let Some(b) = before {
                for j in i..fx.len() {
                    let wj = fw.map_or(1.0, |w| w[j]);
                    if let Some(c) =
                        prediction_check_weighted(&b, fx[j], fy[j], wj, opts.confidence)
                    {
                        checks.push(c);
                    }
                }
            }
            checks.last().cloned()
        }
        None if !fx.is_empty() => {
            let k = fx.len() - 1;
            let wk = fw.map_or(1.0, |w| w[k]);
            refit_before(k)
                .and_then(|f| prediction_check_weighted(&f, fx[k], fy[k], wk, opts.confidence))
        }
        None => None,
    };
    out.abrupt = Some(AbruptLoss {
        prediction,
        cusum: mon.map(|m| m.cusum),
        suspected,
        change_at: change.map(|i| fx[i]),
        checks,
        shift,
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
    out.observed = observed(&xs, &ys, &flags);
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
    fn columns_keep_finite_pairs_in_a_stable_x_order() {
        // Out of order, with a repeated x, a non-finite y and TON/σ on some points.
        let s = LotSeries {
            x: vec![3.0, 1.0, 2.0, 1.0, 4.0],
            y: vec![0.7, 0.9, f64::NAN, 0.95, 0.6],
            censored: vec![false, true],
            ton: vec![Some(30.0), None, Some(20.0), Some(11.0), None],
            sd: vec![None, None, None, None, None],
        };
        let c = Columns::of(s);
        assert_eq!(c.xs, vec![1.0, 1.0, 3.0, 4.0]);
        // The two points at x = 1 keep the series' order.
        assert_eq!(c.ys, vec![0.9, 0.95, 0.7, 0.6]);
        assert_eq!(c.flags, vec![true, false, false, false]);
        assert_eq!(c.tons, vec![None, Some(11.0), Some(30.0), None]);
        assert!(c.sds.is_empty(), "no σ known: no column");
        assert_eq!(c.n_points, 5);
        assert_eq!(
            c.notes,
            vec!["1 points with non-finite x or y were left out".to_string()]
        );
    }

    #[test]
    fn first_order_lot_is_analysed_end_to_end() {
        let s = series(25, |x| (-0.02 * x).exp());
        let a = analyse(&s, &AnalysisOptions::default());
        assert_eq!(a.ranking.len(), 7);
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
    fn censored_points_enter_as_bounds_and_are_flagged() {
        let mut s = series(15, |x| (-0.05 * x).exp());
        s.censored = vec![false; 15];
        s.censored[3] = true;
        s.y[3] = 1.5; // a lower bound above the curve: contradicts the fit
        s.censored[5] = true;
        s.y[5] = 0.1; // a lower bound far below: consistent
        let a = analyse(&s, &AnalysisOptions::default());
        assert_eq!(a.censored.count, 2);
        assert_eq!(a.n_fitted, 13);
        assert_eq!(a.trend_cycles, 15);
        let fit = a.fit.as_ref().expect("fit");
        assert_eq!((fit.censored, fit.n), (Some(2), 15));
        assert_eq!(a.censored.above_fit, vec![4.0]);
        assert!(
            a.notes.iter().any(|n| n.contains("lower bounds")),
            "{:?}",
            a.notes
        );
    }

    #[test]
    fn bounds_before_a_step_change_stay_in_the_trend_before_it() {
        // Cycles 1–3 saturated (bounds just below the curve), a 30 % drop from cycle 15:
        // the trend before the change is the censored fit of cycles 1–14 with the bounds.
        let mut s = series(22, |x| (-0.03 * x).exp());
        s.censored = vec![false; 22];
        for i in 0..3 {
            s.censored[i] = true;
            s.y[i] = 0.85;
        }
        for y in &mut s.y[14..] {
            *y -= 0.3;
        }
        let a = analyse(&s, &AnalysisOptions::default());
        let ab = a.abrupt.as_ref().expect("abrupt");
        assert_eq!(ab.change_at, Some(15.0), "{ab:?}");
        assert_eq!(a.trend_cycles, 14);
        let fit = a.fit.as_ref().expect("fit");
        assert_eq!(fit.censored, Some(3));
        assert!((fit.predict(1.0) - (-0.03f64).exp()).abs() < 0.02);
        assert!(a.censored.above_fit.is_empty());
    }

    #[test]
    fn without_standard_errors_or_bounds_nothing_changes() {
        // An empty sd, or one with no usable value, is the unweighted analysis to the bit.
        let s = series(12, |x| 0.3 + 0.7 * (-0.1 * x).exp());
        let plain = analyse(&s, &AnalysisOptions::default());
        let unknown = LotSeries {
            sd: vec![None; 12],
            censored: vec![false; 12],
            ..s.clone()
        };
        let b = analyse(&unknown, &AnalysisOptions::default());
        assert_eq!(plain, b);
        assert!(plain.fit.as_ref().is_some_and(|f| f.censored.is_none()));
    }

    #[test]
    fn standard_errors_weight_the_fit() {
        // Equal standard errors are the unweighted fit (relative weights all 1); one cycle
        // ten times less precise than the others pulls the curve ten-thousand times less
        // (weight 1/100 against 1): the fit moves away from it.
        let mut s = series(12, |x| (-0.05 * x).exp());
        s.y[0] += 0.05;
        let plain = analyse(&s, &AnalysisOptions::default());
        let equal = analyse(
            &LotSeries {
                sd: vec![Some(0.01); 12],
                ..s.clone()
            },
            &AnalysisOptions::default(),
        );
        let (p, e) = (plain.fit.expect("fit"), equal.fit.expect("fit"));
        assert_eq!(p.model, e.model);
        for (a, b) in p.params.iter().zip(&e.params) {
            assert!((a - b).abs() <= 1e-9 * b.abs().max(1e-9), "{a} {b}");
        }
        let mut sd = vec![Some(0.01); 12];
        sd[0] = Some(0.1);
        let weighted = analyse(&LotSeries { sd, ..s.clone() }, &AnalysisOptions::default());
        let w = weighted.fit.expect("fit");
        let miss = |f: &FitResult| (f.predict(1.0) - s.y[0]).abs();
        assert!(miss(&w) > miss(&p), "{} vs {}", miss(&w), miss(&p));
        assert!(weighted.notes.iter().any(|n| n.contains("1/sd²")));
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
