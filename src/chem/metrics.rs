//! The metrics of every cycle of one lot, from its facts and the cycles' measurements.

use serde::{Deserialize, Serialize};

use super::elements::molar_mass;
use super::kinetics::{
    DEFAULT_SATURATION, apparent_rate_constant, arrhenius_to_reference, derived_yield, dry_mass_g,
    initial_turnover_frequency, metal_lost_g, metal_mol, product_mol, turnover_frequency,
    turnover_number,
};
use super::uncertainty::{rate_constant_se, ratio_relative_se};
use crate::model::{LotRecord, Quantity};

/// What is known about a lot from its registration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotFacts {
    /// Element symbol, e.g. "Pd".
    pub metal: String,
    /// Metal loading, wt % (5.0 = 5 wt %).
    pub loading_wt_pct: f64,
    /// Catalyst mass charged at the first cycle, g, as weighed.
    pub charged_mass_g: f64,
    /// Water content of the catalyst as charged, wt % (0 ≤ w < 100), for catalysts
    /// charged water-wet; `None` when charged dry.
    #[serde(default)]
    pub water_content_wt_pct: Option<f64>,
}

impl From<&LotRecord> for LotFacts {
    fn from(row: &LotRecord) -> LotFacts {
        LotFacts {
            metal: row.metal.clone(),
            loading_wt_pct: row.loading_wt_pct,
            charged_mass_g: row.charged_mass_g,
            water_content_wt_pct: row.water_content_wt_pct,
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
    /// Standard uncertainty σ_X of the conversion, as a fraction (from the assay's
    /// profile); `None` when not stated.
    #[serde(default)]
    pub conversion_sd: Option<f64>,
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
    /// What the rates of two cycles are compared per (see [`ActivityBasis`]).
    pub activity_basis: ActivityBasis,
    /// A cycle whose catalyst-to-substrate ratio differs from the lot's usual one (the
    /// median of its complete cycles) by more than this fraction is flagged
    /// `ratio-off-usual`.
    pub ratio_tolerance: f64,
}

/// Default of [`ChemOptions::ratio_tolerance`]: 0.25, a common practice placeholder (a
/// recipe change of a quarter is one a chemist would name), not a value from a source.
pub const DEFAULT_RATIO_TOLERANCE: f64 = 0.25;

impl Default for ChemOptions {
    fn default() -> Self {
        ChemOptions {
            saturation: DEFAULT_SATURATION,
            activation_energy_j_per_mol: None,
            t_ref_k: 298.15,
            required: Vec::new(),
            activity_basis: ActivityBasis::default(),
            ratio_tolerance: DEFAULT_RATIO_TOLERANCE,
        }
    }
}

/// What activity compares: the rate of a cycle per what amount of catalyst.
///
/// Activity is Levenspiel's ratio a = rate with the used catalyst / rate with the fresh
/// catalyst under the same conditions (Levenspiel, Chemical Reaction Engineering, the
/// chapter on deactivating catalysts; recalled from memory). For a batch first order in the limiting substrate, k_app is
/// proportional to the catalyst's concentration, not to its amount: the same recipe run at
/// twice the scale (twice substrate, catalyst and solvent) has the same k_app with twice
/// the metal. So rates are compared per catalyst-to-substrate ratio by default.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ActivityBasis {
    /// k_app per catalyst-to-substrate ratio: k_app / (n_metal / n_substrate) =
    /// k_app·n_substrate/n_metal (equal to the initial TOF). Scale-free at constant
    /// substrate concentration.
    #[default]
    CatalystRatio,
    /// k_app per mol of metal charged: k_app / n_metal. Depends on the batch's scale.
    MetalCharged,
}

impl ActivityBasis {
    /// The configuration's name of the basis.
    pub fn key(self) -> &'static str {
        match self {
            ActivityBasis::CatalystRatio => "catalyst-ratio",
            ActivityBasis::MetalCharged => "metal-charged",
        }
    }

