//! The parser on small hand-made exports: the values it reads and the exact position of
//! every class of error.

use turnbook::ingest::{ParseError, ParsedFile, Profile, parse};
use turnbook::model::Quantity;

fn profile(toml: &str) -> Profile {
    match Profile::from_toml(toml) {
        Ok(p) => p,
        Err(e) => panic!("test profile invalid: {e}"),
    }
}

const PLAIN: &str = r#"
kind = "cycles"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.cycle_no = { header = "Cycle" }
columns.started_at = { header = "Start" }
columns.duration = { header = "Time", unit = "h" }
columns.temperature = { header = "T", unit = "°C" }
columns.conversion = { header = "Conv", unit = "%" }
columns.catalyst_mass = { header = "Cat", unit = "mg" }
columns.metal_in_product = { header = "Pd", unit = "ppm" }
"#;

const HEADER: &str = "Batch,Lot,Cycle,Start,Time,T,Conv,Cat,Pd\n";

fn cycles(text: &str) -> Result<ParsedFile, ParseError> {
    parse(text.as_bytes(), &profile(PLAIN))
}

fn fails(text: &str) -> ParseError {
    match cycles(text) {
        Ok(f) => panic!("expected an error, parsed {f:?}"),
        Err(e) => e,
    }
}

fn pos(e: &ParseError) -> (Option<u64>, Option<u32>, Option<&str>) {
    (e.line, e.column, e.field.as_deref())
}

#[test]
fn reads_values_in_canonical_units() {
    let text = format!("{HEADER}B-1,L1,1,2026-11-03T08:15:00,1.5,25,99.5,500,3.2\n");
    let Ok(ParsedFile::Cycles(rows)) = cycles(&text) else {
        panic!("not parsed")
    };
    assert_eq!(rows.len(), 1);
    let r = &rows[0];
    assert_eq!(r.line, 2);
    assert_eq!(r.batch_id, "B-1");
    assert_eq!(r.lot.as_deref(), Some("L1"));
    assert_eq!(r.cycle_no, Some(1));
    assert_eq!(r.started_at.as_deref(), Some("2026-11-03T08:15:00"));
    let get = |q: Quantity| {
        r.values
            .iter()
            .find(|v| v.quantity == q)
            .map(|v| (v.value, v.column))
    };
    // 1.5 h = 5400 s; 25 °C = 298.15 K; 99.5 % = 0.995; 500 mg = 0.5 g; 3.2 ppm = 3.2 µg/g.
    assert_eq!(get(Quantity::Duration), Some((5400.0, 5)));
    assert_eq!(get(Quantity::Temperature), Some((298.15, 6)));
    assert_eq!(get(Quantity::Conversion), Some((0.995, 7)));
    assert_eq!(get(Quantity::CatalystMass), Some((0.5, 8)));
    assert_eq!(get(Quantity::MetalInProduct), Some((3.2, 9)));
    assert_eq!(
        r.values
            .iter()
            .find(|v| v.quantity == Quantity::Conversion)
            .map(|v| v.raw.as_str()),
        Some("99.5")
    );
}

#[test]
fn empty_cells_are_absent_and_blank_lines_skipped() {
    let text = format!("{HEADER}\nB-1,,,,1,,,,\n,,,,,,,,\n\nB-2,L1,2,,2,,,,\n");
    let Ok(ParsedFile::Cycles(rows)) = cycles(&text) else {
        panic!("not parsed")
    };
    assert_eq!(rows.len(), 2);
    assert_eq!((rows[0].line, rows[1].line), (3, 6));
    assert_eq!(rows[0].lot, None);
    assert_eq!(rows[0].values.len(), 1);
    assert_eq!(rows[1].cycle_no, Some(2));
}

#[test]
fn header_match_is_trimmed_and_case_insensitive_and_crlf_is_fine() {
    let text = " batch ,LOT,cycle,start,TIME,t,conv,cat,pd\r\nB-1,L,1,,1,,,,\r\n";
    let Ok(ParsedFile::Cycles(rows)) = cycles(text) else {
        panic!("not parsed")
    };
    assert_eq!(rows[0].batch_id, "B-1");
}

#[test]
fn empty_file() {
    for text in ["", "  \n\n \r\n"] {
        let e = fails(text);
        assert_eq!(pos(&e), (None, None, None));
        assert_eq!(e.found, "an empty file");
    }
}

#[test]
fn no_header_after_skipped_lines() {
    let p = profile(&format!("skip_lines = 3\n{PLAIN}"));
    let e = parse(b"banner\nsecond\n", &p).unwrap_err();
    assert_eq!(pos(&e), (Some(2), None, None));
    assert!(e.found.contains("only 2 lines"), "{e}");
    let e = parse(b"banner\nsecond\nthird\n\n", &p).unwrap_err();
    assert_eq!(e.expected, "a header row");
}

