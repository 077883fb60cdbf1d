//! Coverage of the 90 % forecast interval, by seeded simulation from known truth, for `auto`
//! (the Akaike-weighted average over every activity model) and for the true model named
//! alone. Truths (a0 = 1, replacement at half the fresh activity, true crossing at cycle
//! 25): first order, second order, power law of order 1.5 and first order with residual
//! activity; Gaussian noise of sd 0.03 and 0.05; n = 6, 10 and 20 cycles.
//!
//! A trial covers when the interval the analysis states contains the true crossing: for a
//! crossing ahead [lower, upper]; for an unbounded interval or no significant trend
//! [lower, ∞) when a lower bound is stated, and so for a criterion not reached under the
//! fitted curve when the data do not exclude a crossing from some lower limit on; every
//! other state (withheld, reached already, no limit stated) does not cover.
//!
//! The first-order model with residual activity tests the crossing by its profile
//! likelihood, and the average combines the models' tail areas (see `turnbook::fit`'s
//! forecast and average modules). The CI runs a representative subset; the whole grid is
//! `#[ignore]`d (run it with
//! `cargo test --release --test fit_averaging -- --ignored --nocapture`). Ignored
//! diagnostics also draw from a straight-line loss and from the power law across its order
//! m, to show where the cells left outside 85–95 % miss (figures in tests/benches/README.md).

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::{
    AnalysisOptions, Criterion, ForecastStatus, LotAnalysis, LotSeries, ModelId, analyse,
};

const X_TRUE: f64 = 25.0;

/// True parameters giving y(25) = 0.5·y(0) with y(0) = 1.
fn truth(model: ModelId) -> Vec<f64> {
    match model {
        ModelId::FirstOrder => vec![1.0, 2f64.ln() / X_TRUE],
        ModelId::Linear => vec![1.0, 0.5 / X_TRUE],
        ModelId::SecondOrder => vec![1.0, 1.0 / X_TRUE],
        // (1 + 0.5·kd·25)^(−2) = 0.5 ⇒ kd = (√2 − 1)/12.5.
        ModelId::Power => vec![1.0, (2f64.sqrt() - 1.0) / (0.5 * X_TRUE), 1.5],
        // 0.3 + 0.7·exp(−25·kd) = 0.5 ⇒ kd = ln(3.5)/25.
        ModelId::FirstOrderResidual => vec![1.0, 0.3, 3.5f64.ln() / X_TRUE],
        _ => unreachable!("not a simulated truth"),
    }
}

fn covers(a: &LotAnalysis) -> bool {
    let Some(fc) = &a.forecast else {
        return false;
    };
    match fc.status {
        ForecastStatus::Ahead => {
            fc.lower.is_some_and(|l| l <= X_TRUE) && fc.upper.is_some_and(|u| X_TRUE <= u)
        }
        ForecastStatus::UnboundedInterval
        | ForecastStatus::NoSignificantTrend
        | ForecastStatus::NotReached => {
            fc.lower.is_some_and(|l| l <= X_TRUE) && fc.upper.is_none_or(|u| X_TRUE <= u)
        }
        _ => false,
    }
}

/// The analysis of one series drawn from `model` with parameters `p` at `x`, plus noise.
fn simulated(
    model: ModelId,
    p: &[f64],
    x: &[f64],
    noise: &Normal<f64>,
    rng: &mut ChaCha8Rng,
    opts: &AnalysisOptions,
) -> LotAnalysis {
    let y: Vec<f64> = x
        .iter()
        .map(|&v| model.eval(v, p) + noise.sample(rng))
        .collect();
    analyse(
        &LotSeries {
            x: x.to_vec(),
            y,
            ..LotSeries::default()
        },
        opts,
    )
}

/// The analysis of the grid: a 90 % interval on half the fresh activity, with `auto`'s
/// candidates or the true model alone.
fn options(model: ModelId, auto: bool) -> AnalysisOptions {
    AnalysisOptions {
        criterion: Criterion::FractionOfFresh(0.5),
        confidence: 0.90,
        candidates: if auto {
            ModelId::ACTIVITY.to_vec()
        } else {
            vec![model]
        },
        grid_points: 2,
        ..AnalysisOptions::default()
    }
}

