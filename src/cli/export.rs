//! `headroom export`: a loop's stored samples as a CSV file that `analyze` reads.

use super::Failure;
use super::store::{StoreArgs, open_read_only};
use super::time::parse_time;
use crate::units::{rfc3339, s_to_ms};
use anyhow::Context;
use clap::Args;
use std::io::Write;

#[derive(Debug, Args)]
pub struct ExportArgs {
    #[command(flatten)]
    pub store: StoreArgs,
    /// The loop to export.
    #[arg(long = "loop", value_name = "TAG")]
    pub loop_tag: String,
    /// From this time (RFC 3339 or an age such as 24h); default: the first sample.
    #[arg(long, value_name = "TIME")]
    pub from: Option<String>,
    /// Up to this time (RFC 3339); default: the last sample.
    #[arg(long, value_name = "TIME")]
    pub to: Option<String>,
}

/// Writes `time,sp,pv,op[,mode]` rows joined on the PV's time stamps exactly as the live tracker
/// joins them, so `analyze` on the export sees what the daemon saw.
pub async fn export(args: &ExportArgs, out: &mut dyn Write) -> Result<(), Failure> {
    let time = |flag, given: &Option<String>, default| match given {
        Some(s) => parse_time(flag, s),
        None => Ok(default),
    };
    let from = time("--from", &args.from, i64::MIN)?;
    let to = time("--to", &args.to, i64::MAX)?;
    let store = open_read_only(&args.store).await?;
    let (rows, with_mode) = store
        .loop_rows(&args.loop_tag, from, to)
        .await
        .with_context(|| format!("cannot read the samples of {}", args.loop_tag))?;
    writeln!(out, "time,sp,pv,op{}", if with_mode { ",mode" } else { "" })?;
    for r in rows {
        let t = rfc3339(s_to_ms(r.time_s));
        if with_mode {
            writeln!(out, "{t},{},{},{},{}", r.sp, r.pv, r.op, u8::from(r.auto))?;
        } else {
            writeln!(out, "{t},{},{},{}", r.sp, r.pv, r.op)?;
        }
    }
    Ok(())
}
