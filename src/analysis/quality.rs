//! Data quality: what in a loop's record itself makes a verdict doubtful or impossible, found
//! from the data alone and said in words a person understands.
//!
//! A survey of the whole record ([`survey`]) finds:
//! - **irregular time stamps**: many intervals far from the usual one, as a historian that
//!   records by exception (a deadband or compression) writes them;
//! - **a quantised PV**: the PV takes values on a grid whose step may be coarse against the band;
//! - **an OP logged more coarsely than the PV**: the OP changes on far fewer samples than the PV
//!   while the loop acts;
//! - **frozen values**: a PV that repeats one value exactly while the OP works (a stuck
//!   transmitter or a link that repeats its last value), an OP that repeats one value away from
//!   its limits while the control error moves (a frozen output or a loop that is not in
//!   automatic);
//! - **a clipped PV**: a frozen PV at the largest or smallest value of the record, as a
//!   transmitter at the end of its range reads.
//!
//! Each [`Finding`] either downgrades the confidence of the verdicts it touches or makes a change
//! inconclusive ([`Effect`]). The thresholds are this product's own choices (common practice for
//! plant data, stated beside each), not published values.

use super::Series;
use super::setup::OpRange;
use super::stats::median_in_place;
use crate::units::{DISPLAY_DIGITS, human_duration, sig};
use serde::{Deserialize, Serialize};

/// What a finding does to the verdicts it touches.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Effect {
    /// The verdict stands, but its confidence is marginal.
    Downgrade,
    /// The change cannot be judged.
    Inconclusive,
}

/// One problem with the data.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Issue {
    /// The dead time is shorter than two sample periods: the model's dead time, and the bound
    /// built on it, rest on one or two samples.
    CoarseSampling { period_s: f64, dead_time_s: f64 },
    /// Many intervals between samples are far from the usual one.
    IrregularTimestamps {
        median_interval_s: f64,
        longest_interval_s: f64,
        /// Share of intervals outside half to one and a half times the median.
        irregular_fraction: f64,
    },
    /// The PV moves in steps of `step` (PV units), against a band of `band` (PV units).
    QuantisedPv { step: f64, band: f64 },
    /// The OP changes on far fewer samples than the PV: about one OP change per `ratio` PV
    /// changes.
    CoarseOp { ratio: f64 },
    /// The PV repeated one value from `start_s` to `end_s` while the OP moved.
    FrozenPv {
        start_s: f64,
        end_s: f64,
        value: f64,
    },
    /// The OP repeated one value away from its limits while the control error moved.
    FrozenOp {
        start_s: f64,
        end_s: f64,
        value: f64,
    },
    /// The PV sat at the end of its recorded range from `start_s` to `end_s`, as a transmitter at
    /// the end of its range reads.
    ClippedPv {
        start_s: f64,
        end_s: f64,
        value: f64,
    },
}

impl Issue {
    /// Whether the problem is with the PV record itself (and so touches every verdict, even one
    /// read from the PV alone), rather than with the OP or the model.
    pub fn about_pv(&self) -> bool {
        matches!(
            self,
            Issue::QuantisedPv { .. }
                | Issue::FrozenPv { .. }
                | Issue::ClippedPv { .. }
                | Issue::IrregularTimestamps { .. }
        )
    }
}

/// A problem and what it does to a verdict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Finding {
    #[serde(flatten)]
    pub issue: Issue,
    pub effect: Effect,
}

