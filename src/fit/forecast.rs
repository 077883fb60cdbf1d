//! When will the fitted activity cross the replacement criterion, and how sure are we.
//!
//! x* solves h(x*) = 0 with h(x) = y(x; θ) − c(θ), c the criterion (a constant, or a
//! fraction f of the fitted fresh activity y(0; θ), which moves with θ).
//!
//! The interval inverts the pointwise test of "the curve is at the criterion at x":
//! x belongs to it when |ĥ(x)| ≤ t·sd(ĥ(x)), sd from the delta method on h (gradient
//! ∂y(x)/∂θ − f·∂y(0)/∂θ and the covariance of θ), t Student's with n − p degrees of
//! freedom. This is Fieller's construction for a ratio (Fieller 1954, recalled from
//! memory), known in regression as the calibration or inverse-prediction interval (Seber &
//! Wild, "Nonlinear Regression", 1989, recalled from memory). It is exact for the linear
//! model, it follows the geometry of the curve (no symmetric ± around x*), and it is
//! searched only from the newest cycle on, so it never starts before the data end and never
//! reaches negative x. When the lower confidence band never reaches the criterion the upper
//! end is unbounded, and the interval stated is the one-sided [lower, ∞) at the same
//! confidence (its lower end from the one-sided t quantile). The test of "the curve is at
//! the criterion at x" is the delta method on h for most models; first and second order
//! take it on a scale where they are linear in kd inside a model average
//! ([`FitDecision::stat`]), and, when the data are at hand (every analysis of
//! least-squares fits), the first-order model with residual activity takes the profile
//! likelihood instead ([`ResidualProfile`]). A criterion never reached
//! under the fitted curve may still carry such a lower limit: the earliest crossing the
//! data do not exclude. Its coverage is checked by seeded simulation (tests/fit_states.rs,
//! tests/fit_averaging.rs, tests/fit_coverage.rs).
//!
//! A forecast is only offered when the loss over the observed cycles, y(x_first) −
//! y(x_last), is significant by a one-sided test at the chosen confidence: otherwise the
//! state is [`ForecastStatus::NoSignificantTrend`] and only a lower bound on the crossing is
//! given. A loss significantly below zero (activity rising) is
//! [`ForecastStatus::NotReached`] with [`NotReachedWhy::SlopeWrongSign`].
//!
//! The crossing search knows curves that end (the power law of order m < 1 reaches zero at
//! x0 = 1/((1 − m)·kd) and is undefined beyond): it bisects into the last finite point, and
//! a curve that ends at zero crosses any positive criterion before its end.

use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, StudentsT};

use super::engine::{FitResult, quad_form};
use super::models::ModelId;

/// The replacement criterion.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", tag = "kind", content = "value")]
pub enum Criterion {
    /// Replace when activity falls to this value.
    Absolute(f64),
    /// Replace when activity falls to this fraction of the fitted fresh activity y(0).
    FractionOfFresh(f64),
}

pub use crate::model::ForecastStatus;

/// Why the criterion is never reached.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum NotReachedWhy {
    /// Activity levels off above the criterion.
    AsymptoteAbove,
    /// Activity is not falling at the newest point.
    SlopeWrongSign,
    /// Falling, but not within 10⁶ spans of the observed x range.
    BeyondHorizon,
    /// The criterion itself is not a finite number (e.g. a fraction of a non-finite y(0)).
    UndefinedCriterion,
    /// The fitted curve ends (leaves the model's domain) above the criterion.
    CurveEnds,
}

/// A forecast of the replacement point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Forecast {
    pub status: ForecastStatus,
    pub why_not: Option<NotReachedWhy>,
    /// The activity value that triggers replacement (None if not finite).
    pub threshold: Option<f64>,
    /// x* (None when not reached, and when no crossing is offered).
    pub x: Option<f64>,
    /// Lower and upper interval limits; None means unbounded on that side. A crossing ahead
    /// has limits at or after the newest cycle.
    pub lower: Option<f64>,
    pub upper: Option<f64>,
    /// Delta-method standard error of x* (for information; the interval does not use it).
    pub std_error: Option<f64>,
    pub confidence: f64,
    pub t_quantile: Option<f64>,
    /// Cumulative lifetime TON at x*, when TON per cycle was given.
    pub lifetime_ton: Option<f64>,
    /// Fitted loss of activity from the first to the newest fitted cycle.
    #[serde(default)]
    pub loss: Option<f64>,
    /// One-sided lower confidence bound of that loss; ≤ 0 means no significant loss.
    #[serde(default)]
    pub loss_lower: Option<f64>,
    /// For [`ForecastStatus::Withheld`]: the first x of the new level.
    #[serde(default)]
    pub withheld_since: Option<f64>,
    /// For [`ForecastStatus::Withheld`]: how many more cycles of the new level are needed.
    #[serde(default)]
    pub more_cycles_needed: Option<usize>,
    /// The crossing in dates at the lot's cadence, with the order-by date; set by the
    /// application, which knows the batch starts, the time zone and the lead time.
    /// Flattened: JSON readers find `forecast.crossing_date` and `forecast.order_by`.
    #[serde(default, flatten)]
    pub dates: Option<Box<crate::model::calendar::CrossingDates>>,
}

impl Forecast {
    /// An empty forecast in state `status`.
    pub fn empty(status: ForecastStatus, threshold: Option<f64>, confidence: f64) -> Forecast {
        Forecast {
            status,
            why_not: None,
            threshold,
            x: None,
            lower: None,
            upper: None,
            std_error: None,
            confidence,
            t_quantile: None,
            lifetime_ton: None,
            loss: None,
            loss_lower: None,
            withheld_since: None,
            more_cycles_needed: None,
            dates: None,
        }
    }
}

/// Two-sided Student-t quantile for `confidence` with `dof` degrees of freedom.
pub fn t_quantile(confidence: f64, dof: usize) -> Option<f64> {
    if dof == 0 || !(confidence > 0.0 && confidence < 1.0) {
        return None;
    }
    // The inverse CDF is an iterative incomplete-beta inversion, and one analysis asks for
    // the same few (confidence, dof) pairs several times: the last ones are remembered.
    thread_local! {
        static RECENT: std::cell::RefCell<[(u64, usize, f64); 16]> =
            const { std::cell::RefCell::new([(u64::MAX, usize::MAX, f64::NAN); 16]) };
    }
    let key = confidence.to_bits();
    let hit = RECENT.with_borrow(|r| r.iter().find(|e| e.0 == key && e.1 == dof).map(|e| e.2));
    let q = match hit {
        Some(q) => q,
        None => {
            let t = StudentsT::new(0.0, 1.0, dof as f64).ok()?;
            let q = t.inverse_cdf(1.0 - (1.0 - confidence) / 2.0);
            RECENT.with_borrow_mut(|r| {
                r.rotate_right(1);
                r[0] = (key, dof, q);
            });
            q
        }
    };
    q.is_finite().then_some(q)
}

/// One-sided Student-t quantile q with P(T ≤ q) = `confidence` (> 0.5).
pub fn t_one_sided(confidence: f64, dof: usize) -> Option<f64> {
    if !(confidence > 0.5 && confidence < 1.0) {
        return None;
    }
    t_quantile(2.0 * confidence - 1.0, dof)
}

