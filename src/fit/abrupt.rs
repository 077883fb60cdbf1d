//! Abrupt loss of activity (poisoning, a bad feed lot), as opposed to the slow trend.
//!
//! Monitoring ([`monitor`]): each cycle, from the sixth on, is predicted one step ahead
//! from an in-control baseline, a straight line fitted by least squares either to ln y
//! (first-order decay, exact for it) or to y (linear decay), whichever leaves the smaller
//! residual sum of squares in y on the baseline cycles (only y when some y ≤ 0). Its Student-t standardised
//! prediction error is mapped to a standard normal score (as in the self-starting CUSUM of
//! Hawkins, 1987, recalled from memory) and fed to Page's one-sided
//! downward CUSUM, S_i = max(0, S_{i−1} − z_i − k) (Page, "Continuous inspection
//! schemes", Biometrika 41, 1954; k = 0.5 and h = 4 to 5 are the usual SPC defaults,
//! Montgomery, "Introduction to Statistical Quality Control"; recalled from memory). Until
//! an alarm the baseline is every earlier cycle, whose one-step-ahead errors are
//! independent for an in-control lot (recursive residuals), so the CUSUM keeps its usual
//! false-alarm rate. At an alarm the change is estimated to start at the first cycle after
//! the last one with S = 0 (the usual CUSUM change-point estimate); the baseline is then
//! frozen at the cycles before it and the scores from the change on are recomputed against
//! it. A step is thus never absorbed into the baseline, and the signal persists for as
//! long as the new level lasts; it clears only when S returns to zero.
//!
//! The CUSUM needs a few cycles to accumulate a step; so that a large step is not absorbed
//! into the recursive baseline meanwhile, the first [`EXCURSION_HELD`] cycles of an
//! excursion (S > 0) are kept out of the baseline, and the cycles of the excursion are
//! also tested together against the baseline before them (Chow's predictive test,
//! one-sided at [`SHIFT_ALPHA`], every start within the excursion tried, Bonferroni
//! corrected); either signal freezes the baseline. At the newest cycle a change
//! is signalled while the CUSUM is above h or that test still rejects.
//!
//! Each cycle since the suspected change is also tested against the one-step-ahead
//! prediction interval (variance s² + gᵀΣg) of the fit on the cycles before the change
//! ([`prediction_check`]).
//!
//! A level-shift model ([`fit_level_shift`]): a trend (linear, first or second order)
//! with a drop δ from cycle N on, N scanned around the CUSUM's estimate. Its AICc counts N
//! as a parameter (the change point is estimated by maximum likelihood, Hinkley,
//! "Inference about the change-point in a sequence of random variables", Biometrika 57,
//! 1970; recalled from memory) and it competes with the single-regime models.

use serde::{Deserialize, Serialize};

use statrs::distribution::{ContinuousCDF, Normal, StudentsT};

use super::engine::{FitResult, covariance_of};
use super::forecast::t_quantile;
use super::lm::{Curve, LmOptions, levenberg_marquardt};
use super::models::ModelId;

/// A point against the prediction interval of the earlier points' fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PredictionCheck {
    pub x: f64,
    pub observed: f64,
    pub predicted: f64,
    /// √(s² + gᵀΣg).
    pub prediction_sd: f64,
    /// Lower limit of the two-sided prediction interval at the chosen confidence.
    pub lower: f64,
    /// (observed − predicted)/prediction_sd.
    pub z: f64,
    /// Observed below the lower limit.
    pub below: bool,
}

/// The one-step-ahead check for the newest point `(x_new, y_new)` given a fit on the
/// points before it; None when the fit has no covariance or no degrees of freedom.
pub fn prediction_check(
    earlier: &FitResult,
    x_new: f64,
    y_new: f64,
    confidence: f64,
) -> Option<PredictionCheck> {
    prediction_check_weighted(earlier, x_new, y_new, 1.0, confidence)
}

/// [`prediction_check`] for a point of relative weight `weight` in a weighted fit (see
/// [`super::weights`]): its own variance is s²/w, so the prediction variance is
/// s²/w + gᵀΣg. A weight that is not positive and finite counts as 1.
pub fn prediction_check_weighted(
    earlier: &FitResult,
    x_new: f64,
    y_new: f64,
    weight: f64,
    confidence: f64,
) -> Option<PredictionCheck> {
    let s = earlier.sigma?;
    let w = if weight.is_finite() && weight > 0.0 {
        weight
    } else {
        1.0
    };
    let var = s * s / w + earlier.mean_variance(x_new)?;
    let sd = var.sqrt();
    let t = t_quantile(confidence, earlier.dof)?;
    let predicted = earlier.predict(x_new);
    if !(sd > 0.0 && sd.is_finite() && predicted.is_finite()) {
        return None;
    }
    let lower = predicted - t * sd;
    Some(PredictionCheck {
        x: x_new,
        observed: y_new,
        predicted,
        prediction_sd: sd,
        lower,
        z: (y_new - predicted) / sd,
        below: y_new < lower,
    })
}

