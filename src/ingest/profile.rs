//! Export profiles: how one kind of instrument export is laid out.
//!
//! A profile lives in the configuration as `[profiles.NAME]`:
//!
//! ```toml
//! [profiles.hplc_line2]
//! kind = "cycles"
//! delimiter = ";"
//! decimal = ","
//! encoding = "auto"
//! skip_lines = 2
//! datetime_format = "%d.%m.%Y %H:%M"
//! columns.batch_id = { header = "Batch" }
//! columns.started_at = { header = "Injected" }
//! columns.conversion = { header = "Conversion", unit = "%" }
//! columns.duration = { header = "Time", unit = "from-header" }
//! ```
//!
//! Column keys are the [`Quantity`] keys plus `batch_id`, `lot`, `cycle_no` and
//! `started_at` for cycle exports, and `lot`, `catalyst`, `metal`, `loading`,
//! `charged_mass`, `received`, `supplier_lot`, `cost`, `water_content` (optional, the
//! catalyst's water content as charged) for lot sheets.

use std::collections::BTreeMap;

use serde::Deserialize;

use super::decode::Encoding;
use super::units::{Dimension, Unit, dimension_of};
use crate::chem::AssayUncertainty;
use crate::model::Quantity;

/// The unit value that asks the parser to read the unit from the file's header cell.
pub const UNIT_FROM_HEADER: &str = "from-header";

/// Datetime layout used when a profile names none: ISO 8601 with a `T` or a space.
pub const DEFAULT_DATETIME_FORMATS: [&str; 2] = ["%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M:%S"];
/// Date layout used for lot sheets when a profile names none.
pub const DEFAULT_DATE_FORMAT: &str = "%Y-%m-%d";
/// Plausible reaction temperatures, kelvin (common practice range for liquid-phase
/// batch chemistry, from cryogenic work to high-temperature hydrotreating).
pub const DEFAULT_TEMPERATURE_RANGE_K: [f64; 2] = [150.0, 800.0];

/// Earliest plausible date in an export when a profile names none (instrument data
/// systems of the kind these exports come from are younger).
pub const DEFAULT_EARLIEST_DATE: &str = "1990-01-01";
/// Days after the present time a date may lie when a profile names none (time zones and
/// an instrument clock a little ahead).
pub const DEFAULT_LATEST_DAYS_AHEAD: u32 = 1;
/// Most days ahead a profile may allow.
pub const MAX_LATEST_DAYS_AHEAD: u32 = 3660;

/// What a file of this profile registers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ProfileKind {
    /// Measurements of batches, joined into cycles by batch id.
    Cycles,
    /// A lot sheet registering catalyst lots.
    Lots,
}

/// Field separator.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(try_from = "String")]
pub enum Delimiter {
    #[default]
    Comma,
    Semicolon,
    Tab,
}

impl Delimiter {
    pub fn byte(self) -> u8 {
        match self {
            Delimiter::Comma => b',',
            Delimiter::Semicolon => b';',
            Delimiter::Tab => b'\t',
        }
    }
}

impl TryFrom<String> for Delimiter {
    type Error = String;
    fn try_from(s: String) -> Result<Self, String> {
        match s.as_str() {
            "," => Ok(Delimiter::Comma),
            ";" => Ok(Delimiter::Semicolon),
            "tab" | "\t" => Ok(Delimiter::Tab),
            other => Err(format!(
                "delimiter: expected one of \",\", \";\", \"tab\"; found {other:?}"
            )),
        }
    }
}

/// Decimal mark of numbers in the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(try_from = "String")]
pub enum DecimalMark {
    #[default]
    Point,
    Comma,
}

impl DecimalMark {
    pub fn char(self) -> char {
        match self {
            DecimalMark::Point => '.',
            DecimalMark::Comma => ',',
        }
    }
}

impl TryFrom<String> for DecimalMark {
    type Error = String;
    fn try_from(s: String) -> Result<Self, String> {
        match s.as_str() {
            "." => Ok(DecimalMark::Point),
            "," => Ok(DecimalMark::Comma),
            other => Err(format!("decimal: expected \".\" or \",\"; found {other:?}")),
        }
    }
}

