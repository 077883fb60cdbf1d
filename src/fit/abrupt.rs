//! Abrupt loss of activity (poisoning, a bad feed lot), as opposed to the slow trend.
//!
//! Monitoring ([`monitor`]), from the sixth cycle on, has two detectors and one rule for
//! holding a change:
//! - Page's one-sided downward CUSUM, S_i = max(0, S_{i−1} − z_i − k) (Page, "Continuous
//!   inspection schemes", Biometrika 41, 1954), on the normal scores z_i of the one-step-ahead
//!   prediction errors against an in-control baseline of every earlier cycle (recursive
//!   residuals, independent for an in-control lot, so the CUSUM keeps its usual run
//!   length). The baseline is a straight line on y and one on ln y, each with the full
//!   prediction variance s²(1 + 1/n + (x − x̄)²/Sxx) and its Student t on n − 2 degrees of
//!   freedom mapped to a normal score (as in the self-starting CUSUM of Hawkins, 1987), the
//!   less alarming of the two counting (see `Baseline`). k = 0.5 and h = 4 to 5 are the
//!   usual design for a shift of one standard deviation (Montgomery, "Introduction to
//!   Statistical Quality Control"; Hawkins & Olwell, "Cumulative Sum Charts and Charting
//!   for Quality Improvement", 1998; both recalled from memory). It finds slow or small
//!   shifts.
//! - A level-shift test ([`level_shift_p`]) at each of the [`SHIFT_WINDOW`] newest cycles
//!   as the candidate first cycle of a new level, Bonferroni-corrected at [`SHIFT_ALPHA`].
//!   It finds a large step at once, before it can enter the recursive baseline; with the
//!   step one cycle old it is the single-cycle predictive test. Its t statistics are
//!   compared with critical values found once per degrees of freedom
//!   (`shift_critical`), not turned into p-values: the decisions are the same, at a
//!   fraction of the cost.
//!
//! Either signal holds a change from its first cycle τ (the test's best candidate, or the
//! first cycle after the CUSUM's last zero, the usual CUSUM change-point estimate). The
//! CUSUM keeps running on recursive scores (a CUSUM on scores against a baseline frozen at
//! τ was tried: its scores share the frozen line's error, and held false alarms of a
//! straight-line decay in 4.5 % of series). A step is not lost when it enters the
//! recursive baseline, because the level-shift test at τ is what holds it. The change is held, and signalled at
//! the newest cycle, while the level-shift test at τ on every cycle so far rejects at the
//! level it was found at (its power grows as the new level lengthens, since the cycles after τ
//! help estimate the trend) or the CUSUM is above h; when both fail the lot is back in
//! control and the recursive baseline resumes.
//!
//! Proven by seeded simulation (tests/fit_step.rs, 2,000 series a cell): a 20 % step is
//! signalled two, four and ten cycles after it in at least 95 % of series, and step-free
//! series of 15 cycles (first-order, second-order and straight-line decay, sd 0.02) alarm
//! at their newest cycle in at most 2 %.
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

use statrs::distribution::{Continuous, ContinuousCDF, Normal, StudentsT};

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
    /// Index of the first cycle of the new level while a change is held; otherwise the
    /// first cycle after the last in-control one when the CUSUM is above zero.
    pub change_index: Option<usize>,
    /// One-sided p-value of the level-shift test at the held change on every cycle so far
    /// ([`level_shift_p`]), while a change is held.
    pub shift_p: Option<f64>,
    /// A change is signalled at the newest cycle.
    pub alarm: bool,
}

/// Cycles in the first baseline before monitoring starts.
pub const MIN_BASELINE: usize = 5;

/// Candidate change points searched at each cycle: the newest cycle and the two before it.
/// A step is then found when it is one, two or three cycles old; an older one has either
/// been found already or is a slow drift, the CUSUM's business.
pub const SHIFT_WINDOW: usize = 3;

/// Family level of the one-sided level-shift tests over the window: at each cycle the
/// smallest p-value over the [`SHIFT_WINDOW`] candidate change points is compared with
/// `SHIFT_ALPHA/SHIFT_WINDOW` (Bonferroni), and a change once found is held while its own
/// test stays below that same level (or the CUSUM is above h). Chosen by the seeded
/// simulation of tests/fit_step.rs (10,000 step-free series of 15 cycles, 4,000 with a 20 %
/// step, release build): 0.01 gave power 99 % but 2.1 % false alarms on a straight-line
/// decay; 0.006 gives power 97–98 % two, four and ten cycles after the step and false
/// alarms 0.2 % (first order), 0.03 % (second order), 1.3 % (straight line).
pub const SHIFT_ALPHA: f64 = 0.006;

/// A straight line fitted by least squares (intercept a, slope b, residual variance s² on
/// n − 2 degrees of freedom).
#[derive(Debug, Clone, Copy)]
struct Line {
    a: f64,
    b: f64,
    s2: f64,
}