/// Page's CUSUM for a downward shift.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CusumResult {
    pub k: f64,
    pub h: f64,
    /// S_i = max(0, S_{i−1} − z_i − k), S_0 = 0, one per point.
    pub path: Vec<f64>,
    /// Index of the first point with S_i > h.
    pub first_alarm: Option<usize>,
    pub max: f64,
    /// S of the newest point.
    pub last: f64,
}

/// One-sided downward CUSUM over standardised residuals `z` (in x order).
pub fn cusum_down(z: &[f64], k: f64, h: f64) -> CusumResult {
    let mut s: f64 = 0.0;
    let mut path = Vec::with_capacity(z.len());
    let mut first_alarm = None;
    let mut max: f64 = 0.0;
    for (i, &zi) in z.iter().enumerate() {
        if zi.is_finite() {
            s = (s - zi - k).max(0.0);
        }
        path.push(s);
        max = max.max(s);
        if first_alarm.is_none() && s > h {
            first_alarm = Some(i);
        }
    }
    CusumResult {
        k,
        h,
        path,
        first_alarm,
        max,
        last: s,
    }
}

/// Both views and the verdict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AbruptLoss {
    /// The newest cycle against the fit on the cycles before the suspected change (before
    /// the newest cycle when no change is suspected).
    pub prediction: Option<PredictionCheck>,
    /// The monitoring CUSUM over one-step-ahead scores (zero for the first baseline cycles).
    pub cusum: Option<CusumResult>,
    /// True when the CUSUM is above h at the newest cycle.
    pub suspected: bool,
    /// The first x of the new level, when a step change is accepted (suspected, and the
    /// level-shift model has the lower AICc).
    #[serde(default)]
    pub change_at: Option<f64>,
    /// Each cycle since the suspected change against the fit on the cycles before it.
    #[serde(default)]
    pub checks: Vec<PredictionCheck>,
    /// The best level-shift model, when a change is suspected.
    #[serde(default)]
    pub shift: Option<LevelShift>,
}

/// A trend with a level shift at a change point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelShift {
    /// The trend's model.
    pub base: ModelId,
    /// First x of the new level.
    pub at: f64,
    /// Trend parameters, then δ (the drop, positive for a loss).
    pub params: Vec<f64>,
    pub covariance: Option<Vec<Vec<f64>>>,
    pub rss: f64,
    pub sigma: Option<f64>,
    pub dof: usize,
    /// AICc with the change point counted as a parameter.
    pub aicc: Option<f64>,
    /// AICc minus the best single-regime AICc (negative: the shift is preferred).
    pub delta_vs_single: Option<f64>,
    /// The drop δ with its interval at the analysis confidence (activity units).
    pub drop: f64,
    pub drop_lower: Option<f64>,
    pub drop_upper: Option<f64>,
    /// δ relative to the trend just before the change.
    pub drop_relative: Option<f64>,
}

impl LevelShift {
    /// Fitted activity at x (after the shift when x ≥ at).
    pub fn predict(&self, x: f64) -> f64 {
        let np = self.base.n_params();
        let step = if x >= self.at { self.params[np] } else { 0.0 };
        self.base.eval(x, &self.params[..np]) - step
    }

    /// Variance of the fitted mean at x (delta method).
    pub fn mean_variance(&self, x: f64) -> Option<f64> {
        let cov = self.covariance.as_ref()?;
        let np = self.base.n_params();
        let mut g = vec![0.0; np + 1];
        self.base.grad(x, &self.params[..np], &mut g[..np]);
        g[np] = if x >= self.at { -1.0 } else { 0.0 };
        let v = super::engine::quad_form(cov, &g);
        (v.is_finite() && v >= 0.0).then_some(v)
    }
}

struct ShiftCurve {
    base: ModelId,
    at: f64,
}

impl Curve for ShiftCurve {
    fn n_params(&self) -> usize {
        self.base.n_params() + 1
    }
    fn value(&self, x: f64, p: &[f64]) -> f64 {
        let np = self.base.n_params();
        let step = if x >= self.at { p[np] } else { 0.0 };
        self.base.eval(x, &p[..np]) - step
    }
    fn has_gradient(&self) -> bool {
        true
    }
    fn gradient(&self, x: f64, p: &[f64], out: &mut [f64]) {
        let np = self.base.n_params();
        self.base.grad(x, &p[..np], &mut out[..np]);
        out[np] = if x >= self.at { -1.0 } else { 0.0 };
    }
}

