//! The demo's closing summary, per loop, from the store the daemon wrote: the setpoint changes it
//! scored, its latest process model, and the recommendation the analysis core derives from them
//! ([`crate::analysis::advice::recommend`], the same function `analyze` uses); and how it held its
//! setpoint between changes, as the run's loop-health report found it from the stored samples.
//! Nothing here is computed from the simulator's own knowledge of the plant.

use super::plant::{Link, LoopDef};
use crate::alerts::AlertKind;
use crate::analysis::advice::{Recommendation, recommend};
use crate::analysis::regulation::{DisturbanceVerdict, Regulation, words};
use crate::analysis::verdict::VerdictCounts;
use crate::analysis::{CAUTION, EpisodeResult, Model, Verdict};
use crate::config::Config;
use crate::report::WeeklyReport;
use crate::store::Store;
use crate::units::{DISPLAY_DIGITS, Units, count, human_duration, sig};
use anyhow::Context;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Duration;

/// One loop's results.
#[derive(Debug, Clone)]
pub struct LoopSummary {
    pub tag: String,
    pub link: Link,
    pub settle_within_s: f64,
    /// The final (closed) episodes the daemon scored, oldest first.
    pub episodes: Vec<EpisodeResult>,
    /// Stored episodes whose detail could not be read back (none, unless the store was damaged).
    pub unreadable: usize,
    pub counts: VerdictCounts,
    pub model: Option<Model>,
    pub recommendation: Recommendation,
    /// The units the loop's numbers are read in.
    pub units: crate::analysis::Units,
    /// Alerts raised for the loop: (kind, times raised).
    pub alerts: Vec<(String, u64)>,
    /// How the loop held its setpoint between changes over the run (see [`add_regulation`]).
    pub regulation: Option<Regulation>,
}

impl LoopSummary {
    /// The median settling time of the conclusive changes; infinite when most never settled.
    pub fn typical_settling_s(&self) -> Option<f64> {
        let mut t: Vec<f64> = self
            .episodes
            .iter()
            .filter(|e| e.verdict != Verdict::Inconclusive)
            .map(|e| e.settling_time_s.unwrap_or(f64::INFINITY))
            .collect();
        if t.is_empty() {
            return None;
        }
        t.sort_by(f64::total_cmp);
        Some(t[t.len() / 2])
    }
}

/// Reads each loop's episodes, model and alerts from the store and derives its recommendation.
pub async fn gather(
    store: &Store,
    config: &Config,
    config_path: &Path,
    defs: &[LoopDef],
) -> anyhow::Result<Vec<LoopSummary>> {
    let models = store
        .latest_models()
        .await
        .context("cannot read the models")?;
    let alerts = store
        .alerts(false)
        .await
        .context("cannot read the alerts")?;
    let mut out = Vec::new();
    for d in defs {
        let rows = store
            .episodes(Some(d.tag), None)
            .await
            .with_context(|| format!("cannot read the episodes of {}", d.tag))?;
        let mut episodes = Vec::new();
        let mut unreadable = 0;
        for r in rows.iter().filter(|r| r.is_final) {
            match serde_json::from_value::<EpisodeResult>(r.detail.clone()) {
                Ok(e) => episodes.push(e),
                Err(_) => unreadable += 1,
            }
        }
        let model = models
            .iter()
            .find(|m| m.loop_tag == d.tag)
            .map(|m| m.model());
        let setup = config
            .loop_setup(d.tag, config_path)
            .with_context(|| format!("loop {}", d.tag))?;
        let recommendation = recommend(&episodes, model.as_ref(), &setup, d.sample_period_s);
        out.push(LoopSummary {
            tag: d.tag.to_string(),
            link: d.link,
            settle_within_s: d.settle_within_s,
            counts: VerdictCounts::of(&episodes),
            episodes,
            unreadable,
            model,
            recommendation,
            units: setup.units.clone(),
            alerts: alerts_by_kind(&alerts, d.tag),
            regulation: None,
        });
    }
    Ok(out)
}

