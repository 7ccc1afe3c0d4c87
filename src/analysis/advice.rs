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

use super::CAUTION;
use super::feasibility::{self, Reach};
use super::identify::{Fopdt, Model};
use super::setup::LoopSetup;
use super::stats;
use super::tuning::{self, PiSuggestion};
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

/// Numbers behind an actuator-side recommendation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ActuatorEvidence {
    /// The typical change of the episodes that missed for actuator reasons (signed).
    pub typical_step: f64,
    pub typical_op_start: f64,
    /// t* for the typical change: no tuning can settle faster.
    pub fastest_settling_time_s: Option<f64>,
    /// What a PI tuned by SIMC (τc = θ) achieves on the model with today's OP limits.
    pub practical_settling_time_s: Option<f64>,
    /// The largest change that can meet today's spec from the typical operating point.
    pub largest_compliant_step: Option<f64>,
    /// The OP limit needed for the typical change to meet the spec.
    pub required_op_limit: Option<f64>,
    pub capacity_ratio: Option<f64>,
    /// The capacity ratio the model's uncertainty allows (medians of the actuator-limited
    /// changes' ranges).
    pub capacity_ratio_range: Option<[f64; 2]>,
}

/// The loop's recommendation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Recommendation {
    pub action: Action,
    /// One or two sentences with the numbers.
    pub summary: String,
    pub retune: Option<PiSuggestion>,
    pub actuator: Option<ActuatorEvidence>,
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
        r.summary.push_str(&format!(
            " {} more {} ({missed} of them missed) a marginal verdict and {} not counted here: \
             {} listed to watch.",
            crate::units::count(marginal.len(), "change", "changes"),
            if marginal.len() == 1 { "has" } else { "have" },
            if marginal.len() == 1 { "is" } else { "are" },
            if marginal.len() == 1 {
                "it is"
            } else {
                "they are"
            }
        ));
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
    f: Fopdt,
    setup: &'a LoopSetup,
    sample_s: f64,
    tally: Tally,
    spec_s: f64,
}