/// Student-t distribution function P(T ≤ t) for an integer number of degrees of freedom,
/// in closed form: with θ = atan(t/√ν), P(|T| < t) is
/// (2/π)·(θ + sin θ·(cos θ + (2/3)·cos³θ + … + (2·4···(ν−3))/(1·3···(ν−2))·cos^(ν−2)θ)) for
/// odd ν and sin θ·(1 + (1/2)·cos²θ + … + (1·3···(ν−3))/(2·4···(ν−2))·cos^(ν−2)θ) for even ν
/// (Abramowitz & Stegun, "Handbook of Mathematical Functions", 1964, 26.7.3–26.7.4,
/// recalled from memory; checked against statrs in the tests). O(ν) products, no special
/// function: the model-averaged interval evaluates it for every model at every step of
/// its search. NaN for `dof` = 0 or a NaN `t`.
pub fn t_cdf(t: f64, dof: usize) -> f64 {
    if dof == 0 || t.is_nan() {
        return f64::NAN;
    }
    let nu = dof as f64;
    let theta = (t / nu.sqrt()).atan();
    let (s, c) = theta.sin_cos();
    let c2 = c * c;
    let a = if dof % 2 == 1 {
        // Odd: (2/π)(θ + sin θ·Σ), Σ = cos θ·(1 + (2/3)cos²θ + (2·4)/(3·5)cos⁴θ + …).
        let mut sum = 0.0;
        if dof > 1 {
            let mut term = c;
            sum = term;
            let mut k = 2;
            while k < dof - 1 {
                term *= c2 * k as f64 / (k + 1) as f64;
                sum += term;
                k += 2;
            }
        }
        std::f64::consts::FRAC_2_PI * (theta + s * sum)
    } else {
        // Even: sin θ·(1 + (1/2)cos²θ + (1·3)/(2·4)cos⁴θ + …).
        let mut term = 1.0;
        let mut sum = 1.0;
        let mut k = 1;
        while k < dof - 1 {
            term *= c2 * k as f64 / (k + 1) as f64;
            sum += term;
            k += 2;
        }
        s * sum
    };
    (0.5 + 0.5 * a).clamp(0.0, 1.0)
}

/// A root of h in [a, b] given h(a) > 0 ≥ h(b) (`fa`, `fb`: h(a) and h(b), NaN where not
/// evaluated), to 10⁻¹² relative (far below any meaning a cycle number has), by the Illinois variant of false position (Dowell & Jarratt, BIT 11,
/// 1971, 168–174, recalled from memory) with a bisection step whenever an interpolation would
/// not shrink the bracket enough or a value is not finite: a band can be a profile-likelihood
/// search per evaluation, and bisection needs about 40 of them.
pub(super) fn bracketed(
    h: impl Fn(f64) -> f64,
    mut a: f64,
    mut fa: f64,
    mut b: f64,
    mut fb: f64,
) -> f64 {
    // Which end moved last (+1 a, −1 b): when the same end moves twice, the other end's value
    // is halved so that it moves too.
    let mut last = 0i8;
    // The bracket's width three steps ago: if it has not halved since, bisect.
    let mut width = b - a;
    for it in 0..200 {
        let mid = 0.5 * (a + b);
        if mid <= a || mid >= b || b - a <= 1e-12 * (1.0 + a.abs()) {
            break;
        }
        let stuck = it % 3 == 2 && b - a > 0.5 * width;
        if it % 3 == 2 {
            width = b - a;
        }
        let mut m = mid;
        if !stuck && fa.is_finite() && fb.is_finite() && fa > fb {
            let f = a + (b - a) * fa / (fa - fb);
            if f > a && f < b {
                m = f;
            }
        }
        let fm = h(m);
        if fm > 0.0 {
            a = m;
            fa = fm;
            if last == 1 {
                fb *= 0.5;
            }
            last = 1;
        } else {
            // NaN counts as "at or below", as in plain bisection, and stops interpolation.
            b = m;
            fb = fm;
            if last == -1 {
                fa *= 0.5;
            }
            last = -1;
        }
    }
    0.5 * (a + b)
}

/// Where a search for h ≤ 0 ended.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Search {
    Crossed(f64),
    /// The curve is undefined beyond this x and stays above the criterion up to it.
    Ends,
    Horizon,
}

/// Finds where `h` first turns ≤ 0 after `from` (h(from) > 0), stepping out geometrically
/// (by 1.5 while a step is shorter than the data's span, then by 2).
/// Where h turns NaN (the curve leaves its domain), bisects to the last finite point: if h
/// is ≤ 0 there (a curve that ends at zero), the crossing lies before it.
fn search_after(h: &impl Fn(f64) -> f64, from: f64, span: f64) -> Search {
    let mut a = from;
    // h(a) once known (h(from) is not evaluated: it is only known to be > 0).
    let mut ha = f64::NAN;
    let mut step = 0.05 * span;
    for _ in 0..200 {
        let b = a + step;
        let hb = h(b);
        if hb.is_nan() {
            // Bisect on finiteness between a (finite) and b (not).
            let (mut lo, mut hi) = (a, b);
            for _ in 0..200 {
                let m = 0.5 * (lo + hi);
                if m <= lo || m >= hi {
                    break;
                }
                if h(m).is_nan() { hi = m } else { lo = m }
            }
            let hlo = h(lo);
            return if hlo <= 0.0 {
                Search::Crossed(bracketed(h, a, ha, lo, hlo))
            } else {
                Search::Ends
            };
        }
        if hb <= 0.0 {
            return Search::Crossed(bracketed(h, a, ha, b, hb));
        }
        if b - from > 1e6 * span {
            return Search::Horizon;
        }
        a = b;
        ha = hb;
        // Finely near the data, then doubling: the horizon (10⁶ spans) in 28 steps, not 40.
        step *= if step < span { 1.5 } else { 2.0 };
    }
    Search::Horizon
}

/// Finds the first x in [lo, hi] with h ≤ 0, scanning then bisecting.
fn first_crossing_within(h: &impl Fn(f64) -> f64, lo: f64, hi: f64) -> Option<f64> {
    // 400 steps, looked at 10 at a time: a coarse step whose end is at or below the
    // criterion is scanned finely from its start. The same result as scanning all 400 unless
    // h dips below and back within one coarse step (40 evaluations instead of 400 on a
    // monotone h; a band may be a profile-likelihood search per evaluation).
    let (coarse, fine) = (40, 10);
    let at = |i: usize| lo + (hi - lo) * i as f64 / (coarse * fine) as f64;
    // h at the previous coarse point (h(lo) is not evaluated).
    let mut h_prev = f64::NAN;
    for c in 1..=coarse {
        let h_c = h(at(c * fine));
        if h_c <= 0.0 {
            let (mut a, mut ha) = (at((c - 1) * fine), h_prev);
            for i in (c - 1) * fine + 1..=c * fine {
                let b = at(i);
                let hb = if i == c * fine { h_c } else { h(b) };
                if hb <= 0.0 {
                    return Some(bracketed(h, a, ha, b, hb));
                }
                (a, ha) = (b, hb);
            }
        }
        h_prev = h_c;
    }
    None
}

