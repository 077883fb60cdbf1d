//! Reading decoded export text through a [`Profile`] into rows in canonical units.
//!
//! One pass over the text (`csv_core`, see [`super::delimited`]), first error wins. Every error
//! carries the 1-based physical line of the decoded text and, for a cell, the 1-based
//! column (the field's position in the row, as a spreadsheet counts columns).

use super::dates::{DateLayout, DateLayouts, DateWindow, Read, iso_date, iso_datetime};
use super::decode::decode;
use super::delimited::{Record, Records};
use super::number::{FRACTION_SLACK, parse_number, short_number};
use super::profile::{DecimalMark, Field, FieldType, Profile, ProfileKind, UNIT_FROM_HEADER};
use super::record::{CycleRow, LotRow, MeasuredValue, ParseError, ParsedFile};
use super::units::{Unit, split_header_unit};
use super::value::check_canonical;
use crate::model::{LotRecord, Quantity};

/// Longest text value (batch id, lot name...) we store; longer is a layout fault.
pub const MAX_TEXT_CHARS: usize = 200;

/// Decode and parse one export file.
pub fn parse(bytes: &[u8], profile: &Profile) -> Result<ParsedFile, ParseError> {
    profile.validate().map_err(|msg| ParseError {
        line: None,
        column: None,
        field: Some("profile".into()),
        expected: "a valid export profile".into(),
        found: msg,
        sheet: None,
    })?;
    parse_valid(bytes, profile)
}

/// [`parse`] for a profile the caller has validated already (once for many files). A reader of
/// many files keeps a [`ParseCache`](super::ParseCache) instead, which resolves each header once.
pub fn parse_valid(bytes: &[u8], profile: &Profile) -> Result<ParsedFile, ParseError> {
    let text = decode(bytes, profile.encoding)?;
    parse_text(&text, profile)
}

/// Parse already decoded text (the profile is assumed validated by [`parse`]).
pub fn parse_text(text: &str, profile: &Profile) -> Result<ParsedFile, ParseError> {
    let body = Body::open(text, profile)?;
    let layout = Layout::resolve(profile, body.header(), body.header_line())?;
    body.rows(profile, &layout, &DateLayouts::unprepared(None))
}

/// One file's text read up to its header row, which [`Body::header`] holds until
/// [`Body::rows`] reads the data rows through a [`Layout`] for that header.
pub(super) struct Body<'t> {
    reader: Records<'t>,
    record: Record,
    lines: LineCounter<'t>,
    header_line: u64,
}