impl Finding {
    /// The finding in plain words, with units (`pv_unit` for PV values).
    pub fn describe(&self, pv_unit: &str) -> String {
        let unit = |u: &str| {
            if u.is_empty() {
                String::new()
            } else {
                format!(" {u}")
            }
        };
        let pv = unit(pv_unit);
        match &self.issue {
            Issue::CoarseSampling {
                period_s,
                dead_time_s,
            } => format!(
                "sampled every {} s, but the dead time is only {} s: the bound rests on one or \
                 two samples",
                sig(*period_s, DISPLAY_DIGITS),
                sig(*dead_time_s, DISPLAY_DIGITS)
            ),
            Issue::IrregularTimestamps {
                median_interval_s,
                longest_interval_s,
                irregular_fraction,
            } => format!(
                "irregular time stamps ({:.0} % of intervals far from the usual {} s, the \
                 longest {}), as a historian recording by exception writes them",
                irregular_fraction * 100.0,
                sig(*median_interval_s, DISPLAY_DIGITS),
                human_duration(*longest_interval_s)
            ),
            Issue::QuantisedPv { step, band } => format!(
                "the PV moves in steps of {step}{pv}, against a settling band of ±{}{pv}",
                sig(*band, DISPLAY_DIGITS)
            ),
            Issue::CoarseOp { ratio } if ratio.is_finite() => format!(
                "the OP is logged more coarsely than the PV (one OP change per {ratio:.0} PV \
                 changes)"
            ),
            Issue::CoarseOp { .. } => {
                "the OP never changed in the record while the PV did: it is not logged, or not \
                 logged where the loop acts"
                    .to_string()
            }
            Issue::FrozenPv {
                start_s,
                end_s,
                value,
            } => format!(
                "the PV stayed at exactly {value}{pv} for {} while the OP moved",
                human_duration(end_s - start_s)
            ),
            Issue::FrozenOp {
                start_s,
                end_s,
                value,
            } => format!(
                "the OP stayed at exactly {value} for {}, away from its limits, while the \
                 control error moved",
                human_duration(end_s - start_s)
            ),
            Issue::ClippedPv {
                start_s,
                end_s,
                value,
            } => format!(
                "the PV sat at {value}{pv}, the end of its recorded range, for {}: the \
                 transmitter may have been at the end of its range",
                human_duration(end_s - start_s)
            ),
        }
    }
}

/// A run of samples `[start, end]` (inclusive indices, times `start_s` to `end_s`) holding one
/// exact value.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Run {
    start: usize,
    end: usize,
    start_s: f64,
    end_s: f64,
    value: f64,
}

/// The loop-wide facts of one record, from which per-change findings are drawn.
#[derive(Debug, Clone, PartialEq)]
pub struct Survey {
    pub median_interval_s: f64,
    pub longest_interval_s: f64,
    pub irregular_fraction: f64,
    /// The PV's grid step, when its values lie on one.
    pub pv_step: Option<f64>,
    /// PV changes per OP change (∞ when the OP never changes while the PV does).
    pub op_coarseness: f64,
    /// Frozen PV runs, each with whether it sits at the record's extreme (clipped).
    frozen_pv: Vec<(Run, bool)>,
    frozen_op: Vec<Run>,
}

/// Intervals outside [1/2, 3/2] × the median count as irregular; a record is irregular when at
/// least this share of them are and the longest is at least 3 × the median (common practice for
/// exception-recorded historian data; this product's threshold).
const IRREGULAR_SHARE: f64 = 0.10;
/// A value repeated exactly on at least this many samples in a row is a run worth judging.
const MIN_FROZEN_SAMPLES: usize = 20;
/// A PV run is frozen when the OP moved at least this share of its span meanwhile.
const FROZEN_PV_OP_MOVE: f64 = 0.02;
/// An OP run is frozen when the control error moved by more than this many PV noise σ (plus one
/// grid step) meanwhile.
const FROZEN_OP_ERROR_MOVE_SIGMA: f64 = 10.0;
/// The OP counts as logged coarsely when the PV changes on this many times more samples.
const COARSE_OP_RATIO: f64 = 3.0;

/// Surveys a record. `op` is the actuator's range; `pv_noise_sd` the robust PV noise estimate.
pub fn survey(series: &Series, op: OpRange, pv_noise_sd: f64) -> Survey {
    let t = series.time_s();
    let (median_interval_s, longest_interval_s, irregular_fraction) = intervals(t);
    let pv_step = grid_step(series.pv());
    let op_coarseness = coarseness(series.pv(), series.op());
    let (lo, hi) = series
        .pv()
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let frozen_pv = runs(t, series.pv())
        .into_iter()
        .filter(|r| spread(&series.op()[r.start..=r.end]) >= FROZEN_PV_OP_MOVE * op.span())
        .map(|r| (r, r.value == lo || r.value == hi))
        .collect();
    let error_move = FROZEN_OP_ERROR_MOVE_SIGMA * pv_noise_sd + pv_step.unwrap_or(0.0);
    let frozen_op = runs(t, series.op())
        .into_iter()
        .filter(|r| {
            let at_limit = op.is_saturated(r.value);
            let error: Vec<f64> = (r.start..=r.end)
                .map(|i| series.sp()[i] - series.pv()[i])
                .collect();
            let auto = (r.start..=r.end).all(|i| series.is_auto(i));
            !at_limit && auto && spread(&error) > error_move
        })
        .collect();
    Survey {
        median_interval_s,
        longest_interval_s,
        irregular_fraction,
        pv_step,
        op_coarseness,
        frozen_pv,
        frozen_op,
    }
}

