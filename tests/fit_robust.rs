//! Hostile and random input never panics the fitting code, and every analysis survives the
//! JSON round trip the shell relies on (stored as JSON, read back for reports).

use proptest::prelude::*;
use turnbook::fit::{AnalysisOptions, LotAnalysis, LotSeries, analyse, read_series_csv};

fn value() -> impl Strategy<Value = f64> {
    prop_oneof![
        8 => -2.0f64..2.0,
        1 => Just(f64::NAN),
        1 => Just(f64::INFINITY),
        1 => Just(1e300),
        1 => Just(0.0),
        1 => -1e6f64..1e6,
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn analyse_never_panics_and_round_trips(
        ys in prop::collection::vec(value(), 0..24),
        xs_noise in prop::collection::vec(value(), 0..24),
        censored in prop::collection::vec(any::<bool>(), 0..24),
        sd in prop::collection::vec(prop::option::of(value()), 0..24),
        decay in 0.0f64..0.3,
        clean in any::<bool>(),
    ) {
        let n = ys.len();
        let x: Vec<f64> = if clean {
            (1..=n).map(|i| i as f64).collect()
        } else {
            xs_noise.clone()
        };
        let y: Vec<f64> = if clean {
            ys.iter().enumerate().map(|(i, e)| {
                let e = if e.is_finite() { e.clamp(-1.0, 1.0) * 0.02 } else { 0.0 };
                (-decay * (i + 1) as f64).exp() + e
            }).collect()
        } else {
            ys.clone()
        };
        let s = LotSeries { x, y, censored, ton: vec![Some(100.0); n], sd };
        let a = analyse(&s, &AnalysisOptions::default());
        let js = serde_json::to_string(&a).expect("serialise");
        let back: LotAnalysis = serde_json::from_str(&js)
            .unwrap_or_else(|e| panic!("round trip failed: {e}\n{js}"));
        prop_assert_eq!(back.chosen, a.chosen);
        let _ = turnbook::fit::render_text(&a);
    }

    #[test]
    fn csv_reader_never_panics(text in "\\PC{0,200}") {
        let _ = read_series_csv(&text);
    }
}
