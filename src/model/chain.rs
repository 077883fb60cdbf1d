//! The rule that links each event of the audit trail to the one before it.
//!
//! Canonical encoding: the payload is serialised to JSON with fields in the payload types'
//! declaration order and numbers in their shortest round-trip form; the hash input is
//! `prev_hash \n seq \n at \n actor \n kind \n subject \n payload`.

use sha2::{Digest, Sha256};

use super::event::Payload;

/// The `prev_hash` of the first event.
pub const GENESIS: &str = "0000000000000000000000000000000000000000000000000000000000000000";

/// Canonical JSON of a payload: the payload types' fields in declaration order, numbers in
/// their shortest round-trip form. Deterministic for a given build; `verify` hashes the
/// stored text itself, so it never depends on re-encoding.
pub fn canonical(payload: &Payload) -> Result<String, serde_json::Error> {
    serde_json::to_string(payload)
}

/// SHA-256 of one event, hex.
pub fn event_hash(
    prev_hash: &str,
    seq: i64,
    at: &str,
    actor: &str,
    kind: &str,
    subject: &str,
    payload: &str,
) -> String {
    let mut h = Sha256::new();
    for part in [
        prev_hash,
        &seq.to_string(),
        at,
        actor,
        kind,
        subject,
        payload,
    ] {
        h.update(part.as_bytes());
        h.update(b"\n");
    }
    hex_lower(&h.finalize())
}

/// Lower-case hex of bytes, as `hex::encode` writes it, byte by byte rather than through
/// an iterator of chars (a backfill writes two of these per file).
pub fn hex_lower(bytes: &[u8]) -> String {
    const DIGITS: &[u8; 16] = b"0123456789abcdef";
    let mut s = String::with_capacity(bytes.len() * 2);
    for b in bytes {
        s.push(char::from(DIGITS[usize::from(b >> 4)]));
        s.push(char::from(DIGITS[usize::from(b & 15)]));
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hex_lower_writes_what_the_hex_crate_writes() {
        let all: Vec<u8> = (0..=255).collect();
        assert_eq!(hex_lower(&all), hex::encode(&all));
        assert_eq!(hex_lower(&[]), "");
    }
}
