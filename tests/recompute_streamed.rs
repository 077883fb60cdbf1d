//! A registered lot of very many cycles is recomputed by streaming its cycles from the
//! store (two passes, one cycle in memory at a time) instead of holding them all. What that
//! recompute stores — the fit, the lot's line, its alert snapshot, its figures and every
//! cycle's — must be what the held state gives. Both are computed here for every lot of
//! the demonstration plant (a step with its hints, metal in the product, feed lots, several
//! instruments per batch), the streamed one forced at any size, also after a cycle is
//! excluded.

mod common;
use common::run;

fn lots(cfg: &turnbook::config::Config) -> Vec<String> {
    let conn = rusqlite::Connection::open(cfg.database_path()).unwrap();
    let mut stmt = conn.prepare("SELECT lot FROM lots ORDER BY lot").unwrap();
    stmt.query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap()
}

fn compare_every_lot(cfg: &turnbook::config::Config) -> usize {
    let mut compared = 0;
    for lot in lots(cfg) {
        let held = turnbook::notebook::recomputed_outputs(cfg, &lot, false).unwrap();
        let streamed = turnbook::notebook::recomputed_outputs(cfg, &lot, true).unwrap();
        let (Some(held), Some(streamed)) = (held, streamed) else {
            continue;
        };
        for (h, s) in held.lines().zip(streamed.lines()) {
            assert_eq!(h, s, "lot {lot}: the streamed recompute differs");
        }
        assert_eq!(held, streamed, "lot {lot}");
        compared += 1;
    }
    compared
}

