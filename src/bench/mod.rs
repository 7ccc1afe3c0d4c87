//! `headroom bench`: measures this machine, each figure beside the ceiling or reference it is
//! compared with, in one run. A benchmark measures; it asserts nothing — the figures go in the
//! README's performance section.
//!
//! Measured now (`--only` picks parts):
//! - analysis of a week of one loop at 1 Hz (604,800 samples, about 100 setpoint changes), from
//!   a loaded series to verdicts, and from the CSV file to verdicts, against the 0.2 s target;
//! - per-episode scoring + identification beside python-control `step_info` + scipy `curve_fit`
//!   of an FOPDT model on the same episode files (run through `tests/reference/bench_python.py`);
//! - ingest through a Mosquitto it starts, beside the broker's and the store's ceilings, and the
//!   daemon's memory (`ingest.rs`);
//! - Modbus polling of 100 simulated devices by one daemon: requests per cycle, CPU, and the
//!   fastest poll of one device (`modbus.rs`).

mod ingest;
mod modbus;

use crate::analysis::sim::{self, LoopSim, LoopSimConfig, PiController, Process};
use crate::analysis::{self, AnalysisOptions, LoopSetup, OpRange, Series, Spec};
use crate::csvload::{self, CsvOptions};
use anyhow::Context;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// What `run` measures and how often.
#[derive(Debug, Clone, PartialEq)]
pub struct BenchOptions {
    /// The Python interpreter for the side-by-side comparison; `None`: target/pyenv/bin/python
    /// if present, else python3.
    pub python: Option<PathBuf>,
    /// Episodes for the per-episode comparison (at least 1).
    pub episodes: usize,
    /// Repetitions of each timing (at least 1); the median is reported.
    pub repeat: usize,
    /// Smaller ingest runs and no memory run.
    pub quick: bool,
    /// Only these parts; empty: all.
    pub only: Vec<Part>,
}

/// A part of the benchmark.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part {
    Analysis,
    Ingest,
    Modbus,
}

impl Part {
    pub const ALL: [Part; 3] = [Part::Analysis, Part::Ingest, Part::Modbus];

    /// The part's name, as `--only` takes it.
    pub fn as_str(self) -> &'static str {
        match self {
            Part::Analysis => "analysis",
            Part::Ingest => "ingest",
            Part::Modbus => "modbus",
        }
    }

    pub fn parse(s: &str) -> Option<Part> {
        Part::ALL.into_iter().find(|p| p.as_str() == s)
    }
}

/// The target for a week of one loop at 1 Hz, end to end.
const WEEK_TARGET_S: f64 = 0.2;
/// The speed-up over the Python reference libraries that the per-episode work must reach.
const SPEEDUP_TARGET: f64 = 100.0;

pub fn run(args: &BenchOptions, out: &mut dyn Write) -> anyhow::Result<()> {
    writeln!(out, "headroom bench — {} CPU(s) available", cpus())?;
    writeln!(out)?;
    let part = |p: Part| args.only.is_empty() || args.only.contains(&p);
    let dir = tempfile_dir()?;
    if part(Part::Analysis) {
        analysis_part(args, &dir, out)?;
    }
    if part(Part::Ingest) {
        ingest::run(&dir, out, args.quick)?;
        writeln!(out)?;
    }
    if part(Part::Modbus) {
        modbus::run(&dir, out, args.quick)?;
        writeln!(out)?;
    }
    if let Some(mb) = proc_status_mb("self", "VmHWM:") {
        writeln!(out, "peak resident memory of this run: {mb:.1} MB")?;
    }
    let _ = std::fs::remove_dir_all(&dir);
    Ok(())
}

