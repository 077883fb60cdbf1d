//! Activity per catalyst-to-substrate ratio, the dry basis, the metal inventory, the
//! initial TOF and the propagated standard errors: hand-worked numbers beside each check,
//! and a seeded Monte Carlo propagation for the error formulas.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::chem::{
    ActivityBasis, ChemOptions, CycleInput, LotFacts, cycle_metrics, lot_metrics, rate_constant_se,
};

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

fn has(flags: &[String], f: &str) -> bool {
    flags.iter().any(|x| x == f)
}

/// 5 wt % Pd on carbon (M(Pd) = 106.42 g/mol, IUPAC; recalled from memory).
fn pd(charged_g: f64, water: Option<f64>) -> LotFacts {
    LotFacts {
        metal: "Pd".into(),
        loading_wt_pct: 5.0,
        charged_mass_g: charged_g,
        water_content_wt_pct: water,
    }
}

/// A cycle with conversion X after 1 h, weighed catalyst and substrate.
fn run(n: u32, x: f64, catalyst_g: f64, substrate_mol: f64) -> CycleInput {
    CycleInput {
        cycle_no: n,
        conversion: Some(x),
        duration_s: Some(3600.0),
        substrate_mol: Some(substrate_mol),
        catalyst_mass_g: Some(catalyst_g),
        ..Default::default()
    }
}

#[test]
fn twice_the_scale_keeps_activity_on_the_ratio_basis_and_halves_it_per_metal() {
    // Seeded simulation from known truth: activity a_n = exp(−0.05 (n − 1)), k_1 = 1 h⁻¹,
    // 0.5 g catalyst and 0.1 mol substrate per batch. Cycle 5 runs the same recipe at
    // twice the scale (1.0 g, 0.2 mol, twice the solvent): the catalyst's concentration,
    // and so k_app, is unchanged. X_n = 1 − exp(−a_n·1 h⁻¹·1 h), read with an assay error
    // σ_X = 0.002 (seeded normal draws).
    //
    // True a_5 = exp(−0.2) = 0.818731. Per catalyst-to-substrate ratio (the default):
    // k_5·0.2/n_M5 over k_1·0.1/n_M1 with n_M5 = 2·n_M1 → a_5 = k_5/k_1 ≈ 0.8187 (noise
    // only). Per mol of metal charged: k_5/(2·n_M1) over k_1/n_M1 → a_5/2 = 0.409365.
    // Measured with seed 5: ratio basis a_5 = 0.82199 (0.40 % above the truth; its
    // propagated se 0.00638, so 0.5 se), per mol metal charged 0.41100.
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let noise = Normal::new(0.0, 0.002).expect("valid sd");
    let truth = |n: u32| (-0.05 * f64::from(n - 1)).exp();
    let cycles: Vec<CycleInput> = (1..=8)
        .map(|n| {
            let scale = if n == 5 { 2.0 } else { 1.0 };
            let x = 1.0 - (-truth(n)).exp() + noise.sample(&mut rng);
            CycleInput {
                conversion_sd: Some(0.002),
                ..run(n, x, 0.5 * scale, 0.1 * scale)
            }
        })
        .collect();
    let lot = pd(0.5, None);
    let ratio = cycle_metrics(&lot, &cycles, &ChemOptions::default());
    let per_metal = cycle_metrics(
        &lot,
        &cycles,
        &ChemOptions {
            activity_basis: ActivityBasis::MetalCharged,
            ..ChemOptions::default()
        },
    );
    let a5 = some(ratio[4].activity);
    let se5 = some(ratio[4].activity_se);
    assert!(
        (a5 - truth(5)).abs() < 3.0 * se5,
        "ratio basis a5 = {a5}, truth {}, se {se5}",
        truth(5)
    );
    assert_close!(some(per_metal[4].activity), a5 / 2.0, 1e-12);
    assert!((some(per_metal[4].activity) - truth(5) / 2.0).abs() < 3.0 * se5 / 2.0);
    // The neighbours agree on both bases (same scale as cycle 1).
    for i in [3, 5] {
        assert_close!(some(per_metal[i].activity), some(ratio[i].activity), 1e-12);
    }
    // Same recipe, same catalyst-to-substrate ratio: not flagged.
    assert!(ratio.iter().all(|m| !has(&m.flags, "ratio-off-usual")));
}

