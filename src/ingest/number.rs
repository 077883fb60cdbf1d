//! Numbers as exports write them, and as messages show them.

use super::profile::DecimalMark;

/// Slack allowed above 1 (and below 0) for fractions, for rounding in instrument software.
pub const FRACTION_SLACK: f64 = 1e-9;

/// Most significant digits a message shows of a number.
const SHOWN_DIGITS: i32 = 15;

/// Read a decimal number written with the profile's decimal mark.
///
/// Accepted: an optional sign, digits with at most one decimal mark, an optional
/// exponent (`1,5e-3` or `1.5E-3`). Refused: thousands separators (the other mark, or
/// spaces: "1.234,5" is ambiguous between locales), `nan`, `inf`, and values that
/// overflow. The error text (appended to the expectation) says why.
pub fn parse_number(text: &str, mark: DecimalMark) -> Result<f64, &'static str> {
    let other = match mark {
        DecimalMark::Point => ',',
        DecimalMark::Comma => '.',
    };
    if text.contains(other) {
        return Err(" and no thousands separator");
    }
    let bytes = text.as_bytes();
    let mut i = 0;
    if let Some(&s) = bytes.first()
        && (s == b'+' || s == b'-')
    {
        i = 1;
    }
    let mut digits = 0;
    let mut seen_mark = false;
    while i < bytes.len() {
        let b = bytes[i];
        if b.is_ascii_digit() {
            digits += 1;
        } else if b as char == mark.char() && !seen_mark {
            seen_mark = true;
        } else {
            break;
        }
        i += 1;
    }
    if digits == 0 {
        return Err("");
    }
    if i < bytes.len() && (bytes[i] == b'e' || bytes[i] == b'E') {
        i += 1;
        if i < bytes.len() && (bytes[i] == b'+' || bytes[i] == b'-') {
            i += 1;
        }
        let start = i;
        while i < bytes.len() && bytes[i].is_ascii_digit() {
            i += 1;
        }
        if i == start {
            return Err("");
        }
    }
    if i != bytes.len() {
        return Err("");
    }
    // The text now matches a grammar that Rust's float parser accepts once the decimal
    // mark is a point; only a decimal comma needs a copy.
    let parsed = match mark {
        DecimalMark::Point => text.parse::<f64>(),
        DecimalMark::Comma => text.replace(',', ".").parse::<f64>(),
    };
    match parsed {
        Ok(v) if v.is_finite() => Ok(v),
        _ => Err(" within the range of a double"),
    }
}

/// A number as a message shows it: at most 15 significant digits, with an exponent when
/// it is very large or very small (`1e308`, not the 309 digits of its full expansion).
pub fn short_number(v: f64) -> String {
    if !v.is_finite() {
        return v.to_string();
    }
    if v == 0.0 {
        return "0".into();
    }
    let magnitude = v.abs().log10().floor() as i32;
    if !(-6..SHOWN_DIGITS).contains(&magnitude) {
        let text = format!("{:.*e}", (SHOWN_DIGITS - 1) as usize, v);
        let (mantissa, exponent) = text.split_once('e').unwrap_or((&text, "0"));
        return format!("{}e{exponent}", trim_zeros(mantissa));
    }
    let decimals = (SHOWN_DIGITS - 1 - magnitude).max(0) as usize;
    trim_zeros(&format!("{v:.decimals$}")).to_string()
}

/// `1.500` as `1.5`, `2.000` as `2`; a number without a decimal point is kept.
fn trim_zeros(text: &str) -> &str {
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.')
    } else {
        text
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_by_decimal_mark() {
        assert_eq!(parse_number("12.5", DecimalMark::Point), Ok(12.5));
        assert_eq!(parse_number("12,5", DecimalMark::Comma), Ok(12.5));
        assert_eq!(parse_number("-1,5e-3", DecimalMark::Comma), Ok(-1.5e-3));
        assert_eq!(parse_number("+.5", DecimalMark::Point), Ok(0.5));
        assert_eq!(parse_number("5.", DecimalMark::Point), Ok(5.0));
        assert!(parse_number("1.234,5", DecimalMark::Comma).is_err());
        assert!(parse_number("1,234.5", DecimalMark::Point).is_err());
        assert!(parse_number("1,234", DecimalMark::Point).is_err());
        assert!(parse_number("1.234", DecimalMark::Comma).is_err());
        assert!(parse_number("1 234", DecimalMark::Point).is_err());
        assert!(parse_number("1.2.3", DecimalMark::Point).is_err());
        assert!(parse_number("nan", DecimalMark::Point).is_err());
        assert!(parse_number("inf", DecimalMark::Point).is_err());
        assert!(parse_number("1e999", DecimalMark::Point).is_err());
        assert!(parse_number("1e", DecimalMark::Point).is_err());
        assert!(parse_number("-", DecimalMark::Point).is_err());
        assert!(parse_number(".", DecimalMark::Point).is_err());
        assert!(parse_number("0x10", DecimalMark::Point).is_err());
    }

    #[test]
    fn messages_show_at_most_fifteen_significant_digits() {
        assert_eq!(short_number(1e308), "1e308");
        assert_eq!(short_number(-2.5e-300), "-2.5e-300");
        assert_eq!(short_number(0.1 + 0.2), "0.3");
        assert_eq!(short_number(333.15), "333.15");
        assert_eq!(short_number(1.0 / 3.0), "0.333333333333333");
        assert_eq!(short_number(123456789012345678.0), "1.23456789012346e17");
        assert_eq!(short_number(0.000001234), "0.000001234");
        assert_eq!(short_number(42.0), "42");
        assert_eq!(short_number(0.0), "0");
    }
}
