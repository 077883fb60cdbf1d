//! `ParseCache` gives exactly what `parse_valid` gives, file after file, while headers
//! repeat and change and several profiles share one cache; and errors from a kept layout
//! name each file's own lines.

use proptest::prelude::*;
use turnbook::ingest::{ParseCache, ParseError, ParsedFile, Profile, parse_valid};

/// The backfill's profile.
const REACTOR: &str = r#"
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
"#;

/// The same columns with a date-only layout (values read as midnight).
const REACTOR_DATES: &str = r#"
kind = "cycles"
datetime_format = "%Y-%m-%d"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.cycle_no = { header = "Cycle" }
columns.started_at = { header = "Started" }
columns.duration = { header = "Time", unit = "from-header" }
columns.temperature = { header = "T", unit = "from-header" }
columns.conversion = { header = "Conversion", unit = "from-header" }
"#;

/// The same files read with another conversion header and a declared unit: the same header
/// row resolves differently.
const REACTOR_CONV: &str = r#"
kind = "cycles"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.cycle_no = { header = "Cycle" }
columns.started_at = { header = "Started" }
columns.duration = { header = "Time", unit = "from-header" }
columns.temperature = { header = "T", unit = "from-header" }
columns.conversion = { header = "Conv", unit = "%" }
"#;

/// Banner line, semicolons, decimal commas, default ISO layouts.
const EUROPEAN: &str = r#"
kind = "cycles"
delimiter = ";"
decimal = ","
skip_lines = 1
columns.batch_id = { header = "Charge" }
columns.started_at = { header = "Start" }
columns.substrate = { header = "Substrat", unit = "mmol" }
columns.yield = { header = "Ausbeute", unit = "fraction" }
columns.temperature = { header = "Temp", unit = "from-header" }
"#;

const LOTS: &str = r#"
kind = "lots"
date_format = "%d.%m.%Y"
columns.lot = { header = "Lot" }
columns.catalyst = { header = "Catalyst" }
columns.metal = { header = "Metal" }
columns.loading = { header = "Loading", unit = "%" }
columns.charged_mass = { header = "Mass", unit = "g" }
columns.received = { header = "Received" }
columns.cost = { header = "Cost" }
"#;

/// One column a file may have: the ways its header is written (the first is the one the
/// profile expects) and cells that may stand under it.
type Column = (&'static [&'static str], &'static [&'static str]);

const REACTOR_COLUMNS: &[Column] = &[
    (
        &["Batch", "BATCH", " Batch ", "Charge"],
        &["B0001", "B-2", "", "B\u{7}x", "\"B,3\""],
    ),
    (&["Lot", "lot"], &["LOT-1", "", "LOT-2"]),
    (&["Cycle", "Cycle [1]"], &["1", "943", "0", "x", "", "1.5"]),
    (
        &["Started", "Start"],
        &[
            "2026-01-04T06:31:00",
            "2026-01-04",
            "2026-02-30T00:00:00",
            "04.01.2026",
            "",
            "2026-01-04T06:31",
        ],
    ),
    (
        &[
            "Time (min)",
            "Time [h]",
            "Time (furlong)",
            "Time",
            "Time (degC)",
        ],
        &["120", "1e3", "-5", "abc", "", "0"],
    ),
    (
        &["T (degC)", "T [K]", "t (°C)", "T (%)"],
        &["60.0", "25", "9999", "warm", "", "-300"],
    ),
    (
        &[
            "Conversion (%)",
            "Conversion [fraction]",
            "Conv",
            "Conv [%]",
            "Conv [fraction]",
            "Conversion",
        ],
        &["94.35", "100", "101", "x", "", "0.5"],
    ),
];

/// The reactor's columns with date-only start cells first.
const REACTOR_DATE_COLUMNS: &[Column] = &[
    (
        &["Batch", "BATCH", " Batch ", "Charge"],
        &["B0001", "B-2", "", "B\u{7}x", "\"B,3\""],
    ),
    (&["Lot", "lot"], &["LOT-1", "", "LOT-2"]),
    (&["Cycle", "Cycle [1]"], &["1", "943", "0", "x", "", "1.5"]),
    (
        &["Started", "Start"],
        &[
            "2026-01-04",
            "2026-01-04T06:31:00",
            "2026-02-30",
            "04.01.2026",
            "",
        ],
    ),
    (
        &[
            "Time (min)",
            "Time [h]",
            "Time (furlong)",
            "Time",
            "Time (degC)",
        ],
        &["120", "1e3", "-5", "abc", "", "0"],
    ),
    (
        &["T (degC)", "T [K]", "t (°C)", "T (%)"],
        &["60.0", "25", "9999", "warm", "", "-300"],
    ),
    (
        &[
            "Conversion (%)",
            "Conversion [fraction]",
            "Conv",
            "Conv [%]",
            "Conv [fraction]",
            "Conversion",
        ],
        &["94.35", "100", "101", "x", "", "0.5"],
    ),
];