/// The in-control baseline: straight lines fitted to y (a linear decay) and to ln y
/// (first-order decay, exact for it). A point is scored against both and the less
/// alarming score counts: an intersection–union test (Berger, "Multiparameter hypothesis
/// testing and acceptance sampling", Technometrics 24, 1982; recalled from memory), so a
/// cycle is low only when it is low under either trend shape. Choosing the better-fitting
/// line instead (as before) raised false alarms on a straight-line decay to 5 %: the log
/// line, picked by chance, extrapolates above a linear decay.
#[derive(Debug, Clone, Copy)]
struct Baseline {
    lin: Line,
    log: Option<Line>,
    xm: f64,
    sxx: f64,
    n: usize,
}

impl Baseline {
    /// The lines through (x, y) and, when `ly` (ln y of the same points) is given, through
    /// (x, ln y), summed directly (the reference for [`Baseline::from_running`]).
    #[cfg(test)]
    fn fit(x: &[f64], y: &[f64], ly: Option<&[f64]>) -> Option<Baseline> {
        let n = x.len().min(y.len());
        if n < 3 {
            return None;
        }
        let nf = n as f64;
        let xm = x[..n].iter().sum::<f64>() / nf;
        let sxx: f64 = x[..n].iter().map(|xi| (xi - xm).powi(2)).sum();
        if sxx <= 0.0 || !sxx.is_finite() {
            return None;
        }
        let line = |v: &[f64]| {
            let vm = v[..n].iter().sum::<f64>() / nf;
            let sxv: f64 = (0..n).map(|i| (x[i] - xm) * (v[i] - vm)).sum();
            let b = sxv / sxx;
            let a = vm - b * xm;
            let rss: f64 = (0..n).map(|i| (v[i] - a - b * x[i]).powi(2)).sum();
            Line {
                a,
                b,
                s2: rss / (nf - 2.0),
            }
        };
        Some(Baseline {
            lin: line(y),
            log: ly.filter(|l| l.len() >= n).map(line),
            xm,
            sxx,
            n,
        })
    }

    /// The same lines from running sums of the points so far (see [`Running`]): O(1) a
    /// cycle instead of O(n), which made the monitor quadratic in a lot's cycles.
    fn from_running(r: &Running) -> Option<Baseline> {
        if r.n < 3 || r.sxx <= 0.0 || !r.sxx.is_finite() {
            return None;
        }
        let nf = r.n as f64;
        let line = |v: &ScaleSums| {
            let b = v.suv / r.sxx;
            Line {
                a: v.mean - b * r.xm,
                b,
                s2: (v.svv - b * v.suv).max(0.0) / (nf - 2.0),
            }
        };
        Some(Baseline {
            lin: line(&r.lin),
            log: r.log.as_ref().map(line),
            xm: r.xm,
            sxx: r.sxx,
            n: r.n,
        })
    }

    /// P(T ≤ t) of the one-step-ahead prediction error of (x, y), the larger of the two
    /// lines' (a line with no variance gives 0.5; a y ≤ 0, `ly` = −∞, is −∞ on the log
    /// scale). Both share n − 2 degrees of freedom, so the larger probability is that of
    /// the larger t: one CDF evaluation.
    fn p_one(&self, x: f64, y: f64, ly: f64) -> f64 {
        let lev = 1.0 + 1.0 / self.n as f64 + (x - self.xm).powi(2) / self.sxx;
        let t = |l: &Line, v: f64| {
            let sd = (l.s2 * lev).sqrt();
            if !(sd > 0.0 && sd.is_finite()) {
                return 0.0;
            }
            (v - l.a - l.b * x) / sd
        };
        let lin = t(&self.lin, y);
        let t = match &self.log {
            Some(l) => lin.max(t(l, if y > 0.0 { ly } else { f64::NEG_INFINITY })),
            None => lin,
        };
        if t == f64::NEG_INFINITY {
            return 0.0;
        }
        StudentsT::new(0.0, 1.0, (self.n - 2) as f64).map_or(f64::NAN, |d| d.cdf(t))
    }
}

/// One-sided p-value of a drop at index `tau` of the cycles (x, y): the t test of δ in the
/// least-squares fit v = a + b·x − δ·[x ≥ x_tau] (a trend with a level shift, the dummy-
/// variable form of Chow's test, Econometrica 28, 1960; recalled from memory), on n − 3
/// degrees of freedom. v is y (a linear decay with a step) and ln y (first-order decay with
/// a proportional step), and the larger p-value counts (intersection–union, as in the
/// baseline). With the new level one cycle long this is the studentised one-step
/// prediction error of that cycle; with more, the cycles after the change help estimate
/// the trend, so the test keeps its power as the new level lengthens. 1 when it cannot be
/// computed.
pub fn level_shift_p(x: &[f64], y: &[f64], tau: usize) -> f64 {
    let n = x.len().min(y.len());
    if tau == 0 || tau >= n || n < 4 {
        return 1.0;
    }
    let ly: Vec<f64> = y[..n].iter().map(|v| v.ln()).collect();
    let positive = y[..n].iter().all(|&v| v > 0.0);
    let sums = ShiftSums::new(&x[..n], &y[..n], positive.then_some(&ly[..]));
    let t = sums.t(tau);
    if t == f64::NEG_INFINITY {
        return 1.0;
    }
    StudentsT::new(0.0, 1.0, (n - 3) as f64).map_or(1.0, |d| d.cdf(-t))
}

