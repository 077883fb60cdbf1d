//! One plausibility rule per quantity, whichever way a value enters: a column of an export
//! or a person's correction. The parser and `correct` both call [`check_canonical`].

use super::number::{FRACTION_SLACK, parse_number, short_number};
use super::profile::{DEFAULT_TEMPERATURE_RANGE_K, DecimalMark};
use super::units::{Dimension, Unit, dimension_of};
use crate::model::Quantity;

/// The unit `turnbook cycles` shows a quantity in; a bare number in a correction means it.
pub fn shown_unit(q: Quantity) -> Unit {
    match q {
        Quantity::Duration => Unit::Hour,
        Quantity::Temperature => Unit::Celsius,
        Quantity::Substrate | Quantity::MetalCharged => Unit::Mole,
        Quantity::CatalystMass | Quantity::ProductMass | Quantity::CatalystRecovered => Unit::Gram,
        Quantity::Conversion | Quantity::Selectivity | Quantity::Yield => Unit::Fraction,
        Quantity::MetalInProduct => Unit::MicrogramPerGram,
    }
}

/// Check a value already in its canonical unit against the quantity's plausible range;
/// returns the value to store (a fraction a hair above 1 is stored as 1) or what was
/// expected, in words.
pub fn check_canonical(q: Quantity, c: f64, temperature_range_k: [f64; 2]) -> Result<f64, String> {
    if !c.is_finite() {
        return Err("a finite number".into());
    }
    match dimension_of(q) {
        Dimension::Ratio if (-FRACTION_SLACK..=1.0 + FRACTION_SLACK).contains(&c) => {
            Ok(c.clamp(0.0, 1.0))
        }
        Dimension::Ratio => Err(format!("a {} between 0 and 1 (0 % to 100 %)", q.key())),
        Dimension::TraceContent if c >= 0.0 => Ok(c),
        Dimension::TraceContent => Err("a metal content of 0 or more".into()),
        Dimension::Temperature => {
            let [lo, hi] = temperature_range_k;
            if (lo..=hi).contains(&c) {
                Ok(c)
            } else {
                Err(format!(
                    "a temperature between {} K and {} K ({:.2} °C to {:.2} °C)",
                    short_number(lo),
                    short_number(hi),
                    lo - 273.15,
                    hi - 273.15
                ))
            }
        }
        Dimension::Time if c > 0.0 => Ok(c),
        Dimension::Time => Err("a duration greater than 0".into()),
        Dimension::Mass | Dimension::Amount if c > 0.0 => Ok(c),
        Dimension::Mass | Dimension::Amount => Err("a value greater than 0".into()),
    }
}

/// A value a person typed that cannot be stored: what was found and what was expected.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{field} = '{found}': expected {expected}")]
pub struct ValueProblem {
    pub field: String,
    pub found: String,
    pub expected: String,
}

/// Read a typed value of `q` such as `60 °C`, `85 %` or a bare `0.85` (in [`shown_unit`]),
/// convert it to the canonical unit and check it by the same rule as an export's column.
pub fn read_value(q: Quantity, text: &str) -> Result<f64, ValueProblem> {
    let problem = |expected: String| ValueProblem {
        field: q.key().to_string(),
        found: text.chars().take(40).collect(),
        expected,
    };
    let t = text.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E')))
        .unwrap_or(t.len());
    let (number, unit_text) = t.split_at(split);
    let unit = match unit_text.trim() {
        "" => shown_unit(q),
        u => Unit::parse(u)
            .filter(|u| u.dimension() == dimension_of(q))
            .ok_or_else(|| {
                problem(format!(
                    "a number with a unit of {}",
                    dimension_of(q).expected_units()
                ))
            })?,
    };
    let v = parse_number(number, DecimalMark::Point)
        .map_err(|why| problem(format!("a number ({why})")))?;
    check_canonical(q, unit.to_canonical(v), DEFAULT_TEMPERATURE_RANGE_K).map_err(problem)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn typed_values_take_their_unit_or_the_shown_one() {
        let t = read_value(Quantity::Temperature, "60 °C").unwrap();
        assert!((t - 333.15).abs() < 1e-9);
        let t = read_value(Quantity::Temperature, "60").unwrap();
        assert!(
            (t - 333.15).abs() < 1e-9,
            "a bare number is in °C, as cycles shows it"
        );
        assert_eq!(
            read_value(Quantity::Temperature, "333.15 K").unwrap(),
            333.15
        );
        assert_eq!(read_value(Quantity::Conversion, "85 %").unwrap(), 0.85);
        assert_eq!(read_value(Quantity::Duration, "2 h").unwrap(), 7200.0);
    }

    #[test]
    fn implausible_values_name_the_rule() {
        let e = read_value(Quantity::Temperature, "60 K").unwrap_err();
        assert!(e.expected.contains("between 150 K and 800 K"), "{e}");
        let e = read_value(Quantity::Selectivity, "-0.5").unwrap_err();
        assert!(e.expected.contains("between 0 and 1"), "{e}");
        let e = read_value(Quantity::ProductMass, "12 °C").unwrap_err();
        assert!(e.expected.contains("one of mg, g, kg"), "{e}");
        assert!(read_value(Quantity::Conversion, "lots").is_err());
        assert!(read_value(Quantity::Conversion, "1e308 %").is_err());
    }
}
