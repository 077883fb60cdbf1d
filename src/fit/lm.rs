//! Levenberg–Marquardt nonlinear least squares.
//!
//! The damped Gauss–Newton step solves (JᵀJ + λ·D²)·δ = Jᵀr, with D Marquardt's diagonal
//! scaling kept as the running maximum of the column norms of J (Moré 1978), so the method
//! does not depend on the units of the parameters. λ follows Nielsen's gain-ratio update
//! (Madsen, Nielsen & Tingleff 2004, "Methods for non-linear least squares problems").
//! Optional geodesic acceleration (Transtrum & Sethna 2012) helps in long curved valleys.
//! Bounds are kept by projecting each trial point onto the box.
//!
//! Everything here is pure: the caller hands in data and a [`Curve`], and gets a
//! [`LmOutcome`] back.

use nalgebra::DMatrix;

use super::error::FitError;

/// A model curve y = f(x; θ) that the engine can fit.
pub trait Curve {
    /// Number of parameters θ.
    fn n_params(&self) -> usize;
    /// y at x for parameters p.
    fn value(&self, x: f64, p: &[f64]) -> f64;
    /// Whether [`Curve::gradient`] is analytic; if not, central differences are used.
    fn has_gradient(&self) -> bool {
        false
    }
    /// ∂y/∂θ at x into `out` (only called when [`Curve::has_gradient`] is true).
    fn gradient(&self, _x: f64, _p: &[f64], _out: &mut [f64]) {}
    /// y at x, and ∂y/∂θ into `out`, in one pass (only called when
    /// [`Curve::has_gradient`] is true). Curves whose value and derivatives share work
    /// (one exponential for both) override it: the engine then gets the Jacobian of an
    /// accepted step for free.
    fn value_and_gradient(&self, x: f64, p: &[f64], out: &mut [f64]) -> f64 {
        self.gradient(x, p, out);
        self.value(x, p)
    }
    /// y at every x into `f` and ∂y/∂θ column-major into `jac` (element (i, j) at
    /// j·n + i), as [`Curve::value_and_gradient`] gives them point by point (only called
    /// when [`Curve::has_gradient`] is true). Curves override it to keep per-point
    /// overhead out of the engine's inner loop.
    fn values_and_jacobian(&self, x: &[f64], p: &[f64], f: &mut [f64], jac: &mut [f64]) {
        let (n, np) = (x.len(), self.n_params());
        let mut row = vec![0.0; np];
        for (i, &xi) in x.iter().enumerate() {
            f[i] = self.value_and_gradient(xi, p, &mut row);
            for (j, g) in row.iter().enumerate() {
                jac[j * n + i] = *g;
            }
        }
    }
}

/// A user model from a closure, differentiated numerically (central differences).
pub struct FnCurve<F: Fn(f64, &[f64]) -> f64> {
    n_params: usize,
    f: F,
}

impl<F: Fn(f64, &[f64]) -> f64> FnCurve<F> {
    /// Wraps `f(x, θ)` with `n_params` parameters.
    pub fn new(n_params: usize, f: F) -> Self {
        Self { n_params, f }
    }
}

impl<F: Fn(f64, &[f64]) -> f64> Curve for FnCurve<F> {
    fn n_params(&self) -> usize {
        self.n_params
    }
    fn value(&self, x: f64, p: &[f64]) -> f64 {
        (self.f)(x, p)
    }
}

/// ∂y/∂θ by central differences; the step cbrt(ε)·max(|θ|, 1e-8·scale) balances truncation
/// and rounding error for a second-order formula.
pub fn numeric_gradient<C: Curve + ?Sized>(curve: &C, x: f64, p: &[f64], out: &mut [f64]) {
    let mut q = p.to_vec();
    let h0 = f64::EPSILON.cbrt();
    for j in 0..p.len() {
        let h = h0 * p[j].abs().max(1e-8);
        q[j] = p[j] + h;
        let up = curve.value(x, &q);
        q[j] = p[j] - h;
        let down = curve.value(x, &q);
        q[j] = p[j];
        out[j] = (up - down) / (2.0 * h);
    }
}

/// ∂y/∂θ, analytic when the curve has it.
pub fn curve_gradient<C: Curve + ?Sized>(curve: &C, x: f64, p: &[f64], out: &mut [f64]) {
    if curve.has_gradient() {
        curve.gradient(x, p, out);
    } else {
        numeric_gradient(curve, x, p, out);
    }
}

