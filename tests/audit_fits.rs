//! `verify` recomputes each lot's newest stored fit from the records: an edited fit is a
//! finding naming the table, the lot and the first field that differs; a fit made under
//! settings changed since is counted apart, not called tampering. Through the binary on
//! the demo plant (without its live part).

mod common;
use common::run;

use std::path::PathBuf;

fn demo() -> (tempfile::TempDir, PathBuf) {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("plant");
    let out = run(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    (tmp, dir)
}

fn verify(dir: &std::path::Path) -> (Option<i32>, serde_json::Value, String) {
    let cfg = dir.join("turnbook.toml");
    let out = run(&["--config", cfg.to_str().unwrap(), "verify", "--json"]);
    let json = serde_json::from_slice(&out.stdout).unwrap_or_default();
    let text = run(&["--config", cfg.to_str().unwrap(), "verify"]);
    (
        out.status.code(),
        json,
        String::from_utf8_lossy(&text.stdout).into_owned(),
    )
}

#[test]
fn an_edited_fit_is_caught_and_changed_settings_are_not_tampering() {
    let (_tmp, dir) = demo();
    let (code, v, text) = verify(&dir);
    assert_eq!(code, Some(0), "{text}");
    // PD-C-2611-A, PT-AL-2610-B and the pending lot's empty fit recompute identically;
    // the young lot rests on its family's prior.
    assert_eq!(v["fits"]["identical"], 3, "{v}");
    assert_eq!(v["fits"]["family_prior"], 1, "{v}");
    assert!(text.contains("stored fits: 3 identical"), "{text}");

    // Someone moves the Pd lot's forecast two cycles later in the stored fit.
    let db = rusqlite::Connection::open(dir.join("turnbook.db")).unwrap();
    let (id, analysis): (i64, String) = db
        .query_row(
            "SELECT id, analysis FROM fits WHERE lot = 'PD-C-2611-A' ORDER BY id DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    let mut a: serde_json::Value = serde_json::from_str(&analysis).unwrap();
    let x = a["forecast"]["x"].as_f64().unwrap();
    a["forecast"]["x"] = serde_json::json!(x + 2.0);
    db.execute(
        "UPDATE fits SET analysis = ?1 WHERE id = ?2",
        rusqlite::params![a.to_string(), id],
    )
    .unwrap();
    let (code, v, text) = verify(&dir);
    assert_eq!(code, Some(1), "{text}");
    assert_eq!(v["fits"]["differing"], 1, "{v}");
    assert!(
        text.contains("table fits, row PD-C-2611-A, field analysis: stored forecast.x = "),
        "{text}"
    );
    // Put back; then someone shows the Pd lot as fresh in its stored `lots` line (what
    // `lots`, `status` and the digest read without recomputing): a finding in lot_states.
    db.execute(
        "UPDATE fits SET analysis = ?1 WHERE id = ?2",
        rusqlite::params![analysis, id],
    )
    .unwrap();
    let line: String = db
        .query_row(
            "SELECT line FROM lot_states WHERE lot = 'PD-C-2611-A'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    let mut l: serde_json::Value = serde_json::from_str(&line).unwrap();
    assert!(
        l["latest_activity"].as_f64().is_some_and(|a| a < 0.9),
        "{l}"
    );
    l["latest_activity"] = serde_json::json!(0.99);
    db.execute(
        "UPDATE lot_states SET line = ?1 WHERE lot = 'PD-C-2611-A'",
        rusqlite::params![l.to_string()],
    )
    .unwrap();
    let (code, _, text) = verify(&dir);
    assert_eq!(code, Some(1), "{text}");
    assert!(
        text.contains(
            "table lot_states, row PD-C-2611-A, field line: stored latest_activity = 0.99"
        ),
        "{text}"
    );
    db.execute(
        "UPDATE lot_states SET line = ?1 WHERE lot = 'PD-C-2611-A'",
        rusqlite::params![line],
    )
    .unwrap();
    // The figures the SQL views show: a cycle's activity raised in cycle_figures.
    let (batch, activity): (String, f64) = db
        .query_row(
            "SELECT batch_id, activity FROM cycle_figures WHERE lot = 'PD-C-2611-A'
             ORDER BY cycle_no DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    db.execute(
        "UPDATE cycle_figures SET activity = 0.99 WHERE batch_id = ?1",
        [&batch],
    )
    .unwrap();
    let (code, _, text) = verify(&dir);
    assert_eq!(code, Some(1), "{text}");
    assert!(
        text.contains(&format!(
            "table cycle_figures, row {batch}, field activity: stored 0.99"
        )),
        "{text}"
    );
    db.execute(
        "UPDATE cycle_figures SET activity = ?1 WHERE batch_id = ?2",
        rusqlite::params![activity, batch],
    )
    .unwrap();
    let (code, _, text) = verify(&dir);
    assert_eq!(code, Some(0), "{text}");
    // Then change the criterion in the configuration: the stored fits were made
    // under other settings; counted, not a finding.
    db.execute(
        "UPDATE fits SET analysis = ?1 WHERE id = ?2",
        rusqlite::params![analysis, id],
    )
    .unwrap();
    let cfg = dir.join("turnbook.toml");
    let text_cfg = std::fs::read_to_string(&cfg).unwrap();
    assert!(text_cfg.contains("criterion_fraction = 0.5"));
    std::fs::write(
        &cfg,
        text_cfg.replace("criterion_fraction = 0.5", "criterion_fraction = 0.6"),
    )
    .unwrap();
    let (code, v, text) = verify(&dir);
    assert_eq!(code, Some(0), "{text}");
    assert_eq!(v["fits"]["other_configuration"], 4, "{v}");
    assert_eq!(v["fits"]["identical"], 0, "{v}");
}
