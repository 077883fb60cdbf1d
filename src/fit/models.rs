//! The deactivation models, with analytic derivatives.
//!
//! x is the cycle number (or time on stream), y the activity (or cumulative TON for the
//! plateau model). Each model knows its id, its parameter names, y, ∂y/∂θ and ∂y/∂x.

use serde::{Deserialize, Serialize};

use super::error::FitError;
use super::lm::Curve;

/// Below this |m − 1| the power law is evaluated by its first-order limit, where the
/// closed form loses all digits to cancellation.
const POWER_M_EPS: f64 = 1e-7;

/// A deactivation model, by the id used in options, JSON and reports.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ModelId {
    /// a0 − r·x
    Linear,
    /// a0·exp(−kd·x)
    FirstOrder,
    /// a_inf + (a0 − a_inf)·exp(−kd·x)
    FirstOrderResidual,
    /// a0/(1 + kd·x)
    SecondOrder,
    /// a0·(1 + (m − 1)·kd·x)^(−1/(m − 1))
    Power,
    /// a_inf + (a0 − a_inf)·(1 + (m − 1)·kd·x)^(−1/(m − 1)): the solution of the
    /// generalised power-law rate expression −da/dx = kd·(a0 − a_inf)^(1 − m)·(a − a_inf)^m,
    /// the form used for sintering, where a catalyst loses activity towards a residual level
    /// a_inf (Bartholomew, "Sintering kinetics of supported metals", Appl. Catal. A 107, 1993;
    /// recalled from memory). m = 1 is first order with residual activity, a_inf = 0 the
    /// power law. For m < 1 the residual level is reached at x = 1/((1 − m)·kd) and kept.
    PowerResidual,
    /// a_inf + a1·exp(−k1·x) + a2·exp(−k2·x)
    TwoSite,
    /// ton_max·(1 − exp(−kd·x)), for cumulative TON
    Plateau,
}

impl ModelId {
    /// Every model, simplest first.
    pub const ALL: [ModelId; 8] = [
        ModelId::Linear,
        ModelId::FirstOrder,
        ModelId::SecondOrder,
        ModelId::Plateau,
        ModelId::FirstOrderResidual,
        ModelId::Power,
        ModelId::PowerResidual,
        ModelId::TwoSite,
    ];

    /// The models of activity decay (every model but the cumulative-TON plateau).
    pub const ACTIVITY: [ModelId; 7] = [
        ModelId::Linear,
        ModelId::FirstOrder,
        ModelId::SecondOrder,
        ModelId::FirstOrderResidual,
        ModelId::Power,
        ModelId::PowerResidual,
        ModelId::TwoSite,
    ];