/// Tuning of the engine. The defaults are tight enough to reproduce the NIST StRD
/// certified values to more than 6 significant digits.
#[derive(Debug, Clone, PartialEq)]
pub struct LmOptions {
    /// Maximum number of Jacobian evaluations (outer iterations).
    pub max_iterations: usize,
    /// Stop when both actual and predicted relative reductions of RSS are below this.
    pub ftol: f64,
    /// Stop when the scaled step is below xtol·(scaled parameter norm).
    pub xtol: f64,
    /// Stop when the largest cosine between r and a column of J is below this.
    pub gtol: f64,
    /// Per-parameter (lower, upper) bounds; empty means unbounded.
    pub bounds: Vec<(f64, f64)>,
    /// Use geodesic acceleration (one extra model evaluation per trial step).
    pub geodesic: bool,
    /// Iterations of plain LM before geodesic acceleration starts: most fits converge in
    /// a handful of iterations without it, at half the evaluations; long curved valleys
    /// (NIST Bennett5) then get it.
    pub geodesic_after: usize,
    /// Give up as [`StopReason::Stalled`] when `stall_window` iterations together reduce
    /// RSS by less than `stall_rtol` (relative), or by less than 10⁻³ while the largest
    /// |parameter| grows by half or more; 0 disables. This ends, cheaply and honestly, the drift
    /// of a poorly determined model along a flat valley toward infinite parameters (for
    /// example two sites whose slow rate runs to zero while the amplitudes cancel).
    pub stall_window: usize,
    pub stall_rtol: f64,
}

impl Default for LmOptions {
    fn default() -> Self {
        Self {
            max_iterations: 2000,
            ftol: 1e-15,
            xtol: 1e-13,
            gtol: 1e-13,
            bounds: Vec::new(),
            geodesic: true,
            geodesic_after: 6,
            stall_window: 25,
            stall_rtol: 1e-10,
        }
    }
}

/// Why the iterations stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// Actual and predicted relative RSS reductions below ftol.
    SmallRssChange,
    /// Scaled step below xtol.
    SmallStep,
    /// Residuals orthogonal to the Jacobian columns (gtol).
    SmallGradient,
    /// The residuals are zero to machine precision.
    ExactFit,
    /// Iteration budget used up.
    MaxIterations,
    /// Damping grew without bound: no step reduces RSS, and the gradient is not small.
    NoReductionPossible,
    /// The Jacobian is not finite at the current point.
    NonFiniteJacobian,
    /// Many iterations brought no meaningful reduction of RSS: a flat valley.
    Stalled,
    /// The best fit lies where the model turns into a simpler one (a rate at zero, two
    /// equal rates, a site gone before the second point): no interior optimum, the
    /// parameters are not identifiable.
    Degenerate,
}

impl StopReason {
    /// Whether this reason means a minimum was found.
    pub fn is_converged(self) -> bool {
        matches!(
            self,
            StopReason::SmallRssChange
                | StopReason::SmallStep
                | StopReason::SmallGradient
                | StopReason::ExactFit
        )
    }
    /// Short human wording for reports.
    pub fn describe(self) -> &'static str {
        match self {
            StopReason::SmallRssChange => "RSS no longer decreases",
            StopReason::SmallStep => "parameter step negligible",
            StopReason::SmallGradient => "gradient negligible",
            StopReason::ExactFit => "residuals are zero",
            StopReason::MaxIterations => "iteration limit reached",
            StopReason::NoReductionPossible => "no step reduces RSS (flat or singular problem)",
            StopReason::NonFiniteJacobian => "model derivatives are not finite",
            StopReason::Stalled => "no progress along a flat valley (poorly determined model)",
            StopReason::Degenerate => {
                "the best fit degenerates into a simpler model (a rate at zero or infinity, or two equal rates)"
            }
        }
    }
}

/// The raw result of a run of the engine.
#[derive(Debug, Clone, PartialEq)]
pub struct LmOutcome {
    pub params: Vec<f64>,
    /// Weighted residual sum of squares at `params`.
    pub rss: f64,
    /// Unscaled (JᵀJ)⁻¹ at `params`, if J has full column rank.
    pub inv_jtj: Option<Vec<Vec<f64>>>,
    pub reason: StopReason,
    pub iterations: usize,
    pub evaluations: usize,
}

