//! A backfill over the demo's good exports plus broken ones, through the real binary:
//! every good file is ingested, every bad one is named on stderr with its reason and
//! copied into quarantine, the exit status is 1, and a second run adds nothing.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn turnbook(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_turnbook"))
        .args(args)
        .env_remove("TURNBOOK_SMTP_URL")
        .env_remove("RUST_LOG")
        .output()
        .unwrap()
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn count(db: &Path, sql: &str) -> i64 {
    let conn = rusqlite::Connection::open(db).unwrap();
    conn.query_row(sql, [], |r| r.get(0)).unwrap()
}

const BANNER: &str = "Sample report export,KV4 HPLC-2\nMethod,RED-ASSAY-v3\n";
const HEADER: &str = "Batch,Catalyst lot,Cycle,Started,Reaction time (min),Temperature (degC),Conversion (%),Selectivity (%)\n";

/// One data row of the demo's chromatography layout, with the given batch and fields.
fn row(batch: &str, cycle: &str, started: &str, minutes: &str, temp: &str, conv: &str) -> String {
    format!("{batch},PD-C-2611-A,{cycle},{started},{minutes},{temp},{conv},98.00\n")
}

fn good_row(batch: &str) -> String {
    row(batch, "1", "2026-10-05T08:30:00", "120", "60.7", "97.28")
}

/// Deterministic garbage (xorshift), so a failure can be reproduced byte for byte.
fn garbage(n: usize, mut seed: u64) -> Vec<u8> {
    let mut out = Vec::with_capacity(n);
    while out.len() < n {
        seed ^= seed << 13;
        seed ^= seed >> 7;
        seed ^= seed << 17;
        out.extend_from_slice(&seed.to_le_bytes());
    }
    out.truncate(n);
    out
}

fn utf16le_bom(s: &str) -> Vec<u8> {
    let mut out = vec![0xFF, 0xFE];
    for u in s.encode_utf16() {
        out.extend_from_slice(&u.to_le_bytes());
    }
    out
}

/// A broken file: where it goes, its bytes, and fragments its rejection must contain.
struct Bad {
    name: &'static str,
    folder: &'static str,
    bytes: Vec<u8>,
    reason: &'static [&'static str],
}