impl<'t> Body<'t> {
    pub(super) fn open(text: &'t str, profile: &Profile) -> Result<Body<'t>, ParseError> {
        if text.trim().is_empty() {
            return Err(err(
                None,
                None,
                None,
                "a header row and data rows",
                "an empty file",
            ));
        }
        let (body, skipped) = skip_lines(text, profile.skip_lines)?;
        let mut reader = Records::new(body, profile.delimiter.byte());
        let mut record = Record::default();
        let mut lines = LineCounter::new(body, skipped);
        let header_line = loop {
            if !reader.read(&mut record) {
                return Err(err(
                    None,
                    None,
                    None,
                    "a header row",
                    &format!("no header row after the {skipped} skipped lines"),
                ));
            }
            if !is_blank(&record) {
                break lines.line_of(&record);
            }
        };
        Ok(Body {
            reader,
            record,
            lines,
            header_line,
        })
    }

    pub(super) fn header(&self) -> &Record {
        &self.record
    }

    /// The header row's 1-based physical line.
    pub(super) fn header_line(&self) -> u64 {
        self.header_line
    }

    /// Read the data rows; `layout` must be the profile's resolution of [`Body::header`]
    /// and `dates` must serve `profile` alone.
    pub(super) fn rows(
        self,
        profile: &Profile,
        layout: &Layout,
        dates: &DateLayouts,
    ) -> Result<ParsedFile, ParseError> {
        let mut all = None;
        let keep = &mut |rows: ParsedFile| -> Result<(), std::convert::Infallible> {
            all = Some(rows);
            Ok(())
        };
        match self.rows_in_chunks(profile, layout, dates, usize::MAX, keep) {
            Ok(_) => {}
            Err(Chunked::Parse(e)) => return Err(e),
            Err(Chunked::Sink(never)) => match never {},
        }
        all.ok_or_else(|| err(None, None, None, "data rows", "none"))
    }

    /// Read the data rows and hand them to `sink` in chunks of at most `chunk` rows, in
    /// file order, so that a large file never holds all its rows at once. A parse error
    /// stops the reading (chunks before it have been handed over: a caller that must not
    /// act on part of a bad file reads it once to check it, then again to act).
    pub(super) fn rows_in_chunks<E>(
        mut self,
        profile: &Profile,
        layout: &Layout,
        dates: &DateLayouts,
        chunk: usize,
        sink: &mut dyn FnMut(ParsedFile) -> Result<(), E>,
    ) -> Result<u64, Chunked<E>> {
        let header_line = self.header_line;
        let chunk = chunk.max(1);
        let mut rows = Rows::new(profile.kind);
        let mut count = 0u64;
        let record = &mut self.record;
        while self.reader.read(record) {
            if is_blank(record) {
                continue;
            }
            let line = self.lines.line_of(record);
            layout.check_width(record, line, header_line)?;
            match &mut rows {
                Rows::Cycles(v) => v.push(layout.cycle_row(profile, dates, record, line)?),
                Rows::Lots(v) => v.push(layout.lot_row(profile, dates, record, line)?),
            }
            count += 1;
            if rows.len() >= chunk {
                let full = std::mem::replace(&mut rows, Rows::new(profile.kind));
                sink(full.into_parsed()).map_err(Chunked::Sink)?;
            }
        }
        if count == 0 {
            return Err(Chunked::Parse(err(
                Some(header_line),
                None,
                None,
                &format!("at least one data row after the header on line {header_line}"),
                "no data rows",
            )));
        }
        if rows.len() > 0 {
            sink(rows.into_parsed()).map_err(Chunked::Sink)?;
        }
        Ok(count)
    }
}

/// Why reading a file in chunks stopped: the file, or the caller's handling of a chunk.
#[derive(Debug)]
pub enum Chunked<E> {
    Parse(ParseError),
    Sink(E),
}

impl<E> From<ParseError> for Chunked<E> {
    fn from(e: ParseError) -> Self {
        Chunked::Parse(e)
    }
}

enum Rows {
    Cycles(Vec<CycleRow>),
    Lots(Vec<LotRow>),
}

impl Rows {
    fn new(kind: ProfileKind) -> Rows {
        match kind {
            ProfileKind::Cycles => Rows::Cycles(Vec::new()),
            ProfileKind::Lots => Rows::Lots(Vec::new()),
        }
    }

    fn len(&self) -> usize {
        match self {
            Rows::Cycles(v) => v.len(),
            Rows::Lots(v) => v.len(),
        }
    }

