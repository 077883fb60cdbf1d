//! Step changes (poisoning, a bad feed lot) by seeded simulation from known truth:
//! first-order decay a0 = 1, kd = 0.03, Gaussian noise sd 0.02; a 20 % drop of activity
//! from cycle 10 on. The detection must persist: flagged 2, 4 and 10 cycles after the step
//! (series ending at cycles 12, 14 and 20). Measured on 2,000 series each (the ignored
//! run below, seeds 512/514/520, `cargo test --release --test fit_step -- --ignored
//! --nocapture`): 97.6 %, 97.0 % and 96.6 % (the detector before, 93.5 %, 94.3 % and
//! 93.6 %); on 5,000 step-free series of 15 cycles (seed 700), false alarms at the newest
//! cycle in 0.24 % of first-order, 0.06 % of second-order and 1.38 % of straight-line
//! decays (before: 2.8 %, 0.8 %, 5.3 %). The CI runs smaller samples whose limits fail the
//! detector before. The monitor that compares the level-shift statistics with critical
//! values instead of p-values gave the same figures to the last digit (same seeds).
//! After the change the fresh activity stays anchored to the cycles before.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use turnbook::fit::{
    AnalysisOptions, ForecastStatus, LotAnalysis, LotSeries, ModelId, analyse, analysis_json,
};

const KD: f64 = 0.03;
const STEP_AT: usize = 10;

fn truth(x: f64, step: f64) -> f64 {
    let base = (-KD * x).exp();
    if x >= STEP_AT as f64 {
        base * (1.0 - step)
    } else {
        base
    }
}

fn lot(rng: &mut ChaCha8Rng, n: usize, step: f64, model: ModelId) -> LotSeries {
    let noise = Normal::new(0.0, 0.02).expect("valid sd");
    let x: Vec<f64> = (1..=n).map(|i| i as f64).collect();
    let y = x
        .iter()
        .map(|&v| {
            let clean = match model {
                ModelId::FirstOrder => truth(v, step),
                ModelId::SecondOrder => 1.0 / (1.0 + 0.04 * v),
                ModelId::Linear => 1.0 - 0.02 * v,
                _ => unreachable!(),
            };
            clean + noise.sample(rng)
        })
        .collect();
    LotSeries {
        x,
        y,
        ..LotSeries::default()
    }
}

fn run(n: usize, step: f64, series: usize, seed: u64, model: ModelId) -> Vec<LotAnalysis> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let opts = AnalysisOptions {
        grid_points: 2,
        ..AnalysisOptions::default()
    };
    (0..series)
        .map(|_| analyse(&lot(&mut rng, n, step, model), &opts))
        .collect()
}

fn share(v: &[LotAnalysis], f: impl Fn(&LotAnalysis) -> bool) -> f64 {
    v.iter().filter(|a| f(a)).count() as f64 / v.len() as f64
}

fn suspected(a: &LotAnalysis) -> bool {
    a.abrupt.as_ref().is_some_and(|b| b.suspected)
}

#[test]
fn a_20_percent_step_is_flagged_and_stays_flagged() {
    for (after, seed) in [(2, 21), (4, 22), (10, 23)] {
        let n = STEP_AT + after;
        let v = run(n, 0.20, 400, seed, ModelId::FirstOrder);
        let power = share(&v, suspected);
        let located = share(&v, |a| {
            a.abrupt.as_ref().and_then(|b| b.change_at) == Some(STEP_AT as f64)
        });
        eprintln!("{after} cycles after the step: flagged {power:.3}, located at 10 {located:.3}");
        assert!(power >= 0.95, "{after} cycles after: power {power}");
        assert!(located >= 0.85, "{after} cycles after: located {located}");
    }
}

