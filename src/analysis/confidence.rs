//! How sure a conclusive verdict is, and for a marginal one, the experiment that would decide it.
//!
//! A verdict is **marginal** when any of these holds, else **clear** (the thresholds are this
//! product's own choices):
//! - the spec time lies inside the range of t* the model's plausible variants give (for
//!   `actuator_limited` and `tuning_limited`: the variants disagree on which side it falls);
//! - the distance to go lies inside the range of the actuator's reach (for `unreachable`);
//! - the saturation evidence is thin: an `actuator_limited` or `unreachable` change whose OP sat at
//!   its limit for less than [`THIN_SATURATION`] of the change, so the data never tested the
//!   actuator's limit the verdict rests on;
//! - earlier changes in the same direction settled faster than the model's bound for them (the
//!   model has been proven pessimistic there), for `actuator_limited` and `unreachable`;
//! - the data quality is doubtful (a finding of [`super::quality`] that downgrades).
//!
//! Marginal verdicts raise no alerts and drive no upgrade advice; summaries list them to watch,
//! with the reasons given here.

use super::bound::{Spread, StartState};
use super::quality::{Effect, Finding, Issue};
use super::setup::Units;
use super::verdict::Verdict;
use crate::units::{human_duration, quantity};

pub use super::trust::{Confidence, Experiment};

/// An actuator verdict whose OP sat at its limit for less than this share of the change rests on
/// an untested limit.
pub const THIN_SATURATION: f64 = 0.10;

/// What the confidence of one verdict is read from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Evidence<'a> {
    pub verdict: Verdict,
    /// The bound's spread over the model's plausible variants; `None` without a model.
    pub spread: Option<&'a Spread>,
    /// |SP − PV| at the change.
    pub distance: f64,
    pub spec_s: f64,
    pub saturation_duty: f64,
    /// Data-quality findings that downgrade, in words.
    pub doubts: &'a [String],
    /// Earlier changes in the same direction that settled faster than the model's bound.
    pub beaten: usize,
}

/// The confidence of a verdict (`None` for an inconclusive one) and why it is marginal.
pub fn confidence(e: &Evidence) -> (Option<Confidence>, Vec<String>) {
    if e.verdict == Verdict::Inconclusive {
        return (None, Vec::new());
    }
    let mut why = model_doubts(e);
    why.extend(e.doubts.iter().cloned());
    let c = if why.is_empty() {
        Confidence::Clear
    } else {
        Confidence::Marginal
    };
    (Some(c), why)
}

/// The reasons for doubt that come from the model and the saturation evidence.
fn model_doubts(e: &Evidence) -> Vec<String> {
    let mut why = Vec::new();
    let actuator = matches!(e.verdict, Verdict::ActuatorLimited | Verdict::Unreachable);
    if let Some(s) = e.spread {
        match (e.verdict, s.fastest_s) {
            (Verdict::ActuatorLimited | Verdict::TuningLimited, Some([lo, hi]))
                if lo <= e.spec_s && e.spec_s <= hi =>
            {
                why.push(format!(
                    "the spec time of {} lies inside the range of the fastest possible \
                     settling, {} to {}",
                    human_duration(e.spec_s),
                    human_duration(lo),
                    human_duration(hi)
                ));
            }
            (Verdict::ActuatorLimited | Verdict::TuningLimited, None) => why.push(
                "some plausible models of the process cannot reach this setpoint at all".into(),
            ),
            _ => {}
        }
        let [lo, hi] = s.reach;
        if e.verdict == Verdict::Unreachable && e.distance <= hi {
            why.push(format!(
                "the distance to go, {:.4}, lies inside the range of the actuator's reach, \
                 {lo:.4}–{hi:.4}",
                e.distance
            ));
        }
    }
    if actuator && e.saturation_duty < THIN_SATURATION {
        why.push(format!(
            "the OP sat at its limit for only {:.0} % of the change, too little to test the \
             limit the verdict rests on",
            100.0 * e.saturation_duty
        ));
    }
    if actuator && e.beaten > 0 {
        why.push(format!(
            "{} in this direction settled faster than the model's bound",
            crate::units::count(e.beaten, "earlier change", "earlier changes")
        ));
    }
    why
}

/// The verdict's deciding numbers, against which a data-quality doubt is weighed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Stake {
    pub verdict: Verdict,
    pub settling_time_s: Option<f64>,
    /// t* of the identified model, when there is one.
    pub fastest_s: Option<f64>,
    pub spec_s: f64,
}

impl Stake {
    /// Whether the verdict rests on the process model (tuning- or actuator-limited, unreachable).
    fn on_model(&self) -> bool {
        matches!(
            self.verdict,
            Verdict::TuningLimited | Verdict::ActuatorLimited | Verdict::Unreachable
        )
    }

