//! Settings tried on the identified model before they are suggested: a setpoint step simulated
//! in the model's own family with the OP clamped to its limits and clamping anti-windup, scored
//! by the product's settling rule ([`metrics::step_metrics`]), with the maximum sensitivity of
//! the loop beside it.

use super::super::controller::Ideal;
use super::super::identify::{Family, Model};
use super::super::metrics::{self, OpRange, Response};
use super::super::sim::{
    Dynamics, IntegratingProcess, LoopSim, PiController, PlantSimConfig, Process,
    TwoDirectionProcess, ValveProcess,
};
use super::sensitivity;
use serde::Serialize;

/// The change the settings are judged on and the spec they must meet.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Target {
    /// The setpoint step, signed, PV units.
    pub step: f64,
    /// The OP at steady state before the step.
    pub from_op: f64,
    pub op: OpRange,
    /// The settling band's half-width around the new setpoint, PV units.
    pub band: f64,
    /// The spec's settling time, seconds.
    pub spec_s: f64,
    /// The spec's overshoot limit, % of the step; `None` for no limit.
    pub max_overshoot_pct: Option<f64>,
    /// What the loop achieves today for such a step (seconds), when known: a suggestion is never
    /// slower.
    pub achieved_settling_s: Option<f64>,
}

impl Target {
    /// Whether a settling time and an overshoot meet the spec.
    pub fn met_by(&self, settling_time_s: Option<f64>, overshoot_pct: f64) -> bool {
        settling_time_s.is_some_and(|t| t <= self.spec_s)
            && self.max_overshoot_pct.is_none_or(|m| overshoot_pct <= m)
    }

    /// Whether a settling time is no slower than what the loop achieves today.
    pub fn no_slower_than_today(&self, settling_time_s: Option<f64>) -> bool {
        match self.achieved_settling_s {
            None => true,
            Some(a) => settling_time_s.is_some_and(|t| t <= a),
        }
    }
}

/// The settings' response on the model (JSON: `recommendation.retune.verified`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Verified {
    pub step: f64,
    pub from_op: f64,
    /// `None` when the simulated response does not settle.
    pub settling_time_s: Option<f64>,
    pub overshoot_pct: f64,
    /// Ms = max over ω of |1/(1 + L(jω))|, L = C·G.
    pub max_sensitivity: f64,
    /// Settling within the spec time and overshoot within the spec's limit.
    pub meets_spec: bool,
}

/// Integration steps per time scale of the verified response (see [`step_response`]).
pub(super) const FINE: f64 = 10_000.0;
/// Integration steps per time scale while τc is searched: ten times cheaper, within a few tenths
/// of a point of overshoot and a fraction of a sample of settling of the fine figure; the
/// chosen settings are verified again at [`FINE`].
pub(super) const COARSE: f64 = 1_000.0;

/// The settings simulated on the model for the target's step, with their maximum sensitivity.
pub fn verify(model: &Model, ideal: &Ideal, target: &Target, sample_s: f64) -> Verified {
    verify_at(model, ideal, target, sample_s, FINE)
}

/// [`verify`] with `steps_per_scale` integration steps per time scale.
pub(super) fn verify_at(
    model: &Model,
    ideal: &Ideal,
    target: &Target,
    sample_s: f64,
    steps_per_scale: f64,
) -> Verified {
    let (settling_time_s, overshoot_pct) =
        step_response(model, ideal, target, sample_s, steps_per_scale);
    let max_sensitivity = sensitivity::max_sensitivity(model, ideal, &operating_ops(model, target));
    Verified {
        step: target.step,
        from_op: target.from_op,
        settling_time_s,
        overshoot_pct,
        max_sensitivity,
        meets_spec: target.met_by(settling_time_s, overshoot_pct),
    }
}

/// The OPs the loop lives at around the step: where it starts, and where it holds the new
/// setpoint (when the model says and the actuator reaches it). A model whose gain varies with
/// the OP is judged at each.
fn operating_ops(model: &Model, target: &Target) -> Vec<f64> {
    let mut ops = vec![target.from_op];
    if let Family::OpDependentGain { mapped_gain, .. } = model.family {
        let map = model.op_map();
        let v_end = map.apply(target.from_op) + target.step / mapped_gain;
        let u_end = map.inverse(v_end);
        if u_end.is_finite() {
            ops.push(u_end.clamp(target.op.min, target.op.max));
        }
    }
    ops
}

