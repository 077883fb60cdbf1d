//! Spreadsheet files (.xlsx, .ods) read through a profile like delimited text.
//!
//! Plants keep lot sheets in spreadsheets. A workbook's worksheet (the profile's `sheet`,
//! else the first) is turned into the rows of text a delimited file gives, cell by cell,
//! and those rows go through the same [`Layout`] as delimited text: the same header
//! matching, the same field checks, the same lot rules. Only what a cell is typed as is
//! settled here:
//!
//! - a number is written at Excel's 15 significant digits (the float noise of a formula's
//!   result, such as `0.30000000000000004`, is gone) with the profile's decimal mark;
//! - a date (an Excel serial date with a date format, an ODS date) is written in the
//!   profile's own layout for the column it stands in, so the date window applies as to text;
//! - a formula's stored result is read; a formula without one, an error value (`#DIV/0!`)
//!   or a duration in a column the profile reads is refused;
//! - in .xlsx, a merged area's value counts for every cell of the area (what the sheet
//!   shows); .ods files give it to the area's first cell only;
//! - text stays text: `=HYPERLINK(...)` typed as text is a name like any other (exports
//!   neutralise it), never evaluated.
//!
//! Rows and columns in errors are the sheet's own (row 4, column C), and every error names
//! the worksheet.

use std::collections::HashMap;
use std::fmt::Write as _;
use std::io::Cursor;

use calamine::{Data, Dimensions, Ods, Range, Reader, Xlsx};

use super::dates::DateLayouts;
use super::delimited::Record;
use super::number::short_number;
use super::parse::{self as text, Layout, shown};
use super::profile::{
    DEFAULT_DATE_FORMAT, DEFAULT_DATETIME_FORMATS, DecimalMark, Field, Profile, ProfileKind,
};
use super::record::{CycleRow, LotRow, ParseError, ParsedFile};

/// A ZIP archive's first bytes: both .xlsx and .ods are ZIP archives, and no delimited
/// text starts so.
const ZIP_MAGIC: &[u8] = b"PK\x03\x04";

/// Most cells of a worksheet's used area turnbook reads (a lot sheet has some hundreds).
const MAX_CELLS: usize = 2_000_000;

/// Decode and parse one export file, delimited text or a workbook (told by content).
pub fn parse(bytes: &[u8], profile: &Profile) -> Result<ParsedFile, ParseError> {
    if !is_spreadsheet(bytes) {
        return text::parse(bytes, profile);
    }
    profile.validate().map_err(|msg| ParseError {
        field: Some("profile".into()),
        ..fail(None, None, "a valid export profile", &msg)
    })?;
    parse_sheet(bytes, profile, None)
}

/// [`parse`] for a profile the caller has validated already (once for many files); a reader
/// of many files keeps a `ParseCache` instead.
pub fn parse_valid(bytes: &[u8], profile: &Profile) -> Result<ParsedFile, ParseError> {
    if is_spreadsheet(bytes) {
        parse_sheet(bytes, profile, None)
    } else {
        text::parse_valid(bytes, profile)
    }
}

/// Whether these bytes are a spreadsheet file (a ZIP archive) rather than delimited text.
pub fn is_spreadsheet(bytes: &[u8]) -> bool {
    bytes.starts_with(ZIP_MAGIC)
}

/// Read one spreadsheet file through a validated profile, as [`parse_valid`] reads text;
/// `now` bounds the plausible dates as the parse cache's present time does.
pub(super) fn parse_sheet(
    bytes: &[u8],
    profile: &Profile,
    now: Option<chrono::NaiveDateTime>,
) -> Result<ParsedFile, ParseError> {
    let sheet = Sheet::open(bytes, profile.sheet.as_deref())?;
    sheet.read(profile, now).map_err(|mut e| {
        e.sheet = Some(sheet.name.clone());
        e
    })
}