    /// The definition in words, as tables and reports state it.
    pub fn definition(self) -> &'static str {
        match self {
            ActivityBasis::CatalystRatio => {
                "k_app per catalyst-to-substrate ratio (k_app × mol limiting substrate / mol \
                 metal charged), relative to the reference cycle"
            }
            ActivityBasis::MetalCharged => {
                "k_app per mol of metal charged, relative to the reference cycle (depends on \
                 the batch's scale)"
            }
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
    /// Metal charged (nominal), mol: measured directly, or the dry catalyst mass ×
    /// loading / M.
    pub metal_mol: Option<f64>,
    /// Metal available to this cycle, mol: the nominal metal less the metal measured in
    /// the products of the earlier cycles (see [`lot_metrics`]).
    pub metal_available_mol: Option<f64>,
    /// Catalyst-to-substrate ratio, mol metal charged / mol limiting substrate.
    pub catalyst_ratio: Option<f64>,
    pub yield_used: Option<f64>,
    pub yield_derived: bool,
    pub product_mol: Option<f64>,
    /// TON per mol of metal charged (nominal).
    pub ton: Option<f64>,
    /// TON per mol of metal available to the cycle.
    pub ton_available: Option<f64>,
    /// Average TOF: TON over the whole reaction time.
    pub tof_per_h: Option<f64>,
    pub tof_per_s: Option<f64>,
    /// Initial TOF: k_app·n_substrate/n_metal (first-order batch); a lower bound when the
    /// cycle is censored.
    pub initial_tof_per_h: Option<f64>,
    pub initial_tof_per_s: Option<f64>,
    /// Σ mol product up to this cycle / mol metal charged initially.
    pub cumulative_ton: Option<f64>,
    pub k_app_per_s: Option<f64>,
    pub k_app_per_h: Option<f64>,
    /// Standard error of k_app propagated from the conversion assay's σ, h⁻¹.
    pub k_app_se_per_h: Option<f64>,
    /// k_app is a lower bound (conversion at or above saturation).
    pub censored: bool,
    /// k_app normalised to the reference temperature, s⁻¹ (only when Ea is set).
    pub k_ref_per_s: Option<f64>,
    /// Levenspiel activity relative to the reference cycle, on the configured
    /// [`ActivityBasis`]; a lower bound when the cycle is censored.
    pub activity: Option<f64>,
    /// Standard error of `activity`, first order, the reference cycle's error included
    /// (0 for the reference cycle itself, whose activity is 1 by definition).
    pub activity_se: Option<f64>,
    /// The part of `activity`'s standard error that is this cycle's own: its k_app's
    /// relative error × activity. The reference's error is a factor common to every
    /// cycle (a fitted a0 absorbs it), so a fit that treats cycles as independent is
    /// weighted by this part.
    pub activity_sd_own: Option<f64>,
    pub metal_lost_g: Option<f64>,
    /// Σ metal lost up to this cycle / metal charged initially.
    pub cumulative_loss_fraction: Option<f64>,
    /// What a complete cycle still lacks; empty when complete.
    pub missing: Vec<Quantity>,
    /// "pending", "censored", "derived-yield", "reference-censored", "ratio-off-usual",
    /// "initial-tof-lower-bound", "reference-first-uncensored", ...
    pub flags: Vec<String>,
}

/// A lot's metrics: every cycle's, and what activity was made relative to.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LotMetrics {
    /// In ascending cycle order.
    pub cycles: Vec<CycleMetrics>,
    /// What activity compares.
    pub basis: ActivityBasis,
    /// The cycle whose rate is activity 1: cycle 1, or the first uncensored cycle when
    /// cycle 1 is censored; `None` when no cycle can serve.
    pub reference_cycle: Option<u32>,
    /// True when cycle 1 is censored and a later, uncensored cycle is the reference.
    pub reference_moved: bool,
    /// The lot's usual catalyst-to-substrate ratio: the median over its complete cycles.
    pub usual_ratio: Option<f64>,
}