fn broken_files() -> Vec<Bad> {
    let head = format!("{BANNER}{HEADER}");
    let with_row = |r: String| format!("{head}{r}").into_bytes();
    let mut latin1 =
        format!("{head}X-L1,PD-C-2611-A,1,2026-10-05T08:30:00,120,60.7,97.28,98.00 caf")
            .into_bytes();
    latin1.extend_from_slice(&[0xE9, b'\n']); // 'é' in Latin-1, invalid as UTF-8
    let utf16_no_bom: Vec<u8> = format!("{head}{}", good_row("X-U16"))
        .encode_utf16()
        .flat_map(u16::to_le_bytes)
        .collect();
    let balance_neg = "Charge;Gewogen;Katalysator eingesetzt [g];Substrat [mmol];Produkt [g];Katalysator zurück [g]\n\
                       X-NEG-M;05.10.2026 08:30;-10,000;1200,0;153,03;9,858\n";
    vec![
        Bad {
            name: "latin1.csv",
            folder: "hplc",
            bytes: latin1,
            reason: &["line 4", "expected UTF-8 text", "E9"],
        },
        Bad {
            name: "utf16-no-bom.csv",
            folder: "hplc",
            bytes: utf16_no_bom,
            reason: &["line 1", "NUL", "UTF-16"],
        },
        Bad {
            name: "missing-column.csv",
            folder: "hplc",
            bytes: format!(
                "{BANNER}{}X-MC,PD-C-2611-A,1,2026-10-05T08:30:00,120,60.7,98.00\n",
                HEADER.replace(",Conversion (%)", "")
            )
            .into_bytes(),
            reason: &[
                "line 3",
                "field 'conversion'",
                "expected a column headed \"Conversion\"",
            ],
        },
        Bad {
            name: "text-in-number.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-TN",
                "1",
                "2026-10-05T08:30:00",
                "120",
                "60.7",
                "high",
            )),
            reason: &[
                "line 4",
                "column 7",
                "field 'conversion'",
                "expected a number",
                "\"high\"",
            ],
        },
        Bad {
            name: "empty.csv",
            folder: "hplc",
            bytes: Vec::new(),
            reason: &["empty file"],
        },
        Bad {
            name: "truncated.csv",
            folder: "hplc",
            bytes: format!("{head}{}X-TR2,PD-C-2611-A,2,2026-10-05T", good_row("X-TR1"))
                .into_bytes(),
            reason: &["line 5", "expected 8 fields", "found 4"],
        },
        Bad {
            name: "nul-byte.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-NUL",
                "1",
                "2026-10-05T08:30:00",
                "120",
                "60.7",
                "97.2\u{0}8",
            )),
            reason: &["line 4", "NUL"],
        },
        Bad {
            name: "unknown-unit.csv",
            folder: "hplc",
            bytes: format!(
                "{BANNER}{}{}",
                HEADER.replace("Temperature (degC)", "Temperature [furlong]"),
                good_row("X-UN")
            )
            .into_bytes(),
            reason: &[
                "line 3",
                "column 6",
                "field 'temperature'",
                "expected a unit",
                "furlong",
            ],
        },
        Bad {
            name: "conversion-150.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-AB",
                "1",
                "2026-10-05T08:30:00",
                "120",
                "60.7",
                "150",
            )),
            reason: &[
                "line 4",
                "column 7",
                "field 'conversion'",
                "between 0 and 1",
                "\"150\"",
            ],
        },
        Bad {
            name: "negative-duration.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-ND",
                "1",
                "2026-10-05T08:30:00",
                "-120",
                "60.7",
                "97.28",
            )),
            reason: &["line 4", "column 5", "field 'duration'", "greater than 0"],
        },
        Bad {
            name: "negative-mass.txt",
            folder: "balance",
            bytes: utf16le_bom(balance_neg),
            reason: &[
                "line 2",
                "column 3",
                "field 'catalyst_mass'",
                "greater than 0",
                "-10,000",
            ],
        },
        Bad {
            name: "ctrl-\u{7}name\u{1b}.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-CT",
                "1",
                "2026-10-05T08:30:00",
                "120",
                "60.7",
                "n/a",
            )),
            reason: &["line 4", "field 'conversion'", "\"n/a\""],
        },
        Bad {
            name: "header-only.csv",
            folder: "hplc",
            bytes: head.clone().into_bytes(),
            reason: &["line 3", "no data rows"],
        },
        Bad {
            name: "duplicate-header.csv",
            folder: "hplc",
            bytes: format!(
                "{BANNER}{}{}",
                HEADER.replace("Selectivity (%)", "Conversion (%)"),
                good_row("X-DH")
            )
            .into_bytes(),
            reason: &[
                "line 3",
                "field 'conversion'",
                "exactly one column",
                "columns 7 and 8",
            ],
        },
        Bad {
            name: "banner-only.csv",
            folder: "hplc",
            bytes: "Sample report export,KV4 HPLC-2\n".into(),
            reason: &["line 1", "expected 2 lines to skip"],
        },
        Bad {
            name: "wrong-date-layout.csv",
            folder: "hplc",
            bytes: with_row(row("X-BD", "1", "05.10.2026", "120", "60.7", "97.28")),
            reason: &[
                "line 4",
                "column 4",
                "field 'started_at'",
                "%Y-%m-%dT%H:%M:%S",
                "05.10.2026",
            ],
        },
        Bad {
            name: "extra-fields.csv",
            folder: "hplc",
            bytes: format!(
                "{head}X-EF,PD-C-2611-A,1,2026-10-05T08:30:00,120,60.7,97.28,98.00,1,2,3\n"
            )
            .into_bytes(),
            reason: &["line 4", "expected 8 fields", "found 11"],
        },
        Bad {
            name: "binary.csv",
            folder: "hplc",
            bytes: garbage(4096, 0x9E37_79B9_7F4A_7C15),
            reason: &["line 1", "expected UTF-8 text"],
        },
        Bad {
            name: "nan.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-NAN",
                "1",
                "2026-10-05T08:30:00",
                "120",
                "60.7",
                "NaN",
            )),
            reason: &["line 4", "column 7", "field 'conversion'", "\"NaN\""],
        },
        Bad {
            name: "negative-cycle.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-CY",
                "-3",
                "2026-10-05T08:30:00",
                "120",
                "60.7",
                "97.28",
            )),
            reason: &["line 4", "column 3", "field 'cycle_no'", "\"-3\""],
        },
        Bad {
            name: "below-absolute-zero.csv",
            folder: "hplc",
            bytes: with_row(row(
                "X-TK",
                "1",
                "2026-10-05T08:30:00",
                "120",
                "-400",
                "97.28",
            )),
            reason: &[
                "line 4",
                "column 6",
                "field 'temperature'",
                "between 150 K and 800 K",
            ],
        },
        Bad {
            name: "garbage-50mb.csv",
            folder: "hplc",
            bytes: garbage(50 << 20, 0xD1B5_4A32_D192_ED03),
            reason: &["52428800 bytes", "max_file_bytes"],
        },
    ]
}

/// The demo plant without its database: only the exports and the configuration, with the
/// chromatography profile declaring UTF-8 outright.
fn fresh_plant(root: &Path) -> PathBuf {
    let dir = root.join("plant");
    let out = turnbook(&["demo", "--dir", dir.to_str().unwrap(), "--no-live"]);
    assert_eq!(out.status.code(), Some(0), "stderr: {}", text(&out.stderr));
    for f in ["turnbook.db", "turnbook.db-wal", "turnbook.db-shm"] {
        let _ = std::fs::remove_file(dir.join(f));
    }
    let _ = std::fs::remove_dir_all(dir.join("outbox"));
    let cfg = dir.join("turnbook.toml");
    let toml = std::fs::read_to_string(&cfg).unwrap();
    let needle = "encoding = \"auto\"\nskip_lines = 2";
    assert!(toml.contains(needle), "the demo's hplc profile changed");
    std::fs::write(
        &cfg,
        toml.replacen(needle, "encoding = \"utf-8\"\nskip_lines = 2", 1),
    )
    .unwrap();
    dir
}

