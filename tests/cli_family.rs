//! A family of lots in a fresh database, through the binary: the earlier lots' stored fits
//! give the young lot its prior, and `fit LOT` (text and --json) names how many lots the
//! prior came from and shows the forecast with and without it.
//!
//! Invented data: an imaginary plant's hydrogenation over a Pd catalyst family. Each lot's
//! activity falls as exp(−kd·(n − 1)) with kd near 0.06 per cycle (a small alternating
//! scatter added); a lot of another family deactivates ten times faster and must not enter
//! the prior. Batches run 90 min on 1.0 mol substrate with a constant charge, so activity
//! is the ratio of k_app = −ln(1 − X)/t to the first cycle's.

mod common;
use common::run;

use std::path::{Path, PathBuf};

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

const CONFIG: &str = r#"
database = "t.db"
quarantine = "quarantine"

[fitting]
criterion_fraction = 0.5

[profiles.reactor]
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.cycle_no = { header = "Cycle" }
columns.duration = { header = "Time", unit = "min" }
columns.conversion = { header = "Conversion", unit = "%" }
columns.substrate = { header = "Substrate", unit = "mol" }
columns.catalyst_mass = { header = "Catalyst", unit = "g" }

[profiles.sheet]
kind = "lots"
delimiter = ","
columns.lot = { header = "lot" }
columns.catalyst = { header = "catalyst" }
columns.metal = { header = "metal" }
columns.loading = { header = "loading", unit = "%" }
columns.charged_mass = { header = "mass", unit = "g" }
columns.family = { header = "family" }

[[folders]]
path = "exports/reactor"
profile = "reactor"

[[folders]]
path = "exports/lots"
profile = "sheet"
"#;

/// One lot's export: `cycles` batches with activity exp(−kd·(n − 1)).
fn export(lot: &str, kd: f64, cycles: u32) -> String {
    let mut s = String::from("Batch,Lot,Cycle,Time,Conversion,Substrate,Catalyst\n");
    let k1 = 1.2; // per hour, the fresh lot (invented)
    for n in 1..=cycles {
        let scatter = if n % 2 == 0 { 1.015 } else { 0.985 };
        let a = if n == 1 {
            1.0
        } else {
            (-kd * f64::from(n - 1)).exp() * scatter
        };
        let x = 1.0 - (-k1 * a * 1.5).exp();
        s.push_str(&format!(
            "{lot}-{n:02},{lot},{n},90,{:.3},1.0,2.0\n",
            100.0 * x
        ));
    }
    s
}

fn put(root: &Path, rel: &str, text: &str) -> PathBuf {
    let p = root.join(rel);
    std::fs::create_dir_all(p.parent().unwrap()).unwrap();
    std::fs::write(&p, text).unwrap();
    p
}

