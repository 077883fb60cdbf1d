//! A backfill raises alerts for each lot's current state only. A lot whose newest batch
//! started long before the newest batch the store records (`alerts.backfill_history_days`)
//! is history: its fit and state are stored and shown, nothing about it is mailed. A lot
//! still in service gets the alerts of its current state, once.
//!
//! Invented data: an imaginary plant's lot sheet and one-batch reactor exports of two Pd/C
//! lots, one used up ten years before the other (seeded, no randomness).

use std::path::{Path, PathBuf};

use turnbook::config::Config;
use turnbook::notebook::{Ingestor, lot_lines};
use turnbook::store;

const CONFIG: &str = r#"
database = "t.db"
quarantine = "quarantine"

[alerts.recipients]
chemists = ["chem@plant.example"]
managers = ["boss@plant.example"]
qa = ["qa@plant.example"]

[mail]
transport = "file"
dir = "outbox"
from = "notebook@plant.example"

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
columns.temperature = { header = "T", unit = "from-header" }
columns.conversion = { header = "Conversion", unit = "from-header" }
columns.selectivity = { header = "Selectivity", unit = "from-header" }
columns.substrate = { header = "Substrate", unit = "from-header" }
columns.catalyst_mass = { header = "Catalyst", unit = "from-header" }
columns.product_mass = { header = "Product", unit = "from-header" }

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
path = "exports/batches"
profile = "reactor"

[[folders]]
path = "exports/lots"
profile = "sheet"
"#;

fn write(path: &Path, text: &str) -> PathBuf {
    std::fs::create_dir_all(path.parent().unwrap()).unwrap();
    std::fs::write(path, text).unwrap();
    path.to_path_buf()
}

/// One export per batch of `lot`: `cycles` batches two days apart from `year`-01-01,
/// first-order loss of activity at `kd` per cycle (activity exp(−kd·(n−1))).
fn lot_history(root: &Path, lot: &str, year: i32, cycles: u32, kd: f64) -> Vec<PathBuf> {
    let day0 = chrono::NaiveDate::from_ymd_opt(year, 1, 1).unwrap();
    (1..=cycles)
        .map(|n| {
            let k = 1.2 * (-kd * f64::from(n - 1)).exp();
            let conv = 100.0 * (1.0 - (-k * 2.0).exp());
            let day = day0 + chrono::Days::new(u64::from(2 * n));
            let text = format!(
                "Batch,Lot,Cycle,Started,Time (min),T (degC),Conversion (%),Selectivity (%),\
                 Substrate (mol),Catalyst (g),Product (g)\n\
                 {lot}-{n:03},{lot},{n},{day}T08:00:00,120,60.0,{conv:.2},98.5,1.2,10.0,{:.1}\n",
                1.2 * conv / 100.0 * 0.985 * 137.1
            );
            write(
                &root.join(format!("exports/batches/{lot}/{lot}-{n:03}.csv")),
                &text,
            )
        })
        .collect()
}

fn plant(root: &Path) -> (Config, Vec<PathBuf>) {
    let cfg_path = write(&root.join("turnbook.toml"), CONFIG);
    let mut files = vec![write(
        &root.join("exports/lots/sheet.csv"),
        "lot,catalyst,metal,loading (%),charged mass (g)\n\
         PD-OLD-16,5 % Pd/C,Pd,5.0,10.0\n\
         PD-NEW-26,5 % Pd/C,Pd,5.0,10.0\n",
    )];
    // Used up in 2016: activity falls to 0.14 of fresh, far below the criterion.
    files.extend(lot_history(root, "PD-OLD-16", 2016, 40, 0.05));
    // In service now (ten years later): already below the criterion at its newest batch.
    files.extend(lot_history(root, "PD-NEW-26", 2026, 10, 0.08));
    (Config::load(&cfg_path).unwrap(), files)
}

fn queued_lots(cfg: &Config) -> Vec<(String, String)> {
    let conn = store::open(&cfg.database_path()).unwrap();
    store::outbox::changes_since(&conn, "2000-01-01T00:00:00.000Z")
        .unwrap()
        .into_iter()
        .map(|c| (c.lot, c.key))
        .collect()
}

