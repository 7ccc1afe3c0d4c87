//! The command line: clap definitions (their `///` lines are the help text) and the commands that
//! glue the library together. Errors here carry context for people (anyhow); `main` maps them to
//! exit codes.

use crate::analysis::{self, AutoValues, LoopSetup, Setting, Spec};
use crate::config::Config;
use crate::csvload::{self, CsvColumns, CsvOptions};
use crate::render;
use anyhow::Context;
use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

/// headroom: tells whether a control loop that misses its spec needs retuning, or whether its
/// actuator makes the spec impossible.
#[derive(Debug, Parser)]
#[command(name = "headroom", version, about, long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Analyse a CSV export of one loop offline: score every setpoint change, identify the
    /// process, and tell tuning-limited from actuator-limited.
    Analyze(Box<AnalyzeArgs>),
    /// Measure this machine: analysis speed beside the reference libraries, in one run.
    Bench(crate::bench::BenchArgs),
    /// Run the daemon: collect SP, PV and OP, store them, score every setpoint change live, and
    /// raise alerts. Stops gracefully on Ctrl-C or SIGTERM.
    Run(RunArgs),
    /// The showcase: a simulated pilot plant, an embedded MQTT broker and the daemon, in
    /// accelerated time; ends with a summary per loop. Nothing needs to be installed.
    Demo(crate::demo::DemoArgs),
    /// Validate a configuration file and print what it would watch.
    CheckConfig(CheckConfigArgs),
    /// Each loop's status: last samples, last episode, model, open alerts.
    Loops(StoreArgs),
    /// Scored setpoint changes from the store.
    Episodes(EpisodesArgs),
    /// Alerts from the store; acknowledge one with --ack.
    Alerts(AlertsArgs),
    /// Write a loop's stored samples as a CSV export that `analyze` reads.
    Export(ExportArgs),
    /// The weekly loop-health summary of a period from the store: HTML, Markdown or JSON.
    Report(ReportArgs),
}

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
    #[arg(long, value_delimiter = ',', value_parser = ["html", "md", "json"], value_name = "FORMAT")]
    pub format: Vec<String>,
    /// Write `loop-health-<period>.<format>` files into this folder instead of printing.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct RunArgs {
    /// The configuration file.
    #[arg(long, value_name = "FILE")]
    pub config: PathBuf,
    /// Log format: text for people, json for log collectors. Filter with RUST_LOG.
    #[arg(long, default_value = "text", value_parser = ["text", "json"])]
    pub log_format: String,
}

#[derive(Debug, Args)]
pub struct CheckConfigArgs {
    /// The configuration file (or give it with --config).
    #[arg(value_name = "FILE", required_unless_present = "config")]
    pub file: Option<PathBuf>,
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
}

/// Where the store is: the config's store path, or a database file directly.
#[derive(Debug, Args)]
pub struct StoreArgs {
    /// Read the store path from this configuration file.
    #[arg(long, value_name = "FILE", conflicts_with = "db")]
    pub config: Option<PathBuf>,
    /// The SQLite store file.
    #[arg(long, value_name = "FILE")]
    pub db: Option<PathBuf>,
    /// Print JSON.
    #[arg(long)]
    pub json: bool,
}

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

#[derive(Debug, Args)]
pub struct AlertsArgs {
    #[command(flatten)]
    pub store: StoreArgs,
    /// Only open alerts.
    #[arg(long)]
    pub open: bool,
    /// Acknowledge the alert with this id.
    #[arg(long, value_name = "ID")]
    pub ack: Option<i64>,
}

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

