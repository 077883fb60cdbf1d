//! Properties of the parser: it never panics on any bytes, and values written through any
//! profile are read back as the same canonical values.

use proptest::prelude::*;
use turnbook::ingest::{
    DecimalMark, Delimiter, Encoding, ParsedFile, Profile, Unit, dimension_of, parse,
};
use turnbook::model::Quantity;

const PLAIN_UTF8: &str = r#"
kind = "cycles"
encoding = "utf-8"
columns.batch_id = { header = "Batch" }
columns.cycle_no = { header = "Cycle" }
columns.started_at = { header = "Start" }
columns.conversion = { header = "Conv", unit = "%" }
columns.duration = { header = "t", unit = "min" }
"#;

const UTF16: &str = r#"
kind = "cycles"
encoding = "utf-16le"
delimiter = "tab"
columns.batch_id = { header = "Batch" }
columns.lot = { header = "Lot" }
columns.temperature = { header = "T", unit = "°C" }
"#;

const EUROPEAN: &str = r#"
kind = "cycles"
delimiter = ";"
decimal = ","
skip_lines = 1
datetime_format = "%d.%m.%Y %H:%M"
columns.batch_id = { header = "Charge" }
columns.started_at = { header = "Start" }
columns.substrate = { header = "Substrat", unit = "mmol" }
columns.yield = { header = "Ausbeute", unit = "fraction" }
"#;

const FROM_HEADER: &str = r#"
kind = "cycles"
encoding = "auto"
columns.batch_id = { header = "Batch" }
columns.product_mass = { header = "Product", unit = "from-header" }
columns.metal_in_product = { header = "Pd", unit = "from-header" }
"#;

const LOTS: &str = r#"
kind = "lots"
columns.lot = { header = "Lot" }
columns.catalyst = { header = "Catalyst" }
columns.metal = { header = "Metal" }
columns.loading = { header = "Loading", unit = "%" }
columns.charged_mass = { header = "Mass", unit = "g" }
columns.received = { header = "Received" }
columns.cost = { header = "Cost" }
"#;

fn profiles() -> Vec<(Profile, &'static str)> {
    [
        (PLAIN_UTF8, "Batch,Cycle,Start,Conv,t\n"),
        (UTF16, "Batch\tLot\tT\n"),
        (EUROPEAN, "Gerät 7\nCharge;Start;Substrat;Ausbeute\n"),
        (FROM_HEADER, "Batch,Product [g],Pd (ppm)\n"),
        (LOTS, "Lot,Catalyst,Metal,Loading,Mass,Received,Cost\n"),
    ]
    .into_iter()
    .map(|(t, h)| match Profile::from_toml(t) {
        Ok(p) => (p, h),
        Err(e) => panic!("test profile invalid: {e}"),
    })
    .collect()
}

fn utf16le(s: &str) -> Vec<u8> {
    let mut v = vec![0xFF, 0xFE];
    for u in s.encode_utf16() {
        v.extend_from_slice(&u.to_le_bytes());
    }
    v
}

/// Text made of the characters that steer the parser: delimiters, quotes, marks, digits.
fn steering_text() -> impl Strategy<Value = String> {
    proptest::collection::vec(
        prop_oneof![
            Just(","),
            Just(";"),
            Just("\t"),
            Just("\""),
            Just("\n"),
            Just("\r\n"),
            Just("."),
            Just("-"),
            Just("e"),
            Just("1"),
            Just("0"),
            Just("9"),
            Just("B"),
            Just(" "),
            Just("Pd"),
            Just("%"),
            Just("[g]"),
            Just("\0"),
            Just("é"),
            Just("\u{1b}"),
            Just("01.02.2026 10:00"),
            Just("2026-02-01"),
        ],
        0..120,
    )
    .prop_map(|v| v.concat())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 512, ..ProptestConfig::default() })]

    #[test]
    fn no_panic_on_arbitrary_bytes(bytes in proptest::collection::vec(any::<u8>(), 0..600)) {
        for (p, _) in profiles() {
            let _ = parse(&bytes, &p);
        }
    }

    #[test]
    fn no_panic_on_structured_garbage(body in steering_text()) {
        for (p, header) in profiles() {
            let text = format!("{header}{body}");
            let _ = parse(text.as_bytes(), &p);
            let _ = parse(&utf16le(&text), &p);
            // Truncate the UTF-16 form to an odd length as a half-written file would be.
            let mut cut = utf16le(&text);
            cut.pop();
            let _ = parse(&cut, &p);
        }
    }
}

/// One randomly chosen way of writing a cycle export.
#[derive(Debug, Clone)]
struct Layout {
    delimiter: Delimiter,
    decimal: DecimalMark,
    /// 0 UTF-8, 1 UTF-8 with BOM, 2 UTF-16LE with BOM, 3 UTF-16BE with BOM
    encoding: u8,
    skip_lines: usize,
    units: Vec<(Quantity, Unit, bool)>,
    exponent: bool,
    upper_headers: bool,
}

fn layout() -> impl Strategy<Value = Layout> {
    let units = proptest::collection::vec((0usize..3, any::<bool>()), Quantity::ALL.len());
    (
        0u8..3,
        any::<bool>(),
        0u8..4,
        0usize..3,
        units,
        any::<bool>(),
        any::<bool>(),
    )
        .prop_map(
            |(d, comma, encoding, skip_lines, picks, exponent, upper_headers)| {
                let delimiter =
                    [Delimiter::Comma, Delimiter::Semicolon, Delimiter::Tab][d as usize];
                let decimal = if comma && delimiter != Delimiter::Comma {
                    DecimalMark::Comma
                } else {
                    DecimalMark::Point
                };
                let units = Quantity::ALL
                    .iter()
                    .zip(picks)
                    .map(|(q, (i, from_header))| {
                        let choices = dimension_of(*q).units();
                        (*q, choices[i % choices.len()], from_header)
                    })
                    .collect();
                Layout {
                    delimiter,
                    decimal,
                    encoding,
                    skip_lines,
                    units,
                    exponent,
                    upper_headers,
                }
            },
        )
}

