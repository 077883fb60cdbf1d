//! Decoding export files and reading them through export profiles. Pure: bytes in, records out.

pub mod record;
pub use record::*;

// PLACEHOLDER until the parser lands (replaced at merge).
#[derive(Debug, Clone, serde::Deserialize)]
pub struct Profile {
    pub kind: String,
}
impl Profile {
    pub fn validate(&self) -> Result<(), String> {
        Ok(())
    }
}
pub fn parse(_bytes: &[u8], _p: &Profile) -> Result<ParsedFile, ParseError> {
    Err(ParseError { line: None, column: None, field: None, expected: "parser".into(), found: "placeholder".into() })
}