/// Compute every cycle's metrics for one lot. Output is in ascending cycle order. See
/// [`lot_metrics`].
pub fn cycle_metrics(
    lot: &LotFacts,
    cycles: &[CycleInput],
    opts: &ChemOptions,
) -> Vec<CycleMetrics> {
    lot_metrics(lot, cycles, opts).cycles
}

/// Compute every cycle's metrics for one lot, and the reference of its activities.
///
/// Catalyst charged in cycle n: the cycle's own catalyst mass if weighed, else the mass
/// recovered after cycle n − 1, else (cycle 1 only) the lot's registered charge. Masses
/// are taken as weighed in the state the lot was registered in: with a water content w,
/// every catalyst mass of the lot counts as m × (1 − w/100) dry (an assumption: record the
/// metal charged directly where a recovered catalyst is weighed otherwise). The metal
/// charged (nominal) is the dry mass × loading / M, the recovered catalyst assumed to keep
/// the lot's loading (common practice).
///
/// Metal inventory: the metal available to cycle n is its nominal metal less the metal
/// measured in the products of cycles 1..n−1 (µg/g × product mass); a cycle whose metal
/// was measured directly takes that measurement as available. TON per mol available is
/// given beside TON per mol charged. An earlier cycle without a leaching figure makes the
/// figure partial (flag `metal-available-partial`).
///
/// Activity: the rate on [`ChemOptions::activity_basis`] over that of the reference
/// cycle. The reference is cycle 1 (the fresh catalyst); when cycle 1 is censored its
/// k_app is only a lower bound, so the first uncensored cycle is the reference instead
/// (flag `reference-first-uncensored` on every activity made relative to it). A censored
/// cycle's activity is the bound at conversion = saturation: a lower bound.
pub fn lot_metrics(lot: &LotFacts, cycles: &[CycleInput], opts: &ChemOptions) -> LotMetrics {
    let mut sorted: Vec<&CycleInput> = cycles.iter().collect();
    sorted.sort_by_key(|c| c.cycle_no);
    let mut scan = BasisScan::new(lot, opts);
    for c in &sorted {
        scan.add(c);
    }
    let basis = scan.finish();
    let (reference_cycle, reference_moved, usual_ratio) = (
        basis.reference_cycle(),
        basis.reference_moved(),
        basis.usual_ratio,
    );
    let mut pass = MetricsPass::new(lot, opts, basis);
    let out = sorted.iter().map(|c| pass.next(c)).collect();
    LotMetrics {
        cycles: out,
        basis: opts.activity_basis,
        reference_cycle,
        reference_moved,
        usual_ratio,
    }
}

/// What every cycle's metrics rest on, found by a first pass over the lot's cycles in
/// ascending order ([`BasisScan`]): the initial metal, the activity reference and the
/// usual catalyst-to-substrate ratio. [`lot_metrics`] and a lot streamed from the store
/// in two passes share it, so both give the same figures.
#[derive(Debug, Clone)]
pub struct LotBasis {
    /// Cycle 1 as charged, else the lot's registered charge (dry basis), mol.
    initial_mol: Option<f64>,
    reference: Option<Reference>,
    /// The median catalyst-to-substrate ratio over the complete cycles.
    pub usual_ratio: Option<f64>,
}

impl LotBasis {
    /// The cycle whose rate is activity 1, when one can serve.
    pub fn reference_cycle(&self) -> Option<u32> {
        self.reference.as_ref().map(|r| r.cycle_no)
    }

    /// True when cycle 1 is censored and a later cycle is the reference.
    pub fn reference_moved(&self) -> bool {
        self.reference.as_ref().is_some_and(|r| r.moved)
    }
}

/// The first pass of [`lot_metrics`]: each cycle's own figures, kept only as far as the
/// reference, the initial metal and the usual ratio need them.
pub struct BasisScan<'a> {
    lot: &'a LotFacts,
    opts: &'a ChemOptions,
    m_metal: Option<f64>,
    prev: Option<CycleInput>,
    /// The first cycle numbered 1: its metal, and its rate as a reference.
    first: Option<(Option<f64>, Option<Reference>)>,
    /// The first later uncensored cycle with a usable rate.
    later: Option<Reference>,
    ratios: Vec<f64>,
}

