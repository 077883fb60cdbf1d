//! Decoding export files and reading them through export profiles. Pure: bytes in, records out.
//!
//! - [`decode()`]: bytes to text (UTF-8, UTF-16 LE/BE, BOM sniffing), refusing invalid text.
//! - `profile`: the `[profiles.NAME]` configuration tables and their validation.
//! - `units`: the closed list of units and their conversion to canonical units.
//! - [`parse()`]: one file through one profile into [`ParsedFile`] (text by `parse`, a
//!   workbook by `spreadsheet`).
//! - `spreadsheet`: an .xlsx or .ods worksheet read into the same rows as delimited text.
//! - [`ParseCache`]: [`parse_valid`] for a run of files, resolving each header row once.

mod cache;
mod dates;
mod decode;
mod delimited;
mod number;
mod parse;
mod profile;
mod record;
mod spreadsheet;
mod units;
mod value;

pub use cache::ParseCache;
pub use decode::{Encoding, decode};
pub use number::{parse_number, short_number};
pub use parse::{Chunked, parse_text};
pub use profile::{ColumnSpec, DecimalMark, Delimiter, Profile, ProfileKind};
pub use record::*;
pub use spreadsheet::{is_spreadsheet, parse, parse_valid};
pub use units::{Unit, dimension_of};
pub use value::{ValueProblem, read_value, shown_unit};
