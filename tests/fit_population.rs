//! Young lots borrowing strength from their family: does the pooled forecast's 90 %
//! interval mean what it says, and is it narrower than the lot's own?
//!
//! Seeded simulation from known truth (an invented catalyst family): every lot's ln kd is
//! drawn from N(ln 0.06, 0.30²) and its a0 from N(1.00, 0.04²); activities scatter about
//! each lot's first-order curve a0·exp(−kd·x) with normal noise of sd 0.03 (3 % of the
//! fresh activity); the criterion is half the fresh activity, so the true crossing is
//! x* = ln 2 / kd. Each trial draws 8 earlier lots of 12–20 cycles, fits each alone
//! through the analysis (as the application stores them), estimates the family prior from
//! those fits (so the prior is estimated, not given), then draws a new lot and analyses its
//! first 3, 4, 5 and 6 cycles with that prior.
//!
//! Measured (500 trials, seed 16, `cargo test --release --test fit_population -- --ignored
//! --nocapture`, fit engine 1.3.1):
//!
//! n | coverage | median width pooled | lot-alone bounded | on those: median width pooled / lot-alone | lot-alone coverage on those | mean own share of ln kd
//! 3 | 0.876 | 8.19 | 0/500 | – | – | 0.57
//! 4 | 0.872 | 6.46 | 381/500 | 5.81 / 18.76 | 0.903 | 0.71
//! 5 | 0.898 | 5.21 | 470/500 | 5.09 / 11.86 | 0.934 | 0.80
//! 6 | 0.862 | 4.47 | 468/500 | 4.48 / 8.67 | 0.925 | 0.86
//!
//! Coverage is within 85–95 % at every n, and wherever the lot-alone interval closes (from
//! four cycles) the pooled one is narrower, by a factor of 3.2 at four cycles and 1.9 at
//! six. (An earlier engine, before the intervals on linearising scales and the profile
//! likelihood, closed the lot-alone interval at four cycles in 23 of 500 trials only, and
//! those covered 61 %.) With μ and τ known (no estimation) the same posterior covered
//! 86–90 %; without the Student-t inflation of the prior (`predictive_inflation`) the
//! estimated prior covered 79–84 %.
//!
//! The CI-fast run (seed 7) uses fewer trials; see `ci_fast_trials` for its band.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::{
    AnalysisOptions, Criterion, FamilyPrior, Forecast, ForecastStatus, LotAnalysis, LotSeries,
    ModelId, analyse,
};

const MEAN_LN_KD: f64 = -2.813_410_716_760_036; // ln 0.06
const SD_LN_KD: f64 = 0.30;
const MEAN_A0: f64 = 1.0;
const SD_A0: f64 = 0.04;
const NOISE: f64 = 0.03;
const EARLIER_LOTS: usize = 8;
const YOUNG: [usize; 4] = [3, 4, 5, 6];

struct Lot {
    a0: f64,
    kd: f64,
    y: Vec<f64>,
}

fn draw_lot(rng: &mut ChaCha8Rng, cycles: usize) -> Lot {
    let z = Normal::new(0.0, 1.0).expect("unit normal");
    let a0 = MEAN_A0 + SD_A0 * z.sample(rng);
    let kd = (MEAN_LN_KD + SD_LN_KD * z.sample(rng)).exp();
    let y = (1..=cycles)
        .map(|n| a0 * (-kd * n as f64).exp() + NOISE * z.sample(rng))
        .collect();
    Lot { a0, kd, y }
}

fn series(y: &[f64]) -> LotSeries {
    LotSeries {
        x: (1..=y.len()).map(|n| n as f64).collect(),
        y: y.to_vec(),
        ..LotSeries::default()
    }
}

/// The family prior from 8 earlier lots, each fitted alone as the application fits it.
fn family_prior(rng: &mut ChaCha8Rng) -> Option<FamilyPrior> {
    let opts = AnalysisOptions {
        candidates: vec![ModelId::FirstOrder],
        ..AnalysisOptions::default()
    };
    let mut estimates = Vec::new();
    for k in 0..EARLIER_LOTS {
        let cycles = rng.random_range(12..=20);
        let lot = draw_lot(rng, cycles);
        let a = analyse(&series(&lot.y), &opts);
        if let Some(e) = a.family_estimate(&format!("E{k}"), ModelId::FirstOrder) {
            estimates.push(e);
        }
    }
    FamilyPrior::from_estimates(ModelId::FirstOrder, &estimates).ok()
}

