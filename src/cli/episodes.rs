//! `headroom episodes`: scored setpoint changes from the store.

use super::Failure;
use super::store::{StoreArgs, open_read_only, write_json};
use super::time::parse_time;
use crate::units::rfc3339;
use clap::Args;
use std::io::Write;

#[derive(Debug, Args)]
pub struct EpisodesArgs {
    #[command(flatten)]
    pub store: StoreArgs,
    /// Only this loop.
    #[arg(long = "loop", value_name = "TAG")]
    pub loop_tag: Option<String>,
    /// Only changes from this time on: RFC 3339, or an age such as 90m, 24h, 7d.
    #[arg(long, value_name = "TIME")]
    pub since: Option<String>,
}

pub async fn episodes(args: &EpisodesArgs, out: &mut dyn Write) -> Result<(), Failure> {
    let since = args
        .since
        .as_deref()
        .map(|s| parse_time("--since", s))
        .transpose()?;
    let store = open_read_only(&args.store).await?;
    let rows = store.episodes(args.loop_tag.as_deref(), since).await?;
    if args.store.json {
        // The same fields as `analyze --json` per episode, plus loop, absolute start and state.
        let list: Vec<serde_json::Value> = rows
            .iter()
            .map(|r| {
                let mut v = r.detail.clone();
                v["loop"] = r.loop_tag.clone().into();
                v["start_time"] = rfc3339(r.start_ms).into();
                v["final"] = r.is_final.into();
                v
            })
            .collect();
        return write_json(&list, out);
    }
    if rows.is_empty() {
        writeln!(out, "No scored setpoint changes match.")?;
        return Ok(());
    }
    writeln!(
        out,
        "{:<12} {:<24} {:>18} {:>9} {:>9} {:>9}  verdict",
        "loop", "start", "SP from → to", "settled", "overshoot", "fastest"
    )?;
    for r in rows {
        let d = &r.detail;
        let secs = |k: &str| {
            d[k].as_f64()
                .map_or("—".to_string(), |x| format!("{x:.0} s"))
        };
        writeln!(
            out,
            "{:<12} {:<24} {:>18} {:>9} {:>8.1}% {:>9}  {}{}",
            r.loop_tag,
            rfc3339(r.start_ms),
            format!("{} → {}", d["sp_from"], d["sp_to"]),
            secs("settling_time_s"),
            r.overshoot_pct,
            secs("min_settling_time_s"),
            r.verdict.as_str(),
            if r.is_final { "" } else { " (open)" }
        )?;
    }
    Ok(())
}