/// Gives each loop the regulation findings of the run's loop-health report, which re-analysed
/// the run's stored samples between setpoint changes.
pub fn add_regulation(loops: &mut [LoopSummary], report: &WeeklyReport) {
    for l in loops {
        l.regulation = report
            .loops
            .iter()
            .find(|s| s.tag == l.tag)
            .and_then(|s| s.regulation.as_ref())
            .map(|r| r.run.regulation.clone());
    }
}

/// What a loop showed between its setpoint changes that a person should look at, in the words
/// `analyze` uses: an oscillation with its cause and evidence, and the load disturbances when
/// the actuator could not counter one of them; `None` when it held its setpoint well.
fn regulation_finding(r: &Regulation, units: &Units) -> Option<String> {
    let mut found = Vec::new();
    if r.oscillation.detected {
        found.push(words::oscillation(&r.oscillation, units));
    }
    let beyond_actuator = r
        .disturbances
        .iter()
        .any(|d| d.verdict == DisturbanceVerdict::ActuatorLimited);
    if beyond_actuator {
        found.push(words::disturbances(&r.disturbances));
        found.extend(words::largest(&r.disturbances, units));
    }
    (!found.is_empty()).then(|| found.join(" "))
}

/// One paragraph per loop with a finding between its setpoint changes; nothing when none has.
fn regulation_findings(loops: &[LoopSummary], out: &mut dyn Write) -> std::io::Result<()> {
    let found: Vec<(&str, String)> = loops
        .iter()
        .filter_map(|l| {
            let finding = regulation_finding(l.regulation.as_ref()?, &l.units)?;
            Some((l.tag.as_str(), finding))
        })
        .collect();
    if found.is_empty() {
        return Ok(());
    }
    writeln!(out, "\nBetween setpoint changes")?;
    for (tag, finding) in found {
        wrapped(out, &format!("  {tag:<8} "), &finding, 11, 100)?;
    }
    Ok(())
}

/// A loop's alerts by kind, in the order first met: (kind, occurrences). Alerts are kept one
/// per change and per outage, so the rows of a kind add up.
fn alerts_by_kind(alerts: &[crate::store::AlertRow], tag: &str) -> Vec<(String, u64)> {
    let mut out: Vec<(String, u64)> = Vec::new();
    for a in alerts.iter().filter(|a| a.loop_tag == tag) {
        match out.iter_mut().find(|(k, _)| *k == a.kind) {
            Some((_, n)) => *n += a.count,
            None => out.push((a.kind.clone(), a.count)),
        }
    }
    out
}

/// Facts about the run for the summary's heading and footer.
#[derive(Debug, Clone)]
pub struct RunFacts {
    pub simulated_s: f64,
    pub wall: Duration,
    pub speed: f64,
    pub interrupted: bool,
    pub files: FilePaths,
}

#[derive(Debug, Clone)]
pub struct FilePaths {
    pub config: PathBuf,
    pub store: PathBuf,
    pub log: PathBuf,
    /// The loop-health summary of the run, one file per format.
    pub reports: Vec<PathBuf>,
}

fn link_word(l: Link) -> &'static str {
    match l {
        Link::Mqtt => "MQTT",
        Link::Modbus => "Modbus",
    }
}

/// A typical settling time: a dash when there is none, `never` when most never settled.
fn settling(s: Option<f64>) -> String {
    match s {
        None => "—".into(),
        Some(x) if !x.is_finite() => "never".into(),
        Some(x) => human_duration(x),
    }
}

/// `3 of 4`: the judged changes that met the spec, out of the judged ones (a share would hide
/// how few there were).
fn met_of_judged(c: &VerdictCounts) -> String {
    let judged = c.conclusive();
    if judged == 0 {
        "—".into()
    } else {
        format!("{} of {judged}", c.met)
    }
}

/// The misses by reason, and the inconclusive changes, e.g. "7 actuator-limited, 1 unreachable".
fn misses(c: &VerdictCounts) -> String {
    let parts = c.occurring(&[
        Verdict::TuningLimited,
        Verdict::ActuatorLimited,
        Verdict::Unreachable,
        Verdict::Inconclusive,
    ]);
    if parts.is_empty() {
        "—".into()
    } else {
        parts.join(", ")
    }
}

