//! The verdict of one setpoint change, decided from its facts, and the sentence that explains it.
//!
//! The decision ([`decide`]) is pure and reads only [`Facts`]: when the change settled, its
//! overshoot, how long its window ran and why it ended, the band against the PV noise, and — with
//! a model — the actuator's reach and the fastest settling it allows (t*). In order:
//!
//! 1. `inconclusive` when the settling band lies inside the PV noise (3σ of the smoothed PV
//!    exceeds the band's half-width);
//! 2. `inconclusive` when the window was interrupted before the spec time (next change, data gap,
//!    manual, end of data) and the overshoot is within spec — only an overshoot beyond spec is
//!    already a miss;
//! 3. `met` when it settled within the spec time (a settling time equal to the spec time meets
//!    it) with the overshoot within spec (equal to the limit is within);
//! 4. otherwise it missed: `inconclusive` without a model; `unreachable` when the distance to go
//!    exceeds the reach (equal is reachable); `actuator_limited` when t* is slower than the spec
//!    time; else `tuning_limited` (t* equal to the spec time leaves the miss to the tuning).
//!
//! [`explain`] words the decision for people; it never changes it.

use super::quality::Finding;
use super::segment::{ChangeShape, WindowEnd};
use super::setup::{Spec, Units};
use super::trust::{Confidence, Experiment};
use crate::units::quantity;
use serde::{Deserialize, Serialize};

/// The outcome of one setpoint change.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    Met,
    TuningLimited,
    ActuatorLimited,
    Unreachable,
    Inconclusive,
}

impl Verdict {
    pub const ALL: [Verdict; 5] = [
        Verdict::Met,
        Verdict::TuningLimited,
        Verdict::ActuatorLimited,
        Verdict::Unreachable,
        Verdict::Inconclusive,
    ];

    /// The verdict as JSON spells it: `met`, `tuning_limited`, `actuator_limited`,
    /// `unreachable`, `inconclusive`.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Met => "met",
            Verdict::TuningLimited => "tuning_limited",
            Verdict::ActuatorLimited => "actuator_limited",
            Verdict::Unreachable => "unreachable",
            Verdict::Inconclusive => "inconclusive",
        }
    }

    /// The verdict as people read it (tables, reports, alerts, logs): `met`, `tuning-limited`,
    /// `actuator-limited`, `unreachable`, `inconclusive`. JSON keeps [`Verdict::as_str`].
    pub fn label(self) -> &'static str {
        match self {
            Verdict::Met => "met",
            Verdict::TuningLimited => "tuning-limited",
            Verdict::ActuatorLimited => "actuator-limited",
            Verdict::Unreachable => "unreachable",
            Verdict::Inconclusive => "inconclusive",
        }
    }

    /// Whether the episode missed its spec for a known reason.
    pub fn is_miss(self) -> bool {
        matches!(
            self,
            Verdict::TuningLimited | Verdict::ActuatorLimited | Verdict::Unreachable
        )
    }

    /// Whether the miss lies with the actuator (unreachable or actuator-limited).
    pub fn is_actuator_miss(self) -> bool {
        matches!(self, Verdict::Unreachable | Verdict::ActuatorLimited)
    }
}

