//! Lot sheets kept as spreadsheets (.xlsx, .ods) read like delimited ones: the same lots as
//! the equivalent CSV, errors naming sheet, row and column, exactly once, and through the
//! watched folder. The workbooks are written by the tests themselves: .xlsx with
//! rust_xlsxwriter, .ods as its ZIP of XML (the OpenDocument layout).

#![cfg(unix)]

mod common;

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use rust_xlsxwriter::{ExcelDateTime, Format, Formula, Workbook};
use turnbook::ingest::{ParsedFile, Profile, parse};

/// The lot sheet's profile: units read from the headers, as the example configuration has it.
const PROFILE: &str = r#"kind = "lots"
delimiter = ","
columns.lot = { header = "lot" }
columns.catalyst = { header = "catalyst" }
columns.metal = { header = "metal" }
columns.loading = { header = "loading", unit = "from-header" }
columns.charged_mass = { header = "charged mass", unit = "from-header" }
columns.received = { header = "received" }
columns.supplier_lot = { header = "supplier lot" }
columns.cost = { header = "cost" }
columns.water_content = { header = "water", unit = "from-header" }
"#;

const HEADER: [&str; 9] = [
    "lot",
    "catalyst",
    "metal",
    "loading (%)",
    "charged mass (g)",
    "received",
    "supplier lot",
    "cost",
    "water (%)",
];

/// A supplier lot that a spreadsheet would run as a formula, were it not text.
const FORMULA_LIKE: &str = "=HYPERLINK(\"http://example.test\",\"S-1\")";

/// The CSV the workbooks below are equivalent to.
fn csv_sheet() -> String {
    format!(
        "{}\nPD-S-1,Pd/C 5 % paste,Pd,5,10.5,2026-10-05,\"{}\",1320,50\n\
         PD-S-2,Pd/C 5 % paste,Pd,5,12,2026-10-06,4711,,\n",
        HEADER.join(","),
        FORMULA_LIKE.replace('"', "\"\"")
    )
}

fn profile(extra: &str) -> Profile {
    Profile::from_toml(&format!("{PROFILE}{extra}")).unwrap()
}

/// The .xlsx of [`csv_sheet`]: numbers as numbers, dates as serial dates with a date
/// format, the cost as a formula whose stored result carries float noise, the catalyst
/// merged over both rows, an empty water cell. `bad_loading` replaces row 3's loading
/// with text; `sheets_before` adds worksheets ahead of "Lots".
fn xlsx_sheet(bad_loading: Option<&str>, received_year: u16, sheets_before: &[&str]) -> Vec<u8> {
    let mut wb = Workbook::new();
    for name in sheets_before {
        let ws = wb.add_worksheet();
        ws.set_name(*name).unwrap();
        ws.write_string(0, 0, "nothing to read here").unwrap();
    }
    let ws = wb.add_worksheet();
    ws.set_name("Lots").unwrap();
    for (c, h) in HEADER.iter().enumerate() {
        ws.write_string(0, c as u16, *h).unwrap();
    }
    let date = Format::new().set_num_format("yyyy-mm-dd");
    ws.write_string(1, 0, "PD-S-1").unwrap();
    ws.write_string(2, 0, "PD-S-2").unwrap();
    ws.merge_range(1, 1, 2, 1, "Pd/C 5 % paste", &Format::new())
        .unwrap();
    for r in 1..=2 {
        ws.write_string(r, 2, "Pd").unwrap();
    }
    ws.write_number(1, 3, 5.0).unwrap();
    match bad_loading {
        Some(text) => ws.write_string(2, 3, text).unwrap(),
        None => ws.write_number(2, 3, 5.0).unwrap(),
    };
    ws.write_number(1, 4, 10.5).unwrap();
    ws.write_number(2, 4, 12.0).unwrap();
    let d1 = ExcelDateTime::from_ymd(received_year, 10, 5).unwrap();
    let d2 = ExcelDateTime::from_ymd(2026, 10, 6).unwrap();
    ws.write_datetime_with_format(1, 5, &d1, &date).unwrap();
    ws.write_datetime_with_format(2, 5, &d2, &date).unwrap();
    ws.write_string(1, 6, FORMULA_LIKE).unwrap();
    ws.write_number(2, 6, 4711.0).unwrap();
    ws.write_formula(
        1,
        7,
        Formula::new("=1200*1.1").set_result("1320.0000000000002"),
    )
    .unwrap();
    ws.write_number(1, 8, 50.0).unwrap();
    wb.save_to_buffer().unwrap()
}

