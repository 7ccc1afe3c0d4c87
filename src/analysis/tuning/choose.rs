//! Choosing SIMC's single tuning parameter τc so the verified response meets the spec: both the
//! settling time and the overshoot, with Ms ≤ 2, never slower than the loop today, and the
//! slowest (most robust) τc that does.
//!
//! τc is scanned on a logarithmic grid from a fifth of the dead time to beyond the spec time;
//! each setting is simulated on the model ([`verify`]). Among the settings that qualify the
//! largest τc is taken and refined by bisection towards its slower neighbour. A setting
//! qualifies first with a margin for the model's error — settling within [`AIM`] of the spec
//! time and overshoot within [`AIM`] of its limit (our choice: the corpus of
//! `tests/it/retune_corpus.rs` measures how the margin serves on true plants) — and, when no
//! setting does, on the spec itself.

use super::super::controller::Ideal;
use super::super::identify::Model;
use super::verify::{COARSE, Target, Verified, verify, verify_at};
use super::{MAX_SENSITIVITY, simc_for};
use serde::Serialize;

/// The share of the spec time (and of the overshoot limit) a suggestion aims within.
pub const AIM: f64 = 0.8;
/// Grid points of τc.
const GRID: usize = 20;
/// Bisection steps refining the chosen τc: the grid's ratio between neighbours to the 16th
/// root, about 1.5 % for a grid spanning two decades.
const REFINE: usize = 4;

/// One setting with its verified response.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Candidate {
    pub ideal: Ideal,
    /// SIMC's closed-loop time constant τc that gave the settings.
    pub tau_c_s: f64,
    pub verified: Verified,
}

/// What [`retune`] found.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "outcome", rename_all = "snake_case")]
pub enum Suggestion {
    /// Settings that meet the spec on the model with Ms ≤ 2, no slower than today.
    Meets {
        ideal: Ideal,
        tau_c_s: f64,
        verified: Verified,
    },
    /// Meeting the spec needs a less robust loop than Ms = 2 allows: refused. `needed_ms` is the
    /// smallest Ms among the settings that meet it.
    NeedsMs {
        best: Option<Candidate>,
        needed_ms: f64,
        reason: String,
    },
    /// No PI on this model meets the spec (no slower than today) at any τc: evidence for
    /// renegotiating it.
    NoPi {
        best: Option<Candidate>,
        reason: String,
    },
}

impl Suggestion {
    /// The settings the outcome offers: the suggestion, or the best safe ones of a refusal.
    pub fn settings(&self) -> Option<Candidate> {
        match self {
            Suggestion::Meets {
                ideal,
                tau_c_s,
                verified,
            } => Some(Candidate {
                ideal: *ideal,
                tau_c_s: *tau_c_s,
                verified: *verified,
            }),
            Suggestion::NeedsMs { best, .. } | Suggestion::NoPi { best, .. } => *best,
        }
    }
}

