//! `turnbook export` of a whole site: one column vocabulary shared with `cycles --format
//! csv`, `report --csv` and `report --site --csv`, read back by Python's csv module; JSON
//! Lines with a schema field and consistent types; formula-like text neutralised.
//!
//! Needs python3 (the reader a data analyst would use): skipped with a message when
//! missing, a failure when `CI` is set.

mod common;

use std::path::Path;
use std::process::Command;

/// Reads CSV files with Python's csv module; prints one JSON object per file: its header
/// and its rows as lists.
const READ_CSV: &str = r#"
import csv, json, sys
out = {}
for path in sys.argv[1:]:
    with open(path, newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    out[path] = {"header": rows[0], "rows": rows[1:]}
print(json.dumps(out))
"#;

fn python() -> Option<&'static str> {
    let ok = Command::new("python3")
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success());
    if !ok {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but python3 is missing"
        );
        eprintln!("skipped: python3 is missing");
        return None;
    }
    Some("python3")
}

fn ok(args: &[&str]) -> String {
    let out = common::run(args);
    assert!(out.status.success(), "{args:?}: {out:?}");
    String::from_utf8(out.stdout).unwrap()
}

/// Each file as Python's csv module reads it: (header, rows).
fn read_csv(python: &str, files: &[&Path]) -> Vec<(Vec<String>, Vec<Vec<String>>)> {
    let out = Command::new(python)
        .args(["-c", READ_CSV])
        .args(files)
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    files
        .iter()
        .map(|f| {
            let t = &v[f.to_str().unwrap()];
            (
                serde_json::from_value(t["header"].clone()).unwrap(),
                serde_json::from_value(t["rows"].clone()).unwrap(),
            )
        })
        .collect()
}

#[test]
fn a_site_export_and_every_csv_share_one_header_and_carry_no_float_noise() {
    let Some(python) = python() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let plant = tmp.path().join("plant");
    ok(&["demo", "--dir", plant.to_str().unwrap(), "--no-live"]);
    let config = plant.join("turnbook.toml");
    let cfg = config.to_str().unwrap();
    let t = |name: &str| tmp.path().join(name);

    ok(&[
        "--config",
        cfg,
        "export",
        "--format",
        "csv",
        "--out",
        t("site.csv").to_str().unwrap(),
    ]);
    std::fs::write(
        t("cycles.csv"),
        ok(&["--config", cfg, "cycles", "PD-C-2611-A", "--format", "csv"]),
    )
    .unwrap();
    ok(&[
        "--config",
        cfg,
        "report",
        "PD-C-2611-A",
        "--out",
        t("r.html").to_str().unwrap(),
        "--csv",
        t("report.csv").to_str().unwrap(),
    ]);
    ok(&[
        "--config",
        cfg,
        "report",
        "--site",
        "--out",
        t("s.html").to_str().unwrap(),
        "--csv",
        t("report-site.csv").to_str().unwrap(),
    ]);
    let (site, cycles, report, report_site) = (
        t("site.csv"),
        t("cycles.csv"),
        t("report.csv"),
        t("report-site.csv"),
    );
    let read = read_csv(python, &[&site, &cycles, &report, &report_site]);

    // One vocabulary: the same header everywhere.
    let header = &read[0].0;
    for (h, _) in &read[1..] {
        assert_eq!(h, header);
    }
    for name in [
        "lot",
        "cycle",
        "batch_id",
        "duration_h",
        "temperature_c",
        "ton",
        "tof_average_per_h",
        "k_app_per_h",
        "flags",
    ] {
        assert!(
            header.iter().any(|h| h == name),
            "{name} missing from {header:?}"
        );
    }
    // The site export holds every lot's cycles; the site report's CSV is the same table.
    let lots: std::collections::BTreeSet<&str> = read[0].1.iter().map(|r| r[0].as_str()).collect();
    assert_eq!(lots.len(), 4, "{lots:?}");
    assert_eq!(read[0].1, read[3].1);
    // The lot's rows are the same in `cycles`, `report --csv` and the export.
    let lot_rows: Vec<_> = read[0]
        .1
        .iter()
        .filter(|r| r[0] == "PD-C-2611-A")
        .cloned()
        .collect();
    assert_eq!(lot_rows, read[1].1);
    assert_eq!(lot_rows, read[2].1);

    // No float noise: every number has at most ten significant digits (a conversion
    // from kelvin to °C once gave 60.69999999999999).
    let mut numbers = 0;
    for row in &read[0].1 {
        for cell in row {
            if cell.parse::<f64>().is_ok() && !cell.contains(['T', ':']) {
                let digits = cell
                    .trim_start_matches('-')
                    .chars()
                    .filter(|c| c.is_ascii_digit())
                    .collect::<String>();
                let significant = digits.trim_start_matches('0').trim_end_matches('0').len();
                assert!(significant <= 10, "{cell} in {row:?}");
                numbers += 1;
            }
        }
    }
    assert!(numbers > 300, "{numbers}");
    let temp = header.iter().position(|h| h == "temperature_c").unwrap();
    assert!(
        read[0].1.iter().any(|r| r[temp] == "60.7"),
        "temperatures: {:?}",
        read[0].1.iter().map(|r| &r[temp]).collect::<Vec<_>>()
    );

    // JSON Lines: a schema, the CSV's columns, numbers as numbers, flags as lists.
    let jsonl = ok(&["--config", cfg, "export", "--format", "jsonl"]);
    let rows: Vec<serde_json::Value> = jsonl
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(rows.len(), read[0].1.len());
    for r in &rows {
        assert_eq!(r["schema"], 1);
        assert!(r["flags"].is_array(), "{r}");
        assert!(r["cycle"].is_u64(), "{r}");
        assert!(r["ton"].is_number() || r["ton"].is_null(), "{r}");
        let keys: Vec<&String> = r.as_object().unwrap().keys().collect();
        assert_eq!(keys.len(), header.len() + 1);
        assert!(header.iter().all(|h| keys.contains(&h)));
    }
    // One lot, and one site (the demo registers its lots to no site).
    let one = ok(&[
        "--config",
        cfg,
        "export",
        "--lot",
        "PT-AL-2610-B",
        "--format",
        "jsonl",
    ]);
    assert_eq!(one.lines().count(), 10);
    let out = common::run(&["--config", cfg, "export", "--site", "Nowhere"]);
    assert_eq!(out.status.code(), Some(1), "{out:?}");
    // `cycles --format json` and `lots --json` carry the schema field and list flags.
    let doc: serde_json::Value = serde_json::from_str(&ok(&[
        "--config",
        cfg,
        "cycles",
        "PD-C-2611-A",
        "--format",
        "json",
    ]))
    .unwrap();
    assert_eq!(doc["schema"], 1);
    assert!(doc["cycles"][0]["flags"].is_array());
    let lots: serde_json::Value =
        serde_json::from_str(&ok(&["--config", cfg, "lots", "--json"])).unwrap();
    assert!(
        lots.as_array()
            .unwrap()
            .iter()
            .all(|l| l["schema"] == 1 && l["flags"].is_array())
    );
    // history --json labels a file's measurement rows.
    let hist: serde_json::Value =
        serde_json::from_str(&ok(&["--config", cfg, "history", "PD-C-2611-A", "--json"])).unwrap();
    let file = hist
        .as_array()
        .unwrap()
        .iter()
        .find(|e| e["kind"] == "file-ingested")
        .unwrap();
    let m = &file["payload"]["measurements"][0];
    assert!(
        m["batch_id"].is_string() && m["quantity"].is_string(),
        "{m}"
    );
}