/// Fits the level-shift model with trend `base` and the change at index `at` of `x`
/// (sorted), weighted by `w` when given, starting from `start` (the trend's parameters);
/// None when it fails.
#[allow(clippy::too_many_arguments)]
fn fit_shift_at(
    base: ModelId,
    x: &[f64],
    y: &[f64],
    w: Option<&[f64]>,
    at: usize,
    start: &[f64],
    lm: &LmOptions,
    confidence: f64,
) -> Option<LevelShift> {
    let n = x.len();
    let np = base.n_params();
    if at < np + 1 || at >= n || n <= np + 3 {
        return None;
    }
    let curve = ShiftCurve { base, at: x[at] };
    let post_mean: f64 =
        (at..n).map(|i| base.eval(x[i], start) - y[i]).sum::<f64>() / (n - at) as f64;
    let mut p0 = start.to_vec();
    p0.push(post_mean);
    let out = levenberg_marquardt(&curve, x, y, w, &p0, lm).ok()?;
    if !out.reason.is_converged() || out.params.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let (covariance, se) = covariance_of(&out, n);
    let k = np + 2; // the trend, δ and the change point
    let aicc = super::choice::aicc(n, k, out.rss);
    let dof = n.saturating_sub(np + 1);
    let drop = out.params[np];
    let t = t_quantile(confidence, dof);
    let half = se.as_ref().zip(t).map(|(s, t)| t * s[np]);
    let before = base.eval(x[at], &out.params[..np]);
    Some(LevelShift {
        base,
        at: x[at],
        params: out.params.clone(),
        covariance,
        rss: out.rss,
        sigma: (n > np + 1).then(|| (out.rss / (n - np - 1) as f64).sqrt()),
        dof,
        aicc,
        delta_vs_single: None,
        drop,
        drop_lower: half.map(|h| drop - h),
        drop_upper: half.map(|h| drop + h),
        drop_relative: (before > 0.0).then(|| drop / before),
    })
}

/// The best level-shift model (lowest AICc) over the trends linear, first and second order
/// and the change at an index within two of `at_guess`; weighted by `w` when given (the
/// weights of the single-regime fits it competes with, so that the AICc compare).
pub fn fit_level_shift(
    x: &[f64],
    y: &[f64],
    w: Option<&[f64]>,
    at_guess: usize,
    lm: &LmOptions,
    confidence: f64,
) -> Option<LevelShift> {
    let mut best: Option<LevelShift> = None;
    for base in [ModelId::Linear, ModelId::FirstOrder, ModelId::SecondOrder] {
        for at in at_guess.saturating_sub(2)..=at_guess + 2 {
            // The trend before the change needs cycles of its own (n > p + 1).
            if at < MIN_BASELINE - 1 || at >= x.len() {
                continue;
            }
            // Start from the trend of the cycles before the change.
            let start = super::start::start_values(base, &x[..at], &y[..at]);
            let Some(s) = fit_shift_at(base, x, y, w, at, &start, lm, confidence) else {
                continue;
            };
            let better = match (&best, s.aicc) {
                (None, Some(_)) => true,
                (Some(b), Some(a)) => b.aicc.is_none_or(|ba| a < ba),
                _ => false,
            };
            if better {
                best = Some(s);
            }
        }
    }
    best
}

/// The outcome of monitoring a lot's cycles.
#[derive(Debug, Clone, PartialEq)]
pub struct Monitoring {
    /// Normal scores of the one-step-ahead prediction errors (NaN for the first baseline
    /// cycles, which are not predicted).
    pub z: Vec<f64>,
    pub cusum: CusumResult,
    /// Index of the first cycle after the last in-control one, when the CUSUM is above
    /// zero at the newest cycle.
    pub change_index: Option<usize>,
    /// One-sided p-value of the predictive test of the cycles since the change against
    /// the baseline before it, when a change is under way.
    pub shift_p: Option<f64>,
    /// A change is signalled at the newest cycle.
    pub alarm: bool,
}

/// Cycles in the first baseline before monitoring starts.
pub const MIN_BASELINE: usize = 5;

/// Cycles at the start of a CUSUM excursion kept out of the recursive baseline.
pub const EXCURSION_HELD: usize = 2;

/// Level of the one-sided predictive test of the cycles since a suspected change. Strict,
/// because it is applied at every cycle of every excursion of the CUSUM.
pub const SHIFT_ALPHA: f64 = 0.001;

