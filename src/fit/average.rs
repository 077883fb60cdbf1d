//! Model averaging: the forecast of `auto` when several models describe the lot.
//!
//! Choosing the best model by AICc and reporting its interval as if that model were known
//! gives intervals that are far too narrow. Instead every usable candidate i gets the
//! Akaike weight w_i ∝ exp(−ΔAICc_i/2), and any fitted quantity q (here h(x) = y(x) − c,
//! the loss over the data and the next cycle's activity) is averaged, q̄ = Σ w_i·q_i, with
//! the unconditional standard error
//! se(q̄) = Σ w_i·√(var_i + (q_i − q̄)²)
//! (Burnham & Anderson, "Model Selection and Multimodel Inference", 2nd ed., Springer 2002,
//! §4.3.2, eq. 4.9; recalled from memory), used for the averaged curve and the next cycle's
//! prediction. The crossing of the averaged curve is the averaged forecast.
//!
//! Its interval, and the test of a significant loss, use the model-averaged tail area
//! instead (the MATA construction of Turek & Fletcher, "Model-averaged Wald confidence
//! intervals", Computational Statistics & Data Analysis 56, 2012, 2809–2815; recalled from
//! memory): at each x, each model's own test of "the curve is at the criterion at x" gives a
//! tail probability from Student's t on that model's own n − p_i degrees of freedom, and
//! x leaves the interval where the Akaike-weighted sum of those tail probabilities falls
//! below α/2 (see [`Decision::band`]). The earlier interval — one Student quantile on the
//! smallest degrees of freedom of any member with 5 % of the weight (a four-parameter
//! member at six cycles has 2: t = 2.92), around the standard error above, which adds the
//! between-model spread to every member's variance — covered 94–98 % of a nominal 90 % at
//! 6 and 10 cycles in simulation; the tail-area interval covers 86.9–95.8 % there
//! (tests/fit_averaging.rs, figures in tests/benches/README.md). With a single candidate
//! both constructions are exactly that candidate's own interval
//! ([`super::forecast`](mod@super::forecast)).

use serde::{Deserialize, Serialize};

use super::engine::FitResult;
use super::forecast::{
    Criterion, Decision, FitDecision, bracketed, t_cdf, t_quantile, threshold_of,
};
use super::models::ModelId;

/// One model's share of the average.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelWeight {
    pub model: ModelId,
    pub aicc: f64,
    pub delta_aicc: f64,
    /// Akaike weight, summing to 1 over the averaged models.
    pub weight: f64,
    /// That model's own crossing of the criterion, when it has one ahead.
    pub crossing: Option<f64>,
}

/// Weighted fits whose decision functions average.
pub struct Averaged<'a> {
    pub members: Vec<(f64, FitDecision<'a>)>,
    /// Averaged threshold Σ w_i·c_i.
    pub threshold: f64,
    /// Degrees of freedom for Student t: the smallest among models with weight ≥ 5 %.
    pub dof: usize,
}

/// Akaike weights of `fits` (usable ones only; the others get none). Returns (index into
/// `fits`, weight) pairs, heaviest first.
pub fn akaike_weights(fits: &[&FitResult]) -> Vec<(usize, f64)> {
    let best = fits
        .iter()
        .filter_map(|f| f.aicc)
        .min_by(|a, b| a.total_cmp(b));
    let Some(best) = best else {
        return Vec::new();
    };
    let mut w: Vec<(usize, f64)> = fits
        .iter()
        .enumerate()
        .filter_map(|(i, f)| f.aicc.map(|a| (i, (-(a - best) / 2.0).exp())))
        .collect();
    let sum: f64 = w.iter().map(|e| e.1).sum();
    w.iter_mut().for_each(|e| e.1 /= sum);
    w.sort_by(|a, b| b.1.total_cmp(&a.1));
    w
}