#[test]
fn header_only_has_no_data_rows() {
    let e = fails(HEADER);
    assert_eq!(pos(&e), (Some(1), None, None));
    assert_eq!(e.found, "no data rows");
}

#[test]
fn missing_column_names_expected_header_and_lists_found() {
    let e = fails("Batch,Lot,Cycle,Start,Time,T,Conversion,Cat,Pd\nB,L,1,,1,,,,\n");
    assert_eq!(pos(&e), (Some(1), None, Some("conversion")));
    assert_eq!(e.expected, "a column headed \"Conv\"");
    assert!(e.found.contains("\"Conversion\""), "{e}");
    assert!(e.found.starts_with("the headers \"Batch\", \"Lot\""), "{e}");
}

#[test]
fn missing_column_line_counts_skipped_lines() {
    let p = profile(&format!("skip_lines = 2\n{PLAIN}"));
    let e = parse(b"Instrument X\n\"quoted, banner\n\nBatch\nB\n", &p).unwrap_err();
    // Lines 1-2 are skipped whatever they hold (even an unclosed quote); line 3 is blank;
    // the header is line 4.
    assert_eq!(pos(&e), (Some(4), None, Some("catalyst_mass")));
}

#[test]
fn duplicate_header_is_ambiguous() {
    let e = fails("Batch,Lot,Cycle,Start,Time,T,Conv,Cat,Pd,conv\nB,L,1,,1,,,,,\n");
    assert_eq!(pos(&e), (Some(1), Some(10), Some("conversion")));
    assert_eq!(e.found, "columns 7 and 10");
}

#[test]
fn truncated_last_line() {
    let e = fails(&format!("{HEADER}B-1,L,1,,1,25,50,500,1\nB-2,L,2,,1,2"));
    assert_eq!(pos(&e), (Some(3), Some(7), Some("conversion")));
    assert_eq!(e.expected, "9 fields as in the header on line 1");
    assert_eq!(e.found, "6 fields (a truncated line?)");
}

#[test]
fn extra_fields_only_if_empty() {
    let ok = cycles(&format!("{HEADER}B-1,L,1,,1,25,50,500,1,,\n"));
    assert!(ok.is_ok(), "{ok:?}");
    let e = fails(&format!("{HEADER}B-1,L,1,,1,25,50,500,1,,x\n"));
    assert_eq!(pos(&e), (Some(2), Some(11), None));
}

#[test]
fn text_in_a_number_field() {
    let e = fails(&format!("{HEADER}B-1,L,1,,1,25,n/a,500,1\n"));
    assert_eq!(pos(&e), (Some(2), Some(7), Some("conversion")));
    assert_eq!(e.expected, "a number in % with '.' as decimal mark");
    assert_eq!(e.found, "\"n/a\"");
}

#[test]
fn thousands_separator_is_refused() {
    let e = fails(&format!("{HEADER}B-1,L,1,,1,25,50,\"1,500\",1\n"));
    assert_eq!(pos(&e), (Some(2), Some(8), Some("catalyst_mass")));
    assert!(e.expected.contains("no thousands separator"), "{e}");
}

#[test]
fn bad_date() {
    let e = fails(&format!("{HEADER}B-1,L,1,03.11.2026 08:15,1,25,50,500,1\n"));
    assert_eq!(pos(&e), (Some(2), Some(4), Some("started_at")));
    assert!(
        e.expected
            .starts_with("a date and time in the layout %Y-%m-%dT%H:%M:%S"),
        "{e}"
    );
}

#[test]
fn bad_cycle_number() {
    for bad in ["0", "1.5", "-2", "99999999999"] {
        let e = fails(&format!("{HEADER}B-1,L,{bad},,1,25,50,500,1\n"));
        assert_eq!(pos(&e), (Some(2), Some(3), Some("cycle_no")), "{bad}");
    }
}

#[test]
fn batch_id_is_required_on_every_row() {
    let e = fails(&format!("{HEADER}B-1,L,1,,1,,,,\n ,L,2,,1,,,,\n"));
    assert_eq!(pos(&e), (Some(3), Some(1), Some("batch_id")));
    assert_eq!(e.found, "an empty cell");
}

