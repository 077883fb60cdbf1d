//! Two sites fitted by variable projection: a true two-site series is recovered at the
//! same optimum as the plain five-parameter engine, and a series with one decay plus a
//! residual (no interior two-site optimum) is reported as degenerate and never chosen.
//! Demo data: invented parameters, seeded noise.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::start_values;
use turnbook::fit::{
    AnalysisOptions, FitOptions, LotSeries, ModelId, StopReason, analyse, fit_model,
};
use turnbook::fit::{LmOptions, levenberg_marquardt};

fn series(seed: u64, sd: f64, n: usize, f: impl Fn(f64) -> f64) -> (Vec<f64>, Vec<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let noise = Normal::new(0.0, sd).expect("valid sd");
    let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
    let y = x.iter().map(|&v| f(v) + noise.sample(&mut rng)).collect();
    (x, y)
}

#[test]
fn true_two_site_series_is_recovered_and_chosen() {
    let truth = [0.2, 0.5, 0.35, 0.3, 0.03];
    for seed in 1..=5 {
        let (x, y) = series(seed, 0.003, 40, |v| ModelId::TwoSite.eval(v, &truth));
        let f = fit_model(ModelId::TwoSite, &x, &y, &FitOptions::default()).expect("fit");
        assert!(f.converged, "seed {seed}: {:?}", f.reason);
        // The plain engine from the same start must land on the same optimum.
        let start = start_values(ModelId::TwoSite, &x, &y);
        let plain = levenberg_marquardt(
            &ModelId::TwoSite,
            &x,
            &y,
            None,
            &start,
            &LmOptions::default(),
        )
        .expect("valid problem");
        assert!(
            plain.reason.is_converged(),
            "seed {seed}: {:?}",
            plain.reason
        );
        for j in 0..5 {
            let rel = (f.params[j] - plain.params[j]).abs() / plain.params[j].abs();
            assert!(rel < 1e-7, "seed {seed} param {j}: {f:?} vs {plain:?}");
        }
        let se = f.std_errors.as_ref().expect("standard errors");
        for j in 0..5 {
            assert!(
                (f.params[j] - truth[j]).abs() < 5.0 * se[j],
                "seed {seed} param {j}: {} ± {} vs {}",
                f.params[j],
                se[j],
                truth[j]
            );
        }
        let a = analyse(
            &LotSeries {
                x,
                y,
                ..LotSeries::default()
            },
            &AnalysisOptions::default(),
        );
        assert_eq!(
            a.chosen,
            Some(ModelId::TwoSite),
            "seed {seed}: {:?}",
            a.ranking
        );
    }
}

#[test]
fn one_decay_with_residual_is_degenerate_and_not_chosen() {
    let mut degenerate = 0;
    for seed in 1..=20 {
        let (x, y) = series(seed, 0.01, 40, |v| 0.25 + 0.75 * (-0.06 * v).exp());
        let f = fit_model(ModelId::TwoSite, &x, &y, &FitOptions::default()).expect("fit");
        if f.reason == StopReason::Degenerate {
            degenerate += 1;
            assert!(!f.converged);
            // Nothing the plain engine finds from the same start is materially better:
            // the edge of the model is where its descent leads too.
            let start = start_values(ModelId::TwoSite, &x, &y);
            let plain = levenberg_marquardt(
                &ModelId::TwoSite,
                &x,
                &y,
                None,
                &start,
                &LmOptions::default(),
            )
            .expect("valid problem");
            assert!(
                plain.rss >= f.rss * (1.0 - 1e-4),
                "seed {seed}: {plain:?} vs {f:?}"
            );
            let a = analyse(
                &LotSeries {
                    x,
                    y,
                    ..LotSeries::default()
                },
                &AnalysisOptions::default(),
            );
            assert_ne!(a.chosen, Some(ModelId::TwoSite));
            let entry = a
                .ranking
                .iter()
                .find(|r| r.model == ModelId::TwoSite)
                .expect("two-site ranked");
            assert!(!entry.converged && !entry.chosen);
            assert_eq!(
                entry.why_not.as_deref(),
                Some(StopReason::Degenerate.describe())
            );
        }
    }
    // Most such lots have no interior two-site optimum (observed: 17 of these 20, the
    // seed of the benchmark lot among them; the other 3 have a genuine interior optimum
    // that the plain engine finds too).
    assert!(degenerate >= 15, "{degenerate} of 20 degenerate");
}
