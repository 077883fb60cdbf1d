//! Turning an export's bytes into text, refusing what is not text.
//!
//! Invalid sequences are an error with their position, never replaced with U+FFFD: a
//! replaced digit would be a silently wrong number in a batch record.

use serde::Deserialize;

use super::record::ParseError;

/// Character encoding of an export file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
pub enum Encoding {
    /// UTF-8; a leading byte-order mark is accepted and dropped.
    #[serde(rename = "utf-8")]
    Utf8,
    /// UTF-16 little endian; a leading `FF FE` mark is dropped.
    #[serde(rename = "utf-16le")]
    Utf16Le,
    /// UTF-16 big endian; a leading `FE FF` mark is dropped.
    #[serde(rename = "utf-16be")]
    Utf16Be,
    /// Sniff the byte-order mark: UTF-8, UTF-16 LE or BE; no mark means UTF-8.
    /// UTF-16 without a mark is *not* detected: name it in the profile.
    #[default]
    #[serde(rename = "auto")]
    Auto,
}

const BOM_UTF8: &[u8] = &[0xEF, 0xBB, 0xBF];
const BOM_LE: &[u8] = &[0xFF, 0xFE];
const BOM_BE: &[u8] = &[0xFE, 0xFF];

/// Decode `bytes` to text. Errors name the 1-based line, the 1-based character column
/// and the byte offset (in `found`) of the first bad sequence or NUL character.
pub fn decode(bytes: &[u8], encoding: Encoding) -> Result<String, ParseError> {
    let encoding = match encoding {
        Encoding::Auto => {
            if bytes.starts_with(BOM_LE) {
                Encoding::Utf16Le
            } else if bytes.starts_with(BOM_BE) {
                Encoding::Utf16Be
            } else {
                Encoding::Utf8
            }
        }
        e => e,
    };
    let (text, bom_len) = match encoding {
        Encoding::Utf16Le => decode_utf16(bytes, encoding_rs::UTF_16LE, BOM_LE, BOM_BE)?,
        Encoding::Utf16Be => decode_utf16(bytes, encoding_rs::UTF_16BE, BOM_BE, BOM_LE)?,
        Encoding::Utf8 | Encoding::Auto => decode_utf8(bytes)?,
    };
    check_nul(&text, bom_len, encoding)?;
    check_stray_bom(&text)?;
    Ok(text)
}

/// A byte-order mark belongs at the very start of a file only (where it was dropped
/// above). Anywhere else it is an invisible character that would become part of a value:
/// a batch id with one in front is, to the eye, the same id, but a second batch.
fn check_stray_bom(text: &str) -> Result<(), ParseError> {
    let Some(at) = text.find('\u{FEFF}') else {
        return Ok(());
    };
    let (line, column) = position_after(&text[..at]);
    Err(ParseError {
        line: Some(line),
        column: Some(column),
        field: None,
        expected: "a byte-order mark (U+FEFF) only at the very start of the file".into(),
        found: format!(
            "a byte-order mark at line {line}, column {column} (an invisible character that \
             would become part of a value; were two exports joined into one?)"
        ),
        sheet: None,
    })
}

fn decode_utf8(bytes: &[u8]) -> Result<(String, usize), ParseError> {
    let bom = if bytes.starts_with(BOM_UTF8) { 3 } else { 0 };
    let body = &bytes[bom..];
    match std::str::from_utf8(body) {
        Ok(s) => Ok((s.to_owned(), bom)),
        Err(e) => {
            let good = e.valid_up_to();
            // The prefix up to `good` is valid UTF-8 by the error's contract.
            let prefix = std::str::from_utf8(&body[..good]).unwrap_or("");
            let bad_len = e.error_len().unwrap_or(body.len() - good);
            let bad: Vec<String> = body[good..good + bad_len.min(4)]
                .iter()
                .map(|b| format!("{b:02X}"))
                .collect();
            let (line, column) = position_after(prefix);
            Err(ParseError {
                line: Some(line),
                column: Some(column),
                field: None,
                expected: "UTF-8 text".into(),
                found: format!(
                    "the invalid byte sequence {} at byte offset {}",
                    bad.join(" "),
                    bom + good
                ),
                sheet: None,
            })
        }
    }
}

fn decode_utf16(
    bytes: &[u8],
    enc: &'static encoding_rs::Encoding,
    own_bom: &[u8],
    other_bom: &[u8],
) -> Result<(String, usize), ParseError> {
    let name = enc.name();
    if bytes.starts_with(other_bom) {
        return Err(ParseError {
            line: Some(1),
            column: Some(1),
            field: None,
            expected: format!("{name} text"),
            found: "a byte-order mark of the other byte order at byte offset 0 (set encoding = \"auto\" or the other UTF-16 variant)".into(),
            sheet: None,
        });
    }
    let bom = if bytes.starts_with(own_bom) { 2 } else { 0 };
    let body = &bytes[bom..];
    let mut decoder = enc.new_decoder_without_bom_handling();
    let cap = decoder
        .max_utf8_buffer_length_without_replacement(body.len())
        .unwrap_or(body.len().saturating_mul(2));
    let mut out = String::with_capacity(cap);
    let (result, read) = decoder.decode_to_string_without_replacement(body, &mut out, true);
    match result {
        encoding_rs::DecoderResult::InputEmpty => Ok((out, bom)),
        encoding_rs::DecoderResult::Malformed(bad, extra) => {
            let start = read.saturating_sub(bad as usize + extra as usize);
            let (line, column) = position_after(&out);
            let shown: Vec<String> = body[start..(start + bad as usize).min(body.len())]
                .iter()
                .map(|b| format!("{b:02X}"))
                .collect();
            Err(ParseError {
                line: Some(line),
                column: Some(column),
                field: None,
                expected: format!("{name} text"),
                found: format!(
                    "the invalid sequence {} at byte offset {} (an unpaired surrogate or an odd byte count)",
                    shown.join(" "),
                    bom + start
                ),
                sheet: None,
            })
        }
        // The buffer was sized by the decoder's own worst case; treat a shortfall as an
        // error rather than loop.
        encoding_rs::DecoderResult::OutputFull => Err(ParseError {
            line: None,
            column: None,
            field: None,
            expected: format!("{name} text"),
            found: "more text than the decoder's buffer estimate".into(),
            sheet: None,
        }),
    }
}

