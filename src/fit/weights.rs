//! Weights of a lot's points from the standard errors of their activities.
//!
//! A point whose activity carries the standard error sdᵢ (propagated from the assay's
//! uncertainty, see `chem`) gets the weight wᵢ ∝ 1/sdᵢ² in the fit: weighted least squares,
//! the maximum-likelihood fit for independent normal errors of variance σ²/wᵢ (Seber &
//! Wild, "Nonlinear Regression", Wiley 1989; recalled from memory).
//!
//! How s² is treated: the weights are *relative*. The assay's σ is only part of a cycle's
//! scatter (weighing, sampling, the catalyst's own cycle-to-cycle variation add to it), so
//! the residual variance is still estimated from the weighted residuals,
//! s² = Σ wᵢ·rᵢ²/(n − p), and the covariance is s²·(JᵀWJ)⁻¹. The propagated errors thus
//! set how much each cycle counts against the others, not the absolute width of the
//! intervals; a lot whose scatter exceeds its assay error gets wider intervals, as it
//! should. Because only the ratios matter, the weights are scaled so that the median
//! standard error has weight 1: s is then the scatter of a cycle of median precision, and
//! a new cycle (the next batch) is predicted with that weight.
//!
//! Points without a standard error:
//! - an exact point gets weight 1, the weight of the median standard error (a cycle of
//!   unknown precision is taken to be typical);
//! - a censored point (its activity only a lower bound, computed at the saturation limit of
//!   conversion) gets the smallest weight among the known ones: k_app's relative error
//!   σ_X/((1 − X)·|ln(1 − X)|) grows without bound as X → 1, so a cycle at the saturation
//!   limit is at least as imprecise as the least precise cycle measured below it.
//!
//! Weights at the fitted values. A standard error computed from the observed value is
//! correlated with that value's error: k_app's error grows with conversion, so a reading
//! that happened to come out high gets a larger standard error and less weight, and the
//! fit is pulled low (measured in the scenario of tests/fit_censored.rs: kd 7 % low at an
//! assay error of σ_X = 0.005 with the weights at the observations, 3 % with them at the
//! fitted values). The remedy of generalised least squares is to evaluate the variance
//! function at the fitted mean, not at the observation (Carroll & Ruppert,
//! "Transformation and Weighting in Regression", Chapman & Hall 1988; recalled from
//! memory). When a lot's standard errors are a function of its activity, [`SdFunction`]
//! finds it (ln sd = α + β·y, which the propagation gives exactly for cycles of one batch
//! time: sd = σ_X·e^(k·t)/t for k = −ln(1 − X)/t, with k proportional to the activity),
//! and the analysis refits with the standard errors taken at the fitted activities of a
//! first fit (two-stage weighting). A censored point then gets the standard error at its
//! bound: whether a reading crosses the saturation limit is decided there, so the
//! probability P(Y ≥ c) linearised at c has exactly that standard error.
//!
//! A standard error that is not a positive finite number counts as unknown. Ratios of
//! standard errors are held within 10⁻⁶…10⁶ of the median (weights within 10⁻¹²…10¹²), so
//! that one absurd value cannot make the fit's arithmetic overflow.

/// Largest ratio between a standard error and the median one.
const MAX_SD_RATIO: f64 = 1e6;

/// Relative weights for points with standard errors `sd` (None: unknown) and censoring
/// flags `censored` (missing flags: not censored). None when no standard error is known:
/// the fit is then unweighted, exactly as without standard errors.
pub fn point_weights(sd: &[Option<f64>], censored: &[bool]) -> Option<Vec<f64>> {
    let known = |s: &Option<f64>| s.filter(|v| v.is_finite() && *v > 0.0);
    let mut sds: Vec<f64> = sd.iter().filter_map(known).collect();
    if sds.is_empty() {
        return None;
    }
    sds.sort_by(f64::total_cmp);
    let k = sds.len();
    let median = if k % 2 == 1 {
        sds[k / 2]
    } else {
        0.5 * (sds[k / 2 - 1] + sds[k / 2])
    };
    let largest = sds[k - 1];
    let weight = |s: f64| {
        let ratio = (s / median).clamp(1.0 / MAX_SD_RATIO, MAX_SD_RATIO);
        1.0 / (ratio * ratio)
    };
    Some(
        sd.iter()
            .enumerate()
            .map(|(i, s)| match known(s) {
                Some(v) => weight(v),
                None if censored.get(i).copied().unwrap_or(false) => weight(largest),
                None => 1.0,
            })
            .collect(),
    )
}

/// Largest scatter of ln sd about the line for standard errors to count as a function of
/// the activity (5 %): the propagation from one assay error at one batch time gives an exact
/// line, a relative assay error or varying batch times a curve or a cloud.
const SD_LINE_TOLERANCE: f64 = 0.05;

/// A lot's standard errors as a function of its activity, ln sd = α + β·y.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SdFunction {
    pub alpha: f64,
    pub beta: f64,
}

