//! A loop's regulation section: how it held its setpoint between changes over the period, from
//! the analysis core's [`Regulation`] of the period's stored samples, with the largest load
//! disturbances and the routine figures of each trend week.
//!
//! Pure: the core's results in ([`RegulationRun`], one per period, made by
//! [`super::reanalysis`]), the section out. Every sentence comes from
//! [`crate::analysis::regulation::words`]; this module only picks, counts and orders.

use super::period::{Period, local};
use super::trend::{WeekRow, collapse};
use crate::analysis::regulation::{Disturbance, DisturbanceCounts, Regulation, words};
use crate::units::{Units, s_to_ms};
use jiff::tz::TimeZone;
use serde::Serialize;

/// Disturbances listed per loop: the largest few, enough to see whether the worst is typical.
pub const LARGEST_DISTURBANCES: usize = 5;

/// The regulation analysis of one loop over one period.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RegulationRun {
    /// The core's figures over the period's holds, as `analyze --json` carries them (DESIGN.md,
    /// "Regulation"): the routine figures, the oscillation and every disturbance.
    #[serde(flatten)]
    pub regulation: Regulation,
    /// The dead time the minimum-variance index used (s): the model in force at the period's
    /// end, else the one identified from the period's own data; `None` without either.
    pub dead_time_s: Option<f64>,
}

/// How the loop held its setpoint between changes this period: the core's figures with the
/// names of `analyze --json`'s `regulation`, and what people read of them.
#[derive(Debug, Clone, Serialize)]
pub struct RegulationSection {
    #[serde(flatten)]
    pub run: RegulationRun,
    /// The disturbances of the period by verdict.
    pub disturbance_counts: DisturbanceCounts,
    /// The spec's time to recover from a disturbance, when it sets one.
    pub recover_within_s: Option<f64>,
    /// The largest disturbances by peak deviation, largest first; the first is the one plotted.
    pub largest_disturbances: Vec<DisturbanceRow>,
    /// The findings as `analyze` prints them.
    pub lines: Vec<String>,
    /// The routine figures of each trend week, oldest first; the last is this period.
    pub trend: Vec<RegulationWeek>,
    /// The same for people: weeks without samples run together into one line.
    pub trend_rows: Vec<RegulationRow>,
}

/// One listed disturbance: the core's numbers, its local time and its words.
#[derive(Debug, Clone, Serialize)]
pub struct DisturbanceRow {
    /// As the core gives it (times in seconds since the epoch).
    #[serde(flatten)]
    pub disturbance: Disturbance,
    /// When the PV left the hold band, RFC 3339 in the report's time zone.
    pub start: String,
    /// The verdict as people read it.
    pub verdict_words: &'static str,
    /// The whole disturbance in words, with units.
    pub words: String,
}

/// The routine regulation figures of one trend week.
#[derive(Debug, Clone, Serialize)]
pub struct RegulationWeek {
    pub label: String,
    /// How the week reads at the start and the end of a run of weeks ([`Period::ends`]).
    #[serde(skip)]
    pub ends: (String, String),
    /// Whether the week's samples were analysed (false: none stored).
    pub analysed: bool,
    pub hold_hours: f64,
    pub pv_sd: Option<f64>,
    pub hold_band: Option<f64>,
    pub time_at_limit_frac: Option<f64>,
    pub op_travel_per_h: Option<f64>,
    pub op_reversals_per_h: Option<f64>,
    pub min_variance_index: Option<f64>,
    /// The oscillation's period when one was detected that week.
    pub oscillation_period_s: Option<f64>,
    pub disturbances: usize,
    pub actuator_limited: usize,
}

/// One line of the regulation trend for people: an analysed week, or a run of weeks without
/// samples in words.
pub type RegulationRow = WeekRow<RegulationWeek>;

/// Why a loop has no regulation section.
pub(super) const NOT_CONFIGURED: &str =
    "not analysed: the loop's spec and OP range are not known (no configuration for it)";
pub(super) const NO_SAMPLES: &str =
    "not analysed: the store holds no samples of this loop for the period";

