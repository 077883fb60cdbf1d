//! The totals `status` and the lot lists read (kept as rows are written, migration 0020)
//! equal a count of the rows after every way turnbook writes them: files ingested,
//! duplicated and rejected, cycles rewritten with a conflict, by a correction and by an
//! exclusion; a row written behind turnbook's back is found by the recount. The counts of files in the last hour
//! and day, read from per-minute totals, equal a count of the rows for cut-offs anywhere
//! in a minute, on its boundary and on a file's own timestamp.

mod common;

use std::path::Path;
use std::process::{Command, Output};

use rusqlite::Connection;
use turnbook::store::queries;

fn turnbook(root: &Path, args: &[&str]) -> Output {
    Command::new(common::turnbook_binary())
        .arg("--config")
        .arg(root.join("turnbook.toml"))
        .args(args)
        .env_remove("RUST_LOG")
        .output()
        .unwrap()
}

fn counted(c: &Connection, sql: &str) -> i64 {
    c.query_row(sql, [], |r| r.get(0)).unwrap()
}

fn assert_agree(c: &Connection, when: &str) {
    let off = queries::kept_totals_disagreeing(c).unwrap();
    assert!(
        off.is_empty(),
        "{when}: kept totals differ from the rows: {off:?}"
    );
}

/// A notebook of two lots, files of a batch with no lot, a duplicate file, a rejected file,
/// a batch reported again with another value (a conflict) and a correction.
fn notebook(root: &Path) {
    common::reactor_config(root, 3);
    let exports = root.join("exports");
    std::fs::create_dir_all(&exports).unwrap();
    for i in 1..=40 {
        let lot = match i % 3 {
            0 => "PD-7",
            1 => "PD-8",
            _ => "",
        };
        std::fs::write(
            exports.join(format!("run{i:02}.csv")),
            format!("Batch,Lot,Conversion\nB{i},{lot},{}\n", 50 + i),
        )
        .unwrap();
    }
    std::fs::write(
        exports.join("copy.csv"),
        "Batch,Lot,Conversion\nB1,PD-8,51\n",
    )
    .unwrap();
    std::fs::write(
        exports.join("again.csv"),
        "Batch,Lot,Conversion\nB3,PD-7,58\n",
    )
    .unwrap();
    std::fs::write(exports.join("bad.csv"), "Batch,Lot\nB99\n").unwrap();
    let _ = turnbook(root, &["ingest", exports.to_str().unwrap()]);
    let o = turnbook(
        root,
        &["correct", "B4", "conversion", "0.60", "--reason", "typo"],
    );
    assert!(o.status.success(), "{o:?}");
}

#[test]
fn kept_totals_follow_every_change_of_the_rows() {
    let dir = tempfile::tempdir().unwrap();
    notebook(dir.path());
    let c = Connection::open(dir.path().join("t.db")).unwrap();
    assert_agree(&c, "after ingest");
    // The store holds what the test meant: every outcome, a conflict, cycles with no lot.
    assert_eq!(
        counted(
            &c,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'rejected'"
        ),
        1
    );
    assert!(
        counted(
            &c,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'duplicate'"
        ) >= 1
    );
    assert!(counted(&c, "SELECT COALESCE(SUM(conflicts), 0) FROM cycles") >= 1);
    assert!(counted(&c, "SELECT COUNT(*) FROM cycles WHERE lot IS NULL") >= 10);
    assert_eq!(queries::kept_total(&c, "cycles").unwrap(), 40);

    // An exclusion and a correction rewrite a cycle: the totals stay right.
    for args in [
        &["exclude", "B5", "--reason", "stirrer failed"][..],
        &["correct", "B6", "conversion", "0.61", "--reason", "typo"][..],
    ] {
        let o = turnbook(dir.path(), args);
        assert!(o.status.success(), "{o:?}");
    }
    let c = Connection::open(dir.path().join("t.db")).unwrap();
    assert_agree(&c, "after an exclusion and a correction");

    // A row written behind turnbook's back leaves the totals off, and the recount finds
    // exactly what: the cycle total and the lot's.
    c.execute_batch(
        "INSERT INTO cycles(batch_id, lot, conversion, first_seq) VALUES ('B300', 'PD-7', 0.5, 1);",
    )
    .unwrap();
    let off = queries::kept_totals_disagreeing(&c).unwrap();
    assert_eq!(
        off,
        vec![
            ("cycles".to_string(), 40, 41),
            ("cycles of lot PD-7".to_string(), 13, 14)
        ]
    );
}

/// Ingested files seen at or after `since`, counted row by row.
fn by_rows(c: &Connection, since: &str) -> i64 {
    c.query_row(
        "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested' AND seen_at >= ?1",
        [since],
        |r| r.get(0),
    )
    .unwrap()
}

#[test]
fn window_counts_equal_a_count_of_the_rows() {
    let dir = tempfile::tempdir().unwrap();
    notebook(dir.path());
    let c = Connection::open(dir.path().join("t.db")).unwrap();
    // Spread the files over two days, several to some minutes, at odd seconds, and count
    // the minutes again as migration 0020 does.
    c.execute_batch(
        "UPDATE source_files SET seen_at =
             strftime('%Y-%m-%dT%H:%M:%fZ', '2026-03-01T00:00:00',
                      '+' || ((id * 53) % 2900) || ' minutes',
                      '+' || ((id * 17) % 60) || '.' || ((id * 131) % 1000) || ' seconds');
         DELETE FROM ingested_by_minute;
         INSERT INTO ingested_by_minute(minute, n)
             SELECT substr(seen_at, 1, 16), COUNT(*) FROM source_files
             WHERE outcome = 'ingested' GROUP BY 1;",
    )
    .unwrap();
    assert_agree(&c, "after the files moved in time");
    let stamps: Vec<String> = c
        .prepare("SELECT seen_at FROM source_files")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .map(Result::unwrap)
        .collect();
    // Cut-offs: each file's own time, the minute it falls in, just after it, and a seeded
    // walk over the two days at millisecond steps.
    let mut cutoffs = Vec::new();
    for s in &stamps {
        cutoffs.push(s.clone());
        cutoffs.push(format!("{}:00.000Z", &s[..16]));
        cutoffs.push(format!("{}9Z", &s[..22]));
    }
    let mut x: u64 = 20261203;
    for _ in 0..300 {
        x = x
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let ms = (x >> 11) % (3000 * 60_000);
        let t = chrono::NaiveDate::from_ymd_opt(2026, 2, 28)
            .unwrap()
            .and_hms_opt(23, 0, 0)
            .unwrap()
            + chrono::Duration::milliseconds(ms as i64);
        cutoffs.push(t.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string());
    }
    cutoffs.push("2000-01-01T00:00:00.000Z".into());
    cutoffs.push("2100-01-01T00:00:00.000Z".into());
    let mut nonzero = 0;
    for since in &cutoffs {
        let kept = queries::file_counts(&c, since, since).unwrap();
        let rows = by_rows(&c, since);
        assert_eq!(kept.ingested_last_hour, rows, "since {since}");
        assert_eq!(kept.ingested_last_day, rows, "since {since}");
        if rows > 0 && rows < kept.ingested {
            nonzero += 1;
        }
    }
    // The cut-offs fell inside the spread, not only before or after it.
    assert!(nonzero > 100, "{nonzero}");
}