impl SdFunction {
    /// The line through (yᵢ, ln sdᵢ) of the exact points with a known standard error, by
    /// least squares; None with fewer than three, without spread in y, or when the standard
    /// errors scatter about the line by more than 5 % (root mean square of ln sd; they are
    /// then not a function of the activity alone).
    pub fn fit(y: &[f64], sd: &[Option<f64>], censored: &[bool]) -> Option<SdFunction> {
        let pts: Vec<(f64, f64)> = y
            .iter()
            .zip(sd)
            .enumerate()
            .filter(|(i, _)| !censored.get(*i).copied().unwrap_or(false))
            .filter_map(|(_, (&yi, s))| {
                s.filter(|v| v.is_finite() && *v > 0.0 && yi.is_finite())
                    .map(|v| (yi, v.ln()))
            })
            .collect();
        if pts.len() < 3 {
            return None;
        }
        let n = pts.len() as f64;
        let ym = pts.iter().map(|p| p.0).sum::<f64>() / n;
        let lm = pts.iter().map(|p| p.1).sum::<f64>() / n;
        let syy: f64 = pts.iter().map(|p| (p.0 - ym).powi(2)).sum();
        let syl: f64 = pts.iter().map(|p| (p.0 - ym) * (p.1 - lm)).sum();
        if !(syy > 0.0 && syy.is_finite()) {
            return None;
        }
        let beta = syl / syy;
        let alpha = lm - beta * ym;
        let rms = (pts
            .iter()
            .map(|p| (p.1 - alpha - beta * p.0).powi(2))
            .sum::<f64>()
            / n)
            .sqrt();
        (alpha.is_finite() && beta.is_finite() && rms <= SD_LINE_TOLERANCE)
            .then_some(SdFunction { alpha, beta })
    }

    /// The standard error at activity y; None when not a positive finite number.
    pub fn at(&self, y: f64) -> Option<f64> {
        Some((self.alpha + self.beta * y).exp()).filter(|v| v.is_finite() && *v > 0.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn no_known_error_means_unweighted() {
        assert_eq!(point_weights(&[], &[]), None);
        assert_eq!(point_weights(&[None, None], &[false, true]), None);
        assert_eq!(
            point_weights(&[Some(0.0), Some(f64::NAN), Some(-1.0)], &[]),
            None
        );
    }

    #[test]
    fn weights_are_inverse_variances_relative_to_the_median() {
        // sd 0.01, 0.02, 0.04: median 0.02, so weights (0.02/sd)² = 4, 1, 0.25.
        let w = point_weights(&[Some(0.01), Some(0.02), Some(0.04)], &[]).expect("weights");
        let want = [4.0, 1.0, 0.25];
        for (a, b) in w.iter().zip(want) {
            assert!((a - b).abs() < 1e-12, "{w:?}");
        }
    }

    #[test]
    fn unknown_errors_get_the_median_or_for_a_bound_the_smallest_weight() {
        let sd = [Some(0.01), None, Some(0.03), None, Some(0.02)];
        let censored = [false, false, false, true, false];
        let w = point_weights(&sd, &censored).expect("weights");
        assert_eq!(w[1], 1.0);
        // The largest known sd is 0.03: weight (0.02/0.03)².
        assert!((w[3] - (2.0f64 / 3.0).powi(2)).abs() < 1e-12, "{w:?}");
        assert!((w[2] - w[3]).abs() < 1e-15);
    }

    #[test]
    fn propagated_errors_are_found_as_a_function_of_activity() {
        // sd = σ_X·e^(y·kt)/kt, the propagation for one batch time (kt = 7.5, σ_X = 0.002):
        // ln sd = ln(σ_X/kt) + kt·y exactly.
        let kt: f64 = 7.5;
        let y = [0.9, 0.7, 0.55, 0.4, 0.3];
        let sd: Vec<Option<f64>> = y
            .iter()
            .map(|v| Some(0.002 * (v * kt).exp() / kt))
            .collect();
        let f = SdFunction::fit(&y, &sd, &[]).expect("a function");
        assert!((f.beta - kt).abs() < 1e-9 && (f.alpha - (0.002f64 / kt).ln()).abs() < 1e-9);
        let at = f.at(0.5).expect("finite");
        assert!((at - 0.002 * (0.5 * kt).exp() / kt).abs() < 1e-12);
        // Censored points and unknown errors do not enter; scattered errors are no function.
        let mut c = vec![false; 5];
        c[0] = true;
        assert!(SdFunction::fit(&y, &sd, &c).is_some());
        let cloud = [Some(0.01), Some(0.03), Some(0.01), Some(0.03), Some(0.01)];
        assert_eq!(SdFunction::fit(&y, &cloud, &[]), None);
        assert_eq!(SdFunction::fit(&y[..2], &sd[..2], &[]), None);
        assert_eq!(SdFunction::fit(&[0.5; 5], &sd, &[]), None);
    }

    #[test]
    fn absurd_errors_are_held_to_a_finite_range() {
        let w = point_weights(&[Some(1e-300), Some(1.0), Some(1e300)], &[]).expect("weights");
        assert!(w.iter().all(|v| v.is_finite() && *v > 0.0), "{w:?}");
        assert!((w[0] - 1e12).abs() < 1.0 && (w[2] - 1e-12).abs() < 1e-20);
    }
}
