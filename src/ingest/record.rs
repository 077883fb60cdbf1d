//! What a parsed export file holds, in canonical units, before it is merged into cycles.
//!
//! This is the contract between the pure parser ([`crate::ingest`]) and the shell that
//! stores records ([`crate::notebook::ingestion`]). Every value keeps the line and column it came
//! from so that provenance survives into the database.

use serde::{Deserialize, Serialize};

use crate::model::{LotRecord, Quantity};

/// One measured value with where it came from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MeasuredValue {
    pub quantity: Quantity,
    /// In the canonical unit of `quantity`.
    pub value: f64,
    /// 1-based column in the source line.
    pub column: u32,
    /// The text as it stood in the file (after decoding), for the audit trail.
    pub raw: String,
}

/// One data row of a cycle export: part or all of one batch's record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CycleRow {
    /// 1-based physical line number in the decoded file.
    pub line: u64,
    /// The batch id that joins rows from different instruments into one cycle.
    pub batch_id: String,
    /// The catalyst lot, when this instrument records it.
    pub lot: Option<String>,
    /// The cycle number, when this instrument records it.
    pub cycle_no: Option<u32>,
    /// Batch start, as ISO 8601 (`YYYY-MM-DDTHH:MM:SS`, local plant time), when recorded.
    pub started_at: Option<String>,
    /// The substrate or feed lot the batch was charged from, when recorded.
    #[serde(default)]
    pub feed_lot: Option<String>,
    pub values: Vec<MeasuredValue>,
}

/// One row of a lot sheet: the registration of a catalyst lot, and where it stood.
/// The site is left empty here; the store fills it in from the configuration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotRow {
    pub line: u64,
    pub record: LotRecord,
}

/// What one export file holds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum ParsedFile {
    Cycles(Vec<CycleRow>),
    Lots(Vec<LotRow>),
}

/// Why a file could not be read, with enough position to find the fault.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error, Serialize, Deserialize)]
#[error("{}", self.describe())]
pub struct ParseError {
    /// 1-based line, when the fault is on one line.
    pub line: Option<u64>,
    /// 1-based column, when the fault is in one field.
    pub column: Option<u32>,
    /// The field (profile column key or header), when known.
    pub field: Option<String>,
    /// What was expected, in words a chemist understands.
    pub expected: String,
    /// What was found instead (shortened, control characters escaped).
    pub found: String,
    /// The worksheet, when the file is a spreadsheet: `line` is then its row and `column`
    /// its column (shown as letters, A for 1).
    #[serde(default)]
    pub sheet: Option<String>,
}

impl ParseError {
    fn describe(&self) -> String {
        let mut at = Vec::new();
        if let Some(s) = &self.sheet {
            // Debug quotes the name and escapes control characters.
            at.push(format!("sheet {s:?}"));
        }
        let in_sheet = self.sheet.is_some();
        if let Some(l) = self.line {
            at.push(format!("{} {l}", if in_sheet { "row" } else { "line" }));
        }
        match self.column {
            Some(c) if in_sheet => at.push(format!("column {}", column_letters(c))),
            Some(c) => at.push(format!("column {c}")),
            None => {}
        }
        if let Some(f) = &self.field {
            at.push(format!("field '{f}'"));
        }
        let at = if at.is_empty() {
            String::new()
        } else {
            format!("{}: ", at.join(", "))
        };
        format!("{at}expected {}, found {}", self.expected, self.found)
    }
}

/// A spreadsheet's name of a 1-based column: A for 1, Z for 26, AA for 27.
pub fn column_letters(column: u32) -> String {
    let mut n = column;
    let mut out = Vec::new();
    while n > 0 {
        let rem = (n - 1) % 26;
        out.push(char::from(b'A' + rem as u8));
        n = (n - 1) / 26;
    }
    out.iter().rev().collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn column_letters_as_spreadsheets_name_them() {
        assert_eq!(column_letters(1), "A");
        assert_eq!(column_letters(26), "Z");
        assert_eq!(column_letters(27), "AA");
        assert_eq!(column_letters(52), "AZ");
        assert_eq!(column_letters(703), "AAA");
    }

    #[test]
    fn a_sheet_names_row_and_lettered_column() {
        let e = ParseError {
            line: Some(4),
            column: Some(3),
            field: Some("loading".into()),
            expected: "a number".into(),
            found: "\"x\"".into(),
            sheet: Some("Lots".into()),
        };
        assert_eq!(
            e.to_string(),
            "sheet \"Lots\", row 4, column C, field 'loading': expected a number, found \"x\""
        );
    }
}
