//! Units an export may use, and their conversion to the canonical units of [`Quantity`].
//!
//! Kept as a closed list on purpose: an export whose unit we do not know must be refused,
//! not guessed, because a wrong factor of 1000 in a mass silently corrupts every TON.

use crate::model::Quantity;

/// A unit accepted in a profile or in a file header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    Fraction,
    Percent,
    Ppm,
    MicrogramPerGram,
    MilligramPerKilogram,
    Milligram,
    Gram,
    Kilogram,
    Millimole,
    Mole,
    Second,
    Minute,
    Hour,
    Celsius,
    Kelvin,
}

/// The physical dimension of a unit; a quantity accepts only units of its own dimension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dimension {
    /// Dimensionless ratio (conversion, selectivity, yield, loading).
    Ratio,
    /// Mass per mass of product, for trace metal.
    TraceContent,
    Mass,
    Amount,
    Time,
    Temperature,
}

impl Unit {
    /// Read a unit as written in a profile or header. Case matters ("mg" is not "Mg"); the
    /// micro sign may be written as "µ" (U+00B5), "μ" (U+03BC) or "u".
    pub fn parse(text: &str) -> Option<Unit> {
        Some(match text.trim() {
            "fraction" => Unit::Fraction,
            "%" => Unit::Percent,
            "ppm" => Unit::Ppm,
            "µg/g" | "μg/g" | "ug/g" => Unit::MicrogramPerGram,
            "mg/kg" => Unit::MilligramPerKilogram,
            "mg" => Unit::Milligram,
            "g" => Unit::Gram,
            "kg" => Unit::Kilogram,
            "mmol" => Unit::Millimole,
            "mol" => Unit::Mole,
            "s" => Unit::Second,
            "min" => Unit::Minute,
            "h" => Unit::Hour,
            "°C" | "degC" | "C" => Unit::Celsius,
            "K" => Unit::Kelvin,
            _ => return None,
        })
    }

    /// The spelling used in messages.
    pub fn symbol(self) -> &'static str {
        match self {
            Unit::Fraction => "fraction",
            Unit::Percent => "%",
            Unit::Ppm => "ppm",
            Unit::MicrogramPerGram => "µg/g",
            Unit::MilligramPerKilogram => "mg/kg",
            Unit::Milligram => "mg",
            Unit::Gram => "g",
            Unit::Kilogram => "kg",
            Unit::Millimole => "mmol",
            Unit::Mole => "mol",
            Unit::Second => "s",
            Unit::Minute => "min",
            Unit::Hour => "h",
            Unit::Celsius => "°C",
            Unit::Kelvin => "K",
        }
    }

    pub fn dimension(self) -> Dimension {
        match self {
            Unit::Fraction | Unit::Percent => Dimension::Ratio,
            Unit::Ppm | Unit::MicrogramPerGram | Unit::MilligramPerKilogram => {
                Dimension::TraceContent
            }
            Unit::Milligram | Unit::Gram | Unit::Kilogram => Dimension::Mass,
            Unit::Millimole | Unit::Mole => Dimension::Amount,
            Unit::Second | Unit::Minute | Unit::Hour => Dimension::Time,
            Unit::Celsius | Unit::Kelvin => Dimension::Temperature,
        }
    }

    /// Convert a value in this unit to the canonical unit of its dimension
    /// (fraction, µg/g, g, mol, s, K). ppm is taken as mass ppm (1 ppm = 1 µg/g).
    pub fn to_canonical(self, v: f64) -> f64 {
        match self {
            Unit::Fraction
            | Unit::Ppm
            | Unit::MicrogramPerGram
            | Unit::MilligramPerKilogram
            | Unit::Gram
            | Unit::Mole
            | Unit::Second
            | Unit::Kelvin => v,
            Unit::Percent => v / 100.0,
            Unit::Milligram => v / 1000.0,
            Unit::Kilogram => v * 1000.0,
            Unit::Millimole => v / 1000.0,
            Unit::Minute => v * 60.0,
            Unit::Hour => v * 3600.0,
            // 0 °C = 273.15 K by definition of the Celsius scale (SI Brochure, 9th ed.).
            Unit::Celsius => v + 273.15,
        }
    }

    /// Inverse of [`Unit::to_canonical`]; used by tests and by report writers.
    pub fn from_canonical(self, v: f64) -> f64 {
        match self {
            Unit::Fraction
            | Unit::Ppm
            | Unit::MicrogramPerGram
            | Unit::MilligramPerKilogram
            | Unit::Gram
            | Unit::Mole
            | Unit::Second
            | Unit::Kelvin => v,
            Unit::Percent => v * 100.0,
            Unit::Milligram => v * 1000.0,
            Unit::Kilogram => v / 1000.0,
            Unit::Millimole => v * 1000.0,
            Unit::Minute => v / 60.0,
            Unit::Hour => v / 3600.0,
            Unit::Celsius => v - 273.15,
        }
    }
}

