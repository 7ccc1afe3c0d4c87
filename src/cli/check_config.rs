//! `headroom check-config`: validate a configuration file and describe what it would watch.

use super::{Failure, Usage};
use crate::config::Config;
use clap::Args;
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct CheckConfigArgs {
    /// The configuration file (or give it with --config).
    #[arg(value_name = "FILE", required_unless_present = "config")]
    pub file: Option<PathBuf>,
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
}

pub fn check_config(args: &CheckConfigArgs, out: &mut dyn std::io::Write) -> Result<(), Failure> {
    let path = args
        .file
        .as_ref()
        .or(args.config.as_ref())
        .ok_or(Usage::NoConfigFile)?;
    let cfg = Config::load(path)?;
    write!(out, "{}", cfg.describe(path))?;
    writeln!(out, "{}: valid", path.display())?;
    Ok(())
}
