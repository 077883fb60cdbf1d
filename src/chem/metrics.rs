//! The metrics of every cycle of one lot, from its facts and the cycles' measurements.

use serde::{Deserialize, Serialize};

use super::elements::molar_mass;
use super::kinetics::{
    DEFAULT_SATURATION, apparent_rate_constant, arrhenius_to_reference, derived_yield,
    metal_lost_g, metal_mol, product_mol, turnover_frequency, turnover_number,
};
use crate::model::{LotRecord, Quantity};

/// What is known about a lot from its registration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotFacts {
    /// Element symbol, e.g. "Pd".
    pub metal: String,
    /// Metal loading, wt % (5.0 = 5 wt %).
    pub loading_wt_pct: f64,
    /// Catalyst mass charged at the first cycle, g.
    pub charged_mass_g: f64,
}

impl From<&LotRecord> for LotFacts {
    fn from(row: &LotRecord) -> LotFacts {
        LotFacts {
            metal: row.metal.clone(),
            loading_wt_pct: row.loading_wt_pct,
            charged_mass_g: row.charged_mass_g,
        }
    }
}

/// One cycle's measurements in canonical units (s, K, mol, g, fraction, µg/g).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct CycleInput {
    pub cycle_no: u32,
    pub duration_s: Option<f64>,
    pub temperature_k: Option<f64>,
    pub substrate_mol: Option<f64>,
    pub catalyst_mass_g: Option<f64>,
    pub metal_charged_mol: Option<f64>,
    pub conversion: Option<f64>,
    pub selectivity: Option<f64>,
    pub yield_fraction: Option<f64>,
    pub product_mass_g: Option<f64>,
    pub metal_in_product_ug_per_g: Option<f64>,
    pub catalyst_recovered_g: Option<f64>,
}

impl CycleInput {
    /// A cycle from (quantity, canonical value) pairs, as the store holds them.
    pub fn from_values(cycle_no: u32, values: impl IntoIterator<Item = (Quantity, f64)>) -> Self {
        let mut c = CycleInput {
            cycle_no,
            ..CycleInput::default()
        };
        for (q, v) in values {
            *c.slot(q) = Some(v);
        }
        c
    }

    fn slot(&mut self, q: Quantity) -> &mut Option<f64> {
        match q {
            Quantity::Duration => &mut self.duration_s,
            Quantity::Temperature => &mut self.temperature_k,
            Quantity::Substrate => &mut self.substrate_mol,
            Quantity::CatalystMass => &mut self.catalyst_mass_g,
            Quantity::MetalCharged => &mut self.metal_charged_mol,
            Quantity::Conversion => &mut self.conversion,
            Quantity::Selectivity => &mut self.selectivity,
            Quantity::Yield => &mut self.yield_fraction,
            Quantity::ProductMass => &mut self.product_mass_g,
            Quantity::MetalInProduct => &mut self.metal_in_product_ug_per_g,
            Quantity::CatalystRecovered => &mut self.catalyst_recovered_g,
        }
    }

    /// The value of one quantity, if measured.
    pub fn get(&self, q: Quantity) -> Option<f64> {
        match q {
            Quantity::Duration => self.duration_s,
            Quantity::Temperature => self.temperature_k,
            Quantity::Substrate => self.substrate_mol,
            Quantity::CatalystMass => self.catalyst_mass_g,
            Quantity::MetalCharged => self.metal_charged_mol,
            Quantity::Conversion => self.conversion,
            Quantity::Selectivity => self.selectivity,
            Quantity::Yield => self.yield_fraction,
            Quantity::ProductMass => self.product_mass_g,
            Quantity::MetalInProduct => self.metal_in_product_ug_per_g,
            Quantity::CatalystRecovered => self.catalyst_recovered_g,
        }
    }
}

/// Settings of the calculation, from the configuration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct ChemOptions {
    /// Conversion from which k_app is only a lower bound (censored).
    pub saturation: f64,
    /// Activation energy, J/mol; when set, rates are normalised to `t_ref_k`.
    pub activation_energy_j_per_mol: Option<f64>,
    /// Reference temperature for the Arrhenius normalisation, K.
    pub t_ref_k: f64,
    /// Quantities a site requires beyond the four every complete cycle needs.
    pub required: Vec<Quantity>,
}

impl Default for ChemOptions {
    fn default() -> Self {
        ChemOptions {
            saturation: DEFAULT_SATURATION,
            activation_energy_j_per_mol: None,
            t_ref_k: 298.15,
            required: Vec::new(),
        }
    }
}

/// Where the catalyst mass charged into a cycle came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ChargeSource {
    /// Weighed into this cycle.
    Measured,
    /// The mass recovered after the previous cycle.
    PreviousRecovered,
    /// The lot's registered charge (cycle 1 only).
    LotCharge,
}

