//! The live part of the demo and its closing summary (completed after the watcher merge).
use std::path::{Path, PathBuf};

use crate::commands::CmdResult;
use crate::config::Config;

pub fn run(dir: &Path, cfg: &Config, batches: &[Vec<(PathBuf, Vec<u8>)>], icp: &str) -> Result<(), crate::commands::Failure> {
    for files in batches {
        for (rel, bytes) in files {
            std::fs::write(dir.join(rel), bytes)?;
        }
    }
    std::fs::write(dir.join("exports/icp/icp-report-live.tsv"), icp)?;
    let mut files = Vec::new();
    crate::pipeline::collect_files(&dir.join("exports"), &mut files)?;
    let mut ing = crate::pipeline::Ingestor::open(cfg.clone())?;
    ing.ingest_paths(&files, |_| {})?;
    Ok(())
}

pub fn finish(_dir: &Path, cfg: &Config) -> CmdResult {
    crate::analysis::lots(cfg, false)
}