#[test]
fn good_files_are_ingested_and_each_broken_one_is_named_with_its_reason() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = fresh_plant(tmp.path());
    let exports = dir.join("exports");
    let mut listing = turnbook::notebook::Listing::default();
    turnbook::notebook::collect_files(&exports, &mut listing).unwrap();
    let good = listing.files;
    let bad = broken_files();
    assert!(bad.len() >= 20);
    for b in &bad {
        std::fs::write(
            exports.join(b.folder).join(format!("bad-{}", b.name)),
            &b.bytes,
        )
        .unwrap();
    }
    let cfg = dir.join("turnbook.toml");
    let db = dir.join("turnbook.db");
    let out = turnbook(&[
        "--config",
        cfg.to_str().unwrap(),
        "ingest",
        exports.to_str().unwrap(),
    ]);
    let stderr = text(&out.stderr);
    let stdout = text(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(1),
        "stdout: {stdout}\nstderr: {stderr}"
    );
    assert!(!stderr.contains("panicked"), "{stderr}");
    let (n_good, n_bad) = (good.len(), bad.len());
    assert!(
        stdout.contains(&format!(
            "{} files: {n_good} ingested, 0 duplicates, {n_bad} rejected",
            n_good + n_bad
        )),
        "summary: {stdout}"
    );

    // The rejection line escapes the control characters of the odd file name, and no raw
    // control character reaches the terminal.
    assert!(
        !stderr.chars().any(|c| c == '\u{7}' || c == '\u{1b}'),
        "{stderr:?}"
    );
    let logged = stderr
        .lines()
        .find(|l| l.starts_with("rejected ") && l.contains("bad-ctrl-"))
        .unwrap_or_else(|| panic!("no log line for the control-character name: {stderr}"));
    assert!(
        logged.contains("bad-ctrl-\\u{7}name\\u{1b}.csv"),
        "{logged}"
    );
    assert!(
        !logged.contains('\u{1b}') && !logged.contains('\u{7}'),
        "{logged:?}"
    );

    // Each bad file has its own "rejected PATH: REASON" line with the expected details.
    let rejected: Vec<&str> = stderr
        .lines()
        .filter(|l| l.starts_with("rejected "))
        .collect();
    assert_eq!(rejected.len(), n_bad, "{stderr}");
    for b in &bad {
        // Control characters aside, the name must be recognisable.
        let stem: String = b.name.chars().filter(|c| !c.is_control()).collect();
        let stem = stem
            .split('.')
            .next()
            .unwrap()
            .replace("ctrl-name", "ctrl-");
        let line = rejected
            .iter()
            .find(|l| l.contains(&format!("bad-{stem}")))
            .unwrap_or_else(|| panic!("no rejection line for {stem}: {stderr}"));
        for frag in b.reason {
            assert!(
                line.contains(frag),
                "rejection of {stem} lacks {frag:?}: {line}"
            );
        }
    }

    // The database agrees: every good file ingested, every bad one rejected with a reason.
    assert_eq!(
        count(
            &db,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'"
        ) as usize,
        n_good
    );
    assert_eq!(
        count(
            &db,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'rejected' AND error <> '' AND quarantined IS NOT NULL"
        ) as usize,
        n_bad
    );
    // No broken batch reached the cycle records.
    assert_eq!(
        count(&db, "SELECT COUNT(*) FROM cycles WHERE batch_id LIKE 'X-%'"),
        0
    );

    // Quarantine holds a byte-identical copy of each bad file.
    let quarantine = dir.join("quarantine");
    let copies: Vec<Vec<u8>> = std::fs::read_dir(&quarantine)
        .unwrap()
        .map(|e| std::fs::read(e.unwrap().path()).unwrap())
        .collect();
    assert_eq!(copies.len(), n_bad);
    for b in &bad {
        assert!(
            copies.contains(&b.bytes),
            "no quarantine copy of {:?}",
            b.name
        );
    }

    // A second run: the good files are duplicates, nothing new is recorded for them.
    let cycles = count(&db, "SELECT COUNT(*) FROM cycles");
    let measurements = count(&db, "SELECT COUNT(*) FROM measurements");
    let out = turnbook(&[
        "--config",
        cfg.to_str().unwrap(),
        "ingest",
        exports.to_str().unwrap(),
    ]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{stdout}");
    assert!(
        stdout.contains(&format!(
            "{} files: 0 ingested, {n_good} duplicates, {n_bad} rejected; rows: 0 new",
            n_good + n_bad
        )),
        "{stdout}"
    );
    assert_eq!(count(&db, "SELECT COUNT(*) FROM cycles"), cycles);
    assert_eq!(
        count(&db, "SELECT COUNT(*) FROM measurements"),
        measurements
    );
    assert_eq!(
        count(
            &db,
            "SELECT COUNT(*) FROM source_files WHERE outcome = 'ingested'"
        ) as usize,
        n_good
    );
    // The audit chain still verifies over the rejections.
    let out = turnbook(&["--config", cfg.to_str().unwrap(), "verify"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stdout));
}
