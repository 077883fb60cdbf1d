//! Single changes to a keyed notebook's database, each made without the chain key (the
//! way someone who can write the file but cannot read the key would), and each caught by
//! `verify` with the key: a finding that names the table, row and field. Deleting the
//! newest events is caught by `verify --head` and by the witness file.

mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use rusqlite::Connection;
use turnbook::audit::{self, Witnesses};
use turnbook::model::chain::{GENESIS, event_hash};

fn turnbook(root: &Path, args: &[&str]) -> Output {
    Command::new(common::turnbook_binary())
        .arg("--config")
        .arg(root.join("turnbook.toml"))
        .args(args)
        .env_remove("RUST_LOG")
        .output()
        .unwrap()
}

fn ok(o: Output) -> String {
    assert!(o.status.success(), "{o:?}");
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// A notebook with files ingested, a lot registered, a correction, a note and a sign-off.
fn notebook(root: &Path) {
    common::reactor_config(root, 2);
    let toml = root.join("turnbook.toml");
    let text = std::fs::read_to_string(&toml).unwrap();
    std::fs::write(&toml, format!("{text}\n[[signers]]\nname = \"QA One\"\n")).unwrap();
    let exports = root.join("exports");
    std::fs::create_dir_all(&exports).unwrap();
    for i in 1..=4 {
        std::fs::write(
            exports.join(format!("run{i}.csv")),
            format!("Batch,Lot,Conversion\nB{i},PD-7,{}\n", 95 - i * 3),
        )
        .unwrap();
    }
    std::fs::write(exports.join("bad.csv"), "Batch,Lot\nB9\n").unwrap();
    let _ = turnbook(root, &["ingest", exports.to_str().unwrap()]);
    ok(turnbook(
        root,
        &[
            "register",
            "PD-7",
            "--catalyst",
            "Pd/C",
            "--metal",
            "Pd",
            "--loading",
            "5",
            "--mass",
            "2.5",
        ],
    ));
    ok(turnbook(
        root,
        &["correct", "B2", "conversion", "0.90", "--reason", "typo"],
    ));
    ok(turnbook(root, &["note", "--lot", "PD-7", "filter changed"]));
    ok(turnbook(
        root,
        &["signoff", "PD-7", "--meaning", "reviewed", "--as", "QA One"],
    ));
}

/// Recompute every plain link from event `from` on, as someone without the key would.
fn rechain_plain(c: &Connection, from: i64) {
    let rows: Vec<(i64, String, String, String, String, String)> = c
        .prepare("SELECT seq, at, actor, kind, subject, payload FROM events WHERE seq >= ?1 ORDER BY seq")
        .unwrap()
        .query_map([from], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?, r.get(4)?, r.get(5)?)))
        .unwrap()
        .map(Result::unwrap)
        .collect();
    let mut prev: String = c
        .query_row("SELECT hash FROM events WHERE seq = ?1", [from - 1], |r| {
            r.get(0)
        })
        .unwrap_or_else(|_| GENESIS.to_string());
    for (seq, at, actor, kind, subject, payload) in rows {
        let h = event_hash(&prev, seq, &at, &actor, &kind, &subject, &payload);
        c.execute(
            "UPDATE events SET prev_hash = ?1, hash = ?2 WHERE seq = ?3",
            rusqlite::params![prev, h, seq],
        )
        .unwrap();
        prev = h;
    }
}