    fn into_parsed(self) -> ParsedFile {
        match self {
            Rows::Cycles(v) => ParsedFile::Cycles(v),
            Rows::Lots(v) => ParsedFile::Lots(v),
        }
    }
}

fn err(
    line: Option<u64>,
    column: Option<u32>,
    field: Option<&str>,
    expected: &str,
    found: &str,
) -> ParseError {
    ParseError {
        line,
        column,
        field: field.map(str::to_owned),
        expected: expected.to_owned(),
        found: found.to_owned(),
        sheet: None,
    }
}

/// Shorten and escape text for a message: control characters are shown escaped so a
/// message can never carry a line break or terminal escape into a log or e-mail.
pub fn shown(text: &str) -> String {
    const MAX: usize = 60;
    let mut out = String::from("\"");
    for (n, c) in text.chars().enumerate() {
        if n == MAX {
            out.push('…');
            break;
        }
        if c.is_control() {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    out.push('"');
    out
}

fn skip_lines(text: &str, n: usize) -> Result<(&str, u64), ParseError> {
    let mut start = 0;
    for i in 0..n {
        match text[start..].find('\n') {
            Some(p) => start += p + 1,
            None => {
                let lines = if start == text.len() { i } else { i + 1 };
                return Err(err(
                    Some(lines.max(1) as u64),
                    None,
                    None,
                    &format!("{n} lines to skip before the header row, then the header"),
                    &format!("a file of only {lines} lines"),
                ));
            }
        }
    }
    Ok((&text[start..], n as u64))
}

/// Physical line numbers from the reader's byte offsets. The csv reader's own line
/// count does not include the empty lines it skips, so we count newlines ourselves,
/// incrementally (offsets only grow), which keeps the whole pass linear.
struct LineCounter<'a> {
    body: &'a [u8],
    at: usize,
    line: u64,
}

impl<'a> LineCounter<'a> {
    fn new(body: &'a str, skipped: u64) -> Self {
        LineCounter {
            body: body.as_bytes(),
            at: 0,
            line: skipped + 1,
        }
    }

    /// Line of the first byte at or after `byte` that is not a line terminator (a
    /// record's position points before the empty lines skipped ahead of it).
    fn line_at(&mut self, byte: usize) -> u64 {
        let mut target = byte.min(self.body.len());
        while target < self.body.len() && matches!(self.body[target], b'\r' | b'\n') {
            target += 1;
        }
        if target >= self.at {
            self.line += self.body[self.at..target]
                .iter()
                .filter(|&&b| b == b'\n')
                .count() as u64;
            self.at = target;
        }
        self.line
    }

    fn line_of(&mut self, record: &Record) -> u64 {
        self.line_at(record.start())
    }
}

fn is_blank(record: &Record) -> bool {
    record.iter().all(|f| f.trim().is_empty())
}

fn col(index: usize) -> u32 {
    u32::try_from(index + 1).unwrap_or(u32::MAX)
}

/// A profile column found in the header.
#[derive(Debug)]
struct Bound {
    field: Field,
    key: String,
    index: usize,
    unit: Option<Unit>,
}

/// The profile's columns resolved against one header row. It holds no line number, so
/// a file with the same header on another line can reuse it.
#[derive(Debug)]
pub(super) struct Layout {
    bound: Vec<Bound>,
    width: usize,
    headers: Vec<String>,
}

impl Layout {
    /// `line` (the header's) only places the errors.
    pub(super) fn resolve(
        profile: &Profile,
        header: &Record,
        line: u64,
    ) -> Result<Layout, ParseError> {
        let cells: Vec<String> = header.iter().map(|c| c.trim().to_owned()).collect();
        let folded: Vec<String> = cells.iter().map(|c| c.to_lowercase()).collect();
        let split: Vec<Option<(String, String)>> = cells
            .iter()
            .map(|c| split_header_unit(c).map(|(n, u)| (n.to_lowercase(), u.to_owned())))
            .collect();
        let mut bound = Vec::new();
        for (key, spec) in &profile.columns {
            let Some(field) = Field::from_key(profile.kind, key) else {
                continue; // unreachable after validate(); never panic on it
            };
            let target = spec.header.trim().to_lowercase();
            let from_header = spec.unit.as_deref() == Some(UNIT_FROM_HEADER);
            let declared = match (&spec.unit, from_header) {
                (Some(u), false) => Unit::parse(u),
                _ => None,
            };
            let dim = match field.field_type() {
                FieldType::Measured(d) => Some(d),
                _ => None,
            };
            let mut hits: Vec<(usize, Option<Unit>)> = Vec::new();
            for i in 0..cells.len() {
                let by_name = split[i].as_ref().filter(|(name, _)| *name == target);
                if from_header {
                    if let Some((_, unit_text)) = by_name {
                        let unit = Unit::parse(unit_text)
                            .filter(|u| Some(u.dimension()) == dim)
                            .ok_or_else(|| {
                                err(
                                    Some(line),
                                    Some(col(i)),
                                    Some(key),
                                    &format!(
                                        "a unit in the header, {}",
                                        dim.map(|d| d.expected_units()).unwrap_or_default()
                                    ),
                                    &shown(&cells[i]),
                                )
                            })?;
                        hits.push((i, Some(unit)));
                    } else if folded[i] == target {
                        return Err(err(
                            Some(line),
                            Some(col(i)),
                            Some(key),
                            &format!(
                                "a header written \"{} [unit]\" or \"{} (unit)\"",
                                spec.header.trim(),
                                spec.header.trim()
                            ),
                            &shown(&cells[i]),
                        ));
                    }
                } else if folded[i] == target {
                    hits.push((i, declared));
                } else if let Some((_, unit_text)) = by_name {
                    // "Mass [mg]" for a profile header "Mass": accept only if the file's
                    // unit agrees with the profile's, never silently rescale.
                    if let Some(file_unit) = Unit::parse(unit_text) {
                        if dim.is_some() && Some(file_unit) != declared {
                            return Err(err(
                                Some(line),
                                Some(col(i)),
                                Some(key),
                                &format!(
                                    "the unit {} named in the profile",
                                    declared.map(|u| u.symbol()).unwrap_or("?")
                                ),
                                &format!(
                                    "the header {} declaring {}",
                                    shown(&cells[i]),
                                    file_unit.symbol()
                                ),
                            ));
                        }
                        hits.push((i, declared));
                    }
                }
            }
            match hits.as_slice() {
                [] if spec.optional => {}
                [] => {
                    let found: Vec<String> = cells.iter().map(|c| shown(c)).take(30).collect();
                    return Err(err(
                        Some(line),
                        None,
                        Some(key),
                        &format!("a column headed {}", shown(spec.header.trim())),
                        &format!("the headers {}", found.join(", ")),
                    ));
                }
                [(index, unit)] => bound.push(Bound {
                    field,
                    key: key.clone(),
                    index: *index,
                    unit: *unit,
                }),
                [first, second, ..] => {
                    return Err(err(
                        Some(line),
                        Some(col(second.0)),
                        Some(key),
                        &format!("exactly one column headed {}", shown(spec.header.trim())),
                        &format!("columns {} and {}", col(first.0), col(second.0)),
                    ));
                }
            }
        }
        bound.sort_by_key(|b| b.field);
        Ok(Layout {
            bound,
            width: cells.len(),
            headers: cells,
        })
    }

    /// The profile's columns found in the header: 0-based position, what each holds, its key.
    pub(super) fn columns(&self) -> impl Iterator<Item = (usize, Field, &str)> + '_ {
        self.bound
            .iter()
            .map(|b| (b.index, b.field, b.key.as_str()))
    }

    /// A short row is a truncated line; extra cells are tolerated only when empty
    /// (spreadsheet exports often end rows with a stray delimiter).
    pub(super) fn check_width(
        &self,
        record: &Record,
        line: u64,
        header_line: u64,
    ) -> Result<(), ParseError> {
        let n = record.len();
        if n < self.width {
            // Name the first missing cell by its profile key when mapped, else its header.
            let field = self
                .bound
                .iter()
                .find(|b| b.index == n)
                .map(|b| b.key.as_str())
                .or_else(|| self.headers.get(n).map(String::as_str));
            return Err(err(
                Some(line),
                Some(col(n)),
                field,
                &format!(
                    "{} fields as in the header on line {}",
                    self.width, header_line
                ),
                &format!("{n} fields (a truncated line?)"),
            ));
        }
        if let Some((i, _)) = record
            .iter()
            .enumerate()
            .skip(self.width)
            .find(|(_, f)| !f.trim().is_empty())
        {
            return Err(err(
                Some(line),
                Some(col(i)),
                None,
                &format!(
                    "{} fields as in the header on line {}",
                    self.width, header_line
                ),
                &format!("{n} fields"),
            ));
        }
        Ok(())
    }

    pub(super) fn cycle_row(
        &self,
        profile: &Profile,
        dates: &DateLayouts,
        record: &Record,
        line: u64,
    ) -> Result<CycleRow, ParseError> {
        let mut row = CycleRow {
            line,
            batch_id: String::new(),
            lot: None,
            cycle_no: None,
            started_at: None,
            feed_lot: None,
            values: Vec::new(),
        };
        for b in &self.bound {
            let raw = record.get(b.index).unwrap_or("");
            let cell = Cell {
                raw,
                text: raw.trim(),
                line,
                column: col(b.index),
                key: &b.key,
            };
            match b.field {
                Field::BatchId => {
                    row.batch_id = cell.text_value()?.ok_or_else(|| {
                        cell.fail("a batch id (required on every row)", "an empty cell")
                    })?;
                }
                Field::Lot => row.lot = cell.text_value()?,
                Field::FeedLot => row.feed_lot = cell.text_value()?,
                Field::CycleNo => row.cycle_no = cell.cycle_no()?,
                Field::StartedAt => {
                    row.started_at =
                        cell.datetime(dates.datetime(profile), &dates.window(profile))?;
                }
                Field::Measured(q) => {
                    if let Some(v) = cell.measured(q, b.unit, profile)? {
                        row.values.push(MeasuredValue {
                            quantity: q,
                            value: v,
                            column: cell.column,
                            raw: raw.to_owned(),
                        });
                    }
                }
                _ => {}
            }
        }
        Ok(row)
    }

    pub(super) fn lot_row(
        &self,
        profile: &Profile,
        dates: &DateLayouts,
        record: &Record,
        line: u64,
    ) -> Result<LotRow, ParseError> {
        let mut lot = None;
        let mut catalyst = None;
        let mut metal = None;
        let mut loading = None;
        let mut charged = None;
        let mut received = None;
        let mut supplier_lot = None;
        let mut cost = None;
        let mut water = None;
        let mut family = None;
        for b in &self.bound {
            let raw = record.get(b.index).unwrap_or("");
            let cell = Cell {
                raw,
                text: raw.trim(),
                line,
                column: col(b.index),
                key: &b.key,
            };
            match b.field {
                Field::Lot => lot = Some(cell.required_text("a lot name")?),
                Field::Catalyst => catalyst = Some(cell.required_text("a catalyst description")?),
                Field::Metal => metal = Some(cell.metal()?),
                Field::Loading => loading = Some(cell.loading(b.unit, profile.decimal)?),
                Field::ChargedMass => charged = Some(cell.charged_mass(b.unit, profile.decimal)?),
                Field::Received => {
                    received = cell.date(dates.date(profile), &dates.window(profile))?;
                }
                Field::SupplierLot => supplier_lot = cell.text_value()?,
                Field::Cost => cost = cell.cost(profile.decimal)?,
                Field::WaterContent => water = cell.water_content(b.unit, profile.decimal)?,
                Field::Family => family = cell.text_value()?,
                _ => {}
            }
        }
        // The profile's required columns guarantee these are bound; a missing one is
        // reported rather than assumed.
        let need = |v: Option<String>, key: &str| {
            v.ok_or_else(|| err(Some(line), None, Some(key), "a mapped column", "none"))
        };
        let row = LotRow {
            line,
            record: LotRecord {
                lot: need(lot, "lot")?,
                catalyst: need(catalyst, "catalyst")?,
                metal: need(metal, "metal")?,
                loading_wt_pct: loading.ok_or_else(|| {
                    err(Some(line), None, Some("loading"), "a mapped column", "none")
                })?,
                charged_mass_g: charged.ok_or_else(|| {
                    err(
                        Some(line),
                        None,
                        Some("charged_mass"),
                        "a mapped column",
                        "none",
                    )
                })?,
                received,
                supplier_lot,
                cost,
                site: None,
                water_content_wt_pct: water,
                family,
            },
        };
        // The cells were checked one by one above; the registration as a whole meets the
        // same rules as one made on the command line.
        crate::chem::check_lot(&row.record).map_err(|p| {
            err(
                Some(line),
                None,
                Some(p.field.key()),
                &p.expected,
                "a value outside that",
            )
        })?;
        Ok(row)
    }
}

/// One cell being read, with its position for errors.
struct Cell<'a> {
    raw: &'a str,
    text: &'a str,
    line: u64,
    column: u32,
    key: &'a str,
}

