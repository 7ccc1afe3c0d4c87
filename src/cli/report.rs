//! `headroom report`: resolves the command line into a store, a configuration and a period,
//! then prints the summary or writes it into a folder.

use super::{Failure, Usage, names_parser};
use crate::config::Config;
use crate::report::{Format, Period, ReportError, default_period, gather, render, write_files};
use crate::store::Store;
use anyhow::Context;
use clap::Args;
use jiff::tz::TimeZone;
use std::io::Write;
use std::path::PathBuf;
use std::time::Instant;

#[derive(Debug, Args)]
pub struct ReportArgs {
    /// The configuration file: the loops' specs, OP ranges and descriptions, and the store path.
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
    /// The SQLite store file (default: the store path in --config).
    #[arg(long, value_name = "FILE")]
    pub db: Option<PathBuf>,
    /// The ISO 8601 week to summarise, e.g. 2026-W48. Default: the last complete week of the
    /// store's data (the week so far when the store is younger).
    #[arg(long, value_name = "WEEK", conflicts_with_all = ["from", "to"])]
    pub week: Option<String>,
    /// Start of a free period instead of a week: RFC 3339 or a date (midnight).
    #[arg(long, value_name = "TIME", requires = "to")]
    pub from: Option<String>,
    /// End of the free period (not included).
    #[arg(long, value_name = "TIME", requires = "from")]
    pub to: Option<String>,
    /// IANA time zone of the week boundaries, e.g. Europe/Berlin. Default: the config's
    /// [report] time_zone, else UTC.
    #[arg(long, value_name = "ZONE")]
    pub time_zone: Option<String>,
    /// html, md or json; several with commas (they need --out). Default: html.
    #[arg(long, value_delimiter = ',', value_parser = names_parser(Format::ALL.map(Format::as_str), Format::parse), value_name = "FORMAT")]
    pub format: Vec<Format>,
    /// Write `loop-health-<period>.<format>` files into this folder (made if missing) instead of
    /// printing.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
}

pub async fn report(args: &ReportArgs, out: &mut dyn Write) -> Result<(), Failure> {
    let config = match &args.config {
        Some(path) => Some(Config::load(path)?),
        None => None,
    };
    let db = match (&args.db, &args.config, &config) {
        (Some(db), _, _) => db.clone(),
        (None, Some(path), Some(c)) => c.store_path(path),
        _ => return Err(Usage::NoStore.into()),
    };
    let tz = time_zone(args, config.as_ref())?;
    let formats = formats(args)?;

    let store = Store::open_read_only(&db)
        .await
        .map_err(Failure::StoreOpen)?;
    let now = jiff::Timestamp::now();
    let period: Period = match (&args.week, &args.from, &args.to) {
        (Some(w), _, _) => Period::parse_week(w, &tz)?,
        (None, Some(from), Some(to)) => Period::range(from, to, &tz)?,
        _ => default_period(&store, &tz, now).await?,
    };
    let started = Instant::now();
    let report = gather(
        &store,
        config.as_ref(),
        args.config.as_deref(),
        &period,
        now,
    )
    .await
    .with_context(|| format!("cannot summarise {}", period.label))?;
    match &args.out {
        None => {
            let text = render(&report, formats[0]).map_err(ReportError::from)?;
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
                "{}: {}, {}; generated in {:.0} ms",
                period.label,
                crate::units::count(report.loops.len(), "loop", "loops"),
                crate::units::count(report.plant.changes, "setpoint change", "setpoint changes"),
                took.as_secs_f64() * 1000.0
            )?;
        }
    }
    store.close().await;
    Ok(())
}

/// The time zone of the week boundaries: `--time-zone`, else the config's, else UTC.
fn time_zone(args: &ReportArgs, config: Option<&Config>) -> Result<TimeZone, Failure> {
    let configured = config
        .and_then(|c| c.report.as_ref())
        .map(|r| r.time_zone.as_str());
    let name = args.time_zone.as_deref().or(configured).unwrap_or("UTC");
    Ok(crate::units::time_zone(name)?)
}

/// The formats asked for (HTML when none), and where they go: several need `--out`, and the
/// folder must exist.
fn formats(args: &ReportArgs) -> Result<Vec<Format>, Usage> {
    let mut formats: Vec<Format> = args.format.clone();
    formats.dedup();
    if formats.is_empty() {
        formats.push(Format::Html);
    }
    if formats.len() > 1 && args.out.is_none() {
        return Err(Usage::SeveralFormatsNeedOut);
    }
    // A missing folder is made when the files are written; a file in its place is a mistake.
    if let Some(dir) = &args.out
        && dir.exists()
        && !dir.is_dir()
    {
        return Err(Usage::NotAFolder(dir.clone()));
    }
    Ok(formats)
}