/// The section over the last of `periods`, from `runs` (one per period, `None` for a period
/// without samples; empty when the loop was not analysed). Returns the section, or why there
/// is none.
pub(super) fn section(
    runs: &[Option<RegulationRun>],
    periods: &[Period],
    recover_within_s: Option<f64>,
    units: &Units,
    tz: &TimeZone,
) -> Result<RegulationSection, &'static str> {
    let Some(last) = runs.last() else {
        return Err(NOT_CONFIGURED);
    };
    let run = last.as_ref().ok_or(NO_SAMPLES)?;
    let r = &run.regulation;
    let trend: Vec<RegulationWeek> = periods
        .iter()
        .zip(runs)
        .map(|(p, run)| week(p, run.as_ref()))
        .collect();
    Ok(RegulationSection {
        disturbance_counts: DisturbanceCounts::of(&r.disturbances),
        recover_within_s,
        largest_disturbances: largest(&r.disturbances, LARGEST_DISTURBANCES)
            .into_iter()
            .map(|d| row(d, units, tz))
            .collect(),
        lines: words::lines(r, units, run.dead_time_s),
        trend_rows: rows(&trend),
        trend,
        run: run.clone(),
    })
}

/// The `n` largest disturbances by |peak deviation|, largest first. Among equal peaks the later
/// comes first, so the first is [`words::worst`]'s pick (it keeps the last of equal maxima).
pub(super) fn largest(list: &[Disturbance], n: usize) -> Vec<&Disturbance> {
    let mut sorted: Vec<&Disturbance> = list.iter().collect();
    sorted.sort_by(|a, b| {
        b.peak_deviation
            .abs()
            .total_cmp(&a.peak_deviation.abs())
            .then(b.start_s.total_cmp(&a.start_s))
    });
    sorted.truncate(n);
    sorted
}

fn row(d: &Disturbance, units: &Units, tz: &TimeZone) -> DisturbanceRow {
    DisturbanceRow {
        start: local(s_to_ms(d.start_s), tz),
        verdict_words: d.verdict.label(),
        words: words::disturbance(d, units),
        disturbance: d.clone(),
    }
}

/// The trend's weeks for people, each run of weeks without samples in one line.
fn rows(weeks: &[RegulationWeek]) -> Vec<RegulationRow> {
    collapse(
        weeks,
        |w| !w.analysed,
        |w| (&w.label, &w.ends),
        "no samples stored",
    )
}

