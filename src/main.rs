//! The `headroom` binary: parses arguments, runs the command, maps the outcome to an exit code.
//!
//! Exit codes: 0 success; 1 a failure while running; 2 a problem with the input, the
//! configuration or the command line (bad flags, unreadable or malformed files) that the user
//! can fix.

use clap::Parser;
use headroom::cli::{self, Cli};
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = Cli::parse();
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    match cli::dispatch(&cli.command, &mut out) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) if e.is_broken_pipe() => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(e.exit_code())
        }
    }
}
