//! The `turnbook` command: parse arguments, set up logging, call the library.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    restore_default_sigpipe();
    restrict_umask();
    fixed_map_threshold();
    turnbook::store::configure_library();
    let cli = turnbook::cli::Cli::parse();
    turnbook::cli::init_logging(cli.log_json, cli.command.is_service());
    turnbook::cli::run(cli)
}

/// Files and folders this process creates are for its user and group only (0640, 0750),
/// whatever umask it was started with: a umask of 0027, set before anything is created.
/// The umask rather than a mode at every creation because SQLite, reports and other code
/// create files too; `turnbook::modes` sets the mode explicitly where a copy or the
/// library's use without this binary would otherwise decide it.
fn restrict_umask() {
    #[cfg(unix)]
    // SAFETY: called first thing in main, before any thread exists; umask only changes
    // the mode of files created later.
    unsafe {
        libc::umask(turnbook::modes::UMASK as libc::mode_t);
    }
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

/// Allocations of 1 MiB or more are mapped and unmapped on their own (glibc's default,
/// fixed): left dynamic, the threshold rises after the first large buffer is freed and
/// later ones stay in the heap, so a process idles at its peak (`mallopt(3)`, M_MMAP_THRESHOLD).
fn fixed_map_threshold() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: called first thing in main, before any thread exists; mallopt only tunes
    // the allocator's policy for later allocations.
    unsafe {
        libc::mallopt(libc::M_MMAP_THRESHOLD, 1 << 20);
    }
}