/// Where one value sits in the file and in which unit it is written.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ColumnSpec {
    /// The header cell text (trimmed, case-insensitive match).
    pub header: String,
    /// A unit symbol, or `"from-header"`; only for measured values.
    #[serde(default)]
    pub unit: Option<String>,
    /// A column some files of the profile lack (a newer export layout): absent is not an
    /// error, the field is then simply not recorded.
    #[serde(default)]
    pub optional: bool,
}

/// One instrument kind's export layout.
#[derive(Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Profile {
    pub kind: ProfileKind,
    #[serde(default)]
    pub delimiter: Delimiter,
    #[serde(default)]
    pub decimal: DecimalMark,
    #[serde(default)]
    pub encoding: Encoding,
    /// Physical lines before the header row (instrument banners, sample info).
    #[serde(default)]
    pub skip_lines: usize,
    /// chrono strftime layout of `started_at`; ISO 8601 when absent.
    #[serde(default)]
    pub datetime_format: Option<String>,
    /// chrono strftime layout of `received` in lot sheets; `%Y-%m-%d` when absent.
    #[serde(default)]
    pub date_format: Option<String>,
    /// Accepted reaction temperatures `[low, high]` in kelvin.
    #[serde(default)]
    pub temperature_range_k: Option<[f64; 2]>,
    /// Earliest plausible date of `started_at` and `received`, `YYYY-MM-DD`;
    /// `DEFAULT_EARLIEST_DATE` when absent.
    #[serde(default)]
    pub earliest_date: Option<String>,
    /// Days after the present time (given by the caller) still plausible for a date;
    /// `DEFAULT_LATEST_DAYS_AHEAD` when absent.
    #[serde(default)]
    pub latest_days_ahead: Option<u32>,
    /// The standard uncertainty of this instrument's conversion assay,
    /// `{ absolute = 0.005 }` (σ as a fraction) or `{ relative = 0.01 }` (of the value).
    /// Carried to k_app and activity as standard errors and fit weights; absent: none
    /// stated, and fits stay unweighted.
    #[serde(default)]
    pub conversion_uncertainty: Option<AssayUncertainty>,
    pub columns: BTreeMap<String, ColumnSpec>,
    /// The worksheet to read when a file of this profile is a spreadsheet (.xlsx, .ods);
    /// the first worksheet when absent. Delimited text ignores it.
    #[serde(default)]
    pub sheet: Option<String>,
}

/// As `derive(Debug)` writes it, but `sheet` only when set: the configuration's analysis
/// fingerprint is taken over this text, and a profile that names no worksheet must keep
/// the fingerprint it had before `sheet` existed (else every stored fit would count as
/// made under other settings).
impl std::fmt::Debug for Profile {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let mut d = f.debug_struct("Profile");
        d.field("kind", &self.kind)
            .field("delimiter", &self.delimiter)
            .field("decimal", &self.decimal)
            .field("encoding", &self.encoding)
            .field("skip_lines", &self.skip_lines)
            .field("datetime_format", &self.datetime_format)
            .field("date_format", &self.date_format)
            .field("temperature_range_k", &self.temperature_range_k)
            .field("earliest_date", &self.earliest_date)
            .field("latest_days_ahead", &self.latest_days_ahead)
            .field("conversion_uncertainty", &self.conversion_uncertainty)
            .field("columns", &self.columns);
        if let Some(sheet) = &self.sheet {
            d.field("sheet", sheet);
        }
        d.finish()
    }
}

/// What a column key of a profile stands for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Field {
    BatchId,
    Lot,
    CycleNo,
    StartedAt,
    /// The substrate or feed lot a batch was charged from (text).
    FeedLot,
    Measured(Quantity),
    Catalyst,
    Metal,
    Loading,
    ChargedMass,
    Received,
    SupplierLot,
    Cost,
    WaterContent,
    Family,
}

