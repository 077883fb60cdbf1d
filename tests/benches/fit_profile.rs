//! A plain loop over analyse() of the benchmark's 40-cycle lot, for instruction counts
//! under callgrind (repeatable where wall-clock time on a shared host is not):
//!
//! ```sh
//! cargo bench --bench fit_profile --no-run
//! valgrind --tool=callgrind --dump-instr=no \
//!     --toggle-collect='turnbook::fit::analyse' target/release/deps/fit_profile-*
//! ```
//!
//! The instructions collected divided by the calls (first argument, default 100) are the
//! cost of one analysis. A second argument naming a model (`two-site`) loops over that
//! model's fit at analyse()'s tolerances instead (collect `turnbook::fit::fit_model`)
//! and prints its iterations. Demo data: the same invented lot and seed as `benches/fit.rs`.

use std::hint::black_box;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::{
    AnalysisOptions, FitOptions, LmOptions, LotSeries, ModelId, analyse, fit_model,
};

fn main() {
    let calls: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(100);
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let noise = Normal::new(0.0, 0.01).expect("valid sd");
    let x: Vec<f64> = (1..=40).map(f64::from).collect();
    let y = x
        .iter()
        .map(|&v| 0.25 + 0.75 * (-0.06 * v).exp() + noise.sample(&mut rng))
        .collect();
    let lot = LotSeries {
        x,
        y,
        ..LotSeries::default()
    };
    let opts = AnalysisOptions::default();
    if let Some(m) = std::env::args()
        .nth(2)
        .and_then(|a| ModelId::from_id(&a).ok())
    {
        let fit_opts = FitOptions {
            lm: LmOptions {
                max_iterations: 200,
                ftol: 1e-12,
                xtol: 1e-10,
                gtol: 1e-10,
                ..LmOptions::default()
            },
            ..FitOptions::default()
        };
        let mut last = None;
        for _ in 0..calls {
            last = black_box(fit_model(m, black_box(&lot.x), black_box(&lot.y), &fit_opts).ok());
        }
        if let Some(f) = last {
            println!(
                "{m}: {:?} after {} iterations, rss {:e}, {:?}",
                f.reason, f.iterations, f.rss, f.params
            );
        }
        return;
    }
    let mut last = None;
    for _ in 0..calls {
        last = Some(black_box(analyse(black_box(&lot), &opts)));
    }
    if let Some(a) = last {
        println!("chosen {:?}", a.chosen);
        for r in &a.ranking {
            println!(
                "{:<22} aicc {:?} converged {} {:?}",
                r.model.id(),
                r.aicc,
                r.converged,
                r.why_not
            );
        }
        if let Some(f) = &a.forecast {
            println!("forecast {:?} [{:?}, {:?}]", f.x, f.lower, f.upper);
        }
    }
}