fn fail(line: Option<u64>, column: Option<u32>, expected: &str, found: &str) -> ParseError {
    ParseError {
        line,
        column,
        field: None,
        expected: expected.to_owned(),
        found: found.to_owned(),
        sheet: None,
    }
}

/// One worksheet's cells, by absolute position (row 1 and column A at index 0).
struct Sheet {
    name: String,
    rows: Vec<Vec<Data>>,
    /// Formulas by (row, column), for cells that hold one.
    formulas: HashMap<(usize, usize), String>,
}

/// Cells that hold something, by absolute (row, column), 0-based.
type Placed<T> = Vec<((usize, usize), T)>;

/// What an open workbook gives of the chosen worksheet: its name, the cells that hold
/// something by absolute (row, column), its formulas, its merged areas.
struct Parts {
    name: String,
    values: Placed<Data>,
    formulas: HashMap<(usize, usize), String>,
    merged: Vec<Dimensions>,
}

impl Sheet {
    fn open(bytes: &[u8], wanted: Option<&str>) -> Result<Sheet, ParseError> {
        let parts = match Xlsx::new(Cursor::new(bytes)) {
            Ok(mut book) => {
                let name = choose(&book.sheet_names(), wanted)?;
                let values = xlsx_values(&mut book, &name)?;
                let formulas = xlsx_formulas(&mut book, &name);
                let merged = book.merge_cells_by_sheet_name(&name).unwrap_or_default();
                Parts {
                    name,
                    values,
                    formulas,
                    merged,
                }
            }
            Err(xlsx) => match Ods::new(Cursor::new(bytes)) {
                Ok(mut book) => {
                    let name = choose(&book.sheet_names(), wanted)?;
                    let range = book
                        .worksheet_range(&name)
                        .map_err(|e| refused(&name, &e.to_string()))?;
                    let formulas = book
                        .worksheet_formula(&name)
                        .map(|f| placed(&f).into_iter().collect())
                        .unwrap_or_default();
                    Parts {
                        values: placed(&range),
                        name,
                        formulas,
                        merged: Vec::new(),
                    }
                }
                Err(_) => {
                    return Err(fail(
                        None,
                        None,
                        "delimited text, or a spreadsheet saved as .xlsx or .ods",
                        &format!(
                            "a ZIP archive that is neither ({})",
                            shown(&xlsx.to_string())
                        ),
                    ));
                }
            },
        };
        Sheet::lay_out(parts)
    }

    /// Place the cells at their absolute positions and spread merged areas, refusing a
    /// used area (up to the last cell holding a value or formula) of more than `MAX_CELLS`.
    fn lay_out(parts: Parts) -> Result<Sheet, ParseError> {
        let Parts {
            name,
            values,
            formulas,
            merged,
        } = parts;
        let (mut height, mut width) = (0usize, 0usize);
        for &(r, c) in values.iter().map(|(at, _)| at).chain(formulas.keys()) {
            height = height.max(r.saturating_add(1));
            width = width.max(c.saturating_add(1));
        }
        if height.saturating_mul(width) > MAX_CELLS {
            return Err(too_large(
                &name,
                &format!("{height} rows by {width} columns"),
            ));
        }
        let mut rows = vec![vec![Data::Empty; width]; height];
        for ((r, c), v) in values {
            if let Some(cell) = rows.get_mut(r).and_then(|row| row.get_mut(c)) {
                *cell = v;
            }
        }
        for area in &merged {
            spread(&mut rows, area);
        }
        Ok(Sheet {
            name,
            rows,
            formulas,
        })
    }