impl<'a> Averaged<'a> {
    /// The average of `fits` (each usable: converged, with AICc and covariance) for
    /// `criterion`. None when no fit qualifies.
    pub fn new(fits: &[&'a FitResult], criterion: Criterion) -> Option<Averaged<'a>> {
        let w = akaike_weights(fits);
        if w.is_empty() {
            return None;
        }
        let mut members = Vec::with_capacity(w.len());
        let mut threshold = 0.0;
        let mut dof = usize::MAX;
        for &(i, wi) in &w {
            let f = fits[i];
            let (c, fraction) = threshold_of(criterion, f.predict(0.0));
            threshold += wi * c;
            if wi >= 0.05 {
                dof = dof.min(f.dof);
            }
            members.push((wi, FitDecision::new(f, c, fraction)));
        }
        Some(Averaged {
            members,
            threshold,
            dof,
        })
    }

    /// With the data the fits were made on: members that can use it test the criterion by
    /// their profile likelihood ([`FitDecision::with_data`]).
    pub fn with_data(mut self, x: &[f64], y: &[f64], w: Option<&[f64]>) -> Self {
        self.members = self
            .members
            .into_iter()
            .map(|(wi, d)| (wi, d.with_data(x, y, w)))
            .collect();
        self
    }

    /// The weights, with each model's own crossing of the criterion after `x_last` (None
    /// when that model's curve does not cross there).
    pub fn weights(&self, x_first: f64, x_last: f64) -> Vec<ModelWeight> {
        let best = self
            .members
            .iter()
            .filter_map(|m| m.1.fit.aicc)
            .fold(f64::INFINITY, f64::min);
        self.members
            .iter()
            .map(|(w, d)| ModelWeight {
                model: d.fit.model,
                aicc: d.fit.aicc.unwrap_or(f64::NAN),
                delta_aicc: d.fit.aicc.map_or(f64::NAN, |a| a - best),
                weight: *w,
                crossing: super::forecast::crossing_after(d, x_first, x_last),
            })
            .collect()
    }

    /// Averaged fitted activity at x with its unconditional standard error and the
    /// averaged residual variance Σ w_i·s_i².
    pub fn predict(&self, x: f64) -> (f64, f64, f64) {
        let vals: Vec<(f64, f64, f64)> = self
            .members
            .iter()
            .map(|(w, d)| {
                let y = member_value(d, x);
                let var = d.fit.mean_variance(x).unwrap_or(f64::NAN);
                (*w, y, var)
            })
            .collect();
        let mean: f64 = vals.iter().map(|v| v.0 * v.1).sum();
        let se: f64 = vals
            .iter()
            .map(|v| v.0 * (v.2 + (v.1 - mean).powi(2)).sqrt())
            .sum();
        let s2: f64 = self
            .members
            .iter()
            .map(|(w, d)| w * d.fit.sigma.map_or(f64::NAN, |s| s * s))
            .sum();
        (mean, se, s2)
    }

    /// Student-t quantile at `confidence` on the average's degrees of freedom.
    pub fn t(&self, confidence: f64) -> Option<f64> {
        t_quantile(confidence, self.dof)
    }
}

/// A member's activity at x; a curve that has ended (power law of order m < 1 past its
/// zero) is at zero there.
fn member_value(d: &FitDecision<'_>, x: f64) -> f64 {
    let y = d.fit.predict(x);
    if y.is_nan() && d.fit.model == ModelId::Power {
        0.0
    } else {
        y
    }
}

impl Decision for Averaged<'_> {
    fn value(&self, x: f64) -> f64 {
        self.members
            .iter()
            .map(|(w, d)| {
                let v = d.value(x);
                if v.is_nan() && d.fit.model == ModelId::Power {
                    w * -d.threshold
                } else {
                    w * v
                }
            })
            .sum()
    }
    fn at(&self, x: f64) -> (f64, f64) {
        let mut buf = [(0.0, 0.0, 0.0); 8];
        let n = self.members.len().min(8);
        let mut mean = 0.0;
        for (k, (w, d)) in self.members.iter().take(n).enumerate() {
            let (mut v, mut sd) = d.at(x);
            if v.is_nan() && d.fit.model == ModelId::Power {
                // Past the end of a curve that reaches zero: at zero, known.
                v = -d.threshold;
                sd = 0.0;
            }
            buf[k] = (*w, v, sd);
            mean += w * v;
        }
        let se = buf[..n]
            .iter()
            .map(|(w, v, sd)| w * (sd * sd + (v - mean).powi(2)).sqrt())
            .sum();
        (mean, se)
    }
    fn loss(&self, a: f64, b: f64) -> (f64, f64) {
        let vals: Vec<(f64, f64, f64)> = self
            .members
            .iter()
            .map(|(w, d)| {
                let (v, sd) = d.loss(a, b);
                (*w, v, sd)
            })
            .collect();
        let mean: f64 = vals.iter().map(|v| v.0 * v.1).sum();
        let se = vals
            .iter()
            .map(|(w, v, sd)| w * (sd * sd + (v - mean).powi(2)).sqrt())
            .sum();
        (mean, se)
    }
    fn slope(&self, x: f64) -> f64 {
        self.members.iter().map(|(w, d)| w * d.slope(x)).sum()
    }
    fn asymptote(&self) -> Option<f64> {
        let mut s = 0.0;
        for (w, d) in &self.members {
            s += w * d.asymptote()?;
        }
        Some(s)
    }
    /// The model-averaged tail area: with z_i = ĥ_i(x)/sd_i(x) and F_ν Student's
    /// distribution function on each model's own n − p_i degrees of freedom,
    /// S(x) = Σ w_i·F_νi(z_i) is the averaged probability that h(x) ≥ 0; x lies before the
    /// crossing with confidence 1 − `tail` when S ≥ 1 − `tail` and after it when
    /// S ≤ `tail`. With one model this is its own band h ∓ t·sd.
    fn band(&self, x: f64, tail: f64) -> (f64, f64) {
        let several = self.members.len() > 1;
        let s = self.tail_area(|d| {
            // Among several models, each on a scale that stays meaningful far beyond the
            // data (see FitDecision::stat); alone, a model keeps its own band.
            let z = if several { d.stat(x) } else { d.root(x) };
            if let Some(r) = z {
                return (r, 1.0);
            }
            let (mut v, mut sd) = d.at(x);
            if v.is_nan() && d.fit.model == ModelId::Power {
                // Past the end of a curve that reaches zero: at zero, known.
                v = -d.threshold;
                sd = 0.0;
            }
            (v, sd)
        });
        (s - (1.0 - tail), s - tail)
    }
    /// The bounds L, U that solve Σ w_i·F_νi((l_i − L)/sd_i) = 1 − `tail` and = `tail`
    /// (model-averaged tail areas, as for [`Decision::band`]), by bisection between the
    /// members' own bounds, which bracket them.
    fn loss_bounds(&self, a: f64, b: f64, tail: f64) -> (f64, f64) {
        let losses: Vec<(f64, f64)> = self.members.iter().map(|(_, d)| d.loss(a, b)).collect();
        let own: Vec<(f64, f64)> = self
            .members
            .iter()
            .map(|(_, d)| d.loss_bounds(a, b, tail))
            .collect();
        if own.iter().any(|o| !(o.0.is_finite() && o.1.is_finite())) {
            return (f64::NAN, f64::NAN);
        }
        let at = |bound: f64| {
            let mut k = 0;
            self.tail_area(|_| {
                let (l, sd) = losses[k];
                k += 1;
                (l - bound, sd)
            })
        };
        let solve = |target: f64, lo: f64, hi: f64| {
            // S(bound) falls as the bound rises: the root of S − target between the members'
            // own bounds (the same false-position search as the interval ends).
            if lo < hi {
                bracketed(|b| at(b) - target, lo, f64::NAN, hi, f64::NAN)
            } else {
                0.5 * (lo + hi)
            }
        };
        let min = |f: fn(&(f64, f64)) -> f64| own.iter().map(f).fold(f64::INFINITY, f64::min);
        let max = |f: fn(&(f64, f64)) -> f64| own.iter().map(f).fold(f64::NEG_INFINITY, f64::max);
        (
            solve(1.0 - tail, min(|o| o.0), max(|o| o.0)),
            solve(tail, min(|o| o.1), max(|o| o.1)),
        )
    }
}

impl Averaged<'_> {
    /// Σ w_i·F_νi(v_i/sd_i) over the members, (v_i, sd_i) from `of`, in member order; a
    /// member known exactly (sd = 0) counts as F = 1 when v ≥ 0 and 0 below. NaN when a
    /// member's (v, sd) is unknown.
    fn tail_area(&self, mut of: impl FnMut(&FitDecision<'_>) -> (f64, f64)) -> f64 {
        let mut s = 0.0;
        for (w, d) in &self.members {
            let (v, sd) = of(d);
            let f = if sd == 0.0 {
                if v >= 0.0 { 1.0 } else { 0.0 }
            } else {
                t_cdf(v / sd, d.fit.dof)
            };
            s += w * f;
        }
        s
    }
}

/// The verdict on the next batch.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum NextVerdict {
    /// The lower prediction bound lies above the criterion.
    Ok,
    /// The prediction is above the criterion but its interval reaches below.
    Marginal,
    /// The predicted activity is below the criterion.
    Below,
}