const EUROPEAN_COLUMNS: &[Column] = &[
    (&["Charge", "charge", "Batch"], &["C-1", "", "C 2"]),
    (
        &["Start", "Beginn"],
        &[
            "2026-01-04 06:31:00",
            "2026-01-04T06:31:00",
            "2026-01-04",
            "04.01.2026 06:31",
            "",
        ],
    ),
    (
        &[
            "Substrat",
            "Substrat [mmol]",
            "Substrat [mol]",
            "Substrat [kg]",
        ],
        &["1,5", "1.5", "2", "-1", "", "1,5e-3"],
    ),
    (
        &["Ausbeute", "Ausbeute (fraction)", "Ausbeute (%)"],
        &["0,5", "1,2", "x", ""],
    ),
    (
        &["Temp [°C]", "Temp [K]", "Temp", "Temp [mg]"],
        &["25,0", "300", "x", ""],
    ),
];

const LOT_COLUMNS: &[Column] = &[
    (&["Lot"], &["L-1", ""]),
    (&["Catalyst", "Cat"], &["5% Pd/C", ""]),
    (&["Metal"], &["Pd", "pd", "Xx", ""]),
    (
        &["Loading", "Loading [%]", "Loading [fraction]"],
        &["5", "0", "150", "x", ""],
    ),
    (&["Mass", "Mass (g)", "Mass (mg)"], &["1.5", "-1", ""]),
    (
        &["Received"],
        &[
            "04.01.2026",
            "2026-01-04",
            "31.02.2026",
            "",
            "04.01.2026 10:00",
        ],
    ),
    (&["Cost"], &["100", "-1", "1,000", ""]),
];

fn load(toml: &str) -> Profile {
    match Profile::from_toml(toml) {
        Ok(p) => p,
        Err(e) => panic!("test profile invalid: {e}"),
    }
}

/// The profiles, each with its columns, delimiter and banner lines.
fn profiles() -> Vec<(Profile, &'static [Column], char, &'static str)> {
    vec![
        (load(REACTOR), REACTOR_COLUMNS, ',', ""),
        (load(REACTOR_DATES), REACTOR_DATE_COLUMNS, ',', ""),
        (load(REACTOR_CONV), REACTOR_COLUMNS, ',', ""),
        (
            load(EUROPEAN),
            EUROPEAN_COLUMNS,
            ';',
            "Gerät 7; \"Kanal 2\n",
        ),
        (load(LOTS), LOT_COLUMNS, ',', ""),
    ]
}

/// How a header row is written: column order, one header written another way, and an
/// extra column (none, a note, or the first column again).
#[derive(Debug, Clone)]
struct HeaderSpec {
    profile: usize,
    order: usize,
    changed: Option<(usize, usize)>,
    extra: usize,
}

/// One file under a header from the run's pool.
#[derive(Debug, Clone)]
struct FileSpec {
    header: usize,
    blank_lines: Vec<bool>,
    crlf: bool,
    /// Cell picks, then 0 a whole row, 1 truncated, 2 an extra filled cell, 3 an extra empty
    /// cell; and whether a blank line comes before it.
    rows: Vec<(Vec<usize>, usize, bool)>,
}

fn header_spec() -> impl Strategy<Value = HeaderSpec> {
    (
        0usize..5,
        prop_oneof![3 => Just(0usize), 1 => 1usize..3],
        proptest::option::weighted(0.25, (0usize..8, 1usize..6)),
        prop_oneof![6 => Just(0usize), 1 => 1usize..3],
    )
        .prop_map(|(profile, order, changed, extra)| HeaderSpec {
            profile,
            order,
            changed,
            extra,
        })
}

fn file_spec() -> impl Strategy<Value = FileSpec> {
    let row = (
        proptest::collection::vec(prop_oneof![12 => Just(0usize), 1 => 0usize..6], 8),
        prop_oneof![8 => Just(0usize), 1 => 1usize..4],
        proptest::bool::weighted(0.1),
    );
    (
        0usize..16,
        proptest::collection::vec(any::<bool>(), 0..4),
        any::<bool>(),
        prop_oneof![
            1 => proptest::collection::vec(row.clone(), 0..1),
            8 => proptest::collection::vec(row, 1..4),
        ],
    )
        .prop_map(|(header, blank_lines, crlf, rows)| FileSpec {
            header,
            blank_lines,
            crlf,
            rows,
        })
}

