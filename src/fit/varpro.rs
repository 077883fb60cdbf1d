//! Two sites by variable projection (Golub & Pereyra 1973).
//!
//! a_inf + a1·e^(−k1·x) + a2·e^(−k2·x) is linear in its amplitudes once the rates are
//! fixed, so the amplitudes are eliminated by linear least squares and Levenberg–Marquardt
//! runs on the two rates alone, with the Golub–Pereyra derivative of the projected residual.
//!
//! Why: on a lot that is really one decay plus a residual activity, the five-parameter
//! problem has no interior optimum. There LM crawls for dozens of iterations along a flat
//! valley in which one rate runs to zero while the amplitudes grow and cancel. In the
//! two-rate problem the same valley is a short walk to the edge where the model turns
//! into a simpler one (a rate at zero, or both rates equal), which is recognised and
//! reported as [`StopReason::Degenerate`]. When the rates have an interior optimum, the
//! full engine restarts from it, so status, tolerances and statistics stay the engine's.

use nalgebra::DMatrix;

use super::lm::{LmOptions, LmOutcome, StopReason, inverse_jtj, levenberg_marquardt};
use super::models::ModelId;

/// Rates below this fraction of 1/span count as zero: e^(−k·x) then differs from a
/// straight line by (k·span)²/2 = 5·10⁻⁹ over the data, which no lot can tell apart.
const ZERO_RATE: f64 = 1e-4;
/// Rates closer than this (relative) count as equal: the two decays are one. On the way
/// to equal rates the amplitudes grow with opposite signs like 1/Δk (observed: ±3·10⁴ at
/// Δk/k = 3·10⁻⁵ on a one-decay lot); a 0.1 % difference of rates cannot be resolved by
/// a lot of a few dozen cycles at any realistic noise.
const SAME_RATE: f64 = 1e-3;
/// A site with k·x above this at the second smallest x has vanished (e^(−40) ≈ 4·10⁻¹⁸)
/// before the second point: it can only fit the first point, and any larger rate fits as
/// well, so there is no optimum.
const GONE_RATE_X: f64 = 40.0;
/// A basis column whose part orthogonal to the others is below this (relative to its
/// norm) makes the amplitudes numerically undetermined; such a trial point is refused.
const RANK_TOL: f64 = 1e-11;

/// Workspace of the projection: everything per point, allocated once per fit.
///
/// One basis serves both the current rates and a trial: the current basis is needed only
/// for the derivatives, which are taken before any trial, so a trial overwrites it. A
/// refused trial leaves the current residual, amplitudes and R untouched (the step loop
/// needs the residual), and the loop stops or tries again without the basis; an accepted
/// one becomes current with the basis it wrote.
struct Work {
    n: usize,
    /// Orthonormal basis of span{√w, √w·e1, √w·e2}, column-major: of the last projection.
    q: Vec<f64>,
    /// The projection at the current rates.
    cur: Projected,
    /// The projection at the last trial rates.
    trial: Projected,
}

/// What one projection leaves besides its basis.
struct Projected {
    /// The rates. √w·e^(−k_j·x) is recomputed where the derivatives need it, not held.
    k: [f64; 2],
    /// Projected residual.
    r: Vec<f64>,
    /// Upper-triangular R of B = QR.
    rr: [[f64; 3]; 3],
    /// Amplitudes (a_inf, a1, a2).
    c: [f64; 3],
}

impl Projected {
    fn new(n: usize) -> Self {
        Self {
            k: [0.0; 2],
            r: vec![0.0; n],
            rr: [[0.0; 3]; 3],
            c: [0.0; 3],
        }
    }
}

/// √w of point i (1 when unweighted: 1·v = v exactly, so no column of ones is held).
fn root_weight(sw: Option<&[f64]>, i: usize) -> f64 {
    sw.map_or(1.0, |s| s[i])
}

impl Work {
    fn new(n: usize) -> Self {
        Self {
            n,
            q: vec![0.0; 3 * n],
            cur: Projected::new(n),
            trial: Projected::new(n),
        }
    }

    /// The last trial becomes the current projection.
    fn accept(&mut self) {
        std::mem::swap(&mut self.cur, &mut self.trial);
    }

