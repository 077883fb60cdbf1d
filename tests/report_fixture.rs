//! A synthetic lot for the report tests (invented demo data, no real plant or product):
//! lot "PD-DEMO-07", 5 wt % Pd on carbon, 14 cycles of a hydrogenation whose activity
//! decays first-order in the cycle number with a little deterministic scatter.
//!
//! The fit shown in the report is computed here, independently of the fit module, by
//! ordinary least squares on ln(activity) (first-order decay is linear in ln a), with the
//! band and the forecast interval from the delta method and Student-t quantiles (statrs).
//! Other report tests include this file with `#[path]`.

#![allow(dead_code)]

use statrs::distribution::{ContinuousCDF, StudentsT};
use turnbook::model::{LotRecord, Quantity};
use turnbook::report::*;

/// Pd molar mass, g/mol (IUPAC standard atomic weight 106.42, recalled from memory).
const PD_G_PER_MOL: f64 = 106.42;
/// Conversion at or above which a cycle is censored (the design's example value).
pub const SATURATION: f64 = 0.995;
pub const THRESHOLD: f64 = 0.55;

/// The fit of ln a = b0 + b1 x, with what the report needs from it.
pub struct LogLinearFit {
    pub b0: f64,
    pub b1: f64,
    /// Covariance of (b0, b1): s² (XᵀX)⁻¹.
    pub cov: [[f64; 2]; 2],
    pub dof: f64,
    pub t_quantile: f64,
}

impl LogLinearFit {
    pub fn fit(points: &[(f64, f64)], level: f64) -> LogLinearFit {
        let n = points.len() as f64;
        let (sx, sy) = points
            .iter()
            .fold((0.0, 0.0), |(a, b), &(x, y)| (a + x, b + y.ln()));
        let (mx, my) = (sx / n, sy / n);
        let sxx: f64 = points.iter().map(|&(x, _)| (x - mx).powi(2)).sum();
        let sxy: f64 = points.iter().map(|&(x, y)| (x - mx) * (y.ln() - my)).sum();
        let b1 = sxy / sxx;
        let b0 = my - b1 * mx;
        let rss: f64 = points
            .iter()
            .map(|&(x, y)| (y.ln() - b0 - b1 * x).powi(2))
            .sum();
        let dof = n - 2.0;
        let s2 = rss / dof;
        let var_b1 = s2 / sxx;
        let var_b0 = s2 * (1.0 / n + mx * mx / sxx);
        let cov01 = -mx * s2 / sxx;
        let t = StudentsT::new(0.0, 1.0, dof).expect("dof > 0");
        LogLinearFit {
            b0,
            b1,
            cov: [[var_b0, cov01], [cov01, var_b1]],
            dof,
            t_quantile: t.inverse_cdf(0.5 + level / 2.0),
        }
    }

    pub fn y(&self, x: f64) -> f64 {
        (self.b0 + self.b1 * x).exp()
    }

    /// Confidence band of the mean curve: ln y ± t·se(ln y).
    pub fn band(&self, x: f64) -> (f64, f64) {
        let var = self.cov[0][0] + x * x * self.cov[1][1] + 2.0 * x * self.cov[0][1];
        let half = self.t_quantile * var.max(0.0).sqrt();
        let c = self.b0 + self.b1 * x;
        ((c - half).exp(), (c + half).exp())
    }

    /// x* where y = threshold, and its delta-method interval.
    pub fn crossing(&self, threshold: f64) -> (f64, f64, f64) {
        let xs = (threshold.ln() - self.b0) / self.b1;
        // ∂x*/∂b0 = −1/b1, ∂x*/∂b1 = −x*/b1.
        let g = [-1.0 / self.b1, -xs / self.b1];
        let var = g[0] * g[0] * self.cov[0][0]
            + g[1] * g[1] * self.cov[1][1]
            + 2.0 * g[0] * g[1] * self.cov[0][1];
        let half = self.t_quantile * var.sqrt();
        (xs, xs - half, xs + half)
    }
}

