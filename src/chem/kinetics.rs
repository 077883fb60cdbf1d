//! Per-batch formulas: metal charged, yield, TON, TOF, k_app, Arrhenius, leaching.
//!
//! Every function returns `None` instead of a non-finite number or a value outside the
//! formula's domain, so NaN never reaches the database or a report.

use serde::Serialize;

/// Molar gas constant R, J mol⁻¹ K⁻¹ (CODATA 2018; exact in the 2019 SI, R = N_A·k).
pub const GAS_CONSTANT: f64 = 8.314_462_618;

/// Conversion at and above which a batch says little about activity (common practice
/// value; configurable).
pub const DEFAULT_SATURATION: f64 = 0.995;

fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

fn positive(x: f64) -> bool {
    x.is_finite() && x > 0.0
}

fn fraction(x: f64) -> bool {
    (0.0..=1.0).contains(&x)
}

/// mol of metal = catalyst mass × loading / 100 / molar mass.
pub fn metal_mol(catalyst_mass_g: f64, loading_wt_pct: f64, molar_mass: f64) -> Option<f64> {
    if !(positive(catalyst_mass_g) && positive(loading_wt_pct) && positive(molar_mass)) {
        return None;
    }
    if loading_wt_pct > 100.0 {
        return None;
    }
    finite(catalyst_mass_g * loading_wt_pct / 100.0 / molar_mass)
}

/// Dry catalyst mass from a mass weighed wet: m_dry = m × (1 − w/100), w the water
/// content in wt %. Precious metals on carbon are commonly charged as water-wet paste with
/// the loading stated on a dry basis (common practice), so the metal is the dry mass ×
/// loading / M, never the wet mass × loading. `None` for w outside 0 ≤ w < 100.
pub fn dry_mass_g(weighed_g: f64, water_wt_pct: Option<f64>) -> Option<f64> {
    let Some(w) = water_wt_pct else {
        return positive(weighed_g).then_some(weighed_g);
    };
    if !(positive(weighed_g) && w.is_finite() && (0.0..100.0).contains(&w)) {
        return None;
    }
    finite(weighed_g * (1.0 - w / 100.0)).filter(|m| *m > 0.0)
}

/// Yield from conversion and selectivity, for batches where yield is not measured.
pub fn derived_yield(conversion: f64, selectivity: f64) -> Option<f64> {
    (fraction(conversion) && fraction(selectivity)).then_some(conversion * selectivity)
}

/// mol product = mol limiting substrate × yield.
pub fn product_mol(substrate_mol: f64, yield_fraction: f64) -> Option<f64> {
    (positive(substrate_mol) && fraction(yield_fraction))
        .then_some(substrate_mol * yield_fraction)
        .and_then(finite)
}

/// Turnover number: mol product per mol of metal (IUPAC Gold Book, "turnover number").
pub fn turnover_number(product_mol: f64, metal_mol: f64) -> Option<f64> {
    if !(product_mol.is_finite() && product_mol >= 0.0 && positive(metal_mol)) {
        return None;
    }
    finite(product_mol / metal_mol)
}

/// Turnover frequency in both units chemists quote.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Tof {
    pub per_h: f64,
    pub per_s: f64,
}

/// TOF = TON / reaction time (IUPAC Gold Book, "turnover frequency").
pub fn turnover_frequency(ton: f64, duration_s: f64) -> Option<Tof> {
    if !(ton.is_finite() && ton >= 0.0 && positive(duration_s)) {
        return None;
    }
    Some(Tof {
        per_h: finite(ton / (duration_s / 3600.0))?,
        per_s: finite(ton / duration_s)?,
    })
}

/// Initial turnover frequency of a batch first order in the limiting substrate:
/// TOF₀ = k_app·n_S/n_M, the rate at t = 0 (k_app·n_S, mol s⁻¹) per mol of metal.
///
/// Unlike TON/t over the whole batch (the average TOF), which stalls once a batch runs to
/// completion, TOF₀ follows the catalyst's activity. The two are different quantities and
/// are reported under different names (Kozuch & Martin, ACS Catal. 2012, 2, 2787, on TOF
/// definitions; reference recalled from memory). With k_app from a censored cycle TOF₀ is
/// a lower bound.
pub fn initial_turnover_frequency(k_per_s: f64, substrate_mol: f64, metal_mol: f64) -> Option<Tof> {
    if !(k_per_s.is_finite() && k_per_s >= 0.0 && positive(substrate_mol) && positive(metal_mol)) {
        return None;
    }
    let per_s = finite(k_per_s * substrate_mol / metal_mol)?;
    Some(Tof {
        per_h: finite(per_s * 3600.0)?,
        per_s,
    })
}

