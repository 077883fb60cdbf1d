//! Saturated cycles as bounds: does the censored fit recover the deactivation rate where
//! dropping the saturated cycles, or fitting their bounds as if exact, does not?
//!
//! Seeded simulation from known truth (invented values). A lot decays first order,
//! a(x) = exp(−kd·x) with kd = 0.05 per cycle over 12 cycles. Each batch is first order in
//! its substrate, so its conversion is X = 1 − exp(−k·t) with k = k_fresh·a(x) and
//! k_fresh·t = −ln(1 − X_sat)·exp(4.5·kd) = 5.767; the assay reads X with normal noise of sd
//! σ_X = 0.005 (the assay error of the example). The activity computed from a
//! reading is −ln(1 − X)/(k_fresh·t) (k_app over the fresh catalyst's, Levenspiel), with the
//! standard error propagated from the assay, σ_X/((1 − X)·k_fresh·t) (first-order error
//! propagation of k = −ln(1 − X)/t). A reading at or above the saturation limit
//! X_sat = 0.99 gives only the bound computed at X_sat and no standard error. Cycle 1
//! saturates with probability 0.88, cycles 2 to 8 with 0.82, 0.73, 0.59, 0.41, 0.22, 0.08
//! and 0.01 (normal tail, scipy.stats.norm): 31 % of the cycles, the early, most active
//! ones.
//!
//! Each series is analysed three ways, the first-order model named, weighted by the
//! propagated errors: the censored fit (the saturated cycles as bounds), the saturated
//! cycles dropped, and their bounds fitted as exact values (with the standard error the
//! propagation gives at X_sat). The mean fitted kd over the series is compared with the
//! truth. The CI runs 500 series; the grid over noise and rate is `#[ignore]`d (run it with
//! `cargo test --test fit_censored -- --ignored --nocapture`, half a minute in debug).

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::{AnalysisOptions, LotSeries, ModelId, analyse};

/// One scenario of the simulation.
#[derive(Debug, Clone, Copy)]
struct Scenario {
    kd: f64,
    cycles: usize,
    /// k_fresh·t, the fresh catalyst's first-order rate times the batch time.
    k_t: f64,
    sigma_x: f64,
    saturation: f64,
}

const BASE: Scenario = Scenario {
    kd: 0.05,
    cycles: 12,
    // −ln(1 − 0.99)·exp(4.5·0.05).
    k_t: 5.767159235842399,
    sigma_x: 0.005,
    saturation: 0.99,
};

/// Mean fitted kd of each way, its standard error over the series, and the share of
/// censored cycles.
#[derive(Debug)]
struct Outcome {
    censored: (f64, f64),
    dropped: (f64, f64),
    as_exact: (f64, f64),
    share_censored: f64,
    /// Series without a converged fit, each way.
    failed: [usize; 3],
}

fn mean_and_se(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0);
    (m, (var / n).sqrt())
}

fn fitted_kd(series: &LotSeries) -> Option<f64> {
    let opts = AnalysisOptions {
        candidates: vec![ModelId::FirstOrder],
        grid_points: 2,
        ..AnalysisOptions::default()
    };
    let a = analyse(series, &opts);
    a.fit.filter(|f| f.converged).and_then(|f| f.param("kd"))
}

/// One simulated lot: activities from noisy conversion readings, the saturated ones as
/// bounds without a standard error.
fn lot(sc: Scenario, rng: &mut ChaCha8Rng) -> LotSeries {
    let noise = Normal::new(0.0, sc.sigma_x).expect("valid sd");
    let bound = -(1.0 - sc.saturation).ln() / sc.k_t;
    let x: Vec<f64> = (1..=sc.cycles).map(|i| i as f64).collect();
    let mut y = Vec::with_capacity(sc.cycles);
    let mut sd = Vec::with_capacity(sc.cycles);
    let mut censored = Vec::with_capacity(sc.cycles);
    for &xi in &x {
        let k_t = sc.k_t * (-sc.kd * xi).exp();
        let reading = 1.0 - (-k_t).exp() + noise.sample(rng);
        if reading >= sc.saturation {
            y.push(bound);
            sd.push(None);
            censored.push(true);
        } else {
            y.push(-(1.0 - reading).ln() / sc.k_t);
            sd.push(Some(sc.sigma_x / ((1.0 - reading) * sc.k_t)));
            censored.push(false);
        }
    }
    LotSeries {
        x,
        y,
        censored,
        sd,
        ..LotSeries::default()
    }
}

