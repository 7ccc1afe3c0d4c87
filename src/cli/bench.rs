//! `headroom bench`: the flags of the benchmark run.

use super::{Failure, names_parser};
use crate::bench::{BenchOptions, Part};
use clap::Args;
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct BenchArgs {
    /// Python interpreter with numpy, scipy and control for the side-by-side comparison
    /// (default: target/pyenv/bin/python if present, else python3).
    #[arg(long, value_name = "PATH")]
    pub python: Option<PathBuf>,
    /// Episodes for the per-episode comparison.
    #[arg(long, default_value_t = 200, value_parser = clap::value_parser!(u32).range(1..))]
    pub episodes: u32,
    /// Repetitions of each timing; the median is reported.
    #[arg(long, default_value_t = 5, value_parser = clap::value_parser!(u32).range(1..))]
    pub repeat: u32,
    /// Smaller ingest runs and no memory run (a minute instead of several).
    #[arg(long)]
    pub quick: bool,
    /// Only these parts (default: all).
    #[arg(long, value_delimiter = ',', value_parser = names_parser(Part::ALL.map(Part::as_str), Part::parse))]
    pub only: Vec<Part>,
}

pub fn bench(args: &BenchArgs, out: &mut dyn std::io::Write) -> Result<(), Failure> {
    let options = BenchOptions {
        python: args.python.clone(),
        episodes: args.episodes as usize,
        repeat: args.repeat as usize,
        quick: args.quick,
        only: args.only.clone(),
    };
    Ok(crate::bench::run(&options, out)?)
}
