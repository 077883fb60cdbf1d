//! The computed figures for SQL readers and exports: one lot's state turned into the rows
//! of `cycle_figures` and `lot_figures` (stored at each recompute), from the same cycle
//! lines `turnbook cycles` prints, so SQL and the command line can never disagree.

use std::collections::BTreeSet;

use super::lots::{CycleLine, CycleState, LotState, cycle_line, cycle_lines};
use crate::model::time::now_utc;
use crate::store::export::{CycleFigures, LotFigures};
use crate::store::{Result, Transaction};

/// Store the figures of `state`, computed after event `after`, in the caller's
/// transaction (the recompute's), replacing the lot's earlier ones.
///
/// One cycle at a time: the rows of a lot of 200,000 cycles are never all in memory.
pub fn store_figures(tx: &Transaction<'_>, state: &LotState, after: i64) -> Result<()> {
    let mut figures = FiguresWriter::begin(tx, state, after)?;
    for c in &state.cycles {
        figures.cycle(state, c)?;
    }
    figures.finish(state)
}

/// Replaces a lot's stored figures as its cycles come (see [`store_figures`]): a lot
/// streamed from the store (a pending one) is stored without holding its cycles.
pub struct FiguresWriter<'t, 'c> {
    tx: &'t Transaction<'c>,
    after: i64,
    at: String,
    basis: String,
}

impl<'t, 'c> FiguresWriter<'t, 'c> {
    pub fn begin(tx: &'t Transaction<'c>, state: &LotState, after: i64) -> Result<Self> {
        crate::store::export::clear_figures(tx, &state.lot)?;
        Ok(FiguresWriter {
            tx,
            after,
            at: now_utc(),
            basis: state.activity_basis.key().to_string(),
        })
    }

    /// Store the figures of cycle `c` of `state`.
    pub fn cycle(&mut self, state: &LotState, c: &CycleState) -> Result<()> {
        let row = cycle_figures(&self.basis, cycle_line(state, c), c);
        crate::store::export::store_cycle_figures(self.tx, &state.lot, &row, self.after, &self.at)
    }

    /// Store the lot's own figures; `state` holds what [`lot_figures`] reads of it.
    pub fn finish(self, state: &LotState) -> Result<()> {
        crate::store::export::store_lot_figures(self.tx, &lot_figures(state), self.after, &self.at)
    }
}

/// The figures of cycle `c` of `state`, as [`FiguresWriter::cycle`] stores them.
pub(crate) fn cycle_row(state: &LotState, c: &CycleState) -> CycleFigures {
    cycle_figures(state.activity_basis.key(), cycle_line(state, c), c)
}

fn words_json(words: &[String]) -> String {
    serde_json::to_string(words).unwrap_or_else(|_| "[]".into())
}

/// The rows of one lot: its figures and its cycles'.
pub fn figures_of(s: &LotState) -> (LotFigures, Vec<CycleFigures>) {
    let basis = s.activity_basis.key().to_string();
    let cycles = cycle_lines(s)
        .into_iter()
        .zip(&s.cycles)
        .map(|(l, c)| cycle_figures(&basis, l, c))
        .collect();
    (lot_figures(s), cycles)
}

/// The figures of cycle `c`, whose line is `l`, on activity basis `basis`.
fn cycle_figures(basis: &str, l: CycleLine, c: &CycleState) -> CycleFigures {
    CycleFigures {
        batch_id: l.batch_id,
        cycle_no: i64::from(l.cycle),
        ton: l.ton,
        ton_per_mol_metal_available: l.ton_per_metal_available,
        cumulative_ton: l.cumulative_ton,
        tof_average_per_h: l.tof_per_h,
        tof_initial_per_h: l.tof_initial_per_h,
        k_app_per_h: l.k_app_per_h,
        k_app_se_per_h: l.k_app_se_per_h,
        activity: l.activity,
        activity_se: l.activity_se,
        activity_basis: basis.to_string(),
        metal_charged_mmol: l.metal_charged_mmol,
        metal_available_mmol: l.metal_available_mmol,
        catalyst_to_substrate: l.catalyst_to_substrate,
        flags_json: words_json(&c.flags),
    }
}