/// Everything known about one setpoint change. Field names are a contract (JSON output); the
/// store keeps it as that JSON and reads it back (`Deserialize`) for reports and summaries.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EpisodeResult {
    /// Time of the change (t0), on the data's time axis (s).
    pub start_s: f64,
    /// Time of the last sample of the window (s).
    pub end_s: f64,
    pub sp_from: f64,
    pub sp_to: f64,
    pub shape: ChangeShape,
    pub window_end: WindowEnd,
    pub samples: usize,
    pub settling_time_s: Option<f64>,
    pub overshoot_pct: f64,
    pub rise_time_s: Option<f64>,
    /// ∫|SP − PV| dt / |Δ| over the window (s).
    pub iae_per_delta_s: f64,
    pub saturation_duty: f64,
    /// Samples of PV averaged (centred) before scoring, to keep noise from deciding the settling
    /// time; 1 = scored on the raw PV.
    pub pv_smoothing_samples: usize,
    /// Mean OP just before the change: the operating point.
    pub op_start: f64,
    /// OP distance to the limit in the direction the change needs.
    pub op_headroom: f64,
    /// The OP value furthest in the needed direction during the window.
    pub peak_op: f64,
    /// The fastest possible settling time under the OP limit; `None` without a model or when the
    /// setpoint is unreachable.
    pub min_settling_time_s: Option<f64>,
    /// |K|·headroom: the largest change the actuator can hold from this operating point.
    pub reach: Option<f64>,
    /// The OP limit that would make t* equal the spec time; `None` without a model or when the
    /// spec time is not longer than the dead time.
    pub required_op_limit: Option<f64>,
    /// The OP capacity needed as a multiple of today's (1.0 = today's is just enough).
    pub capacity_ratio: Option<f64>,
    pub verdict: Verdict,
    /// One sentence on why this verdict.
    pub reason: String,
    /// The PV at the change, read from the samples just before it: where t* starts from (after
    /// an unreachable change, the saturated plateau rather than `sp_from`). `None` in results
    /// stored before it was recorded.
    #[serde(default)]
    pub start_pv: Option<f64>,
    /// Whether the PV was still moving at the change.
    #[serde(default)]
    pub pv_moving: bool,
    /// How sure a conclusive verdict is; `None` for an inconclusive one.
    #[serde(default)]
    pub confidence: Option<Confidence>,
    /// Why a verdict is marginal, in words (empty when clear).
    #[serde(default)]
    pub confidence_reasons: Vec<String>,
    /// t* over the model's plausible variants (10th to 90th percentile, s); `None` without a
    /// model, or when some plausible variant cannot reach the setpoint.
    #[serde(default)]
    pub min_settling_time_range_s: Option<[f64; 2]>,
    /// The actuator's reach over the same variants (PV units).
    #[serde(default)]
    pub reach_range: Option<[f64; 2]>,
    /// The capacity ratio over the same variants.
    #[serde(default)]
    pub capacity_ratio_range: Option<[f64; 2]>,
    /// The change settled faster than the model's bound for it: the model is wrong for this
    /// change, so no bound is reported and it is never `actuator_limited`.
    #[serde(default)]
    pub bound_beaten: bool,
    /// What in the data makes this change doubtful or unjudgeable.
    #[serde(default)]
    pub quality: Vec<Finding>,
    /// For a marginal verdict the model could decide, the setpoint step that would.
    #[serde(default)]
    pub deciding_step: Option<Experiment>,
}

impl EpisodeResult {
    /// Whether the verdict is conclusive but marginal.
    pub fn is_marginal(&self) -> bool {
        self.confidence == Some(Confidence::Marginal)
    }
}

/// Counts of episodes by verdict.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize)]
pub struct VerdictCounts {
    pub met: usize,
    pub tuning_limited: usize,
    pub actuator_limited: usize,
    pub unreachable: usize,
    pub inconclusive: usize,
}

impl VerdictCounts {
    /// Changes with a verdict other than inconclusive.
    pub fn conclusive(&self) -> usize {
        self.met + self.tuning_limited + self.actuator_limited + self.unreachable
    }

    /// The changes that met the spec as a share of the conclusive ones; `None` without any.
    pub fn met_share(&self) -> Option<f64> {
        let conclusive = self.conclusive();
        (conclusive > 0).then(|| self.met as f64 / conclusive as f64)
    }

    pub fn of(episodes: &[EpisodeResult]) -> VerdictCounts {
        let mut c = VerdictCounts::default();
        for e in episodes {
            *c.slot(e.verdict) += 1;
        }
        c
    }

