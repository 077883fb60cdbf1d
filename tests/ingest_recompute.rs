//! After a backfill, each touched lot's stored fit records the newest event that wrote
//! records of the lot, exactly as looked up in the database (`store::lots::newest_seq_of`),
//! though the backfill takes it from the events it wrote: also when a batch gets its lot
//! only from a later file, when the groups split the files, when records existed before
//! the run, and when a file of one group touches a lot again in a later one.
//!
//! Invented data: a reactor export (batch, lot, conversion) and a balance export (batch,
//! catalyst mass) of an imaginary plant.

use std::path::{Path, PathBuf};

use turnbook::config::Config;
use turnbook::notebook::Ingestor;

fn config(root: &Path, group: usize) -> Config {
    let text = format!(
        r#"
database = "t.db"
quarantine = "quarantine"
files_per_transaction = {group}

[profiles.reactor]
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
columns.batch_id = {{ header = "Batch" }}
columns.lot = {{ header = "Lot" }}
columns.conversion = {{ header = "Conversion", unit = "%" }}

[profiles.balance]
kind = "cycles"
delimiter = ","
decimal = "."
encoding = "utf-8"
columns.batch_id = {{ header = "Batch" }}
columns.catalyst_mass = {{ header = "Catalyst", unit = "g" }}

[[folders]]
path = "exports/balance"
profile = "balance"

[[folders]]
path = "exports/reactor"
profile = "reactor"
"#
    );
    let path = root.join("turnbook.toml");
    std::fs::write(&path, text).unwrap();
    Config::load(&path).unwrap()
}

fn put(root: &Path, rel: &str, text: &str) -> PathBuf {
    let p = root.join("exports").join(rel);
    std::fs::create_dir_all(p.parent().unwrap()).unwrap();
    std::fs::write(&p, text).unwrap();
    p
}

fn balance(batch: &str, grams: f64) -> String {
    format!("Batch,Catalyst\n{batch},{grams}\n")
}

fn reactor(batch: &str, lot: &str, conv: f64) -> String {
    format!("Batch,Lot,Conversion\n{batch},{lot},{conv}\n")
}

/// Every lot with a fit: the newest fit's `after_seq` and the lot's newest event.
fn fitted_against_newest(ing: &Ingestor) -> Vec<(String, i64, i64)> {
    let conn = ing.conn();
    let mut stmt = conn
        .prepare("SELECT lot, MAX(after_seq) FROM fits GROUP BY lot ORDER BY lot")
        .unwrap();
    let fits: Vec<(String, i64)> = stmt
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    fits.into_iter()
        .map(|(lot, after)| {
            let newest = turnbook::store::lots::newest_seq_of(conn, &lot).unwrap();
            (lot, after, newest)
        })
        .collect()
}

#[test]
fn a_backfill_records_each_lot_up_to_its_newest_event() {
    for group in [1, 2, 3, 100] {
        let tmp = tempfile::tempdir().unwrap();
        let root = tmp.path();
        let cfg = config(root, group);
        // Path order: the balance files first, so B1 and B2 have no lot until the
        // reactor files name it.
        let first = vec![
            put(root, "balance/b1.csv", &balance("B1", 10.0)),
            put(root, "balance/b2.csv", &balance("B2", 9.9)),
            put(root, "reactor/r1.csv", &reactor("B1", "LOT-1", 95.0)),
            put(root, "reactor/r2.csv", &reactor("B2", "LOT-1", 94.0)),
            put(root, "reactor/r3.csv", &reactor("B3", "LOT-2", 90.0)),
            put(root, "reactor/r4.csv", &reactor("B4", "LOT-1", 93.0)),
        ];
        let mut ing = Ingestor::open(cfg.clone()).unwrap();
        let s = ing.ingest_paths(&first, |_| {}).unwrap();
        assert_eq!(s.ingested, 6, "group {group}");
        let after_first = fitted_against_newest(&ing);
        assert_eq!(after_first.len(), 2, "group {group}: {after_first:?}");
        for (lot, after, newest) in &after_first {
            assert_eq!(after, newest, "group {group}, lot {lot}, first run");
        }
        // LOT-1's newest is its last reactor file (event 6), LOT-2's the third (event 5).
        assert_eq!(after_first[0], ("LOT-1".to_string(), 6, 6));
        assert_eq!(after_first[1], ("LOT-2".to_string(), 5, 5));

        // A second run onto records from before: a balance file for an old batch of
        // LOT-2 and a new batch of LOT-1.
        let second = vec![
            put(root, "balance/b3.csv", &balance("B3", 9.7)),
            put(root, "reactor/r5.csv", &reactor("B5", "LOT-1", 92.0)),
        ];
        let s = ing.ingest_paths(&second, |_| {}).unwrap();
        assert_eq!(s.ingested, 2, "group {group}");
        for (lot, after, newest) in fitted_against_newest(&ing) {
            assert_eq!(after, newest, "group {group}, lot {lot}, second run");
        }
        drop(ing);
        // Opened again, nothing is stale: no lot is recomputed.
        let mut conn = turnbook::store::open(&cfg.database_path()).unwrap();
        let healed = turnbook::notebook::recompute_stale(&mut conn, &cfg, "qa").unwrap();
        assert_eq!(healed, 0, "group {group}");
    }
}