fn lot_figures(s: &LotState) -> LotFigures {
    let totals = s.totals();
    let mut flags: BTreeSet<String> = totals.flags.clone();
    flags.extend(s.lot_flags.iter().cloned());
    let flags: Vec<String> = flags.into_iter().collect();
    let a = s.analysis.as_ref();
    let forecast = a.and_then(|a| a.forecast.as_ref());
    let dates = forecast.and_then(|f| f.dates.as_deref());
    let next = a.and_then(|a| a.next_cycle.as_ref());
    LotFigures {
        lot: s.lot.clone(),
        state: if s.attention.is_empty() {
            "ok"
        } else {
            "attention"
        },
        model: a.and_then(|a| a.chosen).map(|m| m.id().to_string()),
        latest_activity: totals.latest_activity,
        cumulative_ton: totals.cumulative_ton,
        forecast_status: forecast.map(|f| f.status.word().to_string()),
        crossing_cycle: forecast.and_then(|f| f.x),
        crossing_cycle_lower: forecast.and_then(|f| f.lower),
        crossing_cycle_upper: forecast.and_then(|f| f.upper),
        crossing_date: dates.and_then(|d| d.crossing_date.clone()),
        crossing_date_early: dates.and_then(|d| d.crossing_early.clone()),
        crossing_date_late: dates.and_then(|d| d.crossing_late.clone()),
        order_by_date: dates.and_then(|d| d.order_by.clone()),
        next_batch_verdict: next.and_then(|n| {
            serde_json::to_value(n.verdict)
                .ok()
                .and_then(|v| v.as_str().map(str::to_string))
        }),
        next_batch_activity: next.map(|n| n.predicted),
        next_batch_activity_lower: next.map(|n| n.lower),
        abrupt_loss: a
            .and_then(|a| a.abrupt.as_ref())
            .is_some_and(|b| b.suspected),
        flags_json: words_json(&flags),
        attention_json: words_json(&s.attention),
    }
}

/// The version of the export's row shape (CSV header and JSON Lines keys); JSON Lines
/// rows carry it as `schema`. Raised when a column is renamed or its unit changes.
pub const EXPORT_SCHEMA: u32 = 1;

/// The version of the shape of the JSON documents the command line prints and the web
/// view's `/api` serves (`lots`, `cycles`, `history`, `status`, `alerts`, `fit`,
/// `verify`); every object carries it as `schema`. Raised when a field is renamed, retyped
/// or removed; new fields do not raise it.
pub const JSON_SCHEMA: u32 = 1;

/// `value` as JSON with `schema` ([`JSON_SCHEMA`]) added to the object, or to each object
/// of an array: one stamp for the command line and the web view alike.
pub fn with_schema(
    value: &impl serde::Serialize,
) -> std::result::Result<serde_json::Value, serde_json::Error> {
    let mut v = serde_json::to_value(value)?;
    let mark = |o: &mut serde_json::Value| {
        if let Some(map) = o.as_object_mut() {
            map.insert("schema".into(), JSON_SCHEMA.into());
        }
    };
    match &mut v {
        serde_json::Value::Array(items) => items.iter_mut().for_each(mark),
        other => mark(other),
    }
    Ok(v)
}

/// One line of `lots --json` as printed: the keys in the order every JSON output prints
/// them (sorted, as [`with_schema`] leaves them) with `schema` added,
/// written straight from the line. Going through a `serde_json::Value` tree instead built
/// and dropped a map for every object: a third of the command's time at 1,000 lots.
#[derive(serde::Serialize)]
pub struct LotLineJson<'a> {
    abrupt_loss: bool,
    attention: &'a [String],
    catalyst: &'a Option<String>,
    complete_cycles: usize,
    cumulative_ton: Option<f64>,
    cycles: usize,
    flags: &'a [String],
    forecast: &'a Option<serde_json::Value>,
    latest_activity: Option<f64>,
    lifetime_ton: Option<f64>,
    lot: &'a str,
    metal: &'a Option<String>,
    model: &'a Option<String>,
    #[serde(serialize_with = "keys_sorted")]
    next_cycle: &'a Option<crate::fit::NextCycle>,
    registered: bool,
    schema: u32,
    #[serde(serialize_with = "keys_sorted")]
    signoff: &'a crate::model::signoff::SignOffState,
}

/// A small nested object with its keys sorted, as a `serde_json::Value` prints them.
fn keys_sorted<T: serde::Serialize, S: serde::Serializer>(
    v: &T,
    s: S,
) -> std::result::Result<S::Ok, S::Error> {
    let value = serde_json::to_value(v).map_err(serde::ser::Error::custom)?;
    serde::Serialize::serialize(&value, s)
}

impl<'a> From<&'a super::lots::LotLine> for LotLineJson<'a> {
    fn from(l: &'a super::lots::LotLine) -> Self {
        LotLineJson {
            abrupt_loss: l.abrupt_loss,
            attention: &l.attention,
            catalyst: &l.catalyst,
            complete_cycles: l.complete_cycles,
            cumulative_ton: l.cumulative_ton,
            cycles: l.cycles,
            flags: &l.flags,
            forecast: &l.forecast,
            latest_activity: l.latest_activity,
            lifetime_ton: l.lifetime_ton,
            lot: &l.lot,
            metal: &l.metal,
            model: &l.model,
            next_cycle: &l.next_cycle,
            registered: l.registered,
            schema: JSON_SCHEMA,
            signoff: &l.signoff,
        }
    }
}