    /// The count of one verdict.
    pub fn get(&self, v: Verdict) -> usize {
        let mut c = *self;
        *c.slot(v)
    }

    /// Every verdict with its count, for people: `0 met, 10 tuning-limited, 1 actuator-limited,
    /// 1 unreachable, 0 inconclusive`.
    pub fn tally(&self) -> String {
        let parts: Vec<String> = Verdict::ALL
            .iter()
            .map(|v| format!("{} {}", self.get(*v), v.label()))
            .collect();
        parts.join(", ")
    }

    /// The given verdicts that occurred, with their counts, e.g. `["7 actuator-limited",
    /// "1 unreachable"]`.
    pub fn occurring(&self, verdicts: &[Verdict]) -> Vec<String> {
        verdicts
            .iter()
            .filter(|v| self.get(**v) > 0)
            .map(|v| format!("{} {}", self.get(*v), v.label()))
            .collect()
    }

    fn slot(&mut self, v: Verdict) -> &mut usize {
        match v {
            Verdict::Met => &mut self.met,
            Verdict::TuningLimited => &mut self.tuning_limited,
            Verdict::ActuatorLimited => &mut self.actuator_limited,
            Verdict::Unreachable => &mut self.unreachable,
            Verdict::Inconclusive => &mut self.inconclusive,
        }
    }
}

/// What the process model says the actuator allows for one change.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Capability {
    /// R = |K|·headroom: the largest change the actuator can hold from the operating point.
    pub reach: f64,
    /// t*: the fastest settling with the OP held at its limit; `None` beyond the reach.
    pub fastest_s: Option<f64>,
}

/// The facts one verdict is decided from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Facts {
    /// When the PV entered the band for good, after the change; `None` if it never did.
    pub settling_time_s: Option<f64>,
    /// Overshoot as a percentage of |Δ|.
    pub overshoot_pct: f64,
    /// How long the window ran after the change (s).
    pub covered_s: f64,
    /// Why the window ended.
    pub window_end: WindowEnd,
    /// |Δ|: the distance the PV had to go.
    pub distance: f64,
    /// Half-width of the settling band in PV units (band fraction × |Δ|).
    pub band_abs: f64,
    /// PV noise (σ) left after the smoothing the change was scored with.
    pub residual_noise: f64,
    /// What the actuator allows; `None` without a usable process model.
    pub capability: Option<Capability>,
    /// A data-quality finding about the PV makes the change unjudgeable.
    pub pv_unfit: bool,
    /// A data-quality finding about the OP makes the change unjudgeable unless it met the spec
    /// (a verdict read from the PV alone).
    pub op_unfit: bool,
}

impl Facts {
    /// Whether the change settled faster than the model's bound for it (or settled at all when
    /// the model puts the setpoint beyond reach): the model is wrong for this change.
    pub fn beats_bound(&self) -> bool {
        match (self.settling_time_s, self.capability) {
            (Some(ts), Some(c)) => c.fastest_s.is_none_or(|t| ts < t),
            _ => false,
        }
    }
}

/// How a missed change missed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Miss {
    /// Settled, but after the spec time.
    SettledLate { settling_time_s: f64 },
    /// Never entered the band for good within the window.
    NeverSettled,
    /// Settled in time, but overshot beyond the spec.
    Overshoot,
}

/// The ground of a verdict: which rule decided it, with the facts that rule read.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Ground {
    /// The settling band lies inside the PV noise: the change is too small to score.
    BandInsideNoise,
    /// The window ended before the spec time, and the overshoot so far is within spec.
    CutShort,
    /// Settled within the spec time, overshoot within spec.
    Settled { settling_time_s: f64 },
    /// Missed, and there is no process model to tell tuning from actuator.
    NoModel(Miss),
    /// Missed; the distance to go exceeds the actuator's reach.
    BeyondReach(Miss, Capability),
    /// Missed; even with the OP at its limit the fastest settling t* is slower than the spec.
    TooSlowAtLimit(Miss, f64),
    /// Missed although the actuator allows settling in t* within the spec.
    RoomToSpare(Miss, f64),
    /// Missed, but settled faster than the model's bound (`None`: the model said the setpoint
    /// was beyond reach): the model is wrong for this change.
    BoundBeaten(Miss, Option<f64>),
    /// The data around the change cannot be trusted to score it (the finding, in words).
    DataUnfit,
}

