//! Abrupt loss of activity (poisoning, a bad feed lot), as opposed to the slow trend.
//!
//! Two views, both reported with their numbers: the newest point against the one-step-ahead
//! prediction interval of the fit on the points before it (prediction variance
//! s² + gᵀΣg), and Page's one-sided downward CUSUM on standardised residuals
//! (Page 1954; k = 0.5, h = 4 to 5 are the usual SPC defaults, Montgomery, "Introduction
//! to Statistical Quality Control").

use serde::{Deserialize, Serialize};

use super::engine::FitResult;
use super::forecast::t_quantile;

/// The newest point against the prediction interval of the earlier points' fit.
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
    let s = earlier.sigma?;
    let var = s * s + earlier.mean_variance(x_new)?;
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
    pub prediction: Option<PredictionCheck>,
    pub cusum: Option<CusumResult>,
    /// True when either view signals.
    pub suspected: bool,
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