/// (coverage, share of trials in each state: ahead, unbounded, no-significant-trend, other).
fn coverage(
    model: ModelId,
    auto: bool,
    sd: f64,
    n: usize,
    trials: usize,
    seed: u64,
) -> (f64, [f64; 4]) {
    let p = truth(model);
    assert!((model.eval(X_TRUE, &p) - 0.5).abs() < 1e-12);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let noise = Normal::new(0.0, sd).expect("valid sd");
    let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
    let opts = options(model, auto);
    let mut covered = 0;
    let mut states = [0usize; 4];
    for _ in 0..trials {
        let a = simulated(model, &p, &x, &noise, &mut rng, &opts);
        if covers(&a) {
            covered += 1;
        }
        let k = match a.forecast.as_ref().map(|f| f.status) {
            Some(ForecastStatus::Ahead) => 0,
            Some(ForecastStatus::UnboundedInterval) => 1,
            Some(ForecastStatus::NoSignificantTrend) => 2,
            _ => 3,
        };
        states[k] += 1;
    }
    let t = trials as f64;
    (covered as f64 / t, states.map(|s| s as f64 / t))
}

fn report(model: ModelId, auto: bool, sd: f64, n: usize, trials: usize, seed: u64) -> f64 {
    let (c, s) = coverage(model, auto, sd, n, trials, seed);
    eprintln!(
        "{:<22} {:<5} sd {sd:.2} n {n:>2}: coverage {c:.3}  (ahead {:.2}, unbounded {:.2}, no-trend {:.2}, other {:.2})",
        model.id(),
        if auto { "auto" } else { "named" },
        s[0],
        s[1],
        s[2],
        s[3]
    );
    c
}

// With 300 trials the binomial sd of a 90 % coverage is 1.7 points: 85–95 % is about
// three sd either side.
const CI_TRIALS: usize = 300;