    /// Whether a comparison the verdict rests on (settling time or t* against the spec time) is
    /// closer than `resolution_s`.
    fn within(&self, resolution_s: f64) -> bool {
        let close = |t: Option<f64>| t.is_some_and(|t| (t - self.spec_s).abs() <= resolution_s);
        close(self.settling_time_s) || (self.on_model() && close(self.fastest_s))
    }
}

/// The downgrading findings that could change this verdict, in words. A doubt counts only where
/// it bears on what the verdict was decided from:
/// - irregular time stamps blur times by up to the longest interval: they count when the settling
///   time or t* lies that close to the spec time;
/// - coarse sampling leaves the model's dead time uncertain by a sample or two: it counts for a
///   verdict that rests on the model when t* lies within two sample periods of the spec time;
/// - an OP logged more coarsely than the PV blurs the model: it counts for every verdict that
///   rests on the model;
/// - a quantised PV blurs the band's edge: it always counts.
pub fn doubts(findings: &[Finding], stake: &Stake) -> Vec<String> {
    findings
        .iter()
        .filter(|f| f.effect == Effect::Downgrade)
        .filter(|f| match &f.issue {
            Issue::IrregularTimestamps {
                longest_interval_s, ..
            } => stake.within(*longest_interval_s),
            Issue::CoarseSampling { period_s, .. } => {
                stake.on_model() && stake.within(2.0 * period_s)
            }
            Issue::CoarseOp { .. } => stake.on_model(),
            _ => true,
        })
        .map(|f| f.describe(""))
        .collect()
}

/// What the experiment is sized from: the spread of the reach and the slowest plausible dynamics.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Plausible {
    pub reach_hi: f64,
    /// The longest time constant and dead time among the model's plausible variants (s).
    pub time_constant_hi_s: f64,
    pub dead_time_hi_s: f64,
}