#[test]
fn young_lot_borrows_from_its_family() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = put(root, "turnbook.toml", CONFIG);
    let cfg = cfg.to_str().unwrap();
    let tb = |args: &[&str], code: i32| {
        let mut all = vec!["--config", cfg];
        all.extend_from_slice(args);
        let out = run(&all);
        let (so, se) = (text(&out.stdout), text(&out.stderr));
        assert_eq!(out.status.code(), Some(code), "{args:?}\n{so}\n{se}");
        assert!(!se.contains("panicked"), "{se}");
        so
    };
    // The lot sheet: five lots of the family, one of another family; the young lot is
    // registered by hand with --family, in another case and with spaces (same family).
    put(
        root,
        "exports/lots/sheet.csv",
        "lot,catalyst,metal,loading,mass,family\n\
         PN-1,5 % Pd/C,Pd,5,2,Pd nitro\n\
         PN-2,5 % Pd/C,Pd,5,2,Pd nitro\n\
         PN-3,5 % Pd/C,Pd,5,2,Pd nitro\n\
         PN-4,5 % Pd/C,Pd,5,2,Pd nitro\n\
         PN-5,5 % Pd/C,Pd,5,2,Pd nitro\n\
         PN-6,5 % Pd/C,Pd,5,2,Pd nitro\n\
         OT-1,5 % Pd/C,Pd,5,2,other\n",
    );
    tb(&["ingest", root.join("exports/lots").to_str().unwrap()], 0);
    tb(
        &[
            "register",
            "PN-Y",
            "--catalyst",
            "5 % Pd/C",
            "--metal",
            "Pd",
            "--loading",
            "5",
            "--mass",
            "2",
            "--family",
            "  PD NITRO ",
        ],
        0,
    );
    // A blank family is refused, naming the field.
    let out = run(&[
        "--config",
        cfg,
        "register",
        "PN-Z",
        "--catalyst",
        "x",
        "--metal",
        "Pd",
        "--loading",
        "5",
        "--mass",
        "2",
        "--family",
        " ",
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        text(&out.stderr).contains("--family"),
        "{}",
        text(&out.stderr)
    );

    // The earlier lots first (one with only 5 cycles, too few to contribute), then the
    // young lot's four cycles.
    for (lot, kd, n) in [
        ("PN-1", 0.055, 12),
        ("PN-2", 0.065, 14),
        ("PN-3", 0.050, 10),
        ("PN-4", 0.070, 12),
        ("PN-5", 0.060, 16),
        ("PN-6", 0.060, 5),
        ("OT-1", 0.600, 8),
    ] {
        put(
            root,
            &format!("exports/reactor/{lot}.csv"),
            &export(lot, kd, n),
        );
    }
    tb(
        &["ingest", root.join("exports/reactor").to_str().unwrap()],
        0,
    );
    let young = put(root, "later/PN-Y.csv", &export("PN-Y", 0.06, 4));
    tb(
        &["ingest", "--profile", "reactor", young.to_str().unwrap()],
        0,
    );

    let so = tb(&["fit", "PN-Y"], 0);
    assert!(
        so.contains("Family prior (empirical Bayes) from 5 earlier lot(s)"),
        "{so}"
    );
    assert!(
        so.contains("with the family prior (the lot's forecast):"),
        "{so}"
    );
    assert!(so.contains("from the lot alone:"), "{so}");
    for lot in ["PN-1", "PN-5"] {
        assert!(so.contains(lot), "{so}");
    }
    assert!(!so.contains("OT-1") && !so.contains("PN-6"), "{so}");

    let js: serde_json::Value = serde_json::from_str(&tb(&["fit", "PN-Y", "--json"], 0)).unwrap();
    assert_eq!(js["prior_lots"], 5, "{js:#}");
    let pooled = &js["pooled"];
    assert_eq!(pooled["headline"], true);
    assert_eq!(
        js["forecast"], pooled["forecast"],
        "the headline is the pooled forecast"
    );
    assert_eq!(pooled["forecast"]["status"], "ahead", "{pooled:#}");
    assert!(pooled["lot_alone"].is_object(), "{pooled:#}");
    // The family's kd is near 0.06 and the young lot's too: x* = 1 + ln 2/0.06 ≈ 12.6
    // (activity is relative to cycle 1, so the curve is exp(−kd·(x − 1)) = a0·exp(−kd·x)).
    let x = pooled["forecast"]["x"].as_f64().unwrap();
    let (lo, hi) = (
        pooled["forecast"]["lower"].as_f64().unwrap(),
        pooled["forecast"]["upper"].as_f64().unwrap(),
    );
    assert!(
        (9.0..16.0).contains(&x) && lo >= 4.0 && lo < x && x < hi,
        "{pooled:#}"
    );

    // Registrations with and without a family verify against the audit chain.
    tb(&["verify"], 0);

    // An earlier lot is not young: it is fitted alone.
    let js: serde_json::Value = serde_json::from_str(&tb(&["fit", "PN-5", "--json"], 0)).unwrap();
    assert!(
        js["pooled"].is_null() && js["prior_lots"].is_null(),
        "{js:#}"
    );

    // The report shows both forecasts.
    let out = root.join("PN-Y.html");
    tb(&["report", "PN-Y", "--out", out.to_str().unwrap()], 0);
    let html = std::fs::read_to_string(&out).unwrap();
    assert!(html.contains("Forecast with the family") && html.contains("5 earlier lot(s)"));
    assert!(html.contains("from the lot alone"));
}