#[test]
fn auto_covers_first_order_n6() {
    let c = report(ModelId::FirstOrder, true, 0.05, 6, CI_TRIALS, 101);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn auto_covers_second_order_n20() {
    let c = report(ModelId::SecondOrder, true, 0.03, 20, CI_TRIALS, 102);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn auto_covers_residual_activity_n20() {
    let c = report(ModelId::FirstOrderResidual, true, 0.03, 20, CI_TRIALS, 103);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn named_power_covers_n20() {
    let c = report(ModelId::Power, false, 0.03, 20, CI_TRIALS, 104);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

/// The power law named alone at n = 10: 97.8 % with the delta method on the natural scale
/// (1,000 trials), inside 85–95 % on the scale where it is linear in kd.
#[test]
fn named_power_covers_n10() {
    let c = report(ModelId::Power, false, 0.05, 10, CI_TRIALS, 110);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn named_second_order_covers_n10() {
    let c = report(ModelId::SecondOrder, false, 0.05, 10, CI_TRIALS, 105);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn auto_covers_second_order_n10() {
    let c = report(ModelId::SecondOrder, true, 0.03, 10, CI_TRIALS, 106);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn auto_covers_power_n6() {
    let c = report(ModelId::Power, true, 0.05, 6, CI_TRIALS, 107);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn named_residual_activity_covers_n6() {
    let c = report(ModelId::FirstOrderResidual, false, 0.03, 6, CI_TRIALS, 108);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
fn named_residual_activity_covers_n10() {
    let c = report(ModelId::FirstOrderResidual, false, 0.05, 10, CI_TRIALS, 109);
    assert!((0.85..=0.95).contains(&c), "coverage {c}");
}

#[test]
#[ignore = "the whole grid: about a minute in a release build"]
fn full_coverage_grid() {
    let mut outside = Vec::new();
    let mut seed = 1000;
    for model in [
        ModelId::FirstOrder,
        ModelId::SecondOrder,
        ModelId::Power,
        ModelId::FirstOrderResidual,
    ] {
        for sd in [0.03, 0.05] {
            for n in [6, 10, 20] {
                for auto in [false, true] {
                    seed += 1;
                    let c = report(model, auto, sd, n, 1000, seed);
                    // Held to 85–95 %: every cell but these two, printed and left open
                    // (figures and the methods tried in tests/benches/README.md): the power
                    // law named alone at n = 6, sd 0.03 (96.5 % at 10,000 series: six cycles
                    // do not identify the order, no lower end lies above the truth for any
                    // order in 0–5, and upper ends miss more often the larger the order,
                    // `named_power_across_orders`) and the average on first-order data at
                    // n = 10, sd 0.03 (96.0 % at 10,000: first order lies between the straight
                    // line and second order, whose tails the average carries; the straight
                    // line itself is covered in only 83 %, `auto_misses_by_true_model`).
                    let left = sd < 0.04
                        && ((!auto && model == ModelId::Power && n == 6)
                            || (auto && model == ModelId::FirstOrder && n == 10));
                    let held = !left;
                    if held && !(0.85..=0.95).contains(&c) {
                        outside.push(format!("{} auto={auto} sd={sd} n={n}: {c}", model.id()));
                    }
                }
            }
        }
    }
    assert!(outside.is_empty(), "outside 85–95 %: {outside:#?}");
}

/// Where the trials of one cell end: state, reason and whether the fit was held at a bound,
/// with the coverage within each (a diagnostic for the cells outside 85–95 %).
#[test]
#[ignore = "diagnostic"]
fn diagnose_residual_named() {
    use std::collections::BTreeMap;
    for (n, sd) in [(6, 0.03), (10, 0.03), (6, 0.05), (10, 0.05)] {
        let model = ModelId::FirstOrderResidual;
        let p = truth(model);
        let mut rng = ChaCha8Rng::seed_from_u64(77);
        let noise = Normal::new(0.0, sd).expect("valid sd");
        let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
        let opts = options(model, false);
        let mut tally: BTreeMap<String, (usize, usize)> = BTreeMap::new();
        for _ in 0..1000 {
            let a = simulated(model, &p, &x, &noise, &mut rng, &opts);
            let held = a.notes.iter().any(|s| s.contains("physical bound"));
            let key = format!(
                "{:?}/{:?} held={held} lower={} upper={}",
                a.forecast.as_ref().map(|f| f.status),
                a.forecast.as_ref().and_then(|f| f.why_not),
                a.forecast.as_ref().is_some_and(|f| f.lower.is_some()),
                a.forecast.as_ref().is_some_and(|f| f.upper.is_some()),
            );
            let e = tally.entry(key).or_default();
            e.0 += 1;
            e.1 += usize::from(covers(&a));
        }
        eprintln!("n {n} sd {sd}:");
        for (k, (c, cov)) in tally {
            eprintln!("  {k}: {c} trials, {cov} cover");
        }
    }
}

/// The two cells left outside 85–95 %: where their trials end, and on which side the
/// intervals that miss the true crossing miss it.
#[test]
#[ignore = "diagnostic"]
fn diagnose_open_cells() {
    use std::collections::BTreeMap;
    for (model, auto, n, sd, seed) in [
        (ModelId::Power, false, 6, 0.03, 1025u64),
        (ModelId::FirstOrder, true, 10, 0.03, 1004),
    ] {
        let p = truth(model);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let noise = Normal::new(0.0, sd).expect("valid sd");
        let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
        let opts = options(model, auto);
        let mut tally: BTreeMap<String, [usize; 4]> = BTreeMap::new();
        for _ in 0..2000 {
            let a = simulated(model, &p, &x, &noise, &mut rng, &opts);
            let fc = a.forecast.as_ref();
            let key = format!(
                "{:?} chosen={:?} upper={}",
                fc.map(|f| f.status),
                a.chosen.map(|m| m.id()),
                fc.is_some_and(|f| f.upper.is_some()),
            );
            let e = tally.entry(key).or_default();
            e[0] += 1;
            e[1] += usize::from(covers(&a));
            e[2] += usize::from(fc.and_then(|f| f.lower).is_some_and(|l| l > X_TRUE));
            e[3] += usize::from(fc.and_then(|f| f.upper).is_some_and(|u| u < X_TRUE));
        }
        eprintln!("{} auto={auto} n {n} sd {sd}:", model.id());
        for (k, [c, cov, low, high]) in tally {
            eprintln!(
                "  {k}: {c} trials, {cov} cover, lower above truth {low}, upper below {high}"
            );
        }
    }
}

/// Power law parameters of order m with a0 = 1 and y(25) = 0.5:
/// (1 + q·kd·25)^(−1/q) = 0.5, q = m − 1 ⇒ kd = (2^q − 1)/(25·q) (ln 2/25 at m = 1).
fn power_truth(m: f64) -> Vec<f64> {
    let q = m - 1.0;
    let kd = if q.abs() < 1e-12 {
        2f64.ln() / X_TRUE
    } else {
        (2f64.powf(q) - 1.0) / (q * X_TRUE)
    };
    vec![1.0, kd, m]
}

/// Where a cell's intervals miss: (coverage, lower end above the truth, upper end below
/// it, open above), each a share of `trials` series drawn from `model` with parameters `p`.
fn miss_sides(
    model: ModelId,
    p: &[f64],
    auto: bool,
    sd: f64,
    n: usize,
    trials: usize,
    seed: u64,
) -> [f64; 4] {
    assert!((model.eval(X_TRUE, p) - 0.5).abs() < 1e-9);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let noise = Normal::new(0.0, sd).expect("valid sd");
    let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
    let opts = options(model, auto);
    let mut k = [0usize; 4];
    for _ in 0..trials {
        let a = simulated(model, p, &x, &noise, &mut rng, &opts);
        let fc = a.forecast.as_ref();
        k[0] += usize::from(covers(&a));
        k[1] += usize::from(fc.and_then(|f| f.lower).is_some_and(|l| l > X_TRUE));
        k[2] += usize::from(fc.and_then(|f| f.upper).is_some_and(|u| u < X_TRUE));
        k[3] += usize::from(fc.is_some_and(|f| f.upper.is_none()));
    }
    k.map(|c| c as f64 / trials as f64)
}

fn print_sides(label: &str, s: [f64; 4]) {
    eprintln!(
        "{label}: coverage {:.3}  lower above truth {:.3}  upper below {:.3}  open above {:.3}",
        s[0], s[1], s[2], s[3]
    );
}

/// The two cells outside 85–95 % at 10,000 series, two seeds each (one binomial sd about
/// 0.2 points).
#[test]
#[ignore = "diagnostic: about ten seconds in a release build"]
fn open_cells_at_ten_thousand() {
    for (model, auto, n, seeds) in [
        (ModelId::Power, false, 6, [1025u64, 2025]),
        (ModelId::FirstOrder, true, 10, [1004, 2004]),
    ] {
        for seed in seeds {
            let s = miss_sides(model, &truth(model), auto, 0.03, n, 10_000, seed);
            let label = format!("{} auto={auto} n {n} sd 0.03 seed {seed}", model.id());
            print_sides(&label, s);
        }
    }
}

/// The power law named alone, with the true order m across its documented range (the
/// crossing at cycle 25 throughout): where its interval misses. At six cycles the order is
/// not identified (most fits end at m = 0 or m = 5), no lower end lies above the truth, and
/// the upper end misses more often the larger m is.
#[test]
#[ignore = "diagnostic: about a minute in a release build"]
fn named_power_across_orders() {
    for (n, sd) in [(6, 0.03), (6, 0.05), (10, 0.03), (10, 0.05), (20, 0.03)] {
        for m in [0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0] {
            let s = miss_sides(ModelId::Power, &power_truth(m), false, sd, n, 2000, 4242);
            print_sides(&format!("power named n {n:>2} sd {sd} m {m}"), s);
        }
    }
}

/// The power law named alone: its test statistic at the true crossing, against Student's t
/// on n − 3 degrees of freedom, for fits inside the order's range and fits held at its ends.
#[test]
#[ignore = "diagnostic"]
fn diagnose_power_statistic() {
    use turnbook::fit::forecast::FitDecision;
    let model = ModelId::Power;
    for (n, sd, seed) in [(6usize, 0.03, 1025u64), (6, 0.05, 1031), (10, 0.03, 1027)] {
        let t2 = turnbook::fit::t_quantile(0.90, n - 3).expect("defined");
        // Student's t on n − 2 degrees of freedom: a fit held at a bound of m estimates two.
        let t_held = turnbook::fit::t_quantile(0.90, n - 2).expect("defined");
        let p = truth(model);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let noise = Normal::new(0.0, sd).expect("valid sd");
        let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
        let opts = options(model, false);
        // (held at a bound, z at the truth)
        let mut zs: Vec<(bool, f64)> = Vec::new();
        for _ in 0..4000 {
            let a = simulated(model, &p, &x, &noise, &mut rng, &opts);
            let held = a.notes.iter().any(|s| s.contains("physical bound"));
            let Some(fit) = a.fit.as_ref() else { continue };
            let c = 0.5 * fit.predict(0.0);
            let z = FitDecision::new(fit, c, 0.5)
                .root(X_TRUE)
                .unwrap_or(f64::NAN);
            zs.push((held, z));
        }
        for held in [false, true] {
            let mut z: Vec<f64> = zs.iter().filter(|e| e.0 == held).map(|e| e.1).collect();
            z.sort_by(f64::total_cmp);
            let k = z.len() as f64;
            let q = |p: f64| z[((k - 1.0) * p) as usize];
            eprintln!(
                "n {n} sd {sd} held at a bound {held}: {} fits; z > t {:.3}, z < −t {:.3} \
                 (t = {t2:.3}; on n − 2 df {t_held:.3}: z > t {:.3}, z < −t {:.3}); \
                 quantiles 5/50/95 %: {:.2} {:.2} {:.2}",
                z.len(),
                z.iter().filter(|&&v| v > t2).count() as f64 / k,
                z.iter().filter(|&&v| v < -t2).count() as f64 / k,
                z.iter().filter(|&&v| v > t_held).count() as f64 / k,
                z.iter().filter(|&&v| v < -t_held).count() as f64 / k,
                q(0.05),
                q(0.5),
                q(0.95),
            );
        }
    }
}

/// `auto` by true model, the straight line (zero order, the earliest-crossing member of the
/// average) included, with the straight line also named alone: where the intervals miss.
#[test]
#[ignore = "diagnostic: about half a minute in a release build"]
fn auto_misses_by_true_model() {
    for model in [
        ModelId::Linear,
        ModelId::FirstOrder,
        ModelId::Power,
        ModelId::FirstOrderResidual,
        ModelId::SecondOrder,
    ] {
        for (sd, n) in [(0.03, 6), (0.03, 10), (0.05, 10), (0.03, 20)] {
            let s = miss_sides(model, &truth(model), true, sd, n, 4000, 555);
            print_sides(&format!("{} auto n {n} sd {sd}", model.id()), s);
        }
    }
    for (sd, n) in [(0.03, 6), (0.03, 10), (0.05, 10), (0.03, 20)] {
        let s = miss_sides(
            ModelId::Linear,
            &truth(ModelId::Linear),
            false,
            sd,
            n,
            4000,
            555,
        );
        print_sides(&format!("linear named n {n} sd {sd}"), s);
    }
}

/// The power law named alone, with a parametric-bootstrap percentile interval instead of
/// the engine's: data drawn again from the fitted curve with the fitted residual sd, the
/// model fitted to each draw, the 5 and 95 % points of the draws' crossings (a draw that
/// never crosses counts as a crossing at infinity). Efron & Tibshirani, "An Introduction to
/// the Bootstrap", 1993, ch. 13 (recalled from memory). Coverage of the true crossing, to
/// weigh against the engine's interval (`named_power_across_orders`).
#[test]
#[ignore = "diagnostic: a few minutes in a release build"]
fn power_bootstrap_percentile() {
    const DRAWS: usize = 199;
    let crossing = |p: &[f64]| -> f64 {
        let (kd, q) = (p[1], p[2] - 1.0);
        if kd.is_nan() || kd <= 0.0 {
            return f64::INFINITY;
        }
        if q.abs() < 1e-9 {
            2f64.ln() / kd
        } else {
            (2f64.powf(q) - 1.0) / (q * kd)
        }
    };
    for (n, sd, m) in [
        (6usize, 0.03, 0.0),
        (6, 0.03, 1.5),
        (6, 0.03, 3.0),
        (6, 0.03, 5.0),
        (6, 0.05, 1.5),
        (10, 0.03, 1.5),
    ] {
        let p = power_truth(m);
        let mut rng = ChaCha8Rng::seed_from_u64(4242);
        let noise = Normal::new(0.0, sd).expect("valid sd");
        let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
        let opts = options(ModelId::Power, false);
        let (mut covered, mut lower_above, mut upper_below, mut trials) = (0, 0, 0, 0);
        for _ in 0..500 {
            let a = simulated(ModelId::Power, &p, &x, &noise, &mut rng, &opts);
            let Some(fit) = a.fit.as_ref() else { continue };
            let Some(s) = fit.sigma.filter(|s| *s > 0.0) else {
                continue;
            };
            trials += 1;
            let draw_noise = Normal::new(0.0, s).expect("valid sd");
            let mut xs: Vec<f64> = (0..DRAWS)
                .map(|_| {
                    let b = simulated(
                        ModelId::Power,
                        &fit.params,
                        &x,
                        &draw_noise,
                        &mut rng,
                        &opts,
                    );
                    b.fit
                        .as_ref()
                        .map_or(f64::INFINITY, |f| crossing(&f.params))
                })
                .collect();
            xs.sort_by(f64::total_cmp);
            let (lo, hi) = (xs[(DRAWS + 1) / 20 - 1], xs[DRAWS - (DRAWS + 1) / 20]);
            covered += usize::from(lo <= X_TRUE && X_TRUE <= hi);
            lower_above += usize::from(lo > X_TRUE);
            upper_below += usize::from(hi < X_TRUE);
        }
        let k = trials as f64;
        eprintln!(
            "power bootstrap n {n:>2} sd {sd} m {m}: {trials} series; coverage {:.3}  lower \
             above truth {:.3}  upper below {:.3}",
            covered as f64 / k,
            lower_above as f64 / k,
            upper_below as f64 / k
        );
    }
}

/// Where the lower ends of the two open cells lie (4,000 series each, seed 1025): for the
/// power law named alone at six cycles nearly every lower end is the newest cycle (the data
/// give no lower limit), so its interval is in effect [x_last, upper] and misses only above.
#[test]
#[ignore = "diagnostic: a few seconds in a release build"]
fn where_lower_ends_lie() {
    for (model, auto, n) in [
        (ModelId::Power, false, 6usize),
        (ModelId::FirstOrder, true, 10),
    ] {
        let p = truth(model);
        let mut rng = ChaCha8Rng::seed_from_u64(1025);
        let noise = Normal::new(0.0, 0.03).expect("valid sd");
        let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
        let opts = options(model, auto);
        let mut lows = Vec::new();
        for _ in 0..4000 {
            let a = simulated(model, &p, &x, &noise, &mut rng, &opts);
            if let Some(l) = a.forecast.as_ref().and_then(|f| f.lower) {
                lows.push(l);
            }
        }
        lows.sort_by(f64::total_cmp);
        let at_end = lows
            .iter()
            .filter(|&&l| (l - n as f64).abs() < 1e-6)
            .count();
        let q = |p: f64| lows[((lows.len() - 1) as f64 * p) as usize];
        eprintln!(
            "{} auto={auto} n {n}: {} lower ends, {at_end} at the newest cycle; quantiles \
             5/50/95 %: {:.1} {:.1} {:.1}",
            model.id(),
            lows.len(),
            q(0.05),
            q(0.5),
            q(0.95)
        );
    }
}
