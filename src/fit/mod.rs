//! The fitting engine and the deactivation science. Pure: no I/O, no clock.
//!
//! - [`lm`]: Levenberg–Marquardt with Moré scaling, bounds and geodesic acceleration.
//! - [`models`]: the deactivation models, their ids, parameter names and derivatives.
//! - [`start`]: automatic starting values (rate grid with linear amplitudes).
//! - [`varpro`]: two sites by variable projection, with degenerate fits recognised.
//! - [`engine`]: fitting one named model and the statistics of the optimum.
//! - [`weights`]: relative weights of the points from the standard errors of their
//!   activities.
//! - [`censored`]: fits with lower bounds (saturated cycles) by the censored normal
//!   (Tobit) likelihood.
//! - [`choice`]: AICc and the "simplest within ΔAICc < 2" rule.
//! - [`forecast`](mod@forecast): the forecast states, the crossing of the replacement criterion and its
//!   interval by inverting the confidence band (Fieller), lifetime TON.
//! - [`average`]: Akaike weights and the unconditional variance of Burnham & Anderson
//!   (2002); the next batch's verdict.
//! - [`abrupt`]: step-change monitoring (one-step-ahead scores against a baseline that
//!   excludes suspect cycles, Page's CUSUM), prediction checks and the level-shift model.
//! - [`economics`]: the economic replacement point.
//! - [`population`]: young lots borrow strength from their family (an empirical-Bayes
//!   prior from the earlier lots, the posterior mode and its forecast).
//! - [`analysis`]: [`analyse`], the one call for the shell, and its serialisable result.
//! - [`render`]: CSV series reader, model/start argument parsing, JSON and text output.
//!
//! Decisions worth knowing:
//! - Censored points (activity only a lower bound) enter the fit as bounds through the
//!   censored likelihood ([`censored`]); they are counted, and flagged when the fitted curve
//!   passes below their bound ([`analysis`]).
//! - Points with standard errors are weighted by 1/sd², relatively: s² is still estimated
//!   from the weighted residuals ([`weights`]).
//! - For a criterion "fraction f of the fitted fresh activity", the criterion moves with
//!   the parameters, so the band of h(x) = y(x) − f·y(0) keeps the term −f·∂y(0)/∂θ.
//! - A fit whose parameters run away along a flat valley (RSS flat, |θ| growing) stops as
//!   [`StopReason::Stalled`], reported as not converged, and is never chosen.
//! - Two sites whose best fit is at the edge of the model (a rate at zero, two equal rates)
//!   stop as [`StopReason::Degenerate`], also not converged and never chosen.
//! - Physical bounds hold by default ([`analysis::physical_bounds`]); a fit that ends on
//!   one is shown as such and neither chosen nor averaged.
//! - After a step change the trend, the fresh activity and a fraction-of-fresh criterion
//!   come from the cycles before it ([`analysis`]).

// Numerical kernels index several arrays in step; index loops say that most plainly.
#![allow(clippy::needless_range_loop)]

pub mod abrupt;
pub mod analysis;
pub mod average;
pub mod censored;
pub mod choice;
pub mod economics;
pub mod engine;
pub mod error;
pub mod forecast;
pub mod lm;
pub mod models;
pub mod population;
pub mod render;
pub mod start;
pub mod varpro;
pub mod weights;

pub use abrupt::{AbruptLoss, CusumResult, LevelShift, Monitoring, PredictionCheck, cusum_down};
pub use analysis::{
    AnalysisOptions, ENGINE_VERSION, LotAnalysis, LotSeries, NamedValue, RankEntry, analyse,
    analyse_owned,
};
pub use average::{ModelWeight, NextCycle, NextVerdict};
pub use censored::fit_censored;
pub use economics::EconomicInputs;
pub use engine::{FitOptions, FitResult, covariance_of, fit_model, fit_with_start};
pub use error::{FitError, SeriesError};
pub use forecast::{Criterion, Forecast, ForecastStatus, NotReachedWhy, forecast, t_quantile};
pub use lm::{
    Curve, FnCurve, LmOptions, LmOutcome, StopReason, levenberg_marquardt, numeric_gradient,
};
pub use models::{ModelId, bennett_from_power, power_from_bennett};
pub use population::{FamilyPrior, LotEstimate, Pooled, posterior_fit, random_effects};
pub use render::{
    ModelArg, analysis_json, fit_json, parse_model_arg, parse_start_arg, pooled_json,
    read_series_csv, render_text,
};
pub use start::start_values;
pub use weights::point_weights;