impl Ground {
    /// The verdict this ground gives.
    pub fn verdict(self) -> Verdict {
        match self {
            Ground::BandInsideNoise
            | Ground::CutShort
            | Ground::NoModel(_)
            | Ground::BoundBeaten(..)
            | Ground::DataUnfit => Verdict::Inconclusive,
            Ground::Settled { .. } => Verdict::Met,
            Ground::BeyondReach(..) => Verdict::Unreachable,
            Ground::TooSlowAtLimit(..) => Verdict::ActuatorLimited,
            Ground::RoomToSpare(..) => Verdict::TuningLimited,
        }
    }
}

/// A decided verdict with its ground.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Judgement {
    pub ground: Ground,
}

impl Judgement {
    /// The verdict its ground gives.
    pub fn verdict(&self) -> Verdict {
        self.ground.verdict()
    }
}

/// Decides the verdict of one change from its facts against the spec (the rules in the module
/// documentation).
pub fn decide(f: &Facts, spec: &Spec) -> Judgement {
    let ground = ground(f, spec);
    Judgement { ground }
}

fn ground(f: &Facts, spec: &Spec) -> Ground {
    if f.pv_unfit {
        return Ground::DataUnfit;
    }
    let settled_in_time = f
        .settling_time_s
        .is_some_and(|ts| ts <= spec.settle_within_s);
    let overshoot_ok = spec
        .max_overshoot_pct
        .is_none_or(|mx| f.overshoot_pct <= mx);
    if 3.0 * f.residual_noise > f.band_abs {
        return Ground::BandInsideNoise;
    }
    if f.covered_s < spec.settle_within_s && f.window_end.interrupts() && overshoot_ok {
        return Ground::CutShort;
    }
    if settled_in_time && overshoot_ok {
        return Ground::Settled {
            settling_time_s: f.settling_time_s.unwrap_or(0.0),
        };
    }
    let miss = if settled_in_time {
        Miss::Overshoot
    } else {
        match f.settling_time_s {
            Some(settling_time_s) => Miss::SettledLate { settling_time_s },
            None => Miss::NeverSettled,
        }
    };
    if f.op_unfit {
        return Ground::DataUnfit;
    }
    let Some(c) = f.capability else {
        return Ground::NoModel(miss);
    };
    if f.beats_bound() {
        return Ground::BoundBeaten(miss, c.fastest_s);
    }
    if f.distance > c.reach || c.fastest_s.is_none() {
        return Ground::BeyondReach(miss, c);
    }
    let fastest = c.fastest_s.unwrap_or(f64::INFINITY);
    if fastest > spec.settle_within_s {
        Ground::TooSlowAtLimit(miss, fastest)
    } else {
        Ground::RoomToSpare(miss, fastest)
    }
}

/// What the explanation quotes besides the facts the verdict was decided from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Context<'a> {
    /// The PV noise estimated around the change (σ, before smoothing).
    pub pv_noise_sd: f64,
    /// The operating point: mean OP just before the change.
    pub op_start: f64,
    /// The data-quality problem that makes the change unjudgeable, in words.
    pub data_problem: Option<&'a str>,
    /// The units people read the loop's numbers in.
    pub units: &'a Units,
}

