//! The actuator side of the advice: per direction of change (rises and falls of the setpoint),
//! the fastest settling the actuator allows, what a loop can achieve in practice, the largest
//! change that meets today's spec, and the capacity a spec-meeting actuator needs — as an OP
//! limit, as a ratio of today's capacity and, when the loop gives its actuator's rating, in that
//! rating's unit. Then upgrade or renegotiate, with the cautions that sizing needs.

use super::{Basis, Tally, median};
use crate::analysis::feasibility::{self, Reach};
use crate::analysis::identify::FamilyKind;
use crate::analysis::tuning;
use crate::analysis::verdict::EpisodeResult;
use crate::units::{count, human_duration, quantity, signed_quantity};
use serde::Serialize;

/// Which way the setpoint moved.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Direction {
    Up,
    Down,
}

impl Direction {
    pub fn of(step: f64) -> Direction {
        if step >= 0.0 {
            Direction::Up
        } else {
            Direction::Down
        }
    }

    fn sign(self) -> f64 {
        match self {
            Direction::Up => 1.0,
            Direction::Down => -1.0,
        }
    }

    /// The changes of this direction as people name them: `rises`, `falls`.
    pub fn changes(self) -> &'static str {
        match self {
            Direction::Up => "rises",
            Direction::Down => "falls",
        }
    }

    fn change(self) -> &'static str {
        match self {
            Direction::Up => "rise",
            Direction::Down => "fall",
        }
    }
}

/// Numbers behind an actuator-side recommendation, for the changes of one direction.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ActuatorEvidence {
    pub direction: Direction,
    /// How many of the direction's conclusive changes missed for actuator reasons.
    pub misses: usize,
    /// The typical change of those misses (signed, PV units).
    pub typical_step: f64,
    pub typical_op_start: f64,
    /// t* for the typical change: no tuning can settle faster.
    pub fastest_settling_time_s: Option<f64>,
    /// What a PI tuned by SIMC (τc = θ) achieves on the model with today's OP limits.
    pub practical_settling_time_s: Option<f64>,
    /// The median settling time those changes reached today (when they settled).
    pub observed_settling_time_s: Option<f64>,
    /// The settling time to ask of typical changes: the faster of the practical PI and what
    /// the loop already achieves (never slower than today).
    pub achievable_settling_time_s: Option<f64>,
    /// The largest change of this direction that can meet today's spec from the typical
    /// operating point (a magnitude, PV units).
    pub largest_compliant_step: Option<f64>,
    /// The OP limit needed for the typical change to meet the spec.
    pub required_op_limit: Option<f64>,
    pub capacity_ratio: Option<f64>,
    /// The capacity ratio the model's uncertainty allows (medians of the actuator-limited
    /// changes' ranges).
    pub capacity_ratio_range: Option<[f64; 2]>,
    /// The capacity needed in the unit of the actuator's rating, when the loop gives one and
    /// the change needs more of the actuator (the OP towards its upper limit).
    pub required_rating: Option<f64>,
    pub rating_unit: Option<String>,
}

/// The evidence for each direction of change with actuator-side misses, rises first.
pub(super) fn per_direction(episodes: &[EpisodeResult], b: &Basis) -> Vec<ActuatorEvidence> {
    [Direction::Up, Direction::Down]
        .into_iter()
        .filter_map(|d| evidence(episodes, d, b))
        .collect()
}

/// The evidence for the actuator-limited changes of one direction; `None` when there are none.
fn evidence(
    episodes: &[EpisodeResult],
    direction: Direction,
    b: &Basis,
) -> Option<ActuatorEvidence> {
    let misses: Vec<&EpisodeResult> = episodes
        .iter()
        .filter(|e| e.verdict.is_actuator_miss())
        .filter(|e| Direction::of(e.sp_to - e.sp_from) == direction)
        .collect();
    if misses.is_empty() {
        return None;
    }
    let step = direction.sign() * median(misses.iter().map(|e| (e.sp_to - e.sp_from).abs()));
    let u0 = median(misses.iter().map(|e| e.op_start));
    let settled: Vec<f64> = misses.iter().filter_map(|e| e.settling_time_s).collect();
    let observed = (!settled.is_empty()).then(|| median(settled.into_iter()));
    let mut e = numbers(step, u0, misses.len(), observed, b);
    // The typical change's capacity ratio, spread as the changes' own ratios spread over the
    // model's plausible variants (medians of their relative range ends).
    let spreads: Vec<(f64, f64)> = misses
        .iter()
        .filter_map(|e| Some((e.capacity_ratio_range?, e.capacity_ratio?)))
        .filter(|(_, point)| *point > 0.0)
        .map(|([lo, hi], point)| (lo / point, hi / point))
        .collect();
    if let (false, Some(point)) = (spreads.is_empty(), e.capacity_ratio) {
        let lo = median(spreads.iter().map(|s| s.0)).min(1.0);
        let hi = median(spreads.iter().map(|s| s.1)).max(1.0);
        e.capacity_ratio_range = Some([point * lo, point * hi]);
    }
    Some(e)
}