#[test]
fn control_characters_in_text_fields() {
    // A quoted field spanning two physical lines: the row starts on line 2.
    let e = fails(&format!(
        "{HEADER}\"B-1\nB-2\",L,1,,1,,,,\nB-3,L,1,,1,,,,\n"
    ));
    assert_eq!(pos(&e), (Some(2), Some(1), Some("batch_id")));
    assert_eq!(e.found, "\"B-1\\nB-2\"");
    // The next row's line number accounts for the embedded line break.
    let Ok(ParsedFile::Cycles(rows)) =
        cycles(&format!("{HEADER}B-0,\"L\",1,,1,,,,\nB-3,L,1,,1,,,,\n"))
    else {
        panic!()
    };
    assert_eq!(rows[1].line, 3);
    let e = fails(&format!("{HEADER}B-1,\"L\tX\",1,,1,,,,\n"));
    assert_eq!(pos(&e), (Some(2), Some(2), Some("lot")));
    let e = fails(&format!("{HEADER}B\u{1b}[31m,L,1,,1,,,,\n"));
    assert_eq!(pos(&e), (Some(2), Some(1), Some("batch_id")));
    assert!(!e.to_string().contains('\u{1b}'));
}

#[test]
fn quoted_multiline_field_keeps_later_line_numbers() {
    let e = fails(&format!("{HEADER}B-1,\"a\nb\",1,,1,,,,\nB-2,L,1,,x,,,,\n"));
    // The lot cell fails first, on line 2.
    assert_eq!(e.line, Some(2));
    // An unmapped note column spanning lines 2-4 moves the next row to line 5.
    let text = "Batch,Lot,Cycle,Start,Time,T,Conv,Cat,Pd,Note\n\
                B-1,L,1,,1,,,,,\"two\n\nlines\"\n\
                \"B-2\",L,\"1\",,oops,,,,,\n";
    let e = fails(text);
    assert_eq!(pos(&e), (Some(5), Some(5), Some("duration")));
}

#[test]
fn absurd_values_name_the_range() {
    let cases = [
        ("B,L,1,,1,25,120,500,1", 7, "conversion", "between 0 and 1"),
        ("B,L,1,,1,25,-0.5,500,1", 7, "conversion", "between 0 and 1"),
        ("B,L,1,,0,25,50,500,1", 5, "duration", "greater than 0"),
        (
            "B,L,1,,1,900,50,500,1",
            6,
            "temperature",
            "between 150 K and 800 K",
        ),
        (
            "B,L,1,,1,-200,50,500,1",
            6,
            "temperature",
            "between 150 K and 800 K",
        ),
        ("B,L,1,,1,25,50,0,1", 8, "catalyst_mass", "greater than 0"),
        ("B,L,1,,1,25,50,-3,1", 8, "catalyst_mass", "greater than 0"),
        ("B,L,1,,1,25,50,500,-1", 9, "metal_in_product", "0 or more"),
    ];
    for (row, column, field, range) in cases {
        let e = fails(&format!("{HEADER}{row}\n"));
        assert_eq!(pos(&e), (Some(2), Some(column), Some(field)), "{row}");
        assert!(e.expected.contains(range), "{row}: {e}");
    }
    // Within the rounding slack, 100.0000001 % reads as exactly 1.
    let Ok(ParsedFile::Cycles(rows)) = cycles(&format!("{HEADER}B,L,1,,1,25,100.0000001,500,0\n"))
    else {
        panic!()
    };
    assert_eq!(
        rows[0]
            .values
            .iter()
            .find(|v| v.quantity == Quantity::Conversion)
            .map(|v| v.value),
        Some(1.0)
    );
}

#[test]
fn configurable_temperature_range() {
    let p = profile(&format!("temperature_range_k = [100.0, 1000.0]\n{PLAIN}"));
    let text = format!("{HEADER}B,L,1,,1,650,50,500,1\n");
    assert!(parse(text.as_bytes(), &p).is_ok());
}

const FROM_HEADER: &str = r#"
kind = "cycles"
columns.batch_id = { header = "Batch" }
columns.duration = { header = "Time", unit = "from-header" }
columns.substrate = { header = "Substrate", unit = "from-header" }
"#;

#[test]
fn units_from_the_header() {
    let p = profile(FROM_HEADER);
    let Ok(ParsedFile::Cycles(rows)) = parse(b"Batch,Time (min),Substrate [mmol]\nB,30,250\n", &p)
    else {
        panic!()
    };
    let v: Vec<f64> = rows[0].values.iter().map(|v| v.value).collect();
    assert_eq!(v, vec![1800.0, 0.25]);
}