    /// The header row, then every data row through the profile's layout.
    fn read(
        &self,
        profile: &Profile,
        now: Option<chrono::NaiveDateTime>,
    ) -> Result<ParsedFile, ParseError> {
        let skip = profile.skip_lines;
        let Some(h) = (skip..self.rows.len()).find(|&r| !self.blank(r)) else {
            let found = if self.rows.iter().enumerate().all(|(r, _)| self.blank(r)) {
                "an empty worksheet".to_string()
            } else {
                format!("no header row after the {skip} skipped rows")
            };
            return Err(fail(None, None, "a header row and data rows", &found));
        };
        let header_line = line_of(h);
        let header: Vec<String> = self.rows[h]
            .iter()
            .map(|d| plain_text(d, profile.decimal))
            .collect();
        let layout = Layout::resolve(profile, &Record::from_cells(&header), header_line)?;
        let mut fields: Vec<Option<(Field, &str)>> = vec![None; header.len()];
        for (i, field, key) in layout.columns() {
            if let Some(slot) = fields.get_mut(i) {
                *slot = Some((field, key));
            }
        }
        let dates = DateLayouts::unprepared(now);
        let mut cycles = Vec::new();
        let mut lots = Vec::new();
        for r in h + 1..self.rows.len() {
            if self.blank(r) {
                continue;
            }
            let line = line_of(r);
            let record = Record::from_cells(&self.row_text(r, &fields, profile)?);
            layout.check_width(&record, line, header_line)?;
            match profile.kind {
                ProfileKind::Cycles => {
                    cycles.push(layout.cycle_row(profile, &dates, &record, line)?);
                }
                ProfileKind::Lots => {
                    lots.push(layout.lot_row(profile, &dates, &record, line)?);
                }
            }
        }
        finish(profile, cycles, lots, header_line)
    }

    fn blank(&self, r: usize) -> bool {
        self.rows.get(r).is_none_or(|row| {
            row.iter().all(|d| match d {
                Data::Empty => true,
                Data::String(s) => s.trim().is_empty(),
                _ => false,
            })
        })
    }

    /// A row's cells as text; a cell the profile reads that holds no usable value (an
    /// error value, a formula without a stored result, a duration) is refused here.
    fn row_text(
        &self,
        r: usize,
        fields: &[Option<(Field, &str)>],
        profile: &Profile,
    ) -> Result<Vec<String>, ParseError> {
        let Some(row) = self.rows.get(r) else {
            return Ok(Vec::new());
        };
        let mut texts = Vec::with_capacity(row.len());
        for (c, d) in row.iter().enumerate() {
            let bound = fields.get(c).copied().flatten();
            match self.cell_text(r, c, d, bound.map(|b| b.0), profile) {
                Ok(t) => texts.push(t),
                Err((expected, found)) => match bound {
                    Some((_, key)) => {
                        return Err(ParseError {
                            field: Some(key.to_owned()),
                            ..fail(Some(line_of(r)), Some(column_of(c)), &expected, &found)
                        });
                    }
                    // A column the profile does not read is not judged, only kept non-empty
                    // so that a stray value past the header is still seen.
                    None => texts.push(found),
                },
            }
        }
        Ok(texts)
    }

    /// One cell as the text a delimited export would hold, or (expected, found).
    fn cell_text(
        &self,
        r: usize,
        c: usize,
        d: &Data,
        field: Option<Field>,
        profile: &Profile,
    ) -> Result<String, (String, String)> {
        match d {
            Data::Empty => match self.formulas.get(&(r, c)) {
                Some(f) => Err((
                    "a value (save the file from a spreadsheet program, which stores each \
                     formula's result)"
                        .into(),
                    format!("the formula {} with no stored result", shown(&as_typed(f))),
                )),
                None => Ok(String::new()),
            },
            Data::Error(e) => Err(("a value".into(), format!("the spreadsheet error {e}"))),
            // An .ods file keeps a formula's error as text: known by its formula and words.
            Data::String(t) if self.formulas.contains_key(&(r, c)) && is_error_text(t) => Err((
                "a value".into(),
                format!("the spreadsheet error {}", shown(t)),
            )),
            Data::DateTime(dt) if dt.is_datetime() => Ok(match dt.as_datetime() {
                Some(v) => date_text(v, field, profile),
                None => number_text(dt.as_f64(), profile.decimal),
            }),
            Data::DateTimeIso(s) => Ok(match read_iso(s) {
                Some(v) => date_text(v, field, profile),
                None => s.clone(),
            }),
            Data::DateTime(dt) => Err(duration(&number_text(dt.as_f64(), DecimalMark::Point))),
            Data::DurationIso(s) => Err(duration(s)),
            other => Ok(plain_text(other, profile.decimal)),
        }
    }
}