#[test]
fn noise_free_scale_change_worked_by_hand() {
    // Exact k_n = a_n h⁻¹ (no noise): a_5 = exp(−0.2) = 0.818731 per catalyst ratio and
    // 0.409365 per mol metal charged, the scale-up mistaken for a halving of activity.
    let truth = |n: u32| (-0.05 * f64::from(n - 1)).exp();
    let cycles: Vec<CycleInput> = (1..=6)
        .map(|n| {
            let scale = if n == 5 { 2.0 } else { 1.0 };
            run(n, 1.0 - (-truth(n)).exp(), 0.5 * scale, 0.1 * scale)
        })
        .collect();
    let ratio = cycle_metrics(&pd(0.5, None), &cycles, &ChemOptions::default());
    let per_metal = cycle_metrics(
        &pd(0.5, None),
        &cycles,
        &ChemOptions {
            activity_basis: ActivityBasis::MetalCharged,
            ..ChemOptions::default()
        },
    );
    assert_close!(some(ratio[4].activity), 0.818_730_753_1, 1e-9);
    assert_close!(some(per_metal[4].activity), 0.409_365_376_5, 1e-9);
    // Each basis states its definition, as tables and reports print it.
    for b in [ActivityBasis::CatalystRatio, ActivityBasis::MetalCharged] {
        assert!(b.definition().starts_with("k_app per "));
        assert!(!b.definition().contains("  "), "{}", b.definition());
    }
}

#[test]
fn a_changed_recipe_is_flagged_against_the_lot_median() {
    // Ratios (mol Pd / mol substrate): 0.5 g → 2.349182e-4 mol Pd per 0.1 mol = 2.349e-3
    // in cycles 1–4; cycle 3 charges 0.7 g (ratio ×1.4, beyond 25 %), cycle 4 0.55 g
    // (×1.1, within). Median of the four = 2.349e-3 (cycles 1, 2 and the middle pair).
    let cycles = vec![
        run(1, 0.8, 0.5, 0.1),
        run(2, 0.8, 0.5, 0.1),
        run(3, 0.8, 0.7, 0.1),
        run(4, 0.8, 0.55, 0.1),
        run(5, 0.8, 0.5, 0.1),
    ];
    let lot = lot_metrics(&pd(0.5, None), &cycles, &ChemOptions::default());
    assert_close!(some(lot.usual_ratio), 0.5 * 0.05 / 106.42 / 0.1, 1e-12);
    let flagged: Vec<u32> = lot
        .cycles
        .iter()
        .filter(|m| has(&m.flags, "ratio-off-usual"))
        .map(|m| m.cycle_no)
        .collect();
    assert_eq!(flagged, vec![3]);
    // A tighter tolerance catches cycle 4 too.
    let tight = ChemOptions {
        ratio_tolerance: 0.05,
        ..ChemOptions::default()
    };
    let flagged = lot_metrics(&pd(0.5, None), &cycles, &tight)
        .cycles
        .iter()
        .filter(|m| has(&m.flags, "ratio-off-usual"))
        .count();
    assert_eq!(flagged, 2);
}