/// Centred sums of one scale (y or ln y) of a stretch of cycles, shared by the level-shift
/// tests at every candidate change point.
#[derive(Debug, Clone, Copy, Default)]
struct ScaleSums {
    mean: f64,
    /// Σ(x − x̄)(v − v̄).
    suv: f64,
    /// Σ(v − v̄)².
    svv: f64,
}

/// Centred sums of the cycles so far, updated one cycle at a time by Welford's method
/// (Welford, Technometrics 4, 1962, for the variance; the co-moment update
/// C ← C + (x − x̄_old)·(v − v̄_new) is its bivariate form; recalled from memory), which
/// stays accurate where Σx² − (Σx)²/n would cancel. The ln y sums are kept while every y
/// so far is positive.
#[derive(Debug, Clone, Copy, Default)]
struct Running {
    n: usize,
    xm: f64,
    /// Σ(x − x̄)².
    sxx: f64,
    lin: ScaleSums,
    log: Option<ScaleSums>,
}

impl Running {
    fn new() -> Self {
        Running {
            log: Some(ScaleSums::default()),
            ..Running::default()
        }
    }

    /// Adds the cycle (x, y) with ly = ln y.
    fn push(&mut self, x: f64, y: f64, ly: f64) {
        self.n += 1;
        let nf = self.n as f64;
        let dx = x - self.xm;
        self.xm += dx / nf;
        self.sxx += dx * (x - self.xm);
        let add = |s: &mut ScaleSums, v: f64| {
            let dv = v - s.mean;
            s.mean += dv / nf;
            s.suv += dx * (v - s.mean);
            s.svv += dv * (v - s.mean);
        };
        add(&mut self.lin, y);
        if y.is_nan() || y <= 0.0 {
            self.log = None;
        }
        if let Some(l) = self.log.as_mut() {
            add(l, ly);
        }
    }
}

/// Raw sums of x, y and ln y over a new level (the cycles from a held change point on),
/// kept as cycles arrive so that a held change is re-tested in O(1) a cycle.
#[derive(Debug, Clone, Copy, Default)]
struct Tail {
    m: usize,
    sx: f64,
    sy: f64,
    sly: f64,
}

impl Tail {
    fn over(x: &[f64], y: &[f64], ly: &[f64]) -> Self {
        let mut t = Tail::default();
        for i in 0..x.len().min(y.len()).min(ly.len()) {
            t.push(x[i], y[i], ly[i]);
        }
        t
    }

    fn push(&mut self, x: f64, y: f64, ly: f64) {
        self.m += 1;
        self.sx += x;
        self.sy += y;
        self.sly += ly;
    }
}

/// The level-shift test's sums over the cycles 0..n: each candidate then costs a sum over
/// its new level only, and the two scales' statistics are compared with one critical value
/// instead of two p-values (see [`ShiftSums::t`]).
struct ShiftSums<'a> {
    x: &'a [f64],
    y: &'a [f64],
    ly: Option<&'a [f64]>,
    xm: f64,
    /// Σ(x − x̄)².
    suu: f64,
    lin: ScaleSums,
    log: Option<ScaleSums>,
}

impl<'a> ShiftSums<'a> {
    /// The sums of (x, y) and, when `ly` (ln y) is given, of (x, ln y).
    fn new(x: &'a [f64], y: &'a [f64], ly: Option<&'a [f64]>) -> Self {
        let n = x.len().min(y.len());
        let (x, y) = (&x[..n], &y[..n]);
        let ly = ly.filter(|l| l.len() >= n).map(|l| &l[..n]);
        let nf = n as f64;
        let xm = x.iter().sum::<f64>() / nf;
        let suu = x.iter().map(|xi| (xi - xm).powi(2)).sum();
        let scale = |v: &[f64]| {
            let mean = v.iter().sum::<f64>() / nf;
            let (mut suv, mut svv) = (0.0, 0.0);
            for (xi, vi) in x.iter().zip(v) {
                let d = vi - mean;
                suv += (xi - xm) * d;
                svv += d * d;
            }
            ScaleSums { mean, suv, svv }
        };
        ShiftSums {
            x,
            y,
            ly,
            xm,
            suu,
            lin: scale(y),
            log: ly.map(scale),
        }
    }