/// The model's numbers for `misses` changes of typical size `step` from OP `u0`, which settled
/// in `observed` (median) today.
fn numbers(
    step: f64,
    u0: f64,
    misses: usize,
    observed: Option<f64>,
    b: &Basis,
) -> ActuatorEvidence {
    let (f, op, spec) = (&b.f, b.setup.op, &b.setup.spec);
    let band = spec.band_fraction(step);
    let dir = feasibility::op_direction(f.gain, step);
    let h = feasibility::headroom(u0, dir, op.min, op.max);
    let fastest = match feasibility::min_settling_time(f, step, h, band) {
        Reach::Reachable { t_star_s } => Some(t_star_s),
        Reach::Unreachable { .. } => None,
    };
    // SIMC's tight choice τc = θ (never below a sample interval).
    let tight = f.dead_time_s.max(b.sample_s);
    let (kc, ti) = tuning::simc_pi(f, tight);
    let practical =
        fastest.and_then(|_| tuning::predict(f, kc, ti, step, u0, op, band, b.sample_s).0);
    let required_h = feasibility::required_headroom(f, step, band, spec.settle_within_s);
    let required_limit = required_h.map(|rh| u0 + dir * rh);
    let capacity_ratio = required_limit.map(|l| feasibility::capacity_ratio(l, dir, op));
    let rating = b.setup.actuator.as_ref().filter(|_| dir > 0.0);
    ActuatorEvidence {
        direction: Direction::of(step),
        misses,
        typical_step: step,
        typical_op_start: u0,
        fastest_settling_time_s: fastest,
        practical_settling_time_s: practical,
        observed_settling_time_s: observed,
        // Never slower than what the loop already achieves.
        achievable_settling_time_s: match (practical, observed) {
            (Some(p), Some(o)) => Some(p.min(o)),
            (p, o) => p.or(o),
        },
        largest_compliant_step: feasibility::largest_compliant_step(f, h, spec),
        required_op_limit: required_limit,
        capacity_ratio,
        capacity_ratio_range: None,
        required_rating: rating.zip(capacity_ratio).map(|(r, k)| r.rating * k),
        rating_unit: rating.map(|r| r.unit.clone()),
    }
}

/// Upgrade when the capacity a spec-meeting actuator needs is at most `ratio_limit` times
/// today's; otherwise renegotiate the spec.
pub fn actuator_action(e: &ActuatorEvidence, ratio_limit: f64) -> super::Action {
    if e.capacity_ratio.is_some_and(|r| r <= ratio_limit) {
        super::Action::Upgrade
    } else {
        super::Action::Renegotiate
    }
}

/// The sentences of an actuator-side recommendation: the head count, one sentence per
/// direction, and the action for the direction that decides it (`main`).
pub(super) fn words(
    action: super::Action,
    main: &ActuatorEvidence,
    all: &[ActuatorEvidence],
    b: &Basis,
    tally: Tally,
) -> String {
    let mut out = format!(
        "{} of {} conclusive changes missed the spec because of the actuator.",
        tally.actuator_misses(),
        tally.conclusive
    );
    for e in all {
        out.push(' ');
        out.push_str(&direction_words(e, b));
    }
    out.push(' ');
    out.push_str(&action_words(action, main, b));
    out
}

/// What the actuator allows for one direction's typical change.
fn direction_words(e: &ActuatorEvidence, b: &Basis) -> String {
    let u = &b.setup.units;
    let spec = human_duration(b.setup.spec.settle_within_s);
    let fastest = e.fastest_settling_time_s.map_or(
        "cannot be reached at all with today's OP limit".to_string(),
        |t| format!("settles at best in {} (t*)", human_duration(t)),
    );
    let largest = e
        .largest_compliant_step
        .map_or("no change meets the spec".to_string(), |d| {
            format!(
                "today's actuator meets the {spec} spec for {} up to {}",
                e.direction.changes(),
                quantity(d, &u.pv)
            )
        });
    format!(
        "{} ({}): a typical {} from OP {} {}; {largest}.",
        capitalised(e.direction.changes()),
        count(e.misses, "miss", "misses"),
        signed_quantity(e.typical_step, &u.pv),
        quantity(e.typical_op_start, &u.op),
        fastest,
    )
}