    /// The id as written in options and JSON.
    pub fn id(self) -> &'static str {
        match self {
            ModelId::Linear => "linear",
            ModelId::FirstOrder => "first-order",
            ModelId::FirstOrderResidual => "first-order-residual",
            ModelId::SecondOrder => "second-order",
            ModelId::Power => "power",
            ModelId::PowerResidual => "power-residual",
            ModelId::TwoSite => "two-site",
            ModelId::Plateau => "plateau",
        }
    }

    /// Parses a model id.
    pub fn from_id(s: &str) -> Result<ModelId, FitError> {
        ModelId::ALL
            .into_iter()
            .find(|m| m.id() == s)
            .ok_or_else(|| FitError::UnknownModel(s.to_string()))
    }

    /// The formula, for reports.
    pub fn formula(self) -> &'static str {
        match self {
            ModelId::Linear => "a0 - r*x",
            ModelId::FirstOrder => "a0*exp(-kd*x)",
            ModelId::FirstOrderResidual => "a_inf + (a0 - a_inf)*exp(-kd*x)",
            ModelId::SecondOrder => "a0/(1 + kd*x)",
            ModelId::Power => "a0*(1 + (m - 1)*kd*x)^(-1/(m - 1))",
            ModelId::PowerResidual => "a_inf + (a0 - a_inf)*(1 + (m - 1)*kd*x)^(-1/(m - 1))",
            ModelId::TwoSite => "a_inf + a1*exp(-k1*x) + a2*exp(-k2*x)",
            ModelId::Plateau => "ton_max*(1 - exp(-kd*x))",
        }
    }

    /// Parameter names in the order of the parameter vector.
    pub fn param_names(self) -> &'static [&'static str] {
        match self {
            ModelId::Linear => &["a0", "r"],
            ModelId::FirstOrder => &["a0", "kd"],
            ModelId::FirstOrderResidual => &["a0", "a_inf", "kd"],
            ModelId::SecondOrder => &["a0", "kd"],
            ModelId::Power => &["a0", "kd", "m"],
            ModelId::PowerResidual => &["a0", "a_inf", "kd", "m"],
            ModelId::TwoSite => &["a_inf", "a1", "k1", "a2", "k2"],
            ModelId::Plateau => &["ton_max", "kd"],
        }
    }

    /// Number of parameters.
    pub fn n_params(self) -> usize {
        self.param_names().len()
    }

    /// Index of a parameter by name.
    pub fn param_index(self, name: &str) -> Result<usize, FitError> {
        self.param_names()
            .iter()
            .position(|n| *n == name)
            .ok_or_else(|| FitError::UnknownParameter {
                model: self.id().to_string(),
                name: name.to_string(),
                known: self.param_names().join(", "),
            })
    }

    /// y(x; p). Returns NaN where the model is undefined (power law with 1 + (m−1)kd·x ≤ 0).
    pub fn eval(self, x: f64, p: &[f64]) -> f64 {
        if p.len() < self.n_params() {
            return f64::NAN;
        }
        match self {
            ModelId::Linear => p[0] - p[1] * x,
            ModelId::FirstOrder => p[0] * (-p[1] * x).exp(),
            ModelId::FirstOrderResidual => p[1] + (p[0] - p[1]) * (-p[2] * x).exp(),
            ModelId::SecondOrder => p[0] / (1.0 + p[1] * x),
            ModelId::Power => {
                let (a0, kd, m) = (p[0], p[1], p[2]);
                let s = m - 1.0;
                if s.abs() < POWER_M_EPS {
                    let t = kd * x;
                    // ln u/s ≈ t − s·t²/2 for small s.
                    a0 * (-(t - s * t * t / 2.0)).exp()
                } else {
                    let u = 1.0 + s * kd * x;
                    if u <= 0.0 {
                        f64::NAN
                    } else {
                        a0 * (-u.ln() / s).exp()
                    }
                }
            }
            // The value is the one `point` computes with the derivatives, to the bit.
            ModelId::PowerResidual => self.point(x, p, &mut [0.0; 4]),
            ModelId::TwoSite => p[0] + p[1] * (-p[2] * x).exp() + p[3] * (-p[4] * x).exp(),
            ModelId::Plateau => p[0] * (1.0 - (-p[1] * x).exp()),
        }
    }

    /// ∂y/∂θ at x into `out`.
    pub fn grad(self, x: f64, p: &[f64], out: &mut [f64]) {
        // A parameter vector of the wrong length (e.g. from a hand-edited JSON) gives NaN,
        // never an index panic.
        if p.len() < self.n_params() || out.len() < self.n_params() {
            out.iter_mut().for_each(|v| *v = f64::NAN);
            return;
        }
        match self {
            // Every model shares its derivatives with the engine's inner loop.
            ModelId::Linear
            | ModelId::FirstOrder
            | ModelId::FirstOrderResidual
            | ModelId::SecondOrder
            | ModelId::Power
            | ModelId::PowerResidual
            | ModelId::TwoSite
            | ModelId::Plateau => {
                self.eval_grad(x, p, out);
            }
        }
    }

    /// y(x; p) as [`ModelId::eval`] and ∂y/∂θ into `out` as [`ModelId::grad`], sharing the
    /// exponential (or power) between them: the engine's inner loop calls this.
    pub fn eval_grad(self, x: f64, p: &[f64], out: &mut [f64]) -> f64 {
        if p.len() < self.n_params() || out.len() < self.n_params() {
            out.iter_mut().for_each(|v| *v = f64::NAN);
            return f64::NAN;
        }
        self.point(x, p, out)
    }

    /// y at every x into `f` and ∂y/∂θ column-major into `jac` (element (i, j) at
    /// j·n + i), each exactly as [`ModelId::eval_grad`] gives it. The model is matched
    /// once, not once per point, so the loop holds only the formula: this is where a fit
    /// spends most of its time.
    pub fn eval_grad_rows(self, x: &[f64], p: &[f64], f: &mut [f64], jac: &mut [f64]) {
        let (n, np) = (x.len(), self.n_params());
        if p.len() < np || f.len() < n || jac.len() < n * np {
            f.iter_mut()
                .chain(jac.iter_mut())
                .for_each(|v| *v = f64::NAN);
            return;
        }
        // Each arm names its model as a constant, so `point` inlines to that formula.
        match self {
            ModelId::Linear => rows_into(x, f, jac, np, |x, o| ModelId::Linear.point(x, p, o)),
            ModelId::FirstOrder => {
                rows_into(x, f, jac, np, |x, o| ModelId::FirstOrder.point(x, p, o))
            }
            ModelId::FirstOrderResidual => rows_into(x, f, jac, np, |x, o| {
                ModelId::FirstOrderResidual.point(x, p, o)
            }),
            ModelId::SecondOrder => {
                rows_into(x, f, jac, np, |x, o| ModelId::SecondOrder.point(x, p, o))
            }
            ModelId::Power => rows_into(x, f, jac, np, |x, o| ModelId::Power.point(x, p, o)),
            ModelId::PowerResidual => {
                rows_into(x, f, jac, np, |x, o| ModelId::PowerResidual.point(x, p, o))
            }
            ModelId::TwoSite => rows_into(x, f, jac, np, |x, o| ModelId::TwoSite.point(x, p, o)),
            ModelId::Plateau => rows_into(x, f, jac, np, |x, o| ModelId::Plateau.point(x, p, o)),
        }
    }

    /// The body of [`ModelId::eval_grad`], lengths already checked.
    #[inline(always)]
    fn point(self, x: f64, p: &[f64], out: &mut [f64]) -> f64 {
        match self {
            ModelId::FirstOrder => {
                let e = (-p[1] * x).exp();
                out[0] = e;
                out[1] = -p[0] * x * e;
                p[0] * e
            }
            ModelId::FirstOrderResidual => {
                let e = (-p[2] * x).exp();
                out[0] = e;
                out[1] = 1.0 - e;
                out[2] = -(p[0] - p[1]) * x * e;
                p[1] + (p[0] - p[1]) * e
            }
            ModelId::SecondOrder => {
                let d = 1.0 + p[1] * x;
                out[0] = 1.0 / d;
                out[1] = -p[0] * x / (d * d);
                p[0] / d
            }
            ModelId::TwoSite => {
                let e1 = (-p[2] * x).exp();
                let e2 = (-p[4] * x).exp();
                out[0] = 1.0;
                out[1] = e1;
                out[2] = -p[1] * x * e1;
                out[3] = e2;
                out[4] = -p[3] * x * e2;
                p[0] + p[1] * e1 + p[3] * e2
            }
            ModelId::Plateau => {
                let e = (-p[1] * x).exp();
                out[0] = 1.0 - e;
                out[1] = p[0] * x * e;
                p[0] * (1.0 - e)
            }
            ModelId::Power => {
                let (a0, kd, m) = (p[0], p[1], p[2]);
                let s = m - 1.0;
                let t = kd * x;
                if s.abs() < POWER_M_EPS {
                    // Limits as m → 1: u^e → e^(−t), ∂y/∂m → y·t²/2.
                    let e = (-t).exp();
                    out[0] = e;
                    out[1] = -a0 * x * e;
                    out[2] = a0 * e * t * t / 2.0;
                    // The value keeps eval's second-order term in s.
                    a0 * (-(t - s * t * t / 2.0)).exp()
                } else {
                    let u = 1.0 + s * kd * x;
                    if u <= 0.0 {
                        out.iter_mut().for_each(|v| *v = f64::NAN);
                        return f64::NAN;
                    }
                    // One logarithm and one exponential serve the value and all three
                    // derivatives (the same operations as eval, so the same bits).
                    let lu = u.ln();
                    let ue = (-lu / s).exp();
                    let y = a0 * ue;
                    out[0] = ue;
                    out[1] = -a0 * x * ue / u;
                    // ln y = ln a0 − ln(u)/s ⇒ ∂ln y/∂m = ln(u)/s² − t/(s·u); written as
                    // (ln(u) − s·t/u)/s², whose numerator is O(s²) and accurate via ln_1p.
                    let num = (s * t).ln_1p() - s * t / u;
                    out[2] = y * num / (s * s);
                    y
                }
            }
            ModelId::PowerResidual => {
                let (a0, a_inf, kd, m) = (p[0], p[1], p[2], p[3]);
                let amp = a0 - a_inf;
                let s = m - 1.0;
                let t = kd * x;
                if s.abs() < POWER_M_EPS {
                    // The power law's limits as m → 1, scaled by the amplitude a0 − a_inf.
                    let e = (-t).exp();
                    out[0] = e;
                    out[1] = 1.0 - e;
                    out[2] = -amp * x * e;
                    out[3] = amp * e * t * t / 2.0;
                    return a_inf + amp * (-(t - s * t * t / 2.0)).exp();
                }
                let u = 1.0 + s * t;
                if u <= 0.0 {
                    out.iter_mut().for_each(|v| *v = 0.0);
                    if s < 0.0 {
                        // m < 1: the rate law −da/dx ∝ (a − a_inf)^m brings a to a_inf at
                        // x = 1/((1 − m)·kd) and holds it there (the solution continued,
                        // not a domain error).
                        out[1] = 1.0;
                        return a_inf;
                    }
                    out.iter_mut().for_each(|v| *v = f64::NAN);
                    return f64::NAN;
                }
                // g = u^(−1/s), the power law's shape; its derivatives as in `Power`. ln u
                // by ln_1p(s·t): near m = 1 the rounding of u = 1 + s·t would otherwise
                // cost digits in ln(u)/s (10⁻¹¹ relative at |m − 1| = 10⁻⁵).
                let lu = (s * t).ln_1p();
                let g = (-lu / s).exp();
                out[0] = g;
                out[1] = 1.0 - g;
                out[2] = -amp * x * g / u;
                let num = (s * t).ln_1p() - s * t / u;
                out[3] = amp * g * num / (s * s);
                a_inf + amp * g
            }
            ModelId::Linear => {
                out[0] = 1.0;
                out[1] = -x;
                p[0] - p[1] * x
            }
        }
    }

    /// ∂y/∂x, used by the forecast's delta method.
    pub fn dydx(self, x: f64, p: &[f64]) -> f64 {
        if p.len() < self.n_params() {
            return f64::NAN;
        }
        match self {
            ModelId::Linear => -p[1],
            ModelId::FirstOrder => -p[0] * p[1] * (-p[1] * x).exp(),
            ModelId::FirstOrderResidual => -(p[0] - p[1]) * p[2] * (-p[2] * x).exp(),
            ModelId::SecondOrder => {
                let d = 1.0 + p[1] * x;
                -p[0] * p[1] / (d * d)
            }
            ModelId::Power => {
                let (a0, kd, m) = (p[0], p[1], p[2]);
                let s = m - 1.0;
                if s.abs() < POWER_M_EPS {
                    -a0 * kd * (-kd * x).exp()
                } else {
                    let u = 1.0 + s * kd * x;
                    if u <= 0.0 {
                        f64::NAN
                    } else {
                        -a0 * kd * (-u.ln() * m / s).exp()
                    }
                }
            }
            ModelId::PowerResidual => {
                let (amp, kd, m) = (p[0] - p[1], p[2], p[3]);
                let s = m - 1.0;
                if s.abs() < POWER_M_EPS {
                    -amp * kd * (-kd * x).exp()
                } else {
                    let u = 1.0 + s * kd * x;
                    if u > 0.0 {
                        -amp * kd * (-u.ln() * m / s).exp()
                    } else if s < 0.0 {
                        // At the residual activity, reached (m < 1).
                        0.0
                    } else {
                        f64::NAN
                    }
                }
            }
            ModelId::TwoSite => -p[1] * p[2] * (-p[2] * x).exp() - p[3] * p[4] * (-p[4] * x).exp(),
            ModelId::Plateau => p[0] * p[1] * (-p[1] * x).exp(),
        }
    }

    /// y as x → ∞, when the model has a finite limit for these parameters.
    pub fn asymptote(self, p: &[f64]) -> Option<f64> {
        if p.len() < self.n_params() {
            return None;
        }
        match self {
            ModelId::Linear => (p[1] == 0.0).then_some(p[0]),
            ModelId::FirstOrder | ModelId::SecondOrder => (p[1] > 0.0).then_some(0.0),
            ModelId::FirstOrderResidual => (p[2] > 0.0).then_some(p[1]),
            ModelId::Power => (p[1] > 0.0 && p[2] > 1.0).then_some(0.0),
            // Approached for m ≥ 1, reached at a finite x for m < 1.
            ModelId::PowerResidual => (p[2] > 0.0).then_some(p[1]),
            ModelId::TwoSite => (p[2] > 0.0 && p[4] > 0.0).then_some(p[0]),
            ModelId::Plateau => (p[1] > 0.0).then_some(p[0]),
        }
    }
}