impl NextVerdict {
    /// The verdict from a prediction, its lower bound and the criterion.
    pub fn of(predicted: f64, lower: f64, threshold: f64) -> NextVerdict {
        if predicted < threshold {
            NextVerdict::Below
        } else if lower > threshold {
            NextVerdict::Ok
        } else {
            NextVerdict::Marginal
        }
    }
    pub fn word(self) -> &'static str {
        match self {
            NextVerdict::Ok => "ok",
            NextVerdict::Marginal => "marginal",
            NextVerdict::Below => "below",
        }
    }
}

/// The next cycle's predicted activity with its prediction interval, against the criterion.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NextCycle {
    pub x: f64,
    pub predicted: f64,
    pub lower: f64,
    pub upper: f64,
    pub threshold: f64,
    pub verdict: NextVerdict,
}

impl NextCycle {
    /// From a prediction with the standard error of the mean `se`, residual variance `s2`
    /// and Student t quantile `t`: interval predicted ± t·√(se² + s2).
    pub fn new(x: f64, predicted: f64, se: f64, s2: f64, t: f64, threshold: f64) -> Option<Self> {
        let half = t * (se * se + s2).sqrt();
        if !(predicted.is_finite() && half.is_finite() && threshold.is_finite()) {
            return None;
        }
        let lower = predicted - half;
        Some(NextCycle {
            x,
            predicted,
            lower,
            upper: predicted + half,
            threshold,
            verdict: NextVerdict::of(predicted, lower, threshold),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn verdicts() {
        assert_eq!(NextVerdict::of(0.8, 0.7, 0.5), NextVerdict::Ok);
        assert_eq!(NextVerdict::of(0.6, 0.45, 0.5), NextVerdict::Marginal);
        assert_eq!(NextVerdict::of(0.49, 0.4, 0.5), NextVerdict::Below);
    }
}