/// The decision function of a forecast: at x, h(x) = y(x) − c with its standard deviation
/// (NaN where the curve is undefined).
pub trait Decision {
    /// (h(x), sd of h(x)); sd NaN when unknown.
    fn at(&self, x: f64) -> (f64, f64);
    /// h(x) alone.
    fn value(&self, x: f64) -> f64 {
        self.at(x).0
    }
    /// Fitted loss y(a) − y(b) and its standard deviation.
    fn loss(&self, a: f64, b: f64) -> (f64, f64);
    /// The fitted curve's slope at x (for the reason a crossing is not reached).
    fn slope(&self, x: f64) -> f64;
    /// The curve's limit as x → ∞, when finite.
    fn asymptote(&self) -> Option<f64>;
    /// The test of "h(x) = 0" at one-sided level `tail`, as two signed values (lo, hi): lo > 0
    /// when h(x) > 0 with confidence 1 − `tail` (x is before any crossing the data allow),
    /// hi ≤ 0 when h(x) < 0 with that confidence (x is after). NaN where unknown. Only the
    /// signs matter: the interval's ends are the roots.
    fn band(&self, x: f64, tail: f64) -> (f64, f64);
    /// One-sided lower and upper confidence bounds, each at 1 − `tail`, of the loss
    /// y(a) − y(b).
    fn loss_bounds(&self, a: f64, b: f64, tail: f64) -> (f64, f64);
}

/// One fit's decision function.
pub struct FitDecision<'a> {
    pub fit: &'a FitResult,
    pub threshold: f64,
    /// f for a fraction-of-fresh criterion, 0 for an absolute one.
    pub fraction: f64,
    /// ∂y(0)/∂θ, computed once: the interval's search evaluates ∂h/∂θ hundreds of times.
    g0: [f64; MAXP],
    /// The profile of the residual-activity model, when the fitted data were given.
    profile: Option<ResidualProfile>,
}

/// Largest parameter count handled on the stack.
const MAXP: usize = 8;

impl<'a> FitDecision<'a> {
    /// The decision function of `fit` against `threshold` (f = `fraction` of y(0), or 0).
    pub fn new(fit: &'a FitResult, threshold: f64, fraction: f64) -> Self {
        let mut g0 = [0.0; MAXP];
        let np = fit.params.len().min(MAXP);
        fit.model.grad(0.0, &fit.params, &mut g0[..np]);
        FitDecision {
            fit,
            threshold,
            fraction,
            g0,
            profile: None,
        }
    }

    /// With the data the fit was made on (x, y and the weights, if any): the first-order
    /// model with residual activity then tests "h(x) = 0" by its profile likelihood
    /// ([`ResidualProfile`]) instead of the delta method. Other models are unchanged.
    pub fn with_data(mut self, x: &[f64], y: &[f64], w: Option<&[f64]>) -> Self {
        if self.fit.model == ModelId::FirstOrderResidual && self.fit.dof > 0 {
            self.profile = ResidualProfile::new(x, y, w, self.fit.rss, self.fit.dof);
        }
        self
    }

    /// The profile-likelihood signed root statistic at x, when a profile is held.
    pub fn profile_root(&self, x: f64) -> Option<f64> {
        let pr = self.profile.as_ref()?;
        let v = self.fit.predict(x) - self.threshold;
        if !v.is_finite() {
            return None;
        }
        let c = self.threshold - self.fraction * self.fit.predict(0.0);
        let r = pr.root(x, self.fraction, c);
        Some(if v >= 0.0 { r } else { -r })
    }

    /// The test statistic of "h(x) = 0" when it is not the delta method on h itself: a
    /// profile's signed root ([`Self::root`]), or the delta method on a scale where the
    /// model is linear in kd: first order ln y(x) − ln c = ln a0 − kd·x − ln c, second order
    /// y(0)/c − y(0)/y(x) = a0/c − 1 − kd·x (c = c_abs + f·a0). With a fraction-of-fresh
    /// criterion a0 drops out and the test is Student's t on kd itself, carried through a
    /// monotone map; it stays bounded far beyond the data, where on the natural scale
    /// sd(h) → 0 faster than h → −c and any decay, however uncertain, looked certain to
    /// cross ("the delta method on a transformed scale", DESIGN §4; a Fieller-type
    /// construction, Fieller 1954, recalled from memory). None for other models.
    pub fn stat(&self, x: f64) -> Option<f64> {
        if let Some(r) = self.root(x) {
            return Some(r);
        }
        let m = self.fit.model;
        if !matches!(m, ModelId::FirstOrder | ModelId::SecondOrder) {
            return None;
        }
        let cov = self.fit.covariance.as_ref()?;
        let (a0, kd) = (self.fit.params[0], self.fit.params[1]);
        if !(a0 > 0.0 && self.threshold > 0.0 && x >= 0.0 && kd * x > -1.0) {
            return None;
        }
        let c = self.threshold;
        let f = self.fraction;
        let (v, g) = match m {
            // ln y(x) − ln c in closed form (y itself underflows far out).
            ModelId::FirstOrder => (a0.ln() - kd * x - c.ln(), [1.0 / a0 - f / c, -x]),
            // y(0)/c − y(0)/y(x) = a0/c − (1 + kd·x), linear in kd.
            _ => (a0 / c - 1.0 - kd * x, [1.0 / c - a0 * f / (c * c), -x]),
        };
        z_of(v, sd_of(cov, &g))
    }

    /// The signed root statistic of whichever profile this decision holds; for the power
    /// law, the transformed-scale statistic of [`Self::power_stat`].
    pub fn root(&self, x: f64) -> Option<f64> {
        self.profile_root(x).or_else(|| self.power_stat(x))
    }

    /// The power law's "h(x) ≥ 0" on the scale where it is linear in kd and x:
    /// a(x) = a0·(1 + q·kd·x)^(−1/q), q = m − 1, meets c where
    /// v(x) = ((a0/c)^q − 1)/q − kd·x = 0, and v > 0 before. v is ln(a0/c) − kd·x at m = 1
    /// and a0/c − 1 − kd·x at m = 2 (the first- and second-order scales of [`Self::stat`]).
    /// The delta method on v, as for those (DESIGN §4: "the delta method on a transformed
    /// scale"); on the natural scale the power law's interval was too wide at n ≤ 10.
    fn power_stat(&self, x: f64) -> Option<f64> {
        if self.fit.model != ModelId::Power {
            return None;
        }
        let cov = self.fit.covariance.as_ref()?;
        let (a0, kd, m) = (self.fit.params[0], self.fit.params[1], self.fit.params[2]);
        let c = self.threshold;
        if !(a0 > 0.0 && c > 0.0 && x >= 0.0 && kd.is_finite() && m.is_finite()) {
            return None;
        }
        let (q, l) = (m - 1.0, (a0 / c).ln());
        let ql = q * l;
        // (r^q − 1)/q and its derivative in q, by series where q·ln r is small.
        let (base, d_q) = if ql.abs() < 1e-6 {
            (l * (1.0 + 0.5 * ql), 0.5 * l * l * (1.0 + 2.0 * ql / 3.0))
        } else {
            let rq = ql.exp();
            ((rq - 1.0) / q, (q * rq * l - (rq - 1.0)) / (q * q))
        };
        let v = base - kd * x;
        // ∂v/∂a0 = r^q·(1/a0 − f/c): c = c_abs + f·a0 moves with a0.
        let g = [ql.exp() * (1.0 / a0 - self.fraction / c), -x, d_q];
        z_of(v, sd_of(cov, &g))
    }