/// The lines of `lots --json`, ready to serialise (see [`LotLineJson`]).
pub fn lot_lines_json(lines: &[super::lots::LotLine]) -> Vec<LotLineJson<'_>> {
    lines.iter().map(LotLineJson::from).collect()
}

/// A lot's `lots --json` entry as printed (at its place in the array, keys sorted), cut
/// where the parts that vary at read time go: `head`, then today's date as the
/// forecast's `as_of` and `tail` when the forecast has one, then the sign-off and
/// [`PRINTED_END`]. Kept beside the lot's state so that the list streams stored bytes.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PrintedLine {
    pub head: String,
    pub tail: Option<String>,
}

/// What closes a printed entry after its sign-off.
const PRINTED_END: &str = "\n  }";

/// What stands for `as_of` while an entry is cut: a string no date is, written by
/// serde_json as an escape (`"\u0001"`); an entry holding the text twice is not kept.
const AS_OF_MARK: &str = "\u{1}";

/// One entry of `lots --json` as the whole array prints it: from its indentation to its
/// closing brace, without the separator.
pub fn entry_text(line: &super::lots::LotLine) -> std::result::Result<String, serde_json::Error> {
    let text = serde_json::to_string_pretty(&[LotLineJson::from(line)])?;
    text.strip_prefix("[\n")
        .and_then(|t| t.strip_suffix("\n]"))
        .map(str::to_string)
        .ok_or_else(|| serde::ser::Error::custom("a one-entry array printed unexpectedly"))
}

/// A sign-off as it is printed as the value of an entry's `signoff`.
pub fn signoff_text(
    s: &crate::model::signoff::SignOffState,
) -> std::result::Result<String, serde_json::Error> {
    #[derive(serde::Serialize)]
    struct Only<'a> {
        #[serde(serialize_with = "keys_sorted")]
        signoff: &'a crate::model::signoff::SignOffState,
    }
    let text = serde_json::to_string_pretty(&[Only { signoff: s }])?;
    text.strip_prefix("[\n  {\n    \"signoff\": ")
        .and_then(|t| t.strip_suffix("\n  }\n]"))
        .map(str::to_string)
        .ok_or_else(|| serde::ser::Error::custom("a sign-off printed unexpectedly"))
}

/// The printed form of a lot's line as the list would print it with no sign-off, cut for
/// the read-time parts; `None` when it cannot be cut unambiguously (the list then prints
/// the line itself). `line` is the stored line as read back, so that what is kept is
/// what the list printed from the stored state.
pub fn printed_line(mut line: super::lots::LotLine) -> Option<PrintedLine> {
    line.signoff = crate::model::signoff::SignOffState::none();
    let dated = match line.forecast.as_mut() {
        Some(serde_json::Value::Object(f)) if f.contains_key("as_of") => {
            f.insert("as_of".into(), AS_OF_MARK.into());
            true
        }
        _ => false,
    };
    let text = entry_text(&line).ok()?;
    let signoff = signoff_text(&line.signoff).ok()?;
    let body = text
        .strip_suffix(PRINTED_END)?
        .strip_suffix(signoff.as_str())?;
    if !body.ends_with("\n    \"signoff\": ") {
        return None;
    }
    if !dated {
        return Some(PrintedLine {
            head: body.to_string(),
            tail: None,
        });
    }
    let mark = serde_json::to_string(AS_OF_MARK).ok()?;
    let mut parts = body.split(mark.as_str());
    let (head, tail) = (parts.next()?, parts.next()?);
    if parts.next().is_some() {
        return None;
    }
    Some(PrintedLine {
        head: head.to_string(),
        tail: Some(tail.to_string()),
    })
}

/// The name of the code that prints entries: a digest of a probe entry and sign-off as
/// this build prints them. A printed form kept under another name (another build, whose
/// fields or layout may differ) is not used.
pub fn printed_form() -> &'static str {
    static FORM: std::sync::OnceLock<String> = std::sync::OnceLock::new();
    FORM.get_or_init(|| {
        use sha2::Digest as _;
        let mut h = sha2::Sha256::new();
        let line = probe_line();
        h.update(entry_text(&line).unwrap_or_default());
        h.update(signoff_text(&line.signoff).unwrap_or_default());
        format!("entry-{}", &hex::encode(h.finalize())[..16])
    })
}