/// The simulated step's settling time (the last recorded sample outside the band; `None` if the
/// PV is still outside at the end) and overshoot (% of the step).
pub(super) fn step_response(
    model: &Model,
    ideal: &Ideal,
    target: &Target,
    sample_s: f64,
    steps_per_scale: f64,
) -> (Option<f64>, f64) {
    if target.step == 0.0 || !target.step.is_finite() {
        return (Some(0.0), 0.0);
    }
    let plant = SimPlant::of(model, target);
    let scale =
        plant.time_scale_s + closed_loop_time_s(model, ideal) + finite(ideal.integral_time_s);
    // Ten thousand steps across the slowest time scale: the discrete controller's half-step
    // of extra delay then moves an aggressive loop's overshoot by well under 0.1 point and its
    // settling by under a sample (checked against a continuous reference in
    // tests/reference/tuning_check.py); twelve time scales see the response through.
    // The step divides the sample interval, so the response is recorded on the loop's own
    // sample times (every few samples when that would make half a million of them).
    let sample_s = sample_s.max(1e-6);
    let substeps = (sample_s / (scale / steps_per_scale).max(1e-4))
        .ceil()
        .max(1.0);
    let step_s = sample_s / substeps;
    let duration = 12.0 * scale;
    let record_s = sample_s * (duration / 500_000.0 / sample_s).ceil().max(1.0);
    let x = plant.op_scale;
    // The map is increasing (op_scale > 0), so the limits keep their order.
    let op_range = OpRange {
        min: plant.to_sim(target.op.min),
        max: plant.to_sim(target.op.max),
    };
    let cfg = PlantSimConfig {
        dynamics: plant.dynamics,
        controller: PiController {
            gain: ideal.gain * x,
            integral_time_s: ideal.integral_time_s,
            op_min: op_range.min,
            op_max: op_range.max,
        },
        step_s,
        noise_sd: 0.0,
        seed: 0,
        initial_sp: plant.start_pv,
    };
    let mut sim = LoopSim::of_plant(cfg).with_clamping_anti_windup();
    let y0 = plant.start_pv;
    let samples = sim.run(&[(0.0, y0 + target.step)], duration, record_s);
    let column = |f: fn(&super::super::sim::SimSample) -> f64| -> Vec<f64> {
        samples.iter().map(f).collect()
    };
    let (t, sp, pv, u) = (
        column(|s| s.time_s),
        column(|s| s.sp),
        column(|s| s.pv),
        column(|s| s.op),
    );
    let scored = metrics::step_metrics(
        Response {
            time_s: &t,
            sp: &sp,
            pv: &pv,
            op: &u,
        },
        y0,
        y0 + target.step,
        target.band / target.step.abs(),
        op_range,
        0.005,
        1.0,
    );
    scored.map_or((None, 0.0), |s| (s.settling_time_s, s.overshoot_pct))
}

fn finite(x: f64) -> f64 {
    if x.is_finite() { x } else { 0.0 }
}

/// The closed loop's own time scale, |τ/(Kc·K)| for a self-regulating model (the closed-loop
/// time constant when Ti = τ) or 1/|Kc·k| for an integrating one: how long to watch.
fn closed_loop_time_s(model: &Model, ideal: &Ideal) -> f64 {
    let t = match model.family {
        Family::Integrating { gain_per_s, .. } => 1.0 / (ideal.gain * gain_per_s).abs(),
        _ => (model.time_constant_s / (ideal.gain * model.gain)).abs(),
    };
    if t.is_finite() { t } else { 0.0 }
}

/// The model as a simulated plant: its family's dynamics, and the map from the controller's OP
/// to the plant's input (the identity except for an OP-dependent gain).
struct SimPlant {
    dynamics: Dynamics,
    /// The simulated OP is `op_offset + op_scale · OP`.
    op_offset: f64,
    op_scale: f64,
    /// The PV at steady state at the target's `from_op`.
    start_pv: f64,
    /// The plant's slowest time scale plus its dead time (s).
    time_scale_s: f64,
}

impl SimPlant {
    fn to_sim(&self, op: f64) -> f64 {
        self.op_offset + self.op_scale * op
    }