/// A formula as a person types it: `=` and the expression (.xlsx stores it without the
/// `=`, .ods with an `of:=` namespace prefix).
fn as_typed(formula: &str) -> String {
    let f = formula.strip_prefix("of:").unwrap_or(formula);
    if f.starts_with('=') {
        f.to_owned()
    } else {
        format!("={f}")
    }
}

/// The error values spreadsheets show for a formula that failed (Excel's and
/// OpenDocument's names; LibreOffice's numbered `Err:502`).
fn is_error_text(t: &str) -> bool {
    const ERRORS: [&str; 8] = [
        "#DIV/0!",
        "#N/A",
        "#NAME?",
        "#NULL!",
        "#NUM!",
        "#REF!",
        "#VALUE!",
        "#GETTING_DATA",
    ];
    let t = t.trim();
    ERRORS.iter().any(|e| t.eq_ignore_ascii_case(e))
        || t.strip_prefix("Err:")
            .is_some_and(|n| !n.is_empty() && n.bytes().all(|b| b.is_ascii_digit()))
}

fn duration(found: &str) -> (String, String) {
    (
        "a plain number or text (a duration is not read from a sheet; write the number in \
         the column's unit)"
            .into(),
        format!("a duration cell {}", shown(found)),
    )
}

/// The worksheet to read: the named one (exactly, else ignoring case), else the first.
fn choose(names: &[String], wanted: Option<&str>) -> Result<String, ParseError> {
    let name = match wanted {
        Some(w) => names.iter().find(|n| n.as_str() == w).or_else(|| {
            names
                .iter()
                .find(|n| n.trim().eq_ignore_ascii_case(w.trim()))
        }),
        None => names.first(),
    };
    if let Some(name) = name {
        return Ok(name.clone());
    }
    let listed: Vec<String> = names.iter().map(|n| shown(n)).collect();
    let expected = match wanted {
        Some(w) => format!("a worksheet named {} (the profile's sheet)", shown(w)),
        None => "a worksheet".to_string(),
    };
    let found = if listed.is_empty() {
        "a workbook without worksheets".to_string()
    } else {
        format!("the worksheets {}", listed.join(", "))
    };
    Err(fail(None, None, &expected, &found))
}

fn refused(name: &str, why: &str) -> ParseError {
    ParseError {
        sheet: Some(name.to_owned()),
        ..fail(
            None,
            None,
            "a readable worksheet",
            &format!("a worksheet the reader refused ({})", shown(why)),
        )
    }
}

fn too_large(name: &str, found: &str) -> ParseError {
    ParseError {
        sheet: Some(name.to_owned()),
        ..fail(
            None,
            None,
            &format!("a worksheet of at most {MAX_CELLS} cells up to its last used cell"),
            found,
        )
    }
}

/// The non-empty cells of a range at their absolute positions.
fn placed<T: calamine::CellType + PartialEq>(range: &Range<T>) -> Placed<T> {
    let Some((r0, c0)) = range.start() else {
        return Vec::new();
    };
    let empty = T::default();
    range
        .used_cells()
        .filter(|(_, _, v)| **v != empty)
        .map(|(r, c, v)| ((r0 as usize + r, c0 as usize + c), v.clone()))
        .collect()
}