    /// Solves the amplitudes for rates `k` into the trial (and the basis) and fills its
    /// residual; returns RSS, or None when the basis is numerically rank deficient or a
    /// value is not finite. `yw` is √w·y.
    fn project(&mut self, x: &[f64], yw: &[f64], sw: Option<&[f64]>, k: [f64; 2]) -> Option<f64> {
        let n = self.n;
        let t = &mut self.trial;
        t.k = k;
        for i in 0..n {
            let s = root_weight(sw, i);
            self.q[i] = s;
            self.q[n + i] = s * (-k[0] * x[i]).exp();
            self.q[2 * n + i] = s * (-k[1] * x[i]).exp();
        }
        t.rr = [[0.0; 3]; 3];
        // Modified Gram–Schmidt with one reorthogonalisation: for three columns this is as
        // accurate as Householder and needs no extra storage.
        for j in 0..3 {
            let norm0 = dot(&self.q[j * n..(j + 1) * n], &self.q[j * n..(j + 1) * n]).sqrt();
            if !(norm0.is_finite() && norm0 > 0.0) {
                return None;
            }
            for _pass in 0..2 {
                for i in 0..j {
                    let (head, tail) = self.q.split_at_mut(j * n);
                    let qi = &head[i * n..(i + 1) * n];
                    let v = &mut tail[..n];
                    let s = dot(qi, v);
                    t.rr[i][j] += s;
                    for (vt, qt) in v.iter_mut().zip(qi) {
                        *vt -= s * qt;
                    }
                }
            }
            let v = &mut self.q[j * n..(j + 1) * n];
            let norm = dot(v, v).sqrt();
            // NaN norms fail too.
            if norm.is_nan() || norm <= RANK_TOL * norm0 {
                return None;
            }
            t.rr[j][j] = norm;
            v.iter_mut().for_each(|t| *t /= norm);
        }
        // Qᵀy, residual r = y − Q·Qᵀy, amplitudes by back substitution.
        let mut qty = [0.0; 3];
        for j in 0..3 {
            qty[j] = dot(&self.q[j * n..(j + 1) * n], yw);
        }
        let mut rss = 0.0;
        for i in 0..n {
            let fit = qty[0] * self.q[i] + qty[1] * self.q[n + i] + qty[2] * self.q[2 * n + i];
            let v = yw[i] - fit;
            t.r[i] = v;
            rss += v * v;
        }
        for j in (0..3).rev() {
            let mut s = qty[j];
            for l in j + 1..3 {
                s -= t.rr[j][l] * t.c[l];
            }
            t.c[j] = s / t.rr[j][j];
        }
        (rss.is_finite() && t.c.iter().all(|v| v.is_finite())).then_some(rss)
    }

    /// Golub–Pereyra derivative of the projected residual r = P⊥·y by each rate, at the
    /// current rates (the basis must be theirs: called only after [`Work::accept`]): ∂r/∂k_j = −P⊥·D_j·c − (B⁺)ᵀ·D_jᵀ·r, where D_j
    /// is ∂B/∂k_j, whose only non-zero column is d_j = −x·√w·e^(−k_j·x).
    /// Written to `jac`, held outside: a refused trial's projection needs none. Each
    /// column first holds √w·e^(−k_j·x), then its derivative in place.
    fn jacobian(&self, x: &[f64], sw: Option<&[f64]>, jac: &mut [Vec<f64>; 2]) {
        let n = self.n;
        let cur = &self.cur;
        for j in 0..2 {
            let e = &mut jac[j];
            for i in 0..n {
                e[i] = root_weight(sw, i) * (-cur.k[j] * x[i]).exp();
            }
            let col = j + 1;
            let cj = cur.c[col];
            // u = D_j·c = c_j·d_j, then P⊥·u = u − Q·Qᵀu.
            let mut qtu = [0.0; 3];
            let mut dtr = 0.0;
            for i in 0..n {
                let d = -x[i] * e[i];
                let u = cj * d;
                qtu[0] += self.q[i] * u;
                qtu[1] += self.q[n + i] * u;
                qtu[2] += self.q[2 * n + i] * u;
                dtr += d * cur.r[i];
            }
            // (B⁺)ᵀ·e_col·dtr = Q·R⁻ᵀ·e_col·dtr: solve Rᵀz = e_col·dtr (forward).
            let mut z = [0.0; 3];
            for a in 0..3 {
                let mut s = if a == col { dtr } else { 0.0 };
                for b in 0..a {
                    s -= cur.rr[b][a] * z[b];
                }
                z[a] = s / cur.rr[a][a];
            }
            for i in 0..n {
                let d = -x[i] * e[i];
                let pu = cj * d
                    - (qtu[0] * self.q[i] + qtu[1] * self.q[n + i] + qtu[2] * self.q[2 * n + i]);
                let bz = z[0] * self.q[i] + z[1] * self.q[n + i] + z[2] * self.q[2 * n + i];
                e[i] = -pu - bz;
            }
        }
    }

