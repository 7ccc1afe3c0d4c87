//! PI settings by the SIMC rules (Skogestad, "Simple analytic rules for model reduction and PID
//! controller tuning", J. Process Control 13 (2003) 291–309), verified by simulation on the
//! identified model before they are suggested.
//!
//! - [`retune`] ([`choose`]): the closed-loop time constant τc chosen so the verified response
//!   meets the spec — settling time and overshoot — with Ms ≤ 2, never slower than the loop
//!   today; or a refusal saying why, with the best safe settings.
//! - [`verify`] ([`verify`](mod@verify)): settings simulated on the model in its own family, the
//!   OP clamped with clamping anti-windup, with their maximum sensitivity ([`sensitivity`]).
//! - [`suggest`] and [`predict`]: the earlier suggestion, τc chosen so the controller's initial
//!   OP move fits the actuator headroom, on the first-order equivalent.

use super::controller::Ideal;
use super::identify::{Family, Fopdt, Model};
use super::metrics::OpRange;
use serde::Serialize;

mod choose;
mod sensitivity;
mod verify;

pub use choose::{AIM, Candidate, Suggestion, retune};
pub use sensitivity::max_sensitivity;
pub use verify::{Target, Verified, verify};

/// The usual robustness limit on the maximum sensitivity (Åström & Hägglund, *Advanced PID
/// Control*, ISA 2006, ch. 4 — from memory).
pub const MAX_SENSITIVITY: f64 = 2.0;

/// SIMC PI settings for `model` at closed-loop time constant `tau_c`, in the canonical ideal
/// form. An integrating model takes SIMC's integrating rule, Kc = 1/(k·(τc + θ)),
/// τI = 4·(τc + θ), with θ its equivalent dead time (half its lag added); every other family the
/// first-order rule on its first-order equivalent for a step of this sign (a two-direction model
/// has one per direction).
pub fn simc_for(model: &Model, step: f64, tau_c: f64) -> Ideal {
    let (gain, integral_time_s) = match model.family {
        Family::Integrating { gain_per_s, .. } => {
            let t = tau_c + model.dead_time_s;
            (1.0 / (gain_per_s * t), 4.0 * t)
        }
        _ => simc_pi(
            &model.closed_form(step > 0.0).unwrap_or(model.fopdt()),
            tau_c,
        ),
    };
    Ideal {
        gain,
        integral_time_s,
        derivative_time_s: 0.0,
    }
}

/// Suggested PI settings with the reasoning numbers behind them.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PiSuggestion {
    /// Proportional gain Kc in OP units per PV unit; negative means reverse (direct-acting
    /// process sign conventions differ between controllers — the sign here is Kc·K > 0).
    pub gain: f64,
    pub integral_time_s: f64,
    /// The SIMC tuning parameter τc that was chosen.
    pub closed_loop_time_constant_s: f64,
    /// Settling time these settings give for the typical change, simulated on the identified model
    /// with the OP limits; `None` when the simulated response does not settle.
    pub expected_settling_time_s: Option<f64>,
    pub expected_overshoot_pct: f64,
    /// Whether the controller's initial OP move Kc·|Δ| fits the headroom; when it does not, the
    /// OP saturates briefly after a change and the controller needs anti-windup.
    pub initial_move_fits_headroom: bool,
}

/// SIMC PI for an FOPDT: Kc = (1/K)·τ/(τc + θ), τI = min(τ, 4(τc + θ)).
pub fn simc_pi(m: &Fopdt, tau_c: f64) -> (f64, f64) {
    let kc = m.time_constant_s / (m.gain * (tau_c + m.dead_time_s));
    let ti = m.time_constant_s.min(4.0 * (tau_c + m.dead_time_s));
    (kc, ti)
}

/// The τc for which the initial OP move Kc·|Δ| equals the headroom `h`, but never below the SIMC
/// "tight" choice τc = θ, nor below `floor_s` (a sample interval, so a process without dead time
/// does not get an infinite gain).
pub fn tau_c_for_headroom(m: &Fopdt, delta: f64, h: f64, floor_s: f64) -> f64 {
    let kick_limited = if h > 0.0 {
        m.time_constant_s * delta.abs() / (m.gain.abs() * h) - m.dead_time_s
    } else {
        f64::INFINITY
    };
    kick_limited.max(m.dead_time_s).max(floor_s)
}

/// Suggests PI settings for a typical change `delta` from operating point `u0`, and predicts the
/// response on the model with the actuator range. `sample_s` is the loop's sample interval.
///
/// τc starts where the controller's initial OP move fits the headroom (never below θ). If the
/// response predicted with those settings misses `spec_s`, τc is tightened step by step towards θ
/// and the largest τc that meets the spec is taken: the OP then saturates briefly after a change,
/// which a controller with anti-windup handles (the prediction includes the clamp). If even τc = θ
/// misses, that fastest robust setting is returned with its predicted settling time.
#[allow(clippy::too_many_arguments)]
pub fn suggest(
    m: &Fopdt,
    delta: f64,
    u0: f64,
    op: OpRange,
    band: f64,
    sample_s: f64,
    spec_s: f64,
) -> PiSuggestion {
    let dir = super::feasibility::op_direction(m.gain, delta);
    let h = super::feasibility::headroom(u0, dir, op.min, op.max);
    let floor = m.dead_time_s.max(sample_s.max(1e-6));
    let fitted = tau_c_for_headroom(m, delta, h, floor);
    let evaluate = |tau_c: f64| -> PiSuggestion {
        let (kc, ti) = simc_pi(m, tau_c);
        let (settle, overshoot) = predict(m, kc, ti, delta, u0, op, band, sample_s);
        PiSuggestion {
            gain: kc,
            integral_time_s: ti,
            closed_loop_time_constant_s: tau_c,
            expected_settling_time_s: settle,
            expected_overshoot_pct: overshoot,
            initial_move_fits_headroom: (kc * delta).abs() <= h * (1.0 + 1e-9),
        }
    };
    let meets = |s: &PiSuggestion| s.expected_settling_time_s.is_some_and(|t| t <= spec_s);
    let first = evaluate(fitted);
    if meets(&first) || fitted <= floor {
        return first;
    }
    const STEPS: usize = 12;
    let mut fastest = first;
    for k in 1..=STEPS {
        let tau_c = fitted * (floor / fitted).powf(k as f64 / STEPS as f64);
        let s = evaluate(tau_c);
        if meets(&s) {
            return s;
        }
        fastest = s;
    }
    fastest
}

/// Simulates a setpoint change on the first-order model under the given PI with the OP limits
/// (clamping anti-windup) and scores it: settling time and overshoot. `band` is a fraction of
/// the change.
#[allow(clippy::too_many_arguments)]
pub fn predict(
    m: &Fopdt,
    kc: f64,
    ti: f64,
    delta: f64,
    u0: f64,
    op: OpRange,
    band: f64,
    sample_s: f64,
) -> (Option<f64>, f64) {
    let target = Target {
        step: delta,
        from_op: u0,
        op,
        band: band * delta.abs(),
        spec_s: f64::INFINITY,
        max_overshoot_pct: None,
        achieved_settling_s: None,
    };
    let ideal = Ideal {
        gain: kc,
        integral_time_s: ti,
        derivative_time_s: 0.0,
    };
    verify::step_response(
        &Model::first_order(*m, 1.0, 0, 0),
        &ideal,
        &target,
        sample_s,
        verify::FINE,
    )
}

#[cfg(test)]
mod tests;
