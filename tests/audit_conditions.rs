//! `verify` compares each alert condition with what the outbox's messages imply: the
//! newest message of a key gives its state, severity, episode and time, the message that
//! opened the episode its thread. An edited, deleted or invented condition is a finding
//! naming table, row and field.
//!
//! Invented data: one-line exports of an imaginary reactor.

use rusqlite::Connection;
use turnbook::notebook::{self, Listing};

mod common;

/// A plant whose one export is rejected, which raises a quarantine alert.
fn plant_with_an_alert(root: &std::path::Path) -> turnbook::config::Config {
    let cfg = common::reactor_config(root, 10);
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(
        dir.join("bad.csv"),
        "Batch,Lot,Conversion\nRD-1,LOT-A,lots\n",
    )
    .unwrap();
    let listing = Listing {
        files: vec![dir.join("bad.csv")],
        refused: Vec::new(),
    };
    let s = notebook::ingest_files(cfg.clone(), &listing, None, |_| {}).unwrap();
    assert_eq!(s.rejected, 1);
    cfg
}

fn findings(cfg: &turnbook::config::Config) -> Vec<turnbook::audit::Finding> {
    notebook::verify(cfg, &[]).unwrap().findings
}

#[test]
fn an_edited_deleted_or_invented_condition_is_found() {
    let tmp = tempfile::tempdir().unwrap();
    let cfg = plant_with_an_alert(tmp.path());
    assert!(findings(&cfg).is_empty(), "{:?}", findings(&cfg));
    let db = Connection::open(cfg.database_path()).unwrap();
    let key: String = db
        .query_row("SELECT alert_key FROM alert_condition", [], |r| r.get(0))
        .unwrap();

    db.execute(
        "UPDATE alert_condition SET state = 'cleared', severity = 1",
        [],
    )
    .unwrap();
    let f = findings(&cfg);
    let fields: Vec<(&str, &str, &str)> = f
        .iter()
        .map(|f| (f.table.as_str(), f.row.as_str(), f.field.as_str()))
        .collect();
    assert!(
        fields.contains(&("alert_condition", key.as_str(), "state")),
        "{f:?}"
    );
    assert!(
        fields.contains(&("alert_condition", key.as_str(), "severity")),
        "{f:?}"
    );
    let state = f.iter().find(|f| f.field == "state").unwrap();
    assert_eq!(
        (state.stored.as_str(), state.expected.as_str()),
        ("\"cleared\"", "\"open\"")
    );

    db.execute("DELETE FROM alert_condition", []).unwrap();
    let f = findings(&cfg);
    assert_eq!(f.len(), 1, "{f:?}");
    assert_eq!(
        (f[0].field.as_str(), f[0].stored.as_str()),
        ("(row)", "missing")
    );

    db.execute(
        "INSERT INTO alert_condition VALUES ('made-up|LOT-A', 'quarantine', 'LOT-A', 'open', 3, 1, \
         '<x@y>', '2026-01-01T00:00:00.000Z')",
        [],
    )
    .unwrap();
    let f = findings(&cfg);
    assert!(
        f.iter()
            .any(|f| f.row == "made-up|LOT-A" && f.expected.starts_with("absent")),
        "{f:?}"
    );
}