/// Text of one file, and the index of its profile.
fn write(headers: &[HeaderSpec], f: &FileSpec) -> (usize, String) {
    let all = profiles();
    let h = &headers[f.header % headers.len()];
    let (_, columns, delim, banner) = &all[h.profile % all.len()];
    let n = columns.len();
    let order: Vec<usize> = match h.order {
        0 => (0..n).collect(),
        1 => (0..n).rev().collect(),
        _ => (0..n).map(|i| (i + 1) % n).collect(),
    };
    let eol = if f.crlf { "\r\n" } else { "\n" };
    let join = |cells: Vec<&str>| cells.join(&delim.to_string());
    let mut text = String::from(*banner);
    for &spaces in &f.blank_lines {
        // A blank line, or a row of empty cells (also blank).
        text.push_str(if spaces { "  " } else { "" });
        if !spaces {
            text.push(*delim);
        }
        text.push_str(eol);
    }
    let mut header: Vec<&str> = order
        .iter()
        .map(|&c| {
            let names = columns[c].0;
            match h.changed {
                Some((col, v)) if col % n == c => names[v % names.len()],
                _ => names[0],
            }
        })
        .collect();
    match h.extra {
        1 => header.push("Note"),
        2 => header.push(columns[order[0]].0[0]),
        _ => {}
    }
    text.push_str(&join(header));
    text.push_str(eol);
    for (picks, op, blank_before) in &f.rows {
        if *blank_before {
            text.push_str(eol);
        }
        let mut cells: Vec<&str> = order
            .iter()
            .map(|&c| {
                let pool = columns[c].1;
                pool[picks[c % picks.len()] % pool.len()]
            })
            .collect();
        if h.extra != 0 {
            cells.push("");
        }
        match op {
            1 => {
                cells.pop();
            }
            2 => cells.push("zzz"),
            3 => cells.push(""),
            _ => {}
        }
        text.push_str(&join(cells));
        text.push_str(eol);
    }
    (h.profile % all.len(), text)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn cached_parsing_equals_parse_valid(
        headers in proptest::collection::vec(header_spec(), 1..6),
        files in proptest::collection::vec(file_spec(), 1..40),
    ) {
        let all = profiles();
        let mut cache = ParseCache::new();
        for f in &files {
            let (p, text) = write(&headers, f);
            let profile = &all[p].0;
            let want = parse_valid(text.as_bytes(), profile);
            let got = cache.parse_valid(text.as_bytes(), profile);
            prop_assert_eq!(got, want, "profile {}, file:\n{}", p, text);
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    /// Any bytes after a header row of the pool, or any bytes at all: same result, no panic.
    #[test]
    fn cached_parsing_of_garbage_equals_parse_valid(
        files in proptest::collection::vec(
            (0usize..5, 0usize..3, proptest::collection::vec(any::<u8>(), 0..200)),
            1..20,
        ),
    ) {
        let all = profiles();
        let mut cache = ParseCache::new();
        for (p, header, tail) in &files {
            let (profile, columns, delim, banner) = &all[*p];
            let mut bytes = Vec::from(banner.as_bytes());
            if *header > 0 {
                let names: Vec<&str> = columns.iter().map(|c| c.0[0]).collect();
                bytes.extend_from_slice(names.join(&delim.to_string()).as_bytes());
                bytes.push(b'\n');
            }
            if *header == 2 {
                bytes.retain(|b| *b != b'\n');
            }
            bytes.extend_from_slice(tail);
            let want = parse_valid(&bytes, profile);
            prop_assert_eq!(cache.parse_valid(&bytes, profile), want);
        }
    }
}

/// The generator reaches both outcomes, the date-only fallback, and the same header row
/// resolving differently under different profiles.
#[test]
fn the_generated_files_cover_successes_and_failures() {
    let all = profiles();
    let mut cache = ParseCache::new();
    let mut read = |p: usize, started: usize| {
        let header = HeaderSpec {
            profile: p,
            order: 0,
            changed: None,
            extra: 0,
        };
        let mut picks = vec![0; 8];
        picks[3] = started;
        let file = FileSpec {
            header: 0,
            blank_lines: vec![],
            crlf: false,
            rows: vec![(picks, 0, false)],
        };
        let (_, text) = write(&[header], &file);
        cache.parse_valid(text.as_bytes(), &all[p].0)
    };
    assert_eq!(
        reactor_cycles(read(0, 0)),
        vec![(2, Some("2026-01-04T06:31:00".to_string()))]
    );
    assert_eq!(
        reactor_cycles(read(1, 0)),
        vec![(2, Some("2026-01-04T00:00:00".to_string()))]
    );
    assert!(read(0, 1).is_err());
    assert!(read(1, 1).is_err());
    // REACTOR_CONV finds no "Conv" column in the reactor's header.
    assert_eq!(failure(read(2, 0)).field.as_deref(), Some("conversion"));
}

fn reactor_cycles(r: Result<ParsedFile, ParseError>) -> Vec<(u64, Option<String>)> {
    match r {
        Ok(ParsedFile::Cycles(rows)) => rows.into_iter().map(|r| (r.line, r.started_at)).collect(),
        other => panic!("expected cycle rows, got {other:?}"),
    }
}

fn failure(r: Result<ParsedFile, ParseError>) -> ParseError {
    match r {
        Ok(f) => panic!("expected an error, parsed {f:?}"),
        Err(e) => e,
    }
}

const HEADER: &str = "Batch,Lot,Cycle,Started,Time (min),T (degC),Conversion (%)";

#[test]
fn a_kept_layout_reports_each_files_own_lines() {
    let p = load(REACTOR);
    let mut cache = ParseCache::new();
    let first = format!("{HEADER}\nB1,L,1,2026-01-04T06:31:00,120,60,50\n");
    assert_eq!(
        reactor_cycles(cache.parse_valid(first.as_bytes(), &p)),
        vec![(2, Some("2026-01-04T06:31:00".to_string()))]
    );

    // Same header after two blank lines: the header is line 3, the short row line 5.
    let second = format!("\n,,\n{HEADER}\nB2,L,2,2026-01-05T06:31:00,120,60,50\nB3,L,3,2026-01-0");
    let e = failure(cache.parse_valid(second.as_bytes(), &p));
    assert_eq!(e, failure(parse_valid(second.as_bytes(), &p)));
    assert_eq!((e.line, e.column), (Some(5), Some(5)));
    assert_eq!(e.field.as_deref(), Some("duration"));
    assert_eq!(e.expected, "7 fields as in the header on line 3");
    assert_eq!(e.found, "4 fields (a truncated line?)");

    // An extra filled cell, header on line 2.
    let third = format!("\r\n{HEADER}\r\nB4,L,4,,120,60,50,x\r\n");
    let e = failure(cache.parse_valid(third.as_bytes(), &p));
    assert_eq!(e, failure(parse_valid(third.as_bytes(), &p)));
    assert_eq!((e.line, e.column), (Some(3), Some(8)));
    assert_eq!(e.expected, "7 fields as in the header on line 2");

    // The header alone, on line 4.
    let fourth = format!("\n\n\n{HEADER}\n\n");
    let e = failure(cache.parse_valid(fourth.as_bytes(), &p));
    assert_eq!(e, failure(parse_valid(fourth.as_bytes(), &p)));
    assert_eq!(e.line, Some(4));
    assert_eq!(
        e.expected,
        "at least one data row after the header on line 4"
    );

    // Back to line 1: rows are numbered from it again.
    let fifth = format!("{HEADER}\n\nB5,L,5,2026-01-06T06:31:00,120,60,50\n");
    assert_eq!(
        reactor_cycles(cache.parse_valid(fifth.as_bytes(), &p)),
        vec![(3, Some("2026-01-06T06:31:00".to_string()))]
    );
}

#[test]
fn a_failed_header_is_located_in_each_file() {
    let p = load(REACTOR);
    let mut cache = ParseCache::new();
    let bad = "Batch,Lot,Cycle,Started,Time (furlong),T (degC),Conversion (%)";
    for blank in 0..3 {
        let text = format!("{}{bad}\nB1,L,1,,120,60,50\n", "\n".repeat(blank));
        let e = failure(cache.parse_valid(text.as_bytes(), &p));
        assert_eq!(e, failure(parse_valid(text.as_bytes(), &p)));
        assert_eq!((e.line, e.column), (Some(blank as u64 + 1), Some(5)));
        assert_eq!(e.field.as_deref(), Some("duration"));
    }
}

#[test]
fn a_kept_layout_counts_skipped_banner_lines() {
    let p = load(EUROPEAN);
    let mut cache = ParseCache::new();
    let header = "Charge;Start;Substrat;Ausbeute;Temp [°C]";
    let ok = format!("Gerät 7\n{header}\nC-1;2026-01-04 06:31:00;1,5;0,5;25\n");
    assert!(cache.parse_valid(ok.as_bytes(), &p).is_ok());
    let bad = format!("Gerät 7\n\n\n{header}\nC-2;2026-01-04 06:31:00;1,5;x;25\n");
    let e = failure(cache.parse_valid(bad.as_bytes(), &p));
    assert_eq!(e, failure(parse_valid(bad.as_bytes(), &p)));
    assert_eq!((e.line, e.column), (Some(5), Some(4)));
    assert_eq!(e.field.as_deref(), Some("yield"));
}