    /// The sums of the cycles 0..=i from running sums that already include cycle i; `ly`
    /// is used only while the running log sums are kept.
    fn from_running(x: &'a [f64], y: &'a [f64], ly: &'a [f64], r: &Running) -> Self {
        let n = r.n.min(x.len()).min(y.len());
        ShiftSums {
            x: &x[..n],
            y: &y[..n],
            ly: r.log.and(ly.get(..n)),
            xm: r.xm,
            suu: r.sxx,
            lin: r.lin,
            log: r.log,
        }
    }

    /// The t statistic of the drop δ on one scale (positive for a drop) for a new level of
    /// `m` cycles with Σ(x − x̄) = `su` and Σ(v − v̄) = `sw` over it; None when the fit is
    /// singular or exact. In centred form (u = x − x̄, w = v − v̄, the intercept orthogonal
    /// to both) the normal equations of (1, u, −D) are
    /// [[n, 0, −m], [0, Σu², −Σ_D u], [−m, −Σ_D u, m]]·β = [0, Σuw, −Σ_D w], with D the
    /// indicator of the new level, and RSS = Σw² − βᵀXᵀw.
    fn t_one(&self, s: &ScaleSums, su: f64, sw: f64, m: f64) -> Option<f64> {
        let n = self.x.len();
        let inv = invert3([[n as f64, 0.0, -m], [0.0, self.suu, -su], [-m, -su, m]])?;
        let rhs = [0.0, s.suv, -sw];
        let beta: [f64; 3] = std::array::from_fn(|r| (0..3).map(|c| inv[r][c] * rhs[c]).sum());
        let rss = s.svv - beta[1] * s.suv + beta[2] * sw;
        let se = (rss / (n - 3) as f64 * inv[2][2]).sqrt();
        if !(se > 0.0 && se.is_finite()) {
            return None;
        }
        Some(beta[2] / se)
    }

    /// The level-shift statistic at `tau`: the smaller t of the two scales (the larger
    /// p-value, since both have n − 3 degrees of freedom; intersection–union), −∞ when
    /// either cannot be computed (p = 1). The new level's sums are taken here, O(n − tau).
    fn t(&self, tau: usize) -> f64 {
        let n = self.x.len();
        if tau == 0 || tau >= n || n < 4 {
            return f64::NEG_INFINITY;
        }
        let (mut su, mut sw, mut swl) = (0.0, 0.0, 0.0);
        for i in tau..n {
            su += self.x[i] - self.xm;
            sw += self.y[i] - self.lin.mean;
            if let (Some(ly), Some(l)) = (self.ly, &self.log) {
                swl += ly[i] - l.mean;
            }
        }
        self.t_sums(su, (sw, swl), (n - tau) as f64)
    }

    /// [`Self::t`] from the raw sums of the new level kept as cycles arrive.
    fn t_tail(&self, tail: &Tail) -> f64 {
        let n = self.x.len();
        if tail.m == 0 || tail.m >= n || n < 4 {
            return f64::NEG_INFINITY;
        }
        let m = tail.m as f64;
        let su = tail.sx - m * self.xm;
        let sw = tail.sy - m * self.lin.mean;
        let swl = self.log.map_or(0.0, |l| tail.sly - m * l.mean);
        self.t_sums(su, (sw, swl), m)
    }

    fn t_sums(&self, su: f64, (sw, swl): (f64, f64), m: f64) -> f64 {
        let lin = self.t_one(&self.lin, su, sw, m);
        let log = match (self.ly, &self.log) {
            (Some(_), Some(s)) => self.t_one(s, su, swl, m),
            _ => Some(f64::INFINITY),
        };
        match (lin, log) {
            (Some(a), Some(b)) => a.min(b),
            _ => f64::NEG_INFINITY,
        }
    }
}

/// Critical values of the level-shift test kept for this many degrees of freedom; more
/// are computed when asked.
const CRITICAL_TABLE: usize = 1024;

/// The upper critical value t₁₋α(df) with α = [`SHIFT_ALPHA`]/`tried` (`tried` from 1 to
/// [`SHIFT_WINDOW`]): the test rejects, p < α, exactly when t exceeds it. Each is found
/// once per process: the Student t CDF is an incomplete beta function, and comparing
/// statistics with a critical value saves one or two per candidate and cycle.
fn shift_critical(df: usize, tried: usize) -> f64 {
    static TABLE: [[std::sync::OnceLock<f64>; SHIFT_WINDOW]; CRITICAL_TABLE] =
        [const { [const { std::sync::OnceLock::new() }; SHIFT_WINDOW] }; CRITICAL_TABLE];
    let tried = tried.clamp(1, SHIFT_WINDOW);
    let alpha = SHIFT_ALPHA / tried as f64;
    match TABLE.get(df) {
        Some(row) => *row[tried - 1].get_or_init(|| upper_t_critical(alpha, df)),
        None => {
            // Beyond the table (a lot of more than a thousand cycles): the expansion, once
            // the normal quantile is known; solving the CDF at each cycle's own degrees of
            // freedom made the monitor's cost grow faster than the lot.
            static Z: [std::sync::OnceLock<f64>; SHIFT_WINDOW] =
                [const { std::sync::OnceLock::new() }; SHIFT_WINDOW];
            let z = *Z[tried - 1].get_or_init(|| {
                Normal::new(0.0, 1.0).map_or(f64::INFINITY, |d| d.inverse_cdf(1.0 - alpha))
            });
            t_quantile_expansion(z, df)
        }
    }
}