fn scatter(n: u32) -> f64 {
    // Deterministic, zero-mean-ish scatter of a few percent.
    [
        0.012, -0.018, 0.009, 0.021, -0.011, -0.024, 0.016, 0.004, -0.014, 0.019, -0.007, 0.013,
        -0.02, 0.008,
    ][(n as usize - 1) % 14]
}

/// The demo lot with `lot_name`, file names from `file_name` and one correction whose
/// reason is `reason`, so the escaping test can plant hostile text in each.
pub fn demo_lot(lot_name: &str, file_name: &str, reason: &str) -> LotReport {
    let loading = 5.0;
    let charged = 2.0;
    let substrate = 1.8;
    let k1 = 1.45; // h⁻¹, fresh catalyst
    let kd = 0.043; // per cycle
    let mut cycles = Vec::new();
    let mut observed = Vec::new();
    let mut k_ref = None;
    for n in 1..=14u32 {
        let hours = if n == 2 || n == 3 { 5.0 } else { 2.5 };
        let mass = charged * (1.0 - 0.004 * f64::from(n - 1));
        let metal_mol = mass * loading / 100.0 / PD_G_PER_MOL;
        let a_true = (-kd * f64::from(n)).exp() / (-kd).exp() * (1.0 + scatter(n));
        let k = k1 * a_true * mass / charged;
        // The instrument reports conversion to three decimals and no higher than 0.999.
        let x_conv = ((1.0 - (-k * hours).exp()) * 1000.0).round() / 1000.0;
        let x_conv = x_conv.min(0.999);
        let censored = x_conv >= SATURATION;
        let k_app = -(1.0 - x_conv).ln() / hours;
        let k_per_mol = k_app / metal_mol;
        let k_ref_v = *k_ref.get_or_insert(k_per_mol);
        let activity = k_per_mol / k_ref_v;
        let selectivity = 0.97;
        let ton = x_conv * selectivity * substrate / metal_mol;
        let started = format!("2031-03-{:02}T07:30:00", n * 2);
        cycles.push(CycleLine {
            cycle_no: n,
            batch_id: format!("HB-31-{:03}", 100 + n),
            started_at: Some(started),
            values: vec![
                ReportValue {
                    quantity: Quantity::Duration,
                    value: hours * 3600.0,
                },
                ReportValue {
                    quantity: Quantity::Temperature,
                    value: 333.15,
                },
                ReportValue {
                    quantity: Quantity::Substrate,
                    value: substrate,
                },
                ReportValue {
                    quantity: Quantity::CatalystMass,
                    value: mass,
                },
                ReportValue {
                    quantity: Quantity::Conversion,
                    value: x_conv,
                },
                ReportValue {
                    quantity: Quantity::Selectivity,
                    value: selectivity,
                },
                ReportValue {
                    quantity: Quantity::ProductMass,
                    value: 250.0 * x_conv * selectivity,
                },
                ReportValue {
                    quantity: Quantity::MetalInProduct,
                    value: 1.2 + 0.05 * f64::from(n),
                },
                ReportValue {
                    quantity: Quantity::CatalystRecovered,
                    value: mass * 0.996,
                },
            ],
            ton: Some(ton),
            tof_per_h: Some(ton / hours),
            k_app_per_h: Some(k_app),
            activity: Some(activity),
            activity_se: None,
            tof_initial_per_h: None,
            ton_per_metal_available: None,
            metal_charged_mmol: Some(metal_mol * 1000.0),
            metal_available_mmol: None,
            flags: CycleFlags {
                censored,
                corrected: n == 6,
                pending: n == 14,
                ..CycleFlags::default()
            },
            sources: vec![
                SourceRef {
                    file_name: format!("{file_name}-hplc-{n:02}.csv"),
                    sha256: format!("{:064x}", u128::from(n) * 0x9e37_79b9_7f4a_7c15),
                    line: u64::from(n) + 1,
                },
                SourceRef {
                    file_name: "balance-week11.txt".to_string(),
                    sha256: format!("{:064x}", 0xabcdef_u128 + u128::from(n)),
                    line: u64::from(n) * 3,
                },
            ],
        });
        observed.push(ObservedPoint {
            x: f64::from(n),
            y: activity,
            censored,
        });
    }
    let exact: Vec<(f64, f64)> = observed
        .iter()
        .filter(|p| !p.censored)
        .map(|p| (p.x, p.y))
        .collect();
    let level = 0.95;
    let f = LogLinearFit::fit(&exact, level);
    let (xs, lo, hi) = f.crossing(THRESHOLD);
    let t = f.t_quantile;
    let se_a0 = f.cov[0][0].sqrt();
    let se_kd = f.cov[1][1].sqrt();
    let xmax = hi.max(14.0) + 1.0;
    let grid: Vec<f64> = (0..=120).map(|i| xmax * f64::from(i) / 120.0).collect();
    let fit = FitSummary {
        model_id: "first_order".to_string(),
        x_label: "cycle number".to_string(),
        y_label: "activity (relative to cycle 1)".to_string(),
        params: vec![
            ParamLine {
                name: "a0".to_string(),
                value: f.b0.exp(),
                lower: Some((f.b0 - t * se_a0).exp()),
                upper: Some((f.b0 + t * se_a0).exp()),
            },
            ParamLine {
                name: "kd (per cycle)".to_string(),
                value: -f.b1,
                lower: Some(-f.b1 - t * se_kd),
                upper: Some(-f.b1 + t * se_kd),
            },
        ],
        level,
        observed,
        curve: grid.iter().map(|&x| CurvePoint { x, y: f.y(x) }).collect(),
        band: grid
            .iter()
            .map(|&x| {
                let (lower, upper) = f.band(x);
                BandPoint { x, lower, upper }
            })
            .collect(),
        threshold: Some(THRESHOLD),
        forecast: Some(Forecast {
            status: ForecastStatus::Ahead,
            x: Some(xs),
            lower: Some(lo),
            upper: Some(hi),
            confidence: level,
            dates: None,
        }),
    };
    LotReport {
        generated_at: "2031-04-02T09:15:00+02:00".to_string(),
        turnbook_version: env!("CARGO_PKG_VERSION").to_string(),
        identity: LotIdentity {
            record: LotRecord {
                lot: lot_name.to_string(),
                catalyst: "5 % Pd/C, 50 % water wet".to_string(),
                metal: "Pd".to_string(),
                loading_wt_pct: loading,
                charged_mass_g: charged,
                received: Some("2031-02-20".to_string()),
                supplier_lot: Some("S-44-0917".to_string()),
                cost: Some(4180.0),
                site: Some("Demo plant, building 3".to_string()),
                water_content_wt_pct: None,
                family: None,
            },
            currency: Some("EUR".to_string()),
        },
        cycles,
        fit: Some(fit),
        alerts: vec![AlertLine {
            raised_at: "2031-03-26T16:02:11+01:00".to_string(),
            rule: "forecast_within_cycles".to_string(),
            subject: format!("Lot {lot_name}: replacement forecast within 5 cycles"),
            open: true,
        }],
        corrections: vec![CorrectionLine {
            at: "2031-03-13T10:40:00+01:00".to_string(),
            who: "a.chemist".to_string(),
            field: "cycle 6 / product_mass".to_string(),
            old: "2.21".to_string(),
            new: "221.0".to_string(),
            why: reason.to_string(),
        }],
        signoffs: vec![
            SignOffLine {
                who: "q.reviewer".to_string(),
                at: "2031-03-20T08:00:00+01:00".to_string(),
                meaning: "reviewed cycles 1 to 10".to_string(),
                signed_sha256: format!("{:064x}", 0x1234_5678_u128),
                covers_current: false,
                signer: Some("Q. Reviewer".to_string()),
                os_user: Some("q.reviewer".to_string()),
                what: "history of lot PD-DEMO-07".to_string(),
                comment: Some("batch records checked".to_string()),
                later_events: vec![41, 42],
            },
            SignOffLine {
                who: "q.reviewer".to_string(),
                at: "2031-04-01T17:30:00+02:00".to_string(),
                meaning: "reviewed cycles 1 to 14".to_string(),
                signed_sha256: format!("{:064x}", 0x8765_4321_u128),
                covers_current: true,
                signer: Some("Q. Reviewer".to_string()),
                os_user: Some("q.reviewer".to_string()),
                what: "history of lot PD-DEMO-07".to_string(),
                comment: Some("batch records checked".to_string()),
                later_events: Vec::new(),
            },
        ],
        verify: Some(VerifyLine {
            ran_at: "2031-04-02T09:14:58+02:00".to_string(),
            outcome: VerifyOutcome::Intact { entries: 212 },
        }),
        cautions: vec![
            "Store spent catalyst under water in the labelled drum, area 3B.".to_string(),
        ],
        cause_hints: vec![
            "Cycle 9 differs from the 8 cycles before it in: temperature 66.0 °C (usual 60.0 \
             °C, z = 12.1)."
                .to_string(),
        ],
        activity_note: None,
        family: None,
        notes: Vec::new(),
        signoff_state: Default::default(),
    }
}

