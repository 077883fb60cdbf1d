//! Time of the full analysis of one 40-cycle lot: every activity model fitted, the Akaike
//! averaging, the step monitoring and level-shift model, the crossing interval and the
//! next-cycle verdict. Three lots (demo data, invented parameters, seeded noise): a slow
//! first-order-residual decay, a stable lot and a lot with a 20 % step at cycle 25.
//! A plain timing loop on one thread; prints µs per lot.

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