/// How a field's cell is read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FieldType {
    Text,
    Integer,
    DateTime,
    Date,
    /// A number with a unit of this dimension.
    Measured(Dimension),
    /// A number without unit (money).
    Number,
}

const CYCLE_TEXT_KEYS: [&str; 4] = ["batch_id", "lot", "cycle_no", "started_at"];
const LOT_KEYS: [&str; 10] = [
    "lot",
    "catalyst",
    "metal",
    "loading",
    "charged_mass",
    "received",
    "supplier_lot",
    "cost",
    "water_content",
    "family",
];

impl Field {
    /// Resolve a column key for a profile kind.
    pub fn from_key(kind: ProfileKind, key: &str) -> Option<Field> {
        match kind {
            ProfileKind::Cycles => match key {
                "batch_id" => Some(Field::BatchId),
                "lot" => Some(Field::Lot),
                "cycle_no" => Some(Field::CycleNo),
                "started_at" => Some(Field::StartedAt),
                "feed_lot" => Some(Field::FeedLot),
                other => Quantity::from_key(other).map(Field::Measured),
            },
            ProfileKind::Lots => match key {
                "lot" => Some(Field::Lot),
                "catalyst" => Some(Field::Catalyst),
                "metal" => Some(Field::Metal),
                "loading" => Some(Field::Loading),
                "charged_mass" => Some(Field::ChargedMass),
                "received" => Some(Field::Received),
                "supplier_lot" => Some(Field::SupplierLot),
                "cost" => Some(Field::Cost),
                "water_content" => Some(Field::WaterContent),
                "family" => Some(Field::Family),
                _ => None,
            },
        }
    }

    pub fn field_type(self) -> FieldType {
        match self {
            Field::BatchId
            | Field::Lot
            | Field::Catalyst
            | Field::Metal
            | Field::SupplierLot
            | Field::FeedLot
            | Field::Family => FieldType::Text,
            Field::CycleNo => FieldType::Integer,
            Field::StartedAt => FieldType::DateTime,
            Field::Received => FieldType::Date,
            Field::Measured(q) => FieldType::Measured(dimension_of(q)),
            Field::Loading | Field::WaterContent => FieldType::Measured(Dimension::Ratio),
            Field::ChargedMass => FieldType::Measured(Dimension::Mass),
            Field::Cost => FieldType::Number,
        }
    }

    /// Columns a profile of this kind must map.
    pub fn required(kind: ProfileKind) -> &'static [&'static str] {
        match kind {
            ProfileKind::Cycles => &["batch_id"],
            ProfileKind::Lots => &["lot", "catalyst", "metal", "loading", "charged_mass"],
        }
    }
}

/// The keys a kind accepts, for messages.
fn known_keys(kind: ProfileKind) -> Vec<&'static str> {
    match kind {
        ProfileKind::Cycles => CYCLE_TEXT_KEYS
            .iter()
            .copied()
            .chain(Quantity::ALL.iter().map(|q| q.key()))
            .collect(),
        ProfileKind::Lots => LOT_KEYS.to_vec(),
    }
}

/// Check a strftime layout with chrono before any file depends on it.
fn check_format(key: &str, fmt: &str) -> Result<(), String> {
    if fmt.trim().is_empty() {
        return Err(format!("{key}: must not be empty"));
    }
    chrono::format::StrftimeItems::new(fmt)
        .parse()
        .map(|_| ())
        .map_err(|_| format!("{key}: not a valid chrono strftime layout: {fmt:?}"))
}

impl Profile {
    /// Read a profile from TOML text (one `[profiles.NAME]` table's contents).
    pub fn from_toml(text: &str) -> Result<Profile, String> {
        let p: Profile = toml::from_str(text).map_err(|e| e.message().to_string())?;
        p.validate()?;
        Ok(p)
    }

