//! The rule that links each event of the audit trail to the one before it.
//!
//! Canonical encoding: the payload is serialised to JSON with fields in the payload types'
//! declaration order and numbers in their shortest round-trip form; the hash input is
//! `prev_hash \n seq \n at \n actor \n kind \n subject \n payload`.
//!
//! Two rules link events. The plain rule is SHA-256 of that input: anyone who can write
//! the database can recompute it. The keyed rule is HMAC-SHA-256 (RFC 2104) of the same
//! input under the chain key, which lives outside the database. A chain keyed after it
//! held plain events records the switch in a [`KEYED_KIND`] event, itself linked by the
//! plain rule; every later event is linked by the keyed rule.

use hmac::{KeyInit, Mac};
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

/// The kind of the event that records the switch from the plain to the keyed rule.
pub const KEYED_KIND: &str = "chain-keyed";

/// Bytes of a chain key.
pub const KEY_BYTES: usize = 32;

/// The secret of the keyed rule. It never shows itself in Debug output or logs.
#[derive(Clone, PartialEq, Eq)]
pub struct ChainKey([u8; KEY_BYTES]);

impl ChainKey {
    pub fn new(bytes: [u8; KEY_BYTES]) -> Self {
        ChainKey(bytes)
    }

    fn mac(&self) -> hmac::Hmac<Sha256> {
        // HMAC takes keys of any length (RFC 2104, section 2), so this cannot fail.
        match <hmac::Hmac<Sha256> as KeyInit>::new_from_slice(&self.0) {
            Ok(m) => m,
            Err(_) => unreachable!("HMAC accepts a key of any length"),
        }
    }
}

impl std::fmt::Debug for ChainKey {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("ChainKey(<redacted>)")
    }
}

/// The parts of an event that its link covers, in order.
fn link_input<'a>(
    prev_hash: &'a str,
    seq: &'a str,
    at: &'a str,
    actor: &'a str,
    kind: &'a str,
    subject: &'a str,
    payload: &'a str,
) -> [&'a str; 7] {
    [prev_hash, seq, at, actor, kind, subject, payload]
}

/// HMAC-SHA-256 of one event under `key`, hex: the keyed rule.
#[allow(clippy::too_many_arguments)]
pub fn keyed_event_hash(
    key: &ChainKey,
    prev_hash: &str,
    seq: i64,
    at: &str,
    actor: &str,
    kind: &str,
    subject: &str,
    payload: &str,
) -> String {
    let mut m = key.mac();
    let seq = seq.to_string();
    for part in link_input(prev_hash, &seq, at, actor, kind, subject, payload) {
        m.update(part.as_bytes());
        m.update(b"\n");
    }
    hex_lower(&m.finalize().into_bytes())
}

/// The link of an event: keyed when `key` is given, plain otherwise.
#[allow(clippy::too_many_arguments)]
pub fn link(
    key: Option<&ChainKey>,
    prev_hash: &str,
    seq: i64,
    at: &str,
    actor: &str,
    kind: &str,
    subject: &str,
    payload: &str,
) -> String {
    match key {
        Some(k) => keyed_event_hash(k, prev_hash, seq, at, actor, kind, subject, payload),
        None => event_hash(prev_hash, seq, at, actor, kind, subject, payload),
    }
}

/// A proof, stored with the switch to the keyed rule, that whoever switched held the key:
/// HMAC-SHA-256 under the key of the hash the keyed links continue from. Someone without
/// the key cannot forge a switch, and a different key does not reproduce it.
pub fn key_proof(key: &ChainKey, continues_from: &str) -> String {
    let mut m = key.mac();
    m.update(b"turnbook chain key\n");
    m.update(continues_from.as_bytes());
    hex_lower(&m.finalize().into_bytes())
}

/// HMAC-SHA-256 under the chain key of a record kept beside the chain (a verification's
/// result), so that a row written by someone without the key is told from a real one.
pub fn record_mac(key: &ChainKey, record: &str) -> String {
    let mut m = key.mac();
    m.update(b"turnbook record\n");
    m.update(record.as_bytes());
    hex_lower(&m.finalize().into_bytes())
}

