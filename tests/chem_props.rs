//! cycle_metrics never yields NaN or infinity, whatever the measurements hold.

use proptest::prelude::*;
use turnbook::chem::{ActivityBasis, ChemOptions, CycleInput, LotFacts, cycle_metrics};
use turnbook::model::Quantity;

fn wild() -> impl Strategy<Value = Option<f64>> {
    proptest::option::of(prop_oneof![
        Just(f64::NAN),
        Just(f64::INFINITY),
        Just(-1.0),
        Just(0.0),
        Just(1.0),
        Just(1e-300),
        Just(1e300),
        0.0f64..1.0,
        any::<f64>(),
    ])
}

fn cycle() -> impl Strategy<Value = CycleInput> {
    (
        1u32..6,
        proptest::collection::vec(wild(), Quantity::ALL.len()),
    )
        .prop_map(|(n, vals)| {
            CycleInput::from_values(
                n,
                Quantity::ALL
                    .iter()
                    .zip(vals)
                    .filter_map(|(q, v)| v.map(|v| (*q, v))),
            )
        })
}

fn all_numbers(v: &serde_json::Value, out: &mut Vec<f64>) {
    match v {
        serde_json::Value::Number(n) => out.extend(n.as_f64()),
        serde_json::Value::Array(a) => a.iter().for_each(|x| all_numbers(x, out)),
        serde_json::Value::Object(o) => o.values().for_each(|x| all_numbers(x, out)),
        _ => {}
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 1024, ..ProptestConfig::default() })]

    #[test]
    fn metrics_are_finite_or_absent(
        cycles in proptest::collection::vec(cycle(), 0..6),
        loading in prop_oneof![Just(5.0), Just(0.0), Just(f64::NAN), any::<f64>()],
        mass in prop_oneof![Just(0.5), Just(-1.0), any::<f64>()],
        metal in prop_oneof![Just("Pd"), Just("Xx")],
        ea in wild(),
        t_ref in prop_oneof![Just(298.15), Just(0.0), any::<f64>()],
        saturation in prop_oneof![Just(0.995), Just(1.0), Just(f64::NAN), any::<f64>()],
        water in wild(),
        per_metal in any::<bool>(),
        tolerance in prop_oneof![Just(0.25), Just(0.0), Just(f64::NAN), any::<f64>()],
        sds in proptest::collection::vec(wild(), 6),
    ) {
        let lot = LotFacts {
            metal: metal.into(),
            loading_wt_pct: loading,
            charged_mass_g: mass,
            water_content_wt_pct: water.map(|w| w * 100.0),
        };
        let opts = ChemOptions {
            saturation,
            activation_energy_j_per_mol: ea,
            t_ref_k: t_ref,
            required: vec![],
            activity_basis: if per_metal { ActivityBasis::MetalCharged } else { ActivityBasis::CatalystRatio },
            ratio_tolerance: tolerance,
        };
        let cycles: Vec<CycleInput> = cycles
            .into_iter()
            .zip(sds.iter().cycle())
            .map(|(c, sd)| CycleInput { conversion_sd: *sd, ..c })
            .collect();
        let m = cycle_metrics(&lot, &cycles, &opts);
        prop_assert_eq!(m.len(), cycles.len());
        for c in &m {
            let opts = [c.metal_mol, c.yield_used, c.product_mol, c.ton, c.tof_per_h, c.tof_per_s,
                c.cumulative_ton, c.k_app_per_s, c.k_app_per_h, c.k_ref_per_s, c.activity,
                c.metal_lost_g, c.cumulative_loss_fraction, c.catalyst_charged_g,
                c.metal_available_mol, c.catalyst_ratio, c.ton_available, c.initial_tof_per_h,
                c.initial_tof_per_s, c.k_app_se_per_h, c.activity_se, c.activity_sd_own];
            for x in opts.into_iter().flatten() {
                prop_assert!(x.is_finite(), "{:?}", c);
            }
            // Amounts, uncertainties and rates are never negative.
            for x in [c.metal_available_mol, c.activity_se, c.activity_sd_own, c.k_app_se_per_h,
                c.initial_tof_per_s].into_iter().flatten() {
                prop_assert!(x >= 0.0, "{:?}", c);
            }
            // serde_json turns NaN into null; a finite check on every number it wrote
            // plus the check above leaves no room for NaN.
            let json = serde_json::to_value(c).map_err(|e| TestCaseError::fail(e.to_string()))?;
            let mut nums = Vec::new();
            all_numbers(&json, &mut nums);
            prop_assert!(nums.iter().all(|x| x.is_finite()));
        }
    }
}