fn week(p: &Period, run: Option<&RegulationRun>) -> RegulationWeek {
    let r = run.map(|run| &run.regulation);
    let counts = r.map(|r| DisturbanceCounts::of(&r.disturbances));
    RegulationWeek {
        label: p.label.clone(),
        ends: p.ends(),
        analysed: r.is_some(),
        hold_hours: r.map_or(0.0, |r| r.hold_hours),
        pv_sd: r.and_then(|r| r.pv_sd),
        hold_band: r.and_then(|r| r.hold_band),
        time_at_limit_frac: r.and_then(|r| r.time_at_limit_frac),
        op_travel_per_h: r.and_then(|r| r.op_travel_per_h),
        op_reversals_per_h: r.and_then(|r| r.op_reversals_per_h),
        min_variance_index: r.and_then(|r| r.min_variance_index),
        oscillation_period_s: r
            .filter(|r| r.oscillation.detected)
            .and_then(|r| r.oscillation.period_s),
        disturbances: counts.map_or(0, |c| c.total),
        actuator_limited: counts.map_or(0, |c| c.actuator_limited),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::regulation::{Cause, DisturbanceVerdict, Oscillation, RecoveryLimit};

    fn disturbance(start_s: f64, peak: f64, verdict: DisturbanceVerdict) -> Disturbance {
        Disturbance {
            start_s,
            end_s: start_s + 300.0,
            peak_deviation: peak,
            recovery_time_s: (verdict == DisturbanceVerdict::Recovered).then_some(240.0),
            op_at_limit_frac: if verdict == DisturbanceVerdict::ActuatorLimited {
                0.8
            } else {
                0.0
            },
            verdict,
            missed_spec: (verdict == DisturbanceVerdict::ActuatorLimited)
                .then_some(RecoveryLimit::ActuatorLimited),
        }
    }

    fn regulation(disturbances: Vec<Disturbance>, cycling: bool) -> Regulation {
        Regulation {
            oscillation: Oscillation {
                detected: cycling,
                period_s: cycling.then_some(120.0),
                amplitude: cycling.then_some(0.8),
                likely_cause: cycling.then_some(Cause::Tuning),
                evidence: cycling.then(|| "the period is 4.0 dead times".to_owned()),
            },
            disturbances,
            time_at_limit_frac: Some(0.1),
            op_travel_per_h: Some(250.0),
            op_reversals_per_h: Some(30.0),
            min_variance_index: Some(0.4),
            pv_sd: Some(0.3),
            hold_band: Some(0.2),
            pv_noise_sd: Some(0.05),
            hold_hours: 100.0,
        }
    }

    fn periods(n: usize) -> Vec<Period> {
        Period::parse_week("2026-W48", &TimeZone::UTC)
            .unwrap()
            .with_earlier(n)
            .unwrap()
    }

    fn units() -> Units {
        Units {
            pv: "°C".into(),
            op: "%".into(),
        }
    }

    #[test]
    fn the_largest_disturbances_come_first_and_the_first_is_the_worst() {
        use DisturbanceVerdict::*;
        let list = vec![
            disturbance(100.0, 0.5, Recovered),
            disturbance(200.0, -2.0, ActuatorLimited),
            disturbance(300.0, 1.0, Recovered),
            disturbance(400.0, 2.0, NotRecovered),
            disturbance(500.0, 0.7, Inconclusive),
        ];
        let top: Vec<f64> = largest(&list, 3).iter().map(|d| d.start_s).collect();
        // |−2.0| and 2.0 tie: the later one first, as the core's own pick of the worst.
        assert_eq!(top, [400.0, 200.0, 300.0]);
        assert_eq!(words::worst(&list).unwrap().start_s, top[0]);
        assert_eq!(
            DisturbanceCounts::of(&list),
            DisturbanceCounts {
                total: 5,
                recovered: 2,
                actuator_limited: 1,
                not_recovered: 1,
                inconclusive: 1,
                missed_spec: 1,
            }
        );
    }

    #[test]
    fn the_section_takes_the_last_period_and_each_week_its_routine_figures() {
        let p = periods(3);
        let run = |cycling: bool, list: Vec<Disturbance>| RegulationRun {
            regulation: regulation(list, cycling),
            dead_time_s: Some(30.0),
        };
        // 2026-11-25 08:00 UTC, the Wednesday of W48.
        let t = 1_795_593_600.0;
        let runs = vec![
            Some(run(true, Vec::new())),
            None,
            Some(run(
                false,
                vec![disturbance(t, 1.5, DisturbanceVerdict::ActuatorLimited)],
            )),
        ];
        let s = section(&runs, &p, Some(600.0), &units(), &TimeZone::UTC).unwrap();
        assert_eq!(&s.run, runs[2].as_ref().unwrap());
        assert_eq!(s.recover_within_s, Some(600.0));
        assert_eq!(s.disturbance_counts.actuator_limited, 1);
        let d = &s.largest_disturbances[0];
        assert_eq!(d.start, "2026-11-25T08:00:00+00:00");
        assert_eq!(d.verdict_words, "actuator-limited");
        assert!(d.words.contains("+1.50 °C"), "{}", d.words);
        assert_eq!(
            s.lines,
            words::lines(&runs[2].as_ref().unwrap().regulation, &units(), Some(30.0))
        );
        let labels: Vec<&str> = s.trend.iter().map(|w| w.label.as_str()).collect();
        assert_eq!(labels, ["2026-W46", "2026-W47", "2026-W48"]);
        assert_eq!(s.trend[0].oscillation_period_s, Some(120.0));
        assert!(!s.trend[1].analysed);
        assert_eq!(s.trend[1].op_travel_per_h, None);
        assert_eq!(
            (s.trend[2].disturbances, s.trend[2].actuator_limited),
            (1, 1)
        );
        assert_eq!(s.trend[2].min_variance_index, Some(0.4));
        let quiet: Vec<Option<&str>> = s.trend_rows.iter().map(|r| r.quiet.as_deref()).collect();
        assert_eq!(quiet, [None, Some("no samples stored in 2026-W47"), None]);
    }

    #[test]
    fn without_a_run_the_section_says_why() {
        let p = periods(2);
        let tz = TimeZone::UTC;
        assert_eq!(
            section(&[], &p, None, &units(), &tz).unwrap_err(),
            NOT_CONFIGURED
        );
        let runs = vec![
            Some(RegulationRun {
                regulation: regulation(Vec::new(), false),
                dead_time_s: None,
            }),
            None,
        ];
        assert_eq!(
            section(&runs, &p, None, &units(), &tz).unwrap_err(),
            NO_SAMPLES
        );
    }
}