    fn params(&self, k: [f64; 2]) -> Vec<f64> {
        let c = &self.cur.c;
        vec![c[0], c[1], k[0], c[2], k[1]]
    }
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(u, v)| u * v).sum()
}

/// How the two-rate problem ended.
enum Verdict {
    /// A minimum with distinct positive rates.
    Interior,
    /// The rates reach the edge of the model: a rate at zero, both equal, or a site gone
    /// before the second point.
    Degenerate,
    /// Neither could be established (budget used, or no step reduces RSS).
    Undecided,
}

/// Fits two sites from `start` (a_inf, a1, k1, a2, k2) by variable projection; None when
/// the start rates are not positive and finite (then the caller uses the full engine).
/// The result is either the full engine's, restarted at the interior optimum of the rates,
/// or a [`StopReason::Degenerate`] outcome at the last admissible point.
pub fn fit_two_site(
    x: &[f64],
    y: &[f64],
    weights: Option<&[f64]>,
    start: &[f64],
    opts: &LmOptions,
) -> Option<Result<LmOutcome, super::error::FitError>> {
    let (k1, k2) = (*start.get(2)?, *start.get(4)?);
    if !(k1.is_finite() && k2.is_finite() && k1 > 0.0 && k2 > 0.0 && opts.bounds.is_empty()) {
        return None;
    }
    let n = x.len();
    if n < 5 || y.len() != n || weights.is_some_and(|w| w.len() != n) {
        return None;
    }
    if x.iter().chain(y).any(|v| !v.is_finite()) {
        return None;
    }
    let sw_own: Option<Vec<f64>> = match weights {
        Some(w) if w.iter().all(|v| v.is_finite() && *v >= 0.0) => {
            Some(w.iter().map(|v| v.sqrt()).collect())
        }
        Some(_) => return None,
        None => None,
    };
    let sw = sw_own.as_deref();
    // √w·y: y itself when unweighted.
    let yw_own: Option<Vec<f64>> = sw.map(|sw| y.iter().zip(sw).map(|(a, b)| a * b).collect());
    let yw: &[f64] = yw_own.as_deref().unwrap_or(y);
    let (xmin, xmax) = x
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let span = if xmax > xmin { xmax - xmin } else { 1.0 };
    let kmin = ZERO_RATE / span;
    let x_second = x
        .iter()
        .copied()
        .filter(|&v| v > xmin)
        .fold(f64::INFINITY, f64::min);
    let gone = |k: [f64; 2]| k.iter().any(|&r| r * x_second > GONE_RATE_X);
    let merged = |k: [f64; 2]| (k[0] - k[1]).abs() <= SAME_RATE * k[0].max(k[1]);

    let mut w = Work::new(n);
    // The projected residual's derivatives by k1, k2 at the current rates.
    let mut jac = [vec![0.0; n], vec![0.0; n]];
    let mut k = [k1.max(kmin), k2.max(kmin)];
    let mut rss = w.project(x, yw, sw, k)?;
    w.accept();
    let mut evaluations = 1;
    let mut iterations = 0;
    let mut lambda = 1e-3;
    let mut nu = 2.0;
    let mut diag = [0.0f64; 2];
    let mut verdict = Verdict::Undecided;
    'outer: while iterations < opts.max_iterations {
        iterations += 1;
        if rss == 0.0 {
            verdict = Verdict::Interior;
            break;
        }
        w.jacobian(x, sw, &mut jac);
        let a = [
            [dot(&jac[0], &jac[0]), dot(&jac[0], &jac[1])],
            [dot(&jac[1], &jac[0]), dot(&jac[1], &jac[1])],
        ];
        // g = −Jᵀr: the Gauss–Newton step for r(k + δ) ≈ r + Jδ solves (JᵀJ)δ = −Jᵀr.
        let g = [-dot(&jac[0], &w.cur.r), -dot(&jac[1], &w.cur.r)];
        if !(a[0][0].is_finite() && a[1][1].is_finite() && g.iter().all(|v| v.is_finite())) {
            break;
        }
        // A rate held at the zero edge while the gradient pushes it further out is fixed
        // there (active set); the step is then solved for the other rate alone.
        let held = [k[0] <= kmin && g[0] < 0.0, k[1] <= kmin && g[1] < 0.0];
        if held[0] && held[1] {
            verdict = Verdict::Degenerate;
            break;
        }
        let rnorm = rss.sqrt();
        let mut gcos: f64 = 0.0;
        for j in 0..2 {
            let c = a[j][j].sqrt();
            diag[j] = diag[j].max(c).max(1e-300);
            if c > 0.0 && !held[j] {
                gcos = gcos.max(g[j].abs() / (c * rnorm));
            }
        }
        if gcos <= opts.gtol {
            verdict = Verdict::Interior;
            break;
        }
        loop {
            let m00 = a[0][0] + lambda * diag[0] * diag[0];
            let m11 = a[1][1] + lambda * diag[1] * diag[1];
            let det = m00 * m11 - a[0][1] * a[1][0];
            let d = if held[0] {
                [0.0, g[1] / m11]
            } else if held[1] {
                [g[0] / m00, 0.0]
            } else if det > 0.0 && det.is_finite() {
                [
                    (g[0] * m11 - a[0][1] * g[1]) / det,
                    (m00 * g[1] - a[1][0] * g[0]) / det,
                ]
            } else {
                [f64::NAN; 2]
            };
            if !(d[0].is_finite() && d[1].is_finite()) {
                lambda *= nu;
                nu *= 2.0;
                if lambda > 1e30 {
                    break 'outer;
                }
                continue;
            }
            let trial = [(k[0] + d[0]).max(kmin), (k[1] + d[1]).max(kmin)];
            let step = [trial[0] - k[0], trial[1] - k[1]];
            let step_norm = (diag[0] * step[0]).hypot(diag[1] * step[1]);
            let knorm = (diag[0] * k[0]).hypot(diag[1] * k[1]);
            // Predicted reduction of the linear model: ‖r‖² − ‖r + J·step‖².
            let mut pred_rss = 0.0;
            for i in 0..n {
                let v = w.cur.r[i] + jac[0][i] * step[0] + jac[1][i] * step[1];
                pred_rss += v * v;
            }
            let predicted = rss - pred_rss;
            evaluations += 1;
            match w.project(x, yw, sw, trial) {
                Some(new_rss) if new_rss < rss => {
                    let actual = rss - new_rss;
                    let rho = if predicted > 0.0 {
                        actual / predicted
                    } else {
                        1.0
                    };
                    let old = rss;
                    w.accept();
                    k = trial;
                    rss = new_rss;
                    lambda *= (1.0 - (2.0 * rho - 1.0).powi(3)).max(1.0 / 3.0);
                    lambda = lambda.max(1e-300);
                    nu = 2.0;
                    if merged(k) || gone(k) {
                        verdict = Verdict::Degenerate;
                        break 'outer;
                    }
                    if (actual <= opts.ftol * old && predicted.abs() <= opts.ftol * old)
                        || step_norm <= opts.xtol * (knorm + opts.xtol)
                    {
                        verdict = Verdict::Interior;
                        break 'outer;
                    }
                    break;
                }
                other => {
                    if step_norm <= opts.xtol * (knorm + opts.xtol)
                        || other.is_some_and(|v| {
                            (v - rss).abs() <= 8.0 * f64::EPSILON * rss
                                && predicted.abs() <= opts.ftol.max(8.0 * f64::EPSILON) * rss
                        })
                    {
                        verdict = Verdict::Interior;
                        break 'outer;
                    }
                    lambda *= nu;
                    nu *= 2.0;
                    if lambda > 1e30 {
                        break 'outer;
                    }
                }
            }
        }
    }
    // A "minimum" at the edge of the model is not an optimum of it.
    if matches!(verdict, Verdict::Interior)
        && (k[0] <= kmin || k[1] <= kmin || merged(k) || gone(k))
    {
        verdict = Verdict::Degenerate;
    }
    let params = w.params(k);
    // The projection's 56 bytes a point: gone before the fit that follows allocates its own.
    drop(w);
    drop(jac);
    drop(yw_own);
    let model = ModelId::TwoSite;
    match verdict {
        Verdict::Interior | Verdict::Undecided => {
            let budget = opts.max_iterations.saturating_sub(iterations).max(1);
            let polish = LmOptions {
                max_iterations: budget,
                ..opts.clone()
            };
            Some(
                levenberg_marquardt(&model, x, y, weights, &params, &polish).map(|mut out| {
                    out.iterations += iterations;
                    out.evaluations += evaluations;
                    out
                }),
            )
        }
        Verdict::Degenerate => {
            let mut rss_full = 0.0;
            let mut jac = DMatrix::zeros(n, 5);
            let mut g = [0.0; 5];
            for i in 0..n {
                let s = root_weight(sw, i);
                let v = s * (y[i] - model.eval(x[i], &params));
                rss_full += v * v;
                model.grad(x[i], &params, &mut g);
                for j in 0..5 {
                    jac[(i, j)] = s * g[j];
                }
            }
            Some(Ok(LmOutcome {
                params,
                rss: rss_full,
                inv_jtj: inverse_jtj(jac),
                reason: StopReason::Degenerate,
                iterations,
                evaluations,
            }))
        }
    }
}