/// The interval a forecast states: [lower, upper] with None as unbounded, or None when
/// the forecast states no interval for a crossing.
fn interval(f: &Forecast) -> Option<(f64, f64)> {
    let bounds = |f: &Forecast| {
        (
            f.lower.unwrap_or(f64::NEG_INFINITY),
            f.upper.unwrap_or(f64::INFINITY),
        )
    };
    match f.status {
        ForecastStatus::Ahead | ForecastStatus::UnboundedInterval => Some(bounds(f)),
        ForecastStatus::ReachedAlready => Some(bounds(f)),
        // "No significant loss" or "never reached" with a lower limit: [lower, ∞).
        ForecastStatus::NoSignificantTrend | ForecastStatus::NotReached => {
            f.lower.map(|l| (l, f64::INFINITY))
        }
        ForecastStatus::Withheld => None,
    }
}

fn bounded(f: &Forecast) -> bool {
    f.status == ForecastStatus::Ahead && f.lower.is_some() && f.upper.is_some()
}

fn median(mut v: Vec<f64>) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    }
}

#[derive(Default)]
struct Row {
    trials: usize,
    covered: usize,
    widths: Vec<f64>,
    alone_bounded: usize,
    /// On the trials where the lot-alone interval is bounded: (pooled, lot-alone) widths.
    paired: Vec<(f64, f64)>,
    alone_covered_bounded: usize,
    own_share: Vec<f64>,
    no_pooled: usize,
}

fn width(f: &Forecast) -> f64 {
    if bounded(f) {
        f.upper.unwrap_or(f64::INFINITY) - f.lower.unwrap_or(f64::NEG_INFINITY)
    } else {
        f64::INFINITY
    }
}

fn record(row: &mut Row, a: &LotAnalysis, x_true: f64) {
    row.trials += 1;
    let Some(p) = &a.pooled else {
        row.no_pooled += 1;
        return;
    };
    let Some(fc) = p.forecast.as_ref().filter(|_| p.headline) else {
        row.no_pooled += 1;
        return;
    };
    // The headline forecast is the pooled one.
    assert_eq!(a.forecast.as_ref(), Some(fc));
    if interval(fc).is_some_and(|(l, u)| l <= x_true && x_true <= u) {
        row.covered += 1;
    }
    row.widths.push(width(fc));
    row.own_share.extend(p.own_share);
    if let Some(alone) = p.lot_alone.as_ref().filter(|f| bounded(f)) {
        row.alone_bounded += 1;
        row.paired.push((width(fc), width(alone)));
        if interval(alone).is_some_and(|(l, u)| l <= x_true && x_true <= u) {
            row.alone_covered_bounded += 1;
        }
    }
}

/// Runs `trials` trials; returns one row per young-lot length in [`YOUNG`].
fn simulate(trials: usize, seed: u64) -> Vec<Row> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut rows: Vec<Row> = YOUNG.iter().map(|_| Row::default()).collect();
    let mut done = 0;
    while done < trials {
        let Some(prior) = family_prior(&mut rng) else {
            continue;
        };
        let lot = draw_lot(&mut rng, 6);
        let x_true = std::f64::consts::LN_2 / lot.kd;
        assert!(lot.a0 > 0.0);
        let opts = AnalysisOptions {
            criterion: Criterion::FractionOfFresh(0.5),
            confidence: 0.90,
            prior: Some(prior),
            ..AnalysisOptions::default()
        };
        for (row, &n) in rows.iter_mut().zip(YOUNG.iter()) {
            let a = analyse(&series(&lot.y[..n]), &opts);
            record(row, &a, x_true);
        }
        done += 1;
    }
    rows
}

fn table(rows: &[Row]) -> String {
    let mut s = String::from(
        "n | coverage | median width pooled | lot-alone bounded | on those: median width pooled / lot-alone | lot-alone coverage on those | mean own share of ln kd\n",
    );
    for (row, n) in rows.iter().zip(YOUNG) {
        let (pw, aw): (Vec<f64>, Vec<f64>) = row.paired.iter().copied().unzip();
        let share = row.own_share.iter().sum::<f64>() / row.own_share.len().max(1) as f64;
        s.push_str(&format!(
            "{n} | {:.3} | {:.2} | {}/{} | {:.2} / {:.2} | {} | {:.2}{}\n",
            row.covered as f64 / row.trials as f64,
            median(row.widths.clone()),
            row.alone_bounded,
            row.trials,
            median(pw),
            median(aw),
            if row.alone_bounded > 0 {
                format!(
                    "{:.3}",
                    row.alone_covered_bounded as f64 / row.alone_bounded as f64
                )
            } else {
                "-".into()
            },
            share,
            if row.no_pooled > 0 {
                format!(" ({} without a pooled forecast)", row.no_pooled)
            } else {
                String::new()
            }
        ));
    }
    s
}

