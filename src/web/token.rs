//! The bearer token of the web view, kept out of every log and message.

/// The bearer token; its `Debug` shows no part of it.
#[derive(Clone)]
pub struct Token(String);

impl Token {
    /// A token from its text (surrounding whitespace is not part of it).
    pub fn new(text: &str) -> Option<Token> {
        let t = text.trim();
        (!t.is_empty()).then(|| Token(t.to_string()))
    }

    /// Compare in time independent of where the first difference lies.
    pub fn matches(&self, given: &[u8]) -> bool {
        let want = self.0.as_bytes();
        let mut diff = want.len() ^ given.len();
        for (i, w) in want.iter().enumerate() {
            diff |= usize::from(w ^ given.get(i).copied().unwrap_or(0));
        }
        diff == 0
    }
}

impl std::fmt::Debug for Token {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Token(redacted)")
    }
}
