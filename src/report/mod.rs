//! The weekly loop-health summary: what a plant team reviews once a week to decide which loops
//! to retune, which specs to renegotiate and which utilities to upgrade.
//!
//! ```text
//!  store ──gather (reads, the only async part)──> build::Inputs ──build (pure)──> WeeklyReport
//!    └─ each loop-week's samples ──reanalysis (core, off the runtime)─┘  │ + plot (pure, SVG)
//!                                                                   └─> render: html | md | json
//! ```
//!
//! Numbers come from the stored episodes and models and from the analysis core's functions
//! (`recommend`, `feasibility`, and `assess` with `regulation` on each loop-week's stored
//! samples, [`reanalysis`]), never from a second copy of a definition. `headroom report`
//! prints or writes a summary; the daemon generates one each week on the schedule in
//! `[report]` ([`schedule`]), keeps it in the store and writes it to the configured folder.

pub mod build;
pub mod evidence;
pub mod period;
pub mod plot;
pub mod quality;
pub mod ranking;
pub mod reanalysis;
pub mod regulation;
pub mod render;
pub mod schedule;
pub mod section;
pub mod trend;

pub use crate::summary_format::Format;
pub use build::{Inputs, LoopInput, WeeklyReport, build};
pub use period::{Period, PeriodError};
pub use render::{RenderError, render};

