//! The loop's recommendation from its judged episodes: first which action, decided from the mix
//! of verdicts ([`lean`]) and, on the actuator side, from the capacity a spec-meeting actuator
//! would need; then the sentences with the numbers.
//!
//! - no conclusive change: undecided; every conclusive change met: no change;
//! - missed, but no model: undecided;
//! - more tuning-limited misses than actuator ones (unreachable + actuator-limited): retune, with
//!   SIMC PI settings for the typical change;
//! - otherwise the actuator: upgrade when the capacity needed is at most the loop's
//!   `upgrade_ratio_limit` times today's, else renegotiate the spec, with the numbers for both.

mod actuator;
mod retune;

pub use actuator::{ActuatorEvidence, Direction, actuator_action, figures as actuator_figures};
pub use retune::{Current, Outcome as RetuneOutcome, Retune, figures as retune_figures};

use super::CAUTION;
use super::identify::{FamilyKind, Fopdt, Model};
use super::setup::LoopSetup;
use super::stats;
use super::verdict::{EpisodeResult, Verdict, VerdictCounts};
use serde::Serialize;

/// What the loop needs, by the weight of its episodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Action {
    /// Every conclusive change met the spec.
    None,
    Retune,
    Renegotiate,
    Upgrade,
    /// Not enough conclusive evidence to say.
    Undecided,
}

impl Action {
    /// The action as people read it: `no change`, `retune`, `renegotiate the spec`, `upgrade the
    /// actuator`, `undecided`.
    pub fn label(self) -> &'static str {
        match self {
            Action::None => "no change",
            Action::Retune => "retune",
            Action::Renegotiate => "renegotiate the spec",
            Action::Upgrade => "upgrade the actuator",
            Action::Undecided => "undecided",
        }
    }
}

/// The loop's recommendation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Recommendation {
    pub action: Action,
    /// One or two sentences with the numbers.
    pub summary: String,
    /// The retune advice: settings in the controller's form, verified on the model.
    pub retune: Option<Retune>,
    /// The actuator's numbers for the direction that decides the action.
    pub actuator: Option<ActuatorEvidence>,
    /// The actuator's numbers for each direction of change with actuator-side misses.
    pub per_direction: Vec<ActuatorEvidence>,
    /// What to check before acting on the numbers (beside the general caution).
    pub cautions: Vec<String>,
    /// Conclusive changes left out because their verdict is marginal.
    pub marginal: usize,
    pub caution: &'static str,
}

impl Recommendation {
    fn new(action: Action, summary: String) -> Recommendation {
        Recommendation {
            action,
            summary,
            retune: None,
            actuator: None,
            per_direction: Vec::new(),
            cautions: Vec::new(),
            marginal: 0,
            caution: CAUTION,
        }
    }
}

/// Where the verdict mix points.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Lean {
    /// No conclusive change at all.
    NoEvidence,
    /// Every conclusive change met the spec.
    AllMet,
    /// Misses, but no process model to tell tuning from actuator.
    NoModel,
    /// Most misses had actuator room to spare.
    Tuning,
    /// At least as many misses lie with the actuator as with the tuning.
    Actuator,
}

/// Decides where the verdict mix points.
pub fn lean(c: &VerdictCounts, has_model: bool) -> Lean {
    let conclusive = c.met + c.tuning_limited + c.actuator_limited + c.unreachable;
    let actuator_misses = c.unreachable + c.actuator_limited;
    if conclusive == 0 {
        Lean::NoEvidence
    } else if actuator_misses + c.tuning_limited == 0 {
        Lean::AllMet
    } else if !has_model {
        Lean::NoModel
    } else if actuator_misses >= c.tuning_limited {
        Lean::Actuator
    } else {
        Lean::Tuning
    }
}

/// The loop's recommendation from its judged episodes: none, retune (SIMC settings), or, when
/// the actuator is what misses the spec, upgrade or renegotiate with the numbers for both.
pub fn recommend(
    all: &[EpisodeResult],
    model: Option<&Model>,
    setup: &LoopSetup,
    sample_s: f64,
) -> Recommendation {
    // Marginal verdicts drive no advice: they are listed to watch.
    let (marginal, clear): (Vec<EpisodeResult>, Vec<EpisodeResult>) =
        all.iter().cloned().partition(EpisodeResult::is_marginal);
    let mut r = recommend_from(&clear, all.len(), model, setup, sample_s);
    if !marginal.is_empty() {
        let missed = marginal.iter().filter(|e| e.verdict.is_miss()).count();
        let n = marginal.len();
        let sentence = if n == 1 {
            format!(
                " One more change has a marginal verdict ({}) and is not counted here: it is \
                 listed to watch.",
                if missed == 1 { "it missed" } else { "it met" }
            )
        } else {
            format!(
                " {n} more changes have a marginal verdict ({missed} of them missed) and are not \
                 counted here: they are listed to watch."
            )
        };
        r.summary.push_str(&sentence);
    }
    r.marginal = marginal.len();
    r
}