/// Writes `text` wrapped at `width` columns after `first`, every line after the first indented
/// by `indent` spaces.
fn wrapped(
    out: &mut dyn Write,
    first: &str,
    text: &str,
    indent: usize,
    width: usize,
) -> std::io::Result<()> {
    crate::render::paragraph(out, width, first, &" ".repeat(indent), text)
}

/// One row per loop: changes, share met, typical settling against the spec, misses, advice.
fn table(loops: &[LoopSummary], out: &mut dyn Write) -> std::io::Result<()> {
    let misses_w = loops
        .iter()
        .map(|l| misses(&l.counts).chars().count())
        .fold(36, usize::max);
    writeln!(
        out,
        "{:<8} {:<6} {:>7} {:>8}  {:>9} {:>9}  {:<misses_w$} advice",
        "loop", "via", "changes", "met", "settling", "spec", "misses"
    )?;
    for l in loops {
        writeln!(
            out,
            "{:<8} {:<6} {:>7} {:>8}  {:>9} {:>9}  {:<misses_w$} {}",
            l.tag,
            link_word(l.link),
            l.episodes.len(),
            met_of_judged(&l.counts),
            settling(l.typical_settling_s()),
            human_duration(l.settle_within_s),
            misses(&l.counts),
            l.recommendation.action.label(),
        )?;
    }
    Ok(())
}

/// Where the run's files are, and the commands to look further.
fn files_and_next_steps(files: &FilePaths, out: &mut dyn Write) -> std::io::Result<()> {
    let db = files.store.display();
    writeln!(out, "\nFiles")?;
    writeln!(out, "  store   {db}")?;
    writeln!(out, "  config  {}", files.config.display())?;
    writeln!(out, "  log     {}", files.log.display())?;
    for r in &files.reports {
        writeln!(out, "  report  {}", r.display())?;
    }
    writeln!(out, "\nContinue with")?;
    writeln!(out, "  headroom episodes --db {db} --loop TIC-120")?;
    writeln!(out, "  headroom alerts --db {db}")?;
    writeln!(out, "  headroom loops --db {db}")?;
    writeln!(
        out,
        "  headroom report --db {db} --config {} --format html --out .",
        files.config.display()
    )?;
    writeln!(
        out,
        "  headroom export --db {db} --loop TIC-130 > tic-130.csv\n  headroom analyze tic-130.csv --config {} --loop TIC-130",
        files.config.display()
    )?;
    Ok(())
}

/// The summary for people.
pub fn render(loops: &[LoopSummary], facts: &RunFacts, out: &mut dyn Write) -> std::io::Result<()> {
    writeln!(
        out,
        "\nHeron Reach pilot plant: {} of plant time in {} ({} times real time){}",
        human_duration(facts.simulated_s),
        human_duration(facts.wall.as_secs_f64()),
        sig(facts.speed, DISPLAY_DIGITS),
        if facts.interrupted {
            ", interrupted"
        } else {
            ""
        }
    )?;
    writeln!(out)?;
    table(loops, out)?;
    writeln!(
        out,
        "(changes: setpoint changes scored; met: of the conclusive ones, how many met the spec; \
         settling: typical, vs the spec's limit)"
    )?;
    writeln!(out, "\nRecommendations")?;
    for l in loops {
        wrapped(
            out,
            &format!("  {:<8} ", l.tag),
            &l.recommendation.summary,
            11,
            100,
        )?;
        for line in crate::analysis::advice::settings_lines(&l.recommendation, &l.units) {
            wrapped(out, "           ", &line, 11, 100)?;
        }
    }
    // Every recommendation above carries the same caution; it is shown once, right below them.
    wrapped(out, "  ", CAUTION, 2, 100)?;
    regulation_findings(loops, out)?;

    let raised: Vec<String> = loops
        .iter()
        .flat_map(|l| {
            l.alerts.iter().map(move |(k, n)| {
                let kind = AlertKind::label_of(k);
                format!(
                    "{} {kind} ({})",
                    l.tag,
                    count(*n as usize, "alert", "alerts")
                )
            })
        })
        .collect();
    writeln!(out)?;
    wrapped(
        out,
        "Alerts raised: ",
        &if raised.is_empty() {
            "none".to_string()
        } else {
            raised.join(", ")
        },
        4,
        100,
    )?;
    let unreadable: usize = loops.iter().map(|l| l.unreadable).sum();
    if unreadable > 0 {
        writeln!(
            out,
            "({} could not be read back and {} left out.)",
            count(unreadable, "stored episode", "stored episodes"),
            if unreadable == 1 { "is" } else { "are" }
        )?;
    }
    files_and_next_steps(&facts.files, out)
}

