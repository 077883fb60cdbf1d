//! `verify --since-last`: the links after the last recorded verification and the rows the
//! later events wrote; a change made after the last full verification is caught without a
//! full replay. Reports show the recorded state plus that check. And the outbox's
//! switch-over: a database whose outbox predates the outbox events keeps verifying, and
//! the rows queued after it are replayed.
//!
//! Invented data: one-line exports of an imaginary reactor.

mod common;

use std::path::Path;
use std::process::Output;

use rusqlite::Connection;
use turnbook::alert::{AlertRules, LotSnapshot, Recipients, evaluate};

fn turnbook(root: &Path, args: &[&str]) -> Output {
    let cfg = root.join("turnbook.toml");
    let mut all = vec!["--config", cfg.to_str().unwrap()];
    all.extend_from_slice(args);
    common::run(&all)
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

fn export(root: &Path, i: u32) -> String {
    let dir = root.join("exports");
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(format!("run{i}.csv"));
    std::fs::write(
        &path,
        format!("Batch,Lot,Conversion\nB{i},PD-7,{}\n", 95 - i * 3),
    )
    .unwrap();
    path.to_str().unwrap().to_string()
}

fn recorded_runs(root: &Path) -> Vec<(String, i64, bool)> {
    let c = Connection::open(root.join("t.db")).unwrap();
    c.prepare("SELECT scope, head_seq, ok FROM verify_runs ORDER BY id")
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .unwrap()
        .map(Result::unwrap)
        .collect()
}

#[test]
fn a_change_after_the_last_full_verification_is_caught_incrementally() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    common::reactor_config(root, 2);
    for i in 1..=3 {
        assert!(
            turnbook(root, &["ingest", &export(root, i)])
                .status
                .success()
        );
    }
    let full = turnbook(root, &["verify"]);
    assert!(full.status.success(), "{full:?}");
    let runs = recorded_runs(root);
    assert_eq!(runs.len(), 1);
    assert_eq!(runs[0].0, "full");
    let verified_head = runs[0].1;

    // Later events, untouched: the incremental check passes and is recorded.
    assert!(
        turnbook(root, &["ingest", &export(root, 4)])
            .status
            .success()
    );
    let inc = turnbook(root, &["verify", "--since-last"]);
    assert!(inc.status.success(), "{inc:?}");
    assert!(
        stdout(&inc).contains("verified since the last verification"),
        "{}",
        stdout(&inc)
    );
    let runs = recorded_runs(root);
    assert_eq!(runs.len(), 2);
    assert_eq!(runs[1].0, "since-last");
    assert!(runs[1].1 > verified_head);

    // A report rests on the recorded state plus the check of what came after it.
    assert!(
        turnbook(root, &["ingest", &export(root, 5)])
            .status
            .success()
    );
    let html = root.join("r.html");
    let rep = turnbook(root, &["report", "PD-7", "--out", html.to_str().unwrap()]);
    assert!(rep.status.success(), "{rep:?}");
    let text = std::fs::read_to_string(&html).unwrap();
    assert!(text.contains("Intact"), "{text}");
    assert!(text.contains("later event(s) checked"), "{text}");

    // A change to a row written after the last verification: caught by --since-last.
    let db = Connection::open(root.join("t.db")).unwrap();
    db.execute(
        "UPDATE cycles SET conversion = 0.99 WHERE batch_id = 'B5'",
        [],
    )
    .unwrap();
    // A forged "intact" record at the current head, without the key's seal, is ignored.
    db.execute(
        "INSERT INTO verify_runs (at, scope, from_seq, head_seq, head_hash, ok, events, findings, \
           seconds) SELECT '2026-12-02T00:00:00.000Z', 'full', 0, seq, hash, 1, seq, 0, 0.1 \
         FROM events ORDER BY seq DESC LIMIT 1",
        [],
    )
    .unwrap();
    let inc = turnbook(root, &["verify", "--since-last"]);
    assert_eq!(inc.status.code(), Some(1), "{inc:?}");
    assert!(
        stdout(&inc).contains("table cycles, row B5, field conversion"),
        "{}",
        stdout(&inc)
    );
    // The report says so too, without a full replay.
    let rep = turnbook(root, &["report", "PD-7", "--out", html.to_str().unwrap()]);
    assert!(rep.status.success(), "{rep:?}");
    let text = std::fs::read_to_string(&html).unwrap();
    assert!(text.contains("Broken"), "{text}");
}

#[test]
fn rewriting_the_verified_head_is_caught_incrementally() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    common::reactor_config(root, 2);
    assert!(
        turnbook(root, &["ingest", &export(root, 1)])
            .status
            .success()
    );
    assert!(turnbook(root, &["verify"]).status.success());
    let head = recorded_runs(root)[0].1;
    assert!(
        turnbook(root, &["ingest", &export(root, 2)])
            .status
            .success()
    );
    let db = Connection::open(root.join("t.db")).unwrap();
    db.execute_batch("DROP TRIGGER events_append_only_update")
        .unwrap();
    db.execute(
        "UPDATE events SET hash = 'ff' || substr(hash, 3) WHERE seq = ?1",
        [head],
    )
    .unwrap();
    let inc = turnbook(root, &["verify", "--since-last"]);
    assert_eq!(inc.status.code(), Some(1), "{inc:?}");
    assert!(
        stdout(&inc).contains(&format!("table events, row {head}, field hash")),
        "{}",
        stdout(&inc)
    );
}

