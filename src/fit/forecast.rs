//! When will the fitted activity cross the replacement criterion, and how sure are we.
//!
//! x* solves y(x*; θ) = c. Its interval comes from the delta method:
//! Var(x*) ≈ gᵀΣg with g = ∂x*/∂θ = −(∂y/∂θ − ∂c/∂θ)/(∂y/∂x) at x* (implicit function
//! theorem), and a Student-t quantile with n − p degrees of freedom. For an absolute
//! criterion ∂c/∂θ = 0, which is DESIGN.md's formula; for a fraction f of the fitted fresh
//! activity, c = f·y(0; θ) also moves with θ and its term is kept.

use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, StudentsT};

use super::engine::{FitResult, quad_form};

/// The replacement criterion.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", tag = "kind", content = "value")]
pub enum Criterion {
    /// Replace when activity falls to this value.
    Absolute(f64),
    /// Replace when activity falls to this fraction of the fitted fresh activity y(0).
    FractionOfFresh(f64),
}

/// The plain-words outcome of a forecast.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ForecastStatus {
    /// The crossing lies after the newest point and its interval is finite.
    Ahead,
    /// The fitted curve is already at or below the criterion at the newest point.
    ReachedAlready,
    /// The fitted curve never reaches the criterion (see [`NotReachedWhy`]).
    NotReached,
    /// A crossing is forecast but the interval is not finite: the confidence band does not
    /// cross the criterion, or the curve is flat at the crossing.
    UnboundedInterval,
}

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
}

/// A forecast of the replacement point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Forecast {
    pub status: ForecastStatus,
    pub why_not: Option<NotReachedWhy>,
    /// The activity value that triggers replacement (None if not finite).
    pub threshold: Option<f64>,
    /// x* (None when not reached).
    pub x: Option<f64>,
    /// Lower and upper interval limits; None means unbounded on that side.
    pub lower: Option<f64>,
    pub upper: Option<f64>,
    pub std_error: Option<f64>,
    pub confidence: f64,
    pub t_quantile: Option<f64>,
    /// Cumulative lifetime TON at x*, when TON per cycle was given.
    pub lifetime_ton: Option<f64>,
}

