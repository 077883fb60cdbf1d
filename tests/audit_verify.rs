//! The audit chain and `verify`: an untouched database verifies clean; a value changed with
//! plain SQL behind turnbook's back is named by table, row and field.

use turnbook::audit;
use turnbook::ingest::{CycleRow, LotRow, MeasuredValue, ParsedFile};
use turnbook::model::Quantity;
use turnbook::store::{self, records};

fn facts(name: &str, sha: &str) -> records::FileFacts {
    records::FileFacts {
        path: format!("/exports/{name}"),
        sha256: sha.to_string(),
        size: 100,
        mtime: None,
        profile: Some("hplc".into()),
        site: None,
        seen_at: "2026-01-01T00:00:00.000Z".into(),
    }
}

fn row(line: u64, batch: &str, lot: &str, conv: f64) -> CycleRow {
    CycleRow {
        line,
        batch_id: batch.into(),
        lot: Some(lot.into()),
        cycle_no: None,
        started_at: None,
        feed_lot: None,
        values: vec![MeasuredValue {
            quantity: Quantity::Conversion,
            value: conv,
            column: 3,
            raw: conv.to_string(),
        }],
    }
}

fn populated() -> rusqlite::Connection {
    let mut conn = store::open_in_memory().unwrap();
    let tx = conn.transaction().unwrap();
    let lots = ParsedFile::Lots(vec![LotRow {
        line: 2,
        record: turnbook::model::LotRecord {
            lot: "L1".into(),
            catalyst: "5% Pd/C".into(),
            metal: "Pd".into(),
            loading_wt_pct: 5.0,
            charged_mass_g: 10.0,
            received: None,
            supplier_lot: None,
            cost: Some(1000.0),
            site: None,
            water_content_wt_pct: None,
            family: None,
        },
    }]);
    records::record_parsed(&tx, &facts("lots.csv", "aa"), &lots, "qa").unwrap();
    let f = ParsedFile::Cycles(vec![row(2, "B1", "L1", 0.9), row(3, "B2", "L1", 0.8)]);
    let s = records::record_parsed(&tx, &facts("a.csv", "bb"), &f, "qa").unwrap();
    assert_eq!(s.rows_new, 2);
    // The same rows again plus one new: known rows are recognised, not stored twice.
    let f2 = ParsedFile::Cycles(vec![
        row(2, "B1", "L1", 0.9),
        row(3, "B2", "L1", 0.8),
        row(4, "B3", "L1", 0.7),
    ]);
    let s2 = records::record_parsed(&tx, &facts("a2.csv", "cc"), &f2, "qa").unwrap();
    assert_eq!((s2.rows_new, s2.rows_known, s2.rows_conflict), (1, 2, 0));
    // A changed old row is a conflict: kept, flagged, the first value stays current.
    let f3 = ParsedFile::Cycles(vec![row(2, "B1", "L1", 0.85)]);
    let s3 = records::record_parsed(&tx, &facts("a3.csv", "dd"), &f3, "qa").unwrap();
    assert_eq!(s3.rows_conflict, 1);
    assert_eq!(s3.conflicts.len(), 1);
    records::correct(
        &tx,
        "B2",
        "conversion",
        0.81,
        "re-integrated peak",
        "qa",
        "2026-01-02T00:00:00.000Z",
    )
    .unwrap();
    records::set_excluded(
        &tx,
        "B3",
        true,
        "stirrer failed",
        "qa",
        "2026-01-02T00:00:00.000Z",
    )
    .unwrap();
    tx.commit().unwrap();
    conn
}

#[test]
fn untouched_database_verifies_clean() {
    let conn = populated();
    let r = audit::verify(&conn).unwrap();
    assert!(r.ok(), "{:?}", r.findings);
    assert_eq!(r.events, 6);
    let b1 = records::cycle(&conn, "B1").unwrap().unwrap();
    assert_eq!(b1.get(Quantity::Conversion), Some(0.9));
    assert_eq!(b1.conflicts, 1);
    let b2 = records::cycle(&conn, "B2").unwrap().unwrap();
    assert_eq!(b2.get(Quantity::Conversion), Some(0.81));
}