/// 1234567 → "1,234,567".
pub fn thousands(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_get_thousands_separators() {
        assert_eq!(thousands(0), "0");
        assert_eq!(thousands(999), "999");
        assert_eq!(thousands(1_000), "1,000");
        assert_eq!(thousands(1_234_567), "1,234,567");
    }

    #[test]
    fn misses_name_each_reason_with_its_count() {
        let c = VerdictCounts {
            met: 3,
            tuning_limited: 1,
            actuator_limited: 7,
            unreachable: 1,
            inconclusive: 0,
        };
        assert_eq!(
            misses(&c),
            "1 tuning-limited, 7 actuator-limited, 1 unreachable"
        );
        assert_eq!(misses(&VerdictCounts::default()), "—");
    }

    #[test]
    fn met_reads_as_a_count_out_of_the_judged_changes() {
        let c = VerdictCounts {
            met: 3,
            tuning_limited: 1,
            actuator_limited: 0,
            unreachable: 0,
            inconclusive: 5,
        };
        assert_eq!(met_of_judged(&c), "3 of 4");
        assert_eq!(met_of_judged(&VerdictCounts::default()), "—");
        assert_eq!(settling(Some(f64::INFINITY)), "never");
        assert_eq!(settling(Some(14_400.0)), "4.0 h");
    }

    #[test]
    fn a_regulation_finding_is_an_oscillation_or_a_load_beyond_the_actuator() {
        use crate::analysis::regulation::{Cause, Disturbance, Oscillation};
        let units = Units {
            pv: "°C".into(),
            op: Units::DEFAULT_OP.into(),
        };
        let disturbance = |peak: f64, verdict| Disturbance {
            start_s: 1_000.0,
            end_s: 4_000.0,
            peak_deviation: peak,
            recovery_time_s: Some(3_000.0),
            op_at_limit_frac: 0.5,
            verdict,
            missed_spec: None,
        };
        let mut r = Regulation {
            oscillation: Oscillation {
                detected: false,
                period_s: None,
                amplitude: None,
                likely_cause: None,
                evidence: None,
            },
            disturbances: vec![disturbance(0.3, DisturbanceVerdict::Recovered)],
            time_at_limit_frac: Some(0.0),
            op_travel_per_h: Some(10.0),
            op_reversals_per_h: Some(5.0),
            min_variance_index: Some(0.5),
            pv_sd: Some(0.05),
            hold_band: Some(0.1),
            pv_noise_sd: Some(0.025),
            hold_hours: 20.0,
        };
        assert_eq!(regulation_finding(&r, &units), None, "held well");
        r.disturbances
            .push(disturbance(-3.5, DisturbanceVerdict::ActuatorLimited));
        let load = regulation_finding(&r, &units).expect("a finding");
        assert!(
            load.starts_with("Load disturbances: 2 (1 recovered, 1 actuator-limited).")
                && load.contains("Largest: -3.50 °C from SP")
                && load.ends_with("actuator-limited."),
            "{load}"
        );
        r.disturbances.clear();
        r.oscillation = Oscillation {
            detected: true,
            period_s: Some(61.0),
            amplitude: Some(3.4),
            likely_cause: Some(Cause::Tuning),
            evidence: Some("the period is 5.2 dead times".into()),
        };
        let cycling = regulation_finding(&r, &units).expect("a finding");
        assert!(
            cycling.starts_with("Oscillation: period") && cycling.contains("the tuning"),
            "{cycling}"
        );
    }
}
