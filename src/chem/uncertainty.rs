//! Measurement uncertainty of a cycle, carried from the conversion assay to k_app and to
//! activity by first-order propagation (the delta method: Var f(X) ≈ f′(X)²·Var X).

use serde::{Deserialize, Serialize};

/// The standard uncertainty of an instrument's conversion assay, as a profile states it.
///
/// Written in the configuration as `{ absolute = 0.005 }` (σ_X as a fraction: 0.005 is
/// half a percentage point, whatever unit the column is in) or `{ relative = 0.01 }`
/// (σ_X = 1 % of the value read).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase", deny_unknown_fields)]
pub enum AssayUncertainty {
    Absolute(f64),
    Relative(f64),
}

impl AssayUncertainty {
    /// σ_X for a conversion X read by this assay; `None` when not a usable number.
    pub fn sd_at(self, conversion: f64) -> Option<f64> {
        if !(0.0..=1.0).contains(&conversion) {
            return None;
        }
        let sd = match self {
            AssayUncertainty::Absolute(s) => s,
            AssayUncertainty::Relative(r) => r * conversion,
        };
        (sd.is_finite() && sd >= 0.0).then_some(sd)
    }

    /// Why the stated value cannot be used, if it cannot (for the configuration check).
    pub fn problem(self) -> Option<String> {
        match self {
            AssayUncertainty::Absolute(s) if !(s.is_finite() && s > 0.0 && s < 0.5) => {
                Some(format!(
                    "absolute: expected a conversion σ as a fraction above 0 and below 0.5 (e.g. 0.005); found {s}"
                ))
            }
            AssayUncertainty::Relative(r) if !(r.is_finite() && r > 0.0 && r < 1.0) => {
                Some(format!(
                    "relative: expected a fraction of the value above 0 and below 1 (e.g. 0.01); found {r}"
                ))
            }
            _ => None,
        }
    }
}

/// Standard error of k_app = −ln(1 − X)/t from the assay's σ_X, s⁻¹ when t is in s.
///
/// Derivation: dk/dX = 1/((1 − X)·t), so to first order se(k) = σ_X/((1 − X)·t), and
/// dividing by k = −ln(1 − X)/t gives the relative error
/// se(k)/k = σ_X/((1 − X)·|ln(1 − X)|), which grows without bound as X → 1 (for
/// σ_X = 0.005: 1.6 % at X = 0.80, 6.4 % at 0.98, 19 % at 0.995). The time t is taken as
/// exact. Only for an uncensored conversion (0 ≤ X < 1): a saturated cycle's k is a
/// bound, not a measurement with an error.
pub fn rate_constant_se(conversion: f64, duration_s: f64, sd_conversion: f64) -> Option<f64> {
    if !((0.0..1.0).contains(&conversion)
        && duration_s.is_finite()
        && duration_s > 0.0
        && sd_conversion.is_finite()
        && sd_conversion >= 0.0)
    {
        return None;
    }
    let se = sd_conversion / ((1.0 - conversion) * duration_s);
    se.is_finite().then_some(se)
}

/// Relative standard error of a ratio a = u/v of two independent estimates, first order:
/// (se(a)/a)² = (se(u)/u)² + (se(v)/v)² (delta method for a quotient).
pub fn ratio_relative_se(rel_u: f64, rel_v: f64) -> Option<f64> {
    let r = rel_u.hypot(rel_v);
    (r.is_finite() && r >= 0.0).then_some(r)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn relative_error_matches_the_worked_figures() {
        // se(k)/k = σ/((1 − X)|ln(1 − X)|) with σ = 0.005:
        // X = 0.80: 0.005/(0.2 × 1.609438) = 0.015533 (1.6 %);
        // X = 0.98: 0.005/(0.02 × 3.912023) = 0.063906 (6.4 %);
        // X = 0.995: 0.005/(0.005 × 5.298317) = 0.188739 (19 %).
        for (x, want) in [(0.80_f64, 0.015_533), (0.98, 0.063_906), (0.995, 0.188_739)] {
            let t = 3600.0;
            let k = -(-x).ln_1p() / t;
            let rel = rate_constant_se(x, t, 0.005).map(|se| se / k);
            assert!(rel.is_some_and(|r| (r - want).abs() < 5e-6), "{x}: {rel:?}");
        }
    }

    #[test]
    fn bounds_and_bad_input_give_none() {
        assert_eq!(rate_constant_se(1.0, 3600.0, 0.005), None);
        assert_eq!(rate_constant_se(0.5, 0.0, 0.005), None);
        assert_eq!(rate_constant_se(0.5, 3600.0, f64::NAN), None);
        assert_eq!(AssayUncertainty::Relative(0.01).sd_at(0.5), Some(0.005));
        assert_eq!(AssayUncertainty::Absolute(0.005).sd_at(1.5), None);
        assert!(AssayUncertainty::Absolute(0.0).problem().is_some());
        assert!(AssayUncertainty::Relative(0.02).problem().is_none());
    }
}