    fn of(model: &Model, target: &Target) -> SimPlant {
        let lags = |gain: f64, tau1: f64, tau2: f64, theta: f64| {
            Dynamics::Lags(Process {
                gain,
                time_constant_s: tau1,
                second_time_constant_s: tau2,
                dead_time_s: theta,
                bias: 0.0,
            })
        };
        let (tau, theta) = (model.time_constant_s, model.dead_time_s);
        let (dynamics, op_offset, op_scale, time_scale_s) = match model.family {
            Family::FirstOrder => (lags(model.gain, tau, 0.0, theta), 0.0, 1.0, tau + theta),
            Family::SecondOrder {
                first_time_constant_s: t1,
                second_time_constant_s: t2,
                process_dead_time_s: th,
            } => (lags(model.gain, t1, t2, th), 0.0, 1.0, t1 + t2 + th),
            Family::Integrating {
                gain_per_s,
                lag_s,
                process_dead_time_s,
            } => {
                let lag = lag_s.unwrap_or(0.0);
                let p = IntegratingProcess {
                    gain_per_s,
                    lag_s: lag,
                    dead_time_s: process_dead_time_s,
                    balance_op: target.from_op,
                };
                (
                    Dynamics::Integrating(p),
                    0.0,
                    1.0,
                    lag + process_dead_time_s,
                )
            }
            Family::TwoDirection {
                falling_gain,
                falling_time_constant_s,
                falling_dead_time_s,
                ..
            } => {
                // The step's own direction sets the gain and dead time; the PV moves back (an
                // overshoot recovering) with the other direction's time constant.
                let rising = target.step > 0.0;
                let (gain, dead) = if rising {
                    (model.gain, theta)
                } else {
                    (falling_gain, falling_dead_time_s)
                };
                let p = TwoDirectionProcess {
                    gain,
                    rise_time_constant_s: tau,
                    fall_time_constant_s: falling_time_constant_s,
                    dead_time_s: dead,
                    bias: 0.0,
                };
                let slow = tau.max(falling_time_constant_s);
                (Dynamics::TwoDirection(p), 0.0, 1.0, slow + dead)
            }
            Family::OpDependentGain {
                valve_shape,
                mapped_gain,
                op_min,
                op_max,
                ..
            } => valve_plant(model, valve_shape, mapped_gain, op_min, op_max),
        };
        let sim_from = op_offset + op_scale * target.from_op;
        let start_pv = dynamics.steady_pv(sim_from).unwrap_or(0.0);
        SimPlant {
            dynamics,
            op_offset,
            op_scale,
            start_pv,
            time_scale_s,
        }
    }
}

/// The first-order model after the OP map f(u) = lo + span·(e^(α·x) − 1)/(e^α − 1),
/// x = (u − lo)/span, as the simulator's equal-percentage valve: with R = e^α and the valve's
/// opening u′ = 100·x, f(u) = lo − span/(R − 1) + span·R/(R − 1)·R^(u′/100 − 1), so the valve's
/// gain is K·span·R/(100·(R − 1)) and its bias K·(lo − span/(R − 1)) (algebra on the two
/// definitions). A map too close to linear is simulated as the plain first-order model.
pub(super) fn valve_plant(
    model: &Model,
    shape: f64,
    mapped_gain: f64,
    lo: f64,
    hi: f64,
) -> (Dynamics, f64, f64, f64) {
    let (tau, theta) = (model.time_constant_s, model.dead_time_s);
    let span = hi - lo;
    if shape.abs() < 1e-6 || span <= 0.0 {
        let p = Process {
            gain: mapped_gain,
            time_constant_s: tau,
            second_time_constant_s: 0.0,
            dead_time_s: theta,
            bias: 0.0,
        };
        return (Dynamics::Lags(p), 0.0, 1.0, tau + theta);
    }
    let r = shape.exp();
    let v = ValveProcess {
        gain: mapped_gain * span * r / (100.0 * (r - 1.0)),
        rangeability: r,
        time_constant_s: tau,
        dead_time_s: theta,
        bias: mapped_gain * (lo - span / (r - 1.0)),
    };
    let scale = 100.0 / span;
    (Dynamics::Valve(v), -lo * scale, scale, tau + theta)
}
