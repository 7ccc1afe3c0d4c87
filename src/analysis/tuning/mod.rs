//! PI settings by the SIMC rules (Skogestad, "Simple analytic rules for model reduction and PID
//! controller tuning", J. Process Control 13 (2003) 291–309), verified by simulation on the
//! identified model before they are suggested.
//!
//! - [`retune`] ([`choose`]): the closed-loop time constant τc chosen so the verified response
//!   meets the spec — settling time and overshoot — with Ms ≤ 2, never slower than the loop
//!   today; or a refusal saying why, with the best safe settings.
//! - [`verify`] ([`verify`](mod@verify)): settings simulated on the model in its own family, the
//!   OP clamped with clamping anti-windup, with their maximum sensitivity ([`sensitivity`]).
//! - [`simc_pi`] and [`predict`]: the first-order rule and a response on the first-order
//!   equivalent, for what a tight PI achieves beside the actuator's bound.

use super::controller::Ideal;
use super::identify::{Family, Fopdt, Model};
use super::metrics::OpRange;

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

/// SIMC PI for an FOPDT: Kc = (1/K)·τ/(τc + θ), τI = min(τ, 4(τc + θ)).
pub fn simc_pi(m: &Fopdt, tau_c: f64) -> (f64, f64) {
    let kc = m.time_constant_s / (m.gain * (tau_c + m.dead_time_s));
    let ti = m.time_constant_s.min(4.0 * (tau_c + m.dead_time_s));
    (kc, ti)
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