    /// Check the profile; the message names the offending key relative to the profile
    /// (the configuration loader prefixes `profiles.NAME.`).
    pub fn validate(&self) -> Result<(), String> {
        if self.decimal == DecimalMark::Comma && self.delimiter == Delimiter::Comma {
            return Err(
                "decimal: a decimal comma needs delimiter \";\" or \"tab\"; found delimiter \",\""
                    .into(),
            );
        }
        if self.skip_lines > 10_000 {
            return Err(format!(
                "skip_lines: expected at most 10000; found {}",
                self.skip_lines
            ));
        }
        if let Some(name) = &self.sheet
            && name.trim().is_empty()
        {
            return Err("sheet: expected a worksheet's name; found an empty text".into());
        }
        if let Some(f) = &self.datetime_format {
            check_format("datetime_format", f)?;
        }
        if let Some(f) = &self.date_format {
            check_format("date_format", f)?;
        }
        if let Some(d) = &self.earliest_date
            && chrono::NaiveDate::parse_from_str(d, "%Y-%m-%d").is_err()
        {
            return Err(format!(
                "earliest_date: expected a date written YYYY-MM-DD; found {d:?}"
            ));
        }
        if let Some(n) = self.latest_days_ahead
            && n > MAX_LATEST_DAYS_AHEAD
        {
            return Err(format!(
                "latest_days_ahead: expected at most {MAX_LATEST_DAYS_AHEAD} days; found {n}"
            ));
        }
        if let Some([lo, hi]) = self.temperature_range_k
            && !(lo.is_finite() && hi.is_finite() && lo > 0.0 && lo < hi)
        {
            return Err(format!(
                "temperature_range_k: expected [low, high] in kelvin with 0 < low < high; found [{lo}, {hi}]"
            ));
        }
        if let Some(u) = self.conversion_uncertainty {
            if self.kind != ProfileKind::Cycles || !self.columns.contains_key("conversion") {
                return Err(
                    "conversion_uncertainty: only for a profile of kind = \"cycles\" that maps columns.conversion"
                        .into(),
                );
            }
            if let Some(p) = u.problem() {
                return Err(format!("conversion_uncertainty.{p}"));
            }
        }
        let mut headers: Vec<(String, &str)> = Vec::new();
        for (key, spec) in &self.columns {
            let Some(field) = Field::from_key(self.kind, key) else {
                return Err(format!(
                    "columns.{key}: unknown column key for kind = \"{}\"; expected one of {}",
                    self.kind_name(),
                    known_keys(self.kind).join(", ")
                ));
            };
            let header = spec.header.trim();
            if header.is_empty() {
                return Err(format!("columns.{key}.header: must not be empty"));
            }
            if header.chars().any(char::is_control) {
                return Err(format!(
                    "columns.{key}.header: must not contain control characters"
                ));
            }
            let folded = header.to_lowercase();
            if let Some((_, other)) = headers.iter().find(|(h, _)| *h == folded) {
                return Err(format!(
                    "columns.{key}.header: {header:?} is also the header of columns.{other}"
                ));
            }
            headers.push((folded, key));
            match (field.field_type(), &spec.unit) {
                (FieldType::Measured(dim), None) => {
                    return Err(format!(
                        "columns.{key}.unit: required; expected {} or \"{UNIT_FROM_HEADER}\"",
                        dim.expected_units()
                    ));
                }
                (FieldType::Measured(dim), Some(u)) => {
                    if u != UNIT_FROM_HEADER {
                        match Unit::parse(u) {
                            Some(unit) if unit.dimension() == dim => {}
                            _ => {
                                return Err(format!(
                                    "columns.{key}.unit: expected {} or \"{UNIT_FROM_HEADER}\"; found {u:?}",
                                    dim.expected_units()
                                ));
                            }
                        }
                    }
                }
                (_, Some(u)) => {
                    return Err(format!(
                        "columns.{key}.unit: this column takes no unit; found {u:?}"
                    ));
                }
                (_, None) => {}
            }
        }
        for req in Field::required(self.kind) {
            if !self.columns.contains_key(*req) {
                return Err(format!(
                    "columns.{req}: required for kind = \"{}\"",
                    self.kind_name()
                ));
            }
        }
        Ok(())
    }