impl Survey {
    /// The findings that touch the samples `[start, end)` of a change whose settling band is
    /// `band` (PV units, half-width), for a model with dead time `dead_time_s` when known.
    pub fn findings(
        &self,
        start: usize,
        end: usize,
        band: f64,
        dead_time_s: Option<f64>,
    ) -> Vec<Finding> {
        let mut out = self.record_findings(band, dead_time_s);
        let last = end.saturating_sub(1);
        let overlaps = |r: &Run| r.start <= last && r.end >= start;
        for (r, at_end) in self.frozen_pv.iter().filter(|(r, _)| overlaps(r)) {
            let (start_s, end_s) = (r.start_s, r.end_s);
            let value = r.value;
            let issue = if *at_end {
                Issue::ClippedPv {
                    start_s,
                    end_s,
                    value,
                }
            } else {
                Issue::FrozenPv {
                    start_s,
                    end_s,
                    value,
                }
            };
            out.push(Finding {
                issue,
                effect: Effect::Inconclusive,
            });
        }
        for r in self.frozen_op.iter().filter(|r| overlaps(r)) {
            let (start_s, end_s) = (r.start_s, r.end_s);
            out.push(Finding {
                issue: Issue::FrozenOp {
                    start_s,
                    end_s,
                    value: r.value,
                },
                effect: Effect::Inconclusive,
            });
        }
        out
    }

    /// Findings about the whole record, for a change with band `band`.
    fn record_findings(&self, band: f64, dead_time_s: Option<f64>) -> Vec<Finding> {
        let mut out = Vec::new();
        if let Some(theta) = dead_time_s
            && theta < 2.0 * self.median_interval_s
        {
            out.push(Finding {
                issue: Issue::CoarseSampling {
                    period_s: self.median_interval_s,
                    dead_time_s: theta,
                },
                effect: Effect::Downgrade,
            });
        }
        if self.irregular_fraction >= IRREGULAR_SHARE
            && self.longest_interval_s >= 3.0 * self.median_interval_s
        {
            out.push(Finding {
                issue: Issue::IrregularTimestamps {
                    median_interval_s: self.median_interval_s,
                    longest_interval_s: self.longest_interval_s,
                    irregular_fraction: self.irregular_fraction,
                },
                effect: Effect::Downgrade,
            });
        }
        if let Some(step) = self.pv_step {
            // A grid step as wide as the band leaves the settling time to rounding; a third of
            // it already blurs the edge by a sample or more.
            let effect = if step >= band {
                Some(Effect::Inconclusive)
            } else if step >= band / 3.0 {
                Some(Effect::Downgrade)
            } else {
                None
            };
            if let Some(effect) = effect {
                out.push(Finding {
                    issue: Issue::QuantisedPv { step, band },
                    effect,
                });
            }
        }
        if self.op_coarseness >= COARSE_OP_RATIO {
            out.push(Finding {
                issue: Issue::CoarseOp {
                    ratio: self.op_coarseness,
                },
                effect: Effect::Downgrade,
            });
        }
        out
    }
}

/// Median and longest interval, and the share of intervals far from the median.
fn intervals(t: &[f64]) -> (f64, f64, f64) {
    if t.len() < 2 {
        return (f64::NAN, f64::NAN, 0.0);
    }
    let mut d: Vec<f64> = t.windows(2).map(|w| w[1] - w[0]).collect();
    let longest = d.iter().copied().fold(0.0, f64::max);
    let n = d.len() as f64;
    let median = median_in_place(&mut d);
    let irregular = d
        .iter()
        .filter(|&&x| x < 0.5 * median || x > 1.5 * median)
        .count() as f64
        / n;
    (median, longest, irregular)
}

