//! Decoding export files and reading them through export profiles. Pure: bytes in, records out.

pub mod record;
pub use record::*;
