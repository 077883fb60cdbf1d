//! `turnbook export`, `turnbook completions` and `turnbook manpage`.

use std::io::Write;

use clap::CommandFactory;

use super::{Cli, CmdResult, ExportArgs, Failure};
use crate::config::Config;
use crate::notebook;

/// `turnbook export`: every cycle of the lots asked for, as CSV or JSON Lines.
pub fn export(cfg: &Config, a: &ExportArgs) -> CmdResult {
    let lines = notebook::export_lines(cfg, a.lot.as_deref(), a.site.as_deref())?;
    let out: Box<dyn Write> = match &a.out {
        Some(path) => Box::new(std::io::BufWriter::new(
            std::fs::File::create(path)
                .map_err(|e| Failure::rejected(format!("cannot create {}: {e}", path.display())))?,
        )),
        None => Box::new(std::io::stdout().lock()),
    };
    let written = match a.format.as_str() {
        "jsonl" => notebook::write_jsonl(&lines, out),
        _ => notebook::write_csv(&lines, out),
    };
    written.map_err(|e| Failure::rejected(e.to_string()))?;
    if let Some(path) = &a.out {
        eprintln!("{} cycle(s) written to {}", lines.len(), path.display());
    }
    Ok(0)
}

/// `turnbook completions SHELL`.
pub fn completions(shell: clap_complete::Shell) -> CmdResult {
    let mut cmd = Cli::command();
    clap_complete::generate(shell, &mut cmd, "turnbook", &mut std::io::stdout());
    Ok(0)
}

/// `turnbook manpage`: the roff page of the command and its subcommands.
pub fn manpage() -> CmdResult {
    let cmd = Cli::command();
    let mut out = Vec::new();
    clap_mangen::Man::new(cmd.clone()).render(&mut out)?;
    for sub in cmd.get_subcommands().filter(|s| !s.is_hide_set()) {
        let name = sub.get_name().to_string();
        // Each subcommand as a section of the one page, its options listed.
        let man = clap_mangen::Man::new(sub.clone());
        writeln!(out, ".SH \"TURNBOOK {}\"", name.to_uppercase())?;
        man.render_synopsis_section(&mut out)?;
        man.render_options_section(&mut out)?;
    }
    std::io::stdout().write_all(&out)?;
    Ok(0)
}
