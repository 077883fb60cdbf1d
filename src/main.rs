//! The `turnbook` command: parse arguments, set up logging, call the library.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    restore_default_sigpipe();
    turnbook::store::configure_library();
    let cli = turnbook::cli::Cli::parse();
    turnbook::cli::init_logging(cli.log_json, cli.command.is_service());
    turnbook::cli::run(cli)
}

/// Rust ignores SIGPIPE, so printing into a closed pipe (`turnbook lots | head`) would
/// panic; restore the default so turnbook ends quietly like other command-line tools.
fn restore_default_sigpipe() {
    #[cfg(unix)]
    // SAFETY: called first thing in main, before any thread exists; setting a signal's
    // disposition to its default has no other effect on the process.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
}
