//! `headroom report`: resolves the command line into a store, a configuration and a period,
//! then prints the summary or writes it into a folder.

use super::{Format, Period, default_period, gather, render, write_files};
use crate::cli::{ReportArgs, UsageError};
use crate::config::Config;
use crate::store::Store;
use anyhow::Context;
use std::io::Write;
use std::time::Instant;

pub async fn run(args: &ReportArgs, out: &mut dyn Write) -> anyhow::Result<()> {
    let config = match &args.config {
        Some(path) => Some(Config::load(path).map_err(|e| UsageError(e.to_string()))?),
        None => None,
    };
    let db = match (&args.db, &args.config, &config) {
        (Some(db), _, _) => db.clone(),
        (None, Some(path), Some(c)) => c.store_path(path),
        _ => {
            return Err(
                UsageError("say where the store is: --db FILE or --config FILE".into()).into(),
            );
        }
    };
    let zone_name = args
        .time_zone
        .clone()
        .or_else(|| {
            config
                .as_ref()?
                .report
                .as_ref()
                .map(|r| r.time_zone.clone())
        })
        .unwrap_or_else(|| "UTC".into());
    let tz = crate::units::time_zone(&zone_name).map_err(|e| UsageError(e.to_string()))?;
    let mut formats: Vec<Format> = args
        .format
        .iter()
        .filter_map(|f| Format::parse(f))
        .collect();
    formats.dedup();
    if formats.is_empty() {
        formats.push(Format::Html);
    }
    if formats.len() > 1 && args.out.is_none() {
        return Err(UsageError("several formats need --out DIR (one file each)".into()).into());
    }
    if let Some(dir) = &args.out
        && !dir.is_dir()
    {
        return Err(UsageError(format!("the folder {} does not exist", dir.display())).into());
    }

    let store = Store::open_read_only(&db)
        .await
        .map_err(|e| UsageError(e.to_string()))?;
    let now = jiff::Timestamp::now();
    let period: Period = match (&args.week, &args.from, &args.to) {
        (Some(w), _, _) => Period::parse_week(w, &tz).map_err(|e| UsageError(e.to_string()))?,
        (None, Some(from), Some(to)) => {
            Period::range(from, to, &tz).map_err(|e| UsageError(e.to_string()))?
        }
        _ => default_period(&store, &tz, now).await?,
    };
    let started = Instant::now();
    let report = gather(&store, config.as_ref(), &period, now)
        .await
        .with_context(|| format!("cannot summarise {}", period.label))?;
    match &args.out {
        None => {
            let text = render(&report, formats[0])?;
            out.write_all(text.as_bytes())?;
        }
        Some(dir) => {
            let written = write_files(&report, &period, &formats, dir)?;
            let took = started.elapsed();
            for (path, text) in &written {
                writeln!(out, "{} ({} bytes)", path.display(), text.len())?;
            }
            writeln!(
                out,
                "{}: {} loop(s), {} setpoint change(s); generated in {:.0} ms",
                period.label,
                report.loops.len(),
                report.plant.changes,
                took.as_secs_f64() * 1000.0
            )?;
        }
    }
    store.close().await;
    Ok(())
}