fn validate<C: Curve + ?Sized>(
    curve: &C,
    x: &[f64],
    y: &[f64],
    weights: Option<&[f64]>,
    start: &[f64],
    opts: &LmOptions,
) -> Result<(), FitError> {
    let p = curve.n_params();
    if x.len() != y.len() {
        return Err(FitError::LengthMismatch {
            x: x.len(),
            y: y.len(),
        });
    }
    if start.len() != p {
        return Err(FitError::StartLength {
            got: start.len(),
            expected: p,
        });
    }
    if x.len() < p || p == 0 {
        return Err(FitError::TooFewPoints { n: x.len(), p });
    }
    if let Some(i) = x.iter().position(|v| !v.is_finite()) {
        return Err(FitError::NonFinite {
            what: "x",
            index: i,
        });
    }
    if let Some(i) = y.iter().position(|v| !v.is_finite()) {
        return Err(FitError::NonFinite {
            what: "y",
            index: i,
        });
    }
    if let Some(i) = start.iter().position(|v| !v.is_finite()) {
        return Err(FitError::NonFinite {
            what: "start value",
            index: i,
        });
    }
    if let Some(w) = weights {
        if w.len() != x.len() {
            return Err(FitError::WeightsMismatch {
                weights: w.len(),
                points: x.len(),
            });
        }
        if let Some(i) = w.iter().position(|v| !v.is_finite()) {
            return Err(FitError::NonFinite {
                what: "weight",
                index: i,
            });
        }
        if let Some(i) = w.iter().position(|v| *v < 0.0) {
            return Err(FitError::NegativeWeight { index: i });
        }
    }
    if !opts.bounds.is_empty() {
        if opts.bounds.len() != p {
            return Err(FitError::StartLength {
                got: opts.bounds.len(),
                expected: p,
            });
        }
        for (i, &(lo, hi)) in opts.bounds.iter().enumerate() {
            if lo.is_nan() || hi.is_nan() || lo > hi {
                return Err(FitError::BadBounds {
                    index: i,
                    lower: lo,
                    upper: hi,
                });
            }
        }
    }
    Ok(())
}

fn project(p: &mut [f64], bounds: &[(f64, f64)]) {
    for (v, &(lo, hi)) in p.iter_mut().zip(bounds) {
        *v = v.clamp(lo, hi);
    }
}

/// √w of every point; None when unweighted (√w = 1, and 1·v = v exactly, so both paths
/// give the same bits): a lot of 200,000 cycles then holds no column of ones.
fn root_weight(sw: Option<&[f64]>, i: usize) -> f64 {
    sw.map_or(1.0, |s| s[i])
}

/// Weighted residuals r = √w·(y − f); returns RSS, or None if any value is not finite.
fn residuals<C: Curve + ?Sized>(
    curve: &C,
    x: &[f64],
    y: &[f64],
    sw: Option<&[f64]>,
    p: &[f64],
    r: &mut [f64],
) -> Option<f64> {
    let mut rss = 0.0;
    // One loop per case, so that the unweighted one carries no branch.
    match sw {
        Some(sw) => {
            for i in 0..x.len() {
                let v = sw[i] * (y[i] - curve.value(x[i], p));
                if !v.is_finite() {
                    return None;
                }
                r[i] = v;
                rss += v * v;
            }
        }
        None => {
            for i in 0..x.len() {
                let v = y[i] - curve.value(x[i], p);
                if !v.is_finite() {
                    return None;
                }
                r[i] = v;
                rss += v * v;
            }
        }
    }
    rss.is_finite().then_some(rss)
}

/// Residuals as [`residuals`] and the weighted Jacobian at the same point, from one
/// evaluation of the curve over all points. Returns (RSS or None, whether the Jacobian is
/// finite).
fn residuals_and_jacobian<C: Curve + ?Sized>(
    curve: &C,
    x: &[f64],
    y: &[f64],
    sw: Option<&[f64]>,
    p: &[f64],
    r: &mut [f64],
    jac: &mut DMatrix<f64>,
) -> (Option<f64>, bool) {
    let n = x.len();
    let mut rss = 0.0;
    // Column-major: element (i, j) is js[j·n + i]. The model's values land in r first.
    let js = jac.as_mut_slice();
    curve.values_and_jacobian(x, p, r, js);
    match sw {
        Some(sw) => {
            for i in 0..n {
                let v = sw[i] * (y[i] - r[i]);
                r[i] = v;
                rss += v * v;
            }
        }
        None => {
            for i in 0..n {
                let v = y[i] - r[i];
                r[i] = v;
                rss += v * v;
            }
        }
    }
    if !r.iter().all(|v| v.is_finite()) {
        return (None, false);
    }
    let mut finite_jac = true;
    for col in js.chunks_exact_mut(n.max(1)) {
        match sw {
            Some(sw) => {
                for (d, w) in col.iter_mut().zip(sw) {
                    *d *= w;
                    finite_jac &= d.is_finite();
                }
            }
            None => finite_jac &= col.iter().all(|d| d.is_finite()),
        }
    }
    (rss.is_finite().then_some(rss), finite_jac)
}