/// An apparent rate constant and whether it is only a lower bound.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct RateConstant {
    /// s⁻¹.
    pub per_s: f64,
    /// True when the conversion reached the saturation limit: the value is k at
    /// X = saturation, a lower bound on the true constant, never an exact value.
    pub censored: bool,
}

/// k_app = −ln(1 − X)/t, first order in the limiting substrate (integrated first-order
/// rate law). X ≥ `saturation` gives the lower bound at X = saturation, flagged censored.
pub fn apparent_rate_constant(
    conversion: f64,
    duration_s: f64,
    saturation: f64,
) -> Option<RateConstant> {
    if !(fraction(conversion) && positive(duration_s)) {
        return None;
    }
    if !(saturation > 0.0 && saturation < 1.0) {
        return None;
    }
    let censored = conversion >= saturation;
    let x = if censored { saturation } else { conversion };
    // ln_1p keeps precision for small conversions.
    let k = -(-x).ln_1p() / duration_s;
    Some(RateConstant {
        per_s: finite(k)?,
        censored,
    })
}

/// k(T_ref) = k(T)·exp[(Ea/R)(1/T − 1/T_ref)] (Arrhenius equation, IUPAC Gold Book),
/// temperatures in kelvin, Ea in J/mol.
pub fn arrhenius_to_reference(k: f64, t_k: f64, t_ref_k: f64, ea_j_per_mol: f64) -> Option<f64> {
    if !(k.is_finite()
        && k >= 0.0
        && positive(t_k)
        && positive(t_ref_k)
        && ea_j_per_mol.is_finite())
    {
        return None;
    }
    let exponent = ea_j_per_mol / GAS_CONSTANT * (1.0 / t_k - 1.0 / t_ref_k);
    finite(k * exponent.exp())
}

/// Metal lost with the product, grams: µg/g × product mass g × 10⁻⁶ g/µg.
pub fn metal_lost_g(metal_in_product_ug_per_g: f64, product_mass_g: f64) -> Option<f64> {
    if !(metal_in_product_ug_per_g.is_finite()
        && metal_in_product_ug_per_g >= 0.0
        && positive(product_mass_g))
    {
        return None;
    }
    finite(metal_in_product_ug_per_g * product_mass_g * 1e-6)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn domain_errors_are_none_not_nan() {
        assert_eq!(metal_mol(-1.0, 5.0, 106.42), None);
        assert_eq!(metal_mol(1.0, 0.0, 106.42), None);
        assert_eq!(metal_mol(1.0, 101.0, 106.42), None);
        assert_eq!(metal_mol(f64::NAN, 5.0, 106.42), None);
        assert_eq!(turnover_number(1.0, 0.0), None);
        assert_eq!(turnover_frequency(1.0, 0.0), None);
        assert_eq!(apparent_rate_constant(1.2, 3600.0, 0.995), None);
        assert_eq!(apparent_rate_constant(0.5, 3600.0, 1.0), None);
        assert_eq!(arrhenius_to_reference(1.0, 0.0, 298.15, 5e4), None);
        assert_eq!(arrhenius_to_reference(1.0, 1e-300, 298.15, 5e4), None);
        assert_eq!(metal_lost_g(-1.0, 10.0), None);
        assert_eq!(derived_yield(0.5, 1.5), None);
        assert_eq!(product_mol(0.0, 0.5), None);
        assert_eq!(dry_mass_g(10.0, Some(100.0)), None);
        assert_eq!(dry_mass_g(10.0, Some(-1.0)), None);
        assert_eq!(dry_mass_g(10.0, None), Some(10.0));
        assert_eq!(initial_turnover_frequency(1e-3, 0.1, 0.0), None);
    }

    #[test]
    fn zero_conversion_is_zero_rate_not_censored() {
        assert_eq!(
            apparent_rate_constant(0.0, 60.0, 0.995),
            Some(RateConstant {
                per_s: 0.0,
                censored: false
            })
        );
    }
}
