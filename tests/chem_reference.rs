//! Hand-worked checks of the chemistry, with the arithmetic and the definition beside
//! each one.

use turnbook::chem::{
    ChargeSource, ChemOptions, CycleInput, GAS_CONSTANT, LotFacts, PdeTable, Route,
    apparent_rate_constant, arrhenius_to_reference, cycle_metrics, ich_q3d_pde, metal_lost_g,
    metal_mol, molar_mass, option1_limit_ug_per_g, turnover_frequency, turnover_number,
};
use turnbook::model::Quantity;

fn close(got: f64, want: f64, rel: f64) -> bool {
    (got - want).abs() <= rel * want.abs().max(1e-300)
}

macro_rules! assert_close {
    ($got:expr, $want:expr, $rel:expr) => {{
        let (g, w): (f64, f64) = ($got, $want);
        assert!(close(g, w, $rel), "got {g:e}, want {w:e}");
    }};
}

fn some(x: Option<f64>) -> f64 {
    match x {
        Some(v) => v,
        None => panic!("expected a value"),
    }
}

/// 5 wt % Pd on carbon, 0.500 g charged at cycle 1.
fn pd_lot() -> LotFacts {
    LotFacts {
        metal: "Pd".into(),
        loading_wt_pct: 5.0,
        charged_mass_g: 0.500,
        water_content_wt_pct: None,
    }
}

#[test]
fn molar_masses_iupac() {
    // IUPAC standard atomic weights (CIAAW), abridged; recalled from memory, to be
    // checked against the IUPAC table.
    assert_eq!(molar_mass("Pd"), Some(106.42));
    assert_eq!(molar_mass("Pt"), Some(195.084));
    assert_eq!(molar_mass("Ni"), Some(58.6934));
    assert_eq!(molar_mass("Xx"), None);
}

#[test]
fn metal_charged() {
    // 0.500 g × 5 wt % = 0.025 g Pd; 0.025 g / 106.42 g/mol (M(Pd), IUPAC) =
    // 2.349182e-4 mol.
    assert_close!(
        some(metal_mol(0.500, 5.0, 106.42)),
        2.349_182_484_5e-4,
        1e-10
    );
}

#[test]
fn ton_and_tof() {
    // IUPAC Gold Book, turnover number: mol product / mol catalyst.
    // Substrate 0.100 mol, X = 0.98, S = 0.95 → yield 0.931 → 0.0931 mol product.
    // TON = 0.0931 / 2.349182e-4 = 396.308.
    let n = some(metal_mol(0.500, 5.0, 106.42));
    let ton = some(turnover_number(0.100 * 0.98 * 0.95, n));
    assert_close!(ton, 396.308_08, 1e-7);
    // IUPAC Gold Book, turnover frequency: TON per unit time.
    // 2 h = 7200 s: TOF = 396.308 / 2 h = 198.154 h⁻¹ = 396.308 / 7200 s = 0.0550428 s⁻¹.
    let Some(tof) = turnover_frequency(ton, 7200.0) else {
        panic!("no TOF")
    };
    assert_close!(tof.per_h, 198.154_04, 1e-7);
    assert_close!(tof.per_s, 0.055_042_789, 1e-7);
}

#[test]
fn k_app_half_conversion_in_one_hour_is_ln2_per_hour() {
    // First order in the limiting substrate: ln[1/(1 − X)] = k t.
    // X = 0.5, t = 1 h: k = ln 2 h⁻¹ = 0.693147 h⁻¹ = 1.925409e-4 s⁻¹.
    let Some(k) = apparent_rate_constant(0.5, 3600.0, 0.995) else {
        panic!("no k")
    };
    assert_close!(k.per_s * 3600.0, std::f64::consts::LN_2, 1e-14);
    assert_close!(k.per_s, 1.925_408_834_9e-4, 1e-10);
    assert!(!k.censored);
}