impl<'a> BasisScan<'a> {
    pub fn new(lot: &'a LotFacts, opts: &'a ChemOptions) -> Self {
        BasisScan {
            lot,
            opts,
            m_metal: molar_mass(&lot.metal),
            prev: None,
            first: None,
            later: None,
            ratios: Vec::new(),
        }
    }

    /// The next cycle, in ascending cycle order.
    pub fn add(&mut self, c: &CycleInput) {
        let prev = self.prev.as_ref().filter(|p| p.cycle_no + 1 == c.cycle_no);
        let m = one_cycle(self.lot, c, prev, self.m_metal, self.opts);
        let usable = specific_rate(&m, self.opts).filter(|r| *r > 0.0);
        let as_reference = |rate: f64, moved: bool| Reference {
            cycle_no: m.cycle_no,
            rate,
            rel_se: relative_se(&m),
            censored: m.censored,
            moved,
        };
        if m.cycle_no == 1 && self.first.is_none() {
            self.first = Some((m.metal_mol, usable.map(|r| as_reference(r, false))));
        } else if m.cycle_no > 1 && !m.censored && self.later.is_none() {
            self.later = usable.map(|r| as_reference(r, true));
        }
        if m.missing.is_empty()
            && let Some(r) = m.catalyst_ratio
        {
            self.ratios.push(r);
        }
        self.prev = Some(c.clone());
    }

    /// Cycle 1 when its rate is exact; the first uncensored cycle with a positive rate
    /// when cycle 1 is censored; cycle 1's bound when no cycle is uncensored (flagged
    /// `reference-censored`: every ratio to it is then an upper bound).
    pub fn finish(self) -> LotBasis {
        let (first_metal, first_ref) = self.first.unwrap_or((None, None));
        let initial_mol = first_metal.or_else(|| {
            let dry = dry_mass_g(self.lot.charged_mass_g, self.lot.water_content_wt_pct)?;
            metal_mol(dry, self.lot.loading_wt_pct, self.m_metal?)
        });
        let reference = first_ref.map(|r1| match self.later {
            Some(later) if r1.censored => later,
            _ => r1,
        });
        LotBasis {
            initial_mol,
            reference,
            usual_ratio: median(self.ratios),
        }
    }
}

/// The second pass of [`lot_metrics`]: every cycle's metrics, in ascending cycle order,
/// with the sums over the cycles before it (cumulative TON, metal lost) and its activity
/// against the reference of the [`LotBasis`].
pub struct MetricsPass<'a> {
    lot: &'a LotFacts,
    opts: &'a ChemOptions,
    basis: LotBasis,
    m_metal: Option<f64>,
    prev: Option<CycleInput>,
    /// Sums over the cycles known so far; None until at least one term is known.
    product_sum: Option<f64>,
    product_gap: bool,
    lost_sum: Option<f64>,
    lost_gap: bool,
    /// Metal lost before the cycle at hand, mol, and whether an earlier figure is missing.
    lost_before_mol: f64,
    lost_before_gap: bool,
    expected_no: u32,
}

impl<'a> MetricsPass<'a> {
    pub fn new(lot: &'a LotFacts, opts: &'a ChemOptions, basis: LotBasis) -> Self {
        MetricsPass {
            lot,
            opts,
            basis,
            m_metal: molar_mass(&lot.metal),
            prev: None,
            product_sum: None,
            product_gap: false,
            lost_sum: None,
            lost_gap: false,
            lost_before_mol: 0.0,
            lost_before_gap: false,
            expected_no: 1,
        }
    }