#[test]
fn the_streamed_recompute_stores_what_the_held_state_gives() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("plant");
    let out = run(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let toml = dir.join("turnbook.toml");
    let cfg = turnbook::config::Config::load(&toml).unwrap();
    assert!(
        compare_every_lot(&cfg) >= 3,
        "the demo registers three lots or more"
    );
    // The Pt lot's step shows hints; the held and streamed states must give the same ones.
    let held = turnbook::notebook::recomputed_outputs(&cfg, "PT-AL-2610-B", false).unwrap();
    assert!(held.is_some_and(|h| h.contains("\"hints\"")));

    // An excluded cycle leaves the series but stays in the totals.
    let batch = {
        let conn = rusqlite::Connection::open(cfg.database_path()).unwrap();
        conn.query_row(
            "SELECT batch_id FROM cycles WHERE lot = 'PD-C-2611-A' ORDER BY cycle_no LIMIT 1 OFFSET 3",
            [],
            |r| r.get::<_, String>(0),
        )
        .unwrap()
    };
    let out = run(&[
        "--config",
        toml.to_str().unwrap(),
        "exclude",
        &batch,
        "--reason",
        "feed drum contaminated (a test)",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(compare_every_lot(&cfg) >= 3);
}

/// An invented reactor whose exports carry what activity needs, and a lot sheet.
fn plant_config(root: &std::path::Path) -> turnbook::config::Config {
    let text = r#"
database = "t.db"
quarantine = "quarantine"

[profiles.reactor]
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
datetime_format = "%Y-%m-%dT%H:%M:%S"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.cycle_no = { header = "Cycle" }
columns.started_at = { header = "Started" }
columns.duration = { header = "Time", unit = "from-header" }
columns.conversion = { header = "Conversion", unit = "from-header" }
columns.selectivity = { header = "Selectivity", unit = "from-header" }
columns.substrate = { header = "Substrate", unit = "from-header" }
columns.catalyst_mass = { header = "Catalyst", unit = "from-header" }

[profiles.sheet]
kind = "lots"
delimiter = ","
decimal = "."
encoding = "utf-8"
columns.lot = { header = "lot" }
columns.catalyst = { header = "catalyst" }
columns.metal = { header = "metal" }
columns.loading = { header = "loading", unit = "from-header" }
columns.charged_mass = { header = "charged mass", unit = "from-header" }

[[folders]]
path = "exports"
profile = "reactor"

[[folders]]
path = "sheets"
profile = "sheet"
"#;
    let path = root.join("turnbook.toml");
    std::fs::write(&path, text).unwrap();
    turnbook::config::Config::load(&path).unwrap()
}

#[test]
fn a_registered_lot_past_the_streaming_size_is_stored_as_held_and_verify_compares_it() {
    use turnbook::notebook::{FileOutcome, Ingestor};
    let rows = turnbook::notebook::STREAM_FROM + 500;
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let cfg = plant_config(root);
    std::fs::create_dir_all(root.join("sheets")).unwrap();
    std::fs::create_dir_all(root.join("exports")).unwrap();
    let sheet = root.join("sheets").join("lots.csv");
    std::fs::write(
        &sheet,
        "lot,catalyst,metal,loading (%),charged mass (g)\nLONG-1,5 % Pd/C,Pd,5.0,10.0\n",
    )
    .unwrap();
    // A slow first-order loss with a step at cycle 20,000 (a poisoned feed): cycle 1 at
    // 100 % conversion is censored, so activity is relative to cycle 2.
    let mut text = String::from(
        "Batch,Lot,Cycle,Started,Time (min),Conversion (%),Selectivity (%),Substrate (mol),Catalyst (g)\n",
    );
    for n in 1..=rows {
        let k = 1.2 * (-2e-5 * n as f64).exp() * if n >= 20_000 { 0.75 } else { 1.0 };
        let wobble = 1.0 + 0.01 * (((n * 7919) % 13) as f64 - 6.0) / 6.0;
        let conv = if n == 1 {
            100.0
        } else {
            100.0 * (1.0 - (-k * wobble * 2.0).exp())
        };
        let (day, hour) = (n / 24, n % 24);
        text.push_str(&format!(
            "LB-{n:06},LONG-1,{n},{}-{:02}-{:02}T{hour:02}:00:00,120,{conv:.2},98.5,1.2,10.0\n",
            2001 + day / 336,
            1 + (day / 28) % 12,
            1 + day % 28,
        ));
    }
    let big = root.join("exports").join("history.csv");
    std::fs::write(&big, text).unwrap();
    // And a few cycles of a lot nobody registered (one lacks its catalyst mass).
    let orphan = root.join("exports").join("orphan.csv");
    std::fs::write(
        &orphan,
        "Batch,Lot,Cycle,Started,Time (min),Conversion (%),Selectivity (%),Substrate (mol),Catalyst (g)\n\
         OR-1,ORPHAN-1,1,2026-11-02T08:00:00,120,81.2,98.5,1.2,10.0\n\
         OR-2,ORPHAN-1,2,2026-11-03T08:00:00,120,80.1,98.5,1.2,\n\
         OR-3,ORPHAN-1,3,2026-11-04T08:00:00,120,79.5,98.5,1.2,10.0\n",
    )
    .unwrap();
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    assert!(matches!(
        ing.ingest_file(&sheet).unwrap(),
        FileOutcome::Ingested { .. }
    ));
    assert!(matches!(
        ing.ingest_file(&big).unwrap(),
        FileOutcome::Ingested { .. }
    ));
    assert!(matches!(
        ing.ingest_file(&orphan).unwrap(),
        FileOutcome::Ingested { .. }
    ));
    drop(ing);
    let held = turnbook::notebook::recomputed_outputs(&cfg, "ORPHAN-1", false).unwrap();
    let streamed = turnbook::notebook::recomputed_outputs(&cfg, "ORPHAN-1", true).unwrap();
    assert_eq!(
        held, streamed,
        "a lot nobody registered, streamed as the recompute does"
    );
    assert!(held.is_some_and(|h| h.contains("\"cycles\":3")));

    // What the streamed recompute stored is what the held state gives.
    let held = turnbook::notebook::recomputed_outputs(&cfg, "LONG-1", false)
        .unwrap()
        .unwrap();
    let streamed = turnbook::notebook::recomputed_outputs(&cfg, "LONG-1", true)
        .unwrap()
        .unwrap();
    assert_eq!(held, streamed);
    assert!(
        held.contains("\"cycles\":20500"),
        "the line counts every cycle"
    );
    // A message lists the newest 30 cycles, oldest first, each with its file.
    let snapshot = held
        .lines()
        .find_map(|l| l.strip_prefix("snapshot "))
        .unwrap();
    let snapshot: serde_json::Value = serde_json::from_str(snapshot).unwrap();
    let rows = snapshot["evidence"].as_array().unwrap();
    assert_eq!(rows.len(), 30);
    assert_eq!(rows[0]["cycle"], 20471);
    assert_eq!(rows[29]["cycle"], 20500);
    assert!(
        rows[29]["source_file"]
            .as_str()
            .unwrap()
            .ends_with("history.csv")
    );

    // verify recomputes it (streamed) and finds it identical, then catches an edited row.
    let report = turnbook::notebook::verify(&cfg, &[]).unwrap();
    assert!(report.findings.is_empty(), "{:?}", report.findings);
    let fits = report.fits.expect("fits compared");
    assert_eq!(
        (fits.identical, fits.stale, fits.differing),
        (2, 0, 0),
        "{fits:?}"
    );
    let conn = rusqlite::Connection::open(cfg.database_path()).unwrap();
    conn.execute(
        "UPDATE cycle_figures SET activity = activity * 1.01 WHERE batch_id = 'LB-012345'",
        [],
    )
    .unwrap();
    drop(conn);
    let report = turnbook::notebook::verify(&cfg, &[]).unwrap();
    assert!(
        report
            .findings
            .iter()
            .any(|f| f.table == "cycle_figures" && f.row == "LB-012345" && f.field == "activity"),
        "{:?}",
        report.findings
    );
}