/// An .xlsx worksheet's values, streamed: the reader's own range would first allocate
/// every cell of the area up to the last used one, which a crafted file can make huge.
fn xlsx_values(book: &mut Xlsx<Cursor<&[u8]>>, name: &str) -> Result<Placed<Data>, ParseError> {
    let mut reader = book
        .worksheet_cells_reader(name)
        .map_err(|e| refused(name, &e.to_string()))?;
    let mut out = Vec::new();
    while let Some(cell) = reader
        .next_cell()
        .map_err(|e| refused(name, &e.to_string()))?
    {
        let value = Data::from(cell.get_value().clone());
        if value == Data::Empty {
            continue;
        }
        if out.len() >= MAX_CELLS {
            return Err(too_large(name, "more cells with values"));
        }
        let (r, c) = cell.get_position();
        out.push(((r as usize, c as usize), value));
    }
    Ok(out)
}

/// An .xlsx worksheet's formulas; they only explain an empty stored value, so a sheet whose
/// formulas cannot be read still has its values.
fn xlsx_formulas(book: &mut Xlsx<Cursor<&[u8]>>, name: &str) -> HashMap<(usize, usize), String> {
    let mut out = HashMap::new();
    let Ok(mut reader) = book.worksheet_cells_reader(name) else {
        return out;
    };
    while let Ok(Some(cell)) = reader.next_formula() {
        if out.len() >= MAX_CELLS {
            break;
        }
        let text = cell.get_value();
        if !text.trim().is_empty() {
            let (r, c) = cell.get_position();
            out.insert((r as usize, c as usize), text.clone());
        }
    }
    out
}

/// A merged area shows its first cell's value over the whole area.
fn spread(rows: &mut [Vec<Data>], area: &Dimensions) {
    let (r0, c0) = (area.start.0 as usize, area.start.1 as usize);
    let (r1, c1) = (area.end.0 as usize, area.end.1 as usize);
    let Some(value) = rows.get(r0).and_then(|row| row.get(c0)).cloned() else {
        return;
    };
    for row in rows.iter_mut().take(r1 + 1).skip(r0) {
        for cell in row.iter_mut().take(c1 + 1).skip(c0) {
            if *cell == Data::Empty {
                *cell = value.clone();
            }
        }
    }
}

fn finish(
    profile: &Profile,
    cycles: Vec<CycleRow>,
    lots: Vec<LotRow>,
    header_line: u64,
) -> Result<ParsedFile, ParseError> {
    let out = match profile.kind {
        ProfileKind::Cycles if !cycles.is_empty() => ParsedFile::Cycles(cycles),
        ProfileKind::Lots if !lots.is_empty() => ParsedFile::Lots(lots),
        _ => {
            return Err(fail(
                Some(header_line),
                None,
                &format!("at least one data row after the header on row {header_line}"),
                "no data rows",
            ));
        }
    };
    Ok(out)
}

fn line_of(r: usize) -> u64 {
    u64::try_from(r).map_or(u64::MAX, |r| r.saturating_add(1))
}

fn column_of(c: usize) -> u32 {
    u32::try_from(c).map_or(u32::MAX, |c| c.saturating_add(1))
}

/// A cell that is not a date, as text.
fn plain_text(d: &Data, mark: DecimalMark) -> String {
    match d {
        Data::Empty => String::new(),
        Data::String(s) => s.clone(),
        Data::Float(v) => number_text(*v, mark),
        Data::Int(i) => i.to_string(),
        Data::Bool(true) => "TRUE".into(),
        Data::Bool(false) => "FALSE".into(),
        Data::DateTime(dt) => number_text(dt.as_f64(), mark),
        Data::DateTimeIso(s) | Data::DurationIso(s) => s.clone(),
        Data::Error(e) => e.to_string(),
    }
}

/// A number at the 15 significant digits a spreadsheet keeps, in its shortest form, with
/// the profile's decimal mark.
fn number_text(v: f64, mark: DecimalMark) -> String {
    let text = short_number(v);
    match mark {
        DecimalMark::Point => text,
        DecimalMark::Comma => text.replace('.', ","),
    }
}