/// A week of one loop, and the per-episode comparison with the Python reference libraries.
fn analysis_part(args: &BenchOptions, dir: &Path, out: &mut dyn Write) -> anyhow::Result<()> {
    let repeat = args.repeat.max(1);
    // 1. A week of one loop at 1 Hz.
    let (series, setup) = week_of_one_loop();
    let changes = analysis::analyze_loop(&series, &setup).episodes.len();
    let core = median_time(repeat, || {
        std::hint::black_box(analysis::analyze_loop(&series, &setup));
    });
    // The same without the recommendation: what the advice's simulations cost is the rest.
    let judged = median_time(repeat, || {
        std::hint::black_box(analysis::assess::assess(&series, &setup));
    });
    // The regulation analysis of the holds between the changes, on its own.
    let assessed = analysis::assess::assess(&series, &setup);
    let reg_settings = analysis::assess::regulation_settings(&setup, assessed.model.as_ref().ok());
    let regulation = median_time(repeat, || {
        std::hint::black_box(analysis::regulation::regulation(
            &series,
            &assessed.holds,
            &reg_settings,
        ));
    });
    let csv = dir.join("week.csv");
    write_csv(&series, &csv)?;
    let from_csv = median_time(repeat, || {
        let f = std::fs::File::open(&csv).expect("bench file");
        let loaded = csvload::load_csv(std::io::BufReader::new(f), &CsvOptions::default())
            .expect("bench file loads");
        std::hint::black_box(analysis::analyze_loop(&loaded.series, &setup));
    });
    writeln!(
        out,
        "week of one loop at 1 Hz ({} samples, {} setpoint changes; model family chosen on \
         held-out changes, {} bootstrap variants for the confidence ranges)",
        series.len(),
        changes,
        analysis::assess::ModelSet::VARIANTS
    )?;
    row(out, "  series → verdicts", core, WEEK_TARGET_S, "target")?;
    writeln!(
        out,
        "{:<24}{:>10.1} ms   (settings chosen and verified by simulation)",
        "    of which the advice",
        (core - judged - regulation).max(0.0) * 1e3
    )?;
    writeln!(
        out,
        "{:<24}{:>10.1} ms   (holds between the changes: disturbances, oscillation, Harris index)",
        "    of which regulation",
        regulation * 1e3
    )?;
    row(
        out,
        "  CSV file → verdicts",
        from_csv,
        WEEK_TARGET_S,
        "target",
    )?;
    writeln!(
        out,
        "{:<24}{:>10.1} ms",
        "    of which loading it",
        1e3 * median_time(repeat, || {
            let f = std::fs::File::open(&csv).expect("bench file");
            std::hint::black_box(
                csvload::load_csv(std::io::BufReader::new(f), &CsvOptions::default())
                    .expect("bench file loads"),
            );
        })
    )?;
    writeln!(out)?;

    // 2. Per episode, beside the Python reference libraries.
    let script = script_path();
    let python = args.python.clone().unwrap_or_else(default_python);
    let episodes_dir = dir.join("episodes");
    writeln!(
        out,
        "per episode: scoring + identification ({} episodes) beside python-control step_info + \
         scipy curve_fit",
        args.episodes
    )?;
    match python_side(&python, &script, &episodes_dir, args.episodes) {
        Ok(py) => {
            let ours = ours_per_episode(&episodes_dir, repeat)?;
            writeln!(out, "  headroom            {:>10.3} ms/episode", 1e3 * ours)?;
            writeln!(
                out,
                "  Python reference    {:>10.3} ms/episode ({})",
                1e3 * py.seconds_per_episode,
                py.versions
            )?;
            let ratio = py.seconds_per_episode / ours;
            writeln!(
                out,
                "  speed-up            {:>10.0}×   target ≥ {SPEEDUP_TARGET:.0}× — {}",
                ratio,
                if ratio >= SPEEDUP_TARGET {
                    "met"
                } else {
                    "MISSED"
                }
            )?;
        }
        Err(e) => writeln!(out, "  Python side not measured: {e:#}")?,
    }
    writeln!(out)?;
    Ok(())
}

/// `headroom run --config <cfg>` as a child process of this binary, logging warnings only to
/// nowhere; killed when dropped.
fn spawn_daemon(cfg: &Path) -> anyhow::Result<(tokio::process::Child, u32)> {
    let child = tokio::process::Command::new(std::env::current_exe()?)
        .args(["run", "--config"])
        .arg(cfg)
        .env("RUST_LOG", "warn")
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .kill_on_drop(true)
        .spawn()?;
    let pid = child.id().context("the daemon has no process id")?;
    Ok((child, pid))
}

fn row(
    out: &mut dyn Write,
    what: &str,
    secs: f64,
    ceiling: f64,
    word: &str,
) -> std::io::Result<()> {
    writeln!(
        out,
        "{what:<24}{:>10.1} ms   {word} < {:.0} ms — {} ({:.0} % of it)",
        1e3 * secs,
        1e3 * ceiling,
        if secs < ceiling { "met" } else { "MISSED" },
        100.0 * secs / ceiling
    )
}

/// Median wall time of `n` runs of `f`, in seconds.
fn median_time(n: usize, mut f: impl FnMut()) -> f64 {
    let mut times: Vec<f64> = (0..n)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .collect();
    times.sort_by(f64::total_cmp);
    times[times.len() / 2]
}

/// A simulated week of a heating loop at 1 Hz with a setpoint change about every 100 minutes,
/// alternating sizes so every verdict kind can occur.
pub fn week_of_one_loop() -> (Series, LoopSetup) {
    let mut sim = LoopSim::new(LoopSimConfig {
        process: Process::JACKETED_VESSEL,
        controller: PiController {
            gain: 4.0,
            integral_time_s: 300.0,
            op_min: 0.0,
            op_max: 100.0,
        },
        step_s: 0.5,
        noise_sd: 0.02,
        seed: 604_800,
        initial_sp: 50.0,
    });
    let sizes = [5.0, -3.0, 8.0, -10.0, 25.0, -25.0, 4.0, -4.0];
    let mut sp = 50.0;
    let schedule: Vec<(f64, f64)> = (0..100)
        .map(|i| {
            sp += sizes[i % sizes.len()];
            (3000.0 + 6000.0 * i as f64, sp)
        })
        .collect();
    let s = sim.run(&schedule, 604_799.0, 1.0);
    let series = sim::series(&s, 0.0);
    let setup = LoopSetup::new(
        "TIC-900",
        Spec {
            max_overshoot_pct: Some(10.0),
            hold_band: None,
            recover_within_s: None,
            ..Spec::within(600.0)
        },
    );
    (series, setup)
}

