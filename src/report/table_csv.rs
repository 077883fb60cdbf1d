//! The cycle table as CSV, for people who re-check numbers in a spreadsheet.
//!
//! RFC 4180 quoting comes from the csv crate. Header names carry the canonical unit so a
//! column can never be misread (`duration_s`, `metal_in_product_ug_per_g`). Numbers are
//! written with Rust's shortest round-trip form, so a value read back is bit-identical.
//! Columns added later go at the end, so a spreadsheet built on the earlier ones still
//! reads them: `tof_per_h` is the average TOF (TON / reaction time), `tof_initial_per_h`
//! the initial TOF (k_app × mol substrate / mol metal), `activity` is on the basis the
//! report states.

use std::io::Write;

use crate::model::Quantity;

use super::escape::defuse_csv_cell;
use super::model::{CycleLine, LotReport};

/// Why the CSV could not be written.
#[derive(Debug, thiserror::Error)]
pub enum CsvError {
    #[error("writing the cycle table as CSV failed: {0}")]
    Csv(#[from] csv::Error),
    #[error("writing the cycle table as CSV failed: {0}")]
    Io(#[from] std::io::Error),
}

/// The unit as it may appear in a header name (ASCII, no slash).
fn unit_slug(q: Quantity) -> &'static str {
    match q.canonical_unit() {
        "ug/g" => "ug_per_g",
        other => other,
    }
}

/// The header row, in column order.
pub fn csv_header() -> Vec<String> {
    let mut h: Vec<String> = ["lot", "cycle_no", "batch_id", "started_at"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    h.extend(
        Quantity::ALL
            .iter()
            .map(|q| format!("{}_{}", q.key(), unit_slug(*q))),
    );
    h.extend(
        [
            "ton",
            "tof_per_h",
            "k_app_per_h",
            "activity",
            "censored",
            "pending",
            "conflict",
            "excluded",
            "corrected",
            "sources",
            "ton_per_mol_metal_available",
            "tof_initial_per_h",
            "activity_se",
            "metal_charged_mmol",
            "metal_available_mmol",
            "ratio_off_usual",
        ]
        .iter()
        .map(|s| s.to_string()),
    );
    h
}

fn num(v: Option<f64>) -> String {
    match v {
        Some(v) if v.is_finite() => format!("{v}"),
        _ => String::new(),
    }
}

/// Sources in one cell: `name:line sha256=hex`, separated by ` | `.
fn sources_cell(c: &CycleLine) -> String {
    c.sources
        .iter()
        .map(|s| format!("{}:{} sha256={}", s.file_name, s.line, s.sha256))
        .collect::<Vec<_>>()
        .join(" | ")
}

fn row(lot: &str, c: &CycleLine) -> Vec<String> {
    let mut r = vec![
        defuse_csv_cell(lot),
        c.cycle_no.to_string(),
        defuse_csv_cell(&c.batch_id),
        defuse_csv_cell(c.started_at.as_deref().unwrap_or("")),
    ];
    r.extend(Quantity::ALL.iter().map(|q| num(c.value(*q))));
    r.extend([
        num(c.ton),
        num(c.tof_per_h),
        num(c.k_app_per_h),
        num(c.activity),
    ]);
    let f = c.flags;
    r.extend(
        [f.censored, f.pending, f.conflict, f.excluded, f.corrected]
            .iter()
            .map(|b| b.to_string()),
    );
    r.push(defuse_csv_cell(&sources_cell(c)));
    r.extend([
        num(c.ton_per_metal_available),
        num(c.tof_initial_per_h),
        num(c.activity_se),
        num(c.metal_charged_mmol),
        num(c.metal_available_mmol),
        f.ratio_off_usual.to_string(),
    ]);
    r
}

/// Write the cycle table to any writer (a file, a socket).
pub fn write_lot_csv<W: Write>(r: &LotReport, out: W) -> Result<(), CsvError> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(out);
    w.write_record(csv_header())?;
    for c in &r.cycles {
        w.write_record(row(&r.identity.record.lot, c))?;
    }
    w.flush()?;
    Ok(())
}

/// The cycle table as a CSV string (CRLF line ends, as RFC 4180 writes them).
///
/// Text cells from users or files that start with `=`, `+`, `-` or `@` get a leading
/// apostrophe so a spreadsheet shows them instead of running them as formulas.
pub fn lot_csv(r: &LotReport) -> String {
    let mut buf = Vec::new();
    if let Err(e) = write_lot_csv(r, &mut buf) {
        // Writing into memory cannot fail on I/O and every row has the header's length;
        // should it still fail, the partial table is returned and the failure logged.
        tracing::error!(error = %e, lot = %r.identity.record.lot, "cycle table CSV incomplete");
    }
    String::from_utf8(buf).unwrap_or_else(|e| String::from_utf8_lossy(e.as_bytes()).into_owned())
}