/// The action's sentence for the deciding direction.
fn action_words(action: super::Action, e: &ActuatorEvidence, b: &Basis) -> String {
    let u = &b.setup.units;
    let capacity = match (e.required_op_limit, e.capacity_ratio) {
        (Some(l), Some(k)) => {
            let range = e.capacity_ratio_range.map_or(String::new(), |[lo, hi]| {
                let (lo, hi) = (format!("{lo:.2}"), format!("{hi:.2}"));
                if lo == hi {
                    String::new()
                } else {
                    format!(", plausibly {lo}–{hi}×")
                }
            });
            let rating = match (e.required_rating, &e.rating_unit, &b.setup.actuator) {
                (Some(r), Some(unit), Some(today)) => format!(
                    "; about {} against today's {}",
                    quantity(r, unit),
                    quantity(today.rating, unit)
                ),
                _ => String::new(),
            };
            format!(
                "an OP limit of {} ({:.2}× today's capacity{range}){rating}",
                quantity(l, &u.op),
                k
            )
        }
        _ => String::new(),
    };
    let typical = e.direction.change();
    if action == super::Action::Upgrade {
        return format!("Upgrade: meeting the spec for the typical {typical} needs {capacity}.");
    }
    let allow = e
        .achievable_settling_time_s
        .or(e.fastest_settling_time_s)
        .map_or("more time".to_string(), human_duration);
    let keep = e.largest_compliant_step.map_or(String::new(), |d| {
        format!(
            ", or keep {} within {}",
            e.direction.changes(),
            quantity(d, &u.pv)
        )
    });
    let upgrade = if capacity.is_empty() {
        "no actuator can meet it: the spec time is within the dead time".to_string()
    } else {
        format!("an upgrade would need {capacity}")
    };
    format!(
        "Renegotiate the spec: allow about {allow} for typical {}{keep}; {upgrade}.",
        e.direction.changes()
    )
}

/// One direction's figures with labels, for tables (the weekly summary); labels name the
/// direction (`Rises: fastest possible settling t*`).
pub fn figures(e: &ActuatorEvidence, units: &crate::analysis::Units) -> Vec<(String, String)> {
    let dir = capitalised(e.direction.changes());
    let mut out = vec![
        (
            format!("{dir}: typical change held back by the actuator"),
            format!(
                "{} from OP {} ({})",
                signed_quantity(e.typical_step, &units.pv),
                quantity(e.typical_op_start, &units.op),
                count(e.misses, "miss", "misses")
            ),
        ),
        (
            format!("{dir}: fastest possible settling t*"),
            e.fastest_settling_time_s.map_or(
                "none: unreachable with today's OP limit".to_string(),
                human_duration,
            ),
        ),
        (
            format!("{dir}: settling to ask of typical changes"),
            e.achievable_settling_time_s
                .map_or("not known".to_string(), human_duration),
        ),
        (
            format!("{dir}: largest change that meets today's spec"),
            e.largest_compliant_step
                .map_or("none".to_string(), |d| quantity(d, &units.pv)),
        ),
        (
            format!("{dir}: OP limit needed for the typical change"),
            e.required_op_limit.map_or(
                "no actuator can: the spec time is within the dead time".to_string(),
                |l| quantity(l, &units.op),
            ),
        ),
    ];
    if let Some(k) = e.capacity_ratio {
        out.push((
            format!("{dir}: capacity needed, as a ratio of today's"),
            format!("{}×", crate::units::sig(k, crate::units::DISPLAY_DIGITS)),
        ));
    }
    if let (Some(r), Some(unit)) = (e.required_rating, &e.rating_unit) {
        out.push((
            format!("{dir}: capacity needed in the actuator's rating"),
            quantity(r, unit),
        ));
    }
    out
}

/// The cautions capacity advice needs: limits that may be clamps, and linear sizing.
pub(super) fn cautions(e: &ActuatorEvidence, b: &Basis) -> Vec<String> {
    let op = b.setup.op;
    let u = &b.setup.units;
    let mut out = vec![format!(
        "The OP limits {} and {} are read as the actuator's physical ends. If a limit is a clamp set \
         in the controller or the control system, raising it may give the capacity without new \
         hardware; check before sizing.",
        quantity(op.min, &u.op),
        quantity(op.max, &u.op)
    )];
    if e.capacity_ratio.is_some() && b.kind != FamilyKind::OpDependentGain {
        out.push(
            "Capacity is sized as if the actuator's effect were proportional to its OP (a linear \
             actuator). A valve with an equal-percentage trim, a pump on its system curve or a \
             heater whose supply varies needs sizing from its own characteristic."
                .to_string(),
        );
    }
    out
}

fn capitalised(word: &str) -> String {
    let mut c = word.chars();
    c.next()
        .map_or(String::new(), |f| f.to_uppercase().chain(c).collect())
}
