//! The fitting engine and the deactivation science (DESIGN.md §4). Pure: no I/O, no clock.
//!
//! - [`lm`]: Levenberg–Marquardt with Moré scaling, bounds and geodesic acceleration.
//! - [`models`]: the deactivation models, their ids, parameter names and derivatives.
//! - [`start`]: automatic starting values (rate grid with linear amplitudes).
//! - [`varpro`]: two sites by variable projection, with degenerate fits recognised.
//! - [`engine`]: fitting one named model and the statistics of the optimum.
//! - [`choice`]: AICc and the "simplest within ΔAICc < 2" rule.
//! - [`forecast`]: crossing of the replacement criterion, delta-method interval, lifetime TON.
//! - [`abrupt`]: one-step-ahead prediction check and Page's CUSUM.
//! - [`economics`]: the economic replacement point.
//! - [`analysis`]: [`analyse`], the one call for the shell, and its serialisable result.
//! - [`cli`]: CSV series reader, model/start argument parsing, JSON and text output.
//!
//! Decisions worth knowing:
//! - Censored points (activity only a lower bound) are excluded from least squares, counted,
//!   and flagged when the fitted curve passes below their bound ([`analysis`]).
//! - For a criterion "fraction f of the fitted fresh activity", the criterion moves with
//!   the parameters, so the delta method keeps the term −f·∂y(0)/∂θ; without it the 90 %
//!   interval covered only ~70 % in simulation (tests/fit_coverage.rs).
//! - A fit whose parameters run away along a flat valley (RSS flat, |θ| growing) stops as
//!   [`StopReason::Stalled`], reported as not converged, and is never chosen.
//! - Two sites whose best fit is at the edge of the model (a rate at zero, two equal rates)
//!   stop as [`StopReason::Degenerate`], also not converged and never chosen.
//! - The CUSUM runs over the chosen fit's residuals divided by s, in x order.

// Numerical kernels index several arrays in step; index loops say that most plainly.
#![allow(clippy::needless_range_loop)]

pub mod abrupt;
pub mod analysis;
pub mod average;
pub mod choice;
pub mod cli;
pub mod economics;
pub mod engine;
pub mod error;
pub mod forecast;
pub mod lm;
pub mod models;
pub mod start;
pub mod varpro;

pub use analysis::{AnalysisOptions, ENGINE_VERSION, LotAnalysis, LotSeries, analyse};
pub use cli::{ModelArg, fit_json, parse_model_arg, parse_start_arg, read_series_csv, render_text};
pub use economics::EconomicInputs;
pub use engine::{FitOptions, FitResult, fit_model, fit_with_start};
pub use error::{FitError, SeriesError};
pub use forecast::{Criterion, Forecast, ForecastStatus, forecast};
pub use lm::{Curve, FnCurve, LmOptions, LmOutcome, StopReason, levenberg_marquardt};
pub use models::ModelId;