/// The loop of [`ModelId::eval_grad_rows`] for one model's `point` formula (np ≤ 5).
#[inline(always)]
fn rows_into(
    x: &[f64],
    f: &mut [f64],
    jac: &mut [f64],
    np: usize,
    point: impl Fn(f64, &mut [f64]) -> f64,
) {
    let n = x.len();
    let mut row = [0.0; 5];
    let row = &mut row[..np.min(5)];
    for (i, &xi) in x.iter().enumerate() {
        f[i] = point(xi, row);
        for (j, g) in row.iter().enumerate() {
            jac[j * n + i] = *g;
        }
    }
}

impl std::fmt::Display for ModelId {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.id())
    }
}

impl Curve for ModelId {
    fn n_params(&self) -> usize {
        ModelId::n_params(*self)
    }
    fn value(&self, x: f64, p: &[f64]) -> f64 {
        self.eval(x, p)
    }
    fn has_gradient(&self) -> bool {
        true
    }
    fn gradient(&self, x: f64, p: &[f64], out: &mut [f64]) {
        self.grad(x, p, out)
    }
    fn value_and_gradient(&self, x: f64, p: &[f64], out: &mut [f64]) -> f64 {
        self.eval_grad(x, p, out)
    }
    fn values_and_jacobian(&self, x: &[f64], p: &[f64], f: &mut [f64], jac: &mut [f64]) {
        self.eval_grad_rows(x, p, f, jac)
    }
}