    /// ∂h/∂θ at x.
    pub fn grad_h(&self, x: f64, out: &mut [f64]) {
        let m = self.fit.model;
        m.grad(x, &self.fit.params, out);
        if self.fraction != 0.0 {
            for (o, g) in out.iter_mut().zip(self.g0.iter()) {
                *o -= self.fraction * g;
            }
        }
    }
}

/// v/sd as a test statistic: ±∞ for a value known exactly, None when sd is unknown.
fn z_of(v: f64, sd: f64) -> Option<f64> {
    if sd > 0.0 {
        Some(v / sd)
    } else if sd == 0.0 {
        Some(if v >= 0.0 {
            f64::INFINITY
        } else {
            f64::NEG_INFINITY
        })
    } else {
        None
    }
}

fn sd_of(cov: &[Vec<f64>], g: &[f64]) -> f64 {
    let q = quad_form(cov, g);
    if q.is_finite() && q >= 0.0 {
        q.sqrt()
    } else {
        f64::NAN
    }
}

impl Decision for FitDecision<'_> {
    fn value(&self, x: f64) -> f64 {
        self.fit.predict(x) - self.threshold
    }
    fn at(&self, x: f64) -> (f64, f64) {
        let v = self.fit.predict(x) - self.threshold;
        let np = self.fit.params.len();
        let sd = match &self.fit.covariance {
            Some(cov) if v.is_finite() && np <= MAXP => {
                let mut g = [0.0; MAXP];
                self.grad_h(x, &mut g[..np]);
                sd_of(cov, &g[..np])
            }
            _ => f64::NAN,
        };
        (v, sd)
    }
    fn loss(&self, a: f64, b: f64) -> (f64, f64) {
        let p = &self.fit.params;
        let m = self.fit.model;
        let v = m.eval(a, p) - m.eval(b, p);
        let np = p.len();
        let sd = match &self.fit.covariance {
            Some(cov) if np <= MAXP => {
                let (mut ga, mut gb) = ([0.0; MAXP], [0.0; MAXP]);
                m.grad(a, p, &mut ga[..np]);
                m.grad(b, p, &mut gb[..np]);
                for j in 0..np {
                    ga[j] -= gb[j];
                }
                sd_of(cov, &ga[..np])
            }
            _ => f64::NAN,
        };
        (v, sd)
    }
    fn slope(&self, x: f64) -> f64 {
        self.fit.model.dydx(x, &self.fit.params)
    }
    fn asymptote(&self) -> Option<f64> {
        self.fit.model.asymptote(&self.fit.params)
    }
    /// Student t on the fit's n − p degrees of freedom: h(x) ∓ t·sd(h(x)); for the
    /// residual-activity model with its data, the profile root r(x) ∓ t.
    fn band(&self, x: f64, tail: f64) -> (f64, f64) {
        let t = t_one_sided(1.0 - tail, self.fit.dof).unwrap_or(f64::NAN);
        if let Some(r) = self.root(x) {
            return (r - t, r + t);
        }
        let (v, sd) = self.at(x);
        (v - t * sd, v + t * sd)
    }
    fn loss_bounds(&self, a: f64, b: f64, tail: f64) -> (f64, f64) {
        let t = t_one_sided(1.0 - tail, self.fit.dof).unwrap_or(f64::NAN);
        let (v, sd) = self.loss(a, b);
        (v - t * sd, v + t * sd)
    }
}

/// The profile likelihood of the crossing for the first-order model with residual activity,
/// y = a0·e^(−kd·x) + a_inf·(1 − e^(−kd·x)).
///
/// The delta method linearises this model around an asymptote that six or ten cycles barely
/// identify, and its interval covered the true crossing in only 69–81 % of trials at a
/// nominal 90 %. The profile likelihood does not linearise (Venzon & Moolgavkar, Applied
/// Statistics 37, 1988, 87–94; the profile t statistic of Bates & Watts, "Nonlinear
/// Regression Analysis and Its Applications", 1988, ch. 6; both recalled from memory): x
/// is inside the interval when the least RSS among curves that meet the criterion exactly
/// at x, RSS_x, is close to the least RSS of all, r(x) = √((RSS_x − RSS)/s²) ≤ t on
/// n − 3 degrees of freedom, s² = RSS/(n − 3).
///
/// For a fixed kd the model is linear in (a0, a_inf), and "meets the criterion at x0" —
/// y(x0) − f·y(0) = c, i.e. a0·(e0 − f) + a_inf·(1 − e0) = c with e0 = e^(−kd·x0) — is one
/// linear constraint, so RSS_x is a closed form for each kd (equality-constrained least
/// squares: RSS_u + (gᵀβ_u − c)²/(gᵀM⁻¹g)) minimised over kd on a logarithmic grid. The
/// unconstrained pieces (β_u, M⁻¹ = (BᵀWB)⁻¹, RSS_u) do not depend on x0 and are kept per
/// grid point. Not used for censored fits, whose likelihood is not least squares.
#[derive(Debug, Clone)]
pub struct ResidualProfile {
    x: Vec<f64>,
    y: Vec<f64>,
    w: Option<Vec<f64>>,
    /// Per grid kd: (kd, β_u = (a0, a_inf), M⁻¹ as (m00, m01, m11), RSS_u).
    grid: Vec<GridPoint>,
    /// The common spacing of x when x is evenly spaced (cycles 1, 2, 3 …):
    /// e^(−kd·x) is then one exponential and a product per point.
    step: Option<f64>,
    /// Grid indices in increasing order of their unconstrained RSS.
    order: Vec<usize>,
    /// The grid point that won the last scan (a hint; the result does not depend on it).
    last_winner: std::sync::Arc<std::sync::atomic::AtomicUsize>,
    rss_min: f64,
    s2: f64,
}

/// Grid points per decade of kd in the profile.
const PROFILE_PER_DECADE: usize = 40;

impl ResidualProfile {
    fn new(x: &[f64], y: &[f64], w: Option<&[f64]>, rss: f64, dof: usize) -> Option<Self> {
        Self::with_grid(x, y, w, rss, dof, PROFILE_PER_DECADE)
    }

