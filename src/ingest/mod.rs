//! Decoding export files and reading them through export profiles. Pure: bytes in, records out.
//!
//! - [`decode()`]: bytes to text (UTF-8, UTF-16 LE/BE, BOM sniffing), refusing invalid text.
//! - `profile`: the `[profiles.NAME]` configuration tables and their validation.
//! - `units`: the closed list of units and their conversion to canonical units.
//! - [`parse()`]: one file through one profile into [`ParsedFile`].
//! - [`ParseCache`]: [`parse_valid`] for a run of files, resolving each header row once.

mod cache;
mod dates;
mod decode;
mod delimited;
mod number;
mod parse;
mod profile;
mod record;
mod units;
mod value;

pub use cache::ParseCache;
pub use decode::{Encoding, decode};
pub use number::{parse_number, short_number};
pub use parse::{Chunked, parse, parse_text, parse_valid};
pub use profile::{ColumnSpec, DecimalMark, Delimiter, Profile, ProfileKind};
pub use record::*;
pub use units::{Unit, dimension_of};
pub use value::{ValueProblem, read_value, shown_unit};