#[test]
fn a_batch_id_that_looks_like_a_formula_is_neutralised_in_csv() {
    let Some(python) = python() else { return };
    let tmp = tempfile::tempdir().unwrap();
    common::reactor_config(tmp.path(), 1);
    let exports = tmp.path().join("exports");
    std::fs::create_dir(&exports).unwrap();
    std::fs::write(
        exports.join("run.csv"),
        "Batch,Lot,Conversion\n\"=HYPERLINK(\"\"http://example.invalid\"\",\"\"x\"\")\",L-1,50\n+B2,L-1,60\n",
    )
    .unwrap();
    let cfg = tmp.path().join("turnbook.toml");
    let cfg = cfg.to_str().unwrap();
    ok(&["--config", cfg, "ingest", exports.to_str().unwrap()]);
    let out = tmp.path().join("e.csv");
    ok(&["--config", cfg, "export", "--out", out.to_str().unwrap()]);
    std::fs::write(
        tmp.path().join("c.csv"),
        ok(&["--config", cfg, "cycles", "L-1", "--format", "csv"]),
    )
    .unwrap();
    for (header, rows) in read_csv(python, &[&out, &tmp.path().join("c.csv")]) {
        let b = header.iter().position(|h| h == "batch_id").unwrap();
        let ids: Vec<&str> = rows.iter().map(|r| r[b].as_str()).collect();
        assert!(
            ids.contains(&"'=HYPERLINK(\"http://example.invalid\",\"x\")"),
            "{ids:?}"
        );
        assert!(ids.contains(&"'+B2"), "{ids:?}");
        assert!(
            rows.iter()
                .flatten()
                .all(|c| !c.starts_with(['=', '+', '@'])),
            "{rows:?}"
        );
    }
    // JSON Lines keeps the id as it is: JSON is not run by spreadsheets.
    let jsonl = ok(&["--config", cfg, "export", "--format", "jsonl"]);
    assert!(
        jsonl.contains(r#""batch_id":"=HYPERLINK(\"http://example.invalid\",\"x\")""#),
        "{jsonl}"
    );
}
