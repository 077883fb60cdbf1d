//! The `turnbook` command: parse arguments, set up logging, call the library.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = turnbook::commands::Cli::parse();
    turnbook::commands::init_logging(cli.log_json, cli.command.is_service());
    turnbook::commands::run(cli)
}
