//! Escaping of text that came from users or files, and number formatting for display.
//!
//! Lot names, file names and correction reasons are typed by people or read from
//! instrument exports; a report must show them as text, never let them become markup.

/// Escape text for HTML element content and quoted attribute values.
///
/// Besides the five markup characters, control characters (other than tab, line feed and
/// carriage return) are shown as `\u{XXXX}`: they are invisible in a browser, and an
/// auditor should see that a name contains one.
pub fn escape_html(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + s.len() / 8);
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            '\t' | '\n' | '\r' => out.push(c),
            c if c.is_control() => out.push_str(&format!("\\u{{{:04X}}}", c as u32)),
            c => out.push(c),
        }
    }
    out
}

/// Text for a chart label. The SVG backend escapes markup characters itself
/// (plotters-svg `escape_and_push`, checked in `tests/report_escape.rs`), so only control
/// characters are made visible here; escaping twice would show `&amp;lt;` to the reader.
pub(crate) fn chart_text(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_control() {
                format!("\\u{{{:04X}}}", c as u32)
            } else {
                c.to_string()
            }
        })
        .collect()
}

/// Defuse a text cell for spreadsheets: a cell starting with `=`, `+`, `-`, `@` (or a tab
/// or carriage return, which some spreadsheets skip before such a character) would be
/// read as a formula, so it gets a leading apostrophe (common practice, OWASP "CSV
/// injection"). Only cells holding text from users or files are defused; numbers we
/// format ourselves are written as they are so that they stay numbers.
pub fn defuse_csv_cell(s: &str) -> String {
    match s.chars().next() {
        Some('=' | '+' | '-' | '@' | '\t' | '\r') => format!("'{s}"),
        _ => s.to_string(),
    }
}

/// A number with `sig` significant digits for display; non-finite values are shown as
/// words so that a NaN from upstream is visible rather than silently blank.
pub(crate) fn fmt_sig(v: f64, sig: usize) -> String {
    if v.is_nan() {
        return "not a number".to_string();
    }
    if v.is_infinite() {
        return if v > 0.0 {
            "∞".to_string()
        } else {
            "−∞".to_string()
        };
    }
    if v == 0.0 {
        return "0".to_string();
    }
    let sig = sig.clamp(1, 17);
    let mag = v.abs().log10().floor() as i32;
    if !(-4..=6).contains(&mag) {
        return format!("{:.*e}", sig - 1, v);
    }
    let decimals = (sig as i32 - 1 - mag).max(0) as usize;
    format!("{v:.decimals$}")
}

/// A confidence level (0.95) as a percentage without needless digits ("95", "99.5").
pub(crate) fn fmt_pct(level: f64) -> String {
    if !level.is_finite() {
        return fmt_sig(level, 3);
    }
    let s = format!("{:.2}", level * 100.0);
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// An optional number for a table cell; a missing value is an en dash.
pub(crate) fn fmt_opt(v: Option<f64>, sig: usize) -> String {
    v.map_or_else(|| "–".to_string(), |v| fmt_sig(v, sig))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup_and_controls() {
        assert_eq!(
            escape_html("<a href=\"x\">&'</a>"),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;&lt;/a&gt;"
        );
        assert_eq!(escape_html("a\u{1b}b"), "a\\u{001B}b");
        assert_eq!(escape_html("µg/g\n"), "µg/g\n");
    }

    #[test]
    fn defuses_formula_cells_only() {
        assert_eq!(defuse_csv_cell("=1+1"), "'=1+1");
        assert_eq!(defuse_csv_cell("@SUM(A1)"), "'@SUM(A1)");
        assert_eq!(defuse_csv_cell("-2"), "'-2");
        assert_eq!(defuse_csv_cell("+2"), "'+2");
        assert_eq!(defuse_csv_cell("B-1042"), "B-1042");
        assert_eq!(defuse_csv_cell(""), "");
    }

    #[test]
    fn formats_significant_digits() {
        assert_eq!(fmt_sig(0.876543, 3), "0.877");
        assert_eq!(fmt_sig(1234.56, 4), "1235");
        assert_eq!(fmt_sig(12.0, 3), "12.0");
        assert_eq!(fmt_sig(1.5e-7, 2), "1.5e-7");
        assert_eq!(fmt_sig(f64::NAN, 3), "not a number");
        assert_eq!(fmt_sig(0.0, 3), "0");
        assert_eq!(fmt_opt(None, 3), "–");
        assert_eq!(fmt_pct(0.95), "95");
        assert_eq!(fmt_pct(0.995), "99.5");
    }
}