fn write_csv(s: &Series, path: &Path) -> anyhow::Result<()> {
    let f =
        std::fs::File::create(path).with_context(|| format!("cannot write {}", path.display()))?;
    let mut w = std::io::BufWriter::new(f);
    writeln!(w, "time,sp,pv,op")?;
    for i in 0..s.len() {
        writeln!(
            w,
            "{},{},{:.4},{:.3}",
            s.time_s()[i],
            s.sp()[i],
            s.pv()[i],
            s.op()[i]
        )?;
    }
    w.flush()?;
    Ok(())
}

struct PythonResult {
    seconds_per_episode: f64,
    versions: String,
}

fn python_side(python: &Path, script: &Path, dir: &Path, n: usize) -> anyhow::Result<PythonResult> {
    let output = std::process::Command::new(python)
        .arg(script)
        .args(["--generate", &n.to_string(), "--out"])
        .arg(dir)
        .args(["--csv-dir"])
        .arg(dir)
        .arg("--json")
        .output()
        .with_context(|| format!("cannot run {}", python.display()))?;
    if !output.status.success() {
        anyhow::bail!(
            "{} {} failed: {}",
            python.display(),
            script.display(),
            String::from_utf8_lossy(&output.stderr).trim()
        );
    }
    let text = String::from_utf8_lossy(&output.stdout);
    let line = text
        .lines()
        .rev()
        .find(|l| l.trim_start().starts_with('{'))
        .context("the Python side printed no JSON")?;
    let v: serde_json::Value = serde_json::from_str(line)?;
    let per = v["seconds_per_episode"]
        .as_f64()
        .context("no seconds_per_episode from the Python side")?;
    let versions = ["python", "numpy", "scipy", "control"]
        .iter()
        .filter_map(|k| v[*k].as_str().map(|s| format!("{k} {s}")))
        .collect::<Vec<_>>()
        .join(", ");
    Ok(PythonResult {
        seconds_per_episode: per,
        versions,
    })
}

/// Our time per episode on the files the Python side generated and timed: loading excluded, as
/// on the Python side; each file is analysed with its own limits and spec from the manifest.
fn ours_per_episode(dir: &Path, repeat: usize) -> anyhow::Result<f64> {
    let manifest: serde_json::Value = serde_json::from_slice(
        &std::fs::read(dir.join("manifest.json"))
            .context("no manifest.json from the Python side")?,
    )?;
    let mut work = Vec::new();
    for m in manifest.as_array().context("manifest is not a list")? {
        let file = dir.join(m["file"].as_str().context("manifest entry without file")?);
        let f = std::fs::File::open(&file)?;
        let loaded = csvload::load_csv(std::io::BufReader::new(f), &CsvOptions::default())
            .map_err(|e| anyhow::anyhow!("{}: {e}", file.display()))?;
        let num = |k: &str| {
            m[k].as_f64()
                .with_context(|| format!("manifest entry without {k}"))
        };
        let setup = LoopSetup {
            units: crate::analysis::Units::default(),
            controller: None,
            actuator: None,
            tag: "bench".into(),
            op: OpRange {
                min: num("op_min")?,
                max: num("op_max")?,
            },
            spec: Spec {
                settle_band_pct: num("settle_band_pct")?,
                settle_band: None,
                settle_within_s: num("settle_within_s")?,
                max_overshoot_pct: None,
                hold_band: None,
                recover_within_s: None,
            },
            options: AnalysisOptions::default(),
        };
        work.push((loaded.series, setup));
    }
    anyhow::ensure!(!work.is_empty(), "no episodes to time");
    // Scoring, identification and verdicts: the work the Python side does. The loop
    // recommendation (which simulates suggested tunings) runs once per loop, not per episode.
    let total = median_time(repeat, || {
        for (s, setup) in &work {
            std::hint::black_box(analysis::assess::assess(s, setup));
        }
    });
    Ok(total / work.len() as f64)
}

fn script_path() -> PathBuf {
    let local = PathBuf::from("tests/reference/bench_python.py");
    if local.exists() {
        local
    } else {
        PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference/bench_python.py")
    }
}

fn default_python() -> PathBuf {
    for root in [
        PathBuf::from("."),
        PathBuf::from(env!("CARGO_MANIFEST_DIR")),
    ] {
        let p = root.join("target/pyenv/bin/python");
        if p.exists() {
            return p;
        }
    }
    PathBuf::from("python3")
}

fn tempfile_dir() -> anyhow::Result<PathBuf> {
    let dir = std::env::temp_dir().join(format!("headroom-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).with_context(|| format!("cannot create {}", dir.display()))?;
    Ok(dir)
}

fn cpus() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// A memory figure from `/proc/<pid>/status` (Linux), such as `VmRSS:` or `VmHWM:`, in MB.
pub(crate) fn proc_status_mb(pid: &str, key: &str) -> Option<f64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let kb: f64 = status
        .lines()
        .find(|l| l.starts_with(key))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()?;
    Some(kb / 1024.0)
}