fn jacobian<C: Curve + ?Sized>(
    curve: &C,
    x: &[f64],
    sw: Option<&[f64]>,
    p: &[f64],
    jac: &mut DMatrix<f64>,
    row: &mut [f64],
) -> bool {
    let n = x.len();
    let js = jac.as_mut_slice();
    for i in 0..n {
        curve_gradient(curve, x[i], p, row);
        for (j, g) in row.iter().enumerate() {
            let v = root_weight(sw, i) * g;
            if !v.is_finite() {
                return false;
            }
            js[j * n + i] = v;
        }
    }
    true
}

/// (JᵀJ)⁻¹ through the SVD of the column-scaled J, which is far better conditioned than
/// inverting JᵀJ itself; None when J is rank deficient.
///
/// The SVD is taken of R from a Householder QR of the scaled J: same singular values and
/// right singular vectors, and QR is backward stable. R is p×p, so a one-sided Jacobi SVD
/// (Hestenes 1958), accurate to high relative precision, costs almost nothing; a general
/// library SVD of the tall J cost more than the rest of a small fit.
///
/// J is taken by value and reduced in its own storage: at 200,000 points a copy of a
/// five-column J is 8 MB.
pub fn inverse_jtj(jac: DMatrix<f64>) -> Option<Vec<Vec<f64>>> {
    let (n, p) = (jac.nrows(), jac.ncols());
    if n < p || p == 0 {
        return None;
    }
    let mut scale = vec![0.0; p];
    for (j, s) in scale.iter_mut().enumerate() {
        *s = jac.column(j).norm();
        if !s.is_finite() || *s == 0.0 {
            return None;
        }
    }
    // The column-major scaled J, reduced in place to R.
    let mut a: Vec<f64> = jac.data.into();
    for j in 0..p {
        a[j * n..(j + 1) * n]
            .iter_mut()
            .for_each(|v| *v /= scale[j]);
    }
    for k in 0..p {
        let norm = a[k * n + k..(k + 1) * n]
            .iter()
            .map(|v| v * v)
            .sum::<f64>()
            .sqrt();
        if norm == 0.0 {
            continue;
        }
        let alpha = if a[k * n + k] > 0.0 { -norm } else { norm };
        a[k * n + k] -= alpha;
        let vnorm2: f64 = a[k * n + k..(k + 1) * n].iter().map(|v| v * v).sum();
        for j in k + 1..p {
            let (left, right) = a.split_at_mut(j * n);
            let v = &left[k * n + k..(k + 1) * n];
            let c = &mut right[k..n];
            let f = 2.0 * dot(v, c) / vnorm2;
            for (ci, vi) in c.iter_mut().zip(v) {
                *ci -= f * vi;
            }
        }
        a[k * n + k] = alpha;
    }
    // R column-major (p×p), then one-sided Jacobi: rotate column pairs until orthogonal;
    // B·V = U·Σ at the end, so the column norms are the singular values.
    let mut b = vec![0.0; p * p];
    for j in 0..p {
        for i in 0..=j {
            b[j * p + i] = a[j * n + i];
        }
    }
    let mut v = vec![0.0; p * p];
    for j in 0..p {
        v[j * p + j] = 1.0;
    }
    let tol = p as f64 * f64::EPSILON;
    for _sweep in 0..60 {
        let mut rotated = false;
        for i in 0..p {
            for j in i + 1..p {
                let (bi, bj) = (&b[i * p..(i + 1) * p], &b[j * p..(j + 1) * p]);
                let alpha = dot(bi, bi);
                let beta = dot(bj, bj);
                let gamma = dot(bi, bj);
                // Orthogonal to rounding: p·ε, since each dot product carries that error.
                if gamma == 0.0 || gamma.abs() <= tol * (alpha * beta).sqrt() {
                    continue;
                }
                rotated = true;
                let zeta = (beta - alpha) / (2.0 * gamma);
                let t = zeta.signum() / (zeta.abs() + (1.0 + zeta * zeta).sqrt());
                let c = 1.0 / (1.0 + t * t).sqrt();
                let s = c * t;
                for m in [&mut b, &mut v] {
                    for k in 0..p {
                        let (x, y) = (m[i * p + k], m[j * p + k]);
                        m[i * p + k] = c * x - s * y;
                        m[j * p + k] = s * x + c * y;
                    }
                }
            }
        }
        if !rotated {
            break;
        }
    }
    let sv: Vec<f64> = (0..p)
        .map(|j| dot(&b[j * p..(j + 1) * p], &b[j * p..(j + 1) * p]).sqrt())
        .collect();
    let smax = sv.iter().fold(0.0f64, |m, &x| m.max(x));
    let smin = sv.iter().fold(f64::INFINITY, |m, &x| m.min(x));
    if smin.is_nan() || smin <= smax * 1e-14 {
        return None;
    }
    let mut inv = vec![vec![0.0; p]; p];
    for r in 0..p {
        for c in 0..p {
            let mut s = 0.0;
            for k in 0..p {
                s += v[k * p + r] * v[k * p + c] / (sv[k] * sv[k]);
            }
            inv[r][c] = s / (scale[r] * scale[c]);
        }
    }
    Some(inv)
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(u, v)| u * v).sum()
}