/// One ODS table cell.
enum OdsCell<'a> {
    Text(&'a str),
    Number(f64),
    Date(&'a str),
    /// A formula with its stored result.
    Formula(&'a str, f64),
    /// A formula's error value as LibreOffice stores it (an empty string value, the error
    /// text as the cell's content).
    Error(&'a str),
    Empty,
}

fn ods_cell(cell: &OdsCell<'_>) -> String {
    let esc = |s: &str| {
        s.replace('&', "&amp;")
            .replace('<', "&lt;")
            .replace('>', "&gt;")
            .replace('"', "&quot;")
    };
    match cell {
        OdsCell::Text(t) => format!(
            "<table:table-cell office:value-type=\"string\"><text:p>{}</text:p></table:table-cell>",
            esc(t)
        ),
        OdsCell::Number(v) => format!(
            "<table:table-cell office:value-type=\"float\" office:value=\"{v}\"><text:p>{v}</text:p></table:table-cell>"
        ),
        OdsCell::Date(d) => format!(
            "<table:table-cell office:value-type=\"date\" office:date-value=\"{d}\"><text:p>{d}</text:p></table:table-cell>"
        ),
        OdsCell::Formula(f, v) => format!(
            "<table:table-cell table:formula=\"{}\" office:value-type=\"float\" office:value=\"{v}\"><text:p>{v}</text:p></table:table-cell>",
            esc(f)
        ),
        OdsCell::Error(e) => format!(
            "<table:table-cell table:formula=\"of:=1/0\" office:value-type=\"string\" office:string-value=\"\" calcext:value-type=\"error\"><text:p>{e}</text:p></table:table-cell>"
        ),
        OdsCell::Empty => "<table:table-cell/>".to_string(),
    }
}

/// An .ods workbook of one worksheet: the ZIP of `mimetype` (first, stored), the manifest
/// and `content.xml`, as OpenDocument lays them out.
fn ods_workbook(sheet: &str, rows: &[Vec<OdsCell<'_>>]) -> Vec<u8> {
    let mut table = String::new();
    for row in rows {
        table.push_str("<table:table-row>");
        for c in row {
            table.push_str(&ods_cell(c));
        }
        table.push_str("</table:table-row>");
    }
    let content = format!(
        r#"<?xml version="1.0" encoding="UTF-8"?>
<office:document-content xmlns:office="urn:oasis:names:tc:opendocument:xmlns:office:1.0" xmlns:table="urn:oasis:names:tc:opendocument:xmlns:table:1.0" xmlns:text="urn:oasis:names:tc:opendocument:xmlns:text:1.0" xmlns:of="urn:oasis:names:tc:opendocument:xmlns:of:1.2" xmlns:calcext="urn:org:documentfoundation:names:experimental:calc:xmlns:calcext:1.0" office:version="1.2"><office:body><office:spreadsheet><table:table table:name="{sheet}">{table}</table:table></office:spreadsheet></office:body></office:document-content>"#
    );
    let manifest = r#"<?xml version="1.0" encoding="UTF-8"?>
<manifest:manifest xmlns:manifest="urn:oasis:names:tc:opendocument:xmlns:manifest:1.0" manifest:version="1.2"><manifest:file-entry manifest:full-path="/" manifest:media-type="application/vnd.oasis.opendocument.spreadsheet"/><manifest:file-entry manifest:full-path="content.xml" manifest:media-type="text/xml"/></manifest:manifest>"#;
    let mut zip = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
    let stored =
        zip::write::SimpleFileOptions::default().compression_method(zip::CompressionMethod::Stored);
    for (name, body) in [
        ("mimetype", "application/vnd.oasis.opendocument.spreadsheet"),
        ("META-INF/manifest.xml", manifest),
        ("content.xml", content.as_str()),
    ] {
        zip.start_file(name, stored).unwrap();
        zip.write_all(body.as_bytes()).unwrap();
    }
    zip.finish().unwrap().into_inner()
}

/// The .ods of [`csv_sheet`] (the catalyst written on each row), with `charged` as row 2's
/// charged mass cell.
fn ods_sheet(charged: OdsCell<'_>) -> Vec<u8> {
    use OdsCell::*;
    let header: Vec<OdsCell<'_>> = HEADER.iter().map(|h| Text(h)).collect();
    ods_workbook(
        "Lots",
        &[
            header,
            vec![
                Text("PD-S-1"),
                Text("Pd/C 5 % paste"),
                Text("Pd"),
                Number(5.0),
                charged,
                Date("2026-10-05"),
                Text(FORMULA_LIKE),
                Formula("of:=1200*1.1", 1320.0000000000002),
                Number(50.0),
            ],
            vec![
                Text("PD-S-2"),
                Text("Pd/C 5 % paste"),
                Text("Pd"),
                Number(5.0),
                Number(12.0),
                Date("2026-10-06"),
                Number(4711.0),
                Empty,
                Empty,
            ],
        ],
    )
}

fn lots_of(parsed: ParsedFile) -> Vec<turnbook::ingest::LotRow> {
    match parsed {
        ParsedFile::Lots(rows) => rows,
        other => panic!("expected lot rows, got {other:?}"),
    }
}

#[test]
fn a_spreadsheet_gives_the_same_lots_as_the_equivalent_csv() {
    let p = profile("");
    let from_csv = lots_of(parse(csv_sheet().as_bytes(), &p).unwrap());
    assert_eq!(from_csv.len(), 2);
    let from_xlsx = lots_of(parse(&xlsx_sheet(None, 2026, &[]), &p).unwrap());
    assert_eq!(from_xlsx, from_csv, ".xlsx differs from the CSV");
    let from_ods = lots_of(parse(&ods_sheet(OdsCell::Number(10.5)), &p).unwrap());
    assert_eq!(from_ods, from_csv, ".ods differs from the CSV");
    // What the CSV holds, spelled out: the formula's noise is gone, the date is the
    // typed one, a formula-like text is kept as text, a number in a text column is its
    // digits, an empty cell is no value.
    let first = &from_xlsx[0].record;
    assert_eq!(first.cost, Some(1320.0));
    assert_eq!(first.received.as_deref(), Some("2026-10-05"));
    assert_eq!(first.supplier_lot.as_deref(), Some(FORMULA_LIKE));
    assert_eq!(first.water_content_wt_pct, Some(50.0));
    let second = &from_xlsx[1].record;
    assert_eq!(second.catalyst, "Pd/C 5 % paste", "merged cell spread");
    assert_eq!(second.supplier_lot.as_deref(), Some("4711"));
    assert_eq!(second.cost, None);
    assert_eq!(second.water_content_wt_pct, None);
    assert_eq!((from_xlsx[0].line, from_xlsx[1].line), (2, 3));
}

#[test]
fn a_bad_cell_is_named_by_sheet_row_and_column() {
    let p = profile("");
    let e = parse(&xlsx_sheet(Some("five"), 2026, &[]), &p)
        .unwrap_err()
        .to_string();
    assert!(
        e.starts_with("sheet \"Lots\", row 3, column D, field 'loading': expected a number"),
        "{e}"
    );
    assert!(e.contains("found \"five\""), "{e}");
    // A date cell passes the same plausible-date window as a date in text.
    let e = parse(&xlsx_sheet(None, 1985, &[]), &p)
        .unwrap_err()
        .to_string();
    assert!(
        e.starts_with("sheet \"Lots\", row 2, column F, field 'received'"),
        "{e}"
    );
    assert!(e.contains("1990-01-01"), "{e}");
    // An error value where the profile reads a number.
    let e = parse(&ods_sheet(OdsCell::Error("#DIV/0!")), &p)
        .unwrap_err()
        .to_string();
    assert!(
        e.starts_with("sheet \"Lots\", row 2, column E, field 'charged_mass': expected a value"),
        "{e}"
    );
    assert!(e.contains("#DIV/0!"), "{e}");
    // The same lot rules as on the command line: a mass of 0 is refused.
    let e = parse(&ods_sheet(OdsCell::Number(0.0)), &p)
        .unwrap_err()
        .to_string();
    assert!(e.starts_with("sheet \"Lots\", row 2, column E"), "{e}");
}

#[test]
fn the_profile_names_the_worksheet() {
    let book = xlsx_sheet(None, 2026, &["Notes"]);
    // The first worksheet by default: "Notes" has no lot header.
    let e = parse(&book, &profile("")).unwrap_err().to_string();
    assert!(e.starts_with("sheet \"Notes\""), "{e}");
    let rows = lots_of(parse(&book, &profile("sheet = \"Lots\"\n")).unwrap());
    assert_eq!(rows.len(), 2);
    let e = parse(&book, &profile("sheet = \"Lotz\"\n"))
        .unwrap_err()
        .to_string();
    assert!(e.contains("a worksheet named \"Lotz\""), "{e}");
    assert!(e.contains("\"Notes\", \"Lots\""), "{e}");
}

#[test]
fn a_zip_that_is_no_workbook_is_refused_with_a_reason() {
    let mut zip = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
    zip.start_file("a.txt", zip::write::SimpleFileOptions::default())
        .unwrap();
    zip.write_all(b"hello").unwrap();
    let bytes = zip.finish().unwrap().into_inner();
    let e = parse(&bytes, &profile("")).unwrap_err().to_string();
    assert!(e.contains("a spreadsheet saved as .xlsx or .ods"), "{e}");
}

/// A plant with one watched folder of lot sheets, `lots/`.
fn plant(dir: &Path) -> PathBuf {
    let toml = format!(
        "database = \"plant.db\"\nquarantine = \"quarantine\"\n\n[profiles.lot-sheet]\n{PROFILE}\n\
         [[folders]]\npath = \"lots\"\nprofile = \"lot-sheet\"\nsettle = 300\n\n\
         [mail]\ntransport = \"file\"\ndir = \"outbox\"\nfrom = \"turnbook@plant.test\"\n"
    );
    std::fs::create_dir_all(dir.join("lots")).unwrap();
    let config = dir.join("turnbook.toml");
    std::fs::write(&config, toml).unwrap();
    config
}

fn turnbook(config: &Path, args: &[&str]) -> std::process::Output {
    let mut all = vec!["--config", config.to_str().unwrap()];
    all.extend_from_slice(args);
    common::run(&all)
}

/// The registered lots, every column but the event that wrote them.
fn stored_lots(dir: &Path) -> Vec<Vec<String>> {
    read_lots(dir).unwrap()
}

fn read_lots(dir: &Path) -> rusqlite::Result<Vec<Vec<String>>> {
    let conn = rusqlite::Connection::open_with_flags(
        dir.join("plant.db"),
        rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY,
    )?;
    let mut stmt = conn.prepare("SELECT * FROM lots ORDER BY lot")?;
    let names: Vec<String> = stmt.column_names().map(str::to_string).collect();
    stmt.query_map([], |row| {
        let mut out = Vec::new();
        for (i, n) in names.iter().enumerate() {
            if n != "event_seq" {
                let v: rusqlite::types::Value = row.get(i)?;
                out.push(format!("{n}={v:?}"));
            }
        }
        Ok(out)
    })?
    .collect()
}

#[test]
fn ingest_registers_the_lots_of_a_workbook_once() {
    let csv_dir = tempfile::tempdir().unwrap();
    let csv_cfg = plant(csv_dir.path());
    std::fs::write(csv_dir.path().join("lots/sheet.csv"), csv_sheet()).unwrap();
    let out = turnbook(
        &csv_cfg,
        &["ingest", csv_dir.path().join("lots").to_str().unwrap()],
    );
    assert!(out.status.success(), "{out:?}");

    for (name, bytes) in [
        ("sheet.xlsx", xlsx_sheet(None, 2026, &[])),
        ("sheet.ods", ods_sheet(OdsCell::Number(10.5))),
    ] {
        let dir = tempfile::tempdir().unwrap();
        let cfg = plant(dir.path());
        let path = dir.path().join("lots").join(name);
        std::fs::write(&path, &bytes).unwrap();
        let out = turnbook(&cfg, &["ingest", path.to_str().unwrap()]);
        assert!(out.status.success(), "{name}: {out:?}");
        assert_eq!(
            stored_lots(dir.path()),
            stored_lots(csv_dir.path()),
            "{name}"
        );
        // The same content again, under another name: a duplicate, nothing registered twice.
        let again = dir.path().join("lots").join(format!("copy-{name}"));
        std::fs::write(&again, &bytes).unwrap();
        let out = turnbook(&cfg, &["ingest", again.to_str().unwrap()]);
        assert!(out.status.success(), "{name}: {out:?}");
        let summary = String::from_utf8_lossy(&out.stdout);
        assert!(
            summary.contains("1 files: 0 ingested, 1 duplicates, 0 rejected"),
            "{name}: {summary}"
        );
        assert_eq!(stored_lots(dir.path()).len(), 2);
    }
}

#[test]
fn a_bad_workbook_is_rejected_naming_file_sheet_row_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let cfg = plant(dir.path());
    let path = dir.path().join("lots/bad-lots.xlsx");
    std::fs::write(&path, xlsx_sheet(Some("five"), 2026, &[])).unwrap();
    let out = turnbook(&cfg, &["ingest", path.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(1), "{out:?}");
    let text = format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(text.contains("bad-lots.xlsx"), "{text}");
    assert!(
        text.contains("sheet \"Lots\", row 3, column D, field 'loading'"),
        "{text}"
    );
    assert!(stored_lots(dir.path()).is_empty());
}

#[test]
fn the_service_registers_a_workbook_dropped_into_its_folder() {
    let dir = tempfile::tempdir().unwrap();
    let cfg = plant(dir.path());
    let log = std::fs::File::create(dir.path().join("service.log")).unwrap();
    let mut child = Command::new(common::turnbook_binary())
        .arg("--config")
        .arg(&cfg)
        .arg("watch")
        .stdin(Stdio::null())
        .stdout(log.try_clone().unwrap())
        .stderr(log)
        .env_remove("RUST_LOG")
        .spawn()
        .unwrap();
    // Written under an ignored name, then renamed: the folder sees one whole file.
    let tmp = dir.path().join("lots/lots.xlsx.part");
    std::fs::write(&tmp, xlsx_sheet(None, 2026, &[])).unwrap();
    std::fs::rename(&tmp, dir.path().join("lots/lots.xlsx")).unwrap();
    let start = Instant::now();
    let mut lots = Vec::new();
    while start.elapsed() < Duration::from_secs(30) {
        // The database may not exist yet, or be mid-migration: read again later.
        lots = read_lots(dir.path()).unwrap_or_default();
        if lots.len() == 2 {
            break;
        }
        std::thread::sleep(Duration::from_millis(200));
    }
    // SAFETY: kill(2) on our own child's pid, which we have not reaped yet.
    unsafe {
        libc::kill(child.id() as i32, libc::SIGTERM);
    }
    let status = child.wait().unwrap();
    let log = std::fs::read_to_string(dir.path().join("service.log")).unwrap_or_default();
    assert_eq!(
        lots.len(),
        2,
        "the service did not register the lots:\n{log}"
    );
    assert!(status.success(), "{status:?}\n{log}");
}

#[test]
fn a_stray_cell_far_away_is_refused_not_read_into_memory() {
    let mut wb = Workbook::new();
    let ws = wb.add_worksheet();
    ws.set_name("Lots").unwrap();
    for (c, h) in HEADER.iter().enumerate() {
        ws.write_string(0, c as u16, *h).unwrap();
    }
    // The last cell a worksheet has: the area up to it holds 17 billion cells.
    ws.write_string(1_048_575, 16_383, "x").unwrap();
    let bytes = wb.save_to_buffer().unwrap();
    let e = parse(&bytes, &profile("")).unwrap_err().to_string();
    assert!(e.starts_with("sheet \"Lots\""), "{e}");
    assert!(e.contains("1048576 rows by 16384 columns"), "{e}");
}

#[test]
fn ingest_with_a_named_profile_reads_a_workbook_from_anywhere() {
    let dir = tempfile::tempdir().unwrap();
    let cfg = plant(dir.path());
    std::fs::create_dir_all(dir.path().join("inbox")).unwrap();
    let path = dir.path().join("inbox/from-the-supplier.ods");
    std::fs::write(&path, ods_sheet(OdsCell::Number(10.5))).unwrap();
    // Outside every watched folder no profile applies...
    let out = turnbook(&cfg, &["ingest", path.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(1), "{out:?}");
    assert!(stored_lots(dir.path()).is_empty());
    // ...until the command line names one; the rejected content is then read anew.
    let out = turnbook(
        &cfg,
        &["ingest", path.to_str().unwrap(), "--profile", "lot-sheet"],
    );
    assert!(out.status.success(), "{out:?}");
    let lots = stored_lots(dir.path());
    assert_eq!(lots.len(), 2);
    assert!(
        lots[0].contains(&"lot=Text(\"PD-S-1\")".to_string()),
        "{lots:?}"
    );
}

#[test]
fn a_cycles_export_saved_as_a_workbook_gives_the_same_rows() {
    let p = Profile::from_toml(
        "kind = \"cycles\"\ndatetime_format = \"%d.%m.%Y %H:%M\"\n\
         columns.batch_id = { header = \"Batch\" }\ncolumns.lot = { header = \"Lot\" }\n\
         columns.started_at = { header = \"Start\" }\n\
         columns.conversion = { header = \"Conversion\", unit = \"%\" }\n",
    )
    .unwrap();
    let csv = "Batch,Lot,Start,Conversion\nB-1,PD-S-1,05.10.2026 14:30,97.25\n\
               B-2,PD-S-1,06.10.2026 08:00,96.1\n";
    let mut wb = Workbook::new();
    let ws = wb.add_worksheet();
    for (c, h) in ["Batch", "Lot", "Start", "Conversion"].iter().enumerate() {
        ws.write_string(0, c as u16, *h).unwrap();
    }
    let stamp = Format::new().set_num_format("dd.mm.yyyy hh:mm");
    for (r, (batch, (d, h, m), conv)) in [
        ("B-1", (5, 14, 30), 97.25),
        // A conversion computed in the sheet, with its binary noise.
        ("B-2", (6, 8, 0), 0.961 * 100.0),
    ]
    .into_iter()
    .enumerate()
    {
        let r = r as u32 + 1;
        ws.write_string(r, 0, batch).unwrap();
        ws.write_string(r, 1, "PD-S-1").unwrap();
        let t = ExcelDateTime::from_ymd(2026, 10, d)
            .unwrap()
            .and_hms(h, m, 0)
            .unwrap();
        ws.write_datetime_with_format(r, 2, &t, &stamp).unwrap();
        ws.write_number(r, 3, conv).unwrap();
    }
    let from_xlsx = parse(&wb.save_to_buffer().unwrap(), &p).unwrap();
    assert_eq!(from_xlsx, parse(csv.as_bytes(), &p).unwrap());
}
