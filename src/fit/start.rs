//! Automatic starting values.
//!
//! Every model here is linear in its amplitudes once its rate parameters are fixed. So for
//! a grid of rates (log-spaced over the x range) the amplitudes are solved by ordinary
//! least squares and the grid point with the lowest RSS is the start (the idea of variable
//! projection, Golub & Pereyra 1973). It needs no positive y (unlike log-linear regression)
//! and for two sites it searches both rates jointly, where peeling is fragile on short,
//! noisy series.

use super::models::ModelId;

/// Rates from 0.01/span to 20/span: a lot losing 1 % to almost all of its activity per
/// span of x.
fn rate_grid(span: f64, n: usize) -> Vec<f64> {
    let lo: f64 = 0.01 / span;
    let hi: f64 = 20.0 / span;
    (0..n)
        .map(|i| lo * (hi / lo).powf(i as f64 / (n - 1) as f64))
        .collect()
}

/// Ordinary least squares for y ≈ Σ c_j·b_j(x) with K ≤ 3 basis functions, by the normal
/// equations in one pass (K is tiny and only a start is wanted). RSS = yᵀy − cᵀ(Bᵀy) is
/// good enough to rank grid points. Returns coefficients and RSS. K is a constant so the
/// loops unroll: this runs once per grid point, hundreds of times per analysis.
fn linear_fit<const K: usize>(
    x: &[f64],
    y: &[f64],
    basis: impl Fn(usize, f64, &mut [f64; K]),
) -> Option<([f64; K], f64)> {
    let mut a = [[0.0f64; K]; K];
    let mut rhs = [0.0f64; K];
    let mut b = [0.0f64; K];
    let mut yty = 0.0;
    for (i, (&xi, &yi)) in x.iter().zip(y).enumerate() {
        yty += yi * yi;
        basis(i, xi, &mut b);
        for r in 0..K {
            for c in 0..K {
                a[r][c] += b[r] * b[c];
            }
            rhs[r] += b[r] * yi;
        }
    }
    solve_normal(a, rhs, yty)
}

/// Solves the normal equations A·c = Bᵀy of [`linear_fit`], given A, Bᵀy and yᵀy.
fn solve_normal<const K: usize>(
    mut a: [[f64; K]; K],
    mut rhs: [f64; K],
    yty: f64,
) -> Option<([f64; K], f64)> {
    let bty = rhs;
    // Gaussian elimination with partial pivoting on the K×K system.
    for col in 0..K {
        let piv = (col..K).max_by(|&i, &j| a[i][col].abs().total_cmp(&a[j][col].abs()))?;
        a.swap(col, piv);
        rhs.swap(col, piv);
        let d = a[col][col];
        if d.abs() <= 1e-300 || !d.is_finite() {
            return None;
        }
        for r in 0..K {
            if r != col {
                let f = a[r][col] / d;
                for c in col..K {
                    a[r][c] -= f * a[col][c];
                }
                rhs[r] -= f * rhs[col];
            }
        }
    }
    let mut coef = [0.0; K];
    let mut rss = yty;
    for r in 0..K {
        coef[r] = rhs[r] / a[r][r];
    }
    for j in 0..K {
        rss -= coef[j] * bty[j];
    }
    let rss = rss.max(0.0);
    (rss.is_finite() && coef.iter().all(|c| c.is_finite())).then_some((coef, rss))
}

/// The common step of evenly spaced x (cycle numbers usually are), if they are.
pub(super) fn even_step(x: &[f64]) -> Option<f64> {
    let (first, second) = (*x.first()?, *x.get(1)?);
    let step = second - first;
    let tol = 1e-12 * (x.last()? - first).abs().max(f64::MIN_POSITIVE);
    (step.is_finite() && step != 0.0 && x.windows(2).all(|w| ((w[1] - w[0]) - step).abs() <= tol))
        .then_some(step)
}

/// exp(−k·xᵢ) for every point into `out`. With evenly spaced x a running product replaces
/// all but two exponentials; its rounding (about n ulp) does not matter for a start.
fn decay_row(k: f64, x: &[f64], step: Option<f64>, out: &mut Vec<f64>) {
    out.clear();
    match (step, x.first()) {
        (Some(h), Some(&x0)) => {
            let q = (-k * h).exp();
            let mut e = (-k * x0).exp();
            for _ in x {
                out.push(e);
                e *= q;
            }
        }
        _ => out.extend(x.iter().map(|&xi| (-k * xi).exp())),
    }
}

fn best<T>(cands: impl Iterator<Item = Option<(T, f64)>>) -> Option<T> {
    cands
        .flatten()
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(t, _)| t)
}