/// The upper quantile of Student's t on `df` degrees of freedom from the normal one `z`, by
/// Fisher's expansion in powers of 1/df (Abramowitz & Stegun, Handbook of Mathematical
/// Functions, 1964, 26.7.5; recalled from memory, and checked against the solved CDF in
/// the tests: within 10⁻¹⁴ relative from 1,024 degrees of freedom on).
fn t_quantile_expansion(z: f64, df: usize) -> f64 {
    let nu = df as f64;
    let z2 = z * z;
    let g1 = (z2 + 1.0) * z / 4.0;
    let g2 = ((5.0 * z2 + 16.0) * z2 + 3.0) * z / 96.0;
    let g3 = (((3.0 * z2 + 19.0) * z2 + 17.0) * z2 - 15.0) * z / 384.0;
    let g4 = ((((79.0 * z2 + 776.0) * z2 + 1482.0) * z2 - 1920.0) * z2 - 945.0) * z / 92160.0;
    z + (g1 + (g2 + (g3 + g4 / nu) / nu) / nu) / nu
}

/// t with P(T > t) = α on `df` degrees of freedom: statrs' inverse CDF polished by Newton
/// steps on the CDF itself, so that the comparison with the critical value and the
/// p-value agree to rounding. +∞ (never reject) when it cannot be computed.
fn upper_t_critical(alpha: f64, df: usize) -> f64 {
    let Ok(d) = StudentsT::new(0.0, 1.0, df as f64) else {
        return f64::INFINITY;
    };
    let mut q = d.inverse_cdf(alpha);
    for _ in 0..4 {
        let f = d.pdf(q);
        if !(f > 0.0 && q.is_finite()) {
            break;
        }
        let step = (d.cdf(q) - alpha) / f;
        q -= step;
        if step.abs() <= 1e-15 * q.abs() {
            break;
        }
    }
    if q.is_finite() { -q } else { f64::INFINITY }
}