/// Cholesky factorisation in place of the symmetric p×p matrix `a` (row-major; the lower
/// triangle becomes L). False when `a` is not positive definite. Hand-written because the
/// engine factorises a tiny matrix several times per iteration, and a library call would
/// allocate each time.
pub(super) fn cholesky_in_place(a: &mut [f64], p: usize) -> bool {
    for j in 0..p {
        let mut d = a[j * p + j];
        for k in 0..j {
            d -= a[j * p + k] * a[j * p + k];
        }
        if !(d > 0.0 && d.is_finite()) {
            return false;
        }
        let d = d.sqrt();
        a[j * p + j] = d;
        for i in j + 1..p {
            let mut s = a[i * p + j];
            for k in 0..j {
                s -= a[i * p + k] * a[j * p + k];
            }
            a[i * p + j] = s / d;
        }
    }
    true
}

/// Solves L·Lᵀ·x = b with L from [`cholesky_in_place`].
pub(super) fn cholesky_solve(l: &[f64], p: usize, b: &[f64], x: &mut [f64]) {
    for i in 0..p {
        let mut s = b[i];
        for k in 0..i {
            s -= l[i * p + k] * x[k];
        }
        x[i] = s / l[i * p + i];
    }
    for i in (0..p).rev() {
        let mut s = x[i];
        for k in i + 1..p {
            s -= l[k * p + i] * x[k];
        }
        x[i] = s / l[i * p + i];
    }
}