/// Maps NIST Bennett5's b1·(b2 + x)^(−1/b3) to the power law a0·(1 + (m−1)·kd·x)^(−1/(m−1)).
///
/// With m − 1 = b3: 1 + b3·kd·x = b3·kd·(1/(b3·kd) + x), so b2 = 1/(b3·kd), i.e.
/// kd = 1/(b2·b3); then a0·(b3·kd)^(−1/b3) = a0·b2^(1/b3) = b1, i.e. a0 = b1·b2^(−1/b3).
/// Returns (a0, kd, m).
pub fn power_from_bennett(b1: f64, b2: f64, b3: f64) -> (f64, f64, f64) {
    (b1 * b2.powf(-1.0 / b3), 1.0 / (b2 * b3), 1.0 + b3)
}

/// The inverse of [`power_from_bennett`]: (a0, kd, m) → (b1, b2, b3).
pub fn bennett_from_power(a0: f64, kd: f64, m: f64) -> (f64, f64, f64) {
    let b3 = m - 1.0;
    let b2 = 1.0 / (kd * b3);
    (a0 * b2.powf(1.0 / b3), b2, b3)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::lm::numeric_gradient;

    fn sample_params(m: ModelId) -> Vec<f64> {
        match m {
            ModelId::Linear => vec![1.0, 0.02],
            ModelId::FirstOrder => vec![1.0, 0.05],
            ModelId::FirstOrderResidual => vec![1.0, 0.3, 0.1],
            ModelId::SecondOrder => vec![1.0, 0.07],
            ModelId::Power => vec![1.0, 0.06, 1.7],
            ModelId::PowerResidual => vec![1.0, 0.25, 0.08, 1.8],
            ModelId::TwoSite => vec![0.2, 0.5, 0.4, 0.3, 0.03],
            ModelId::Plateau => vec![500.0, 0.1],
        }
    }

    #[test]
    fn analytic_gradients_match_central_differences() {
        for m in ModelId::ALL {
            let p = sample_params(m);
            for &x in &[0.0, 1.0, 7.5, 30.0] {
                let mut a = vec![0.0; p.len()];
                let mut n = vec![0.0; p.len()];
                m.grad(x, &p, &mut a);
                numeric_gradient(&m, x, &p, &mut n);
                for j in 0..p.len() {
                    let tol = 1e-6 * (1.0 + a[j].abs());
                    assert!(
                        (a[j] - n[j]).abs() < tol,
                        "{m} x={x} j={j}: {} vs {}",
                        a[j],
                        n[j]
                    );
                }
                let h = 1e-5;
                let dx = (m.eval(x + h, &p) - m.eval(x - h, &p)) / (2.0 * h);
                assert!(
                    (m.dydx(x, &p) - dx).abs() < 1e-6 * (1.0 + dx.abs()),
                    "{m} dydx"
                );
            }
        }
    }

    #[test]
    fn joint_evaluation_is_identical_to_separate() {
        for m in ModelId::ALL {
            let p = sample_params(m);
            for &x in &[0.0, 1.0, 7.5, 30.0] {
                let mut a = vec![0.0; p.len()];
                let mut b = vec![0.0; p.len()];
                m.grad(x, &p, &mut a);
                let v = m.eval_grad(x, &p, &mut b);
                assert_eq!(v.to_bits(), m.eval(x, &p).to_bits(), "{m} x={x}");
                assert_eq!(a, b, "{m} x={x}");
            }
        }
    }

    #[test]
    fn rows_are_identical_to_points() {
        let x = [0.0, 1.0, 7.5, 30.0];
        for m in ModelId::ALL {
            let p = sample_params(m);
            let np = p.len();
            let mut f = [0.0; 4];
            let mut jac = vec![0.0; 4 * np];
            m.eval_grad_rows(&x, &p, &mut f, &mut jac);
            for (i, &xi) in x.iter().enumerate() {
                let mut g = vec![0.0; np];
                let v = m.eval_grad(xi, &p, &mut g);
                assert_eq!(f[i].to_bits(), v.to_bits(), "{m} x={xi}");
                for j in 0..np {
                    assert_eq!(jac[j * 4 + i].to_bits(), g[j].to_bits(), "{m} x={xi} j={j}");
                }
            }
        }
    }

    #[test]
    fn power_law_reduces_to_first_and_second_order() {
        // m = 2 is second order, m → 1 is first order (from the rate law −d(a/a0)/dx = kd·(a/a0)^m).
        let x = 12.0;
        let so = ModelId::SecondOrder.eval(x, &[1.0, 0.07]);
        let pw = ModelId::Power.eval(x, &[1.0, 0.07, 2.0]);
        assert!((so - pw).abs() < 1e-14);
        let fo = ModelId::FirstOrder.eval(x, &[1.0, 0.07]);
        let near = ModelId::Power.eval(x, &[1.0, 0.07, 1.0 + 1e-9]);
        assert!((fo - near).abs() < 1e-9);
        let off = ModelId::Power.eval(x, &[1.0, 0.07, 1.0 + 2e-7]);
        assert!((fo - off).abs() < 1e-5);
    }

    #[test]
    fn power_residual_derivatives_hold_across_its_orders() {
        // Central differences (with a step small against |m − 1|) against the analytic
        // Jacobian: below first order (m = 0.5, before and after the residual level is
        // reached at x = 1/((1 − m)·kd) = 25), beside first order on both sides of the
        // limit's switch (|m − 1| = 10⁻⁵, where the closed form is used and cancellation
        // would show), and above it (m = 3).
        let m = ModelId::PowerResidual;
        for order in [0.5, 1.0 - 1e-5, 1.0 + 1e-5, 3.0] {
            let p = [1.0, 0.3, 0.08, order];
            for &x in &[0.0, 2.0, 10.0, 24.0, 30.0] {
                let mut a = [0.0; 4];
                let y = m.eval_grad(x, &p, &mut a);
                assert!(y.is_finite());
                for j in 0..4 {
                    let h = 1e-7 * p[j].abs().max(1e-3);
                    let (mut up, mut down) = (p, p);
                    up[j] += h;
                    down[j] -= h;
                    let num = (m.eval(x, &up) - m.eval(x, &down)) / (2.0 * h);
                    assert!(
                        (a[j] - num).abs() < 1e-6 * (1.0 + num.abs()),
                        "m {order} x {x} j {j}: {} vs {num}",
                        a[j]
                    );
                }
            }
        }
        // Past its end (m < 1) the curve stays at a_inf, with a_inf its only sensitivity.
        let p = [1.0, 0.3, 0.08, 0.5];
        let mut g = [9.0; 4];
        assert_eq!(m.eval_grad(40.0, &p, &mut g), 0.3);
        assert_eq!(g, [0.0, 1.0, 0.0, 0.0]);
        assert_eq!(m.dydx(40.0, &p), 0.0);
        assert_eq!(m.asymptote(&p), Some(0.3));
        // It contains first order with residual activity (m → 1) and the power law
        // (a_inf = 0).
        let fo = ModelId::FirstOrderResidual.eval(12.0, &[1.0, 0.3, 0.08]);
        for s in [1e-9, -1e-9, 2e-7, -2e-7] {
            let v = m.eval(12.0, &[1.0, 0.3, 0.08, 1.0 + s]);
            assert!((v - fo).abs() < 1e-6, "m − 1 = {s}: {v} vs {fo}");
        }
        let pw = ModelId::Power.eval(12.0, &[1.0, 0.08, 1.7]);
        assert!((m.eval(12.0, &[1.0, 0.0, 0.08, 1.7]) - pw).abs() < 1e-15);
    }

    #[test]
    fn bennett_mapping_round_trips_and_agrees() {
        let (b1, b2, b3) = (-2523.5, 46.7, 0.932);
        let (a0, kd, m) = power_from_bennett(b1, b2, b3);
        for &x in &[7.4, 10.0, 11.6] {
            let nist = b1 * (b2 + x).powf(-1.0 / b3);
            let ours = ModelId::Power.eval(x, &[a0, kd, m]);
            assert!((nist - ours).abs() < 1e-10 * nist.abs());
        }
        let (c1, c2, c3) = bennett_from_power(a0, kd, m);
        assert!((c1 - b1).abs() < 1e-9 * b1.abs());
        assert!((c2 - b2).abs() < 1e-12 * b2);
        assert!((c3 - b3).abs() < 1e-12);
    }

    #[test]
    fn wrong_length_parameters_give_nan_not_panic() {
        for m in ModelId::ALL {
            assert!(m.eval(1.0, &[1.0]).is_nan());
            assert!(m.dydx(1.0, &[]).is_nan());
            let mut out = [0.0; 1];
            m.grad(1.0, &[1.0], &mut out);
            assert!(out[0].is_nan());
            assert_eq!(m.asymptote(&[]), None);
        }
    }

    #[test]
    fn ids_round_trip() {
        for m in ModelId::ALL {
            assert_eq!(ModelId::from_id(m.id()), Ok(m));
            let js = serde_json::to_string(&m).expect("serialise");
            assert_eq!(js, format!("\"{}\"", m.id()));
        }
        assert!(ModelId::from_id("cubic").is_err());
    }
}