#[test]
fn fixture_fit_recovers_the_decay_it_was_built_from() {
    let r = demo_lot("PD-DEMO-07", "hplc", "unit typo");
    let fit = r.fit.as_ref().expect("fixture has a fit");
    // The activity was built with kd = 0.043 per cycle; the log-linear fit must find it
    // within its own 95 % interval.
    let kd = &fit.params[1];
    let (lo, hi) = (kd.lower.unwrap(), kd.upper.unwrap());
    assert!(lo < 0.043 && 0.043 < hi, "kd interval {lo}..{hi}");
    // Censored cycles exist (the long runs 2 and 3 saturate) and are left out of the fit.
    assert!(r.cycles.iter().any(|c| c.flags.censored));
    let f = fit.forecast.clone().unwrap();
    assert!(f.lower.unwrap() < f.x.unwrap() && f.x.unwrap() < f.upper.unwrap());
}

#[test]
fn lot_report_round_trips_through_json() {
    let r = demo_lot("PD-DEMO-07", "hplc", "unit typo");
    let json = serde_json::to_string(&r).unwrap();
    let back: LotReport = serde_json::from_str(&json).unwrap();
    // serde_json's default float parser (without its `float_roundtrip` feature) may be a
    // few ULP off, so floats are compared to 1e-15 relative and everything else exactly.
    let a = serde_json::to_value(&r).unwrap();
    let b = serde_json::to_value(&back).unwrap();
    assert!(same_json(&a, &b), "the report changed on a JSON round trip");
}

fn same_json(a: &serde_json::Value, b: &serde_json::Value) -> bool {
    use serde_json::Value as V;
    match (a, b) {
        (V::Number(x), V::Number(y)) => match (x.as_f64(), y.as_f64()) {
            (Some(x), Some(y)) => x == y || (x - y).abs() <= 1e-15 * x.abs().max(y.abs()),
            _ => x == y,
        },
        (V::Array(x), V::Array(y)) => {
            x.len() == y.len() && x.iter().zip(y).all(|(x, y)| same_json(x, y))
        }
        (V::Object(x), V::Object(y)) => {
            x.len() == y.len()
                && x.iter()
                    .all(|(k, v)| y.get(k).is_some_and(|w| same_json(v, w)))
        }
        _ => a == b,
    }
}