#[test]
fn a_half_water_wet_charge_gives_the_ton_of_its_dry_mass() {
    // 10.0 g of 5 % Pd/C as 50 % water-wet paste, loading on the dry basis (common
    // practice): dry mass = 10.0 × (1 − 50/100) = 5.0 g; Pd = 5.0 × 0.05 = 0.25 g =
    // 0.25 / 106.42 = 2.349182e-3 mol. Substrate 1.2 mol, yield 0.95 → 1.14 mol product.
    // TON = 1.14 / 2.349182e-3 = 485.2752; counting the wet mass as dry would give half
    // of it, 242.6376. TOF over 2 h = 242.6376 h⁻¹.
    let cycle = CycleInput {
        cycle_no: 1,
        conversion: Some(0.96),
        yield_fraction: Some(0.95),
        duration_s: Some(7200.0),
        substrate_mol: Some(1.2),
        ..Default::default()
    };
    let wet = cycle_metrics(
        &pd(10.0, Some(50.0)),
        std::slice::from_ref(&cycle),
        &ChemOptions::default(),
    );
    assert_close!(some(wet[0].metal_mol), 2.349_182_484_5e-3, 1e-10);
    assert_close!(some(wet[0].ton), 485.275_2, 1e-9);
    assert_close!(some(wet[0].tof_per_h), 242.637_6, 1e-9);
    let as_dry = cycle_metrics(&pd(10.0, None), &[cycle], &ChemOptions::default());
    assert_close!(some(as_dry[0].ton), 242.637_6, 1e-9);
    // The same water content applies to a catalyst mass weighed into a later cycle.
    let later = CycleInput {
        cycle_no: 2,
        catalyst_mass_g: Some(8.0),
        substrate_mol: Some(1.2),
        ..Default::default()
    };
    let m = cycle_metrics(&pd(10.0, Some(50.0)), &[later], &ChemOptions::default());
    assert_close!(some(m[0].metal_mol), 4.0 * 0.05 / 106.42, 1e-12);
}

#[test]
fn metal_available_is_the_charge_less_earlier_losses() {
    // 0.5 g of 5 % Pd each cycle: nominal 2.349182e-4 mol. Leaching: cycle 1's 50 g of
    // product at 4 µg/g carries 2.0e-4 g Pd = 1.879346e-6 mol, cycle 2's 50 g at 6 µg/g
    // 3.0e-4 g. Available: cycle 1 2.349182e-4; cycle 2 2.349182e-4 − 1.879346e-6 =
    // 2.330389e-4; cycle 3 2.349182e-4 − 5.0e-4/106.42 = 2.302199e-4 mol.
    // Product 0.1 mol × yield 0.9 = 0.09 mol each: TON per mol charged 383.112, per mol
    // available 383.112, 386.2016, 390.9306.
    let cycle = |n: u32, ug: f64| CycleInput {
        yield_fraction: Some(0.9),
        product_mass_g: Some(50.0),
        metal_in_product_ug_per_g: Some(ug),
        ..run(n, 0.9, 0.5, 0.1)
    };
    let m = cycle_metrics(
        &pd(0.5, None),
        &[cycle(1, 4.0), cycle(2, 6.0), cycle(3, 5.0)],
        &ChemOptions::default(),
    );
    assert_close!(some(m[0].metal_available_mol), 2.349_182_484_5e-4, 1e-10);
    assert_close!(some(m[1].metal_available_mol), 2.330_389_024_6e-4, 1e-9);
    assert_close!(some(m[2].metal_available_mol), 2.302_198_834_8e-4, 1e-9);
    assert_close!(some(m[2].ton), 383.112, 1e-9);
    assert_close!(some(m[1].ton_available), 386.201_612_9, 1e-9);
    assert_close!(some(m[2].ton_available), 390.930_612_2, 1e-9);
    assert!(m.iter().all(|c| !has(&c.flags, "metal-available-partial")));
    // Without cycle 1's leaching figure, cycle 2's inventory is partial and said so.
    let gap = cycle_metrics(
        &pd(0.5, None),
        &[run(1, 0.9, 0.5, 0.1), cycle(2, 6.0)],
        &ChemOptions::default(),
    );
    assert!(has(&gap[1].flags, "metal-available-partial"));
}

