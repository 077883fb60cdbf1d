//! The SQL views `cycle_results` and `lot_results` (README, "Figures in SQL") hold the
//! numbers turnbook prints: pandas reads every view of a demo database, and each figure
//! equals `cycles LOT --format json` and `lots --json`.
//!
//! Needs python3 with pandas (`.ci/run` installs it): skipped with a message when missing,
//! a failure when `CI` is set.

mod common;

use std::process::Command;

/// Reads both views with pandas and compares them with the JSON the command line printed
/// (files given as arguments); prints "checked N cycles, M lots" or fails with the
/// first difference.
const COMPARE: &str = r#"
import json, math, sqlite3, sys
import pandas as pd

db, cycles_path, lots_path = sys.argv[1:4]
con = sqlite3.connect(db)
cyc = pd.read_sql_query("SELECT * FROM cycle_results", con)
lots_view = pd.read_sql_query("SELECT * FROM lot_results", con)
by_batch = {r["batch_id"]: r for _, r in cyc.iterrows()}

def same(a, b, what):
    a = None if a is None or (isinstance(a, float) and math.isnan(a)) else a
    b = None if b is None or (isinstance(b, float) and math.isnan(b)) else b
    if a is None or b is None:
        assert a is None and b is None, f"{what}: view {a!r}, JSON {b!r}"
    elif isinstance(b, (int, float)) and not isinstance(b, bool):
        assert math.isclose(float(a), float(b), rel_tol=1e-9, abs_tol=1e-12), f"{what}: view {a!r}, JSON {b!r}"
    else:
        assert a == b, f"{what}: view {a!r}, JSON {b!r}"

n = 0
docs = json.load(open(cycles_path))
for doc in docs:
    basis_key = "activity_per_catalyst_ratio" if doc["activity_basis"] == "catalyst-ratio" else "activity_per_metal_charged"
    for c in doc["cycles"]:
        row = by_batch[c["batch_id"]]
        w = f'{doc["lot"]} {c["batch_id"]}'
        same(row["lot"], doc["lot"], w + " lot")
        same(int(row["cycle"]), c["cycle"], w + " cycle")
        for col in ["duration_h", "temperature_c", "substrate_mol", "metal_charged_mmol",
                    "metal_available_mmol", "catalyst_to_substrate", "conversion",
                    "selectivity", "product_mass_g", "metal_in_product_ug_g",
                    "catalyst_recovered_g", "ton", "ton_per_metal_available",
                    "tof_average_per_h", "tof_initial_per_h", "cumulative_ton",
                    "k_app_per_h", "k_app_se_per_h", "activity_se"]:
            same(row[col], c[col], f"{w} {col}")
        same(row["activity"], c[basis_key], w + " activity")
        if not pd.isna(row["computed_at"]):  # a pending lot has no figures
            same(row["activity_basis"], doc["activity_basis"], w + " activity_basis")
        same(json.loads(row["flags_json"]), c["flags"], w + " flags")
        n += 1
assert n == len(cyc), f"{len(cyc)} rows in cycle_results, {n} cycles in JSON"

lots = {l["lot"]: l for l in json.load(open(lots_path))}
assert set(lots_view["lot"]) == set(lots), (set(lots_view["lot"]), set(lots))
for _, row in lots_view.iterrows():
    l = lots[row["lot"]]
    w = row["lot"]
    if not l["registered"]:
        same(row["state"], "pending", w + " state")
        continue
    same(row["state"], "attention" if l["attention"] else "ok", w + " state")
    same(int(row["cycles"]), l["cycles"], w + " cycles")
    same(row["model"], l["model"], w + " model")
    same(row["latest_activity"], l["latest_activity"], w + " latest_activity")
    same(row["cumulative_ton"], l["cumulative_ton"], w + " cumulative_ton")
    f = l["forecast"] or {}
    same(row["forecast_status"], f.get("status"), w + " forecast_status")
    same(row["crossing_cycle"], f.get("x"), w + " crossing_cycle")
    same(row["crossing_cycle_lower"], f.get("lower"), w + " crossing_cycle_lower")
    same(row["crossing_cycle_upper"], f.get("upper"), w + " crossing_cycle_upper")
    same(row["crossing_date"], f.get("crossing_date"), w + " crossing_date")
    same(row["crossing_date_early"], f.get("crossing_early"), w + " crossing_date_early")
    same(row["crossing_date_late"], f.get("crossing_late"), w + " crossing_date_late")
    same(row["order_by_date"], f.get("order_by"), w + " order_by_date")
    nx = l["next_cycle"] or {}
    same(row["next_batch_verdict"], nx.get("verdict"), w + " next_batch_verdict")
    same(row["next_batch_activity"], nx.get("predicted"), w + " next_batch_activity")
    same(row["next_batch_activity_lower"], nx.get("lower"), w + " next_batch_activity_lower")
    same(bool(row["abrupt_loss"]), l["abrupt_loss"], w + " abrupt_loss")
    same(json.loads(row["flags_json"]), l["flags"], w + " flags")
    same(json.loads(row["attention_json"]), l["attention"], w + " attention")
print(f"checked {n} cycles, {len(lots_view)} lots")
"#;

fn python_with_pandas() -> Option<&'static str> {
    let ok = Command::new("python3")
        .args(["-c", "import pandas"])
        .output()
        .is_ok_and(|o| o.status.success());
    if !ok {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI is set but python3 with pandas is missing (pip install pandas)"
        );
        eprintln!("skipped: python3 with pandas is missing (pip install pandas)");
        return None;
    }
    Some("python3")
}

fn stdout_of(args: &[&str]) -> String {
    let out = common::run(args);
    assert!(out.status.success(), "{args:?}: {out:?}");
    String::from_utf8(out.stdout).unwrap()
}

#[test]
fn pandas_reads_every_view_and_its_figures_equal_the_command_lines_json() {
    let Some(python) = python_with_pandas() else {
        return;
    };
    let tmp = tempfile::tempdir().unwrap();
    let plant = tmp.path().join("plant");
    stdout_of(&["demo", "--dir", plant.to_str().unwrap(), "--no-live"]);
    let config = plant.join("turnbook.toml");
    let config = config.to_str().unwrap();

    let lots_json = stdout_of(&["--config", config, "lots", "--json"]);
    let lots: Vec<serde_json::Value> = serde_json::from_str(&lots_json).unwrap();
    let docs: Vec<serde_json::Value> = lots
        .iter()
        .map(|l| {
            let lot = l["lot"].as_str().unwrap();
            serde_json::from_str(&stdout_of(&[
                "--config", config, "cycles", lot, "--format", "json",
            ]))
            .unwrap()
        })
        .collect();
    let cycles_path = tmp.path().join("cycles.json");
    let lots_path = tmp.path().join("lots.json");
    std::fs::write(&cycles_path, serde_json::to_string(&docs).unwrap()).unwrap();
    std::fs::write(&lots_path, lots_json).unwrap();

    let out = Command::new(python)
        .args(["-c", COMPARE])
        .arg(plant.join("turnbook.db"))
        .arg(&cycles_path)
        .arg(&lots_path)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // The demo has four lots, one of them pending, and more than thirty cycles.
    assert!(stdout.contains(", 4 lots"), "{stdout}");
    let n: usize = stdout
        .trim()
        .strip_prefix("checked ")
        .and_then(|s| s.split(' ').next())
        .and_then(|s| s.parse().ok())
        .unwrap();
    assert!(n > 25, "{stdout}");
}