#[test]
fn a_backfill_mails_nothing_for_a_lot_finished_long_ago() {
    let dir = tempfile::tempdir().unwrap();
    let (cfg, files) = plant(dir.path());
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    let summary = ing.ingest_paths(&files, |_| {}).unwrap();
    assert_eq!(summary.ingested, files.len());
    drop(ing);

    let queued = queued_lots(&cfg);
    assert!(
        queued.iter().all(|(lot, _)| lot != "PD-OLD-16"),
        "nothing mailed about the lot finished in 2016: {queued:?}"
    );
    // The lot in service gets its current state's alerts, each once.
    let new: Vec<&String> = queued
        .iter()
        .filter(|(lot, _)| lot == "PD-NEW-26")
        .map(|(_, key)| key)
        .collect();
    assert!(
        !new.is_empty(),
        "the current lot's alerts are raised: {queued:?}"
    );
    let mut keys = new.clone();
    keys.dedup();
    assert_eq!(keys.len(), new.len(), "one message per alert: {new:?}");

    // The old lot's state is recorded and shown all the same.
    let lines = lot_lines(&cfg).unwrap();
    let old = lines.iter().find(|l| l.lot == "PD-OLD-16").unwrap();
    assert_eq!(old.cycles, 40);
    assert!(
        old.attention
            .iter()
            .any(|a| a.contains("at or below the replacement criterion")),
        "{:?}",
        old.attention
    );
}

#[test]
fn the_history_window_is_a_setting() {
    // With a window of ten years and more, the 2016 lot is current again and mailed.
    let dir = tempfile::tempdir().unwrap();
    let (cfg, files) = plant(dir.path());
    let text = CONFIG.replace(
        "[alerts.recipients]",
        "[alerts]\nbackfill_history_days = 4000\n\n[alerts.recipients]",
    );
    let cfg_path = write(&dir.path().join("turnbook.toml"), &text);
    let cfg2 = Config::load(&cfg_path).unwrap();
    assert_eq!(cfg2.database_path(), cfg.database_path());
    let mut ing = Ingestor::open(cfg2.clone()).unwrap();
    ing.ingest_paths(&files, |_| {}).unwrap();
    drop(ing);
    let queued = queued_lots(&cfg2);
    assert!(
        queued.iter().any(|(lot, _)| lot == "PD-OLD-16"),
        "{queued:?}"
    );
}

#[test]
fn an_open_recomputes_only_the_lots_left_waiting() {
    let dir = tempfile::tempdir().unwrap();
    let (cfg, files) = plant(dir.path());
    let mut ing = Ingestor::open(cfg.clone()).unwrap();
    ing.ingest_paths(&files, |_| {}).unwrap();
    drop(ing);
    let db = cfg.database_path();
    let fits = |lot: &str| -> i64 {
        let c = rusqlite::Connection::open(&db).unwrap();
        c.query_row("SELECT COUNT(*) FROM fits WHERE lot = ?1", [lot], |r| {
            r.get(0)
        })
        .unwrap()
    };
    // Nothing waits after a whole backfill: opening again recomputes nothing.
    let mut conn = store::open(&db).unwrap();
    assert_eq!(
        turnbook::notebook::recompute_stale(&mut conn, &cfg, "qa").unwrap(),
        0
    );
    drop(conn);
    // A backfill stopped after a group and before its closing recompute leaves the lots
    // of its groups listed (as the group's own transaction wrote them).
    let (old, new) = (fits("PD-OLD-16"), fits("PD-NEW-26"));
    rusqlite::Connection::open(&db)
        .unwrap()
        .execute(
            "INSERT INTO lots_to_recompute(lot) VALUES ('PD-NEW-26')",
            [],
        )
        .unwrap();
    drop(Ingestor::open(cfg.clone()).unwrap());
    assert_eq!(fits("PD-NEW-26"), new + 1, "the waiting lot is recomputed");
    assert_eq!(fits("PD-OLD-16"), old, "no other lot is");
    let waiting: i64 = rusqlite::Connection::open(&db)
        .unwrap()
        .query_row("SELECT COUNT(*) FROM lots_to_recompute", [], |r| r.get(0))
        .unwrap();
    assert_eq!(waiting, 0);
}