/// [`recommend`] from the changes whose verdicts are clear (or inconclusive).
fn recommend_from(
    episodes: &[EpisodeResult],
    total: usize,
    model: Option<&Model>,
    setup: &LoopSetup,
    sample_s: f64,
) -> Recommendation {
    let c = VerdictCounts::of(episodes);
    let conclusive = episodes.len() - c.inconclusive;
    let tally = Tally { c, conclusive };
    match (lean(&c, model.is_some()), model) {
        (Lean::NoEvidence, _) => Recommendation::new(
            Action::Undecided,
            format!(
                "No setpoint change with a clear verdict among {total} found; nothing to \
                 recommend yet."
            ),
        ),
        (Lean::AllMet, _) => Recommendation::new(
            Action::None,
            format!(
                "Met the spec on {} of {} conclusive setpoint changes; no change needed.",
                c.met, conclusive
            ),
        ),
        (Lean::Tuning, Some(m)) => retune(episodes, &Basis::new(m, setup, sample_s, tally)),
        (Lean::Actuator, Some(m)) => actuator(episodes, &Basis::new(m, setup, sample_s, tally)),
        (Lean::NoModel | Lean::Tuning | Lean::Actuator, _) => Recommendation::new(
            Action::Undecided,
            "Missed the spec, but no usable process model to tell tuning from actuator.".into(),
        ),
    }
}

/// The verdict counts with the number of conclusive changes.
#[derive(Debug, Clone, Copy)]
struct Tally {
    c: VerdictCounts,
    conclusive: usize,
}

impl Tally {
    fn actuator_misses(&self) -> usize {
        self.c.unreachable + self.c.actuator_limited
    }
}

/// What a retune or an actuator recommendation is worked out from.
struct Basis<'a> {
    model: &'a Model,
    f: Fopdt,
    kind: FamilyKind,
    setup: &'a LoopSetup,
    sample_s: f64,
    tally: Tally,
}

impl<'a> Basis<'a> {
    fn new(m: &'a Model, setup: &'a LoopSetup, sample_s: f64, tally: Tally) -> Basis<'a> {
        Basis {
            model: m,
            f: m.fopdt(),
            kind: m.kind(),
            setup,
            sample_s,
            tally,
        }
    }
}

/// The typical change (signed median) of the episodes `pick` selects, and the median operating
/// point of those among them in the typical direction.
fn typical(episodes: &[EpisodeResult], pick: impl Fn(Verdict) -> bool) -> (f64, f64) {
    let relevant: Vec<&EpisodeResult> = episodes.iter().filter(|e| pick(e.verdict)).collect();
    let step = signed_median(relevant.iter().map(|e| e.sp_to - e.sp_from));
    let u0 = median(
        relevant
            .iter()
            .filter(|e| (e.sp_to - e.sp_from).signum() == step.signum())
            .map(|e| e.op_start),
    );
    (step, u0)
}

fn retune(episodes: &[EpisodeResult], b: &Basis) -> Recommendation {
    let setup = b.setup;
    let mut r = match retune::advise(episodes, b.model, b) {
        Ok(advice) => {
            // A PI that cannot meet the spec on the model is itself evidence for renegotiating.
            let action = if advice.outcome == retune::Outcome::MeetsSpec {
                Action::Retune
            } else {
                Action::Renegotiate
            };
            let mut r = Recommendation::new(action, retune::summary(&advice, b));
            r.cautions.extend(retune::action_warning(&advice, b));
            r.retune = Some(advice);
            r
        }
        Err(why) => Recommendation::new(
            Action::Renegotiate,
            format!(
                "{} of {} conclusive changes missed the spec although the actuator had room, but \
                 no PI setting on the model is both safe (Ms ≤ 2) and no slower than today: {why} \
                 Renegotiate the spec, or look beyond PI control.",
                b.tally.c.tuning_limited, b.tally.conclusive
            ),
        ),
    };
    if b.tally.actuator_misses() > 0 {
        // The minority of misses that retuning cannot fix, with the step sizes that would.
        r.per_direction = actuator::per_direction(episodes, b);
        let sizes: Vec<String> = r
            .per_direction
            .iter()
            .filter_map(|e| {
                Some(format!(
                    "{} up to {} from OP {}",
                    e.direction.changes(),
                    crate::units::quantity(e.largest_compliant_step?, &setup.units.pv),
                    crate::units::quantity(e.typical_op_start, &setup.units.op)
                ))
            })
            .collect();
        r.summary.push_str(&format!(
            " Separately, {} asked more than the actuator can give{}.",
            crate::units::count(b.tally.actuator_misses(), "change", "changes"),
            if sizes.is_empty() {
                String::new()
            } else {
                format!("; {} can meet the spec", sizes.join(" and "))
            }
        ));
    }
    r
}