impl Cell<'_> {
    fn fail(&self, expected: &str, found: &str) -> ParseError {
        err(
            Some(self.line),
            Some(self.column),
            Some(self.key),
            expected,
            found,
        )
    }

    fn fail_raw(&self, expected: &str) -> ParseError {
        self.fail(expected, &shown(self.raw))
    }

    /// Text values join records and show in reports and e-mails: no control characters
    /// (CR, LF, NUL, escapes), bounded length.
    fn text_value(&self) -> Result<Option<String>, ParseError> {
        if self.text.is_empty() {
            return Ok(None);
        }
        if self.text.chars().any(char::is_control) {
            return Err(self.fail_raw(
                "text without control characters (no line breaks, tabs or NUL inside a field)",
            ));
        }
        if self.text.chars().count() > MAX_TEXT_CHARS {
            return Err(self.fail_raw(&format!("text of at most {MAX_TEXT_CHARS} characters")));
        }
        Ok(Some(self.text.to_owned()))
    }

    fn required_text(&self, what: &str) -> Result<String, ParseError> {
        self.text_value()?
            .ok_or_else(|| self.fail(&format!("{what} (required on every row)"), "an empty cell"))
    }

    fn cycle_no(&self) -> Result<Option<u32>, ParseError> {
        if self.text.is_empty() {
            return Ok(None);
        }
        let expected = "a whole cycle number from 1";
        if !self.text.bytes().all(|b| b.is_ascii_digit()) {
            return Err(self.fail_raw(expected));
        }
        match self.text.parse::<u32>() {
            Ok(n) if n >= 1 => Ok(Some(n)),
            _ => Err(self.fail_raw(expected)),
        }
    }

    fn datetime(
        &self,
        layouts: &[DateLayout],
        window: &DateWindow,
    ) -> Result<Option<String>, ParseError> {
        if self.text.is_empty() {
            return Ok(None);
        }
        for f in layouts {
            let dt = match f.read(self.text) {
                Some(Read::DateTime(dt)) => dt,
                // A layout without a time of day gives midnight.
                Some(Read::Date(d)) => d.and_time(chrono::NaiveTime::MIN),
                None => continue,
            };
            window
                .check(self.text, dt)
                .map_err(|expected| self.fail_raw(&expected))?;
            return Ok(Some(iso_datetime(&dt)));
        }
        let names: Vec<&str> = layouts.iter().map(|f| f.text.as_str()).collect();
        Err(self.fail_raw(&format!(
            "a date and time in the layout {}",
            names.join(" or ")
        )))
    }

    fn date(&self, layout: &DateLayout, window: &DateWindow) -> Result<Option<String>, ParseError> {
        if self.text.is_empty() {
            return Ok(None);
        }
        match layout.read_date(self.text) {
            Some(d) => {
                window
                    .check(self.text, d.and_time(chrono::NaiveTime::MIN))
                    .map_err(|expected| self.fail_raw(&expected))?;
                Ok(Some(iso_date(&d)))
            }
            None => Err(self.fail_raw(&format!("a date in the layout {}", layout.text))),
        }
    }

    /// The unit only shapes the message, which is built on failure alone (this runs for
    /// every cell of a file).
    fn number(&self, mark: DecimalMark, unit: Option<Unit>) -> Result<Option<f64>, ParseError> {
        if self.text.is_empty() {
            return Ok(None);
        }
        parse_number(self.text, mark).map(Some).map_err(|why| {
            let unit = unit
                .map(|u| format!(" in {}", u.symbol()))
                .unwrap_or_default();
            self.fail_raw(&format!(
                "a number{unit} with '{}' as decimal mark{why}",
                mark.char()
            ))
        })
    }

    fn measured(
        &self,
        q: Quantity,
        unit: Option<Unit>,
        profile: &Profile,
    ) -> Result<Option<f64>, ParseError> {
        let Some(unit) = unit else {
            return Err(self.fail("a unit for this column", "none"));
        };
        let Some(v) = self.number(profile.decimal, Some(unit))? else {
            return Ok(None);
        };
        let c = unit.to_canonical(v);
        let found = || {
            format!(
                "{} {} ({} {})",
                shown(self.raw),
                unit.symbol(),
                short_number(c),
                q.canonical_unit()
            )
        };
        check_canonical(q, c, profile.temperature_range())
            .map(Some)
            .map_err(|expected| self.fail(&expected, &found()))
    }

    fn metal(&self) -> Result<String, ParseError> {
        let text = self.required_text("a metal element symbol")?;
        // Accept "PD" or "pd" for "Pd": instrument software is not careful about case.
        let mut norm = String::new();
        for (i, c) in text.chars().enumerate() {
            if i == 0 {
                norm.extend(c.to_uppercase());
            } else {
                norm.extend(c.to_lowercase());
            }
        }
        if crate::chem::molar_mass(&norm).is_some() {
            Ok(norm)
        } else {
            Err(self.fail_raw(&format!(
                "a catalyst metal symbol, one of {}",
                crate::chem::METALS.join(", ")
            )))
        }
    }

    fn loading(&self, unit: Option<Unit>, mark: DecimalMark) -> Result<f64, ParseError> {
        let unit = unit.unwrap_or(Unit::Percent);
        let v = self
            .number(mark, Some(unit))?
            .ok_or_else(|| self.fail("a metal loading (required on every row)", "an empty cell"))?;
        let fraction = unit.to_canonical(v);
        if fraction > 0.0 && fraction <= 1.0 + FRACTION_SLACK {
            Ok(fraction.min(1.0) * 100.0)
        } else {
            Err(self.fail(
                "a metal loading above 0 and at most 100 wt %",
                &format!("{} {}", shown(self.raw), unit.symbol()),
            ))
        }
    }

    fn charged_mass(&self, unit: Option<Unit>, mark: DecimalMark) -> Result<f64, ParseError> {
        let unit = unit.unwrap_or(Unit::Gram);
        let v = self.number(mark, Some(unit))?.ok_or_else(|| {
            self.fail(
                "a charged catalyst mass (required on every row)",
                "an empty cell",
            )
        })?;
        let g = unit.to_canonical(v);
        if g > 0.0 && g.is_finite() {
            Ok(g)
        } else {
            Err(self.fail(
                "a mass greater than 0",
                &format!("{} {}", shown(self.raw), unit.symbol()),
            ))
        }
    }

    /// The catalyst's water content as charged, wt %; an empty cell is a dry catalyst.
    fn water_content(
        &self,
        unit: Option<Unit>,
        mark: DecimalMark,
    ) -> Result<Option<f64>, ParseError> {
        let unit = unit.unwrap_or(Unit::Percent);
        let Some(v) = self.number(mark, Some(unit))? else {
            return Ok(None);
        };
        let fraction = unit.to_canonical(v);
        if (0.0..1.0).contains(&fraction) {
            Ok(Some(fraction * 100.0))
        } else {
            Err(self.fail(
                "a water content of at least 0 and below 100 wt %",
                &format!("{} {}", shown(self.raw), unit.symbol()),
            ))
        }
    }

    fn cost(&self, mark: DecimalMark) -> Result<Option<f64>, ParseError> {
        match self.number(mark, None)? {
            Some(v) if v < 0.0 => Err(self.fail("a cost of 0 or more", &shown(self.raw))),
            other => Ok(other),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shown_escapes_and_shortens() {
        assert_eq!(shown("a\nb"), "\"a\\nb\"");
        assert_eq!(shown(&"x".repeat(100)).chars().count(), 63);
    }
}