/// A canonical value inside the accepted range of each quantity.
fn canonical(q: Quantity, u: f64) -> f64 {
    match q {
        Quantity::Conversion | Quantity::Selectivity | Quantity::Yield => u,
        Quantity::Temperature => 150.5 + 649.0 * u,
        Quantity::MetalInProduct => 1e4 * u,
        Quantity::Duration => 1.0 + 1e6 * u,
        _ => 1e-6 + 1e4 * u,
    }
}

fn rows() -> impl Strategy<Value = Vec<(String, Vec<Option<f64>>)>> {
    let values = proptest::collection::vec(
        proptest::option::weighted(0.8, 0.0f64..=1.0),
        Quantity::ALL.len(),
    );
    proptest::collection::vec(
        ("[A-Za-z0-9][A-Za-z0-9 ,;_äµ-]{0,10}[A-Za-z0-9]", values),
        1..8,
    )
}

fn profile_toml(l: &Layout) -> String {
    let delimiter = match l.delimiter {
        Delimiter::Comma => ",",
        Delimiter::Semicolon => ";",
        Delimiter::Tab => "tab",
    };
    let decimal = match l.decimal {
        DecimalMark::Point => ".",
        DecimalMark::Comma => ",",
    };
    let mut t = format!(
        "kind = \"cycles\"\ndelimiter = \"{delimiter}\"\ndecimal = \"{decimal}\"\nencoding = \"auto\"\nskip_lines = {}\ncolumns.batch_id = {{ header = \"Batch id\" }}\n",
        l.skip_lines
    );
    for (q, u, from_header) in &l.units {
        let unit = if *from_header {
            "from-header"
        } else {
            u.symbol()
        };
        t.push_str(&format!(
            "columns.{} = {{ header = \"{} value\", unit = \"{unit}\" }}\n",
            q.key(),
            q.key()
        ));
    }
    t
}

fn write_file(l: &Layout, data: &[(String, Vec<Option<f64>>)]) -> Vec<u8> {
    let mut w = csv::WriterBuilder::new()
        .delimiter(l.delimiter.byte())
        .from_writer(Vec::new());
    let mut header = vec!["Batch id".to_string()];
    for (q, u, from_header) in &l.units {
        let mut h = format!("{} value", q.key());
        if l.upper_headers {
            h = h.to_uppercase();
        }
        if *from_header {
            h = format!("{h} [{}]", u.symbol());
        }
        header.push(h);
    }
    // Columns written in reverse order: the header decides, not the profile's order.
    header.reverse();
    let _ = w.write_record(&header);
    for (batch, vals) in data {
        let mut rec = vec![batch.clone()];
        for ((q, u, _), v) in l.units.iter().zip(vals) {
            rec.push(match v {
                None => String::new(),
                Some(x) => {
                    let written = u.from_canonical(canonical(*q, *x));
                    let s = if l.exponent {
                        format!("{written:e}")
                    } else {
                        format!("{written}")
                    };
                    if l.decimal == DecimalMark::Comma {
                        s.replace('.', ",")
                    } else {
                        s
                    }
                }
            });
        }
        rec.reverse();
        let _ = w.write_record(&rec);
    }
    let body = String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default();
    let mut text = String::new();
    for i in 0..l.skip_lines {
        text.push_str(&format!("instrument banner {i}; \"unbalanced\n"));
    }
    text.push_str(&body);
    match l.encoding {
        0 => text.into_bytes(),
        1 => [&[0xEF, 0xBB, 0xBF][..], text.as_bytes()].concat(),
        2 => utf16le(&text),
        _ => {
            let mut v = vec![0xFE, 0xFF];
            for u in text.encode_utf16() {
                v.extend_from_slice(&u.to_be_bytes());
            }
            v
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn written_values_read_back(l in layout(), data in rows()) {
        let toml = profile_toml(&l);
        let profile = Profile::from_toml(&toml).map_err(TestCaseError::fail)?;
        prop_assert_eq!(profile.encoding, Encoding::Auto);
        let bytes = write_file(&l, &data);
        let parsed = parse(&bytes, &profile);
        let rows = match parsed {
            Ok(ParsedFile::Cycles(rows)) => rows,
            other => return Err(TestCaseError::fail(format!("{other:?}\n{toml}"))),
        };
        prop_assert_eq!(rows.len(), data.len());
        for (row, (batch, vals)) in rows.iter().zip(&data) {
            prop_assert_eq!(&row.batch_id, batch);
            let want: Vec<(Quantity, f64)> = l
                .units
                .iter()
                .zip(vals)
                .filter_map(|((q, _, _), v)| v.map(|x| (*q, canonical(*q, x))))
                .collect();
            prop_assert_eq!(row.values.len(), want.len());
            for (got, (q, v)) in row.values.iter().zip(want) {
                prop_assert_eq!(got.quantity, q);
                let tol = 1e-12 * v.abs().max(f64::MIN_POSITIVE);
                prop_assert!((got.value - v).abs() <= tol, "{:?}: {} vs {}", q, got.value, v);
            }
        }
    }
}