/// A line with every part filled, for [`printed_form`].
fn probe_line() -> super::lots::LotLine {
    use crate::model::signoff::{SignOffMark, SignOffState, SignOffStatus};
    super::lots::LotLine {
        lot: "L".into(),
        registered: true,
        catalyst: Some("c".into()),
        metal: Some("m".into()),
        cycles: 2,
        complete_cycles: 1,
        latest_activity: Some(0.5),
        cumulative_ton: Some(10.0),
        lifetime_ton: Some(20.0),
        model: Some("m".into()),
        forecast: Some(serde_json::json!({"as_of": "d", "x": 1.5})),
        next_cycle: Some(crate::fit::NextCycle {
            x: 3.0,
            predicted: 0.4,
            lower: 0.3,
            upper: 0.5,
            threshold: 0.2,
            verdict: crate::fit::NextVerdict::Ok,
        }),
        abrupt_loss: true,
        flags: vec!["f".into()],
        attention: vec!["a".into()],
        signoff: SignOffState {
            state: SignOffStatus::Approved,
            by: Some(SignOffMark {
                seq: 1,
                at: "t".into(),
                actor: "a".into(),
                meaning: "m".into(),
                signer: Some("s".into()),
                os_user: Some("o".into()),
                signed_sha256: "h".into(),
                what: "w".into(),
                comment: Some("c".into()),
            }),
        },
    }
}

/// Writes `lots --json` entry by entry: the same bytes as serialising every lot's line
/// whole (see the test `a_printed_entry_splices_to_the_entry_printed_whole`), from kept
/// printed entries ([`Self::printed`]) or from lines ([`Self::line`]).
pub struct LotsJsonWriter<W: std::io::Write> {
    out: W,
    entries: usize,
    /// Today's plant-local date as JSON: the forecasts' `as_of`.
    today: String,
    /// The printed "none" sign-off, the usual one.
    unsigned: String,
}

impl<W: std::io::Write> LotsJsonWriter<W> {
    pub fn new(out: W, today: &str) -> std::result::Result<Self, serde_json::Error> {
        Ok(LotsJsonWriter {
            out,
            entries: 0,
            today: serde_json::to_string(today)?,
            unsigned: signoff_text(&crate::model::signoff::SignOffState::none())?,
        })
    }

    fn put(&mut self, bytes: &str) -> std::io::Result<()> {
        self.out.write_all(bytes.as_bytes())
    }

    fn separate(&mut self) -> std::io::Result<()> {
        self.entries += 1;
        self.put(if self.entries == 1 { "[\n" } else { ",\n" })
    }

    /// A kept printed entry ([`PrintedLine`]'s parts as stored) with the lot's sign-off.
    pub fn printed(
        &mut self,
        head: &str,
        tail: Option<&str>,
        signoff: Option<&crate::model::signoff::SignOffState>,
    ) -> std::result::Result<(), serde_json::Error> {
        self.separate().map_err(serde_json::Error::io)?;
        let signed = signoff.map(signoff_text).transpose()?;
        let mut write = || -> std::io::Result<()> {
            self.out.write_all(head.as_bytes())?;
            if let Some(tail) = tail {
                self.out.write_all(self.today.as_bytes())?;
                self.out.write_all(tail.as_bytes())?;
            }
            let signoff = signed.as_deref().unwrap_or(self.unsigned.as_str());
            self.out.write_all(signoff.as_bytes())?;
            self.out.write_all(PRINTED_END.as_bytes())
        };
        write().map_err(serde_json::Error::io)
    }

    /// A line as the list shows it (its `as_of` and sign-off already in).
    pub fn line(
        &mut self,
        line: &super::lots::LotLine,
    ) -> std::result::Result<(), serde_json::Error> {
        self.separate().map_err(serde_json::Error::io)?;
        let text = entry_text(line)?;
        self.put(&text).map_err(serde_json::Error::io)
    }

    /// Close the array (with a line end) and hand the output back.
    pub fn finish(mut self) -> std::result::Result<W, serde_json::Error> {
        let end = if self.entries == 0 { "[]\n" } else { "\n]\n" };
        self.put(end).map_err(serde_json::Error::io)?;
        Ok(self.out)
    }
}

/// Significant digits of a measured value as exported: enough for any instrument, few
/// enough to drop the noise of unit conversions (333.85 K − 273.15 = 60.69999999999999).
const MEASURED_DIGITS: usize = 10;
/// Significant digits of a computed figure (TON, TOF, k_app, activity): one more than a
/// conversion assay usually supports (common practice: three to four digits).
const COMPUTED_DIGITS: usize = 5;

/// One exported cell.
#[derive(Debug, Clone, PartialEq)]
pub enum Cell {
    Text(Option<String>),
    Int(i64),
    Num(Option<f64>),
    Words(Vec<String>),
}

/// `v` rounded to `digits` significant digits (None when not finite).
pub fn round_sig(v: Option<f64>, digits: usize) -> Option<f64> {
    let v = v.filter(|v| v.is_finite())?;
    if v == 0.0 {
        return Some(0.0);
    }
    format!("{v:.*e}", digits.saturating_sub(1)).parse().ok()
}