fn append_plain(c: &Connection, kind: &str, subject: &str, payload: &str) {
    let (seq, prev): (i64, String) = c
        .query_row(
            "SELECT seq, hash FROM events ORDER BY seq DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    let at = "2026-12-02T10:00:00.000Z";
    let h = event_hash(&prev, seq + 1, at, "mallory", kind, subject, payload);
    c.execute(
        "INSERT INTO events(seq, at, actor, kind, subject, payload, prev_hash, hash) VALUES (?1, ?2, 'mallory', ?3, ?4, ?5, ?6, ?7)",
        rusqlite::params![seq + 1, at, kind, subject, payload, prev, h],
    )
    .unwrap();
}

/// One kind of tampering: its name, the table a finding must name, and the change.
type Tamper = (&'static str, &'static str, fn(&Connection));

fn sql(c: &Connection, s: &str) {
    c.execute_batch(s).unwrap_or_else(|e| panic!("{s}: {e}"));
}

fn last_seq(c: &Connection, kind: &str) -> i64 {
    c.query_row("SELECT MAX(seq) FROM events WHERE kind = ?1", [kind], |r| {
        r.get(0)
    })
    .unwrap()
}

fn edit_event(c: &Connection, kind: &str, set: &str) {
    let seq = last_seq(c, kind);
    sql(c, &format!("UPDATE events SET {set} WHERE seq = {seq}"));
    rechain_plain(c, seq);
}

const TAMPERS: &[Tamper] = &[
    (
        "file payload value, plain hashes recomputed",
        "events",
        |c| {
            let seq = last_seq(c, "file-ingested");
            sql(
                c,
                &format!(
                    "UPDATE events SET payload = replace(payload, ',0.83,', ',0.99,') WHERE seq = {seq}"
                ),
            );
            rechain_plain(c, seq);
        },
    ),
    ("note text, plain hashes recomputed", "events", |c| {
        edit_event(
            c,
            "note",
            "payload = replace(payload, 'filter changed', 'all fine')",
        )
    }),
    ("sign-off meaning, plain hashes recomputed", "events", |c| {
        edit_event(
            c,
            "sign-off",
            "payload = replace(payload, 'reviewed', 'approved')",
        )
    }),
    ("correction value, plain hashes recomputed", "events", |c| {
        edit_event(c, "correction", "payload = replace(payload, '0.9', '0.7')")
    }),
    ("event actor, plain hashes recomputed", "events", |c| {
        edit_event(c, "note", "actor = 'someone-else'")
    }),
    ("event time, plain hashes recomputed", "events", |c| {
        edit_event(c, "note", "at = '2020-01-01T00:00:00.000Z'")
    }),
    ("event subject, plain hashes recomputed", "events", |c| {
        edit_event(c, "note", "subject = 'PD-8'")
    }),
    ("registration, plain hashes recomputed", "events", |c| {
        edit_event(
            c,
            "lot-registered",
            "payload = replace(payload, 'Pd/C', 'Pt/C')",
        )
    }),
    ("event hash edited", "events", |c| {
        sql(
            c,
            // The first hex digit turned into another one (the key is new each run, so
            // the digit it had is not known in advance).
            "UPDATE events SET hash = (CASE WHEN substr(hash, 1, 1) = 'f' THEN 'e' ELSE 'f' END) \
             || substr(hash, 2) WHERE seq = 3",
        )
    }),
    ("event prev_hash edited", "events", |c| {
        sql(
            c,
            "UPDATE events SET prev_hash = (CASE WHEN substr(prev_hash, 1, 2) = '00' THEN '11' \
             ELSE '00' END) || substr(prev_hash, 3) WHERE seq = 4",
        )
    }),
    (
        "forged approved sign-off appended with a plain hash",
        "events",
        |c| {
            append_plain(
                c,
                "sign-off",
                "PD-7",
                r#"{"kind":"sign-off","lot":"PD-7","meaning":"approved","signed_sha256":"00","what":"x","comment":null}"#,
            )
        },
    ),
    ("forged note appended with a plain hash", "events", |c| {
        append_plain(
            c,
            "note",
            "PD-7",
            r#"{"kind":"note","lot":"PD-7","batch_id":null,"text":"ok"}"#,
        )
    }),
    ("forged switch to the keyed rule appended", "events", |c| {
        append_plain(
            c,
            "chain-keyed",
            "chain",
            r#"{"kind":"chain-keyed","rule":"x","key_proof":"00"}"#,
        )
    }),
    (
        "whole chain rewritten plain, keying row deleted",
        "chain_keying",
        |c| {
            sql(c, "DELETE FROM chain_keying");
            rechain_plain(c, 1);
        },
    ),
    ("keying row deleted", "events", |c| {
        sql(c, "DELETE FROM chain_keying")
    }),
    ("keying proof edited", "chain_keying", |c| {
        sql(
            c,
            "UPDATE chain_keying SET key_proof = (CASE WHEN substr(key_proof, 1, 2) = 'ab' \
             THEN 'cd' ELSE 'ab' END) || substr(key_proof, 3)",
        )
    }),
    ("keying switch moved", "events", |c| {
        sql(c, "UPDATE chain_keying SET switch_seq = 999")
    }),
    ("source_files sha256", "source_files", |c| {
        sql(
            c,
            "UPDATE source_files SET sha256 = 'ab' || substr(sha256, 3) WHERE id = 1",
        )
    }),
    ("source_files path", "source_files", |c| {
        sql(
            c,
            "UPDATE source_files SET path = '/elsewhere.csv' WHERE id = 1",
        )
    }),
    ("source_files size", "source_files", |c| {
        sql(c, "UPDATE source_files SET size = size + 1 WHERE id = 1")
    }),
    ("source_files mtime", "source_files", |c| {
        sql(c, "UPDATE source_files SET mtime = 'x' WHERE id = 1")
    }),
    ("source_files profile", "source_files", |c| {
        sql(c, "UPDATE source_files SET profile = 'other' WHERE id = 1")
    }),
    ("source_files seen_at", "source_files", |c| {
        sql(
            c,
            "UPDATE source_files SET seen_at = '2020-01-01T00:00:00.000Z' WHERE id = 1",
        )
    }),
    (
        "source_files error of the rejected file",
        "source_files",
        |c| {
            sql(
                c,
                "UPDATE source_files SET error = 'fine' WHERE outcome = 'rejected'",
            )
        },
    ),
    ("source_files rows_new", "source_files", |c| {
        sql(
            c,
            "UPDATE source_files SET rows_new = rows_new + 5 WHERE id = 1",
        )
    }),
    ("source_files rows_conflict", "source_files", |c| {
        sql(c, "UPDATE source_files SET rows_conflict = 3 WHERE id = 1")
    }),
    ("source_files event_seq", "source_files", |c| {
        sql(
            c,
            "UPDATE source_files SET event_seq = event_seq + 1 WHERE id = 1",
        )
    }),
    ("source_files row deleted", "source_files", |c| {
        sql(
            c,
            "DELETE FROM batch_sources WHERE source_file_id = 1; DELETE FROM source_files WHERE id = 1",
        )
    }),
    ("lots catalyst", "lots", |c| {
        sql(c, "UPDATE lots SET catalyst = 'Pt/C'")
    }),
    ("lots metal", "lots", |c| {
        sql(c, "UPDATE lots SET metal = 'Pt'")
    }),
    ("lots loading", "lots", |c| {
        sql(c, "UPDATE lots SET loading_wt_pct = 10")
    }),
    ("lots charged mass", "lots", |c| {
        sql(c, "UPDATE lots SET charged_mass_g = 3")
    }),
    ("lots cost", "lots", |c| sql(c, "UPDATE lots SET cost = 1")),
    ("lots row deleted", "lots", |c| sql(c, "DELETE FROM lots")),
    ("cycles conversion", "cycles", |c| {
        sql(
            c,
            "UPDATE cycles SET conversion = 0.99 WHERE batch_id = 'B1'",
        )
    }),
    ("cycles lot", "cycles", |c| {
        sql(c, "UPDATE cycles SET lot = 'PD-8' WHERE batch_id = 'B1'")
    }),
    ("cycles excluded", "cycles", |c| {
        sql(c, "UPDATE cycles SET excluded = 1 WHERE batch_id = 'B3'")
    }),
    ("cycles conflicts", "cycles", |c| {
        sql(c, "UPDATE cycles SET conflicts = 2 WHERE batch_id = 'B3'")
    }),
    ("cycles first_seq", "cycles", |c| {
        sql(c, "UPDATE cycles SET first_seq = 1 WHERE batch_id = 'B3'")
    }),
    ("cycles row deleted", "cycles", |c| {
        sql(c, "DELETE FROM cycles WHERE batch_id = 'B4'")
    }),
    ("cycles row added", "cycles", |c| {
        sql(
            c,
            "INSERT INTO cycles(batch_id, lot, conversion, first_seq) VALUES ('B77', 'PD-7', 0.5, 1)",
        )
    }),
    ("kept total of cycles", "kept_totals", |c| {
        sql(c, "UPDATE kept_totals SET n = n + 1 WHERE name = 'cycles'")
    }),
    ("kept cycles of a lot", "kept_totals", |c| {
        sql(c, "UPDATE lot_cycle_counts SET n = n + 1")
    }),
    ("kept files of a minute", "kept_totals", |c| {
        sql(c, "UPDATE ingested_by_minute SET n = n + 1")
    }),
    ("batch_sources line", "batch_sources", |c| {
        sql(
            c,
            "UPDATE batch_sources SET line = line + 7 WHERE batch_id = 'B1'",
        )
    }),
    ("batch_sources row deleted", "batch_sources", |c| {
        sql(c, "DELETE FROM batch_sources WHERE batch_id = 'B2'")
    }),
    ("id_counters raised", "id_counters", |c| {
        sql(c, "UPDATE id_counters SET next = next + 10")
    }),
    ("id_counters lowered", "id_counters", |c| {
        sql(c, "UPDATE id_counters SET next = 1")
    }),
    // The outbox and the alert conditions, each edited consistently in both tables (as
    // someone would who knows the old check compared one with the other).
    ("outbox recipients changed", "alert_outbox", |c| {
        sql(
            c,
            r#"UPDATE alert_outbox SET recipients = '["someone@elsewhere.example"]'"#,
        )
    }),
    (
        "outbox and condition severity lowered alike",
        "alert_condition",
        |c| {
            sql(
                c,
                "UPDATE alert_outbox SET severity = 1; UPDATE alert_condition SET severity = 1",
            )
        },
    ),
    (
        "outbox and condition cleared alike",
        "alert_condition",
        |c| {
            sql(
                c,
                "UPDATE alert_outbox SET state = 'cleared';                  UPDATE alert_condition SET state = 'cleared'",
            )
        },
    ),
    ("outbox delivery state forged", "alert_outbox", |c| {
        sql(
            c,
            "UPDATE alert_outbox SET delivered_at = '2026-12-02T10:00:00.000Z',              server_reply = '250 accepted', next_attempt_at = NULL, attempts = 1,              last_error = NULL",
        )
    }),
    ("outbox attempts raised", "alert_outbox", |c| {
        sql(c, "UPDATE alert_outbox SET attempts = attempts + 3")
    }),
    ("outbox subject edited", "alert_outbox", |c| {
        sql(c, "UPDATE alert_outbox SET subject = 'nothing to see'")
    }),
    ("outbox body edited", "alert_outbox", |c| {
        sql(c, "UPDATE alert_outbox SET body_text = 'all fine'")
    }),
    (
        "outbox row and its condition deleted",
        "alert_outbox",
        |c| sql(c, "DELETE FROM alert_outbox; DELETE FROM alert_condition"),
    ),
    (
        "outbox row and a matching condition added",
        "alert_outbox",
        |c| {
            sql(
                c,
                "INSERT INTO alert_outbox (id, alert_key, rule, lot, episode, state, severity,                    message_id, subject, body_text, body_html, recipients, queued_at)                  VALUES (900, 'below-criterion|PD-7', 'below-criterion', 'PD-7', 1, 'open', 3,                    '<made.up@x>', 'PD-7: replace now', 'x', 'x', '[]',                    '2026-12-02T10:00:00.000Z');                  INSERT INTO alert_condition VALUES ('below-criterion|PD-7', 'below-criterion',                    'PD-7', 'open', 3, 1, '<made.up@x>', '2026-12-02T10:00:00.000Z')",
            )
        },
    ),
    (
        "outbox switch-over moved past every row",
        "outbox_chain",
        |c| sql(c, "UPDATE outbox_chain SET first_outbox_id = 1000"),
    ),
    (
        "forged alert event appended with a plain hash",
        "events",
        |c| {
            append_plain(
                c,
                "mail-outcome",
                "outbox 1",
                r#"{"kind":"mail-outcome","outbox_id":1,"message_id":"x","outcome":"sent","attempts":1,"next_attempt_at":null,"last_error":null,"delivered_at":"2026-12-02T10:00:00.000Z","server_reply":"250"}"#,
            )
        },
    ),
];

fn copy_db(from: &Path, to: &Path) -> PathBuf {
    std::fs::create_dir_all(to).unwrap();
    let db = to.join("t.db");
    Connection::open(from)
        .unwrap()
        .execute("VACUUM INTO ?1", [db.to_str().unwrap()])
        .unwrap();
    db
}

#[test]
fn every_single_tampering_without_the_key_is_caught_with_it() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    notebook(root);
    let key = audit::key::load(&root.join("turnbook.key"))
        .unwrap()
        .expect("key created");
    // untouched: verified with the key, every link after the first keyed and checked
    let clean = copy_db(&root.join("t.db"), &root.join("clean"));
    let r = audit::verify_with(
        &Connection::open(&clean).unwrap(),
        &Witnesses {
            key: Some(&key),
            heads: vec![],
        },
    )
    .unwrap();
    assert!(r.ok(), "{:?}", r.findings);
    assert_eq!(r.keyed_after, Some(0));
    assert!(r.events >= 8, "{}", r.events);

    let mut caught = 0;
    for (i, (name, table, change)) in TAMPERS.iter().enumerate() {
        let db = copy_db(&root.join("t.db"), &root.join(format!("case{i}")));
        let c = Connection::open(&db).unwrap();
        sql(
            &c,
            "DROP TRIGGER events_append_only_update; DROP TRIGGER events_append_only_delete; PRAGMA foreign_keys = OFF;",
        );
        change(&c);
        let r = audit::verify_with(
            &c,
            &Witnesses {
                key: Some(&key),
                heads: vec![],
            },
        )
        .unwrap();
        assert!(!r.ok(), "{name}: not caught");
        assert!(
            r.findings
                .iter()
                .any(|f| f.table == *table && !f.row.is_empty() && !f.field.is_empty()),
            "{name}: no finding names table {table}: {:?}",
            r.findings
        );
        caught += 1;
    }
    assert_eq!(caught, TAMPERS.len());
    assert!(TAMPERS.len() >= 40, "{} kinds", TAMPERS.len());
}