#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// The CSV file (header row; time in seconds or RFC 3339).
    pub file: PathBuf,
    /// Print JSON instead of the table.
    #[arg(long)]
    pub json: bool,

    /// Name of the time column.
    #[arg(long, default_value = "time", value_name = "NAME")]
    pub time_col: String,
    /// Name of the setpoint column.
    #[arg(long, default_value = "sp", value_name = "NAME")]
    pub sp_col: String,
    /// Name of the process-variable column.
    #[arg(long, default_value = "pv", value_name = "NAME")]
    pub pv_col: String,
    /// Name of the controller-output column.
    #[arg(long, default_value = "op", value_name = "NAME")]
    pub op_col: String,
    /// Name of an optional mode column; windows end where the loop leaves automatic.
    #[arg(long, value_name = "NAME")]
    pub mode_col: Option<String>,
    /// Mode values that mean automatic (comma-separated; default AUTO, CAS, ON, TRUE, or the
    /// loop's auto_values with --config). Numbers in the list are the only automatic numbers;
    /// without any, every non-zero number means automatic.
    #[arg(long, value_delimiter = ',', value_name = "LIST")]
    pub auto_values: Option<Vec<String>>,

    /// Take the OP range and spec from this config file (with --loop).
    #[arg(long, value_name = "FILE", requires = "loop_tag")]
    pub config: Option<PathBuf>,
    /// The loop's tag in the config file, e.g. TIC-101.
    #[arg(long = "loop", value_name = "TAG", requires = "config")]
    pub loop_tag: Option<String>,

    /// Lower OP limit (default 0).
    #[arg(long, allow_negative_numbers = true, value_name = "OP")]
    pub op_min: Option<f64>,
    /// Upper OP limit (default 100).
    #[arg(long, allow_negative_numbers = true, value_name = "OP")]
    pub op_max: Option<f64>,
    /// Settling band, % of the setpoint change (default 2).
    #[arg(long, value_name = "PCT")]
    pub settle_band_pct: Option<f64>,
    /// Spec: the PV must settle within this many seconds (required without --config).
    #[arg(long, value_name = "SECONDS")]
    pub settle_within_s: Option<f64>,
    /// Spec: largest allowed overshoot, % of the change.
    #[arg(long, value_name = "PCT")]
    pub max_overshoot_pct: Option<f64>,
    /// SP moves up to this size are jitter, not setpoint changes (default 0.1 % of the largest SP).
    #[arg(long, value_name = "SP")]
    pub sp_deadband: Option<f64>,
    /// Silence between samples counted as a data gap (default 10 sample intervals).
    #[arg(long, value_name = "SECONDS")]
    pub max_gap_s: Option<f64>,
    /// Name to show for the loop (default: the --loop tag or the file name).
    #[arg(long, value_name = "TAG")]
    pub tag: Option<String>,
}

/// An input problem the user can fix: reported without a backtrace, exit code 2.
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
pub struct UsageError(pub String);

impl AnalyzeArgs {
    /// Resolves flags and config into one analysis setup and CSV options; flags win over the
    /// config file. Every number is checked by the core's rules before any analysis runs, and a
    /// refused one is named by its flag.
    pub fn setup(&self) -> anyhow::Result<(LoopSetup, CsvOptions)> {
        let mut csv = CsvOptions {
            columns: CsvColumns {
                time: self.time_col.clone(),
                sp: self.sp_col.clone(),
                pv: self.pv_col.clone(),
                op: self.op_col.clone(),
                mode: self.mode_col.clone(),
            },
            ..CsvOptions::default()
        };
        let mut setup = match (&self.config, &self.loop_tag) {
            (Some(path), Some(tag)) => {
                let cfg = Config::load(path).map_err(|e| UsageError(e.to_string()))?;
                if let Some(mode) = cfg.loops.get(tag).and_then(|l| l.mode.as_ref()) {
                    csv.auto_values = mode.auto_values.clone();
                }
                cfg.loop_setup(tag, path)
                    .map_err(|e| UsageError(e.to_string()))?
            }
            _ => {
                let within = self.settle_within_s.ok_or_else(|| {
                    UsageError(
                        "the spec's settling time is needed: give --settle-within-s SECONDS, \
                         or --config FILE --loop TAG"
                            .into(),
                    )
                })?;
                let tag = self
                    .file
                    .file_stem()
                    .map_or("loop".into(), |s| s.to_string_lossy().into_owned());
                LoopSetup::new(tag, Spec::within(within))
            }
        };
        if let Some(v) = &self.auto_values {
            csv.auto_values = AutoValues::new(v);
        }
        if let Some(v) = self.op_min {
            setup.op.min = v;
        }
        if let Some(v) = self.op_max {
            setup.op.max = v;
        }
        if let Some(v) = self.settle_band_pct {
            setup.spec.settle_band_pct = v;
        }
        if let Some(v) = self.settle_within_s {
            setup.spec.settle_within_s = v;
        }
        if let Some(v) = self.max_overshoot_pct {
            setup.spec.max_overshoot_pct = Some(v);
        }
        if let Some(v) = self.sp_deadband {
            setup.options.sp_deadband = Some(v);
        }
        if let Some(v) = self.max_gap_s {
            setup.options.max_gap_s = Some(v);
        }
        if let Some(t) = &self.tag {
            setup.tag = t.clone();
        }
        setup
            .validate()
            .map_err(|p| UsageError(p.message(analyze_flag)))?;
        Ok((setup, csv))
    }
}