/// Minimises Σ wᵢ·(yᵢ − f(xᵢ; θ))² from `start`. Generic over the curve so that a model's
/// value and derivatives inline into the per-point loops (a `&dyn Curve` works too).
pub fn levenberg_marquardt<C: Curve + ?Sized>(
    curve: &C,
    x: &[f64],
    y: &[f64],
    weights: Option<&[f64]>,
    start: &[f64],
    opts: &LmOptions,
) -> Result<LmOutcome, FitError> {
    validate(curve, x, y, weights, start, opts)?;
    let n = x.len();
    let np = curve.n_params();
    let sw_own: Option<Vec<f64>> = weights.map(|w| w.iter().map(|v| v.sqrt()).collect());
    let sw = sw_own.as_deref();
    let mut p = start.to_vec();
    project(&mut p, &opts.bounds);
    // Every buffer is allocated once, in one allocation: an iteration allocates nothing.
    // Two columns of n: `r`, and `r_trial`, which holds the geodesic correction's
    // residuals, then J·δ for the predicted reduction, until the trial overwrites it.
    let mut work = vec![0.0; 2 * n + 10 * np + 2 * np * np];
    let (mut r, rest) = work.split_at_mut(n);
    let (mut r_trial, rest) = rest.split_at_mut(n);
    let (jtj, rest) = rest.split_at_mut(np * np);
    let (chol, rest) = rest.split_at_mut(np * np);
    let mut bufs = rest.chunks_exact_mut(np);
    let mut next = || bufs.next().unwrap_or_default();
    let (row, diag, g, delta, step) = (next(), next(), next(), next(), next());
    let (acc, rhs, trial, probe, g_free) = (next(), next(), next(), next(), next());
    let mut jac = DMatrix::zeros(n, np);
    // With analytic derivatives every trial point also gets its Jacobian (the same
    // exponentials serve both); an accepted trial then needs no separate Jacobian pass,
    // and neither does the start.
    let joint = curve.has_gradient();
    let mut jac_trial = if joint {
        DMatrix::zeros(n, np)
    } else {
        DMatrix::zeros(0, 0)
    };
    let mut trial_jac_finite = false;
    // Some(finite) when `jac` already holds the Jacobian at the current point and the loop
    // has not used it yet.
    let mut jac_ready: Option<bool> = None;
    let start_rss = if joint {
        let (v, f) = residuals_and_jacobian(curve, x, y, sw, &p, r, &mut jac);
        jac_ready = Some(f);
        v
    } else {
        residuals(curve, x, y, sw, &p, r)
    };
    let mut rss = start_rss.ok_or_else(|| {
        let index = x
            .iter()
            .position(|&xi| !curve.value(xi, &p).is_finite())
            .unwrap_or(0);
        FitError::BadStart { index }
    })?;
    let mut evaluations = 1;
    // Some(finite) when `jac` holds the Jacobian at the current point, used or not: the
    // covariance at the end then needs no further pass.
    let mut jac_at_p: Option<bool> = jac_ready;
    let mut lambda = 1e-3;
    let mut nu = 2.0;
    let mut iterations = 0;
    let mut reason = StopReason::MaxIterations;

    let max_abs = |p: &[f64]| p.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    // (RSS, max |θ|) of the last `stall_window` iterations, compared with the oldest.
    let mut history = std::collections::VecDeque::with_capacity(opts.stall_window + 1);
    'outer: while iterations < opts.max_iterations {
        iterations += 1;
        if opts.stall_window > 0 {
            history.push_back((rss, max_abs(&p)));
            if history.len() > opts.stall_window {
                let (old_rss, old_max): (f64, f64) = history.pop_front().unwrap_or((rss, 0.0));
                let gain = old_rss - rss;
                let growth = max_abs(&p) / old_max.max(1e-300);
                if gain <= opts.stall_rtol * old_rss || (gain <= 1e-3 * old_rss && growth >= 1.5) {
                    reason = StopReason::Stalled;
                    break;
                }
            }
        }
        if rss == 0.0 {
            reason = StopReason::ExactFit;
            break;
        }
        let finite = match jac_ready.take() {
            Some(f) => f,
            None => jacobian(curve, x, sw, &p, &mut jac, row),
        };
        jac_at_p = Some(finite);
        if !finite {
            reason = StopReason::NonFiniteJacobian;
            break;
        }
        // J is column-major: column j is js[j·n .. (j+1)·n].
        let js = jac.as_slice();
        let col = |j: usize| &js[j * n..(j + 1) * n];
        for a in 0..np {
            for b in a..np {
                let v = dot(col(a), col(b));
                jtj[a * np + b] = v;
                jtj[b * np + a] = v;
            }
            g[a] = dot(col(a), r);
        }
        // (J·v)ᵢ, summed over the columns in order.
        let jv = |v: &[f64], i: usize| {
            let mut s = js[i] * v[0];
            for (j, vj) in v.iter().enumerate().take(np).skip(1) {
                s += js[j * n + i] * vj;
            }
            s
        };
        // Moré's scaling: D_j never decreases, so the trust region cannot collapse in a
        // direction that was once informative.
        for j in 0..np {
            let c = jtj[j * np + j].sqrt();
            diag[j] = diag[j].max(c).max(1e-300);
        }
        // Parameters held at a bound that the descent direction (+g) pushes against: this
        // iteration's step leaves them where they are and solves for the others (an active
        // set; Kanzow, Yamashita & Fukushima, J. Comput. Appl. Math. 172, 2004, recalled from
        // memory). Projecting a full step instead crept along the bound for hundreds of
        // iterations.
        let mut active = 0u64;
        for (j, &(lo, hi)) in opts.bounds.iter().enumerate().take(np.min(64)) {
            if (p[j] <= lo && g[j] < 0.0) || (p[j] >= hi && g[j] > 0.0) {
                active |= 1 << j;
            }
        }
        let held = |j: usize| j < 64 && active & (1 << j) != 0;
        for j in 0..np {
            g_free[j] = if held(j) { 0.0 } else { g[j] };
        }
        let rnorm = rss.sqrt();
        let mut gcos: f64 = 0.0;
        for j in (0..np).filter(|&j| !held(j)) {
            let c = jtj[j * np + j].sqrt();
            if c > 0.0 {
                gcos = gcos.max(g[j].abs() / (c * rnorm));
            }
        }
        if gcos <= opts.gtol {
            reason = StopReason::SmallGradient;
            break;
        }
        loop {
            chol.copy_from_slice(jtj);
            for j in 0..np {
                chol[j * np + j] += lambda * diag[j] * diag[j];
            }
            for j in (0..np).filter(|&j| held(j)) {
                for k in 0..np {
                    chol[j * np + k] = 0.0;
                    chol[k * np + j] = 0.0;
                }
                chol[j * np + j] = 1.0;
            }
            if !cholesky_in_place(chol, np) {
                lambda *= nu;
                nu *= 2.0;
                if lambda > 1e30 {
                    reason = StopReason::NoReductionPossible;
                    break 'outer;
                }
                continue;
            }
            cholesky_solve(chol, np, g_free, delta);
            // Geodesic acceleration: correct the step with the second directional derivative
            // of the residuals along δ, estimated by one finite difference.
            step.copy_from_slice(delta);
            if opts.geodesic && iterations > opts.geodesic_after {
                let h = 0.1;
                for j in 0..np {
                    probe[j] = p[j] + h * delta[j];
                }
                let r_geo = &mut *r_trial;
                if residuals(curve, x, y, sw, probe, r_geo).is_some() {
                    evaluations += 1;
                    // r(p+hδ) ≈ r − hJδ − ½h²·f''  ⇒  f'' ≈ 2/h·((r − r_h)/h − Jδ)
                    for i in 0..n {
                        r_geo[i] = ((r[i] - r_geo[i]) / h - jv(delta, i)) * (2.0 / h);
                    }
                    for j in 0..np {
                        rhs[j] = if held(j) { 0.0 } else { dot(col(j), r_geo) };
                    }
                    cholesky_solve(chol, np, rhs, acc);
                    let mut na = 0.0;
                    let mut nd = 0.0;
                    for j in 0..np {
                        na += (diag[j] * acc[j]).powi(2);
                        nd += (diag[j] * delta[j]).powi(2);
                    }
                    if na.sqrt() <= 0.75 * nd.sqrt() {
                        for j in 0..np {
                            step[j] -= acc[j] * 0.5;
                        }
                    }
                } else {
                    evaluations += 1;
                }
            }
            for j in 0..np {
                trial[j] = p[j] + step[j];
            }
            project(trial, &opts.bounds);
            // From here `step` is the step actually taken (after the projection).
            for j in 0..np {
                step[j] = trial[j] - p[j];
            }
            let mut step_norm = 0.0;
            let mut pnorm = 0.0;
            for j in 0..np {
                step_norm += (diag[j] * step[j]).powi(2);
                pnorm += (diag[j] * p[j]).powi(2);
            }
            let step_norm = step_norm.sqrt();
            let pnorm = pnorm.sqrt();
            // Predicted reduction of the linear model: ‖r‖² − ‖r − Jδ‖², with J·δ summed
            // column by column in the trial's residual column before the trial fills it.
            {
                let out = &mut *r_trial;
                for (o, j0) in out.iter_mut().zip(col(0)) {
                    *o = j0 * step[0];
                }
                for j in 1..np {
                    let sj = step[j];
                    for (o, cj) in out.iter_mut().zip(col(j)) {
                        *o += cj * sj;
                    }
                }
            }
            let mut lin = 0.0;
            for i in 0..n {
                let v = r[i] - r_trial[i];
                lin += v * v;
            }
            let predicted = rss - lin;
            let new_rss = if joint {
                let (v, f) =
                    residuals_and_jacobian(curve, x, y, sw, trial, r_trial, &mut jac_trial);
                trial_jac_finite = f;
                v
            } else {
                residuals(curve, x, y, sw, trial, r_trial)
            };
            evaluations += 1;
            match new_rss {
                Some(new_rss) if new_rss < rss => {
                    let actual = rss - new_rss;
                    let rho = if predicted > 0.0 {
                        actual / predicted
                    } else {
                        1.0
                    };
                    let old = rss;
                    p.copy_from_slice(trial);
                    std::mem::swap(&mut r, &mut r_trial);
                    if joint {
                        std::mem::swap(&mut jac, &mut jac_trial);
                        jac_ready = Some(trial_jac_finite);
                        jac_at_p = jac_ready;
                    } else {
                        jac_at_p = None;
                    }
                    rss = new_rss;
                    lambda *= (1.0 - (2.0 * rho - 1.0).powi(3)).max(1.0 / 3.0);
                    lambda = lambda.max(1e-300);
                    nu = 2.0;
                    if actual <= opts.ftol * old && predicted.abs() <= opts.ftol * old {
                        reason = StopReason::SmallRssChange;
                        break 'outer;
                    }
                    if step_norm <= opts.xtol * (pnorm + opts.xtol) {
                        reason = StopReason::SmallStep;
                        break 'outer;
                    }
                    break;
                }
                other => {
                    if step_norm <= opts.xtol * (pnorm + opts.xtol) {
                        reason = StopReason::SmallStep;
                        break 'outer;
                    }
                    // A step whose effect is lost in rounding: the minimum is reached to
                    // machine precision.
                    if let Some(new_rss) = other
                        && (new_rss - rss).abs() <= 8.0 * f64::EPSILON * rss
                        && predicted.abs() <= opts.ftol.max(8.0 * f64::EPSILON) * rss
                    {
                        reason = StopReason::SmallRssChange;
                        break 'outer;
                    }
                    lambda *= nu;
                    nu *= 2.0;
                    if lambda > 1e30 {
                        reason = StopReason::NoReductionPossible;
                        break 'outer;
                    }
                }
            }
        }
    }
    let finite = match jac_at_p {
        Some(f) => f,
        None => jacobian(curve, x, sw, &p, &mut jac, row),
    };
    // The buffers go before the QR, which works in J's own storage.
    drop(jac_trial);
    drop(work);
    let inv_jtj = if finite { inverse_jtj(jac) } else { None };
    Ok(LmOutcome {
        params: p,
        rss,
        inv_jtj,
        reason,
        iterations,
        evaluations,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn straight_line_is_exact_in_few_iterations() {
        // A linear model is solved by one Gauss–Newton step; LM must land on the
        // ordinary least-squares line (closed form, any statistics textbook).
        let x = [0.0, 1.0, 2.0, 3.0, 4.0];
        let y = [1.1, 2.9, 5.2, 7.1, 8.8];
        let c = FnCurve::new(2, |x, p: &[f64]| p[0] + p[1] * x);
        let out = levenberg_marquardt(&c, &x, &y, None, &[0.0, 0.0], &LmOptions::default())
            .expect("valid problem");
        // OLS: slope = Sxy/Sxx = 19.6/10, intercept = ȳ − slope·x̄ = 5.02 − 3.92.
        assert!((out.params[1] - 1.96).abs() < 1e-10, "{:?}", out.params);
        assert!((out.params[0] - 1.10).abs() < 1e-10);
        assert!(out.reason.is_converged());
    }

    #[test]
    fn runaway_valley_stops_as_stalled() {
        // One decay plus residual activity (demo values) with seeded noise, fitted with two
        // sites: no interior optimum; the slow rate runs to zero while a_inf and a2 grow
        // and cancel (observed: |a_inf| ≈ 2400 after 1280 iterations without the rule).
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(1);
        let noise = Normal::new(0.0, 0.01).expect("valid sd");
        let x: Vec<f64> = (1..=40).map(f64::from).collect();
        let y: Vec<f64> = x
            .iter()
            .map(|&v| 0.25 + 0.75 * (-0.06 * v).exp() + noise.sample(&mut rng))
            .collect();
        let start = crate::fit::start::start_values(crate::fit::ModelId::TwoSite, &x, &y);
        let m = crate::fit::ModelId::TwoSite;
        let out =
            levenberg_marquardt(&m, &x, &y, None, &start, &LmOptions::default()).expect("valid");
        assert_eq!(out.reason, StopReason::Stalled, "{out:?}");
        assert!(!out.reason.is_converged());
        assert!(out.iterations < 300, "{}", out.iterations);
        let off = LmOptions {
            stall_window: 0,
            max_iterations: 300,
            ..LmOptions::default()
        };
        let long = levenberg_marquardt(&m, &x, &y, None, &start, &off).expect("valid");
        assert_eq!(long.reason, StopReason::MaxIterations);
    }

    #[test]
    fn bounds_are_respected() {
        let x = [0.0, 1.0, 2.0, 3.0];
        let y = [0.0, 1.0, 2.0, 3.0];
        let c = FnCurve::new(1, |x, p: &[f64]| p[0] * x);
        let opts = LmOptions {
            bounds: vec![(0.0, 0.5)],
            ..LmOptions::default()
        };
        let out = levenberg_marquardt(&c, &x, &y, None, &[0.1], &opts).expect("valid");
        assert!((out.params[0] - 0.5).abs() < 1e-12);
    }

    #[test]
    fn errors_are_typed_not_panics() {
        let c = FnCurve::new(2, |x, p: &[f64]| p[0] + p[1] * x);
        let o = LmOptions::default();
        assert!(matches!(
            levenberg_marquardt(&c, &[1.0], &[1.0, 2.0], None, &[0.0, 0.0], &o),
            Err(FitError::LengthMismatch { .. })
        ));
        assert!(matches!(
            levenberg_marquardt(&c, &[1.0], &[1.0], None, &[0.0, 0.0], &o),
            Err(FitError::TooFewPoints { .. })
        ));
        assert!(matches!(
            levenberg_marquardt(&c, &[1.0, f64::NAN], &[1.0, 2.0], None, &[0.0, 0.0], &o),
            Err(FitError::NonFinite { what: "x", .. })
        ));
        let bad = FnCurve::new(1, |x, p: &[f64]| (p[0] - x).ln());
        assert!(matches!(
            levenberg_marquardt(&bad, &[1.0, 2.0], &[1.0, 2.0], None, &[0.0], &o),
            Err(FitError::BadStart { .. })
        ));
    }
}
