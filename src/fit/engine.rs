//! Fitting a named model: start values, the engine, and the statistics of the optimum.

use serde::{Deserialize, Serialize};

use super::choice::aicc;
use super::error::FitError;
use super::lm::{LmOptions, LmOutcome, StopReason, levenberg_marquardt};
use super::models::ModelId;
use super::start::start_values;
use super::varpro::fit_two_site;

/// How to fit one model. Start values and bounds are given by parameter name.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FitOptions {
    /// Weights wᵢ (e.g. 1/σᵢ²); None for an unweighted fit.
    pub weights: Option<Vec<f64>>,
    /// Start values by name; parameters not named get automatic starts.
    pub start: Vec<(String, f64)>,
    /// Bounds by name: (name, lower, upper).
    pub bounds: Vec<(String, f64, f64)>,
    /// Engine tuning.
    pub lm: LmOptions,
}

/// A fitted model with the statistics of its optimum (standard errors, covariance, AICc).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitResult {
    pub model: ModelId,
    pub param_names: Vec<String>,
    pub params: Vec<f64>,
    /// √diag(Σ); None when JᵀJ is singular or there are no degrees of freedom.
    pub std_errors: Option<Vec<f64>>,
    /// Σ = s²·(JᵀJ)⁻¹ with s² = RSS/(n − p).
    pub covariance: Option<Vec<Vec<f64>>>,
    /// Weighted when the fit is weighted. For a censored fit ([`super::censored`]) the
    /// RSS that gives the same likelihood (the RSS itself when nothing is censored).
    pub rss: f64,
    /// Residual standard deviation s = √(RSS/(n − p)).
    pub sigma: Option<f64>,
    pub n: usize,
    pub dof: usize,
    /// None when n ≤ p + 1 (AICc undefined).
    pub aicc: Option<f64>,
    pub converged: bool,
    pub reason: StopReason,
    pub iterations: usize,
    /// For a censored fit: the points that entered as lower bounds. None: least squares.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub censored: Option<usize>,
}

impl FitResult {
    /// Fitted y at x.
    pub fn predict(&self, x: f64) -> f64 {
        self.model.eval(x, &self.params)
    }

    /// Parameter value by name.
    pub fn param(&self, name: &str) -> Option<f64> {
        let i = self.param_names.iter().position(|n| n == name)?;
        self.params.get(i).copied()
    }

    /// Variance of the fitted mean at x, gᵀΣg with g = ∂y/∂θ (delta method).
    pub fn mean_variance(&self, x: f64) -> Option<f64> {
        let cov = self.covariance.as_ref()?;
        // On the stack: a plot grid calls this for every point.
        let (mut small, mut large);
        let g: &mut [f64] = if self.params.len() <= 8 {
            small = [0.0; 8];
            &mut small[..self.params.len()]
        } else {
            large = vec![0.0; self.params.len()];
            &mut large
        };
        self.model.grad(x, &self.params, g);
        let v = quad_form(cov, g);
        (v.is_finite() && v >= 0.0).then_some(v)
    }
}

/// gᵀΣg; NaN when the dimensions disagree.
pub fn quad_form(cov: &[Vec<f64>], g: &[f64]) -> f64 {
    if cov.len() != g.len() || cov.iter().any(|row| row.len() != g.len()) {
        return f64::NAN;
    }
    let mut s = 0.0;
    for (i, gi) in g.iter().enumerate() {
        for (j, gj) in g.iter().enumerate() {
            s += gi * cov[i][j] * gj;
        }
    }
    s
}

/// Standard errors and covariance from an engine outcome: Σ = s²·(JᵀJ)⁻¹, s² = RSS/(n − p).
pub fn covariance_of(out: &LmOutcome, n: usize) -> (Option<Vec<Vec<f64>>>, Option<Vec<f64>>) {
    let p = out.params.len();
    if n <= p {
        return (None, None);
    }
    let s2 = out.rss / (n - p) as f64;
    let Some(inv) = out.inv_jtj.as_ref() else {
        return (None, None);
    };
    let cov: Vec<Vec<f64>> = inv
        .iter()
        .map(|row| row.iter().map(|v| v * s2).collect())
        .collect();
    let se: Vec<f64> = (0..p).map(|j| cov[j][j].sqrt()).collect();
    if se.iter().all(|v| v.is_finite()) {
        (Some(cov), Some(se))
    } else {
        (None, None)
    }
}

/// Fits `model` with start values by name (`--start kd=0.1` on the command line); the
/// parameters not named start automatically.
pub fn fit_with_start(
    model: ModelId,
    x: &[f64],
    y: &[f64],
    start: &[(String, f64)],
) -> Result<FitResult, FitError> {
    let opts = FitOptions {
        start: start.to_vec(),
        ..FitOptions::default()
    };
    fit_model(model, x, y, &opts)
}