fn snap(lot: &str) -> LotSnapshot {
    LotSnapshot {
        lot: lot.into(),
        catalyst: "5% Pd/C".into(),
        metal: "Pd".into(),
        site: String::new(),
        cycles_done: 9,
        latest_activity: Some(0.1),
        criterion: 0.5,
        forecast: None,
        next_batch: None,
        abrupt: None,
        metal_in_product: None,
        metal_loss_fraction: None,
        economic_cycle: None,
        quarantined: vec![],
        evidence: vec![],
    }
}

fn rules() -> AlertRules {
    AlertRules {
        recipients: Recipients {
            chemists: vec!["chem@example.org".into()],
            qa: vec![],
            managers: vec!["boss@example.org".into()],
        },
        ..AlertRules::default()
    }
}

/// An outbox row and its condition as a version before the outbox events wrote them.
fn legacy_alert(c: &Connection, id: i64, lot: &str) {
    c.execute_batch(&format!(
        "INSERT INTO alert_outbox (id, alert_key, rule, lot, episode, state, severity, message_id, \
           subject, body_text, body_html, recipients, queued_at, attempts, delivered_at) \
         VALUES ({id}, 'below-criterion|{lot}', 'below-criterion', '{lot}', 1, 'open', 3, \
           '<old{id}@x>', 's', 't', 'h', '[\"chem@example.org\"]', '2025-01-01T00:00:00.000Z', \
           1, '2025-01-01T00:01:00.000Z'); \
         INSERT INTO alert_condition VALUES ('below-criterion|{lot}', 'below-criterion', '{lot}', \
           'open', 3, 1, '<old{id}@x>', '2025-01-01T00:00:00.000Z');"
    ))
    .unwrap();
}

#[test]
fn an_outbox_from_before_the_switch_over_keeps_verifying_and_later_rows_are_replayed() {
    let tmp = tempfile::tempdir().unwrap();
    let path = tmp.path().join("t.db");
    let mut c = turnbook::store::open(&path).unwrap();
    // The database as migration 0012 finds an older one: two rows queued without events.
    legacy_alert(&c, 1, "OLD-1");
    legacy_alert(&c, 2, "OLD-2");
    c.execute(
        "UPDATE outbox_chain SET first_outbox_id = 3, legacy_rows = 2",
        [],
    )
    .unwrap();
    let v = turnbook::audit::verify(&c).unwrap();
    assert!(v.ok(), "{:?}", v.findings);

    // The first alert after the upgrade: the switch-over event, then the alert's.
    let tx = c.transaction().unwrap();
    let alerts = evaluate(&snap("NEW-1"), &rules());
    assert_eq!(
        turnbook::store::outbox::enqueue(&tx, &alerts, "2026-12-01T08:00:00Z").unwrap(),
        1
    );
    tx.commit().unwrap();
    let kinds: Vec<String> = c
        .prepare("SELECT kind FROM events ORDER BY seq")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .map(Result::unwrap)
        .collect();
    assert_eq!(kinds, ["outbox-chained", "alert-queued"]);
    let marker: Option<i64> = c
        .query_row("SELECT marker_seq FROM outbox_chain", [], |r| r.get(0))
        .unwrap();
    assert_eq!(marker, Some(1));
    let v = turnbook::audit::verify(&c).unwrap();
    assert!(v.ok(), "{:?}", v.findings);

    // A row queued before the switch-over deleted with its condition: the count names it.
    let deleted = tmp.path().join("deleted.db");
    c.execute("VACUUM INTO ?1", [deleted.to_str().unwrap()])
        .unwrap();
    let d = Connection::open(&deleted).unwrap();
    d.execute_batch(
        "DELETE FROM alert_outbox WHERE id = 2; \
         DELETE FROM alert_condition WHERE lot = 'OLD-2'",
    )
    .unwrap();
    let f = turnbook::audit::verify(&d).unwrap().findings;
    assert!(
        f.iter()
            .any(|f| f.table == "alert_outbox" && f.row == "rows below 3" && f.field == "(count)"),
        "{f:?}"
    );

    // The row queued after it: every column replayed.
    c.execute(
        r#"UPDATE alert_outbox SET recipients = '["someone@elsewhere.example"]' WHERE id = 3"#,
        [],
    )
    .unwrap();
    let f = turnbook::audit::verify(&c).unwrap().findings;
    assert_eq!(f.len(), 1, "{f:?}");
    assert_eq!(
        (f[0].table.as_str(), f[0].row.as_str(), f[0].field.as_str()),
        ("alert_outbox", "3", "recipients")
    );
}