#[test]
fn k_app_is_censored_at_the_saturation_limit() {
    // X = 0.999 ≥ 0.995: k is returned at X = 0.995, −ln(0.005)/1 h = 5.298317 h⁻¹, as a
    // lower bound (censored), never as exact.
    let Some(k) = apparent_rate_constant(0.999, 3600.0, 0.995) else {
        panic!("no k")
    };
    assert!(k.censored);
    assert_close!(k.per_s * 3600.0, 5.298_317_366_5, 1e-10);
    // Full conversion gives the same bound, not infinity.
    assert_eq!(apparent_rate_constant(1.0, 3600.0, 0.995), Some(k));
    // Exactly at the limit is censored; just below is not.
    assert!(apparent_rate_constant(0.995, 3600.0, 0.995).is_some_and(|k| k.censored));
    assert!(apparent_rate_constant(0.9949, 3600.0, 0.995).is_some_and(|k| !k.censored));
    // A configured saturation moves the limit.
    assert!(apparent_rate_constant(0.99, 3600.0, 0.98).is_some_and(|k| k.censored));
}

#[test]
fn arrhenius_by_hand_and_round_trip() {
    // R = 8.314462618 J mol⁻¹ K⁻¹ (CODATA 2018, exact in the 2019 SI).
    assert_eq!(GAS_CONSTANT, 8.314_462_618);
    // Arrhenius, k(T_ref) = k(T)·exp[(Ea/R)(1/T − 1/T_ref)], Ea = 50 kJ/mol,
    // T = 318.15 K (45 °C), T_ref = 298.15 K (25 °C):
    // 1/T − 1/T_ref = −20 / (318.15 × 298.15) = −2.108450e-4 K⁻¹;
    // Ea/R = 6013.62 K; exponent = −1.267930; factor = exp(−1.267930) = 0.281410.
    let k = some(arrhenius_to_reference(1.0, 318.15, 298.15, 50_000.0));
    assert_close!(k, 0.281_410_426_5, 1e-9);
    // Round trip: back from 298.15 K to 318.15 K restores k.
    let back = some(arrhenius_to_reference(k, 298.15, 318.15, 50_000.0));
    assert_close!(back, 1.0, 1e-14);
    // Ea = 0 or T = T_ref leaves k unchanged.
    assert_eq!(arrhenius_to_reference(2.5, 318.15, 298.15, 0.0), Some(2.5));
    assert_eq!(arrhenius_to_reference(2.5, 298.15, 298.15, 8e4), Some(2.5));
}

#[test]
fn leaching_per_cycle() {
    // 4 µg/g Pd in 50 g product: 200 µg = 2.0e-4 g lost.
    assert_close!(some(metal_lost_g(4.0, 50.0)), 2.0e-4, 1e-14);
}

#[test]
fn ich_q3d_option1_limits() {
    // Option 1 limit = PDE / 10 g daily dose (ICH Q3D). Pd oral PDE 100 µg/day,
    // parenteral 10 µg/day (recalled from memory, ICH Q3D(R2); verify against the
    // guideline): 10 µg/g and 1 µg/g.
    let Some(pd) = ich_q3d_pde("Pd") else {
        panic!("no Pd PDE")
    };
    assert_eq!(option1_limit_ug_per_g(pd.oral), Some(10.0));
    let table = PdeTable::ich_q3d();
    assert_eq!(table.option1_limit("Pd", Route::Parenteral), Some(1.0));
    // Fe and Re have no Q3D PDE; the site must configure one.
    assert_eq!(table.option1_limit("Fe", Route::Oral), None);
    let mut site = table.clone();
    site.set(
        "Fe",
        turnbook::chem::Pde {
            oral: 5000.0,
            parenteral: 500.0,
            inhalation: 50.0,
        },
    );
    assert_eq!(site.option1_limit("Fe", Route::Oral), Some(500.0));
}