    /// [`Self::new`] with `per_decade` grid points per decade of kd.
    fn with_grid(
        x: &[f64],
        y: &[f64],
        w: Option<&[f64]>,
        rss: f64,
        dof: usize,
        per_decade: usize,
    ) -> Option<Self> {
        let scale = x.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        if x.len() != y.len()
            || x.len() < 4
            || scale.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater)
        {
            return None;
        }
        let mut pr = ResidualProfile {
            x: x.to_vec(),
            y: y.to_vec(),
            w: w.map(<[f64]>::to_vec),
            grid: Vec::new(),
            step: super::start::even_step(x),
            order: Vec::new(),
            last_winner: Default::default(),
            rss_min: rss,
            s2: f64::NAN,
        };
        // kd from 10⁻⁴ to 10² per x span: from a straight line to a step after the first x.
        let decades = 6;
        for i in 0..=decades * per_decade {
            let kd = 1e-4 / scale * 10f64.powf(i as f64 / per_decade as f64);
            if let Some(e) = pr.unconstrained(kd) {
                pr.rss_min = pr.rss_min.min(e.3);
                pr.grid.push(e);
            }
        }
        pr.s2 = pr.rss_min / dof as f64;
        pr.order = (0..pr.grid.len()).collect();
        pr.order
            .sort_by(|&i, &j| pr.grid[i].3.total_cmp(&pr.grid[j].3));
        (pr.grid.len() > 2 && pr.s2 > 0.0 && pr.s2.is_finite()).then_some(pr)
    }

    /// Weighted least squares in (a0, a_inf) for a fixed kd.
    fn unconstrained(&self, kd: f64) -> Option<GridPoint> {
        let (mut m00, mut m01, mut m11, mut r0, mut r1, mut yy) = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
        let q = self.step.map(|d| (-kd * d).exp());
        let mut u = f64::NAN;
        for (i, (&xi, &yi)) in self.x.iter().zip(&self.y).enumerate() {
            let wi = self.w.as_ref().map_or(1.0, |w| w[i]);
            u = match q {
                Some(q) if i > 0 => u * q,
                _ => (-kd * xi).exp(),
            };
            let v = 1.0 - u;
            m00 += wi * u * u;
            m01 += wi * u * v;
            m11 += wi * v * v;
            r0 += wi * u * yi;
            r1 += wi * v * yi;
            yy += wi * yi * yi;
        }
        let det = m00 * m11 - m01 * m01;
        let floor = 1e-14 * (m00 * m11).max(f64::MIN_POSITIVE);
        if det.is_nan() || det <= floor {
            return None;
        }
        let inv = [m11 / det, -m01 / det, m00 / det];
        let b = [inv[0] * r0 + inv[1] * r1, inv[1] * r0 + inv[2] * r1];
        let rss = (yy - b[0] * r0 - b[1] * r1).max(0.0);
        rss.is_finite().then_some((kd, b, inv, rss))
    }

    /// √((RSS_x0 − RSS)/s²) for the curves meeting y(x0) − f·y(0) = c.
    ///
    /// The grid is scanned in increasing order of its unconstrained RSS (kept sorted), and the
    /// scan stops at the first point whose unconstrained RSS is no less than the best
    /// constrained RSS found: a constraint never lowers the RSS, so no later point can win and
    /// the grid's minimum is exact. The minimum is then refined between the winner's grid
    /// neighbours by successive parabolic interpolation on ln kd (a few evaluations instead of
    /// a golden-section search's twenty; Brent, "Algorithms for Minimization without
    /// Derivatives", 1973, ch. 5, recalled from memory).
    fn root(&self, x0: f64, f: f64, c: f64) -> f64 {
        let best_on_grid = self.scan(x0, f, c);
        let Some((k, mut best)) = best_on_grid else {
            return f64::INFINITY;
        };
        let at = |e: &GridPoint| constrained(e, x0, f, c);
        let eval = |lk: f64| {
            self.unconstrained(lk.exp())
                .map_or(f64::INFINITY, |e| at(&e))
        };
        if k > 0 && k + 1 < self.grid.len() {
            // Three points bracketing the minimum: (ln kd, RSS_x).
            let mut pts = [
                (self.grid[k - 1].0.ln(), at(&self.grid[k - 1])),
                (self.grid[k].0.ln(), best),
                (self.grid[k + 1].0.ln(), at(&self.grid[k + 1])),
            ];
            let (lo, hi) = (pts[0].0, pts[2].0);
            for _ in 0..12 {
                let Some(v) = parabola_vertex(&pts) else {
                    break;
                };
                let v = v.clamp(lo, hi);
                if (v - pts[1].0).abs() < 1e-9 * (hi - lo) {
                    break;
                }
                let fv = eval(v);
                if !fv.is_finite() {
                    break;
                }
                best = best.min(fv);
                // Keep the best point in the middle and its nearest neighbours either side.
                let mut all = [pts[0], pts[1], pts[2], (v, fv)];
                all.sort_by(|a, b| a.0.total_cmp(&b.0));
                let m = (0..4)
                    .min_by(|&i, &j| all[i].1.total_cmp(&all[j].1))
                    .unwrap_or(1)
                    .clamp(1, 2);
                pts = [all[m - 1], all[m], all[m + 1]];
            }
        }
        ((best - self.rss_min).max(0.0) / self.s2).sqrt()
    }

    /// The grid point (its index) with the least constrained RSS, and that RSS.
    fn scan(&self, x0: f64, f: f64, c: f64) -> Option<(usize, f64)> {
        use std::sync::atomic::Ordering::Relaxed;
        // The previous call's winner first: calls come in sequences of nearby x0 (a search
        // along x), so it is usually near the winner and its value prunes the scan early.
        let hint = self.last_winner.load(Relaxed);
        let (mut best, mut k) = match self.grid.get(hint) {
            Some(e) => (constrained(e, x0, f, c), Some(hint)),
            None => (f64::INFINITY, None),
        };
        if best.is_nan() {
            (best, k) = (f64::INFINITY, None);
        }
        for &i in &self.order {
            let e = &self.grid[i];
            if e.3 >= best {
                break;
            }
            let v = constrained(e, x0, f, c);
            if v < best || (v == best && k.is_some_and(|k| i < k)) {
                best = v;
                k = Some(i);
            }
        }
        if let Some(k) = k {
            self.last_winner.store(k, Relaxed);
        }
        k.map(|k| (k, best))
    }
}

/// One grid point of [`ResidualProfile`]: (kd, β_u = (a0, a_inf), M⁻¹ as (m00, m01, m11),
/// RSS_u).
type GridPoint = (f64, [f64; 2], [f64; 3], f64);

/// The least RSS at one kd among the curves meeting y(x0) − f·y(0) = c: RSS_u + (gᵀβ_u −
/// c)²/(gᵀM⁻¹g), g = (e^(−kd·x0) − f, 1 − e^(−kd·x0)) (equality-constrained least squares).
fn constrained(e: &GridPoint, x0: f64, f: f64, c: f64) -> f64 {
    // e^(−709) is the smallest normal double; far beyond it the exponential is zero.
    let e0 = if e.0 * x0 > 750.0 {
        0.0
    } else {
        (-e.0 * x0).exp()
    };
    let g = [e0 - f, 1.0 - e0];
    let gmg = g[0] * g[0] * e.2[0] + 2.0 * g[0] * g[1] * e.2[1] + g[1] * g[1] * e.2[2];
    let miss = g[0] * e.1[0] + g[1] * e.1[1] - c;
    if gmg > 0.0 {
        e.3 + miss * miss / gmg
    } else {
        f64::INFINITY
    }
}