#[test]
fn initial_tof_beside_average_tof() {
    // X = 0.5 in 1 h: k_app = ln 2 h⁻¹. Initial TOF = k_app·n_S/n_M =
    // 0.693147 × 0.1 / 2.349182e-4 = 295.0589 h⁻¹ = 0.0819608 s⁻¹ (Kozuch & Martin, ACS
    // Catal. 2012, 2, 2787, on TOF definitions; recalled from memory). Average TOF with
    // yield 0.475: 0.0475 / 2.349182e-4 / 1 h = 202.198 h⁻¹.
    let cycle = CycleInput {
        yield_fraction: Some(0.475),
        ..run(1, 0.5, 0.5, 0.1)
    };
    let m = cycle_metrics(&pd(0.5, None), &[cycle], &ChemOptions::default());
    assert_close!(some(m[0].initial_tof_per_h), 295.058_891_8, 1e-9);
    assert_close!(some(m[0].initial_tof_per_s), 295.058_891_8 / 3600.0, 1e-9);
    assert_close!(some(m[0].tof_per_h), 202.198, 1e-9);
    // On the default basis, activity is the initial TOF (at T_ref) relative to the
    // reference's.
    let m = cycle_metrics(
        &pd(0.5, None),
        &[run(1, 0.5, 0.5, 0.1), run(2, 0.3, 0.5, 0.1)],
        &ChemOptions::default(),
    );
    assert_close!(
        some(m[1].activity),
        some(m[1].initial_tof_per_s) / some(m[0].initial_tof_per_s),
        1e-12
    );
    // A saturated cycle's initial TOF is a lower bound, and flagged as one.
    let m = cycle_metrics(
        &pd(0.5, None),
        &[run(1, 0.999, 0.5, 0.1)],
        &ChemOptions::default(),
    );
    assert!(m[0].censored && has(&m[0].flags, "initial-tof-lower-bound"));
}

#[test]
fn censored_first_cycle_moves_the_reference_to_the_first_uncensored_one() {
    // Cycle 1 saturates (X = 0.999 ≥ 0.995): its k is only the bound −ln(0.005) =
    // 5.298317 h⁻¹. Cycle 2 (X = 0.9, k = ln 10 = 2.302585 h⁻¹) becomes the reference;
    // cycle 3 (X = 0.8, k = ln 5 = 1.609438) has a3 = 1.609438/2.302585 = 0.698970;
    // cycle 1's activity is the lower bound 5.298317/2.302585 = 2.301030.
    let cycles = vec![
        run(1, 0.999, 0.5, 0.1),
        run(2, 0.9, 0.5, 0.1),
        run(3, 0.8, 0.5, 0.1),
    ];
    let lot = lot_metrics(&pd(0.5, None), &cycles, &ChemOptions::default());
    assert_eq!(lot.reference_cycle, Some(2));
    assert!(lot.reference_moved);
    let m = &lot.cycles;
    assert_close!(some(m[0].activity), 2.301_029_995_7, 1e-9);
    assert_close!(some(m[1].activity), 1.0, 1e-15);
    assert_close!(some(m[2].activity), 0.698_970_004_3, 1e-9);
    assert!(has(&m[0].flags, "reference-first-uncensored"));
    assert!(has(&m[2].flags, "reference-first-uncensored"));
    assert!(!has(&m[1].flags, "reference-first-uncensored"));
    assert!(m.iter().all(|c| !has(&c.flags, "reference-censored")));
}

#[test]
fn k_app_error_formula_against_a_seeded_monte_carlo_propagation() {
    // Seeded Monte Carlo propagation: X ~ N(X0, σ_X), k = −ln(1 − X)/t, 200,000 draws;
    // the sample standard deviation of k against σ_X/((1 − X0)·t). σ_X = 0.002 keeps the
    // draws far from X = 1 so first order holds.
    // Measured (seed 16): sd(MC)/formula = 0.9982 at X0 = 0.5, 1.0018 at 0.8, 1.0019 at
    // 0.95 (relative errors se(k)/k = 0.58 %, 0.62 %, 1.34 %).
    let mut rng = ChaCha8Rng::seed_from_u64(16);
    let sd = 0.002;
    let t = 7200.0;
    let noise = Normal::new(0.0, sd).expect("valid sd");
    for x0 in [0.5_f64, 0.8, 0.95] {
        let draws: Vec<f64> = (0..200_000)
            .map(|_| -(-(x0 + noise.sample(&mut rng))).ln_1p() / t)
            .collect();
        let mean = draws.iter().sum::<f64>() / draws.len() as f64;
        let var = draws.iter().map(|k| (k - mean).powi(2)).sum::<f64>() / (draws.len() - 1) as f64;
        let formula = some(rate_constant_se(x0, t, sd));
        let ratio = var.sqrt() / formula;
        assert!(
            (ratio - 1.0).abs() < 0.01,
            "X0 = {x0}: MC/formula = {ratio}"
        );
        // The relative form in the design notes: σ/((1 − X)|ln(1 − X)|).
        let k0 = -(-x0).ln_1p() / t;
        assert_close!(
            formula / k0,
            sd / ((1.0 - x0) * (1.0 - x0).ln().abs()),
            1e-12
        );
    }
}