/// Fits `model` to (x, y).
pub fn fit_model(
    model: ModelId,
    x: &[f64],
    y: &[f64],
    opts: &FitOptions,
) -> Result<FitResult, FitError> {
    let p = model.n_params();
    let mut named: Vec<Option<f64>> = vec![None; p];
    for (name, v) in &opts.start {
        named[model.param_index(name)?] = Some(*v);
    }
    // The automatic starts cost a grid search; a refit that names every start skips it.
    let start: Vec<f64> = if named.iter().all(Option::is_some) {
        named.iter().map(|v| v.unwrap_or(f64::NAN)).collect()
    } else {
        let auto = start_values(model, x, y);
        named
            .iter()
            .zip(auto)
            .map(|(v, a)| v.unwrap_or(a))
            .collect()
    };
    let mut lm = opts.lm.clone();
    if !opts.bounds.is_empty() {
        let mut b = vec![(f64::NEG_INFINITY, f64::INFINITY); p];
        for (name, lo, hi) in &opts.bounds {
            b[model.param_index(name)?] = (*lo, *hi);
        }
        lm.bounds = b;
    }
    let weights = opts.weights.as_deref();
    // Two sites go through variable projection, which ends the degenerate valley quickly
    // and hands an interior optimum back to the engine (see varpro.rs).
    let via_projection = match model {
        ModelId::TwoSite => fit_two_site(x, y, weights, &start, &lm),
        _ => None,
    };
    let out = match via_projection {
        Some(out) => out?,
        None => levenberg_marquardt(&model, x, y, weights, &start, &lm)?,
    };
    Ok(result_from(model, &out, x.len()))
}

/// Builds a [`FitResult`] from an engine outcome.
pub fn result_from(model: ModelId, out: &LmOutcome, n: usize) -> FitResult {
    let p = out.params.len();
    let (covariance, std_errors) = covariance_of(out, n);
    FitResult {
        model,
        param_names: model.param_names().iter().map(|s| s.to_string()).collect(),
        params: out.params.clone(),
        std_errors,
        covariance,
        rss: out.rss,
        sigma: (n > p).then(|| (out.rss / (n - p) as f64).sqrt()),
        n,
        dof: n.saturating_sub(p),
        aicc: aicc(n, p, out.rss),
        converged: out.reason.is_converged(),
        reason: out.reason,
        iterations: out.iterations,
        censored: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn data() -> (Vec<f64>, Vec<f64>) {
        let x: Vec<f64> = (1..=12).map(f64::from).collect();
        let y = x
            .iter()
            .map(|&v| (-0.07 * v).exp() + 0.01 * (v * 2.3).sin())
            .collect();
        (x, y)
    }

    #[test]
    fn integer_weights_equal_duplicated_points() {
        // Weighted least squares with weight 2 on a point is the unweighted problem with
        // that point given twice (definition of weighted least squares).
        let (x, y) = data();
        let mut w = vec![1.0; x.len()];
        w[3] = 2.0;
        let weighted = FitOptions {
            weights: Some(w),
            ..FitOptions::default()
        };
        let a = fit_model(ModelId::FirstOrder, &x, &y, &weighted).expect("fit");
        let (mut x2, mut y2) = (x.clone(), y.clone());
        x2.push(x[3]);
        y2.push(y[3]);
        let b = fit_model(ModelId::FirstOrder, &x2, &y2, &FitOptions::default()).expect("fit");
        for j in 0..2 {
            assert!((a.params[j] - b.params[j]).abs() < 1e-10 * b.params[j].abs());
        }
        assert!((a.rss - b.rss).abs() < 1e-12 * b.rss.max(1e-300));
        let u = fit_model(ModelId::FirstOrder, &x, &y, &FitOptions::default()).expect("fit");
        assert!(
            (u.params[1] - a.params[1]).abs() > 1e-9,
            "weights must matter"
        );
    }

    #[test]
    fn named_starts_and_bounds() {
        let (x, y) = data();
        let f = fit_with_start(ModelId::FirstOrder, &x, &y, &[("kd".into(), 0.5)]).expect("fit");
        assert!(f.converged);
        assert!((f.param("kd").unwrap_or(0.0) - 0.07).abs() < 0.01);
        let bad = fit_with_start(ModelId::FirstOrder, &x, &y, &[("k".into(), 0.5)]);
        assert!(matches!(bad, Err(FitError::UnknownParameter { .. })));
        let bounded = FitOptions {
            bounds: vec![("kd".into(), 0.0, 0.05)],
            ..FitOptions::default()
        };
        let b = fit_model(ModelId::FirstOrder, &x, &y, &bounded).expect("fit");
        assert!(b.param("kd").is_some_and(|k| k <= 0.05));
    }
}