#[test]
fn verify_without_the_key_does_not_call_a_keyed_chain_intact() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    notebook(root);
    assert!(ok(turnbook(root, &["verify"])).starts_with("verified:"));
    std::fs::rename(root.join("turnbook.key"), root.join("elsewhere.key")).unwrap();
    let out = turnbook(root, &["verify"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{text}");
    assert!(
        text.contains("cannot be checked without the chain key"),
        "{text}"
    );
    // and nothing can be written to the keyed chain without it
    let out = turnbook(root, &["note", "--lot", "PD-7", "x"]);
    assert!(!out.status.success());
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("key file"),
        "{out:?}"
    );
}

#[test]
fn deleting_the_newest_events_is_caught_by_a_published_head() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    notebook(root);
    let witness = std::fs::read_to_string(root.join("turnbook.head")).unwrap();
    let head = witness.trim().to_string();
    assert!(ok(turnbook(root, &["verify", "--head", &head])).starts_with("verified:"));
    {
        let c = Connection::open(root.join("t.db")).unwrap();
        sql(&c, "DROP TRIGGER events_append_only_delete");
        let newest: i64 = c
            .query_row("SELECT MAX(seq) FROM events", [], |r| r.get(0))
            .unwrap();
        // the newest two: the sign-off and the note, which wrote no other record
        c.execute("DELETE FROM events WHERE seq >= ?1", [newest - 1])
            .unwrap();
    }
    // the witness file beside the database catches it on its own
    let out = turnbook(root, &["verify"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{text}");
    assert!(
        text.contains("table events") && text.contains("newest events deleted"),
        "{text}"
    );
    // and so does a head published elsewhere, with the witness gone too
    std::fs::remove_file(root.join("turnbook.head")).unwrap();
    let out = turnbook(root, &["verify", "--head", &head]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{text}");
    assert!(
        text.contains(&format!("row {}", head.split(':').next().unwrap())),
        "{text}"
    );
    let out = turnbook(root, &["verify"]);
    assert!(
        out.status.success(),
        "without any head the shortened chain looks whole: {out:?}"
    );
}
