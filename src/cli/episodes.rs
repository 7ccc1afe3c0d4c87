//! `headroom episodes`: scored setpoint changes from the store.

use super::Failure;
use super::store::{StoreArgs, open_read_only, write_json};
use super::time::parse_time;
use crate::report::evidence::change_words;
use crate::summary_format::{PRODUCT_VERSION, SCHEMA_VERSION};
use crate::units::{human_duration, quantity, rfc3339};
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
    /// Only changes that started before this time (not included): RFC 3339, or an age.
    #[arg(long, value_name = "TIME")]
    pub until: Option<String>,
}

pub async fn episodes(args: &EpisodesArgs, out: &mut dyn Write) -> Result<(), Failure> {
    let time = |flag, given: &Option<String>| given.as_deref().map(|s| parse_time(flag, s));
    let since = time("--since", &args.since).transpose()?;
    let until = time("--until", &args.until).transpose()?;
    let facts = super::store::loop_facts(&args.store)?;
    let store = open_read_only(&args.store).await?;
    let mut rows = store.episodes(args.loop_tag.as_deref(), since).await?;
    rows.retain(|r| until.is_none_or(|u| r.start_ms < u));
    if args.store.json {
        // The same fields as `analyze --json` per episode, plus loop, absolute start, state, and
        // what every JSON document carries: the schema and product versions and the hash of the
        // loop's settings in the configuration given (`null` without one; the store does not
        // record the settings an episode was scored with).
        let list: Vec<serde_json::Value> = rows
            .iter()
            .map(|r| {
                let mut v = r.detail.clone();
                v["loop"] = r.loop_tag.clone().into();
                v["start_time"] = rfc3339(r.start_ms).into();
                v["final"] = r.is_final.into();
                v["schema_version"] = SCHEMA_VERSION.into();
                v["version"] = PRODUCT_VERSION.into();
                v["settings_hash"] = facts
                    .get(&r.loop_tag)
                    .and_then(|f| f.settings_hash.clone())
                    .into();
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
        "{:<12} {:<24} {:>20} {:>10} {:>9} {:>10}  verdict",
        "loop", "start", "SP from → to", "settled", "overshoot", "fastest"
    )?;
    for r in rows {
        let d = &r.detail;
        let duration = |k: &str| d[k].as_f64().map_or("—".to_string(), human_duration);
        let unit = facts.get(&r.loop_tag).map_or("", |f| f.pv_unit.as_str());
        let change = match (d["sp_from"].as_f64(), d["sp_to"].as_f64()) {
            (Some(a), Some(b)) => change_words(a, b, unit),
            _ => "—".to_string(),
        };
        writeln!(
            out,
            "{:<12} {:<24} {:>20} {:>10} {:>9} {:>10}  {}{}",
            r.loop_tag,
            rfc3339(r.start_ms),
            change,
            duration("settling_time_s"),
            quantity(r.overshoot_pct, "%"),
            duration("min_settling_time_s"),
            r.verdict.label(),
            if r.is_final { "" } else { " (open)" }
        )?;
    }
    Ok(())
}