impl Dimension {
    /// The units a quantity of this dimension accepts, for messages.
    pub fn units(self) -> &'static [Unit] {
        match self {
            Dimension::Ratio => &[Unit::Percent, Unit::Fraction],
            Dimension::TraceContent => &[
                Unit::Ppm,
                Unit::MicrogramPerGram,
                Unit::MilligramPerKilogram,
            ],
            Dimension::Mass => &[Unit::Milligram, Unit::Gram, Unit::Kilogram],
            Dimension::Amount => &[Unit::Millimole, Unit::Mole],
            Dimension::Time => &[Unit::Second, Unit::Minute, Unit::Hour],
            Dimension::Temperature => &[Unit::Celsius, Unit::Kelvin],
        }
    }

    /// "one of %, fraction", for error messages.
    pub fn expected_units(self) -> String {
        let names: Vec<&str> = self.units().iter().map(|u| u.symbol()).collect();
        format!("one of {}", names.join(", "))
    }
}

/// The dimension of each cycle quantity.
pub fn dimension_of(q: Quantity) -> Dimension {
    match q {
        Quantity::Duration => Dimension::Time,
        Quantity::Temperature => Dimension::Temperature,
        Quantity::Substrate | Quantity::MetalCharged => Dimension::Amount,
        Quantity::CatalystMass | Quantity::ProductMass | Quantity::CatalystRecovered => {
            Dimension::Mass
        }
        Quantity::Conversion | Quantity::Selectivity | Quantity::Yield => Dimension::Ratio,
        Quantity::MetalInProduct => Dimension::TraceContent,
    }
}

/// Split a header cell written as "Name [unit]" or "Name (unit)" into name and unit text.
/// Returns `None` when the cell does not end in a bracketed part.
pub fn split_header_unit(cell: &str) -> Option<(&str, &str)> {
    let cell = cell.trim();
    let (open, close) = if cell.ends_with(']') {
        ('[', ']')
    } else if cell.ends_with(')') {
        ('(', ')')
    } else {
        return None;
    };
    let start = cell.rfind(open)?;
    let name = cell[..start].trim();
    let unit = cell[start + open.len_utf8()..cell.len() - close.len_utf8()].trim();
    if name.is_empty() {
        return None;
    }
    Some((name, unit))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_dimension_lists_only_its_own_units() {
        for d in [
            Dimension::Ratio,
            Dimension::TraceContent,
            Dimension::Mass,
            Dimension::Amount,
            Dimension::Time,
            Dimension::Temperature,
        ] {
            for u in d.units() {
                assert_eq!(u.dimension(), d, "{}", u.symbol());
                assert_eq!(Unit::parse(u.symbol()), Some(*u));
            }
        }
    }

    #[test]
    fn conversions_invert() {
        for u in Dimension::Mass
            .units()
            .iter()
            .chain(Dimension::Time.units())
        {
            let v = 12.345;
            let back = u.from_canonical(u.to_canonical(v));
            assert!((back - v).abs() < 1e-12, "{}", u.symbol());
        }
        assert_eq!(Unit::Celsius.to_canonical(25.0), 298.15);
        assert_eq!(Unit::Hour.to_canonical(1.5), 5400.0);
    }

    #[test]
    fn micro_spellings_and_case() {
        assert_eq!(Unit::parse("ug/g"), Some(Unit::MicrogramPerGram));
        assert_eq!(Unit::parse("µg/g"), Some(Unit::MicrogramPerGram));
        assert_eq!(Unit::parse("μg/g"), Some(Unit::MicrogramPerGram));
        assert_eq!(Unit::parse("Mg"), None);
        assert_eq!(Unit::parse("MOL"), None);
    }

    #[test]
    fn header_units_split() {
        assert_eq!(
            split_header_unit("Conversion [%]"),
            Some(("Conversion", "%"))
        );
        assert_eq!(split_header_unit(" Mass (mg) "), Some(("Mass", "mg")));
        assert_eq!(split_header_unit("Mass"), None);
        assert_eq!(split_header_unit("[g]"), None);
        assert_eq!(
            split_header_unit("T (reactor) (°C)"),
            Some(("T (reactor)", "°C"))
        );
    }
}