    /// The metrics of the next cycle, in ascending cycle order.
    pub fn next(&mut self, input: &CycleInput) -> CycleMetrics {
        let prev = self
            .prev
            .as_ref()
            .filter(|p| p.cycle_no + 1 == input.cycle_no);
        let mut m = one_cycle(self.lot, input, prev, self.m_metal, self.opts);
        self.prev = Some(input.clone());
        if m.cycle_no != self.expected_no {
            // Earlier cycles are not recorded (yet): their leaching is unknown.
            self.lost_before_gap = true;
        }
        self.expected_no = m.cycle_no.saturating_add(1);
        inventory(&mut m, input, self.lost_before_mol, self.lost_before_gap);
        match (m.metal_lost_g, self.m_metal) {
            (Some(g), Some(mm)) => self.lost_before_mol += g / mm,
            _ => self.lost_before_gap = true,
        }
        match m.product_mol {
            Some(p) => self.product_sum = Some(self.product_sum.unwrap_or(0.0) + p),
            None => self.product_gap = true,
        }
        match m.metal_lost_g {
            Some(g) => self.lost_sum = Some(self.lost_sum.unwrap_or(0.0) + g),
            None => self.lost_gap = true,
        }
        if let Some(n0) = self.basis.initial_mol.filter(|n| *n > 0.0) {
            m.cumulative_ton = self.product_sum.and_then(|p| finite(p / n0));
            let metal_g = self.m_metal.map(|mm| n0 * mm);
            m.cumulative_loss_fraction = self
                .lost_sum
                .and_then(|l| metal_g.and_then(|g| finite(l / g)));
        }
        if self.product_gap {
            m.flags.push("cumulative-ton-partial".into());
        }
        if self.lost_gap {
            m.flags.push("cumulative-loss-partial".into());
        }
        relative_activity(&mut m, self.basis.reference.as_ref(), self.opts);
        let tolerance = self.opts.ratio_tolerance;
        if let Some(usual) = self.basis.usual_ratio.filter(|u| *u > 0.0)
            && tolerance.is_finite()
            && tolerance > 0.0
            && m.catalyst_ratio
                .is_some_and(|r| (r / usual - 1.0).abs() > tolerance)
        {
            m.flags.push("ratio-off-usual".into());
        }
        m
    }
}

/// The rate activity is made relative to.
#[derive(Debug, Clone)]
struct Reference {
    cycle_no: u32,
    /// Its specific rate on the configured basis.
    rate: f64,
    /// Its k_app's relative standard error, when the assay's σ is known.
    rel_se: Option<f64>,
    censored: bool,
    /// A later cycle stands in for a censored cycle 1.
    moved: bool,
}

/// se(k_app)/k_app of a cycle, when known and k_app > 0.
fn relative_se(m: &CycleMetrics) -> Option<f64> {
    let k = m.k_app_per_h.filter(|k| *k > 0.0)?;
    finite(m.k_app_se_per_h? / k)
}

/// Fill a cycle's activity and its standard errors from the reference.
///
/// a = s/s_ref with s the specific rate; to first order (delta method for a quotient of
/// independent estimates), (se(a)/a)² = (se(k)/k)² + (se(k_ref)/k_ref)², since the other
/// factors of s (mol substrate, mol metal, the Arrhenius factor) are taken as exact.
fn relative_activity(m: &mut CycleMetrics, reference: Option<&Reference>, opts: &ChemOptions) {
    let Some(r) = reference else {
        m.flags.push("no-reference".into());
        return;
    };
    m.activity = specific_rate(m, opts).and_then(|s| finite(s / r.rate));
    let Some(a) = m.activity else { return };
    if m.cycle_no != r.cycle_no {
        if r.censored {
            // The reference's k is a lower bound, so this ratio is an upper bound.
            m.flags.push("reference-censored".into());
        }
        if r.moved {
            m.flags.push("reference-first-uncensored".into());
        }
    }
    if m.censored || r.censored {
        return;
    }
    let (Some(own), Some(rel_ref)) = (relative_se(m), r.rel_se) else {
        return;
    };
    m.activity_sd_own = finite(a * own);
    m.activity_se = if m.cycle_no == r.cycle_no {
        // a ≡ 1: the cycle's error cancels in its ratio to itself.
        Some(0.0)
    } else {
        ratio_relative_se(own, rel_ref).and_then(|rel| finite(a * rel))
    };
}