/// One sentence on why the change got its verdict.
pub fn explain(j: &Judgement, f: &Facts, spec: &Spec, cx: &Context) -> String {
    let spec_s = secs(spec.settle_within_s);
    match j.ground {
        Ground::BandInsideNoise => format!(
            "the settling band (±{}) lies inside the PV noise (σ ≈ {}): the change is too small \
             to score",
            quantity(f.band_abs, &cx.units.pv),
            quantity(cx.pv_noise_sd, &cx.units.pv)
        ),
        Ground::CutShort => format!(
            "the window ended ({}) {} after the change, before the spec time of {spec_s}",
            end_phrase(f.window_end),
            secs(f.covered_s),
        ),
        Ground::Settled { settling_time_s } => {
            format!("settled in {} (spec {spec_s})", secs(settling_time_s))
        }
        Ground::NoModel(miss) => format!(
            "{}; no usable process model to tell tuning from actuator",
            miss_phrase(miss, f, spec)
        ),
        Ground::BeyondReach(miss, c) => format!(
            "{}; the change of {} exceeds the actuator's reach of {} from OP {}",
            miss_phrase(miss, f, spec),
            quantity(f.distance, &cx.units.pv),
            quantity(c.reach, &cx.units.pv),
            quantity(cx.op_start, &cx.units.op)
        ),
        Ground::TooSlowAtLimit(miss, fastest) => format!(
            "{}; even with the OP held at its limit the fastest settling is {}",
            miss_phrase(miss, f, spec),
            secs(fastest)
        ),
        Ground::RoomToSpare(miss, fastest) => format!(
            "{}; the actuator allows settling in {}",
            miss_phrase(miss, f, spec),
            secs(fastest)
        ),
        Ground::BoundBeaten(miss, fastest) => format!(
            "{}, faster than the process model allows ({}): the model is wrong for this change, \
             so it cannot tell tuning from actuator",
            miss_phrase(miss, f, spec),
            match fastest {
                Some(t) => format!("its fastest possible settling is {}", secs(t)),
                None => "it puts the setpoint beyond the actuator's reach".to_string(),
            }
        ),
        Ground::DataUnfit => format!(
            "the data cannot be trusted to score this change: {}",
            cx.data_problem.unwrap_or("a data-quality problem")
        ),
    }
}

fn miss_phrase(miss: Miss, f: &Facts, spec: &Spec) -> String {
    match miss {
        Miss::SettledLate { settling_time_s } => format!(
            "settled in {} (spec {})",
            secs(settling_time_s),
            secs(spec.settle_within_s)
        ),
        Miss::NeverSettled => format!("never settled within {}", secs(f.covered_s)),
        Miss::Overshoot => format!(
            "overshoot {} (spec {})",
            quantity(f.overshoot_pct, "%"),
            quantity(spec.max_overshoot_pct.unwrap_or(f64::INFINITY), "%")
        ),
    }
}

fn secs(x: f64) -> String {
    crate::units::human_duration(x)
}

