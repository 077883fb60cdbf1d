//! Numbers as people read them in tables, messages and reports.

/// `v` with `digits` decimals, or `missing` when there is no finite value.
pub fn fixed_or(v: Option<f64>, digits: usize, missing: &str) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.digits$}"),
        _ => missing.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decimals_or_the_missing_mark() {
        assert_eq!(fixed_or(Some(1.23456), 3, "-"), "1.235");
        assert_eq!(fixed_or(None, 3, "-"), "-");
        assert_eq!(fixed_or(Some(f64::NAN), 2, "n/a"), "n/a");
        assert_eq!(fixed_or(Some(f64::INFINITY), 2, "n/a"), "n/a");
    }
}
