//! The `headroom` binary: parses arguments, runs the command, maps the outcome to an exit code.
//!
//! Exit codes: 0 success; 1 a failure while running; 2 a problem with the input, the
//! configuration or the command line (bad flags, unreadable or malformed files) that the user
//! can fix.

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
        Command::CheckConfig(args) => cli::check_config(args, &mut out),
        Command::Run(args) => {
            init_logging(&args.log_format);
            runtime().and_then(|rt| rt.block_on(cli::run(args)))
        }
        Command::Demo(args) => init_demo_logging(&args.out).and_then(|()| {
            runtime().and_then(|rt| rt.block_on(headroom::demo::run(args, &mut out)))
        }),
        Command::Loops(args) => {
            runtime().and_then(|rt| rt.block_on(headroom::queries::loops(args, &mut out)))
        }
        Command::Episodes(args) => {
            runtime().and_then(|rt| rt.block_on(headroom::queries::episodes(args, &mut out)))
        }
        Command::Alerts(args) => {
            runtime().and_then(|rt| rt.block_on(headroom::queries::alerts(args, &mut out)))
        }
        Command::Export(args) => {
            runtime().and_then(|rt| rt.block_on(headroom::queries::export(args, &mut out)))
        }
        Command::Report(args) => {
            runtime().and_then(|rt| rt.block_on(headroom::report::command::run(args, &mut out)))
        }
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

fn runtime() -> anyhow::Result<tokio::runtime::Runtime> {
    Ok(tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?)
}

/// Logs to stderr, filtered by RUST_LOG (default `info`), as text or JSON lines.
fn init_logging(format: &str) {
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info"));
    use std::io::IsTerminal;
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_ansi(std::io::stderr().is_terminal())
        .with_writer(std::io::stderr);
    if format == "json" {
        builder.json().init();
    } else {
        builder.init();
    }
}

/// The demo draws a status line on the terminal, so its logs go to a file in its folder,
/// filtered by RUST_LOG (default `info`). The embedded broker logs benign events (a client's
/// probe, a closed connection) as errors, so it is silenced unless RUST_LOG names it.
fn init_demo_logging(dir: &std::path::Path) -> anyhow::Result<()> {
    use anyhow::Context;
    std::fs::create_dir_all(dir).with_context(|| format!("cannot create {}", dir.display()))?;
    let path = dir.join(headroom::demo::LOG_FILE);
    let file = std::fs::File::create(&path)
        .with_context(|| format!("cannot create the log file {}", path.display()))?;
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info,rumqttd=off"));
    tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_ansi(false)
        .with_writer(std::sync::Mutex::new(file))
        .init();
    Ok(())
}

/// Output piped into a program that closed early (`| head`) is not an error.
fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
    })
}