fn simulate(sc: Scenario, series: usize, seed: u64) -> Outcome {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let sd_at_bound = sc.sigma_x / ((1.0 - sc.saturation) * sc.k_t);
    let (mut c, mut d, mut e) = (Vec::new(), Vec::new(), Vec::new());
    let (mut n_cens, mut failed) = (0, [0; 3]);
    for _ in 0..series {
        let with_bounds = lot(sc, &mut rng);
        let LotSeries {
            x,
            y,
            censored: cens,
            sd,
            ..
        } = with_bounds.clone();
        n_cens += cens.iter().filter(|v| **v).count();
        let keep: Vec<usize> = (0..sc.cycles).filter(|&i| !cens[i]).collect();
        let dropped = LotSeries {
            x: keep.iter().map(|&i| x[i]).collect(),
            y: keep.iter().map(|&i| y[i]).collect(),
            sd: keep.iter().map(|&i| sd[i]).collect(),
            ..LotSeries::default()
        };
        let as_exact = LotSeries {
            x: x.clone(),
            y,
            sd: sd.iter().map(|s| s.or(Some(sd_at_bound))).collect(),
            ..LotSeries::default()
        };
        let ways = [&with_bounds, &dropped, &as_exact];
        for (k, (s, into)) in ways.into_iter().zip([&mut c, &mut d, &mut e]).enumerate() {
            match fitted_kd(s) {
                Some(v) => into.push(v),
                None => failed[k] += 1,
            }
        }
    }
    Outcome {
        censored: mean_and_se(&c),
        dropped: mean_and_se(&d),
        as_exact: mean_and_se(&e),
        share_censored: n_cens as f64 / (series * sc.cycles) as f64,
        failed,
    }
}

fn report(sc: Scenario, o: &Outcome) {
    eprintln!(
        "kd {:.3} σ_X {:.4} k·t {:.1}: censored {:.1} % of cycles; mean kd: censored fit {:.4} (±{:.4}), \
         dropped {:.4} (±{:.4}), as exact {:.4} (±{:.4}); series without a fit {:?}",
        sc.kd,
        sc.sigma_x,
        sc.k_t,
        100.0 * o.share_censored,
        o.censored.0,
        o.censored.1,
        o.dropped.0,
        o.dropped.1,
        o.as_exact.0,
        o.as_exact.1,
        o.failed
    );
}

// Measured (500 series, seed 16; truth kd = 0.05, 30.9 % of the cycles censored): mean kd
// of the censored fit 0.0483 ± 0.0004 (−3.4 %), of the saturated cycles dropped
// 0.0434 ± 0.0004 (−13 %), of the bounds fitted as exact 0.0385 ± 0.0004 (−23 %; 4 series
// without a converged fit, whose kd ran to zero, left out, so the true bias is larger).
// Before the weights were taken at the fitted values (weights from the observed readings)
// the censored fit gave −7.0 % here.
#[test]
fn censored_fit_recovers_the_rate_where_dropping_or_exact_bounds_do_not() {
    let o = simulate(BASE, 500, 16);
    report(BASE, &o);
    let rel = |m: f64| (m - BASE.kd) / BASE.kd;
    assert_eq!(o.failed[0], 0);
    assert!(
        (0.28..=0.36).contains(&o.share_censored),
        "{}",
        o.share_censored
    );
    assert!(
        rel(o.censored.0).abs() < 0.05,
        "censored fit {:?}",
        o.censored
    );
    // Biased: off the truth by more than five standard errors of their means.
    for (what, (m, se)) in [("dropped", o.dropped), ("as exact", o.as_exact)] {
        assert!((m - BASE.kd).abs() > 5.0 * se, "{what}: {m} ± {se}");
    }
}

