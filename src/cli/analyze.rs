//! `headroom analyze`: one loop's CSV export, analysed offline.

use super::controller_flags::LoopFlags;
use super::{Failure, Usage};
use crate::analysis::{self, AutoValues, LoopSetup, Spec};
use crate::config::Config;
use crate::csvload::{self, CsvColumns, CsvOptions};
use crate::render;
use clap::Args;
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// The CSV file (header row; time in seconds, epoch milliseconds, RFC 3339, or local time
    /// with --time-zone and --time-format).
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
    #[command(flatten)]
    pub describe: LoopFlags,
    #[command(flatten)]
    pub csv_time: super::csv_flags::CsvTimeFlags,
}

impl AnalyzeArgs {
    /// Resolves flags and config into one analysis setup and CSV options; flags win over the
    /// config file. Every number is checked by the core's rules before any analysis runs, and a
    /// refused one is named by its flag.
    pub fn setup(&self) -> Result<(LoopSetup, CsvOptions), Failure> {
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
                let cfg = Config::load(path)?;
                if let Some(mode) = cfg.loops.get(tag).and_then(|l| l.mode.as_ref()) {
                    csv.auto_values = mode.auto_values.clone();
                }
                cfg.loop_setup(tag, path)?
            }
            _ => {
                let within = self.settle_within_s.ok_or(Usage::NoSpecTime)?;
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
        self.csv_time.apply(&mut csv)?;
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
        self.describe.apply(&mut setup);
        setup.validate().map_err(Failure::Setting)?;
        Ok((setup, csv))
    }
}

/// `headroom analyze`: load, analyse, print.
pub fn analyze(args: &AnalyzeArgs, out: &mut dyn std::io::Write) -> Result<(), Failure> {
    let (setup, csv_options) = args.setup()?;
    let file = std::fs::File::open(&args.file).map_err(|source| Failure::Open {
        path: args.file.clone(),
        source,
    })?;
    let loaded =
        csvload::load_csv(std::io::BufReader::new(file), &csv_options).map_err(|source| {
            Failure::Csv {
                path: args.file.clone(),
                source,
            }
        })?;
    let report = analysis::analyze_loop(&loaded.series, &setup);
    if args.json {
        render::json(&report, &setup, &loaded.report, out)?;
    } else {
        render::text(&report, &loaded.report, out)?;
    }
    Ok(())
}