use crate::analysis::AnalysisOptions;
use crate::config::Config;
use crate::sample::Signal;
use crate::store::Store;
use jiff::Timestamp;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// Why a summary could not be made or written.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ReportError {
    #[error(transparent)]
    Store(#[from] crate::store::Error),
    #[error(transparent)]
    Period(#[from] PeriodError),
    /// A template failed to render: a bug in this version, not in the data.
    #[error(transparent)]
    Render(#[from] RenderError),
    #[error("cannot write the summary to {}: {source}", path.display())]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
}

/// Reads everything the summary of `period` needs from the store, and builds it with its plots.
/// `config` supplies each loop's spec, OP range and description; without it the summary still
/// shows what the store knows, and says what is missing. `config_file`, the configuration's
/// path when it has one, goes into the commands that reproduce the worst misses.
pub async fn gather(
    store: &Store,
    config: Option<&Config>,
    config_file: Option<&Path>,
    period: &Period,
    generated: Timestamp,
) -> Result<WeeklyReport, ReportError> {
    let periods = period.with_earlier(build::TREND_WEEKS)?;
    let first = &periods[0];
    let episodes = store
        .episodes_between(first.from_ms(), period.to_ms())
        .await?;
    let models = store.models_before(period.to_ms()).await?;
    let series = store.series_list().await?;
    let alerts = store.alerts(false).await?;

    let mut tags: BTreeSet<String> = BTreeSet::new();
    if let Some(c) = config {
        tags.extend(c.loops.keys().cloned());
    }
    tags.extend(episodes.iter().map(|e| e.loop_tag.clone()));
    tags.extend(models.iter().map(|m| m.loop_tag.clone()));
    tags.extend(series.iter().map(|(t, _)| t.clone()));

    let mut loops = Vec::new();
    // The samples around each loop's largest disturbance of the period, for its plot.
    let mut disturbances = BTreeMap::new();
    for tag in tags {
        let cfg = config.and_then(|c| c.loops.get(&tag));
        let setup = cfg.and_then(|l| l.setup(&tag).ok());
        let coverage = coverage(store, setup.as_ref(), &tag, &series, period).await?;
        let mut input = loop_input(tag, cfg, setup, coverage, &episodes, &models);
        if let Some(setup) = &input.setup {
            let (runs, worst) =
                reanalysis::regulation_runs(store, setup, &input.models, &periods).await?;
            input.regulation = runs;
            if let Some(samples) = worst {
                disturbances.insert(input.tag.clone(), samples);
            }
        }
        loops.push(input);
    }
    let inputs = Inputs {
        periods,
        loops,
        alerts,
        generated,
        source: store.path().display().to_string(),
        config_file: config_file.map(|p| p.display().to_string()),
        config_given: config.is_some(),
        newest_data_ms: store.newest_data_ms().await?,
    };
    let mut report = build(&inputs);
    draw(store, &mut report, &inputs).await?;
    draw_disturbances(&mut report, &disturbances);
    Ok(report)
}

/// Data coverage of each stored signal of the loop over the period, with the silence the
/// daemon records as a gap for this loop (the writer's own rule).
async fn coverage(
    store: &Store,
    setup: Option<&crate::analysis::LoopSetup>,
    tag: &str,
    series: &[(String, Signal)],
    period: &Period,
) -> Result<Vec<crate::store::SeriesCoverage>, ReportError> {
    let gap_ms = setup.and_then(|s| {
        let period = s.options.expected_period_s?;
        Some(crate::units::s_to_ms(s.options.max_gap_for(period)))
    });
    let mut coverage = Vec::new();
    for (_, signal) in series.iter().filter(|(t, _)| t == tag) {
        coverage.push(
            store
                .coverage(tag, *signal, period.from_ms(), period.to_ms(), gap_ms)
                .await?,
        );
    }
    Ok(coverage)
}

/// What the builder needs to know about one loop, from its configuration and the store's rows.
fn loop_input(
    tag: String,
    cfg: Option<&crate::config::LoopConfig>,
    setup: Option<crate::analysis::LoopSetup>,
    coverage: Vec<crate::store::SeriesCoverage>,
    episodes: &[crate::store::EpisodeRow],
    models: &[crate::store::ModelRow],
) -> LoopInput {
    // The sample period for the tuning prediction: the configured one, else the PV's mean
    // interval over the period.
    let sample_s = cfg.and_then(|l| l.expected_period_s).or_else(|| {
        coverage
            .iter()
            .find(|c| c.signal == Signal::Pv && c.samples > 1)
            .and_then(|c| {
                Some(crate::units::ms_to_s(c.last_ms? - c.first_ms?) / (c.samples - 1) as f64)
            })
    });
    LoopInput {
        description: cfg.map(|l| l.description.clone()).unwrap_or_default(),
        pv_unit: cfg.map(|l| l.pv_unit.clone()).unwrap_or_default(),
        op_unit: cfg.map_or("%".into(), |l| l.op_unit.clone()),
        setup,
        sample_s,
        episodes: episodes
            .iter()
            .filter(|e| e.loop_tag == tag)
            .cloned()
            .collect(),
        models: models
            .iter()
            .filter(|m| m.loop_tag == tag)
            .cloned()
            .collect(),
        coverage,
        configured: cfg.is_some(),
        regulation: Vec::new(),
        tag,
    }
}

/// Adds the plots: each loop's telling change (from its stored samples) and its trend.
async fn draw(
    store: &Store,
    report: &mut WeeklyReport,
    inputs: &Inputs,
) -> Result<(), ReportError> {
    for section in &mut report.loops {
        let input = inputs.loops.iter().find(|l| l.tag == section.tag);
        let setup = input.and_then(|l| l.setup.as_ref());
        if section.trend.iter().any(|w| w.met_share.is_some()) {
            place(
                plot::trend_svg(&section.trend, section.spec.as_ref()),
                &mut section.trend_svg,
                &mut section.notes,
                "The trend",
            );
        }
        let Some(t) = &section.telling else { continue };
        let from = t.start_ms - evidence::lead_in_ms(t.end_ms - t.start_ms);
        let mut samples = plot::EpisodeSamples {
            sp: store
                .samples(&section.tag, Signal::Sp, from, t.end_ms)
                .await?,
            pv: store
                .samples(&section.tag, Signal::Pv, from, t.end_ms)
                .await?,
            op: store
                .samples(&section.tag, Signal::Op, from, t.end_ms)
                .await?,
        };
        if samples.pv.is_empty() {
            continue;
        }
        if samples.sp.first().is_none_or(|(ts, _)| *ts > from) {
            samples.sp.insert(0, (from, t.sp_from));
        }
        let margin = setup.map_or(AnalysisOptions::DEFAULT_SATURATION_MARGIN_PCT, |s| {
            s.options.saturation_margin_pct
        });
        let drawn = plot::episode_svg(
            t,
            section.spec.as_ref(),
            section.op_range.as_ref(),
            margin,
            &samples,
            &plot::PlotUnits {
                pv: &section.pv_unit,
                op: &section.op_unit,
            },
        );
        place(
            drawn,
            &mut section.episode_svg,
            &mut section.notes,
            "The telling change",
        );
    }
    Ok(())
}

/// Adds the plot of each loop's largest load disturbance of the period, from the samples kept
/// around it when its regulation was analysed.
fn draw_disturbances(report: &mut WeeklyReport, samples: &BTreeMap<String, plot::EpisodeSamples>) {
    for section in &mut report.loops {
        let (Some(r), Some(s)) = (&section.regulation, samples.get(&section.tag)) else {
            continue;
        };
        let Some(worst) = r.largest_disturbances.first() else {
            continue;
        };
        let drawn = plot::disturbance_svg(
            &worst.disturbance,
            r.run.regulation.hold_band,
            section.op_range.as_ref(),
            s,
            &plot::PlotUnits {
                pv: &section.pv_unit,
                op: &section.op_unit,
            },
        );
        place(
            drawn,
            &mut section.disturbance_svg,
            &mut section.notes,
            "The largest disturbance",
        );
    }
}

/// Puts a drawn picture in its place, or a note that `what` could not be drawn.
fn place(
    drawn: Result<String, plot::PlotError>,
    slot: &mut Option<String>,
    notes: &mut Vec<String>,
    what: &str,
) {
    match drawn {
        Ok(svg) => *slot = Some(svg),
        Err(e) => notes.push(format!("{what} could not be drawn: {e}")),
    }
}

/// The default period of `headroom report`: the last ISO week that ended by the newest data in
/// the store, or, when the store holds nothing that old (a store younger than a week), the week
/// of the newest data so far. An empty store gives the last complete week before `now`.
pub async fn default_period(
    store: &Store,
    tz: &jiff::tz::TimeZone,
    now: Timestamp,
) -> Result<Period, ReportError> {
    let newest = match store.newest_data_ms().await? {
        Some(ms) => Timestamp::from_millisecond(ms).unwrap_or(now),
        None => return Ok(Period::week_containing(now, tz)?.previous()?),
    };
    let current = Period::week_containing(newest, tz)?;
    let previous = current.previous()?;
    if store
        .has_data_between(previous.from_ms(), previous.to_ms())
        .await?
    {
        Ok(previous)
    } else {
        Ok(current)
    }
}

/// The file name of a summary: `loop-health-2026-W48.html`.
pub fn file_name(period: &Period, format: Format) -> String {
    let label: String = period
        .label
        .replace(" to ", "_")
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '-'
            }
        })
        .collect();
    format!("loop-health-{label}.{}", format.as_str())
}

/// Renders the summary in every format asked for and writes each into `folder`; returns the
/// files with their sizes. The folder must exist.
pub fn write_files(
    report: &WeeklyReport,
    period: &Period,
    formats: &[Format],
    folder: &Path,
) -> Result<Vec<(PathBuf, String)>, ReportError> {
    // The folder is made when missing, with its parents, as `mkdir -p` would.
    std::fs::create_dir_all(folder).map_err(|source| ReportError::Write {
        path: folder.to_path_buf(),
        source,
    })?;
    let mut out = Vec::new();
    for &f in formats {
        let text = render(report, f)?;
        let path = folder.join(file_name(period, f));
        // Written beside and renamed, so a reader never sees half a file.
        let tmp = path.with_extension(format!("{}.part", f.as_str()));
        std::fs::write(&tmp, &text)
            .and_then(|()| std::fs::rename(&tmp, &path))
            .map_err(|source| ReportError::Write {
                path: path.clone(),
                source,
            })?;
        out.push((path, text));
    }
    Ok(out)
}