// Measured (1,000 series per cell; mean kd of the censored fit / dropped / as exact):
//   kd 0.05: σ_X 0.001 0.0499 / 0.0496 / 0.0178; 0.002 0.0500 / 0.0488 / 0.0320;
//            0.005 0.0486 / 0.0432 / 0.0387
//   kd 0.1:  σ_X 0.001 0.1000 / 0.1000 / 0.0655; 0.002 0.1001 / 0.0999 / 0.0724;
//            0.005 0.0999 / 0.0983 / 0.0809
//   kd 0.2:  σ_X 0.001 0.2000 / 0.2000 / 0.1980; 0.002 0.2000 / 0.2000 / 0.1979;
//            0.005 0.2002 / 0.1999 / 0.1953
// The censored fit stays within 3 % everywhere. Fitting the bounds as exact is always
// biased low; dropping the saturated cycles is biased where the assay error is large
// against the distance of the early cycles from the limit (−14 % at kd 0.05, σ_X 0.005),
// and nearly unbiased otherwise, at the cost of the information the bounds carry.
#[test]
#[ignore = "the grid over noise and rate: half a minute in a debug build"]
fn censored_fit_grid() {
    let mut outside = Vec::new();
    let mut seed = 100;
    for kd in [0.05, 0.1, 0.2] {
        for sigma_x in [0.001, 0.002, 0.005] {
            // Batch time set so that cycles 1 to 4 saturate and cycle 5 about half the time.
            let sc = Scenario {
                kd,
                sigma_x,
                k_t: -(1.0 - BASE.saturation).ln() * (kd * 4.5).exp(),
                ..BASE
            };
            seed += 1;
            let o = simulate(sc, 1000, seed);
            report(sc, &o);
            if ((o.censored.0 - kd) / kd).abs() >= 0.05 {
                outside.push(format!("kd {kd} σ_X {sigma_x}: {:?}", o.censored));
            }
        }
    }
    assert!(
        outside.is_empty(),
        "censored fit off by 5 % or more: {outside:#?}"
    );
}

// Measured: 0.872 of 500 lots (seed 17); 0.876 of 2,000 (seed 18), a little below the
// nominal 90 %, from the fit's remaining 3 % bias in kd at this assay error.
#[test]
fn censored_forecast_interval_covers_the_true_crossing() {
    // The criterion "half the fresh activity" is crossed at x* = ln 2/kd = 13.86, two
    // cycles after the data end. A trial covers when the stated interval contains x*
    // ([lower, upper], or [lower, ∞) when the upper end does not close).
    let x_true = 2f64.ln() / BASE.kd;
    let mut rng = ChaCha8Rng::seed_from_u64(17);
    let opts = AnalysisOptions {
        candidates: vec![ModelId::FirstOrder],
        grid_points: 2,
        ..AnalysisOptions::default()
    };
    let trials = 500;
    let (mut covered, mut with_bounds) = (0, 0);
    for _ in 0..trials {
        let a = analyse(&lot(BASE, &mut rng), &opts);
        // A lot none of whose cycles saturated (probability 0.0015) is least squares.
        if a.fit.as_ref().is_some_and(|f| f.censored.is_some()) {
            with_bounds += 1;
        }
        if let Some(fc) = &a.forecast
            && fc.lower.is_some_and(|l| l <= x_true)
            && fc.upper.is_none_or(|u| x_true <= u)
        {
            covered += 1;
        }
    }
    let c = covered as f64 / trials as f64;
    eprintln!(
        "censored fit: 90 % forecast interval covers x* in {c:.3} of {trials} lots \
         ({with_bounds} fitted with bounds)"
    );
    assert!(with_bounds >= trials - 5);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}