#[test]
fn unknown_unit_in_the_header() {
    let p = profile(FROM_HEADER);
    let e = parse(b"Batch,Time [min],Substrate [lb]\nB,30,250\n", &p).unwrap_err();
    assert_eq!(pos(&e), (Some(1), Some(3), Some("substrate")));
    assert_eq!(e.expected, "a unit in the header, one of mmol, mol");
    let e = parse(b"Batch,Time [g],Substrate [mol]\nB,30,250\n", &p).unwrap_err();
    assert_eq!(pos(&e), (Some(1), Some(2), Some("duration")));
    let e = parse(b"Batch,Time,Substrate [mol]\nB,30,250\n", &p).unwrap_err();
    assert_eq!(pos(&e), (Some(1), Some(2), Some("duration")));
    assert!(e.expected.contains("\"Time [unit]\""), "{e}");
}

#[test]
fn header_unit_must_agree_with_the_profile() {
    let p = profile(
        "kind = \"cycles\"\ncolumns.batch_id = { header = \"Batch\" }\ncolumns.product_mass = { header = \"Product\", unit = \"g\" }\n",
    );
    let ok = parse(b"Batch,Product [g]\nB,12\n", &p);
    assert!(ok.is_ok(), "{ok:?}");
    let e = parse(b"Batch,Product [kg]\nB,12\n", &p).unwrap_err();
    assert_eq!(pos(&e), (Some(1), Some(2), Some("product_mass")));
    assert!(e.found.contains("declaring kg"), "{e}");
}

#[test]
fn invalid_encoding_is_located() {
    let mut bytes = format!("{HEADER}B-1,L,1,,1,,,,\nB-2,").into_bytes();
    bytes.push(0xC3); // a lead byte without its continuation
    bytes.extend_from_slice(b",1,,1,,,,\n");
    let e = parse(&bytes, &profile(PLAIN)).unwrap_err();
    assert_eq!((e.line, e.column), (Some(3), Some(5)));
    assert!(e.found.contains("C3 at byte offset 60"), "{e}");
}

#[test]
fn invalid_profile_is_an_error_not_a_panic() {
    let mut p = profile(PLAIN);
    p.columns.remove("batch_id");
    let e = parse(b"x\n", &p).unwrap_err();
    assert_eq!(e.field.as_deref(), Some("profile"));
    assert_eq!(e.found, "columns.batch_id: required for kind = \"cycles\"");
}

const EUROPEAN: &str = r#"
kind = "cycles"
delimiter = ";"
decimal = ","
encoding = "utf-16le"
skip_lines = 2
datetime_format = "%d.%m.%Y %H:%M"
columns.batch_id = { header = "Charge" }
columns.lot = { header = "Katalysatorlos" }
columns.cycle_no = { header = "Zyklus" }
columns.started_at = { header = "Start" }
columns.duration = { header = "Zeit", unit = "from-header" }
columns.temperature = { header = "Temperatur", unit = "from-header" }
columns.conversion = { header = "Umsatz", unit = "from-header" }
columns.selectivity = { header = "Selektivität", unit = "%" }
columns.substrate = { header = "Substrat", unit = "mmol" }
"#;

#[test]
fn european_sample_utf16le_semicolons_decimal_commas() {
    let bytes = include_bytes!("fixtures/exports/hplc_european_utf16le.csv");
    let parsed = parse(bytes, &profile(EUROPEAN));
    let Ok(ParsedFile::Cycles(rows)) = parsed else {
        panic!("{parsed:?}")
    };
    assert_eq!(rows.len(), 3);
    assert_eq!(
        rows.iter().map(|r| r.line).collect::<Vec<_>>(),
        vec![4, 5, 7]
    );
    let r = &rows[0];
    assert_eq!(r.batch_id, "NB-0101");
    assert_eq!(r.started_at.as_deref(), Some("2026-11-03T08:15:00"));
    let vals: Vec<(Quantity, f64)> = r.values.iter().map(|v| (v.quantity, v.value)).collect();
    let want = [
        (Quantity::Duration, 5400.0),
        (Quantity::Temperature, 318.15),
        (Quantity::Substrate, 0.25),
        (Quantity::Conversion, 0.992),
        (Quantity::Selectivity, 0.975),
    ];
    assert_eq!(vals.len(), want.len());
    for ((q, v), (wq, wv)) in vals.iter().zip(want) {
        assert_eq!(*q, wq);
        assert!((v - wv).abs() <= 1e-12 * wv, "{q:?}: {v} vs {wv}");
    }
    // Auto-detection by BOM reads the same file.
    let mut auto = profile(EUROPEAN);
    auto.encoding = turnbook::ingest::Encoding::Auto;
    assert_eq!(parse(bytes, &auto), parse(bytes, &profile(EUROPEAN)));
}

