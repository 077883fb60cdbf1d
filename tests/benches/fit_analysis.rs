//! Time of the full analysis of one 40-cycle lot: every activity model fitted, the Akaike
//! averaging, the step monitoring and level-shift model, the crossing interval and the
//! next-cycle verdict. Three lots (demo data, invented parameters, seeded noise): a slow
//! first-order-residual decay, a stable lot and a lot with a 20 % step at cycle 25.
//! A plain timing loop on one thread; prints µs per lot.
//!
//! For a profiler, name a lot (`decaying`, `stable` or `step`) and a number of calls:
//! `target/release/deps/fit_analysis-* step 2000` runs analyse() on that lot alone, with
//! no timing (e.g. under `perf record -g` or `valgrind --tool=callgrind`), then prints the
//! ranking's convergence; with `FIT_ANALYSIS_PER_MODEL=1` it first times analyse() with
//! each activity model as the only candidate (which model's fits cost the time).

use std::hint::black_box;
use std::time::Instant;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::{AnalysisOptions, LotSeries, analyse};

fn lot(rng: &mut ChaCha8Rng, f: impl Fn(f64) -> f64) -> LotSeries {
    let noise = Normal::new(0.0, 0.01).expect("valid sd");
    let x: Vec<f64> = (1..=40).map(f64::from).collect();
    let y = x.iter().map(|&v| f(v) + noise.sample(rng)).collect();
    LotSeries {
        x,
        y,
        ..LotSeries::default()
    }
}

fn main() {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let lots = [
        (
            "decaying",
            lot(&mut rng, |x| 0.25 + 0.75 * (-0.06 * x).exp()),
        ),
        ("stable", lot(&mut rng, |_| 1.0)),
        (
            "step at 25",
            lot(&mut rng, |x| {
                (-0.02 * x).exp() * if x >= 25.0 { 0.8 } else { 1.0 }
            }),
        ),
    ];
    let opts = AnalysisOptions::default();
    let mut args = std::env::args().skip(1).filter(|a| a != "--bench");
    if let Some(case) = args.next() {
        let calls: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(1000);
        let Some((_, l)) = lots
            .iter()
            .find(|(name, _)| name.starts_with(case.as_str()))
        else {
            eprintln!("no lot named {case}: decaying, stable or step");
            std::process::exit(2);
        };
        if std::env::var_os("FIT_ANALYSIS_PER_MODEL").is_some() {
            for m in turnbook::fit::ModelId::ACTIVITY {
                let o = AnalysisOptions {
                    candidates: vec![m],
                    ..AnalysisOptions::default()
                };
                let t = Instant::now();
                for _ in 0..calls {
                    black_box(analyse(black_box(l), &o));
                }
                eprintln!(
                    "{m}: {:.0} µs",
                    t.elapsed().as_secs_f64() * 1e6 / calls as f64
                );
            }
        }
        let mut last = None;
        for _ in 0..calls {
            last = Some(black_box(analyse(black_box(l), &opts)));
        }
        if let Some(a) = last {
            for r in &a.ranking {
                eprintln!(
                    "{:<22} converged {} {:?}",
                    r.model.id(),
                    r.converged,
                    r.why_not
                );
            }
            eprintln!("trend cycles {}", a.trend_cycles);
        }
        return;
    }
    for (name, l) in &lots {
        // Warm up, then time batches until a second has passed; report the best batch.
        for _ in 0..20 {
            black_box(analyse(black_box(l), &opts));
        }
        let mut best = f64::INFINITY;
        let start = Instant::now();
        let mut total = 0;
        while start.elapsed().as_secs_f64() < 1.0 {
            let t = Instant::now();
            for _ in 0..20 {
                black_box(analyse(black_box(l), &opts));
            }
            best = best.min(t.elapsed().as_secs_f64() / 20.0);
            total += 20;
        }
        let mean = start.elapsed().as_secs_f64() / total as f64;
        println!(
            "analyse 40-cycle lot ({name}): {:.0} µs per lot (best batch), {:.0} µs mean over {total}",
            best * 1e6,
            mean * 1e6
        );
    }
}