/// Metal available to the cycle and TON per mol of it.
fn inventory(m: &mut CycleMetrics, input: &CycleInput, lost_before_mol: f64, gap: bool) {
    let measured = input
        .metal_charged_mol
        .is_some_and(|n| n.is_finite() && n > 0.0);
    let available = if measured {
        m.metal_mol
    } else {
        m.metal_mol.map(|n| n - lost_before_mol)
    };
    m.metal_available_mol = available.filter(|n| n.is_finite() && *n > 0.0);
    if m.metal_mol.is_some() && m.metal_available_mol.is_none() {
        m.flags.push("metal-available-invalid".into());
    }
    if gap && !measured && m.metal_available_mol.is_some() {
        m.flags.push("metal-available-partial".into());
    }
    m.ton_available = match (m.product_mol, m.metal_available_mol) {
        (Some(p), Some(n)) => turnover_number(p, n),
        _ => None,
    };
}

/// The median of finite values; `None` for none.
fn median(mut v: Vec<f64>) -> Option<f64> {
    v.retain(|x| x.is_finite());
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    Some(if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    })
}

/// The rate a cycle is compared by, on the configured basis: k (normalised to T_ref when
/// Ea is configured) per catalyst-to-substrate ratio, or per mol of metal charged.
fn specific_rate(m: &CycleMetrics, opts: &ChemOptions) -> Option<f64> {
    let k = if opts.activation_energy_j_per_mol.is_some() {
        m.k_ref_per_s?
    } else {
        m.k_app_per_s?
    };
    match opts.activity_basis {
        ActivityBasis::CatalystRatio => finite(k / m.catalyst_ratio.filter(|r| *r > 0.0)?),
        ActivityBasis::MetalCharged => finite(k / m.metal_mol.filter(|n| *n > 0.0)?),
    }
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
    clean.conversion_sd = c.conversion_sd.filter(|s| s.is_finite() && *s >= 0.0);
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
            (Some(g), Some(mm)) => dry_mass_g(g, lot.water_content_wt_pct)
                .and_then(|dry| metal_mol(dry, lot.loading_wt_pct, mm)),
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
    let k_se = match (k, c.conversion, c.duration_s, c.conversion_sd) {
        (Some(k), Some(x), Some(d), Some(sd)) if !k.censored => rate_constant_se(x, d, sd),
        _ => None,
    };
    let catalyst_ratio = match (metal, c.substrate_mol) {
        (Some(n), Some(s)) if s > 0.0 => finite(n / s),
        _ => None,
    };
    let tof0 = match (k, c.substrate_mol, metal) {
        (Some(k), Some(s), Some(n)) => initial_turnover_frequency(k.per_s, s, n),
        _ => None,
    };
    if censored && tof0.is_some() {
        flags.push("initial-tof-lower-bound".into());
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
        metal_available_mol: None,
        catalyst_ratio,
        yield_used,
        yield_derived: yield_derived && yield_used.is_some(),
        product_mol: product,
        ton,
        ton_available: None,
        tof_per_h: tof.map(|t| t.per_h),
        tof_per_s: tof.map(|t| t.per_s),
        initial_tof_per_h: tof0.map(|t| t.per_h),
        initial_tof_per_s: tof0.map(|t| t.per_s),
        cumulative_ton: None,
        k_app_per_s: k.map(|k| k.per_s),
        k_app_per_h: k.and_then(|k| finite(k.per_s * 3600.0)),
        k_app_se_per_h: k_se.and_then(|se| finite(se * 3600.0)),
        censored,
        k_ref_per_s: k_ref,
        activity: None,
        activity_se: None,
        activity_sd_own: None,
        metal_lost_g: lost,
        cumulative_loss_fraction: None,
        missing,
        flags,
    }
}