/// The abscissa of the vertex of the parabola through three points, when it opens upwards.
fn parabola_vertex(p: &[(f64, f64); 3]) -> Option<f64> {
    let (a, b, c) = (p[0], p[1], p[2]);
    let num = (b.0 - a.0).powi(2) * (b.1 - c.1) - (b.0 - c.0).powi(2) * (b.1 - a.1);
    let den = (b.0 - a.0) * (b.1 - c.1) - (b.0 - c.0) * (b.1 - a.1);
    if !(den.is_finite() && num.is_finite()) || den == 0.0 {
        return None;
    }
    // The parabola opens upwards when the middle point lies below the chord.
    let chord = a.1 + (c.1 - a.1) * (b.0 - a.0) / (c.0 - a.0);
    (b.1 <= chord).then_some(b.0 - 0.5 * num / den)
}

/// The point crossing of `d` after `x_last` (h(x_last) > 0), ignoring the interval and the
/// significance of the loss; None when there is none.
pub fn crossing_after(d: &dyn Decision, x_first: f64, x_last: f64) -> Option<f64> {
    let h = |x: f64| d.value(x);
    if h(x_last).is_nan() || h(x_last) <= 0.0 {
        return None;
    }
    let span = if x_last > x_first {
        x_last - x_first
    } else {
        1.0
    };
    match search_after(&h, x_last, span) {
        Search::Crossed(x) => Some(x),
        _ => None,
    }
}

/// The threshold of `criterion` for a fresh activity `fresh`, and f (0 if absolute).
pub fn threshold_of(criterion: Criterion, fresh: f64) -> (f64, f64) {
    match criterion {
        Criterion::Absolute(v) => (v, 0.0),
        Criterion::FractionOfFresh(f) => (f * fresh, f),
    }
}

/// Forecasts the crossing of `criterion` by the fitted curve; `x_first`/`x_last` are the
/// observed range. The interval is at `confidence` (e.g. 0.90).
pub fn forecast(
    fit: &FitResult,
    criterion: Criterion,
    confidence: f64,
    x_first: f64,
    x_last: f64,
) -> Forecast {
    let (threshold, fraction) = threshold_of(criterion, fit.predict(0.0));
    let d = FitDecision::new(fit, threshold, fraction);
    let mut fc = forecast_with(&d, threshold, confidence, fit.dof, x_first, x_last);
    // Delta-method standard error of x*, for information.
    if let (Some(xs), Some(cov)) = (fc.x, fit.covariance.as_ref()) {
        let slope = fit.model.dydx(xs, &fit.params);
        let np = fit.params.len();
        if slope != 0.0 && slope.is_finite() && np <= MAXP {
            let mut g = [0.0; MAXP];
            d.grad_h(xs, &mut g[..np]);
            g.iter_mut().for_each(|v| *v = -*v / slope);
            let se = sd_of(cov, &g[..np]);
            fc.std_error = se.is_finite().then_some(se);
        }
    }
    fc
}

/// The forecast of any decision function (one fit, or a model average), with Student t on
/// `dof` degrees of freedom. See the module documentation for the states and the interval.
pub fn forecast_with(
    d: &dyn Decision,
    threshold: f64,
    confidence: f64,
    dof: usize,
    x_first: f64,
    x_last: f64,
) -> Forecast {
    let t = t_quantile(confidence, dof);
    let mut fc = Forecast::empty(
        ForecastStatus::NotReached,
        threshold.is_finite().then_some(threshold),
        confidence,
    );
    fc.t_quantile = t;
    if !threshold.is_finite() {
        fc.why_not = Some(NotReachedWhy::UndefinedCriterion);
        return fc;
    }
    let span = if x_last > x_first {
        x_last - x_first
    } else {
        1.0
    };
    let h = |x: f64| d.value(x);
    // Significance of the loss over the observed cycles (one-sided test).
    let alpha = 1.0 - confidence;
    let (loss, _) = d.loss(x_first, x_last);
    let (loss_lo, loss_hi) = d.loss_bounds(x_first, x_last, alpha);
    fc.loss = loss.is_finite().then_some(loss);
    fc.loss_lower = loss_lo.is_finite().then_some(loss_lo);
    let significant = fc.loss_lower.is_some_and(|l| l > 0.0);

    let start = x_first.min(0.0);
    if h(x_last) <= 0.0 {
        fc.status = ForecastStatus::ReachedAlready;
        fc.x = if h(start) <= 0.0 {
            Some(start)
        } else {
            first_crossing_within(&h, start, x_last)
        };
        // The interval of a crossing already past: the same band inversion, over the data.
        if let Some(xs) = fc.x.filter(|_| t.is_some()) {
            let lo = |x: f64| d.band(x, alpha / 2.0).0;
            let hi = |x: f64| d.band(x, alpha / 2.0).1;
            fc.lower = if lo(start) <= 0.0 {
                Some(start)
            } else {
                first_crossing_within(&lo, start, xs).or(Some(xs))
            };
            fc.upper = if hi(xs) <= 0.0 {
                Some(xs)
            } else {
                match search_after(&hi, xs, span) {
                    Search::Crossed(x) => Some(x),
                    _ => None,
                }
            };
        }
        return fc;
    }
    // Lower end: the first x ≥ x_last where the lower band reaches the criterion.
    let lower_of = |tail: f64| {
        let lo = |x: f64| d.band(x, tail).0;
        if lo(x_last) <= 0.0 {
            Some(x_last)
        } else {
            match search_after(&lo, x_last, span) {
                Search::Crossed(x) => Some(x),
                _ => None,
            }
        }
    };
    let rising = loss_hi < 0.0;
    if rising {
        // Significantly rising: no loss to forecast from.
        fc.why_not = Some(NotReachedWhy::SlopeWrongSign);
        return fc;
    }
    // An interval open above is the one-sided interval [lower, ∞) at the confidence.
    let t1 = t_one_sided(confidence, dof);
    let one_sided = || t1.and_then(|_| lower_of(alpha));
    if !significant {
        fc.status = ForecastStatus::NoSignificantTrend;
        fc.lower = one_sided();
        return fc;
    }
    let xs = match search_after(&h, x_last, span) {
        Search::Crossed(x) => x,
        other => {
            // The fitted curve stays above, but the data may not exclude a crossing: the
            // confidence set is then [lower, ∞) (with "never" in it).
            fc.lower = one_sided();
            let slope = d.slope(x_last);
            fc.why_not = Some(if other == Search::Ends {
                NotReachedWhy::CurveEnds
            } else if slope.is_nan() || slope >= 0.0 {
                NotReachedWhy::SlopeWrongSign
            } else if d.asymptote().is_some_and(|a| a >= threshold) {
                NotReachedWhy::AsymptoteAbove
            } else {
                NotReachedWhy::BeyondHorizon
            });
            return fc;
        }
    };
    fc.status = ForecastStatus::Ahead;
    fc.x = Some(xs);
    if t.is_some() {
        // Upper end: the first x ≥ x* where the upper band falls below the criterion.
        let hi = |x: f64| d.band(x, alpha / 2.0).1;
        fc.upper = if hi(xs) <= 0.0 {
            Some(xs)
        } else {
            match search_after(&hi, xs, span) {
                Search::Crossed(x) => Some(x),
                _ => None,
            }
        };
        // The two-sided lower end only when the upper one exists: an interval open above
        // takes the one-sided lower end below instead.
        if fc.upper.is_some() {
            fc.lower = lower_of(alpha / 2.0).map(|l| l.min(xs));
        }
    }
    if fc.lower.is_none() || fc.upper.is_none() {
        fc.status = ForecastStatus::UnboundedInterval;
        if fc.upper.is_none() {
            fc.lower = one_sided().map(|l| l.min(xs));
        }
    }
    fc
}