/// An ODS date or date and time (`2026-10-05`, `2026-10-05T14:30:00`).
fn read_iso(s: &str) -> Option<chrono::NaiveDateTime> {
    chrono::NaiveDateTime::parse_from_str(s, "%Y-%m-%dT%H:%M:%S%.f")
        .ok()
        .or_else(|| {
            chrono::NaiveDate::parse_from_str(s, "%Y-%m-%d")
                .ok()
                .map(|d| d.and_time(chrono::NaiveTime::MIN))
        })
}

/// A date cell as the text the profile expects in its column: `received` in the date
/// layout (the time of day, if any, dropped), `started_at` in the date-and-time layout,
/// elsewhere ISO 8601 (which the column's own check then judges).
fn date_text(v: chrono::NaiveDateTime, field: Option<Field>, profile: &Profile) -> String {
    use chrono::Timelike;
    // Serial dates carry binary fractions of a day: the nearest second is what was typed.
    let v = (v + chrono::Duration::milliseconds(500))
        .with_nanosecond(0)
        .unwrap_or(v);
    let layout = match field {
        Some(Field::Received) => profile
            .date_format
            .as_deref()
            .unwrap_or(DEFAULT_DATE_FORMAT),
        Some(Field::StartedAt) => profile
            .datetime_format
            .as_deref()
            .unwrap_or(DEFAULT_DATETIME_FORMATS[0]),
        _ if v.time() == chrono::NaiveTime::MIN => "%Y-%m-%d",
        _ => "%Y-%m-%dT%H:%M:%S",
    };
    let mut out = String::new();
    if write!(out, "{}", v.format(layout)).is_err() {
        out = v.format("%Y-%m-%dT%H:%M:%S").to_string();
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use calamine::{CellErrorType, ExcelDateTime, ExcelDateTimeType};

    fn profile(extra: &str) -> Profile {
        let toml = format!(
            "kind = \"lots\"\ncolumns.lot = {{ header = \"lot\" }}\n\
             columns.catalyst = {{ header = \"catalyst\" }}\ncolumns.metal = {{ header = \"metal\" }}\n\
             columns.loading = {{ header = \"loading\", unit = \"%\" }}\n\
             columns.charged_mass = {{ header = \"mass\", unit = \"g\" }}\n{extra}"
        );
        match Profile::from_toml(&toml) {
            Ok(p) => p,
            Err(e) => panic!("test profile invalid: {e}"),
        }
    }

    fn sheet(formulas: &[((usize, usize), &str)]) -> Sheet {
        Sheet {
            name: "S".into(),
            rows: Vec::new(),
            formulas: formulas
                .iter()
                .map(|(at, f)| (*at, (*f).to_string()))
                .collect(),
        }
    }

    #[test]
    fn numbers_lose_float_noise_and_take_the_decimal_mark() {
        assert_eq!(number_text(0.1 + 0.2, DecimalMark::Point), "0.3");
        assert_eq!(number_text(1200.0 * 1.1, DecimalMark::Point), "1320");
        assert_eq!(number_text(12.5, DecimalMark::Comma), "12,5");
        assert_eq!(number_text(4711.0, DecimalMark::Point), "4711");
        assert_eq!(number_text(-0.000_25, DecimalMark::Point), "-0.00025");
    }

    #[test]
    fn dates_take_the_layout_of_their_column() {
        let p = profile("date_format = \"%d.%m.%Y\"\ndatetime_format = \"%d.%m.%Y %H:%M\"\n");
        // 46000.5 is 2025-12-09 12:00 in the 1900 date system (Excel's day count).
        let noon = ExcelDateTime::new(46000.5, ExcelDateTimeType::DateTime, false);
        let cell = Data::DateTime(noon);
        let s = sheet(&[]);
        let got = |field| s.cell_text(1, 0, &cell, field, &p);
        assert_eq!(got(Some(Field::Received)), Ok("09.12.2025".into()));
        assert_eq!(got(Some(Field::StartedAt)), Ok("09.12.2025 12:00".into()));
        assert_eq!(got(None), Ok("2025-12-09T12:00:00".into()));
        // The 1904 date system counts 1462 days fewer to the same date.
        let mac = Data::DateTime(ExcelDateTime::new(
            46000.0 - 1462.0,
            ExcelDateTimeType::DateTime,
            true,
        ));
        assert_eq!(
            s.cell_text(1, 0, &mac, Some(Field::Received), &p),
            Ok("09.12.2025".into())
        );
        // An ODS date and date-time.
        let ods = Data::DateTimeIso("2025-12-09T06:30:00".into());
        assert_eq!(
            s.cell_text(1, 0, &ods, Some(Field::StartedAt), &p),
            Ok("09.12.2025 06:30".into())
        );
        let ods = Data::DateTimeIso("2025-12-09".into());
        assert_eq!(s.cell_text(1, 0, &ods, None, &p), Ok("2025-12-09".into()));
    }

    #[test]
    fn cells_without_a_usable_value_are_refused() {
        let p = profile("");
        let s = sheet(&[((4, 2), "SUM(A1:A3)")]);
        let (expected, found) = s
            .cell_text(4, 2, &Data::Empty, Some(Field::Loading), &p)
            .unwrap_err();
        assert!(expected.starts_with("a value"), "{expected}");
        assert_eq!(found, "the formula \"=SUM(A1:A3)\" with no stored result");
        let s2 = sheet(&[((4, 2), "of:=SUM([.A1:.A3])")]);
        let (_, found) = s2
            .cell_text(4, 2, &Data::Empty, Some(Field::Loading), &p)
            .unwrap_err();
        assert_eq!(
            found,
            "the formula \"=SUM([.A1:.A3])\" with no stored result"
        );
        // An empty cell without a formula is simply empty.
        assert_eq!(s.cell_text(4, 3, &Data::Empty, None, &p), Ok(String::new()));
        let err = Data::Error(CellErrorType::Div0);
        let (_, found) = s.cell_text(1, 1, &err, None, &p).unwrap_err();
        assert_eq!(found, "the spreadsheet error #DIV/0!");
        // An .ods formula's error, kept as its text.
        let s = sheet(&[((1, 1), "of:=1/0")]);
        let ods_err = Data::String("#DIV/0!".into());
        let (_, found) = s.cell_text(1, 1, &ods_err, None, &p).unwrap_err();
        assert_eq!(found, "the spreadsheet error \"#DIV/0!\"");
        // The same words typed as text are text.
        assert_eq!(s.cell_text(2, 1, &ods_err, None, &p), Ok("#DIV/0!".into()));
        let dur = Data::DurationIso("PT2H30M".into());
        assert!(s.cell_text(1, 1, &dur, None, &p).is_err());
        // Text is text, whatever it looks like.
        let text = Data::String("=HYPERLINK(\"x\")".into());
        assert_eq!(
            s.cell_text(1, 1, &text, Some(Field::Lot), &p),
            Ok("=HYPERLINK(\"x\")".into())
        );
    }

    #[test]
    fn a_merged_area_shows_its_first_value_throughout() {
        let mut rows = vec![
            vec![Data::String("a".into()), Data::Empty],
            vec![Data::Empty, Data::Float(2.0)],
        ];
        spread(
            &mut rows,
            &Dimensions {
                start: (0, 0),
                end: (1, 0),
            },
        );
        assert_eq!(rows[1][0], Data::String("a".into()));
        assert_eq!(rows[0][1], Data::Empty);
    }

    #[test]
    fn garbage_after_the_zip_magic_is_an_error_not_a_panic() {
        let p = profile("");
        let e = parse_sheet(b"PK\x03\x04not really a zip", &p, None).unwrap_err();
        assert!(e.expected.contains(".xlsx or .ods"), "{e}");
    }
}