#[test]
fn a_value_changed_behind_the_back_is_named() {
    let conn = populated();
    // A value lives in the payload of the event that wrote it: changing it means editing
    // the event, and the chain names that event. A tamperer drops the guard first.
    conn.execute_batch("DROP TRIGGER events_append_only_update;")
        .unwrap();
    let seq: i64 = conn
        .query_row(
            "SELECT event_seq FROM measurements WHERE batch_id = 'B1' AND kind = 'observed' AND quantity = 'conversion'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    let changed = conn
        .execute(
            "UPDATE events SET payload = replace(payload, '\"conversion\",0.9,', '\"conversion\",0.95,') WHERE seq = ?1",
            [seq],
        )
        .unwrap();
    assert_eq!(changed, 1);
    let stored: f64 = conn
        .query_row(
            "SELECT value FROM measurements WHERE batch_id = 'B1' AND kind = 'observed' AND quantity = 'conversion'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(stored, 0.95, "the view shows the edited payload");
    let r = audit::verify(&conn).unwrap();
    assert!(!r.ok());
    let f = &r.findings[0];
    assert_eq!(
        (f.table.as_str(), f.row.as_str(), f.field.as_str()),
        ("events", seq.to_string().as_str(), "hash")
    );
}

#[test]
fn a_provenance_link_changed_behind_the_back_is_named() {
    let conn = populated();
    let (seq, line): (i64, i64) = conn
        .query_row(
            "SELECT event_seq, line FROM batch_sources WHERE batch_id = 'B2' ORDER BY event_seq LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    conn.execute(
        "UPDATE batch_sources SET line = 99 WHERE batch_id = 'B2' AND event_seq = ?1",
        [seq],
    )
    .unwrap();
    let r = audit::verify(&conn).unwrap();
    let named: Vec<(&str, &str, &str)> = r
        .findings
        .iter()
        .map(|f| (f.table.as_str(), f.row.as_str(), f.field.as_str()))
        .collect();
    let was = format!("B2/{seq}/{line}");
    let now = format!("B2/{seq}/99");
    assert!(
        named.contains(&("batch_sources", was.as_str(), "(row)")),
        "{named:?}"
    );
    assert!(
        named.contains(&("batch_sources", now.as_str(), "(row)")),
        "{named:?}"
    );
}

#[test]
fn a_cycle_view_changed_behind_the_back_is_named() {
    let conn = populated();
    conn.execute(
        "UPDATE cycles SET conversion = 0.99 WHERE batch_id = 'B3'",
        [],
    )
    .unwrap();
    let r = audit::verify(&conn).unwrap();
    assert_eq!(r.findings.len(), 1, "{:?}", r.findings);
    let f = &r.findings[0];
    assert_eq!(
        (f.table.as_str(), f.row.as_str(), f.field.as_str()),
        ("cycles", "B3", "conversion")
    );
}

#[test]
fn an_edited_event_breaks_the_chain_at_that_event() {
    let conn = populated();
    conn.execute_batch("DROP TRIGGER events_append_only_update;")
        .unwrap();
    conn.execute("UPDATE events SET actor = 'mallory' WHERE seq = 3", [])
        .unwrap();
    let r = audit::verify(&conn).unwrap();
    let f = &r.findings[0];
    assert_eq!(
        (f.table.as_str(), f.row.as_str(), f.field.as_str()),
        ("events", "3", "hash")
    );
}

#[test]
fn a_lot_registration_changed_behind_the_back_is_named() {
    let conn = populated();
    conn.execute("UPDATE lots SET loading_wt_pct = 10.0 WHERE lot = 'L1'", [])
        .unwrap();
    let r = audit::verify(&conn).unwrap();
    let f = &r.findings[0];
    assert_eq!(
        (f.table.as_str(), f.row.as_str(), f.field.as_str()),
        ("lots", "L1", "loading_wt_pct")
    );
}

#[test]
fn the_event_log_refuses_updates_and_deletes() {
    let conn = populated();
    assert!(conn.execute("UPDATE events SET actor = 'x'", []).is_err());
    assert!(conn.execute("DELETE FROM events", []).is_err());
    assert!(
        conn.execute("UPDATE measurements SET value = 1", [])
            .is_err()
    );
}

#[test]
fn a_second_ingestion_of_one_content_is_refused_by_the_database() {
    let conn = populated();
    let err = conn.execute(
        "INSERT INTO source_files(sha256, path, size, seen_at, outcome, event_seq) VALUES ('bb', 'x', 1, 'now', 'ingested', 1)",
        [],
    );
    assert!(err.is_err());
}

#[test]
fn a_measurement_counter_moved_back_is_named() {
    let conn = populated();
    // Measurement ids live only in the event payloads; a counter set back would make the
    // next value reuse an id.
    conn.execute(
        "UPDATE id_counters SET next = 2 WHERE name = 'measurement'",
        [],
    )
    .unwrap();
    let r = audit::verify(&conn).unwrap();
    let f = &r.findings[0];
    assert_eq!(
        (f.table.as_str(), f.row.as_str(), f.field.as_str()),
        ("id_counters", "measurement", "next")
    );
    assert_eq!(f.stored, "2");
}

#[test]
fn a_file_of_many_batches_merges_each_batch_rows_wherever_they_stand() {
    // Thirty lines over twelve batches, interleaved (B0..B11, then again, then B0..B5):
    // a file of more batches than a scan is used for, so the batch map is exercised too.
    // Repeated lines are recognised; one changed repeat (line 27, B1) is a conflict.
    let mut conn = store::open_in_memory().unwrap();
    let tx = conn.transaction().unwrap();
    let conv = |b: usize| 0.5 + b as f64 / 100.0;
    let rows: Vec<CycleRow> = (0..30)
        .map(|i| {
            let b = i % 12;
            let c = if i == 25 { 0.99 } else { conv(b) };
            row(i as u64 + 2, &format!("B{b}"), "L1", c)
        })
        .collect();
    let s = records::record_parsed(
        &tx,
        &facts("many.csv", "ee"),
        &ParsedFile::Cycles(rows),
        "qa",
    )
    .unwrap();
    assert_eq!((s.rows_new, s.rows_known, s.rows_conflict), (12, 17, 1));
    tx.commit().unwrap();
    for b in 0..12 {
        let c = records::cycle(&conn, &format!("B{b}")).unwrap().unwrap();
        assert_eq!(c.get(Quantity::Conversion), Some(conv(b)), "B{b}");
        assert_eq!(c.conflicts, i64::from(b == 1), "B{b}");
    }
    let r = audit::verify(&conn).unwrap();
    assert!(r.ok(), "{:?}", r.findings);
}
