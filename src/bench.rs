//! `headroom bench`: measures this machine. Filled in below.
use clap::Args;

#[derive(Debug, Args)]
pub struct BenchArgs {}

pub fn run(_args: &BenchArgs, _out: &mut dyn std::io::Write) -> anyhow::Result<()> {
    anyhow::bail!("not yet")
}