/// The export's columns for one cycle of `lot`, in order: the one vocabulary of
/// `cycles --format csv`, `report --csv` and `export` (the keys of `cycles --format json`
/// with `lot` first). Units are in the names; fractions are 0–1.
pub fn cells(lot: &str, c: &super::lots::CycleLine) -> Vec<(&'static str, Cell)> {
    let m = |v: Option<f64>| Cell::Num(round_sig(v, MEASURED_DIGITS));
    let f = |v: Option<f64>| Cell::Num(round_sig(v, COMPUTED_DIGITS));
    vec![
        ("lot", Cell::Text(Some(lot.to_string()))),
        ("cycle", Cell::Int(i64::from(c.cycle))),
        ("batch_id", Cell::Text(Some(c.batch_id.clone()))),
        ("started_at", Cell::Text(c.started_at.clone())),
        ("duration_h", m(c.duration_h)),
        ("temperature_c", m(c.temperature_c)),
        ("substrate_mol", m(c.substrate_mol)),
        ("catalyst_charged_g", m(c.catalyst_charged_g)),
        ("metal_charged_mmol", f(c.metal_charged_mmol)),
        ("metal_available_mmol", f(c.metal_available_mmol)),
        ("catalyst_to_substrate", f(c.catalyst_to_substrate)),
        ("conversion", m(c.conversion)),
        ("selectivity", m(c.selectivity)),
        ("yield_fraction", m(c.yield_fraction)),
        ("product_mass_g", m(c.product_mass_g)),
        ("metal_in_product_ug_g", m(c.metal_in_product_ug_g)),
        ("catalyst_recovered_g", m(c.catalyst_recovered_g)),
        ("ton", f(c.ton)),
        ("ton_per_metal_available", f(c.ton_per_metal_available)),
        ("tof_average_per_h", f(c.tof_per_h)),
        ("tof_average_per_s", f(c.tof_per_s)),
        ("tof_initial_per_h", f(c.tof_initial_per_h)),
        ("tof_initial_per_s", f(c.tof_initial_per_s)),
        ("cumulative_ton", f(c.cumulative_ton)),
        ("k_app_per_h", f(c.k_app_per_h)),
        ("k_app_se_per_h", f(c.k_app_se_per_h)),
        (
            "activity_per_catalyst_ratio",
            f(c.activity_per_catalyst_ratio),
        ),
        (
            "activity_per_metal_charged",
            f(c.activity_per_metal_charged),
        ),
        ("activity_se", f(c.activity_se)),
        ("metal_lost_mg", f(c.metal_lost_mg)),
        (
            "cumulative_metal_loss_fraction",
            f(c.cumulative_metal_loss_fraction),
        ),
        ("flags", Cell::Words(c.flags.clone())),
        ("sources", Cell::Text(Some(c.sources.clone()))),
    ]
}

/// Every cycle of the lots asked for, with its lot: one lot, the lots registered to one
/// site, or (neither) every lot, in lot then cycle order.
pub fn export_lines(
    cfg: &crate::config::Config,
    lot: Option<&str>,
    site: Option<&str>,
) -> super::Result<Vec<(String, super::lots::CycleLine)>> {
    let conn = crate::store::open(&cfg.database_path())?;
    let names = match lot {
        Some(l) => vec![super::known_lot(cfg, l)?.lot],
        None => crate::store::lots::lot_names(&conn)?,
    };
    let mut out = Vec::new();
    let mut matched = 0;
    for name in names {
        let state = super::lots::lot_state(&conn, cfg, &name)?;
        if let Some(site) = site
            && state.record.as_ref().and_then(|r| r.site.as_deref()) != Some(site)
        {
            continue;
        }
        matched += 1;
        out.extend(cycle_lines(&state).into_iter().map(|c| (name.clone(), c)));
    }
    if let Some(site) = site
        && matched == 0
    {
        return Err(super::NotebookError::Refused(format!(
            "no lot is registered to site '{site}' (register --site names a lot's site)"
        )));
    }
    Ok(out)
}