/// Cumulative lifetime TON at x*: observed TON summed over the cycles up to x*, plus for
/// each whole cycle after the newest observed one up to x* the TON predicted as
/// (ΣTON/Σactivity over observed cycles with both) × fitted activity. The ratio of sums is
/// used rather than a mean of ratios so that a near-zero activity cannot dominate. x is
/// taken to count cycles.
pub fn lifetime_ton(
    fit: &FitResult,
    x: &[f64],
    y: &[f64],
    ton: &[Option<f64>],
    x_star: f64,
) -> Option<f64> {
    let mut observed = 0.0;
    let (mut sum_ton, mut sum_act) = (0.0, 0.0);
    let mut any = false;
    let mut x_last = f64::NEG_INFINITY;
    for ((&xi, &yi), ti) in x.iter().zip(y).zip(ton) {
        x_last = x_last.max(xi);
        let Some(t) = ti.filter(|t| t.is_finite()) else {
            continue;
        };
        any = true;
        if xi <= x_star {
            observed += t;
        }
        if yi.is_finite() && yi > 0.0 {
            sum_ton += t;
            sum_act += yi;
        }
    }
    if !any || !x_star.is_finite() {
        return None;
    }
    if x_star <= x_last || sum_act <= 0.0 {
        return Some(observed);
    }
    let per_activity = sum_ton / sum_act;
    let mut n = x_last.floor() + 1.0;
    let mut predicted = 0.0;
    // Cap the horizon so a forecast far out cannot make this loop unbounded.
    let mut guard = 0;
    while n <= x_star.floor() && guard < 1_000_000 {
        predicted += per_activity * fit.predict(n).max(0.0);
        n += 1.0;
        guard += 1;
    }
    Some(observed + predicted)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::{FitOptions, ModelId, fit_model};

    fn fitted(model: ModelId, p: &[f64], n: usize, noise: f64) -> FitResult {
        let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
        // Deterministic alternating noise keeps the test reproducible without a generator.
        let y: Vec<f64> = x
            .iter()
            .enumerate()
            .map(|(i, &xi)| model.eval(xi, p) + if i % 2 == 0 { noise } else { -noise })
            .collect();
        fit_model(model, &x, &y, &FitOptions::default()).expect("fit")
    }

    #[test]
    fn ahead_crossing_matches_closed_form() {
        // First order: a0·exp(−kd·x) = c ⇒ x* = ln(a0/c)/kd.
        let f = fitted(ModelId::FirstOrder, &[1.0, 0.05], 20, 0.002);
        let fc = forecast(&f, Criterion::Absolute(0.3), 0.9, 1.0, 20.0);
        assert_eq!(fc.status, ForecastStatus::Ahead);
        let want = (f.params[0] / 0.3).ln() / f.params[1];
        let x = fc.x.expect("crossing");
        assert!((x - want).abs() < 1e-9, "{x} vs {want}");
        let (lo, hi) = (fc.lower.expect("lower"), fc.upper.expect("upper"));
        assert!(lo < x && x < hi);
    }

    #[test]
    fn reached_already() {
        let f = fitted(ModelId::FirstOrder, &[1.0, 0.1], 20, 0.002);
        let fc = forecast(&f, Criterion::Absolute(0.5), 0.9, 1.0, 20.0);
        assert_eq!(fc.status, ForecastStatus::ReachedAlready);
        let x = fc.x.expect("crossing");
        assert!((x - 2f64.ln() / 0.1).abs() < 0.2, "{x}");
    }

    #[test]
    fn asymptote_above_is_not_reached() {
        let f = fitted(ModelId::FirstOrderResidual, &[1.0, 0.6, 0.2], 25, 0.002);
        let fc = forecast(&f, Criterion::FractionOfFresh(0.5), 0.9, 1.0, 25.0);
        assert_eq!(fc.status, ForecastStatus::NotReached);
        assert_eq!(fc.why_not, Some(NotReachedWhy::AsymptoteAbove));
        assert_eq!(fc.x, None);
    }

    #[test]
    fn rising_activity_is_not_reached() {
        let f = fitted(ModelId::Linear, &[0.8, -0.01], 10, 0.001);
        let fc = forecast(&f, Criterion::Absolute(0.5), 0.9, 1.0, 10.0);
        assert_eq!(fc.status, ForecastStatus::NotReached);
        assert_eq!(fc.why_not, Some(NotReachedWhy::SlopeWrongSign));
    }

    #[test]
    fn band_that_never_crosses_gives_unbounded_upper() {
        // Residual activity 0.35 ± a wide band, criterion 0.3 just below it: the curve
        // crosses nowhere, or barely; with a noisy short series the upper band stays above.
        let f = fitted(ModelId::FirstOrderResidual, &[1.0, 0.28, 0.3], 8, 0.03);
        let fc = forecast(&f, Criterion::Absolute(0.3), 0.9, 1.0, 8.0);
        if fc.x.is_some() {
            assert_eq!(fc.upper, None, "{fc:?}");
            assert_eq!(fc.status, ForecastStatus::UnboundedInterval);
        } else {
            assert_eq!(fc.status, ForecastStatus::NotReached);
        }
    }

    #[test]
    fn t_quantile_matches_tables() {
        // Student t, two-sided 90 %: t(0.95; 10) = 1.8124611 (scipy.stats.t.ppf(0.95, 10),
        // scipy 1.17 as the reference library).
        let t = t_quantile(0.90, 10).expect("defined");
        assert!((t - 1.812461).abs() < 1e-5, "{t}");
        assert_eq!(t_quantile(0.9, 0), None);
        assert_eq!(t_quantile(1.5, 5), None);
    }

    #[test]
    fn residual_profile_is_zero_at_the_fitted_crossing_and_grows_away() {
        let f = fitted(ModelId::FirstOrderResidual, &[1.0, 0.3, 0.1], 12, 0.01);
        let x: Vec<f64> = (1..=12).map(f64::from).collect();
        let y: Vec<f64> = x
            .iter()
            .enumerate()
            .map(|(i, &xi)| {
                ModelId::FirstOrderResidual.eval(xi, &[1.0, 0.3, 0.1])
                    + if i % 2 == 0 { 0.01 } else { -0.01 }
            })
            .collect();
        let (c, frac) = threshold_of(Criterion::FractionOfFresh(0.5), f.predict(0.0));
        let d = FitDecision::new(&f, c, frac).with_data(&x, &y, None);
        let fc = forecast_with(&d, c, 0.9, f.dof, 1.0, 12.0);
        let xs = fc.x.expect("crossing");
        let r0 = d.profile_root(xs).expect("profile");
        assert!(r0.abs() < 1e-2, "r(x*) = {r0}");
        // Signed: positive before the crossing, negative after, growing in size.
        let (a, b) = (
            d.profile_root(xs - 3.0).unwrap(),
            d.profile_root(xs - 6.0).unwrap(),
        );
        assert!(0.0 < a && a < b, "{a} {b}");
        let (a, b) = (
            d.profile_root(xs + 3.0).unwrap(),
            d.profile_root(xs + 8.0).unwrap(),
        );
        assert!(b < a && a < 0.0, "{a} {b}");
        // The interval holds x* and starts after the data.
        let (lo, hi) = (fc.lower.expect("lower"), fc.upper.unwrap_or(f64::INFINITY));
        assert!(12.0 <= lo && lo < xs && xs < hi, "{lo} {xs} {hi}");
    }

    #[test]
    fn t_cdf_matches_statrs() {
        // statrs's regularised incomplete beta as the reference, odd and even ν.
        for dof in [1usize, 2, 3, 4, 5, 6, 9, 10, 17, 38, 101] {
            let r = StudentsT::new(0.0, 1.0, dof as f64).expect("valid");
            for t in [-40.0, -3.1, -1.0, -0.2, 0.0, 0.5, 1.7, 2.9, 12.0] {
                let (got, want) = (t_cdf(t, dof), r.cdf(t));
                assert!((got - want).abs() < 1e-12, "ν {dof} t {t}: {got} vs {want}");
            }
        }
        assert_eq!(t_cdf(f64::INFINITY, 3), 1.0);
        assert_eq!(t_cdf(f64::NEG_INFINITY, 4), 0.0);
        assert!(t_cdf(1.0, 0).is_nan());
    }

    #[test]
    fn lifetime_ton_adds_predicted_cycles() {
        let f = fitted(ModelId::FirstOrder, &[1.0, 0.05], 10, 0.0);
        let x: Vec<f64> = (1..=10).map(f64::from).collect();
        let y: Vec<f64> = x.iter().map(|&v| f.predict(v)).collect();
        let ton: Vec<Option<f64>> = y.iter().map(|v| Some(100.0 * v)).collect();
        let total = lifetime_ton(&f, &x, &y, &ton, 12.5).expect("ton given");
        let want: f64 = (1..=12).map(|n| 100.0 * f.predict(f64::from(n))).sum();
        assert!((total - want).abs() < 1e-6 * want, "{total} vs {want}");
        assert_eq!(lifetime_ton(&f, &x, &y, &[None; 10], 12.5), None);
    }

    /// The profile root as first written: every grid point scanned, then a 20-step
    /// golden-section search on ln kd between the winner's neighbours.
    fn root_exhaustive(pr: &ResidualProfile, x0: f64, f: f64, c: f64) -> f64 {
        // Every exponential computed directly.
        let mut pr = pr.clone();
        pr.step = None;
        let pr = &pr;
        let (mut best, mut k) = (f64::INFINITY, 0);
        for (i, e) in pr.grid.iter().enumerate() {
            let v = constrained(e, x0, f, c);
            if v < best {
                best = v;
                k = i;
            }
        }
        let lo = pr.grid[k.saturating_sub(1)].0.ln();
        let hi = pr.grid[(k + 1).min(pr.grid.len() - 1)].0.ln();
        let eval = |lk: f64| {
            pr.unconstrained(lk.exp())
                .map_or(f64::INFINITY, |e| constrained(&e, x0, f, c))
        };
        let g = 0.5 * (5f64.sqrt() - 1.0);
        let (mut a, mut b) = (lo, hi);
        let (mut c1, mut c2) = (b - g * (b - a), a + g * (b - a));
        let (mut f1, mut f2) = (eval(c1), eval(c2));
        for _ in 0..60 {
            if f1 < f2 {
                b = c2;
                c2 = c1;
                f2 = f1;
                c1 = b - g * (b - a);
                f1 = eval(c1);
            } else {
                a = c1;
                c1 = c2;
                f1 = f2;
                c2 = a + g * (b - a);
                f2 = eval(c2);
            }
        }
        best = best.min(f1).min(f2);
        ((best - pr.rss_min).max(0.0) / pr.s2).sqrt()
    }

    #[test]
    fn bracketed_root_finds_smooth_kinked_and_undefined_roots() {
        let sqrt2 = bracketed(|x| 2.0 - x * x, 0.0, 2.0, 2.0, -2.0);
        assert!((sqrt2 - 2f64.sqrt()).abs() < 1e-11, "{sqrt2}");
        // A steep exponential, where plain false position crawls from one side.
        let r = bracketed(|x| (-20.0 * x).exp() - 1e-6, 0.0, f64::NAN, 5.0, f64::NAN);
        assert!((r - 1e-6f64.ln() / -20.0).abs() < 1e-11, "{r}");
        // A step: the jump's abscissa.
        let s = bracketed(|x| if x < 0.3 { 1.0 } else { -1.0 }, 0.0, 1.0, 1.0, -1.0);
        assert!((s - 0.3).abs() < 1e-11, "{s}");
        // Undefined (NaN) beyond 0.7 counts as at or below, as in bisection.
        let u = bracketed(
            |x| if x < 0.7 { 1.0 - x } else { f64::NAN },
            0.0,
            1.0,
            1.0,
            f64::NAN,
        );
        assert!((u - 0.7).abs() < 1e-11, "{u}");
    }

    #[test]
    fn pruned_profile_agrees_with_the_exhaustive_search() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let noise = Normal::new(0.0, 0.03).expect("valid sd");
        let mut worst = 0.0f64;
        for trial in 0..200 {
            let n = [6, 10, 20, 40][trial % 4];
            let kd = [0.02, 0.06, 0.2][trial % 3];
            let x: Vec<f64> = (1..=n as u32).map(f64::from).collect();
            let y: Vec<f64> = x
                .iter()
                .map(|&v| 0.3 + 0.7 * (-kd * v).exp() + noise.sample(&mut rng))
                .collect();
            // The reference: a grid four times as fine (holding every point of the
            // production grid), searched exhaustively; its least RSS is both profiles'.
            let Some(fine) = ResidualProfile::with_grid(
                &x,
                &y,
                None,
                f64::INFINITY,
                n - 3,
                4 * PROFILE_PER_DECADE,
            ) else {
                continue;
            };
            let Some(pr) = ResidualProfile::new(&x, &y, None, fine.rss_min, n - 3) else {
                continue;
            };
            for (f, c) in [(0.0, 0.5), (0.5, 0.0), (0.0, 0.8)] {
                for x0 in [0.5, 3.0, 7.5, 15.0, 33.3, 80.0, 400.0] {
                    let (got, want) = (pr.root(x0, f, c), root_exhaustive(&fine, x0, f, c));
                    let d = (got - want).abs() / want.abs().max(1.0);
                    assert!(
                        d < 1e-7 || (got.is_infinite() && want.is_infinite()),
                        "trial {trial} x0 {x0}: {got} vs {want}"
                    );
                    if d.is_finite() {
                        worst = worst.max(d);
                    }
                }
            }
        }
        eprintln!("worst {worst:e}");
        assert!(worst < 1e-7, "{worst}");
    }
}