/// Everything computed for one cycle. `None` where not computable, never NaN.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CycleMetrics {
    pub cycle_no: u32,
    /// Catalyst charged, g, and where that figure came from.
    pub catalyst_charged_g: Option<f64>,
    pub charge_source: Option<ChargeSource>,
    /// Metal charged, mol (measured directly, or from mass × loading / M).
    pub metal_mol: Option<f64>,
    pub yield_used: Option<f64>,
    pub yield_derived: bool,
    pub product_mol: Option<f64>,
    pub ton: Option<f64>,
    pub tof_per_h: Option<f64>,
    pub tof_per_s: Option<f64>,
    /// Σ mol product up to this cycle / mol metal charged initially.
    pub cumulative_ton: Option<f64>,
    pub k_app_per_s: Option<f64>,
    pub k_app_per_h: Option<f64>,
    /// k_app is a lower bound (conversion at or above saturation).
    pub censored: bool,
    /// k_app normalised to the reference temperature, s⁻¹ (only when Ea is set).
    pub k_ref_per_s: Option<f64>,
    /// Levenspiel activity relative to cycle 1, per mol of metal charged.
    pub activity: Option<f64>,
    pub metal_lost_g: Option<f64>,
    /// Σ metal lost up to this cycle / metal charged initially.
    pub cumulative_loss_fraction: Option<f64>,
    /// What a complete cycle still lacks; empty when complete.
    pub missing: Vec<Quantity>,
    /// "pending", "censored", "derived-yield", "reference-censored", ...
    pub flags: Vec<String>,
}

/// Compute every cycle's metrics for one lot. Output is in ascending cycle order.
///
/// Catalyst charged in cycle n: the cycle's own catalyst mass if weighed, else the mass
/// recovered after cycle n − 1, else (cycle 1 only) the lot's registered charge. The
/// recovered catalyst is assumed to keep the lot's loading (common practice; leached
/// metal is accounted separately in the loss fraction).
pub fn cycle_metrics(
    lot: &LotFacts,
    cycles: &[CycleInput],
    opts: &ChemOptions,
) -> Vec<CycleMetrics> {
    let mut sorted: Vec<&CycleInput> = cycles.iter().collect();
    sorted.sort_by_key(|c| c.cycle_no);
    let m_metal = molar_mass(&lot.metal);

    let mut out: Vec<CycleMetrics> = Vec::with_capacity(sorted.len());
    for (i, c) in sorted.iter().enumerate() {
        let prev = i
            .checked_sub(1)
            .map(|j| sorted[j])
            .filter(|p| p.cycle_no + 1 == c.cycle_no);
        out.push(one_cycle(lot, c, prev, m_metal, opts));
    }

    // Initial metal: cycle 1 as charged, else the lot's registered charge.
    let initial_mol = out
        .iter()
        .find(|m| m.cycle_no == 1)
        .and_then(|m| m.metal_mol)
        .or_else(|| m_metal.and_then(|mm| metal_mol(lot.charged_mass_g, lot.loading_wt_pct, mm)));
    let reference = out
        .iter()
        .find(|m| m.cycle_no == 1)
        .and_then(|m| specific_rate(m, opts).map(|r| (r, m.censored)));

    // Sums over the cycles known so far; None until at least one term is known.
    let mut product_sum: Option<f64> = None;
    let mut product_gap = false;
    let mut lost_sum: Option<f64> = None;
    let mut lost_gap = false;
    for m in &mut out {
        match m.product_mol {
            Some(p) => product_sum = Some(product_sum.unwrap_or(0.0) + p),
            None => product_gap = true,
        }
        match m.metal_lost_g {
            Some(g) => lost_sum = Some(lost_sum.unwrap_or(0.0) + g),
            None => lost_gap = true,
        }
        if let Some(n0) = initial_mol.filter(|n| *n > 0.0) {
            m.cumulative_ton = product_sum.and_then(|p| finite(p / n0));
            let metal_g = m_metal.map(|mm| n0 * mm);
            m.cumulative_loss_fraction = lost_sum.and_then(|l| metal_g.and_then(|g| finite(l / g)));
        }
        if product_gap {
            m.flags.push("cumulative-ton-partial".into());
        }
        if lost_gap {
            m.flags.push("cumulative-loss-partial".into());
        }
        match reference {
            Some((r1, ref_censored)) if r1 > 0.0 => {
                m.activity = specific_rate(m, opts).and_then(|r| finite(r / r1));
                if ref_censored && m.activity.is_some() && m.cycle_no != 1 {
                    // k of cycle 1 is a lower bound, so this ratio is an upper bound.
                    m.flags.push("reference-censored".into());
                }
            }
            _ => m.flags.push("no-reference".into()),
        }
    }
    out
}

/// k per mol of metal charged, normalised to T_ref when Ea is configured.
fn specific_rate(m: &CycleMetrics, opts: &ChemOptions) -> Option<f64> {
    let k = if opts.activation_energy_j_per_mol.is_some() {
        m.k_ref_per_s?
    } else {
        m.k_app_per_s?
    };
    let n = m.metal_mol.filter(|n| *n > 0.0)?;
    finite(k / n)
}

fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