/// Why an export could not be written.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    #[error("writing the export failed: {0}")]
    Csv(#[from] csv::Error),
    #[error("writing the export failed: {0}")]
    Io(#[from] std::io::Error),
    #[error("writing the export failed: {0}")]
    Json(#[from] serde_json::Error),
}

fn csv_text(cell: &Cell) -> String {
    match cell {
        Cell::Text(t) => crate::report::defuse_csv_cell(t.as_deref().unwrap_or("")),
        Cell::Int(i) => i.to_string(),
        Cell::Num(v) => v.map(|v| v.to_string()).unwrap_or_default(),
        Cell::Words(w) => crate::report::defuse_csv_cell(&w.join(" ")),
    }
}

/// Write `lines` as CSV (RFC 4180, CRLF, a header row; text that a spreadsheet would run
/// as a formula, starting with `=`, `+`, `-`, `@`, a tab or a CR, gets a leading
/// apostrophe; flags are separated by spaces).
pub fn write_csv<W: std::io::Write>(
    lines: &[(String, super::lots::CycleLine)],
    out: W,
) -> std::result::Result<(), ExportError> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(out);
    let header: Vec<&str> = cells("", &empty_line()).iter().map(|c| c.0).collect();
    w.write_record(&header)?;
    for (lot, c) in lines {
        w.write_record(cells(lot, c).iter().map(|(_, v)| csv_text(v)))?;
    }
    w.flush()?;
    Ok(())
}

fn json_value(cell: &Cell) -> serde_json::Value {
    use serde_json::Value;
    match cell {
        Cell::Text(t) => t.clone().map_or(Value::Null, Value::String),
        Cell::Int(i) => Value::from(*i),
        Cell::Num(v) => v.map_or(Value::Null, Value::from),
        Cell::Words(w) => Value::from(w.clone()),
    }
}

/// Write `lines` as JSON Lines: one object a cycle, keys in the CSV's column order after
/// `schema` ([`EXPORT_SCHEMA`]); numbers are numbers, missing values null, flags a list.
pub fn write_jsonl<W: std::io::Write>(
    lines: &[(String, super::lots::CycleLine)],
    mut out: W,
) -> std::result::Result<(), ExportError> {
    for (lot, c) in lines {
        let mut line = format!("{{\"schema\":{EXPORT_SCHEMA}");
        for (name, cell) in cells(lot, c) {
            line.push(',');
            line.push_str(&serde_json::to_string(name)?);
            line.push(':');
            line.push_str(&serde_json::to_string(&json_value(&cell))?);
        }
        line.push_str("}\n");
        out.write_all(line.as_bytes())?;
    }
    out.flush()?;
    Ok(())
}

/// A cycle line with nothing in it, to read the header's names from.
fn empty_line() -> super::lots::CycleLine {
    super::lots::CycleLine {
        cycle: 0,
        batch_id: String::new(),
        started_at: None,
        duration_h: None,
        temperature_c: None,
        substrate_mol: None,
        catalyst_charged_g: None,
        metal_charged_mmol: None,
        metal_available_mmol: None,
        catalyst_to_substrate: None,
        conversion: None,
        selectivity: None,
        yield_fraction: None,
        product_mass_g: None,
        metal_in_product_ug_g: None,
        catalyst_recovered_g: None,
        ton: None,
        ton_per_metal_available: None,
        tof_per_h: None,
        tof_per_s: None,
        tof_initial_per_h: None,
        tof_initial_per_s: None,
        cumulative_ton: None,
        k_app_per_h: None,
        k_app_se_per_h: None,
        activity: None,
        activity_per_catalyst_ratio: None,
        activity_per_metal_charged: None,
        activity_se: None,
        metal_lost_mg: None,
        cumulative_metal_loss_fraction: None,
        flags: Vec::new(),
        sources: String::new(),
    }
}

/// Write `lines` as CSV into the file `path` (the report's `--csv`).
pub fn write_csv_file(
    lines: &[(String, super::lots::CycleLine)],
    path: &std::path::Path,
) -> super::Result<()> {
    let cannot = |e: &dyn std::fmt::Display| {
        super::NotebookError::Refused(format!("cannot write {}: {e}", path.display()))
    };
    let file = std::fs::File::create(path).map_err(|e| cannot(&e))?;
    write_csv(lines, std::io::BufWriter::new(file)).map_err(|e| cannot(&e))
}

/// What a mistyped name was probably meant to be.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NameKind {
    Lot,
    Batch,
}

/// The known lot or batch name closest to `typed` (Levenshtein distance on the upper-cased
/// names, at most a quarter of its length and at least 1), for a "did you mean"; None when
/// `typed` is known or nothing is close.
pub fn suggest_name(
    cfg: &crate::config::Config,
    kind: NameKind,
    typed: &str,
) -> super::Result<Option<String>> {
    let conn = crate::store::open(&cfg.database_path())?;
    let names = match kind {
        NameKind::Lot => crate::store::lots::lot_names(&conn)?,
        NameKind::Batch => crate::store::export::batch_ids(&conn)?,
    };
    Ok(closest(typed, &names))
}

/// See [`suggest_name`].
pub fn closest(typed: &str, names: &[String]) -> Option<String> {
    if names.iter().any(|n| n == typed) {
        return None;
    }
    let limit = (typed.chars().count() / 4).max(1);
    let t = typed.to_uppercase();
    names
        .iter()
        .map(|n| (edit_distance(&t, &n.to_uppercase()), n))
        .filter(|(d, _)| *d <= limit)
        .min_by_key(|(d, _)| *d)
        .map(|(_, n)| n.clone())
}

