//! Time of one lot's full analysis, and of its step monitoring alone, as the lot grows
//! from a thousand to hundreds of thousands of cycles (an invented slow
//! first-order-residual decay, seeded noise of sd 0.02). A lot that long is not a
//! catalyst's life; it is what one mistaken export (a sensor log filed against one lot)
//! asks of the analysis, which must then not hold the service's writer for minutes.
//!
//! `cargo bench --bench long_lot -- [SIZES...]` (default 1000 4000 16000 50000); prints
//! milliseconds per call, the best of three.

use std::hint::black_box;
use std::time::Instant;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::{AnalysisOptions, LotSeries, abrupt, analyse};

fn lot(n: usize) -> LotSeries {
    let mut rng = ChaCha8Rng::seed_from_u64(n as u64);
    let noise = Normal::new(0.0, 0.02).expect("valid sd");
    let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
    let y = x
        .iter()
        .map(|&v| 0.3 + 0.7 * (-3.0 * v / n as f64).exp() + noise.sample(&mut rng))
        .collect();
    LotSeries {
        x,
        y,
        ..LotSeries::default()
    }
}

fn best_of_three(mut f: impl FnMut()) -> f64 {
    (0..3)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64() * 1e3
        })
        .fold(f64::INFINITY, f64::min)
}

fn main() {
    let sizes: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    let sizes = if sizes.is_empty() {
        vec![1000, 4000, 16000, 50000]
    } else {
        sizes
    };
    let opts = AnalysisOptions::default();
    for n in sizes {
        let l = lot(n);
        let monitor = best_of_three(|| {
            black_box(abrupt::monitor(&l.x, &l.y, 0.5, 4.5));
        });
        let full = best_of_three(|| {
            black_box(analyse(black_box(&l), &opts));
        });
        println!("{n:>7} cycles: monitor {monitor:9.1} ms, full analysis {full:9.1} ms");
    }
}