/// The smallest setpoint step, from the change's operating point and in its direction, that
/// drives the OP to its limit for at least one time constant under every plausible model: with the
/// OP at its limit the PV follows the actuator's own response, whose level and curvature pin the
/// reach and the time constant that t* is built from, which is what separates the plausible
/// models. Under a model of reach R and time constant τ the PV covers 1 − e^(−1) ≈ 63 % of R one τ
/// after the limit is reached (first-order step response), so the step must be at least 63 % of
/// the largest plausible reach, and no smaller than the change being decided. It is held for the
/// dead time plus four time constants of the slowest plausible model (within 2 % of the end
/// value; first-order step response), and at least the spec time. A process without a finite
/// reach (integrating) gets twice the change being decided, this product's choice.
pub fn deciding_step(
    start: &StartState,
    op_start: f64,
    delta: f64,
    spec_s: f64,
    p: &Plausible,
    units: &Units,
) -> Experiment {
    let dir = if delta >= 0.0 { 1.0 } else { -1.0 };
    let size = if p.reach_hi.is_finite() {
        (0.632 * p.reach_hi).max(delta.abs())
    } else {
        2.0 * delta.abs()
    };
    let hold_s = (p.dead_time_hi_s + 4.0 * p.time_constant_hi_s).max(spec_s);
    let to_sp = start.pv + dir * size;
    let plan = format!(
        "With the loop at rest at PV {} (OP {}), step the setpoint {} by {} to {} and hold it \
         for {}. The controller should drive the OP to its limit for at least {}; if it does \
         not, the test is no better than today's data — a step of the OP to its limit in manual \
         for that long, under the site's procedures, decides it instead.",
        quantity(start.pv, &units.pv),
        quantity(op_start, &units.op),
        if dir > 0.0 { "up" } else { "down" },
        quantity(size, &units.pv),
        quantity(to_sp, &units.pv),
        human_duration(hold_s),
        human_duration(p.time_constant_hi_s),
    );
    Experiment {
        from_pv: start.pv,
        from_op: op_start,
        step: dir * size,
        to_sp,
        hold_s,
        plan,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spread(lo: f64, hi: f64) -> Spread {
        Spread {
            fastest_s: Some([lo, hi]),
            reach: [9.0, 11.0],
            capacity_ratio: None,
            count: 16,
        }
    }

    fn evidence<'a>(v: Verdict, s: &'a Spread, duty: f64) -> Evidence<'a> {
        Evidence {
            verdict: v,
            spread: Some(s),
            distance: 5.0,
            spec_s: 900.0,
            saturation_duty: duty,
            doubts: &[],
            beaten: 0,
        }
    }

    #[test]
    fn a_spec_time_inside_the_t_star_range_is_marginal_outside_it_clear() {
        let (inside, above) = (spread(870.0, 1010.0), spread(1000.0, 1200.0));
        let (c, why) = confidence(&evidence(Verdict::ActuatorLimited, &inside, 0.5));
        assert_eq!(c, Some(Confidence::Marginal));
        assert!(why[0].contains("14.5 min to 16.8 min"), "{why:?}");
        assert_eq!(
            confidence(&evidence(Verdict::ActuatorLimited, &above, 0.5)).0,
            Some(Confidence::Clear)
        );
        assert_eq!(
            confidence(&evidence(Verdict::TuningLimited, &inside, 0.0)).0,
            Some(Confidence::Marginal)
        );
    }

    #[test]
    fn thin_saturation_makes_an_actuator_verdict_marginal_but_not_a_tuning_one() {
        let s = spread(1000.0, 1200.0);
        let (c, why) = confidence(&evidence(Verdict::ActuatorLimited, &s, 0.03));
        assert_eq!(c, Some(Confidence::Marginal));
        assert!(why[0].contains("only 3 %"), "{why:?}");
        let s = spread(100.0, 200.0);
        assert_eq!(
            confidence(&evidence(Verdict::TuningLimited, &s, 0.0)).0,
            Some(Confidence::Clear)
        );
    }

    #[test]
    fn unreachable_is_marginal_when_some_plausible_reach_covers_the_distance() {
        let s = spread(0.0, 0.0);
        let mut e = evidence(Verdict::Unreachable, &s, 0.9);
        e.distance = 10.0;
        assert_eq!(confidence(&e).0, Some(Confidence::Marginal));
        e.distance = 12.0;
        assert_eq!(confidence(&e).0, Some(Confidence::Clear));
    }

    #[test]
    fn doubts_and_a_beaten_bound_make_marginal_and_inconclusive_has_no_confidence() {
        let s = spread(1000.0, 1200.0);
        let doubts = ["the PV moves in steps of 0.5".to_string()];
        let mut e = evidence(Verdict::Met, &s, 0.0);
        e.doubts = &doubts;
        assert_eq!(confidence(&e).0, Some(Confidence::Marginal));
        let mut e = evidence(Verdict::ActuatorLimited, &s, 0.5);
        e.beaten = 2;
        assert_eq!(confidence(&e).0, Some(Confidence::Marginal));
        e.verdict = Verdict::Inconclusive;
        assert_eq!(confidence(&e), (None, Vec::new()));
    }

    #[test]
    fn a_data_doubt_counts_only_where_it_could_change_the_verdict() {
        let irregular = Finding {
            issue: Issue::IrregularTimestamps {
                median_interval_s: 15.0,
                longest_interval_s: 160.0,
                irregular_fraction: 0.26,
            },
            effect: Effect::Downgrade,
        };
        let coarse = Finding {
            issue: Issue::CoarseSampling {
                period_s: 5.0,
                dead_time_s: 2.0,
            },
            effect: Effect::Downgrade,
        };
        let stake = |verdict, settling: f64, fastest: f64| Stake {
            verdict,
            settling_time_s: Some(settling),
            fastest_s: Some(fastest),
            spec_s: 2400.0,
        };
        let both = [irregular, coarse];
        // Settled in 7231 s against 2400 s, t* 600 s: 160 s of blur changes nothing.
        assert!(doubts(&both, &stake(Verdict::TuningLimited, 7231.0, 600.0)).is_empty());
        // Settled 100 s inside the spec: the blur could flip it.
        assert_eq!(doubts(&both, &stake(Verdict::Met, 2300.0, 600.0)).len(), 1);
        // t* 8 s from the spec time on a model-based verdict: both count.
        assert_eq!(
            doubts(&both, &stake(Verdict::ActuatorLimited, 3000.0, 2408.0)).len(),
            2
        );
        // A met verdict does not rest on the model: coarse sampling does not touch it.
        assert!(doubts(&both[1..], &stake(Verdict::Met, 2398.0, 2401.0)).is_empty());
    }

    #[test]
    fn the_deciding_step_saturates_for_one_time_constant_under_every_plausible_model() {
        // Reach up to 20 from PV 50: a step of 0.632·20 = 12.64 upwards; hold θ + 4τ = 20 + 4·300.
        let start = StartState {
            pv: 50.0,
            slope_per_s: 0.0,
        };
        let p = Plausible {
            reach_hi: 20.0,
            time_constant_hi_s: 300.0,
            dead_time_hi_s: 20.0,
        };
        let units = Units {
            pv: "°C".into(),
            op: "%".into(),
        };
        let x = deciding_step(&start, 40.0, 5.0, 900.0, &p, &units);
        assert!(
            (x.step - 12.64).abs() < 1e-9 && (x.to_sp - 62.64).abs() < 1e-9,
            "{x:?}"
        );
        assert_eq!(x.hold_s, 1220.0);
        assert!(
            x.plan
                .contains("step the setpoint up by 12.6 °C to 62.6 °C and hold it for 20.3 min"),
            "{}",
            x.plan
        );
        // A change larger than that is itself the step; downwards keeps its sign.
        let x = deciding_step(&start, 40.0, -15.0, 900.0, &p, &units);
        assert_eq!(x.step, -15.0);
    }
}