/// Levenshtein distance (insertions, deletions, substitutions) by the two-row method.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            cur[j + 1] = (prev[j] + usize::from(ca != *cb))
                .min(prev[j + 1] + 1)
                .min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_close_name_is_suggested_and_a_far_or_known_one_is_not() {
        let names = vec!["PD-C-2611-A".to_string(), "PT-AL-2610-B".to_string()];
        assert_eq!(
            closest("PD-C-2611-B", &names).as_deref(),
            Some("PD-C-2611-A")
        );
        assert_eq!(
            closest("pd-c-2611-a", &names).as_deref(),
            Some("PD-C-2611-A")
        );
        assert_eq!(closest("PD-C-2611-A", &names), None);
        assert_eq!(closest("XYZ", &names), None);
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
    }

    #[test]
    fn csv_quotes_and_guards_text_and_reads_back_to_the_same_table() {
        let mut lines = Vec::new();
        for (i, id) in [
            "=HYPERLINK(\"http://x\",\"y\")",
            "@SUM(A1:A9)",
            "a,b\r\nc \"q\"",
            "\tTAB",
            "-1",
            "B-7",
        ]
        .iter()
        .enumerate()
        {
            let mut l = empty_line();
            l.cycle = i as u32 + 1;
            l.batch_id = id.to_string();
            l.temperature_c = Some(333.85 - 273.15);
            l.ton = Some(-12.345678);
            l.flags = vec!["conflict".into(), "excluded".into()];
            lines.push(("LOT".to_string(), l));
        }
        let mut buf = Vec::new();
        write_csv(&lines, &mut buf).unwrap();
        let mut rd = csv::Reader::from_reader(buf.as_slice());
        let header: Vec<String> = rd.headers().unwrap().iter().map(String::from).collect();
        let col = |name: &str| header.iter().position(|h| h == name).unwrap();
        let rows: Vec<csv::StringRecord> = rd.records().map(|r| r.unwrap()).collect();
        assert_eq!(rows.len(), lines.len());
        for (row, (_, l)) in rows.iter().zip(&lines) {
            assert_eq!(row.len(), header.len());
            let expected = match l.batch_id.chars().next() {
                Some('=' | '+' | '-' | '@' | '\t' | '\r') => format!("'{}", l.batch_id),
                _ => l.batch_id.clone(),
            };
            assert_eq!(&row[col("batch_id")], expected);
            // Numbers stay numbers (a negative one gets no guard), rounded, without noise.
            assert_eq!(&row[col("temperature_c")], "60.7");
            assert_eq!(&row[col("ton")], "-12.346");
            assert_eq!(&row[col("flags")], "conflict excluded");
            assert_eq!(&row[col("duration_h")], "");
        }
    }

    #[test]
    fn rounding_keeps_the_digits_asked_for_and_drops_conversion_noise() {
        assert_eq!(round_sig(Some(60.69999999999999), 10), Some(60.7));
        assert_eq!(round_sig(Some(486.983368704), 5), Some(486.98));
        assert_eq!(round_sig(Some(-0.000123456), 3), Some(-0.000123));
        assert_eq!(round_sig(Some(f64::NAN), 3), None);
        assert_eq!(round_sig(Some(0.0), 3), Some(0.0));
        assert_eq!(round_sig(None, 3), None);
    }
}

#[cfg(test)]
mod lot_line_json_tests {
    use super::*;
    use crate::fit;
    use crate::model::signoff::{SignOffMark, SignOffState, SignOffStatus};
    use crate::notebook::lots::LotLine;

    /// A line with every part filled: a forecast, a next batch, a sign-off with its mark.
    fn full_line() -> LotLine {
        LotLine {
            lot: "KV-2611-\"A\"".into(),
            registered: true,
            catalyst: Some("5 % Pd/C".into()),
            metal: Some("Pd".into()),
            cycles: 12,
            complete_cycles: 11,
            latest_activity: Some(0.812_345_678_901_234_5),
            cumulative_ton: Some(1.0e5 / 3.0),
            lifetime_ton: None,
            model: Some("first-order".into()),
            forecast: Some(serde_json::json!({
                "status": "ahead", "x": 31.5, "lower": null, "as_of": "2026-12-03",
                "crossing_early": "2027-01-02", "z_last": [1, 2.5, {"b": 1, "a": 2}]
            })),
            next_cycle: Some(fit::NextCycle {
                x: 13.0,
                predicted: 0.8,
                lower: 0.75,
                upper: 0.85,
                threshold: 0.6,
                verdict: fit::NextVerdict::Ok,
            }),
            abrupt_loss: true,
            flags: vec!["derived-yield".into(), "pending".into()],
            attention: vec!["look at ünits\n".into()],
            signoff: SignOffState {
                state: SignOffStatus::Approved,
                by: Some(SignOffMark {
                    seq: 40,
                    at: "2026-11-30T10:00:00.000Z".into(),
                    actor: "qa".into(),
                    meaning: "approved".into(),
                    signer: Some("M. Ferreira".into()),
                    os_user: None,
                    signed_sha256: "ab".repeat(32),
                    what: "history of lot KV-2611-A: 12 events up to #40".into(),
                    comment: Some("ok".into()),
                }),
            },
        }
    }