/// A published head of the chain, `SEQ:HASH`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Head {
    pub seq: i64,
    pub hash: String,
}

impl std::fmt::Display for Head {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}:{}", self.seq, self.hash)
    }
}

impl std::str::FromStr for Head {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let (seq, hash) = s
            .trim()
            .split_once(':')
            .ok_or_else(|| format!("a head is SEQ:HASH, not {s:?}"))?;
        let seq: i64 = seq
            .parse()
            .ok()
            .filter(|n| *n >= 0)
            .ok_or_else(|| format!("a head's SEQ is an event number, not {seq:?}"))?;
        let hash = hash.to_ascii_lowercase();
        if hash.len() != 64 || !hash.bytes().all(|b| b.is_ascii_hexdigit()) {
            return Err(format!("a head's HASH is 64 hex digits, not {hash:?}"));
        }
        Ok(Head { seq, hash })
    }
}

/// SHA-256 of one event, hex: the plain rule.
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

/// The kind of a sign-off event; a sign-off covers every other event of its lot.
pub const SIGN_OFF_KIND: &str = "sign-off";

/// The fingerprint a sign-off records: the SHA-256 over the hashes of the events it covers
/// (every event concerning the lot except sign-offs), in order, each followed by a newline.
pub fn history_fingerprint<'a>(hashes: impl IntoIterator<Item = &'a str>) -> String {
    let mut sha = Sha256::new();
    for h in hashes {
        sha.update(h.as_bytes());
        sha.update(b"\n");
    }
    hex_lower(&sha.finalize())
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

    /// RFC 4231, test case 2: key "Jefe", data "what do ya want for nothing?".
    #[test]
    fn hmac_sha256_matches_rfc_4231_case_2() {
        let mut m = <hmac::Hmac<Sha256> as KeyInit>::new_from_slice(b"Jefe").unwrap();
        m.update(b"what do ya want for nothing?");
        assert_eq!(
            hex_lower(&m.finalize().into_bytes()),
            "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
        );
    }

    #[test]
    fn the_keyed_link_depends_on_the_key_and_differs_from_the_plain_one() {
        let a = ChainKey::new([1; KEY_BYTES]);
        let b = ChainKey::new([2; KEY_BYTES]);
        let args = (
            GENESIS,
            1,
            "2026-01-01T00:00:00.000Z",
            "ann",
            "note",
            "L1",
            "{}",
        );
        let plain = event_hash(args.0, args.1, args.2, args.3, args.4, args.5, args.6);
        let ka = link(
            Some(&a),
            args.0,
            args.1,
            args.2,
            args.3,
            args.4,
            args.5,
            args.6,
        );
        let kb = link(
            Some(&b),
            args.0,
            args.1,
            args.2,
            args.3,
            args.4,
            args.5,
            args.6,
        );
        assert_ne!(ka, plain);
        assert_ne!(ka, kb);
        assert_eq!(ka.len(), 64);
        assert_eq!(
            link(None, args.0, args.1, args.2, args.3, args.4, args.5, args.6),
            plain
        );
        assert_ne!(key_proof(&a, GENESIS), key_proof(&b, GENESIS));
        assert_eq!(format!("{a:?}"), "ChainKey(<redacted>)");
    }

    #[test]
    fn the_switch_event_has_the_keyed_kind() {
        let p = Payload::ChainKeyed {
            rule: String::new(),
            key_proof: String::new(),
        };
        assert_eq!(p.kind(), KEYED_KIND);
    }

    #[test]
    fn a_head_reads_as_seq_colon_hash() {
        let h: Head = format!("12:{}", "AB".repeat(32)).parse().unwrap();
        assert_eq!((h.seq, h.hash.as_str()), (12, "ab".repeat(32).as_str()));
        assert_eq!(h.to_string(), format!("12:{}", "ab".repeat(32)));
        assert!("12".parse::<Head>().is_err());
        assert!("x:00".parse::<Head>().is_err());
        assert!(format!("-1:{}", "0".repeat(64)).parse::<Head>().is_err());
        assert!(format!("3:{}", "g".repeat(64)).parse::<Head>().is_err());
    }
}