/// The step of the grid the values lie on, if they lie on one: the median gap between distinct
/// values, accepted when nine in ten gaps are within a tenth of a whole multiple of it.
fn grid_step(values: &[f64]) -> Option<f64> {
    let mut distinct: Vec<f64> = values.to_vec();
    distinct.sort_by(f64::total_cmp);
    distinct.dedup();
    if distinct.len() < 3 {
        return None;
    }
    let mut gaps: Vec<f64> = distinct.windows(2).map(|w| w[1] - w[0]).collect();
    let step = median_in_place(&mut gaps);
    if step <= 0.0 {
        return None;
    }
    let on_grid = gaps
        .iter()
        .filter(|&&g| {
            let k = (g / step).round();
            k >= 1.0 && (g / step - k).abs() <= 0.1
        })
        .count();
    (on_grid as f64 >= 0.9 * gaps.len() as f64).then_some(step)
}

/// How many samples the PV changes on per sample the OP changes on.
fn coarseness(pv: &[f64], op: &[f64]) -> f64 {
    let changes = |v: &[f64]| v.windows(2).filter(|w| w[1] != w[0]).count();
    let (p, o) = (changes(pv), changes(op));
    if p == 0 {
        1.0
    } else if o == 0 {
        f64::INFINITY
    } else {
        p as f64 / o as f64
    }
}

/// Runs of at least [`MIN_FROZEN_SAMPLES`] exactly equal values.
fn runs(t: &[f64], v: &[f64]) -> Vec<Run> {
    let mut out = Vec::new();
    let mut start = 0;
    for i in 1..=v.len() {
        if i == v.len() || v[i] != v[start] {
            if i - start >= MIN_FROZEN_SAMPLES {
                out.push(Run {
                    start,
                    end: i - 1,
                    start_s: t[start],
                    end_s: t[i - 1],
                    value: v[start],
                });
            }
            start = i;
        }
    }
    out
}

