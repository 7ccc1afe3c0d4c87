//! The `headroom` binary: parses arguments, runs the command, maps the outcome to an exit code.
//!
//! Exit codes: 0 success; 1 a failure while running; 2 a problem with the input or the command
//! line (bad flags, unreadable or malformed files, config mistakes) that the user can fix.

use clap::Parser;
use headroom::cli::{self, Cli, Command, UsageError};
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = Cli::parse();
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    let result = match &cli.command {
        Command::Analyze(args) => cli::analyze(args, &mut out),
        Command::Bench(args) => headroom::bench::run(args, &mut out),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) if is_broken_pipe(&e) => ExitCode::SUCCESS,
        Err(e) if e.downcast_ref::<UsageError>().is_some() => {
            eprintln!("error: {e:#}");
            ExitCode::from(2)
        }
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(1)
        }
    }
}

/// Output piped into a program that closed early (`| head`) is not an error.
fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
    })
}
