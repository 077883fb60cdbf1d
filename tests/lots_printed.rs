//! `lots --json` prints each lot's entry as kept printed beside its state (0018), and
//! the bytes are those of the line printed whole: on the demo plant (a sign-off, forecasts
//! dated today), with every entry kept, with none (the line is read and printed instead),
//! and after the writer's open keeps them again. An edited kept entry is a `verify`
//! finding.

mod common;
use common::run;

use std::path::{Path, PathBuf};

use turnbook::config::Config;
use turnbook::notebook::{ListedFrom, lot_lines, with_schema, write_lots_json};

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

/// Run a verb on the plant; require exit status `code`; its stdout.
fn ok(dir: &Path, code: i32, args: &[&str]) -> String {
    let cfg = dir.join("turnbook.toml");
    let mut all = vec!["--config", cfg.to_str().unwrap()];
    all.extend_from_slice(args);
    let out = run(&all);
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    assert_eq!(
        out.status.code(),
        Some(code),
        "{args:?}: {text}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    text
}

/// How `lots --json` prints its entries now: (kept printed, printed from lines).
fn kept(cfg: &Config) -> (usize, usize) {
    let ListedFrom { kept, lines } = write_lots_json(cfg, std::io::sink()).unwrap();
    (kept, kept + lines)
}

#[test]
fn kept_entries_print_the_bytes_of_the_lines_and_are_checked_by_verify() {
    let (_tmp, dir) = demo();
    let cfg = Config::load(&dir.join("turnbook.toml")).unwrap();
    let db = rusqlite::Connection::open(dir.join("turnbook.db")).unwrap();

    // Every lot's entry is kept: the recompute that stored each state printed it.
    let (printed, all) = kept(&cfg);
    assert!(all >= 4, "{all} lots");
    assert_eq!(printed, all);
    let from_kept = ok(&dir, 0, &["lots", "--json"]);
    // The reference: the lines as `lots` reads them, printed through a JSON value tree.
    let reference = serde_json::to_string_pretty(&with_schema(&lot_lines(&cfg).unwrap()).unwrap())
        .unwrap()
        + "\n";
    assert_eq!(from_kept, reference);
    // What varies at read time is in it: a sign-off, and forecasts dated today.
    let v: serde_json::Value = serde_json::from_str(&from_kept).unwrap();
    let lots = v.as_array().unwrap();
    assert!(
        lots.iter().any(|l| l["signoff"]["state"] == "reviewed"),
        "{v}"
    );
    assert!(
        lots.iter().any(|l| l["forecast"]["as_of"].is_string()),
        "{v}"
    );

    // One entry missing (its lot's cycles are then not all accounted for): the others are
    // kept, every lot name is looked up, the same bytes.
    db.execute(
        "DELETE FROM lot_printed WHERE lot = (SELECT MIN(lot) FROM lot_printed WHERE cycles > 0)",
        [],
    )
    .unwrap();
    assert_eq!(kept(&cfg), (all - 1, all));
    assert_eq!(ok(&dir, 0, &["lots", "--json"]), from_kept);
    // None kept (a store from before): each line is read and printed, the same bytes.
    db.execute("DELETE FROM lot_printed", []).unwrap();
    assert_eq!(kept(&cfg), (0, all));
    assert_eq!(ok(&dir, 0, &["lots", "--json"]), from_kept);
    // One kept by another build's printing code: not used.
    db.execute(
        "INSERT INTO lot_printed(lot, engine_version, config_sha256, form, cycles, head, tail)
         SELECT lot, engine_version, config_sha256, 'entry-other', 0, 'garbage', NULL
         FROM lot_states LIMIT 1",
        [],
    )
    .unwrap();
    assert_eq!(kept(&cfg), (0, all));
    assert_eq!(ok(&dir, 0, &["lots", "--json"]), from_kept);

    // The writer's open keeps them again, once.
    let empty = dir.join("nothing-new");
    std::fs::create_dir_all(&empty).unwrap();
    ok(&dir, 0, &["ingest", empty.to_str().unwrap()]);
    assert_eq!(kept(&cfg), (all, all));
    assert_eq!(ok(&dir, 0, &["lots", "--json"]), from_kept);
    ok(&dir, 0, &["verify"]);

    // Someone shows the Pd lot as fresh in its kept entry only: `verify` names it. (Its
    // forecast is dated, so the activity is in the part after the date.)
    let tail: String = db
        .query_row(
            "SELECT tail FROM lot_printed WHERE lot = 'PD-C-2611-A'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    let at = tail.find("\"latest_activity\": ").unwrap();
    let end = at + tail[at..].find(',').unwrap();
    let edited = format!("{}\"latest_activity\": 0.99{}", &tail[..at], &tail[end..]);
    db.execute(
        "UPDATE lot_printed SET tail = ?1 WHERE lot = 'PD-C-2611-A'",
        [&edited],
    )
    .unwrap();
    assert!(ok(&dir, 0, &["lots", "--json"]).contains("\"latest_activity\": 0.99"));
    let text = ok(&dir, 1, &["verify"]);
    assert!(
        text.contains(
            "table lot_printed, row PD-C-2611-A, field tail: stored \"latest_activity\": 0.99,"
        ),
        "{text}"
    );
}
