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
    fn absurd_errors_are_held_to_a_finite_range() {
        let w = point_weights(&[Some(1e-300), Some(1.0), Some(1e300)], &[]).expect("weights");
        assert!(w.iter().all(|v| v.is_finite() && *v > 0.0), "{w:?}");
        assert!((w[0] - 1e12).abs() < 1.0 && (w[2] - 1e-12).abs() < 1e-20);
    }
}