/// PI settings by the SIMC rules for `target`'s step on `model`, with τc chosen as the module
/// says. `sample_s` is the loop's sample interval (the smallest τc considered, and the
/// resolution of the simulated settling time). Each refusal carries the best safe settings —
/// Ms ≤ 2, no slower than today, within the overshoot limit if any are, then the fastest
/// settling — so the advice can say what is achievable; `None` when no setting is safe and no
/// slower than today.
pub fn retune(model: &Model, target: &Target, sample_s: f64) -> Suggestion {
    // The search simulates coarsely; what is returned is verified finely.
    let eval = |tau_c: f64| {
        let ideal = simc_for(model, target.step, tau_c);
        Candidate {
            ideal,
            tau_c_s: tau_c,
            verified: verify_at(model, &ideal, target, sample_s, COARSE),
        }
    };
    let eval_fine = |tau_c: f64| {
        let ideal = simc_for(model, target.step, tau_c);
        Candidate {
            ideal,
            tau_c_s: tau_c,
            verified: verify(model, &ideal, target, sample_s),
        }
    };
    let fine = |c: &Candidate| eval_fine(c.tau_c_s);
    let theta = model.dead_time_s.max(0.0);
    let lo = (0.2 * theta).max(sample_s).max(1e-3);
    let hi = (2.0 * target.spec_s.max(target.achieved_settling_s.unwrap_or(0.0))).max(4.0 * lo);
    let grid: Vec<Candidate> = (0..GRID)
        .map(|i| eval(lo * (hi / lo).powf(i as f64 / (GRID - 1) as f64)))
        .collect();
    let safe = |c: &Candidate| c.verified.max_sensitivity <= MAX_SENSITIVITY;
    let today = |c: &Candidate| target.no_slower_than_today(c.verified.settling_time_s);
    let aimed = Target {
        spec_s: AIM * target.spec_s,
        max_overshoot_pct: target.max_overshoot_pct.map(|m| AIM * m),
        ..*target
    };
    let with_margin = |c: &Candidate| {
        safe(c) && today(c) && aimed.met_by(c.verified.settling_time_s, c.verified.overshoot_pct)
    };
    let plain = |c: &Candidate| safe(c) && today(c) && c.verified.meets_spec;
    for ok in [&with_margin as &dyn Fn(&Candidate) -> bool, &plain] {
        // The slowest grid point that qualifies as the fine simulation confirms it, refined
        // (finely) towards its slower neighbour.
        let confirmed = (0..grid.len())
            .rev()
            .filter(|&i| ok(&grid[i]))
            .map(|i| (i, fine(&grid[i])))
            .find(|(_, c)| ok(c));
        if let Some((i, good)) = confirmed {
            let c = refine(good, grid.get(i + 1).map(|n| n.tau_c_s), ok, &eval_fine);
            return Suggestion::Meets {
                ideal: c.ideal,
                tau_c_s: c.tau_c_s,
                verified: c.verified,
            };
        }
    }
    let best = best_safe(grid.iter().filter(|c| safe(c) && today(c)), target).map(|c| fine(&c));
    let needed_ms = grid
        .iter()
        .filter(|c| today(c) && c.verified.meets_spec)
        .map(|c| c.verified.max_sensitivity)
        .fold(f64::INFINITY, f64::min);
    if needed_ms.is_finite() {
        return Suggestion::NeedsMs {
            best,
            needed_ms,
            reason: format!(
                "meeting the spec on this model needs a maximum sensitivity Ms of {}, above the \
                 usual robustness limit of {MAX_SENSITIVITY}: such settings would be fragile \
                 against model error",
                crate::units::sig(needed_ms, 2)
            ),
        };
    }
    let reason = no_pi_reason(&grid, target);
    Suggestion::NoPi { best, reason }
}

/// Bisects between `good` (qualifies) and the slower τc `bad_tau` (if any, does not) for the
/// largest τc that qualifies.
fn refine(
    mut good: Candidate,
    bad_tau: Option<f64>,
    ok: &dyn Fn(&Candidate) -> bool,
    eval: &dyn Fn(f64) -> Candidate,
) -> Candidate {
    let Some(mut bad_tau) = bad_tau else {
        return good;
    };
    for _ in 0..REFINE {
        let mid = (good.tau_c_s * bad_tau).sqrt();
        let c = eval(mid);
        if ok(&c) {
            good = c;
        } else {
            bad_tau = mid;
        }
    }
    good
}

/// The best of safe settings: those within the overshoot limit first, then the fastest to
/// settle; if none is within the limit, the one that overshoots least.
fn best_safe<'a>(
    candidates: impl Iterator<Item = &'a Candidate>,
    target: &Target,
) -> Option<Candidate> {
    let key = |c: &Candidate| {
        let v = &c.verified;
        let within = target
            .max_overshoot_pct
            .is_none_or(|m| v.overshoot_pct <= m);
        let settle = v.settling_time_s.unwrap_or(f64::INFINITY);
        if within {
            (0, settle)
        } else {
            (1, v.overshoot_pct)
        }
    };
    candidates.copied().min_by(|a, b| {
        let (ka, kb) = (key(a), key(b));
        ka.0.cmp(&kb.0).then(ka.1.total_cmp(&kb.1))
    })
}

/// Why no setting meets the spec, in words with the numbers.
fn no_pi_reason(grid: &[Candidate], target: &Target) -> String {
    let fastest = grid
        .iter()
        .filter(|c| {
            target
                .max_overshoot_pct
                .is_none_or(|m| c.verified.overshoot_pct <= m)
        })
        .filter_map(|c| c.verified.settling_time_s)
        .fold(f64::INFINITY, f64::min);
    let today = target.achieved_settling_s.map_or(String::new(), |a| {
        format!(
            ", nor faster than the {} the loop settles in today",
            crate::units::human_duration(a)
        )
    });
    let within = target.max_overshoot_pct.map_or(String::new(), |m| {
        format!(" with overshoot within {} %", crate::units::sig(m, 2))
    });
    if fastest.is_finite() {
        format!(
            "no PI tuned by SIMC settles this step within {}{within} on this model{today}; the \
             fastest such settles in {}",
            crate::units::human_duration(target.spec_s),
            crate::units::human_duration(fastest)
        )
    } else {
        format!(
            "no PI tuned by SIMC settles this step{within} on this model at any closed-loop \
             speed{today}"
        )
    }
}