/// A straight line fitted to the baseline, on the log scale (first-order decay) or on y.
#[derive(Debug, Clone, Copy)]
struct Baseline {
    log: bool,
    a: f64,
    b: f64,
    s2: f64,
    xm: f64,
    sxx: f64,
    n: usize,
}

impl Baseline {
    /// Least squares on the log scale and on y; the one with the smaller residual sum of
    /// squares in y is kept (a first-order or a linear decay, whichever the baseline follows).
    fn fit(x: &[f64], y: &[f64]) -> Option<Baseline> {
        let n = x.len();
        if n < 3 {
            return None;
        }
        let nf = n as f64;
        let xm = x.iter().sum::<f64>() / nf;
        let sxx: f64 = x.iter().map(|xi| (xi - xm).powi(2)).sum();
        if sxx <= 0.0 {
            return None;
        }
        let line = |v: &dyn Fn(usize) -> f64| {
            let vm = (0..n).map(v).sum::<f64>() / nf;
            let sxv: f64 = (0..n).map(|i| (x[i] - xm) * (v(i) - vm)).sum();
            let b = sxv / sxx;
            (vm - b * xm, b)
        };
        let (a1, b1) = line(&|i| y[i]);
        let rss_lin: f64 = (0..n).map(|i| (y[i] - a1 - b1 * x[i]).powi(2)).sum();
        let mut best = Baseline {
            log: false,
            a: a1,
            b: b1,
            s2: rss_lin / (nf - 2.0),
            xm,
            sxx,
            n,
        };
        if y.iter().all(|&v| v > 0.0) {
            let (a2, b2) = line(&|i| y[i].ln());
            let rss_y: f64 = (0..n)
                .map(|i| (y[i] - (a2 + b2 * x[i]).exp()).powi(2))
                .sum();
            if rss_y < rss_lin {
                let rss_log: f64 = (0..n).map(|i| (y[i].ln() - a2 - b2 * x[i]).powi(2)).sum();
                best = Baseline {
                    log: true,
                    a: a2,
                    b: b2,
                    s2: rss_log / (nf - 2.0),
                    ..best
                };
            }
        }
        Some(best)
    }

    /// The observation on the line's scale (−∞ for y ≤ 0 on the log scale).
    fn scale(&self, y: f64) -> f64 {
        if self.log {
            if y > 0.0 { y.ln() } else { f64::NEG_INFINITY }
        } else {
            y
        }
    }

    fn t_cdf(&self, t: f64) -> f64 {
        if t == f64::NEG_INFINITY {
            return 0.0;
        }
        StudentsT::new(0.0, 1.0, (self.n - 2) as f64).map_or(f64::NAN, |d| d.cdf(t))
    }

    /// P(T ≤ t) of the one-step-ahead prediction error of (x, y).
    fn p_one(&self, x: f64, y: f64) -> f64 {
        let pred = self.a + self.b * x;
        let sd = (self.s2 * (1.0 + 1.0 / self.n as f64 + (x - self.xm).powi(2) / self.sxx)).sqrt();
        if !(sd > 0.0 && sd.is_finite()) {
            return 0.5;
        }
        self.t_cdf((self.scale(y) - pred) / sd)
    }

    /// One-sided p-value of the mean prediction error of the cycles (x, y) (a level below
    /// the baseline's extrapolation): the predictive test of Chow (Econometrica 28, 1960;
    /// recalled from memory) for a mean shift, on Student t with n − 2 degrees of freedom.
    fn p_shift(&self, x: &[f64], y: &[f64]) -> f64 {
        let m = x.len();
        if m == 0 {
            return 1.0;
        }
        let mf = m as f64;
        let r: f64 = x
            .iter()
            .zip(y)
            .map(|(&xi, &yi)| self.scale(yi) - self.a - self.b * xi)
            .sum::<f64>()
            / mf;
        let xp = x.iter().sum::<f64>() / mf;
        let sd =
            (self.s2 * (1.0 / mf + 1.0 / self.n as f64 + (xp - self.xm).powi(2) / self.sxx)).sqrt();
        if !(sd > 0.0 && sd.is_finite()) {
            return 1.0;
        }
        self.t_cdf(r / sd)
    }
}