#[test]
fn european_sample_read_as_utf8_fails_cleanly() {
    let bytes = include_bytes!("fixtures/exports/hplc_european_utf16le.csv");
    let mut p = profile(EUROPEAN);
    p.encoding = turnbook::ingest::Encoding::Utf8;
    let e = parse(bytes, &p).unwrap_err();
    assert_eq!(e.line, Some(1));
}

const LOTS: &str = r#"
kind = "lots"
datetime_format = "%d.%m.%Y %H:%M"
columns.lot = { header = "lot" }
columns.catalyst = { header = "catalyst" }
columns.metal = { header = "metal" }
columns.loading = { header = "loading_pct", unit = "%" }
columns.charged_mass = { header = "mass_g", unit = "g" }
columns.received = { header = "received" }
columns.supplier_lot = { header = "supplier_lot" }
columns.cost = { header = "cost" }
"#;

#[test]
fn lot_sheet() {
    let bytes = include_bytes!("fixtures/exports/lot_sheet.csv");
    let parsed = parse(bytes, &profile(LOTS));
    let Ok(ParsedFile::Lots(lots)) = parsed else {
        panic!("{parsed:?}")
    };
    assert_eq!(lots.len(), 2);
    assert_eq!(lots[0].record.lot, "LOT-A7");
    assert_eq!(lots[0].record.metal, "Pd");
    assert_eq!(lots[0].record.loading_wt_pct, 5.0);
    assert_eq!(lots[0].record.charged_mass_g, 12.5);
    assert_eq!(lots[0].record.received.as_deref(), Some("2026-10-28"));
    assert_eq!(lots[0].record.cost, Some(4200.0));
    assert_eq!(
        lots[1].record.metal, "Pt",
        "case of the symbol is normalised"
    );
    assert_eq!(lots[1].record.supplier_lot, None);
    assert_eq!(lots[1].line, 3);
}

#[test]
fn lot_sheet_water_content() {
    // An optional column: percent or fraction, an empty cell is a dry catalyst, 100 % or
    // more is refused naming line, column and key.
    let p = profile(&format!(
        "{LOTS}columns.water_content = {{ header = \"water\", unit = \"%\" }}\n"
    ));
    let head = "lot,catalyst,metal,loading_pct,mass_g,received,supplier_lot,cost,water\n";
    let text = format!("{head}L1,Pd/C paste,Pd,5,10,,,,50\nL2,Pt/C,Pt,1,10,,,,\n");
    let Ok(ParsedFile::Lots(lots)) = parse(text.as_bytes(), &p) else {
        panic!("not a lot sheet")
    };
    assert_eq!(lots[0].record.water_content_wt_pct, Some(50.0));
    assert_eq!(lots[1].record.water_content_wt_pct, None);
    for bad in ["100", "-3", "wet"] {
        let e = parse(format!("{head}L1,Pd/C,Pd,5,10,,,,{bad}\n").as_bytes(), &p).unwrap_err();
        assert_eq!(
            pos(&e),
            (Some(2), Some(9), Some("water_content")),
            "{bad}: {e}"
        );
    }
    let fraction = profile(&format!(
        "{LOTS}columns.water_content = {{ header = \"water\", unit = \"fraction\" }}\n"
    ));
    let Ok(ParsedFile::Lots(lots)) = parse(
        format!("{head}L1,Pd/C paste,Pd,5,10,,,,0.55\n").as_bytes(),
        &fraction,
    ) else {
        panic!("not a lot sheet")
    };
    assert!((lots[0].record.water_content_wt_pct.unwrap() - 55.0).abs() < 1e-12);
}

#[test]
fn lot_sheet_errors() {
    let p = profile(LOTS);
    let head = "lot,catalyst,metal,loading_pct,mass_g,received,supplier_lot,cost\n";
    let cases = [
        ("L1,Pd/C,Xx,5,10,,,", 3, "metal"),
        ("L1,Pd/C,Pd,0,10,,,", 4, "loading"),
        ("L1,Pd/C,Pd,120,10,,,", 4, "loading"),
        ("L1,Pd/C,Pd,5,,,,", 5, "charged_mass"),
        ("L1,Pd/C,Pd,5,10,28/10/2026,,", 6, "received"),
        ("L1,Pd/C,Pd,5,10,,,-5", 8, "cost"),
        (",Pd/C,Pd,5,10,,,", 1, "lot"),
    ];
    for (row, column, field) in cases {
        let e = parse(format!("{head}{row}\n").as_bytes(), &p).unwrap_err();
        assert_eq!(pos(&e), (Some(2), Some(column), Some(field)), "{row}: {e}");
    }
}