/// A setting's name as `analyze` takes it: its flag, or its key in the config file where no
/// flag sets it.
fn analyze_flag(setting: Setting) -> &'static str {
    match setting {
        Setting::SettleBandPct => "--settle-band-pct",
        Setting::SettleWithinS => "--settle-within-s",
        Setting::MaxOvershootPct => "--max-overshoot-pct",
        Setting::OpMin => "--op-min",
        Setting::OpMax => "--op-max",
        Setting::SpDeadband => "--sp-deadband",
        Setting::MaxGapS => "--max-gap-s",
        other => other.key(),
    }
}

/// `headroom analyze`: load, analyse, print.
pub fn analyze(args: &AnalyzeArgs, out: &mut dyn std::io::Write) -> anyhow::Result<()> {
    let (setup, csv_options) = args.setup()?;
    let file = std::fs::File::open(&args.file)
        .with_context(|| format!("cannot open {}", args.file.display()))?;
    let loaded = csvload::load_csv(std::io::BufReader::new(file), &csv_options)
        .map_err(|e| UsageError(format!("{}: {e}", args.file.display())))?;
    let report = analysis::analyze_loop(&loaded.series, &setup);
    if args.json {
        render::json(&report, &loaded.report, out)?;
    } else {
        render::text(&report, &loaded.report, out)?;
    }
    Ok(())
}

/// `headroom check-config`: validate and describe.
pub fn check_config(args: &CheckConfigArgs, out: &mut dyn std::io::Write) -> anyhow::Result<()> {
    let path = args
        .file
        .as_ref()
        .or(args.config.as_ref())
        .ok_or_else(|| UsageError("give the configuration file".into()))?;
    let cfg = Config::load(path).map_err(|e| UsageError(e.to_string()))?;
    write!(out, "{}", cfg.describe(path))?;
    writeln!(out, "{}: valid", path.display())?;
    Ok(())
}

/// `headroom run`: the daemon until SIGINT or SIGTERM.
pub async fn run(args: &RunArgs) -> anyhow::Result<()> {
    let cfg = Config::load(&args.config).map_err(|e| UsageError(e.to_string()))?;
    tracing::debug!(config = %args.config.display(), "configuration loaded");
    let daemon = crate::daemon::Daemon::build(&cfg, &args.config).await?;
    daemon.run(shutdown_signal()).await
}

/// Completes on Ctrl-C or SIGTERM.
pub async fn shutdown_signal() {
    let ctrl_c = async {
        let _ = tokio::signal::ctrl_c().await;
    };
    #[cfg(unix)]
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let term = std::future::pending::<()>();
    tokio::select! {
        _ = ctrl_c => tracing::info!("interrupt received"),
        _ = term => tracing::info!("SIGTERM received"),
    }
}