impl<'a> Basis<'a> {
    fn new(m: &Model, setup: &'a LoopSetup, sample_s: f64, tally: Tally) -> Basis<'a> {
        Basis {
            f: m.fopdt(),
            setup,
            sample_s,
            tally,
            spec_s: setup.spec.settle_within_s,
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
    let (f, setup) = (&b.f, b.setup);
    let (step, u0) = typical(episodes, |v| v == Verdict::TuningLimited);
    let pi = tuning::suggest(
        f,
        step,
        u0,
        setup.op,
        setup.spec.band_fraction(step),
        b.sample_s,
        b.spec_s,
    );
    let mut r = Recommendation::new(Action::Retune, retune_words(&pi, step, b.spec_s, b.tally));
    r.retune = Some(pi);
    if b.tally.actuator_misses() > 0 {
        // The minority of misses that retuning cannot fix, with the step size that would.
        let big: Vec<&EpisodeResult> = episodes
            .iter()
            .filter(|e| e.verdict.is_actuator_miss())
            .collect();
        let u0 = median(big.iter().map(|e| e.op_start));
        let step = signed_median(big.iter().map(|e| e.sp_to - e.sp_from));
        let dir = feasibility::op_direction(f.gain, step);
        let h = feasibility::headroom(u0, dir, setup.op.min, setup.op.max);
        let largest = feasibility::largest_compliant_step(f, h, &setup.spec);
        r.summary.push_str(&format!(
            " Separately, {} asked more than the actuator can give{}.",
            crate::units::count(b.tally.actuator_misses(), "change", "changes"),
            largest.map_or(String::new(), |d| format!(
                "; from OP {u0:.1}, changes up to {d:.3} can meet the spec"
            ))
        ));
    }
    r
}

fn retune_words(pi: &PiSuggestion, step: f64, spec_s: f64, tally: Tally) -> String {
    let expected = pi
        .expected_settling_time_s
        .map_or("does not settle".to_string(), |s| format!("{s:.0} s"));
    let saturation_note = if pi.initial_move_fits_headroom {
        ""
    } else {
        " The OP will saturate briefly after each change: the controller needs anti-windup."
    };
    format!(
        "{} of {} conclusive changes missed the spec although the actuator had room. Suggested \
         PI (SIMC, τc = {:.0} s): Kc = {:.4}, τI = {:.0} s; expected settling for a {:+.3} \
         change: {} (spec {:.0} s).{}",
        tally.c.tuning_limited,
        tally.conclusive,
        pi.closed_loop_time_constant_s,
        pi.gain,
        pi.integral_time_s,
        step,
        expected,
        spec_s,
        saturation_note
    )
}

/// The numbers for the typical actuator-side change: t*, what a tight PI achieves, the largest
/// change today's actuator meets the spec for, and the OP limit that would meet it.
fn actuator_evidence(typical_step: f64, typical_u0: f64, b: &Basis) -> ActuatorEvidence {
    let (f, op) = (&b.f, b.setup.op);
    let band = b.setup.spec.band_fraction(typical_step);
    let dir = feasibility::op_direction(f.gain, typical_step);
    let h = feasibility::headroom(typical_u0, dir, op.min, op.max);
    let fastest = match feasibility::min_settling_time(f, typical_step, h, band) {
        Reach::Reachable { t_star_s } => Some(t_star_s),
        Reach::Unreachable { .. } => None,
    };
    let tight =
        tuning::tau_c_for_headroom(f, typical_step, f64::INFINITY, b.sample_s).max(f.dead_time_s);
    let (kc, ti) = tuning::simc_pi(f, tight);
    let practical = fastest
        .and_then(|_| tuning::predict(f, kc, ti, typical_step, typical_u0, op, band, b.sample_s).0);
    let required_h = feasibility::required_headroom(f, typical_step, band, b.spec_s);
    let required_limit = required_h.map(|rh| typical_u0 + dir * rh);
    ActuatorEvidence {
        typical_step,
        typical_op_start: typical_u0,
        fastest_settling_time_s: fastest,
        practical_settling_time_s: practical,
        largest_compliant_step: feasibility::largest_compliant_step(f, h, &b.setup.spec),
        required_op_limit: required_limit,
        capacity_ratio: required_limit.map(|l| feasibility::capacity_ratio(l, dir, op)),
        capacity_ratio_range: None,
    }
}

/// Upgrade when the capacity a spec-meeting actuator needs is at most `ratio_limit` times
/// today's; otherwise renegotiate the spec.
pub fn actuator_action(e: &ActuatorEvidence, ratio_limit: f64) -> Action {
    if e.capacity_ratio.is_some_and(|r| r <= ratio_limit) {
        Action::Upgrade
    } else {
        Action::Renegotiate
    }
}

fn actuator(episodes: &[EpisodeResult], b: &Basis) -> Recommendation {
    let (step, u0) = typical(episodes, Verdict::is_actuator_miss);
    let mut evidence = actuator_evidence(step, u0, b);
    // The typical change's capacity ratio, spread as the actuator-limited changes' own ratios
    // spread over the model's plausible variants (medians of their relative range ends).
    let spreads: Vec<(f64, f64)> = episodes
        .iter()
        .filter(|e| e.verdict.is_actuator_miss())
        .filter_map(|e| Some((e.capacity_ratio_range?, e.capacity_ratio?)))
        .filter(|(_, point)| *point > 0.0)
        .map(|([lo, hi], point)| (lo / point, hi / point))
        .collect();
    if let (false, Some(point)) = (spreads.is_empty(), evidence.capacity_ratio) {
        let lo = median(spreads.iter().map(|s| s.0)).min(1.0);
        let hi = median(spreads.iter().map(|s| s.1)).max(1.0);
        evidence.capacity_ratio_range = Some([point * lo, point * hi]);
    }
    let action = actuator_action(&evidence, b.setup.options.upgrade_ratio_limit);
    let mut r = Recommendation::new(action, actuator_words(action, &evidence, b.spec_s, b.tally));
    r.actuator = Some(evidence);
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

fn actuator_words(action: Action, e: &ActuatorEvidence, spec_s: f64, tally: Tally) -> String {
    let fastest_txt = e
        .fastest_settling_time_s
        .map_or("it cannot be reached at all".to_string(), |s| {
            format!("the fastest possible settling is {s:.0} s")
        });
    let largest_txt = e
        .largest_compliant_step
        .map_or("no step".to_string(), |d| format!("steps up to {d:.3}"));
    let head = format!(
        "{} of {} conclusive changes missed the spec because of the actuator. For a typical \
         {:+.3} change from OP {:.1}, {} (spec {:.0} s).",
        tally.actuator_misses(),
        tally.conclusive,
        e.typical_step,
        e.typical_op_start,
        fastest_txt,
        spec_s
    );
    let range_txt = e.capacity_ratio_range.map_or(String::new(), |[lo, hi]| {
        let (lo, hi) = (format!("{lo:.2}"), format!("{hi:.2}"));
        if lo == hi {
            ", which the model's uncertainty moves by less than 0.01×".to_string()
        } else {
            format!(", plausibly {lo}–{hi}×")
        }
    });
    if action == Action::Upgrade {
        return format!(
            "{head} Meeting it needs an OP limit of {:.1} ({:.2}× today's capacity{range_txt}); \
             alternatively, today's actuator meets the spec for {largest_txt}.",
            e.required_op_limit.unwrap_or(f64::NAN),
            e.capacity_ratio.unwrap_or(f64::NAN)
        );
    }
    let capacity_txt = match (e.required_op_limit, e.capacity_ratio) {
        (Some(l), Some(k)) => {
            format!("an upgrade would need an OP limit of {l:.1} ({k:.2}× today's capacity)")
        }
        _ => "no actuator can meet it, the spec time is within the dead time".to_string(),
    };
    format!(
        "{head} Renegotiate: today's actuator meets the spec for {largest_txt}, or allow about \
         {} for typical changes; {capacity_txt}.",
        e.practical_settling_time_s
            .or(e.fastest_settling_time_s)
            .map_or("more time".to_string(), |s| format!("{s:.0} s")),
    )
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
            typical_step: 5.0,
            typical_op_start: 80.0,
            fastest_settling_time_s: Some(900.0),
            practical_settling_time_s: Some(1100.0),
            largest_compliant_step: Some(3.0),
            required_op_limit: ratio.map(|r| 100.0 * r),
            capacity_ratio: ratio,
            capacity_ratio_range: None,
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