/// Why a window ended, as a phrase.
pub fn end_phrase(e: WindowEnd) -> &'static str {
    match e {
        WindowEnd::NextChange => "next setpoint change",
        WindowEnd::DataGap => "data gap",
        WindowEnd::ManualMode => "loop left automatic",
        WindowEnd::Horizon => "evaluation horizon",
        WindowEnd::EndOfData => "end of data",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The spec of every case: settle within 600 s, overshoot at most 10 %.
    fn spec() -> Spec {
        Spec {
            settle_band_pct: 2.0,
            settle_band: None,
            settle_within_s: 600.0,
            max_overshoot_pct: Some(10.0),
            hold_band: None,
            recover_within_s: None,
        }
    }

    /// A change of 5 that settled in 400 s with 2 % overshoot, a window that ran to its horizon
    /// (1 800 s), quiet PV, and an actuator with reach 8 and t* 300 s.
    fn facts() -> Facts {
        Facts {
            settling_time_s: Some(400.0),
            overshoot_pct: 2.0,
            covered_s: 1800.0,
            window_end: WindowEnd::Horizon,
            distance: 5.0,
            band_abs: 0.1,
            residual_noise: 0.01,
            capability: Some(Capability {
                reach: 8.0,
                fastest_s: Some(300.0),
            }),
            pv_unfit: false,
            op_unfit: false,
        }
    }

    fn verdict(f: Facts) -> Verdict {
        decide(&f, &spec()).verdict()
    }

    fn with_fastest(t_star: f64) -> Option<Capability> {
        Some(Capability {
            reach: 8.0,
            fastest_s: Some(t_star),
        })
    }

    #[test]
    fn a_change_settled_in_time_without_overshoot_is_met() {
        let j = decide(&facts(), &spec());
        assert_eq!(j.verdict(), Verdict::Met);
        assert_eq!(
            j.ground,
            Ground::Settled {
                settling_time_s: 400.0
            }
        );
        // Met needs no model.
        let f = Facts {
            capability: None,
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::Met);
    }

    #[test]
    fn a_late_change_with_room_to_spare_is_tuning_limited() {
        let f = Facts {
            settling_time_s: Some(900.0),
            ..facts()
        };
        let j = decide(&f, &spec());
        assert_eq!(j.verdict(), Verdict::TuningLimited);
        assert_eq!(
            j.ground,
            Ground::RoomToSpare(
                Miss::SettledLate {
                    settling_time_s: 900.0
                },
                300.0
            )
        );
    }

    #[test]
    fn a_late_change_slower_than_t_star_allows_is_actuator_limited() {
        let f = Facts {
            settling_time_s: None,
            capability: with_fastest(700.0),
            ..facts()
        };
        let j = decide(&f, &spec());
        assert_eq!(j.verdict(), Verdict::ActuatorLimited);
        assert_eq!(j.ground, Ground::TooSlowAtLimit(Miss::NeverSettled, 700.0));
    }

    #[test]
    fn a_change_beyond_the_reach_is_unreachable() {
        let f = Facts {
            settling_time_s: None,
            distance: 9.0,
            capability: Some(Capability {
                reach: 8.0,
                fastest_s: None,
            }),
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::Unreachable);
    }

    #[test]
    fn an_overshoot_beyond_spec_is_a_miss_even_when_settled_in_time() {
        let f = Facts {
            overshoot_pct: 15.0,
            ..facts()
        };
        let j = decide(&f, &spec());
        assert_eq!(j.verdict(), Verdict::TuningLimited);
        assert_eq!(j.ground, Ground::RoomToSpare(Miss::Overshoot, 300.0));
    }

    #[test]
    fn a_band_inside_the_noise_is_inconclusive() {
        // 3σ = 0.12 > 0.1, even though the change looks met.
        let f = Facts {
            residual_noise: 0.04,
            ..facts()
        };
        let j = decide(&f, &spec());
        assert_eq!(j.verdict(), Verdict::Inconclusive);
        assert_eq!(j.ground, Ground::BandInsideNoise);
        // 3σ exactly at the band's half-width is still scored.
        let f = Facts {
            residual_noise: 0.25,
            band_abs: 0.75,
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::Met);
    }

    #[test]
    fn a_window_cut_before_the_spec_time_is_inconclusive_for_every_interrupting_end() {
        for end in [
            WindowEnd::NextChange,
            WindowEnd::DataGap,
            WindowEnd::ManualMode,
            WindowEnd::EndOfData,
        ] {
            let f = Facts {
                settling_time_s: None,
                covered_s: 500.0,
                window_end: end,
                ..facts()
            };
            let j = decide(&f, &spec());
            assert_eq!(j.ground, Ground::CutShort, "{end:?}");
            assert_eq!(j.verdict(), Verdict::Inconclusive, "{end:?}");
        }
        // The evaluation horizon ends the window normally: judged, not inconclusive.
        let f = Facts {
            settling_time_s: None,
            covered_s: 500.0,
            window_end: WindowEnd::Horizon,
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::TuningLimited);
        // An overshoot beyond spec is a miss already, however short the window.
        let f = Facts {
            covered_s: 500.0,
            overshoot_pct: 12.0,
            window_end: WindowEnd::NextChange,
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::TuningLimited);
        // A window that covered exactly the spec time is judged.
        let f = Facts {
            settling_time_s: None,
            covered_s: 600.0,
            window_end: WindowEnd::NextChange,
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::TuningLimited);
    }

    #[test]
    fn a_miss_without_a_model_is_inconclusive() {
        let f = Facts {
            settling_time_s: Some(900.0),
            capability: None,
            ..facts()
        };
        let j = decide(&f, &spec());
        assert_eq!(j.verdict(), Verdict::Inconclusive);
        assert_eq!(
            j.ground,
            Ground::NoModel(Miss::SettledLate {
                settling_time_s: 900.0
            })
        );
    }

    #[test]
    fn settling_exactly_at_the_spec_time_meets_it() {
        let at = |ts: f64| Facts {
            settling_time_s: Some(ts),
            ..facts()
        };
        assert_eq!(verdict(at(600.0)), Verdict::Met);
        assert_eq!(verdict(at(600.001)), Verdict::TuningLimited);
    }

    #[test]
    fn overshoot_exactly_at_the_spec_limit_is_within_it() {
        let at = |os: f64| Facts {
            overshoot_pct: os,
            ..facts()
        };
        assert_eq!(verdict(at(10.0)), Verdict::Met);
        assert_eq!(verdict(at(10.001)), Verdict::TuningLimited);
        // Without an overshoot limit any overshoot is within spec.
        let spec = Spec {
            max_overshoot_pct: None,
            hold_band: None,
            recover_within_s: None,
            ..spec()
        };
        assert_eq!(decide(&at(80.0), &spec).verdict(), Verdict::Met);
    }

    #[test]
    fn t_star_exactly_at_the_spec_time_leaves_the_miss_to_the_tuning() {
        let at = |t_star: f64| Facts {
            settling_time_s: Some(900.0),
            capability: with_fastest(t_star),
            ..facts()
        };
        assert_eq!(verdict(at(600.0)), Verdict::TuningLimited);
        assert_eq!(verdict(at(600.001)), Verdict::ActuatorLimited);
    }

    #[test]
    fn a_distance_exactly_equal_to_the_reach_is_reachable() {
        let at = |distance: f64, fastest_s: Option<f64>| Facts {
            settling_time_s: None,
            distance,
            capability: Some(Capability {
                reach: 8.0,
                fastest_s,
            }),
            ..facts()
        };
        // At |Δ| = R the fastest settling is finite (θ + τ·ln(1/b)); here slower than the spec.
        assert_eq!(verdict(at(8.0, Some(2000.0))), Verdict::ActuatorLimited);
        assert_eq!(verdict(at(8.0, Some(500.0))), Verdict::TuningLimited);
        assert_eq!(verdict(at(8.001, None)), Verdict::Unreachable);
        // Beyond the reach no t* makes it reachable.
        assert_eq!(verdict(at(8.001, Some(500.0))), Verdict::Unreachable);
    }

    #[test]
    fn a_change_that_settled_faster_than_its_bound_is_never_actuator_limited() {
        // Settled late (800 s against 600 s), but t* says 900 s: the bound is proven wrong.
        let f = Facts {
            settling_time_s: Some(800.0),
            capability: with_fastest(900.0),
            ..facts()
        };
        assert_eq!(
            decide(&f, &spec()).ground,
            Ground::BoundBeaten(
                Miss::SettledLate {
                    settling_time_s: 800.0
                },
                Some(900.0)
            )
        );
        assert_eq!(verdict(f), Verdict::Inconclusive);
        // Settled at all, although the model puts the setpoint beyond reach.
        let f = Facts {
            settling_time_s: Some(800.0),
            capability: Some(Capability {
                reach: 4.0,
                fastest_s: None,
            }),
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::Inconclusive);
        // Slower than the bound: the bound stands.
        let f = Facts {
            settling_time_s: Some(950.0),
            capability: with_fastest(900.0),
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::ActuatorLimited);
        // A PV unfit to score: inconclusive whatever else; an unfit OP leaves a met change met.
        let f = Facts {
            pv_unfit: true,
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::Inconclusive);
        let f = Facts {
            op_unfit: true,
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::Met);
        let f = Facts {
            op_unfit: true,
            settling_time_s: Some(950.0),
            capability: with_fastest(900.0),
            ..facts()
        };
        assert_eq!(verdict(f), Verdict::Inconclusive);
    }

    #[test]
    fn the_explanation_quotes_the_facts_the_verdict_read() {
        let units = Units {
            pv: "°C".into(),
            op: "%".into(),
        };
        let cx = Context {
            pv_noise_sd: 0.2,
            op_start: 61.3,
            data_problem: None,
            units: &units,
        };
        let say = |f: Facts| explain(&decide(&f, &spec()), &f, &spec(), &cx);
        assert_eq!(say(facts()), "settled in 6.7 min (spec 10.0 min)");
        assert_eq!(
            say(Facts {
                settling_time_s: None,
                covered_s: 450.0,
                window_end: WindowEnd::DataGap,
                ..facts()
            }),
            "the window ended (data gap) 7.5 min after the change, before the spec time of 10.0 min"
        );
        assert_eq!(
            say(Facts {
                settling_time_s: None,
                distance: 9.0,
                capability: Some(Capability {
                    reach: 8.0,
                    fastest_s: None
                }),
                ..facts()
            }),
            "never settled within 30.0 min; the change of 9.00 °C exceeds the actuator's reach \
             of 8.00 °C from OP 61.3 %"
        );
        assert_eq!(
            say(Facts {
                overshoot_pct: 12.5,
                capability: with_fastest(700.0),
                ..facts()
            }),
            "overshoot 12.5 % (spec 10.0 %), faster than the process model allows (its fastest \
             possible settling is 11.7 min): the model is wrong for this change, so it cannot tell \
             tuning from actuator"
        );
        assert_eq!(
            say(Facts {
                settling_time_s: None,
                capability: with_fastest(700.0),
                ..facts()
            }),
            "never settled within 30.0 min; even with the OP held at its limit the fastest \
             settling is 11.7 min"
        );
        assert_eq!(
            say(Facts {
                residual_noise: 0.5,
                ..facts()
            }),
            "the settling band (±0.100 °C) lies inside the PV noise (σ ≈ 0.200 °C): the change \
             is too small to score"
        );
    }

    #[test]
    fn counts_tally_each_verdict() {
        let c = VerdictCounts {
            tuning_limited: 3,
            unreachable: 1,
            ..VerdictCounts::default()
        };
        assert_eq!(c.get(Verdict::TuningLimited), 3);
        assert_eq!(c.get(Verdict::Unreachable), 1);
        assert_eq!(c.get(Verdict::Met), 0);
        assert_eq!(
            c.tally(),
            "0 met, 3 tuning-limited, 0 actuator-limited, 1 unreachable, 0 inconclusive"
        );
        assert_eq!(
            c.occurring(&[
                Verdict::Unreachable,
                Verdict::ActuatorLimited,
                Verdict::TuningLimited
            ]),
            ["1 unreachable", "3 tuning-limited"]
        );
    }

    #[test]
    fn each_verdict_has_one_display_and_one_json_spelling() {
        let labels: Vec<&str> = Verdict::ALL.iter().map(|v| v.label()).collect();
        assert_eq!(
            labels,
            [
                "met",
                "tuning-limited",
                "actuator-limited",
                "unreachable",
                "inconclusive"
            ]
        );
        for v in Verdict::ALL {
            assert_eq!(
                serde_json::to_value(v).unwrap(),
                serde_json::Value::String(v.as_str().into())
            );
        }
    }
}