fn check(rows: &[Row], band: (f64, f64)) {
    for (row, n) in rows.iter().zip(YOUNG) {
        let c = row.covered as f64 / row.trials as f64;
        assert!(
            band.0 <= c && c <= band.1,
            "n = {n}: coverage {c} outside {band:?}"
        );
        assert!(
            row.no_pooled * 50 <= row.trials,
            "n = {n}: too many trials without a pooled forecast"
        );
        // The width claim, wherever the lot-alone interval closes in any trial.
        if !row.paired.is_empty() {
            let (pw, aw): (Vec<f64>, Vec<f64>) = row.paired.iter().copied().unzip();
            assert!(
                median(pw.clone()) < median(aw.clone()),
                "n = {n}: pooled {} not narrower than lot-alone {}",
                median(pw),
                median(aw)
            );
        }
    }
    // The lot's own data take over as they accumulate.
    let shares: Vec<f64> = rows
        .iter()
        .map(|r| r.own_share.iter().sum::<f64>() / r.own_share.len().max(1) as f64)
        .collect();
    assert!(shares.windows(2).all(|w| w[0] < w[1]), "{shares:?}");
}

/// CI-fast: 300 trials (about 6 s in debug). The binomial sd of a coverage near 0.90
/// over 300 trials is √(0.9·0.1/300) ≈ 0.017, so the 85–95 % claim is checked with about
/// 1.5 sd of room on each side: 0.82–0.97.
#[test]
fn pooled_forecast_covers_and_is_narrower_ci_fast() {
    let rows = simulate(300, 7);
    eprintln!("{}", table(&rows));
    check(&rows, (0.82, 0.97));
}

/// The full run whose figures are quoted at the top of this file.
#[test]
#[ignore = "500 trials: about 12 s in debug; run with --ignored"]
fn pooled_forecast_covers_and_is_narrower_500_trials() {
    let rows = simulate(500, 16);
    eprintln!("{}", table(&rows));
    check(&rows, (0.85, 0.95));
}

/// A lot with many cycles of its own is fitted as by itself: the prior hardly moves it.
#[test]
fn own_data_take_over() {
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let prior = family_prior(&mut rng).expect("a prior");
    // A lot far from the family: kd = 0.15 where the family is near 0.06.
    let z = Normal::new(0.0, NOISE).expect("sd");
    let y: Vec<f64> = (1..=30)
        .map(|n| (-0.15 * n as f64).exp() + z.sample(&mut rng))
        .collect();
    let opts = AnalysisOptions {
        candidates: vec![ModelId::FirstOrder],
        prior: Some(prior),
        ..AnalysisOptions::default()
    };
    let kd_of = |a: &LotAnalysis| {
        a.pooled
            .as_ref()
            .and_then(|p| p.fit.as_ref())
            .and_then(|f| f.param("kd"))
            .unwrap_or(f64::NAN)
    };
    let share_of = |a: &LotAnalysis| a.pooled.as_ref().and_then(|p| p.own_share).unwrap_or(0.0);
    let young = analyse(&series(&y[..3]), &opts);
    let old = analyse(&series(&y), &opts);
    let alone = old
        .fit
        .as_ref()
        .and_then(|f| f.param("kd"))
        .expect("own fit");
    eprintln!(
        "kd at 3 cycles {:.4} (own share {:.2}), at 30 {:.4} (own share {:.2}), alone {alone:.4}",
        kd_of(&young),
        share_of(&young),
        kd_of(&old),
        share_of(&old)
    );
    assert!(share_of(&old) > 0.95 && share_of(&young) < share_of(&old));
    assert!((kd_of(&old) - alone).abs() < 0.02 * alone);
    assert!((kd_of(&young) - alone).abs() > (kd_of(&old) - alone).abs());
}

/// A step change keeps precedence: a forecast withheld after a change stays withheld when a
/// family prior is given, and the prior is only shown. Truth as tests/fit_step.rs: first
/// order with kd = 0.03, noise sd 0.02, a 20 % drop from cycle 10; two cycles of the new
/// level (series of 11 cycles, seed 41 as there).
#[test]
fn a_withheld_forecast_stays_withheld() {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let prior = family_prior(&mut rng).expect("a prior");
    let mut rng = ChaCha8Rng::seed_from_u64(41);
    let z = Normal::new(0.0, 0.02).expect("sd");
    let mut withheld = 0;
    for _ in 0..20 {
        let y: Vec<f64> = (1..=11)
            .map(|n| {
                let step = if n >= 10 { 0.8 } else { 1.0 };
                (-0.03 * n as f64).exp() * step + z.sample(&mut rng)
            })
            .collect();
        let plain = analyse(&series(&y), &AnalysisOptions::default());
        let opts = AnalysisOptions {
            prior: Some(prior.clone()),
            ..AnalysisOptions::default()
        };
        let a = analyse(&series(&y), &opts);
        if plain.forecast.as_ref().map(|f| f.status) == Some(ForecastStatus::Withheld) {
            withheld += 1;
            assert_eq!(a.forecast, plain.forecast);
            assert_eq!(a.next_cycle, plain.next_cycle);
            let p = a.pooled.as_ref().expect("the prior is shown");
            assert!(!p.headline && p.why_not.is_some() && p.forecast.is_none());
        }
    }
    assert!(withheld >= 15, "only {withheld} of 20 withheld");
}