#[test]
fn activity_with_shrinking_recovered_mass() {
    // Levenspiel: a_n = (k_n / mol metal charged_n) / (k_1 / mol metal charged_1).
    // Cycle 1: lot charge 0.500 g, X = 0.90 in 1 h → k1 = ln 10 h⁻¹; 0.480 g recovered.
    // Cycle 2: no weighing, so 0.480 g (recovered) charged; X = 0.80 → k2 = ln 5 h⁻¹.
    // a2 = (ln 5 / 0.480) / (ln 10 / 0.500) = 0.698970 × 1.041667 = 0.728094.
    // Cycle 3: 0.470 g weighed in; X = 0.70 → k3 = ln(1/0.3) = 1.203973 h⁻¹;
    // a3 = (1.203973 / 0.470) / (2.302585 / 0.500) = 0.556254.
    let cycles = vec![
        CycleInput {
            cycle_no: 1,
            conversion: Some(0.90),
            duration_s: Some(3600.0),
            substrate_mol: Some(0.1),
            catalyst_recovered_g: Some(0.480),
            ..Default::default()
        },
        CycleInput {
            cycle_no: 2,
            conversion: Some(0.80),
            duration_s: Some(3600.0),
            substrate_mol: Some(0.1),
            ..Default::default()
        },
        CycleInput {
            cycle_no: 3,
            conversion: Some(0.70),
            duration_s: Some(3600.0),
            substrate_mol: Some(0.1),
            catalyst_mass_g: Some(0.470),
            ..Default::default()
        },
    ];
    let m = cycle_metrics(&pd_lot(), &cycles, &ChemOptions::default());
    assert_eq!(m.len(), 3);
    assert_eq!(m[0].charge_source, Some(ChargeSource::LotCharge));
    assert_eq!(m[1].charge_source, Some(ChargeSource::PreviousRecovered));
    assert_eq!(m[2].charge_source, Some(ChargeSource::Measured));
    assert_close!(some(m[0].activity), 1.0, 1e-15);
    assert_close!(some(m[1].activity), 0.728_093_754_5, 1e-9);
    assert_close!(some(m[2].activity), 0.556_253_984_3, 1e-9);
    assert_close!(some(m[1].metal_mol), 0.480 * 0.05 / 106.42, 1e-14);
    for c in &m {
        assert!(c.missing.is_empty(), "{:?}", c.missing);
        assert!(!c.flags.iter().any(|f| f == "pending"));
    }
}

#[test]
fn activity_normalised_to_reference_temperature() {
    // Same k_app = ln 2 h⁻¹ in both cycles, cycle 1 at 318.15 K, cycle 2 at 298.15 K,
    // Ea = 50 kJ/mol, T_ref = 298.15 K. Normalised: k1(T_ref) = ln 2 × 0.281410,
    // k2(T_ref) = ln 2. Same metal charged, so a2 = 1 / 0.281410 = 3.553528: at equal
    // temperature the used catalyst is the more active one.
    let base = CycleInput {
        conversion: Some(0.5),
        duration_s: Some(3600.0),
        substrate_mol: Some(0.1),
        catalyst_mass_g: Some(0.5),
        ..Default::default()
    };
    let cycles = vec![
        CycleInput {
            cycle_no: 1,
            temperature_k: Some(318.15),
            ..base.clone()
        },
        CycleInput {
            cycle_no: 2,
            temperature_k: Some(298.15),
            ..base.clone()
        },
    ];
    let opts = ChemOptions {
        activation_energy_j_per_mol: Some(50_000.0),
        t_ref_k: 298.15,
        ..ChemOptions::default()
    };
    let m = cycle_metrics(&pd_lot(), &cycles, &opts);
    assert_close!(some(m[1].activity), 1.0 / 0.281_410_426_5, 1e-9);
    assert_close!(
        some(m[0].k_ref_per_s),
        std::f64::consts::LN_2 / 3600.0 * 0.281_410_426_5,
        1e-9
    );
    // Without a temperature the cycle cannot be normalised: pending on temperature.
    let cycles = vec![
        cycles[0].clone(),
        CycleInput {
            cycle_no: 2,
            ..base
        },
    ];
    let m = cycle_metrics(&pd_lot(), &cycles, &opts);
    assert_eq!(m[1].missing, vec![Quantity::Temperature]);
    assert_eq!(m[1].activity, None);
}