/// Monitors `y` over sorted `x` (see the module documentation); None when there are too
/// few cycles to start.
pub fn monitor(x: &[f64], y: &[f64], k: f64, h: f64) -> Option<Monitoring> {
    let n = x.len().min(y.len());
    if n <= MIN_BASELINE {
        return None;
    }
    let normal = Normal::new(0.0, 1.0).ok()?;
    let to_z = |p: f64| normal.inverse_cdf(p.clamp(1e-12, 1.0 - 1e-12));
    let mut z = vec![f64::NAN; n];
    let mut path = vec![0.0; n];
    let mut s: f64 = 0.0;
    // Until an alarm the baseline is every earlier cycle (recursive residuals, independent
    // when the lot is in control); at an alarm it is frozen at the cycles before the
    // estimated change, and the scores from the change on are recomputed against it.
    let mut frozen: Option<(usize, Baseline)> = None;
    let mut last_zero = MIN_BASELINE - 1;
    let mut first_alarm = None;
    for i in MIN_BASELINE..n {
        let zi = match frozen {
            Some((_, b)) => to_z(b.p_one(x[i], y[i])),
            None => {
                // The first cycles of an excursion stay out of the baseline, so a step is
                // not half absorbed before the CUSUM has seen it twice.
                let young = s > 0.0 && i - (last_zero + 1) < EXCURSION_HELD;
                let end = if young { last_zero + 1 } else { i };
                to_z(Baseline::fit(&x[..end], &y[..end])?.p_one(x[i], y[i]))
            }
        };
        z[i] = zi;
        s = (s - zi - k).max(0.0);
        path[i] = s;
        if s == 0.0 {
            last_zero = i;
            frozen = None;
        } else if frozen.is_none() {
            // The change may start anywhere in the excursion: each start is tested, with
            // a Bonferroni correction for their number.
            let first = last_zero + 1;
            let starts = (i + 1 - first) as f64;
            let found = (first..=i).find_map(|t0| {
                let b = Baseline::fit(&x[..t0], &y[..t0])?;
                (b.p_shift(&x[t0..=i], &y[t0..=i]) * starts < SHIFT_ALPHA).then_some((t0, b))
            });
            let shift = found.is_some();
            let (tau, base) = match found {
                Some(f) => f,
                None => (first, Baseline::fit(&x[..first], &y[..first])?),
            };
            if s > h || shift {
                first_alarm.get_or_insert(i);
                frozen = Some((tau, base));
                last_zero = tau - 1;
                s = 0.0;
                for j in tau..=i {
                    z[j] = to_z(base.p_one(x[j], y[j]));
                    s = (s - z[j] - k).max(0.0);
                    path[j] = s;
                }
                // The test already signalled: keep the CUSUM at least at h.
                if shift {
                    s = s.max(h + f64::EPSILON);
                    path[i] = s;
                }
            }
        }
    }
    let max = path.iter().copied().fold(0.0, f64::max);
    let shift_p = frozen.map(|(tau, b)| b.p_shift(&x[tau..n], &y[tau..n]));
    let alarm = frozen.is_some() && (s > h || shift_p.is_some_and(|p| p < SHIFT_ALPHA));
    let in_control = last_zero + 1;
    let change_index = (s > 0.0 && in_control < n).then_some(in_control);
    Some(Monitoring {
        z,
        cusum: CusumResult {
            k,
            h,
            path,
            first_alarm,
            max,
            last: s,
        },
        change_index,
        shift_p,
        alarm,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::{FitOptions, ModelId, fit_model};

    #[test]
    fn cusum_accumulates_only_downward_shifts() {
        // Hand computation: z = −1.5 each step adds 1.0 with k = 0.5.
        let r = cusum_down(&[-1.5; 6], 0.5, 4.5);
        assert_eq!(r.path, vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0]);
        assert_eq!(r.first_alarm, Some(4));
        let up = cusum_down(&[1.5; 6], 0.5, 4.5);
        assert!(up.path.iter().all(|&s| s == 0.0));
        assert_eq!(up.first_alarm, None);
        // In-control noise within ±k never accumulates.
        let quiet = cusum_down(&[0.4, -0.4, 0.3, -0.5, 0.0], 0.5, 4.5);
        assert_eq!(quiet.max, 0.0);
    }

    #[test]
    fn sudden_drop_falls_below_prediction_interval() {
        let x: Vec<f64> = (1..=15).map(f64::from).collect();
        let y: Vec<f64> = x
            .iter()
            .enumerate()
            .map(|(i, &v)| (-0.04 * v).exp() + if i % 2 == 0 { 0.005 } else { -0.005 })
            .collect();
        let f = fit_model(ModelId::FirstOrder, &x, &y, &FitOptions::default()).expect("fit");
        let ok = prediction_check(&f, 16.0, (-0.04f64 * 16.0).exp(), 0.99).expect("check");
        assert!(!ok.below, "{ok:?}");
        let drop = prediction_check(&f, 16.0, 0.3, 0.99).expect("check");
        assert!(drop.below && drop.z < -10.0, "{drop:?}");
    }
}
