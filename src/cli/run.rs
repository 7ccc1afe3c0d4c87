//! `headroom run`: the daemon, until Ctrl-C or SIGTERM.

use super::Failure;
use crate::config::Config;
use crate::daemon::Daemon;
use crate::daemon::shutdown::shutdown_signal;
use clap::{Args, ValueEnum};
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct RunArgs {
    /// The configuration file.
    #[arg(long, value_name = "FILE")]
    pub config: PathBuf,
    /// Log format: text for people, json for log collectors. Filter with RUST_LOG.
    #[arg(long, value_enum, default_value_t = LogFormat::Text)]
    pub log_format: LogFormat,
}

/// How the daemon writes its log lines.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum LogFormat {
    // Lines for people.
    Text,
    // One JSON object per line, for log collectors.
    Json,
}

pub fn run(args: &RunArgs) -> Result<(), Failure> {
    init_logging(args.log_format);
    super::block_on(async {
        let cfg = Config::load(&args.config)?;
        tracing::debug!(config = %args.config.display(), "configuration loaded");
        let daemon = Daemon::build(&cfg, &args.config).await?;
        Ok(daemon.run(shutdown_signal()).await?)
    })
}

/// Logs to stderr, filtered by RUST_LOG (default `info`), as text or JSON lines.
fn init_logging(format: LogFormat) {
    use std::io::IsTerminal;
    let builder = tracing_subscriber::fmt()
        .with_env_filter(super::log_filter("info"))
        .with_ansi(std::io::stderr().is_terminal())
        .with_writer(std::io::stderr);
    match format {
        LogFormat::Json => builder.json().init(),
        LogFormat::Text => builder.init(),
    }
}