fn actuator(episodes: &[EpisodeResult], b: &Basis) -> Recommendation {
    let per_direction = actuator::per_direction(episodes, b);
    // The direction with more misses decides (rises on a tie: heating up is the usual limit).
    let Some(main) = per_direction
        .iter()
        .max_by_key(|e| (e.misses, e.direction == Direction::Up))
        .cloned()
    else {
        return Recommendation::new(
            Action::Undecided,
            "No actuator-side miss to advise on.".into(),
        );
    };
    let action = actuator::actuator_action(&main, b.setup.options.upgrade_ratio_limit);
    let mut r = Recommendation::new(
        action,
        actuator::words(action, &main, &per_direction, b, b.tally),
    );
    r.cautions = actuator::cautions(&main, b);
    r.actuator = Some(main);
    r.per_direction = per_direction;
    if b.tally.c.tuning_limited > 0 {
        r.summary.push_str(&format!(
            " Separately, {} missed although the actuator had room: retuning would help {}.",
            crate::units::count(b.tally.c.tuning_limited, "change", "changes"),
            if b.tally.c.tuning_limited == 1 {
                "it"
            } else {
                "those"
            }
        ));
    }
    r
}

/// The recommendation's settings as people type them, one line each (empty without a retune).
pub fn settings_lines(r: &Recommendation, units: &super::Units) -> Vec<String> {
    r.retune
        .as_ref()
        .map_or_else(Vec::new, |advice| retune::lines(advice, units))
}

fn median(values: impl Iterator<Item = f64>) -> f64 {
    let mut v: Vec<f64> = values.collect();
    stats::median_in_place(&mut v)
}

/// Median magnitude, with the sign of the majority.
fn signed_median(values: impl Iterator<Item = f64>) -> f64 {
    let v: Vec<f64> = values.collect();
    let ups = v.iter().filter(|d| **d > 0.0).count();
    let sign = if 2 * ups >= v.len() { 1.0 } else { -1.0 };
    sign * median(v.iter().filter(|d| d.signum() == sign).map(|d| d.abs()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn counts(met: usize, tuning: usize, actuator: usize, unreachable: usize) -> VerdictCounts {
        VerdictCounts {
            met,
            tuning_limited: tuning,
            actuator_limited: actuator,
            unreachable,
            inconclusive: 2,
        }
    }

    #[test]
    fn the_verdict_mix_decides_the_lean() {
        assert_eq!(lean(&counts(0, 0, 0, 0), true), Lean::NoEvidence);
        assert_eq!(lean(&counts(5, 0, 0, 0), true), Lean::AllMet);
        assert_eq!(lean(&counts(5, 0, 0, 0), false), Lean::AllMet);
        assert_eq!(lean(&counts(1, 3, 0, 0), false), Lean::NoModel);
        assert_eq!(lean(&counts(1, 3, 1, 1), true), Lean::Tuning);
        // A tie goes to the actuator: retuning cannot fix half of the misses.
        assert_eq!(lean(&counts(1, 2, 1, 1), true), Lean::Actuator);
        assert_eq!(lean(&counts(0, 0, 0, 1), true), Lean::Actuator);
    }

    #[test]
    fn an_upgrade_within_the_ratio_limit_is_advised_else_renegotiation() {
        let e = |ratio: Option<f64>| ActuatorEvidence {
            direction: Direction::Up,
            misses: 3,
            typical_step: 5.0,
            typical_op_start: 80.0,
            fastest_settling_time_s: Some(900.0),
            practical_settling_time_s: Some(1100.0),
            observed_settling_time_s: None,
            achievable_settling_time_s: Some(1100.0),
            largest_compliant_step: Some(3.0),
            required_op_limit: ratio.map(|r| 100.0 * r),
            capacity_ratio: ratio,
            capacity_ratio_range: None,
            required_rating: None,
            rating_unit: None,
        };
        assert_eq!(actuator_action(&e(Some(1.5)), 1.5), Action::Upgrade);
        assert_eq!(actuator_action(&e(Some(1.51)), 1.5), Action::Renegotiate);
        assert_eq!(actuator_action(&e(None), 1.5), Action::Renegotiate);
    }

    #[test]
    fn the_signed_median_takes_the_majority_direction() {
        assert_eq!(signed_median([5.0, -2.0, 3.0, 4.0].into_iter()), 4.0);
        assert_eq!(signed_median([-5.0, -2.0, -4.0, 3.0].into_iter()), -4.0);
    }
}