#[test]
fn cumulative_ton_and_metal_loss() {
    // Metal charged initially: 0.500 g × 5 % = 0.025 g = 2.349182e-4 mol Pd.
    // Cycle 1: 0.100 mol × yield 0.90 (measured) = 0.090 mol; 50 g product at 4 µg/g.
    // Cycle 2: 0.100 mol × X 0.95 × S 0.90 = 0.0855 mol (derived yield); 50 g at 6 µg/g.
    // Cumulative TON after 2 = (0.090 + 0.0855) / 2.349182e-4 = 747.0685.
    // Loss: 2.0e-4 g then 3.0e-4 g; cumulative 5.0e-4 g / 0.025 g = 0.020.
    let cycles = vec![
        CycleInput {
            cycle_no: 1,
            conversion: Some(0.95),
            yield_fraction: Some(0.90),
            duration_s: Some(7200.0),
            substrate_mol: Some(0.1),
            product_mass_g: Some(50.0),
            metal_in_product_ug_per_g: Some(4.0),
            catalyst_mass_g: Some(0.5),
            ..Default::default()
        },
        CycleInput {
            cycle_no: 2,
            conversion: Some(0.95),
            selectivity: Some(0.90),
            duration_s: Some(7200.0),
            substrate_mol: Some(0.1),
            product_mass_g: Some(50.0),
            metal_in_product_ug_per_g: Some(6.0),
            catalyst_mass_g: Some(0.5),
            ..Default::default()
        },
    ];
    let m = cycle_metrics(&pd_lot(), &cycles, &ChemOptions::default());
    assert!(!m[0].yield_derived);
    assert!(m[1].yield_derived);
    assert!(m[1].flags.iter().any(|f| f == "derived-yield"));
    assert_close!(some(m[1].yield_used), 0.855, 1e-14);
    assert_close!(some(m[0].cumulative_ton), 0.090 / 2.349_182_484_5e-4, 1e-9);
    assert_close!(some(m[1].cumulative_ton), 747.068_5, 1e-6);
    assert_close!(some(m[0].cumulative_loss_fraction), 0.008, 1e-12);
    assert_close!(some(m[1].cumulative_loss_fraction), 0.020, 1e-12);
}

#[test]
fn pending_cycles_and_missing_quantities() {
    let cycles = vec![
        CycleInput {
            cycle_no: 1,
            duration_s: Some(3600.0),
            substrate_mol: Some(0.1),
            ..Default::default()
        },
        // Cycle 2 has no weighing and cycle 1 recorded no recovered mass.
        CycleInput {
            cycle_no: 2,
            conversion: Some(0.5),
            duration_s: Some(3600.0),
            substrate_mol: Some(0.1),
            ..Default::default()
        },
    ];
    let opts = ChemOptions {
        required: vec![Quantity::MetalInProduct, Quantity::Conversion],
        ..ChemOptions::default()
    };
    let m = cycle_metrics(&pd_lot(), &cycles, &opts);
    assert_eq!(
        m[0].missing,
        vec![Quantity::Conversion, Quantity::MetalInProduct]
    );
    assert_eq!(
        m[1].missing,
        vec![Quantity::CatalystMass, Quantity::MetalInProduct]
    );
    assert!(m.iter().all(|c| c.flags.iter().any(|f| f == "pending")));
    assert_eq!(m[0].k_app_per_s, None);
    assert_eq!(m[1].metal_mol, None);
    assert_eq!(m[1].activity, None);
    assert!(m[1].flags.iter().any(|f| f == "no-reference"));
}

#[test]
fn censored_reference_marks_later_activities() {
    // Every cycle saturated: no uncensored cycle can stand in for cycle 1, so its bound
    // stays the reference and every ratio to it is an upper bound, flagged as such.
    // (When a later cycle is uncensored it becomes the reference instead; see
    // tests/chem_activity.rs.)
    let base = CycleInput {
        duration_s: Some(3600.0),
        substrate_mol: Some(0.1),
        catalyst_mass_g: Some(0.5),
        ..Default::default()
    };
    let cycles = vec![
        CycleInput {
            cycle_no: 1,
            conversion: Some(0.999),
            ..base.clone()
        },
        CycleInput {
            cycle_no: 2,
            conversion: Some(0.996),
            duration_s: Some(7200.0),
            ..base
        },
    ];
    let m = cycle_metrics(&pd_lot(), &cycles, &ChemOptions::default());
    assert!(m[0].censored && m[0].flags.iter().any(|f| f == "censored"));
    assert!(m[1].censored);
    assert!(m[1].flags.iter().any(|f| f == "reference-censored"));
    // Both at the bound −ln(0.005): a2 = (5.298317 / 2 h) / (5.298317 / 1 h) = 0.5.
    assert_close!(some(m[1].activity), 0.5, 1e-12);
}

#[test]
fn options_read_from_configuration_with_defaults() {
    let o: ChemOptions = match toml::from_str("saturation = 0.99\nrequired = [\"temperature\"]\n") {
        Ok(o) => o,
        Err(e) => panic!("{e}"),
    };
    assert_eq!(o.saturation, 0.99);
    assert_eq!(o.t_ref_k, 298.15);
    assert_eq!(o.required, vec![Quantity::Temperature]);
    assert!(toml::from_str::<ChemOptions>("saturaton = 0.99\n").is_err());
}