/// Starting values for `model` on (x, y); always returns a finite vector of the right
/// length (a crude fallback when the data are degenerate).
pub fn start_values(model: ModelId, x: &[f64], y: &[f64]) -> Vec<f64> {
    let (xmin, xmax) = x
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(v), hi.max(v))
        });
    let span = if xmax > xmin { xmax - xmin } else { 1.0 };
    let span = if span.is_finite() { span } else { 1.0 };
    let ymean = if y.is_empty() {
        1.0
    } else {
        y.iter().sum::<f64>() / y.len() as f64
    };
    let grid = rate_grid(span, 16);
    let step = even_step(x);
    let mut row = Vec::with_capacity(x.len());
    // Candidates are small arrays; only the winner becomes a Vec.
    let found: Option<Vec<f64>> = match model {
        ModelId::Linear => linear_fit::<2>(x, y, |_, x, b| {
            b[0] = 1.0;
            b[1] = -x;
        })
        .map(|(c, _)| vec![c[0], c[1]]),
        ModelId::FirstOrder => best(grid.iter().map(|&kd| {
            decay_row(kd, x, step, &mut row);
            linear_fit::<1>(x, y, |i, _, b| b[0] = row[i]).map(|(c, r)| ([c[0], kd], r))
        }))
        .map(|p| p.to_vec()),
        ModelId::SecondOrder => best(grid.iter().map(|&kd| {
            linear_fit::<1>(x, y, |_, x, b| b[0] = 1.0 / (1.0 + kd * x))
                .map(|(c, r)| ([c[0], kd], r))
        }))
        .map(|p| p.to_vec()),
        ModelId::Plateau => best(grid.iter().map(|&kd| {
            decay_row(kd, x, step, &mut row);
            linear_fit::<1>(x, y, |i, _, b| b[0] = 1.0 - row[i]).map(|(c, r)| ([c[0], kd], r))
        }))
        .map(|p| p.to_vec()),
        ModelId::FirstOrderResidual => best(grid.iter().map(|&kd| {
            decay_row(kd, x, step, &mut row);
            linear_fit::<2>(x, y, |i, _, b| {
                let e = row[i];
                b[0] = e;
                b[1] = 1.0 - e;
            })
            .map(|(c, r)| ([c[0], c[1], kd], r))
        }))
        .map(|p| p.to_vec()),
        ModelId::Power => {
            // Orders 1.5, 2 and 3 have power-free closed forms: u⁻², u⁻¹ and u^(−1/2).
            best(grid.iter().flat_map(|&kd| {
                [1.5, 2.0, 3.0].into_iter().map(move |m| {
                    let s: f64 = m - 1.0;
                    linear_fit::<1>(x, y, |_, x, b| {
                        let u = 1.0 + s * kd * x;
                        b[0] = if m == 1.5 {
                            1.0 / (u * u)
                        } else if m == 2.0 {
                            1.0 / u
                        } else {
                            1.0 / u.sqrt()
                        };
                    })
                    .map(|(c, r)| ([c[0], kd, m], r))
                })
            }))
            .map(|p| p.to_vec())
        }
        ModelId::PowerResidual => {
            // Orders 0.5 (u², ended at zero), 1 (the exponential), 1.5, 2 and 3, each with
            // the amplitudes (a0, a_inf) solved linearly on the basis (g, 1 − g).
            let shape = |m: f64, kd: f64, x: f64| -> f64 {
                let u = 1.0 + (m - 1.0) * kd * x;
                if m == 0.5 {
                    u.max(0.0) * u.max(0.0)
                } else if m == 1.0 {
                    (-kd * x).exp()
                } else if m == 1.5 {
                    1.0 / (u * u)
                } else if m == 2.0 {
                    1.0 / u
                } else {
                    1.0 / u.sqrt()
                }
            };
            best(grid.iter().flat_map(|&kd| {
                [0.5, 1.0, 1.5, 2.0, 3.0].into_iter().map(move |m| {
                    linear_fit::<2>(x, y, |_, x, b| {
                        let g = shape(m, kd, x);
                        b[0] = g;
                        b[1] = 1.0 - g;
                    })
                    .map(|(c, r)| ([c[0], c[1], kd, m], r))
                })
            }))
            .map(|p| p.to_vec())
        }
        ModelId::TwoSite => {
            let coarse = rate_grid(span, 9);
            let m = x.len().min(y.len());
            let (x, y) = (&x[..m], &y[..m]);
            // exp(−k·xᵢ) once per rate and point, shared by every pair of rates; and so
            // are the sums of the normal equations: each pair's basis (1, e_i, e_j) only
            // combines them. The sums are the ones `linear_fit` would form, term by term
            // in the same order, so the starts are the same to the last bit.
            let g = coarse.len();
            let mut table = vec![0.0; g * x.len()];
            for (k, t) in coarse.iter().zip(table.chunks_exact_mut(x.len().max(1))) {
                decay_row(*k, x, step, &mut row);
                t.copy_from_slice(&row);
            }
            let col = |i: usize| &table[i * x.len()..(i + 1) * x.len()];
            let sum = |a: &[f64], b: &[f64]| a.iter().zip(b).fold(0.0, |s, (u, v)| s + u * v);
            let count = y.iter().fold(0.0, |s, _| s + 1.0);
            let (sum_y, yty) = y.iter().fold((0.0, 0.0), |(s, q), &v| (s + v, q + v * v));
            let sum_e: Vec<f64> = (0..g)
                .map(|i| col(i).iter().fold(0.0, |s, v| s + v))
                .collect();
            let sum_ey: Vec<f64> = (0..g).map(|i| sum(col(i), y)).collect();
            let mut gram = vec![0.0; g * g];
            for i in 0..g {
                for j in 0..=i {
                    gram[i * g + j] = sum(col(i), col(j));
                }
            }
            let (sum_e, sum_ey, gram) = (&sum_e, &sum_ey, &gram);
            best(coarse.iter().enumerate().flat_map(|(i, &k1)| {
                coarse[..i].iter().enumerate().map(move |(j, &k2)| {
                    let a = [
                        [count, sum_e[i], sum_e[j]],
                        [sum_e[i], gram[i * g + i], gram[i * g + j]],
                        [sum_e[j], gram[i * g + j], gram[j * g + j]],
                    ];
                    solve_normal::<3>(a, [sum_y, sum_ey[i], sum_ey[j]], yty)
                        .map(|(c, r)| ([c[0], c[1], k1, c[2], k2], r))
                })
            }))
            .map(|p| p.to_vec())
        }
    };
    found.unwrap_or_else(|| fallback(model, ymean, span))
}