/// Two-sided Student-t quantile for `confidence` with `dof` degrees of freedom.
pub fn t_quantile(confidence: f64, dof: usize) -> Option<f64> {
    if dof == 0 || !(confidence > 0.0 && confidence < 1.0) {
        return None;
    }
    // The inverse CDF is an iterative incomplete-beta inversion, and one analysis asks for
    // the same few (confidence, dof) pairs several times: the last ones are remembered.
    thread_local! {
        static RECENT: std::cell::RefCell<[(u64, usize, f64); 4]> =
            const { std::cell::RefCell::new([(u64::MAX, usize::MAX, f64::NAN); 4]) };
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

/// First root of h in [a, b] given h(a) > 0 ≥ h(b), by bisection to full precision.
fn bisect(h: impl Fn(f64) -> f64, mut a: f64, mut b: f64) -> f64 {
    for _ in 0..200 {
        let m = 0.5 * (a + b);
        if m <= a || m >= b {
            break;
        }
        if h(m) > 0.0 {
            a = m;
        } else {
            b = m;
        }
    }
    0.5 * (a + b)
}

/// Finds where `h` first turns ≤ 0 after `from`, stepping out geometrically.
fn first_crossing_after(h: &impl Fn(f64) -> f64, from: f64, span: f64) -> Option<f64> {
    let mut a = from;
    let mut step = 0.05 * span;
    for _ in 0..80 {
        let b = a + step;
        let hb = h(b);
        if hb.is_nan() {
            return None;
        }
        if hb <= 0.0 {
            return Some(bisect(h, a, b));
        }
        if b - from > 1e6 * span {
            return None;
        }
        a = b;
        step *= 1.5;
    }
    None
}

/// Finds the first x in [lo, hi] with h ≤ 0, scanning then bisecting.
fn first_crossing_within(h: &impl Fn(f64) -> f64, lo: f64, hi: f64) -> Option<f64> {
    let steps = 400;
    let mut a = lo;
    for i in 1..=steps {
        let b = lo + (hi - lo) * i as f64 / steps as f64;
        if h(b) <= 0.0 {
            return Some(bisect(h, a, b));
        }
        a = b;
    }
    None
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
    let model = fit.model;
    let p = &fit.params;
    let y0 = fit.predict(0.0);
    let threshold = match criterion {
        Criterion::Absolute(v) => v,
        Criterion::FractionOfFresh(f) => f * y0,
    };
    let t = t_quantile(confidence, fit.dof);
    let mut fc = Forecast {
        status: ForecastStatus::NotReached,
        why_not: None,
        threshold: threshold.is_finite().then_some(threshold),
        x: None,
        lower: None,
        upper: None,
        std_error: None,
        confidence,
        t_quantile: t,
        lifetime_ton: None,
    };
    if !threshold.is_finite() {
        fc.why_not = Some(NotReachedWhy::UndefinedCriterion);
        return fc;
    }
    let span = if x_last > x_first {
        x_last - x_first
    } else {
        1.0
    };
    let h = |x: f64| fit.predict(x) - threshold;
    let start = x_first.min(0.0);
    let xstar = if h(x_last) <= 0.0 {
        fc.status = ForecastStatus::ReachedAlready;
        if h(start) <= 0.0 {
            Some(start)
        } else {
            first_crossing_within(&h, start, x_last)
        }
    } else {
        match first_crossing_after(&h, x_last, span) {
            Some(x) => {
                fc.status = ForecastStatus::Ahead;
                Some(x)
            }
            None => {
                let slope = model.dydx(x_last, p);
                fc.why_not = Some(if slope.is_nan() || slope >= 0.0 {
                    NotReachedWhy::SlopeWrongSign
                } else if model.asymptote(p).is_some_and(|a| a >= threshold) {
                    NotReachedWhy::AsymptoteAbove
                } else {
                    NotReachedWhy::BeyondHorizon
                });
                None
            }
        }
    };
    let Some(xs) = xstar else {
        return fc;
    };
    fc.x = Some(xs);
    // Delta method.
    let np = p.len();
    let mut gx = vec![0.0; np];
    model.grad(xs, p, &mut gx);
    if let Criterion::FractionOfFresh(f) = criterion {
        let mut g0 = vec![0.0; np];
        model.grad(0.0, p, &mut g0);
        for j in 0..np {
            gx[j] -= f * g0[j];
        }
    }
    let slope = model.dydx(xs, p);
    let se = fit.covariance.as_ref().and_then(|cov| {
        if slope == 0.0 || !slope.is_finite() {
            return None;
        }
        let g: Vec<f64> = gx.iter().map(|v| -v / slope).collect();
        let var = quad_form(cov, &g);
        (var.is_finite() && var >= 0.0).then(|| var.sqrt())
    });
    fc.std_error = se;
    if let (Some(se), Some(t)) = (se, t) {
        fc.lower = Some(xs - t * se);
        fc.upper = Some(xs + t * se);
        // If even the upper confidence band of the curve stays above the criterion far out,
        // (checked for absolute criteria, whose level does not move with θ)
        // the data cannot exclude that it is never reached: the upper limit is unbounded.
        let far = x_last.max(xs) + 1e3 * span;
        if let Some(v) = fit.mean_variance(far)
            && criterion_is_absolute(criterion)
            && fit.predict(far) + t * v.sqrt() > threshold
        {
            fc.upper = None;
        }
    }
    if (fc.lower.is_none() || fc.upper.is_none()) && fc.status == ForecastStatus::Ahead {
        fc.status = ForecastStatus::UnboundedInterval;
    }
    fc
}

fn criterion_is_absolute(c: Criterion) -> bool {
    matches!(c, Criterion::Absolute(_))
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
}