fn sanitized(c: &CycleInput, flags: &mut Vec<String>) -> CycleInput {
    let mut clean = CycleInput {
        cycle_no: c.cycle_no,
        ..CycleInput::default()
    };
    for q in Quantity::ALL {
        match c.get(q) {
            Some(v) if v.is_finite() => *clean.slot(q) = Some(v),
            Some(_) => flags.push(format!("invalid-{}", q.key())),
            None => {}
        }
    }
    clean
}

fn one_cycle(
    lot: &LotFacts,
    c: &CycleInput,
    prev: Option<&CycleInput>,
    m_metal: Option<f64>,
    opts: &ChemOptions,
) -> CycleMetrics {
    let mut flags: Vec<String> = Vec::new();
    // A non-finite value is treated as not measured, and said so.
    let c = &sanitized(c, &mut flags);
    let mass = |g: Option<f64>| g.filter(|g| g.is_finite() && *g > 0.0);
    let (catalyst_charged_g, charge_source) = if let Some(g) = mass(c.catalyst_mass_g) {
        (Some(g), Some(ChargeSource::Measured))
    } else if let Some(g) = mass(prev.and_then(|p| p.catalyst_recovered_g)) {
        (Some(g), Some(ChargeSource::PreviousRecovered))
    } else if let Some(g) = mass(Some(lot.charged_mass_g)).filter(|_| c.cycle_no == 1) {
        (Some(g), Some(ChargeSource::LotCharge))
    } else {
        (None, None)
    };
    let metal = if let Some(n) = c.metal_charged_mol.filter(|n| n.is_finite() && *n > 0.0) {
        flags.push("metal-measured".into());
        Some(n)
    } else {
        match (catalyst_charged_g, m_metal) {
            (Some(g), Some(mm)) => metal_mol(g, lot.loading_wt_pct, mm),
            (Some(_), None) => {
                flags.push("unknown-metal".into());
                None
            }
            _ => None,
        }
    };

    let (yield_used, yield_derived) = match (c.yield_fraction, c.conversion, c.selectivity) {
        (Some(y), _, _) => (Some(y).filter(|y| (0.0..=1.0).contains(y)), false),
        (None, Some(x), Some(s)) => (derived_yield(x, s), true),
        _ => (None, false),
    };
    if yield_derived && yield_used.is_some() {
        flags.push("derived-yield".into());
    }
    let product = match (c.substrate_mol, yield_used) {
        (Some(n), Some(y)) => product_mol(n, y),
        _ => None,
    };
    let ton = match (product, metal) {
        (Some(p), Some(n)) => turnover_number(p, n),
        _ => None,
    };
    let tof = match (ton, c.duration_s) {
        (Some(t), Some(d)) => turnover_frequency(t, d),
        _ => None,
    };
    let k = match (c.conversion, c.duration_s) {
        (Some(x), Some(d)) => apparent_rate_constant(x, d, opts.saturation),
        _ => None,
    };
    let censored = k.is_some_and(|k| k.censored);
    if censored {
        flags.push("censored".into());
    }
    let k_ref = match (k, opts.activation_energy_j_per_mol, c.temperature_k) {
        (Some(k), Some(ea), Some(t)) => arrhenius_to_reference(k.per_s, t, opts.t_ref_k, ea),
        _ => None,
    };
    let lost = match (c.metal_in_product_ug_per_g, c.product_mass_g) {
        (Some(ug), Some(g)) => metal_lost_g(ug, g),
        _ => None,
    };

    let mut missing: Vec<Quantity> = Vec::new();
    for q in [
        Quantity::Substrate,
        Quantity::Conversion,
        Quantity::Duration,
    ] {
        if c.get(q).is_none() {
            missing.push(q);
        }
    }
    if metal.is_none() && c.metal_charged_mol.is_none() && catalyst_charged_g.is_none() {
        missing.push(Quantity::CatalystMass);
    }
    if opts.activation_energy_j_per_mol.is_some() && c.temperature_k.is_none() {
        missing.push(Quantity::Temperature);
    }
    for q in &opts.required {
        let have = c.get(*q).is_some() || (*q == Quantity::Yield && yield_used.is_some());
        if !have {
            missing.push(*q);
        }
    }
    missing.sort();
    missing.dedup();
    if !missing.is_empty() {
        flags.push("pending".into());
    }

    CycleMetrics {
        cycle_no: c.cycle_no,
        catalyst_charged_g,
        charge_source,
        metal_mol: metal,
        yield_used,
        yield_derived: yield_derived && yield_used.is_some(),
        product_mol: product,
        ton,
        tof_per_h: tof.map(|t| t.per_h),
        tof_per_s: tof.map(|t| t.per_s),
        cumulative_ton: None,
        k_app_per_s: k.map(|k| k.per_s),
        k_app_per_h: k.and_then(|k| finite(k.per_s * 3600.0)),
        censored,
        k_ref_per_s: k_ref,
        activity: None,
        metal_lost_g: lost,
        cumulative_loss_fraction: None,
        missing,
        flags,
    }
}