fn spread(v: &[f64]) -> f64 {
    let (lo, hi) = v
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
            (a.min(x), b.max(x))
        });
    if v.is_empty() { 0.0 } else { hi - lo }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::sim::{LoopSim, LoopSimConfig, SimSample};

    /// Six hours of the simulated jacketed vessel, sampled every 2 s, with a few setpoint
    /// changes inside its reach.
    fn clean() -> Vec<SimSample> {
        let mut sim = LoopSim::new(LoopSimConfig::jacketed_vessel(100.0, 7));
        let schedule = [
            (1800.0, 55.0),
            (7200.0, 52.0),
            (12600.0, 58.0),
            (18000.0, 54.0),
        ];
        sim.run(&schedule, 21600.0, 2.0)
    }

    fn series(samples: &[SimSample]) -> Series {
        crate::analysis::sim::series(samples, 0.0)
    }

    const OP: OpRange = OpRange::DEFAULT;
    /// ±2 % of a 5 °C change.
    const BAND: f64 = 0.1;

    fn findings(samples: &[SimSample]) -> Vec<Finding> {
        let s = series(samples);
        let noise = crate::analysis::assess::pv_noise_sd(s.pv());
        survey(&s, OP, noise).findings(0, s.len(), BAND, Some(30.0))
    }

    fn kinds(f: &[Finding]) -> Vec<&'static str> {
        f.iter()
            .map(|f| match f.issue {
                Issue::CoarseSampling { .. } => "coarse_sampling",
                Issue::IrregularTimestamps { .. } => "irregular_timestamps",
                Issue::QuantisedPv { .. } => "quantised_pv",
                Issue::CoarseOp { .. } => "coarse_op",
                Issue::FrozenPv { .. } => "frozen_pv",
                Issue::FrozenOp { .. } => "frozen_op",
                Issue::ClippedPv { .. } => "clipped_pv",
            })
            .collect()
    }

    #[test]
    fn a_clean_record_has_no_findings() {
        assert_eq!(kinds(&findings(&clean())), Vec::<&str>::new());
    }

    #[test]
    fn a_pv_on_a_coarse_grid_is_found_and_weighed_against_the_band() {
        for (step, effect) in [
            (0.05, Some(Effect::Downgrade)),
            (0.2, Some(Effect::Inconclusive)),
        ] {
            let mut s = clean();
            for x in &mut s {
                x.pv = (x.pv / step).round() * step;
            }
            let f = findings(&s);
            let q = f
                .iter()
                .find(|f| matches!(f.issue, Issue::QuantisedPv { .. }))
                .map(|f| f.effect);
            assert_eq!(q, effect, "step {step}: {f:?}");
        }
        // A fine grid far below the band is no finding.
        let mut s = clean();
        for x in &mut s {
            x.pv = (x.pv / 0.001).round() * 0.001;
        }
        assert!(!kinds(&findings(&s)).contains(&"quantised_pv"));
    }

    #[test]
    fn an_op_logged_every_fifth_sample_is_found() {
        let mut s = clean();
        let mut held = s[0].op;
        for (i, x) in s.iter_mut().enumerate() {
            if i % 5 == 0 {
                held = x.op;
            }
            x.op = held;
        }
        assert!(kinds(&findings(&s)).contains(&"coarse_op"));
    }

    #[test]
    fn a_pv_that_stops_changing_while_the_op_works_is_frozen() {
        let mut s = clean();
        // A link that repeats the last PV for ten minutes from the first change on.
        let from = s.iter().position(|x| x.time_s >= 1800.0).unwrap();
        let value = s[from].pv;
        for x in &mut s[from..from + 300] {
            x.pv = value;
        }
        let f = findings(&s);
        let frozen = f
            .iter()
            .find(|f| matches!(f.issue, Issue::FrozenPv { .. }))
            .expect("found");
        assert_eq!(frozen.effect, Effect::Inconclusive);
        assert!(frozen.describe("°C").contains("°C"));
        // A change whose window does not touch the run is not affected by it.
        let sr = series(&s);
        let later = sr.time_s().iter().position(|&t| t >= 7200.0).unwrap();
        let survey = survey(&sr, OP, 0.02);
        assert!(!kinds(&survey.findings(later, sr.len(), BAND, None)).contains(&"frozen_pv"));
    }

    #[test]
    fn a_pv_held_at_the_top_of_its_range_is_clipped() {
        let mut s = clean();
        // The transmitter ends at 56.5 °C: the change to 58 reads flat at the range end.
        for x in &mut s {
            x.pv = x.pv.min(56.5);
        }
        let f = findings(&s);
        assert!(kinds(&f).contains(&"clipped_pv"), "{f:?}");
    }

    #[test]
    fn an_op_frozen_away_from_its_limits_while_the_error_moves_is_found() {
        let mut s = clean();
        let from = s.iter().position(|x| x.time_s >= 1800.0).unwrap();
        let value = s[from].op;
        for x in &mut s[from..from + 200] {
            x.op = value;
        }
        assert!(kinds(&findings(&s)).contains(&"frozen_op"));
    }

    #[test]
    fn an_op_resting_at_its_limit_is_not_frozen() {
        let mut s = clean();
        let from = s.iter().position(|x| x.time_s >= 1800.0).unwrap();
        for x in &mut s[from..from + 200] {
            x.op = 100.0;
        }
        assert!(!kinds(&findings(&s)).contains(&"frozen_op"));
    }

    #[test]
    fn exception_recorded_time_stamps_are_irregular() {
        // Keep a sample only when the PV moved by more than a deadband since the last kept one,
        // or after ten minutes at the most, as an exception-recording historian does.
        let s = clean();
        let mut kept = vec![s[0]];
        for x in &s[1..] {
            let last = kept.last().unwrap();
            if (x.pv - last.pv).abs() > 0.05 || x.time_s - last.time_s >= 600.0 {
                kept.push(*x);
            }
        }
        assert!(kinds(&findings(&kept)).contains(&"irregular_timestamps"));
    }

    #[test]
    fn a_dead_time_under_two_samples_downgrades() {
        let s = series(&clean());
        let survey = survey(&s, OP, 0.02);
        let f = survey.findings(0, s.len(), BAND, Some(3.0));
        assert_eq!(
            f.iter()
                .find(|f| matches!(f.issue, Issue::CoarseSampling { .. }))
                .map(|f| f.effect),
            Some(Effect::Downgrade)
        );
        assert!(survey.findings(0, s.len(), BAND, Some(4.0)).is_empty());
    }

    #[test]
    fn an_op_that_never_changed_is_described_without_an_infinite_ratio() {
        let f = Finding {
            issue: Issue::CoarseOp {
                ratio: f64::INFINITY,
            },
            effect: Effect::Downgrade,
        };
        let words = f.describe("");
        assert!(words.contains("never changed"), "{words}");
        assert!(!words.contains("inf"), "{words}");
    }
}
