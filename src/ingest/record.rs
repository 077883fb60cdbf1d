//! What a parsed export file holds, in canonical units, before it is merged into cycles.
//!
//! This is the contract between the pure parser ([`crate::ingest`]) and the shell that
//! stores records ([`crate::pipeline`]). Every value keeps the line and column it came
//! from so that provenance survives into the database.

use serde::{Deserialize, Serialize};

/// A quantity a cycle record can hold. Each is stored in one canonical unit, named by
/// [`Quantity::canonical_unit`]; the parser converts from the profile's unit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    /// Reaction time, seconds.
    Duration,
    /// Reaction temperature, kelvin.
    Temperature,
    /// Limiting substrate charged, mol.
    Substrate,
    /// Catalyst charged, grams (metal from the lot's loading).
    CatalystMass,
    /// Metal charged, mol, when an instrument reports it directly.
    MetalCharged,
    /// Conversion of the limiting substrate, fraction 0..1.
    Conversion,
    /// Selectivity to the product, fraction 0..1.
    Selectivity,
    /// Yield of product, fraction 0..1.
    Yield,
    /// Isolated product mass, grams.
    ProductMass,
    /// Metal found in the product, µg/g (= mg/kg = ppm by mass).
    MetalInProduct,
    /// Catalyst mass recovered after filtration, grams.
    CatalystRecovered,
}

impl Quantity {
    /// Every quantity, in storage order.
    pub const ALL: [Quantity; 11] = [
        Quantity::Duration,
        Quantity::Temperature,
        Quantity::Substrate,
        Quantity::CatalystMass,
        Quantity::MetalCharged,
        Quantity::Conversion,
        Quantity::Selectivity,
        Quantity::Yield,
        Quantity::ProductMass,
        Quantity::MetalInProduct,
        Quantity::CatalystRecovered,
    ];

    /// The name used in configuration keys, database rows and JSON.
    pub fn key(self) -> &'static str {
        match self {
            Quantity::Duration => "duration",
            Quantity::Temperature => "temperature",
            Quantity::Substrate => "substrate",
            Quantity::CatalystMass => "catalyst_mass",
            Quantity::MetalCharged => "metal_charged",
            Quantity::Conversion => "conversion",
            Quantity::Selectivity => "selectivity",
            Quantity::Yield => "yield",
            Quantity::ProductMass => "product_mass",
            Quantity::MetalInProduct => "metal_in_product",
            Quantity::CatalystRecovered => "catalyst_recovered",
        }
    }

    /// Parse a configuration key back into a quantity.
    pub fn from_key(key: &str) -> Option<Quantity> {
        Quantity::ALL.into_iter().find(|q| q.key() == key)
    }

    /// The canonical unit values are stored in.
    pub fn canonical_unit(self) -> &'static str {
        match self {
            Quantity::Duration => "s",
            Quantity::Temperature => "K",
            Quantity::Substrate | Quantity::MetalCharged => "mol",
            Quantity::CatalystMass | Quantity::ProductMass | Quantity::CatalystRecovered => "g",
            Quantity::Conversion | Quantity::Selectivity | Quantity::Yield => "fraction",
            Quantity::MetalInProduct => "ug/g",
        }
    }
}

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
    pub values: Vec<MeasuredValue>,
}

/// One row of a lot sheet: the registration of a catalyst lot.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotRow {
    pub line: u64,
    pub lot: String,
    pub catalyst: String,
    /// Element symbol, e.g. "Pd".
    pub metal: String,
    /// Metal loading, weight percent (5.0 means 5 wt %).
    pub loading_wt_pct: f64,
    /// Catalyst mass charged at the first cycle, grams.
    pub charged_mass_g: f64,
    /// ISO date `YYYY-MM-DD`.
    pub received: Option<String>,
    pub supplier_lot: Option<String>,
    /// Lot cost net of refining credit, in the site's currency.
    pub cost: Option<f64>,
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
}

impl ParseError {
    fn describe(&self) -> String {
        let mut at = Vec::new();
        if let Some(l) = self.line {
            at.push(format!("line {l}"));
        }
        if let Some(c) = self.column {
            at.push(format!("column {c}"));
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
