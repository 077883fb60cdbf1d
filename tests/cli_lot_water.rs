//! A lot's water content, every way it enters (the `register` command and a lot sheet),
//! the warning for a wet catalyst registered without one, and an assay uncertainty in a
//! profile carried to per-cycle standard errors and the fit's series. Through the real
//! binary and the application layer, on the demo plant (without its live part).

mod common;
use common::run;

use std::path::PathBuf;

use turnbook::config::Config;
use turnbook::notebook::{known_lot, lot_series};

struct Plant {
    _tmp: tempfile::TempDir,
    dir: PathBuf,
    cfg: String,
}

impl Plant {
    fn new() -> Plant {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path().join("plant");
        let out = run(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
        assert_eq!(out.status.code(), Some(0), "{out:?}");
        let cfg = dir.join("turnbook.toml").display().to_string();
        Plant {
            _tmp: tmp,
            dir,
            cfg,
        }
    }

    fn expect(&self, code: i32, args: &[&str]) -> (String, String) {
        let mut all = vec!["--config", self.cfg.as_str()];
        all.extend_from_slice(args);
        let out = run(&all);
        let so = String::from_utf8_lossy(&out.stdout).into_owned();
        let se = String::from_utf8_lossy(&out.stderr).into_owned();
        assert_eq!(out.status.code(), Some(code), "{args:?}\n{so}\n{se}");
        assert!(!se.contains("panicked"), "{se}");
        (so, se)
    }

    fn lot_line(&self, lot: &str) -> serde_json::Value {
        let (so, _) = self.expect(0, &["lots", "--json"]);
        let v: serde_json::Value = serde_json::from_str(&so).unwrap();
        v.as_array()
            .unwrap()
            .iter()
            .find(|l| l["lot"] == lot)
            .cloned()
            .unwrap()
    }
}

#[test]
fn a_wet_catalyst_without_water_content_is_accepted_with_a_warning() {
    let p = Plant::new();
    let (so, se) = p.expect(
        0,
        &[
            "register",
            "PD-C-2612-B",
            "--catalyst",
            "5 % Pd/C, water-wet PASTE",
            "--metal",
            "Pd",
            "--loading",
            "5",
            "--mass",
            "10",
        ],
    );
    assert!(so.contains("registered"), "{so}");
    assert!(
        se.contains("warning:") && se.contains("water content"),
        "{se}"
    );
    let l = p.lot_line("PD-C-2612-B");
    assert!(
        l["flags"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f == "water-content-missing"),
        "{l}"
    );
    assert!(
        l["attention"]
            .as_array()
            .unwrap()
            .iter()
            .any(|a| a.as_str().unwrap().contains("water content")),
        "{l}"
    );
    // Giving the water content settles it: no warning, no flag, and the chain verifies.
    let (_, se) = p.expect(
        0,
        &[
            "register",
            "PD-C-2612-B",
            "--catalyst",
            "5 % Pd/C, water-wet PASTE",
            "--metal",
            "Pd",
            "--loading",
            "5",
            "--mass",
            "10",
            "--water-content",
            "52.5",
            "--reason",
            "water content from the certificate of analysis",
        ],
    );
    assert!(!se.contains("warning"), "{se}");
    let l = p.lot_line("PD-C-2612-B");
    assert!(
        !l["flags"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f == "water-content-missing")
    );
    p.expect(0, &["verify"]);
    let db = rusqlite::Connection::open(p.dir.join("turnbook.db")).unwrap();
    let w: Option<f64> = db
        .query_row(
            "SELECT water_content_wt_pct FROM lots WHERE lot = 'PD-C-2612-B'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(w, Some(52.5));
}

#[test]
fn a_water_content_out_of_range_is_refused_naming_the_option() {
    let p = Plant::new();
    let before = p.lot_line("PD-C-2611-A");
    for bad in ["100", "-1", "NaN"] {
        let option = format!("--water-content={bad}");
        let (_, se) = p.expect(
            2,
            &[
                "register",
                "PD-C-2699-Z",
                "--catalyst",
                "5 % Pd/C",
                "--metal",
                "Pd",
                "--loading",
                "5",
                "--mass",
                "10",
                &option,
            ],
        );
        assert!(
            se.contains("--water-content") && se.contains("below 100"),
            "{bad}: {se}"
        );
    }
    assert_eq!(p.lot_line("PD-C-2611-A"), before);
}

#[test]
fn a_lot_sheet_carries_the_water_content_and_refuses_a_bad_one() {
    let p = Plant::new();
    let sheet = p.dir.join("exports/lots/lot-sheet-2026-12.csv");
    std::fs::write(
        &sheet,
        "lot,catalyst,metal,loading (%),charged mass (g),received,supplier lot,cost,water (%)\n\
         PD-C-2612-C,5 % Pd/C (water-wet paste),Pd,5.0,12.0,2026-11-28,NS-55301,7000,48.5\n",
    )
    .unwrap();
    p.expect(0, &["ingest", sheet.to_str().unwrap()]);
    let cfg = Config::load(std::path::Path::new(&p.cfg)).unwrap();
    let s = known_lot(&cfg, "PD-C-2612-C").unwrap();
    assert_eq!(
        s.record.as_ref().and_then(|r| r.water_content_wt_pct),
        Some(48.5)
    );
    // Registered with its water content: no warning about a wet charge (a forecast of the
    // young lot may still ask for attention).
    assert!(
        !s.attention
            .iter()
            .any(|a| a.contains("water") || a.contains("wet")),
        "{:?}",
        s.attention
    );
    // 100 % water is no catalyst: the file is rejected, naming line and column key.
    let bad = p.dir.join("exports/lots/lot-sheet-2026-12b.csv");
    std::fs::write(
        &bad,
        "lot,catalyst,metal,loading (%),charged mass (g),received,supplier lot,cost,water (%)\n\
         PD-C-2612-D,5 % Pd/C paste,Pd,5.0,12.0,2026-11-28,NS-55302,7000,100\n",
    )
    .unwrap();
    let (so, se) = p.expect(1, &["ingest", bad.to_str().unwrap()]);
    let all = format!("{so}{se}");
    assert!(
        all.contains("water_content") && all.contains("line 2") && all.contains("below 100"),
        "{all}"
    );
}

#[test]
fn an_assay_uncertainty_gives_standard_errors_and_the_fit_its_weights() {
    let p = Plant::new();
    let text = std::fs::read_to_string(&p.cfg).unwrap();
    let on = text.replace(
        "# conversion_uncertainty = { absolute = 0.005 }",
        "conversion_uncertainty = { absolute = 0.005 }",
    );
    assert_ne!(on, text, "the example configuration names the setting");
    std::fs::write(&p.cfg, on).unwrap();
    let cfg = Config::load(std::path::Path::new(&p.cfg)).unwrap();
    let s = known_lot(&cfg, "PD-C-2611-A").unwrap();
    let series = lot_series(&cfg, &s.cycles);
    assert_eq!(series.sd.len(), series.y.len());
    for (i, c) in s.cycles.iter().enumerate() {
        let m = c.metrics.as_ref().unwrap();
        let x = c.view.get(turnbook::model::Quantity::Conversion).unwrap();
        let t = c.view.get(turnbook::model::Quantity::Duration).unwrap();
        // se(k) = σ_X/((1 − X)·t), in h⁻¹.
        let want = 0.005 / ((1.0 - x) * t) * 3600.0;
        let got = m.k_app_se_per_h.unwrap();
        assert!(
            (got - want).abs() < 1e-12 * want,
            "cycle {}: {got} vs {want}",
            c.cycle
        );
        // The fit's weight is the cycle's own part of activity's error.
        assert_eq!(series.sd[i], m.activity_sd_own);
        assert!(series.sd[i].unwrap() > 0.0);
        let (a, own, se) = (
            m.activity.unwrap(),
            m.activity_sd_own.unwrap(),
            m.activity_se.unwrap(),
        );
        assert!((own - a * got / m.k_app_per_h.unwrap()).abs() < 1e-12);
        if c.cycle > 1 {
            assert!(se > own, "cycle {}: the reference's error adds", c.cycle);
        }
    }
    // Without the setting the series stays unweighted (the earlier behaviour).
    let plain = Config::load(std::path::Path::new(&p.cfg))
        .map(|mut c| {
            for prof in c.profiles.values_mut() {
                prof.conversion_uncertainty = None;
            }
            c
        })
        .unwrap();
    let s = known_lot(&plain, "PD-C-2611-A").unwrap();
    assert!(lot_series(&plain, &s.cycles).sd.is_empty());
}

#[test]
fn a_saturated_first_cycle_moves_the_reference_and_says_so() {
    // Cycle 1 of the demo's Pd lot corrected to X = 0.999 (≥ saturation 0.995): its k_app
    // is only a lower bound, so cycle 2 becomes activity 1, stated in `cycles` and on the
    // lot.
    let p = Plant::new();
    p.expect(
        0,
        &[
            "correct",
            "KV4-H-001",
            "conversion",
            "0.999",
            "--reason",
            "re-assay: full conversion",
        ],
    );
    let (so, _) = p.expect(0, &["cycles", "PD-C-2611-A", "--format", "json"]);
    let v: serde_json::Value = serde_json::from_str(&so).unwrap();
    assert_eq!(v["activity_reference_cycle"], 2);
    assert_eq!(v["activity_reference_moved"], true);
    assert_eq!(v["cycles"][1]["activity_per_catalyst_ratio"], 1.0);
    assert!(
        v["cycles"][0]["flags"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f == "initial-tof-lower-bound")
    );
    let (table, _) = p.expect(0, &["cycles", "PD-C-2611-A"]);
    assert!(table.contains("(cycle 2 = 1)"), "{table}");
    assert!(
        table.contains("activity is relative to cycle 2, the first uncensored cycle"),
        "{table}"
    );
    let l = p.lot_line("PD-C-2611-A");
    assert!(
        l["flags"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f == "reference-first-uncensored"),
        "{l}"
    );
}
