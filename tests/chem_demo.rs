//! The chemistry on the demonstration plant's own data, through the application layer:
//! the Pd/C lot is registered 50 % water-wet, its initial TOF falls with activity while
//! its average TOF stays flat, and the cycle table states both definitions.

mod common;

use std::process::Command;

use turnbook::config::Config;
use turnbook::notebook::{cycle_lines, known_lot, lot_report_html};

fn demo() -> (tempfile::TempDir, Config) {
    let dir = tempfile::tempdir().unwrap();
    let plant = dir.path().join("plant");
    let out = Command::new(common::turnbook_binary())
        .args(["demo", "--no-live", "--dir"])
        .arg(&plant)
        .output()
        .unwrap();
    assert!(out.status.success(), "demo failed: {out:?}");
    let cfg = Config::load(&plant.join("turnbook.toml")).unwrap();
    (dir, cfg)
}

#[test]
fn initial_tof_falls_with_activity_while_average_tof_stays() {
    let (_dir, cfg) = demo();
    let s = known_lot(&cfg, "PD-C-2611-A").unwrap();
    let rec = s.record.as_ref().unwrap();
    // The lot sheet gives the paste's water content: metal on the dry mass,
    // 10.0 g × (1 − 0.50) × 5 % / 106.42 g/mol = 2.349182e-3 mol Pd in cycle 1.
    assert_eq!(rec.water_content_wt_pct, Some(50.0));
    let m1 = s.cycles[0].metrics.as_ref().unwrap();
    let n1 = m1.metal_mol.unwrap();
    assert!((n1 - 10.0 * 0.5 * 0.05 / 106.42).abs() < 1e-12, "{n1}");
    assert!(!s.attention.iter().any(|a| a.contains("water content")));
    assert_eq!(s.reference_cycle, Some(1));

    let lines = cycle_lines(&s);
    assert_eq!(lines.len(), 14);
    let first = &lines[0];
    let last = lines.last().unwrap();
    let tof0 = |l: &turnbook::notebook::CycleLine| l.tof_initial_per_h.unwrap();
    let avg = |l: &turnbook::notebook::CycleLine| l.tof_per_h.unwrap();
    let act = |l: &turnbook::notebook::CycleLine| l.activity.unwrap();
    // Measured on the demo (seeded, the same every run): cycle 1 initial TOF 920.6 h⁻¹,
    // average TOF 243.5 h⁻¹, activity 1; cycle 14 initial TOF 533.2 h⁻¹ (0.579 of cycle
    // 1), average TOF 250.3 h⁻¹ (1.028 of cycle 1), activity 0.574. (Before the water
    // content was registered the average TOF read 121.7 → 125.2 h⁻¹: the wet mass
    // counted as dry doubled the metal.)
    let tof0_ratio = tof0(last) / tof0(first);
    let avg_ratio = avg(last) / avg(first);
    assert!(act(last) < 0.7, "activity {}", act(last));
    assert!(
        tof0_ratio < 0.7,
        "initial TOF fell to {tof0_ratio} of cycle 1"
    );
    assert!(
        (0.95..1.08).contains(&avg_ratio),
        "average TOF moved to {avg_ratio} of cycle 1"
    );
    // Cycle by cycle the initial TOF follows activity exactly, but for temperature: both
    // are k_app per catalyst-to-substrate ratio, activity brought to the reference
    // temperature by Arrhenius (Ea = 45 kJ/mol, T_ref = 60 °C in the demo's
    // configuration) and the initial TOF at the batch's own temperature. So
    // TOF₀,n/TOF₀,1 = a_n · exp[−(Ea/R)(1/T_n − 1/T_ref)] / exp[−(Ea/R)(1/T_1 − 1/T_ref)].
    let ea_over_r = 45_000.0 / 8.314_462_618;
    let t_ref = 60.0 + 273.15;
    let at_t = |l: &turnbook::notebook::CycleLine| {
        let t = l.temperature_c.unwrap() + 273.15;
        (-ea_over_r * (1.0 / t - 1.0 / t_ref)).exp()
    };
    for l in &lines {
        let want = act(l) * at_t(l) / at_t(first);
        let got = tof0(l) / tof0(first);
        assert!(
            (got - want).abs() < 1e-9 * want,
            "cycle {}: initial TOF ratio {got}, activity × Arrhenius {want}",
            l.cycle
        );
    }
    // TON per mol metal available is at least TON per mol charged (metal only leaves).
    for l in &lines[1..] {
        assert!(l.ton_per_metal_available.unwrap() >= l.ton.unwrap());
    }
}

#[test]
fn cycles_output_states_the_definitions() {
    let (_dir, cfg) = demo();
    let out = Command::new(common::turnbook_binary())
        .args(["--config"])
        .arg(&cfg.source)
        .args(["cycles", "PD-C-2611-A", "--format", "json"])
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["activity_basis"], "catalyst-ratio");
    assert_eq!(v["activity_reference_cycle"], 1);
    assert!(
        v["tof_initial_definition"]
            .as_str()
            .unwrap()
            .contains("k_app")
    );
    let c1 = &v["cycles"][0];
    for key in [
        "tof_average_per_h",
        "tof_initial_per_h",
        "ton_per_metal_available",
        "metal_available_mmol",
        "activity_per_catalyst_ratio",
        "activity_per_metal_charged",
        "activity_se",
    ] {
        assert!(c1.get(key).is_some(), "no {key} in {c1}");
    }
    assert_eq!(c1["activity_per_catalyst_ratio"], 1.0);
    assert!(c1["activity_per_metal_charged"].is_null());
    // The table says which TOF is which.
    let out = Command::new(common::turnbook_binary())
        .args(["--config"])
        .arg(&cfg.source)
        .args(["cycles", "PD-C-2611-A"])
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("TOF avg"), "{text}");
    assert!(text.contains("initial TOF"), "{text}");
    assert!(text.contains("catalyst-to-substrate ratio"), "{text}");
}

#[test]
fn the_report_explains_activity_and_both_tofs() {
    let (_dir, cfg) = demo();
    let html = lot_report_html(&cfg, "PD-C-2611-A").unwrap();
    let defs = html
        .split("id=\"definitions\"")
        .nth(1)
        .expect("a definitions list under the cycle table");
    assert!(defs.contains("catalyst-to-substrate ratio"), "{defs}");
    assert!(defs.contains("Activity 1 is cycle 1. A censored"), "{defs}");
    assert!(!defs.contains(".."), "a doubled full stop: {defs}");
    assert!(defs.contains("initial TOF") && defs.contains("average TOF"));
    assert!(html.contains("<th>initial TOF (h⁻¹)</th>"));
    assert!(html.contains("<th>TON (per mol metal available)</th>"));
    let water = html
        .split("Water content as charged</dt><dd>")
        .nth(1)
        .unwrap_or_default();
    assert!(water.starts_with("50"), "{}", &water[..40.min(water.len())]);
    assert!(water.contains("wt % (metal on the dry mass)"));
    assert!(html.contains("activity (relative to cycle 1, per catalyst-to-substrate ratio)"));
    // The methods behind the forecast, each with its source.
    let methods = html
        .split("id=\"methods\"")
        .nth(1)
        .expect("a methods list under the definitions");
    for source in [
        "Page 1954",
        "Burnham &amp; Anderson 2002",
        "Hurvich &amp; Tsai 1989",
        "Turek &amp; Fletcher 2012",
        "Chow 1960",
    ] {
        assert!(methods.contains(source), "{source} missing: {methods}");
    }
}