/// The inverse of a symmetric 3 × 3 matrix by cofactors; None when it is singular.
fn invert3(m: [[f64; 3]; 3]) -> Option<[[f64; 3]; 3]> {
    let c =
        |r0: usize, r1: usize, c0: usize, c1: usize| m[r0][c0] * m[r1][c1] - m[r0][c1] * m[r1][c0];
    let cof = [
        [c(1, 2, 1, 2), -c(1, 2, 0, 2), c(1, 2, 0, 1)],
        [-c(0, 2, 1, 2), c(0, 2, 0, 2), -c(0, 2, 0, 1)],
        [c(0, 1, 1, 2), -c(0, 1, 0, 2), c(0, 1, 0, 1)],
    ];
    let det = m[0][0] * cof[0][0] + m[0][1] * cof[0][1] + m[0][2] * cof[0][2];
    let scale = m[0][0].abs().max(m[1][1].abs()).max(m[2][2].abs());
    let regular = det.abs() > 1e-12 * scale.powi(3);
    if !regular {
        return None;
    }
    let mut out = [[0.0; 3]; 3];
    for r in 0..3 {
        for k in 0..3 {
            // The inverse is the transposed cofactor matrix over the determinant.
            out[r][k] = cof[k][r] / det;
        }
    }
    Some(out)
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
    // ln y once; the log scale serves a stretch only while every y in it is positive
    // (the running sums drop it at the first y that is not).
    let ly: Vec<f64> = y[..n].iter().map(|v| v.ln()).collect();
    let mut run = Running::new();
    for i in 0..MIN_BASELINE {
        run.push(x[i], y[i], ly[i]);
    }
    let mut z = vec![f64::NAN; n];
    let mut path = vec![0.0; n];
    let mut s: f64 = 0.0;
    // The first index of the held change, and the sums of its new level so far.
    let mut held: Option<(usize, Tail)> = None;
    let mut last_zero = MIN_BASELINE - 1;
    let mut first_alarm = None;
    for i in MIN_BASELINE..n {
        // Recursive one-step scores: independent for an in-control lot.
        let base = Baseline::from_running(&run)?;
        z[i] = to_z(base.p_one(x[i], y[i], ly[i]));
        s = (s - z[i] - k).max(0.0);
        path[i] = s;
        if s == 0.0 {
            last_zero = i;
        }
        run.push(x[i], y[i], ly[i]);
        let sums = ShiftSums::from_running(x, y, &ly, &run);
        // Degrees of freedom of the level-shift test on the i + 1 cycles so far.
        let df = i - 2;
        if let Some((_, tail)) = held.as_mut() {
            tail.push(x[i], y[i], ly[i]);
            if !(sums.t_tail(tail) > shift_critical(df, SHIFT_WINDOW) || s > h) {
                // Back in control.
                held = None;
            }
            continue;
        }
        let lo = MIN_BASELINE.max((i + 1).saturating_sub(SHIFT_WINDOW));
        // The candidate with the largest statistic has the smallest p-value.
        let (t_max, t_at) = (lo..=i)
            .map(|t0| (sums.t(t0), t0))
            .fold((f64::NEG_INFINITY, i), |b, c| if c.0 > b.0 { c } else { b });
        let tau = if t_max > shift_critical(df, i + 1 - lo) {
            t_at
        } else if s > h {
            last_zero + 1
        } else {
            continue;
        };
        first_alarm.get_or_insert(i);
        held = Some((tau, Tail::over(&x[tau..=i], &y[tau..=i], &ly[tau..=i])));
    }
    let held = held.map(|(tau, _)| tau);
    let max = path.iter().copied().fold(0.0, f64::max);
    let alarm = held.is_some();
    let change_index = match held {
        Some(tau) => Some(tau),
        None => (s > 0.0 && last_zero + 1 < n).then_some(last_zero + 1),
    };
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
        shift_p: held.map(|tau| level_shift_p(&x[..n], &y[..n], tau)),
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
    fn level_shift_test_sees_a_step_and_not_a_trend() {
        // A first-order decay with alternating ±0.01 scatter, then 20 % lower from index 10.
        let x: Vec<f64> = (1..=14).map(f64::from).collect();
        let wiggle = |i: usize| if i.is_multiple_of(2) { 0.01 } else { -0.01 };
        let flat: Vec<f64> = x
            .iter()
            .enumerate()
            .map(|(i, &v)| (-0.03 * v).exp() + wiggle(i))
            .collect();
        let step: Vec<f64> = flat
            .iter()
            .enumerate()
            .map(|(i, &v)| if i >= 9 { v - 0.15 } else { v })
            .collect();
        assert!(level_shift_p(&x, &step, 9) < 1e-6);
        assert!(level_shift_p(&x, &flat, 9) > 0.05);
        // A rise is not a drop; out-of-range change points give no evidence.
        let rise: Vec<f64> = flat
            .iter()
            .enumerate()
            .map(|(i, &v)| if i >= 9 { v + 0.15 } else { v })
            .collect();
        assert!(level_shift_p(&x, &rise, 9) > 0.99);
        assert_eq!(level_shift_p(&x, &step, 0), 1.0);
        assert_eq!(level_shift_p(&x, &step, 14), 1.0);
        // The monitor holds the change from index 9 to the end.
        let m = monitor(&x, &step, 0.5, 4.5).expect("enough cycles");
        assert!(m.alarm && m.change_index == Some(9), "{m:?}");
        assert!(!monitor(&x, &flat, 0.5, 4.5).expect("enough cycles").alarm);
    }

    /// The level-shift p-value as first written: normal equations accumulated point by
    /// point and residuals summed directly, one CDF per scale.
    fn level_shift_p_direct(x: &[f64], y: &[f64], tau: usize) -> f64 {
        let n = x.len().min(y.len());
        if tau == 0 || tau >= n || n < 4 {
            return 1.0;
        }
        let df = (n - 3) as f64;
        let t_dist = StudentsT::new(0.0, 1.0, df).expect("df > 0");
        let xm = x[..n].iter().sum::<f64>() / n as f64;
        let one = |v: &dyn Fn(usize) -> f64| -> Option<f64> {
            let mut a = [[0.0f64; 4]; 3];
            for i in 0..n {
                let row = [1.0, x[i] - xm, if i >= tau { -1.0 } else { 0.0 }];
                for r in 0..3 {
                    for c in 0..3 {
                        a[r][c] += row[r] * row[c];
                    }
                    a[r][3] += row[r] * v(i);
                }
            }
            let inv = invert3([
                [a[0][0], a[0][1], a[0][2]],
                [a[1][0], a[1][1], a[1][2]],
                [a[2][0], a[2][1], a[2][2]],
            ])?;
            let beta: Vec<f64> = (0..3)
                .map(|r| (0..3).map(|c| inv[r][c] * a[c][3]).sum())
                .collect();
            let rss: f64 = (0..n)
                .map(|i| {
                    let d = if i >= tau { -1.0 } else { 0.0 };
                    (v(i) - beta[0] - beta[1] * (x[i] - xm) - beta[2] * d).powi(2)
                })
                .sum();
            let se = (rss / df * inv[2][2]).sqrt();
            (se > 0.0 && se.is_finite()).then(|| t_dist.cdf(-beta[2] / se))
        };
        let lin = one(&|i| y[i]).unwrap_or(1.0);
        if y[..n].iter().all(|&v| v > 0.0) {
            lin.max(one(&|i| y[i].ln()).unwrap_or(1.0))
        } else {
            lin
        }
    }

    /// The monitor as first written (every test a p-value, every baseline refitted with
    /// its logarithms): the reference the faster [`monitor`] must agree with.
    fn monitor_direct(x: &[f64], y: &[f64], k: f64, h: f64) -> Option<Monitoring> {
        let n = x.len().min(y.len());
        if n <= MIN_BASELINE {
            return None;
        }
        let normal = Normal::new(0.0, 1.0).ok()?;
        let t_cdf = |df: usize, t: f64| {
            if t == f64::NEG_INFINITY {
                0.0
            } else {
                StudentsT::new(0.0, 1.0, df as f64).map_or(f64::NAN, |d| d.cdf(t))
            }
        };
        let mut z = vec![f64::NAN; n];
        let mut path = vec![0.0; n];
        let (mut s, mut held, mut last_zero, mut first_alarm, mut shift_p) =
            (0.0f64, None, MIN_BASELINE - 1, None, None);
        for i in MIN_BASELINE..n {
            let (xs, ys) = (&x[..=i], &y[..=i]);
            let logs: Vec<f64> = y[..i].iter().map(|v| v.ln()).collect();
            let all_pos = y[..i].iter().all(|&v| v > 0.0);
            let b = Baseline::fit(&x[..i], &y[..i], all_pos.then_some(&logs[..]))?;
            let lev = 1.0 + 1.0 / b.n as f64 + (x[i] - b.xm).powi(2) / b.sxx;
            let p = |l: &Line, v: f64| {
                let sd = (l.s2 * lev).sqrt();
                if !(sd > 0.0 && sd.is_finite()) {
                    return 0.5;
                }
                t_cdf(b.n - 2, (v - l.a - l.b * x[i]) / sd)
            };
            let mut p_one = p(&b.lin, y[i]);
            if let Some(l) = &b.log {
                let v = if y[i] > 0.0 {
                    y[i].ln()
                } else {
                    f64::NEG_INFINITY
                };
                p_one = p_one.max(p(l, v));
            }
            z[i] = normal.inverse_cdf(p_one.clamp(1e-12, 1.0 - 1e-12));
            s = (s - z[i] - k).max(0.0);
            path[i] = s;
            if s == 0.0 {
                last_zero = i;
            }
            if let Some(tau) = held {
                let p = level_shift_p_direct(xs, ys, tau);
                if p < SHIFT_ALPHA / SHIFT_WINDOW as f64 || s > h {
                    shift_p = Some(p);
                } else {
                    held = None;
                    shift_p = None;
                }
                continue;
            }
            let lo = MIN_BASELINE.max((i + 1).saturating_sub(SHIFT_WINDOW));
            let tried = (i + 1 - lo) as f64;
            let (p_min, t_min) = (lo..=i)
                .map(|t0| (level_shift_p_direct(xs, ys, t0), t0))
                .fold((f64::INFINITY, i), |b, c| if c.0 < b.0 { c } else { b });
            let tau = if p_min * tried < SHIFT_ALPHA {
                t_min
            } else if s > h {
                last_zero + 1
            } else {
                continue;
            };
            first_alarm.get_or_insert(i);
            shift_p = Some(level_shift_p_direct(xs, ys, tau));
            held = Some(tau);
        }
        let max = path.iter().copied().fold(0.0, f64::max);
        let change_index = match held {
            Some(tau) => Some(tau),
            None => (s > 0.0 && last_zero + 1 < n).then_some(last_zero + 1),
        };
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
            alarm: held.is_some(),
        })
    }

    /// The monitor and its direct computation on (x, y), checked to take the same
    /// decisions: alarm, change point and first alarm.
    fn both_monitors(x: &[f64], y: &[f64], case: usize) -> (Monitoring, Monitoring) {
        let fast = monitor(x, y, 0.5, 4.5).expect("enough cycles");
        let direct = monitor_direct(x, y, 0.5, 4.5).expect("enough cycles");
        assert_eq!(fast.alarm, direct.alarm, "case {case}");
        assert_eq!(fast.change_index, direct.change_index, "case {case}");
        assert_eq!(
            fast.cusum.first_alarm, direct.cusum.first_alarm,
            "case {case}"
        );
        (fast, direct)
    }

    #[test]
    fn monitor_agrees_with_the_direct_computation() {
        // Seeded series (first-order and straight-line decay, sd 0.02, with and without a
        // 10 % or 20 % step at cycle 10, 8 to 40 cycles): the same alarms, change points, first
        // alarms and scores.
        use rand::SeedableRng;
        use rand_distr::Distribution;
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(15);
        let noise = rand_distr::Normal::new(0.0, 0.02).expect("sd");
        let mut alarms = 0;
        for case in 0..1500 {
            let n = 8 + case % 33;
            let step = [0.0, 0.0, 0.1, 0.2][case % 4];
            let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
            let y: Vec<f64> = x
                .iter()
                .map(|&v| {
                    let trend = if case % 3 == 0 {
                        1.0 - 0.03 * v
                    } else {
                        (-0.03 * v).exp()
                    };
                    trend * if v >= 10.0 { 1.0 - step } else { 1.0 } + noise.sample(&mut rng)
                })
                .collect();
            let (fast, direct) = both_monitors(&x, &y, case);
            // The scores agree to rounding: the running sums reorder the arithmetic.
            let close = |a: f64, b: f64| {
                a.to_bits() == b.to_bits()
                    || (a.is_nan() && b.is_nan())
                    || (a - b).abs() <= 1e-9 * (1.0 + b.abs())
            };
            for (a, b) in fast.cusum.path.iter().zip(&direct.cusum.path) {
                assert!(close(*a, *b), "case {case}: path {a} vs {b}");
            }
            for (a, b) in fast.z.iter().zip(&direct.z) {
                assert!(close(*a, *b), "case {case}: z {a} vs {b}");
            }
            match (fast.shift_p, direct.shift_p) {
                (Some(a), Some(b)) => assert!((a - b).abs() <= 1e-6 * b + 1e-300, "{a} {b}"),
                (a, b) => assert_eq!(a, b, "case {case}"),
            }
            alarms += usize::from(fast.alarm);
        }
        // Both outcomes were exercised.
        assert!(alarms > 300 && alarms < 1200, "{alarms}");
    }

    #[test]
    fn monitor_agrees_over_long_lots_and_large_x() {
        // Long lots (300 cycles, x in hours from 10⁴ on) with a step held over 200 cycles:
        // the running sums and the held level's sums give the direct computation's
        // decisions.
        use rand::SeedableRng;
        use rand_distr::Distribution;
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(16);
        let noise = rand_distr::Normal::new(0.0, 0.01).expect("sd");
        for case in 0..12 {
            let n = 300;
            let step = [0.0, 0.1, 0.2][case % 3];
            let x: Vec<f64> = (0..n).map(|i| 1.0e4 + 12.5 * i as f64).collect();
            let y: Vec<f64> = (0..n)
                .map(|i| {
                    let trend = (-0.002 * i as f64).exp();
                    trend * if i >= 100 { 1.0 - step } else { 1.0 } + noise.sample(&mut rng)
                })
                .collect();
            let (fast, direct) = both_monitors(&x, &y, case);
            for (a, b) in fast.z.iter().zip(&direct.z) {
                assert!(
                    (a.is_nan() && b.is_nan()) || (a - b).abs() <= 1e-7 * (1.0 + b.abs()),
                    "case {case}: z {a} vs {b}"
                );
            }
            if step > 0.15 {
                assert!(
                    fast.cusum
                        .first_alarm
                        .is_some_and(|i| (100..103).contains(&i)),
                    "case {case}: {:?}",
                    fast.cusum.first_alarm
                );
            }
        }
    }

    #[test]
    fn critical_values_match_the_p_values() {
        for df in [1, 2, 3, 5, 10, 37, 200, 5000] {
            for tried in 1..=SHIFT_WINDOW {
                let c = shift_critical(df, tried);
                let d = StudentsT::new(0.0, 1.0, df as f64).expect("df");
                let alpha = SHIFT_ALPHA / tried as f64;
                let p = d.cdf(-c);
                // Beyond the table the value is the expansion (exact to 1e-14 against scipy)
                // and statrs' CDF is the less precise of the two there.
                let tol = if df < CRITICAL_TABLE { 1e-12 } else { 1e-10 };
                assert!((p - alpha).abs() <= tol * alpha, "df {df}: {p} vs {alpha}");
            }
        }
        // Reference values: scipy 1.17.1, scipy.stats.t.isf(0.006 / tried, df); beyond the
        // table the expansion is held to 1e-14 of them, and statrs' own CDF, solved, to its
        // precision there (3e-11 at 200,000 degrees of freedom).
        for (df, tried, want) in [
            (1, 1, 53.045364363156104),
            (10, 1, 3.062169254194399),
            (10, 3, 3.7162355007520147),
            (37, 2, 2.9154371732234714),
            (200, 3, 2.911923852870668),
            (1024, 1, 2.5166357786373585),
            (1024, 3, 2.8846989624186867),
            (5000, 2, 2.748956571780474),
            (50_000, 3, 2.8782953464413703),
            (200_000, 1, 2.512167285576762),
        ] {
            let got = shift_critical(df, tried);
            let tol = if df < CRITICAL_TABLE { 1e-9 } else { 1e-14 };
            assert!((got - want).abs() <= tol * want, "df {df}: {got} vs {want}");
            let solved = upper_t_critical(SHIFT_ALPHA / tried as f64, df);
            assert!((got - solved).abs() <= 1e-9 * want, "{got} vs {solved}");
        }
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
