//! Throughput of the fitting engine: analyse() of one 40-cycle lot with every activity
//! model, the choice and the forecast; and a refit of 10,000 lots with the chosen model.
//! Demo data (invented parameters, seeded noise).

use std::hint::black_box;

use criterion::{Criterion, criterion_group, criterion_main};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::start_values;
use turnbook::fit::{
    AnalysisOptions, FitOptions, LmOptions, LotSeries, ModelId, analyse, fit_model,
};

fn lot(rng: &mut ChaCha8Rng, n: usize) -> LotSeries {
    let noise = Normal::new(0.0, 0.01).expect("valid sd");
    let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
    let y = x
        .iter()
        .map(|&v| 0.25 + 0.75 * (-0.06 * v).exp() + noise.sample(rng))
        .collect();
    LotSeries {
        x,
        y,
        ..LotSeries::default()
    }
}

fn benches(c: &mut Criterion) {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let one = lot(&mut rng, 40);
    let opts = AnalysisOptions::default();
    c.bench_function("analyse 40-cycle lot, all models", |b| {
        b.iter(|| black_box(analyse(black_box(&one), &opts)))
    });
    let mut per_model = c.benchmark_group("one model, 40 cycles");
    for m in ModelId::ALL {
        per_model.bench_function(format!("start {m}"), |b| {
            b.iter(|| black_box(start_values(m, black_box(&one.x), black_box(&one.y))))
        });
        per_model.bench_function(format!("fit {m}"), |b| {
            b.iter(|| black_box(fit_model(m, &one.x, &one.y, &FitOptions::default()).ok()))
        });
    }
    per_model.finish();
    // The same fits at the tolerances analyse() uses, to see where an analysis spends.
    let analysis_fit = FitOptions {
        lm: LmOptions {
            max_iterations: 200,
            ftol: 1e-12,
            xtol: 1e-10,
            gtol: 1e-10,
            ..LmOptions::default()
        },
        ..FitOptions::default()
    };
    let mut parts = c.benchmark_group("analysis tolerances, 40 cycles");
    for m in ModelId::ACTIVITY {
        parts.bench_function(format!("fit {m}"), |b| {
            b.iter(|| black_box(fit_model(m, &one.x, &one.y, &analysis_fit).ok()))
        });
    }
    parts.finish();
    let lots: Vec<LotSeries> = (0..10_000).map(|_| lot(&mut rng, 40)).collect();
    let mut g = c.benchmark_group("refit");
    g.sample_size(10);
    g.bench_function("10,000 lots, first-order-residual", |b| {
        b.iter(|| {
            for l in &lots {
                let f = fit_model(
                    ModelId::FirstOrderResidual,
                    &l.x,
                    &l.y,
                    &FitOptions::default(),
                );
                black_box(f.ok());
            }
        })
    });
    g.finish();
}

criterion_group!(fit_benches, benches);
criterion_main!(fit_benches);