/// Line (1-based) and character column (1-based) of the character after `prefix`.
fn position_after(prefix: &str) -> (u64, u32) {
    let line = prefix.bytes().filter(|&b| b == b'\n').count() as u64 + 1;
    let last = prefix.rfind('\n').map(|i| i + 1).unwrap_or(0);
    let col = prefix[last..].chars().count() as u64 + 1;
    (line, u32::try_from(col).unwrap_or(u32::MAX))
}

/// A NUL is never part of a text export: it marks a binary file or a wrong encoding
/// (UTF-16 read as UTF-8, for instance).
fn check_nul(text: &str, bom: usize, encoding: Encoding) -> Result<(), ParseError> {
    let Some(at) = text.find('\0') else {
        return Ok(());
    };
    let (line, column) = position_after(&text[..at]);
    let offset = match encoding {
        Encoding::Utf16Le | Encoding::Utf16Be => bom + text[..at].encode_utf16().count() * 2,
        _ => bom + at,
    };
    let hint = if matches!(encoding, Encoding::Utf8 | Encoding::Auto) {
        " (is the file UTF-16 without a byte-order mark? set encoding = \"utf-16le\")"
    } else {
        ""
    };
    Err(ParseError {
        line: Some(line),
        column: Some(column),
        field: None,
        expected: "text without NUL characters".into(),
        found: format!("a NUL character at byte offset {offset}{hint}"),
        sheet: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn utf16le(s: &str, bom: bool) -> Vec<u8> {
        let mut v = if bom { BOM_LE.to_vec() } else { Vec::new() };
        for u in s.encode_utf16() {
            v.extend_from_slice(&u.to_le_bytes());
        }
        v
    }

    #[test]
    fn utf8_bom_is_dropped() {
        assert_eq!(decode(b"\xEF\xBB\xBFa;b", Encoding::Utf8).unwrap(), "a;b");
        assert_eq!(decode(b"\xEF\xBB\xBFa;b", Encoding::Auto).unwrap(), "a;b");
    }

    #[test]
    fn invalid_utf8_is_located() {
        let e = decode(b"ab\ncd\xFFe", Encoding::Utf8).unwrap_err();
        assert_eq!((e.line, e.column), (Some(2), Some(3)));
        assert!(e.found.contains("FF at byte offset 5"), "{}", e.found);
    }

    #[test]
    fn nul_in_utf8_is_refused() {
        let e = decode(b"x\n\nab\0", Encoding::Auto).unwrap_err();
        assert_eq!((e.line, e.column), (Some(3), Some(3)));
        assert!(e.found.contains("byte offset 5"), "{}", e.found);
    }

    #[test]
    fn utf16_both_orders_with_and_without_bom() {
        let text = "Charge;Umsatz\nB-1;12,5 °C\n";
        assert_eq!(decode(&utf16le(text, true), Encoding::Auto).unwrap(), text);
        assert_eq!(
            decode(&utf16le(text, true), Encoding::Utf16Le).unwrap(),
            text
        );
        assert_eq!(
            decode(&utf16le(text, false), Encoding::Utf16Le).unwrap(),
            text
        );
        let mut be = BOM_BE.to_vec();
        for u in text.encode_utf16() {
            be.extend_from_slice(&u.to_be_bytes());
        }
        assert_eq!(decode(&be, Encoding::Auto).unwrap(), text);
        assert_eq!(decode(&be, Encoding::Utf16Be).unwrap(), text);
        assert!(decode(&be, Encoding::Utf16Le).is_err());
    }

    #[test]
    fn utf16_without_bom_under_auto_is_not_guessed() {
        // Read as UTF-8, the zero high bytes are NUL characters: refused with a hint.
        let e = decode(&utf16le("ab", false), Encoding::Auto).unwrap_err();
        assert!(e.found.contains("utf-16le"), "{}", e.found);
    }

    #[test]
    fn lone_surrogate_and_odd_length() {
        let mut v = utf16le("a\nb", true);
        v.extend_from_slice(&0xD800u16.to_le_bytes());
        v.extend_from_slice(&(b'c' as u16).to_le_bytes());
        let e = decode(&v, Encoding::Auto).unwrap_err();
        assert_eq!((e.line, e.column), (Some(2), Some(2)));
        assert!(e.found.contains("byte offset 8"), "{}", e.found);
        let mut odd = utf16le("ab", true);
        odd.push(b'x');
        let e = decode(&odd, Encoding::Utf16Le).unwrap_err();
        assert_eq!(e.line, Some(1));
        assert!(e.found.contains("byte offset 6"), "{}", e.found);
    }
}