    #[test]
    fn lots_json_prints_what_the_value_tree_printed() {
        let empty = LotLine {
            lot: "L2".into(),
            registered: false,
            catalyst: None,
            metal: None,
            cycles: 0,
            complete_cycles: 0,
            latest_activity: Some(f64::NAN),
            cumulative_ton: None,
            lifetime_ton: None,
            model: None,
            forecast: None,
            next_cycle: None,
            abrupt_loss: false,
            flags: vec![],
            attention: vec![],
            signoff: SignOffState::none(),
        };
        for lines in [vec![], vec![full_line(), empty]] {
            let before = serde_json::to_string_pretty(&with_schema(&lines).unwrap()).unwrap();
            let now = serde_json::to_string_pretty(&lot_lines_json(&lines)).unwrap();
            assert_eq!(now, before);
        }
    }

    /// A line as stored: a forecast dated the day it was computed, no sign-off.
    fn stored(mut l: LotLine) -> LotLine {
        if let Some(serde_json::Value::Object(f)) = l.forecast.as_mut()
            && f.contains_key("as_of")
        {
            f.insert("as_of".into(), "2026-12-03".into());
        }
        l.signoff = SignOffState::none();
        l
    }

    /// The same line as the list shows it today: the forecast's `as_of` today, the
    /// lot's sign-off in.
    fn shown(mut l: LotLine, today: &str, signoff: &SignOffState) -> LotLine {
        if let Some(serde_json::Value::Object(f)) = l.forecast.as_mut()
            && f.contains_key("as_of")
        {
            f.insert("as_of".into(), today.into());
        }
        l.signoff = signoff.clone();
        l
    }

    #[test]
    fn a_printed_entry_splices_to_the_entry_printed_whole() {
        let today = "2027-01-05";
        let signed = full_line().signoff;
        let mut undated = full_line();
        undated.lot = "L-UNDATED".into();
        undated.forecast = Some(serde_json::json!({"status": "no-trend", "x": null}));
        let mut bare = full_line();
        bare.lot = "L-BARE".into();
        bare.forecast = None;
        bare.next_cycle = None;
        // LotLine is not Clone: a copy goes through its stored JSON.
        let copy = |l: &LotLine| -> LotLine {
            serde_json::from_str(&serde_json::to_string(l).unwrap()).unwrap()
        };
        let lines = || [full_line(), copy(&undated), copy(&bare)];
        // The reference: every line shown, printed through a JSON value tree as the
        // command printed it before lines were kept printed.
        let signoffs: std::collections::BTreeMap<String, SignOffState> =
            [(full_line().lot, signed.clone())].into_iter().collect();
        let none = SignOffState::none();
        let reference: Vec<LotLine> = lines()
            .into_iter()
            .map(|l| {
                let s = signoffs.get(&l.lot).unwrap_or(&none).clone();
                shown(l, today, &s)
            })
            .collect();
        let expected =
            serde_json::to_string_pretty(&with_schema(&reference).unwrap()).unwrap() + "\n";
        // Kept printed (each cut from the stored line), the second printed from its line
        // (the fallback); then every entry kept.
        for fallback in [Some(1), None] {
            let mut w = LotsJsonWriter::new(Vec::new(), today).unwrap();
            for (i, l) in lines().into_iter().enumerate() {
                let signoff = signoffs.get(&l.lot);
                if Some(i) == fallback {
                    w.line(&shown(l, today, signoff.unwrap_or(&none))).unwrap();
                    continue;
                }
                let p = printed_line(stored(l)).expect("a line with no mark in it is cut");
                assert_eq!(
                    p.tail.is_some(),
                    i == 0,
                    "only the first has a dated forecast"
                );
                w.printed(&p.head, p.tail.as_deref(), signoff).unwrap();
            }
            let out = w.finish().unwrap();
            assert_eq!(String::from_utf8(out).unwrap(), expected);
        }
        let out = LotsJsonWriter::new(Vec::new(), today)
            .unwrap()
            .finish()
            .unwrap();
        let reference = serde_json::to_string_pretty(&with_schema(&Vec::<LotLine>::new()).unwrap());
        assert_eq!(String::from_utf8(out).unwrap(), reference.unwrap() + "\n");
    }

    #[test]
    fn a_line_holding_the_date_mark_is_not_cut_and_the_form_names_this_build() {
        let mut l = stored(full_line());
        l.attention.push(AS_OF_MARK.into());
        assert_eq!(printed_line(l), None);
        // Without a forecast the mark is never looked for.
        let mut l = stored(full_line());
        l.forecast = None;
        l.attention.push(AS_OF_MARK.into());
        assert!(printed_line(l).is_some_and(|p| p.tail.is_none()));
        assert!(printed_form().starts_with("entry-"));
        assert_eq!(printed_form(), printed_form());
    }
}