    fn kind_name(&self) -> &'static str {
        match self.kind {
            ProfileKind::Cycles => "cycles",
            ProfileKind::Lots => "lots",
        }
    }

    /// The accepted temperature range, kelvin.
    pub fn temperature_range(&self) -> [f64; 2] {
        self.temperature_range_k
            .unwrap_or(DEFAULT_TEMPERATURE_RANGE_K)
    }
}

#[cfg(test)]
mod tests {
    /// The profile as it was before `sheet`, with the derived `Debug` the fingerprint read.
    mod before {
        use super::super::*;
        // Read by its derived Debug only, which the dead-code lint does not count.
        #[allow(dead_code)]
        #[derive(Debug)]
        pub struct Profile {
            pub kind: ProfileKind,
            pub delimiter: Delimiter,
            pub decimal: DecimalMark,
            pub encoding: Encoding,
            pub skip_lines: usize,
            pub datetime_format: Option<String>,
            pub date_format: Option<String>,
            pub temperature_range_k: Option<[f64; 2]>,
            pub earliest_date: Option<String>,
            pub latest_days_ahead: Option<u32>,
            pub conversion_uncertainty: Option<AssayUncertainty>,
            pub columns: BTreeMap<String, ColumnSpec>,
        }
    }

    #[test]
    fn a_profile_without_a_sheet_reads_as_before_for_the_fingerprint() {
        let toml = "kind = \"cycles\"\ndatetime_format = \"%d.%m.%Y %H:%M\"\n\
                    conversion_uncertainty = { absolute = 0.005 }\n\
                    columns.batch_id = { header = \"Batch\" }\n\
                    columns.conversion = { header = \"Conv\", unit = \"%\" }\n";
        let p = Profile::from_toml(toml).unwrap();
        let old = before::Profile {
            kind: p.kind,
            delimiter: p.delimiter,
            decimal: p.decimal,
            encoding: p.encoding,
            skip_lines: p.skip_lines,
            datetime_format: p.datetime_format.clone(),
            date_format: p.date_format.clone(),
            temperature_range_k: p.temperature_range_k,
            earliest_date: p.earliest_date.clone(),
            latest_days_ahead: p.latest_days_ahead,
            conversion_uncertainty: p.conversion_uncertainty,
            columns: p.columns.clone(),
        };
        assert_eq!(format!("{p:?}"), format!("{old:?}"));
        assert_eq!(format!("{p:#?}"), format!("{old:#?}"));
        let named = Profile::from_toml(&format!("{toml}sheet = \"Lots\"\n")).unwrap();
        assert!(format!("{named:?}").ends_with("sheet: \"Lots\" }"));
    }

    use super::*;

    const BASE: &str = r#"
kind = "cycles"
columns.batch_id = { header = "Batch" }
"#;

    fn with(extra: &str) -> Result<Profile, String> {
        Profile::from_toml(&format!("{BASE}{extra}"))
    }

    #[test]
    fn minimal_profile_has_defaults() {
        let p = with("").unwrap();
        assert_eq!(p.delimiter, Delimiter::Comma);
        assert_eq!(p.decimal, DecimalMark::Point);
        assert_eq!(p.encoding, Encoding::Auto);
        assert_eq!(p.skip_lines, 0);
    }

    #[test]
    fn wrong_unit_dimension_names_the_key() {
        let e = with("columns.conversion = { header = \"X\", unit = \"mol\" }\n").unwrap_err();
        assert_eq!(
            e,
            "columns.conversion.unit: expected one of %, fraction or \"from-header\"; found \"mol\""
        );
    }

    #[test]
    fn metal_in_product_accepts_trace_units_only() {
        for ok in ["ppm", "µg/g", "ug/g", "mg/kg", "from-header"] {
            with(&format!(
                "columns.metal_in_product = {{ header = \"Pd\", unit = \"{ok}\" }}\n"
            ))
            .unwrap();
        }
        let e = with("columns.metal_in_product = { header = \"Pd\", unit = \"%\" }\n").unwrap_err();
        assert!(e.starts_with("columns.metal_in_product.unit: expected one of ppm, µg/g, mg/kg"));
    }