#[test]
fn activity_error_against_a_seeded_monte_carlo_propagation() {
    // a = (k_n·n_S/n_M)/(k_1·n_S/n_M) with both conversions measured with σ_X = 0.004:
    // cycle 1 X = 0.90, cycle 4 X = 0.70. First order: (se(a)/a)² = r_1² + r_4² with
    // r = σ/((1 − X)|ln(1 − X)|): r_1 = 0.004/(0.1 × 2.302585) = 0.017372, r_4 =
    // 0.004/(0.3 × 1.203973) = 0.011074, a = 1.203973/2.302585 = 0.522879, se(a) =
    // 0.522879 × 0.020602 = 0.010772. The cycle's own part: a × r_4 = 0.005790.
    // Seeded Monte Carlo (seed 7, 100,000 pairs of draws): sd of a = 0.010814, ratio to
    // the propagated 0.010772 = 1.0039.
    let cycles = vec![
        CycleInput {
            conversion_sd: Some(0.004),
            ..run(1, 0.90, 0.5, 0.1)
        },
        CycleInput {
            conversion_sd: Some(0.004),
            ..run(2, 0.80, 0.5, 0.1)
        },
        CycleInput {
            conversion_sd: Some(0.004),
            ..run(3, 0.75, 0.5, 0.1)
        },
        CycleInput {
            conversion_sd: Some(0.004),
            ..run(4, 0.70, 0.5, 0.1)
        },
    ];
    let m = cycle_metrics(&pd(0.5, None), &cycles, &ChemOptions::default());
    assert_close!(some(m[3].activity), 0.522_878_745_3, 1e-9);
    assert_close!(some(m[3].activity_se), 0.010_772, 1e-3);
    assert_close!(some(m[3].activity_sd_own), 0.005_790, 1e-3);
    assert_eq!(m[0].activity_se, Some(0.0));
    assert_close!(some(m[0].activity_sd_own), 0.017_372, 1e-3);
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let noise = Normal::new(0.0, 0.004).expect("valid sd");
    let k = |x: f64| -(-x).ln_1p();
    let draws: Vec<f64> = (0..100_000)
        .map(|_| k(0.70 + noise.sample(&mut rng)) / k(0.90 + noise.sample(&mut rng)))
        .collect();
    let mean = draws.iter().sum::<f64>() / draws.len() as f64;
    let sd =
        (draws.iter().map(|a| (a - mean).powi(2)).sum::<f64>() / (draws.len() - 1) as f64).sqrt();
    let ratio = sd / some(m[3].activity_se);
    assert!((ratio - 1.0).abs() < 0.02, "MC/propagated = {ratio}");
    // Censored cycles carry no standard error: a bound is not a measurement.
    let sat = cycle_metrics(
        &pd(0.5, None),
        &[
            cycles[0].clone(),
            CycleInput {
                conversion_sd: Some(0.004),
                ..run(2, 0.999, 0.5, 0.1)
            },
        ],
        &ChemOptions::default(),
    );
    assert!(sat[1].censored);
    assert_eq!(sat[1].activity_se, None);
    assert_eq!(sat[1].activity_sd_own, None);
    assert_eq!(sat[1].k_app_se_per_h, None);
}