#[test]
fn step_free_lots_rarely_alarm() {
    // Expected (the large run): 0.2 %, 0.03 % and 1.3 %; the detector before this one
    // alarmed in 2.8 %, 0.8 % and 5.3 %. The limits leave room for sampling error
    // (sd ≈ 0.4 points at 1.3 % on 1,000 series) and still fail that detector.
    for (model, seed, limit) in [
        (ModelId::FirstOrder, 31, 0.015),
        (ModelId::SecondOrder, 32, 0.015),
        (ModelId::Linear, 33, 0.025),
    ] {
        let v = run(15, 0.0, 1000, seed, model);
        let alarms = share(&v, suspected);
        let changes = share(&v, |a| {
            a.abrupt.as_ref().is_some_and(|b| b.change_at.is_some())
        });
        eprintln!("{model}: false alarms {alarms:.4}, changes accepted {changes:.4}");
        assert!(alarms <= limit, "{model}: false alarms {alarms}");
    }
}

#[test]
fn after_a_step_fresh_activity_stays_anchored_and_the_forecast_waits() {
    // Two cycles of the new level: withheld, since cycle 10, two more cycles needed.
    let v = run(STEP_AT + 1, 0.20, 100, 41, ModelId::FirstOrder);
    let withheld = share(&v, |a| {
        a.forecast.as_ref().is_some_and(|f| {
            f.status == ForecastStatus::Withheld
                && f.withheld_since == Some(STEP_AT as f64)
                && f.more_cycles_needed == Some(2)
        })
    });
    eprintln!("withheld {withheld:.3}");
    assert!(withheld >= 0.9, "withheld {withheld}");
    // Ten cycles of the new level: the criterion (half the fresh activity) is anchored to
    // the cycles before the change, close to the true 0.5, not lowered by the step.
    let v = run(STEP_AT + 9, 0.20, 100, 42, ModelId::FirstOrder);
    let anchored = share(&v, |a| {
        a.forecast
            .as_ref()
            .and_then(|f| f.threshold)
            .is_some_and(|t| (t - 0.5).abs() < 0.03)
    });
    let trend_before = share(&v, |a| a.trend_cycles == STEP_AT - 1);
    eprintln!("anchored {anchored:.3}, trend on the cycles before {trend_before:.3}");
    assert!(
        anchored >= 0.9 && trend_before >= 0.85,
        "{anchored} {trend_before}"
    );
    // The drop's interval covers the true drop 0.2·exp(−0.3) in most series.
    let true_drop = 0.2 * (-KD * STEP_AT as f64).exp();
    let covered = share(&v, |a| {
        a.abrupt
            .as_ref()
            .and_then(|b| b.shift.as_ref())
            .is_some_and(|s| {
                s.drop_lower.is_some_and(|l| l <= true_drop)
                    && s.drop_upper.is_some_and(|u| true_drop <= u)
            })
    });
    eprintln!("drop interval covers {covered:.3}");
    assert!(covered >= 0.8, "drop covered {covered}");
    // And the JSON says so.
    let js = analysis_json(&v[0]);
    assert_eq!(js["abrupt"]["suspected"], true);
    assert_eq!(js["abrupt"]["change_at"], 10.0);
    assert!(js["abrupt"]["drop"]["value"].as_f64().is_some());
}

#[test]
#[ignore = "a larger run for the report: tens of seconds in a release build"]
fn step_power_and_false_alarms_large() {
    // Series ending at cycle 10 (the first low cycle), 11, 12 (two cycles after the
    // step), 14 (four after) and 20 (ten after).
    for end in [10, 11, 12, 14, 20] {
        let v = run(end, 0.20, 2000, 500 + end as u64, ModelId::FirstOrder);
        eprintln!("ending at cycle {end}: flagged {:.4}", share(&v, suspected));
    }
    for step in [0.05, 0.10, 0.15] {
        let v = run(STEP_AT + 3, step, 2000, 600, ModelId::FirstOrder);
        eprintln!("{step} step, 4 after: flagged {:.4}", share(&v, suspected));
    }
    for model in [ModelId::FirstOrder, ModelId::SecondOrder, ModelId::Linear] {
        let v = run(15, 0.0, 5000, 700, model);
        eprintln!(
            "{model}: false alarms {:.4}, any alarm along the way {:.4}",
            share(&v, suspected),
            share(&v, |a| a
                .abrupt
                .as_ref()
                .and_then(|b| b.cusum.as_ref())
                .is_some_and(|c| c.first_alarm.is_some()))
        );
    }
}
