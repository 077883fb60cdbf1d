//! The demonstration plant (written after the parser merge).
use std::path::Path;

use crate::commands::CmdResult;

pub fn run(_dir: &Path, _live: bool) -> CmdResult {
    Ok(0)
}