    #[test]
    fn unknown_keys_are_refused() {
        let e = with("columns.colour = { header = \"c\" }\n").unwrap_err();
        assert!(e.starts_with("columns.colour: unknown column key"), "{e}");
        let e = with("speed = 3\n").unwrap_err();
        assert!(e.contains("speed"), "{e}");
        let e = with("columns.lot = { header = \"L\", width = 3 }\n").unwrap_err();
        assert!(e.contains("width"), "{e}");
    }

    #[test]
    fn text_column_takes_no_unit_and_unit_is_required() {
        let e = with("columns.lot = { header = \"L\", unit = \"g\" }\n").unwrap_err();
        assert_eq!(
            e,
            "columns.lot.unit: this column takes no unit; found \"g\""
        );
        let e = with("columns.duration = { header = \"t\" }\n").unwrap_err();
        assert_eq!(
            e,
            "columns.duration.unit: required; expected one of s, min, h or \"from-header\""
        );
    }

    #[test]
    fn delimiters_and_conflicts() {
        assert_eq!(
            with("delimiter = \"tab\"\n").unwrap().delimiter,
            Delimiter::Tab
        );
        assert_eq!(
            with("delimiter = \"\\t\"\n").unwrap().delimiter,
            Delimiter::Tab
        );
        assert!(with("delimiter = \"|\"\n").is_err());
        let e = with("decimal = \",\"\n").unwrap_err();
        assert!(e.starts_with("decimal:"), "{e}");
        with("decimal = \",\"\ndelimiter = \";\"\n").unwrap();
    }

    #[test]
    fn required_columns_and_duplicate_headers() {
        let e = Profile::from_toml("kind = \"cycles\"\ncolumns = {}\n").unwrap_err();
        assert_eq!(e, "columns.batch_id: required for kind = \"cycles\"");
        let e = Profile::from_toml("kind = \"lots\"\ncolumns.lot = { header = \"Lot\" }\n")
            .unwrap_err();
        assert_eq!(e, "columns.catalyst: required for kind = \"lots\"");
        let e = with("columns.lot = { header = \" batch \" }\n").unwrap_err();
        assert!(e.starts_with("columns.lot.header:"), "{e}");
    }

    #[test]
    fn conversion_uncertainty_is_read_and_checked() {
        let conv = "columns.conversion = { header = \"X\", unit = \"%\" }\n";
        let p = with(&format!(
            "conversion_uncertainty = {{ absolute = 0.005 }}\n{conv}"
        ))
        .unwrap();
        assert_eq!(
            p.conversion_uncertainty,
            Some(AssayUncertainty::Absolute(0.005))
        );
        let p = with(&format!(
            "conversion_uncertainty = {{ relative = 0.02 }}\n{conv}"
        ))
        .unwrap();
        assert_eq!(
            p.conversion_uncertainty,
            Some(AssayUncertainty::Relative(0.02))
        );
        let e = with(&format!(
            "conversion_uncertainty = {{ absolute = 5 }}\n{conv}"
        ))
        .unwrap_err();
        assert!(e.starts_with("conversion_uncertainty.absolute:"), "{e}");
        let e = with("conversion_uncertainty = { absolute = 0.005 }\n").unwrap_err();
        assert!(e.starts_with("conversion_uncertainty:"), "{e}");
        assert!(
            with(&format!(
                "conversion_uncertainty = {{ sigma = 0.005 }}\n{conv}"
            ))
            .is_err()
        );
        assert_eq!(with("").unwrap().conversion_uncertainty, None);
    }

    #[test]
    fn bad_datetime_format() {
        let e = with("datetime_format = \"%Q-%\"\n").unwrap_err();
        assert!(e.starts_with("datetime_format:"), "{e}");
        with("datetime_format = \"%d.%m.%Y %H:%M\"\n").unwrap();
    }
}