fn fallback(model: ModelId, ymean: f64, span: f64) -> Vec<f64> {
    let k = 1.0 / span;
    let a = if ymean.is_finite() { ymean } else { 1.0 };
    match model {
        ModelId::Linear => vec![a, 0.0],
        ModelId::FirstOrder | ModelId::SecondOrder | ModelId::Plateau => vec![a, k],
        ModelId::FirstOrderResidual => vec![a, 0.5 * a, k],
        ModelId::Power => vec![a, k, 2.0],
        ModelId::PowerResidual => vec![a, 0.5 * a, k, 2.0],
        ModelId::TwoSite => vec![0.3 * a, 0.4 * a, 3.0 * k, 0.3 * a, 0.3 * k],
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn running_product_matches_exponentials() {
        let even: Vec<f64> = (1..=200).map(f64::from).collect();
        assert_eq!(even_step(&even), Some(1.0));
        let uneven = [1.0, 2.0, 4.0];
        assert_eq!(even_step(&uneven), None);
        let mut row = Vec::new();
        for k in [1e-4, 0.05, 3.0] {
            decay_row(k, &even, even_step(&even), &mut row);
            for (e, &xi) in row.iter().zip(&even) {
                let exact = (-k * xi).exp();
                assert!((e - exact).abs() <= 1e-13 * exact, "k {k}, x {xi}");
            }
            decay_row(k, &uneven, None, &mut row);
            assert_eq!(row[2], (-k * 4.0).exp());
        }
    }

    #[test]
    fn starts_are_near_truth_for_clean_data() {
        let x: Vec<f64> = (1..=30).map(f64::from).collect();
        let truth = [
            (ModelId::FirstOrder, vec![1.0, 0.05]),
            (ModelId::SecondOrder, vec![1.0, 0.08]),
            (ModelId::FirstOrderResidual, vec![1.0, 0.4, 0.1]),
            (ModelId::PowerResidual, vec![1.0, 0.3, 0.1, 2.0]),
        ];
        for (m, p) in truth {
            let y: Vec<f64> = x.iter().map(|&xi| m.eval(xi, &p)).collect();
            let s = start_values(m, &x, &y);
            let rate = *s.last().unwrap_or(&0.0);
            let true_rate = *p.last().unwrap_or(&0.0);
            // The grid spacing is a factor (2000)^(1/15) ≈ 1.66 between neighbours.
            assert!(
                rate / true_rate < 1.7 && true_rate / rate < 1.7,
                "{m}: {s:?}"
            );
        }
    }

    #[test]
    fn degenerate_data_give_finite_starts() {
        for m in ModelId::ALL {
            let s = start_values(m, &[2.0, 2.0, 2.0], &[1.0, 1.0, 1.0]);
            assert_eq!(s.len(), m.n_params());
            assert!(s.iter().all(|v| v.is_finite()), "{m}: {s:?}");
            let e = start_values(m, &[], &[]);
            assert!(e.iter().all(|v| v.is_finite()));
        }
    }
}
