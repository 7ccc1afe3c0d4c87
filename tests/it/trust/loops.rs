//! The corpus loops: a random loop of each model family, its setpoint schedule, and the degraded
//! records made from its run.

use crate::common::degrade::{self, Signal};
use headroom::analysis::Spec;
use headroom::analysis::sim::{
    Dynamics, IntegratingProcess, PiController, PlantSimConfig, Process, Rng, SimSample,
    TwoDirectionProcess, ValveProcess,
};

pub(super) const BAND: f64 = 0.02;
pub(super) const MAX_OVERSHOOT_PCT: f64 = 25.0;
pub(super) const LOOPS_PER_FAMILY: usize = 16;

#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub(super) enum Family {
    FirstOrder,
    SecondOrder,
    Integrating,
    TwoDirection,
    Valve,
}

pub(super) const FAMILIES: [Family; 5] = [
    Family::FirstOrder,
    Family::SecondOrder,
    Family::Integrating,
    Family::TwoDirection,
    Family::Valve,
];

/// How the analysed record was made from the noisy run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub(super) enum Variant {
    Clean,
    CoarseSampling,
    Exception,
    QuantisedPv,
    Frozen,
    CoarseOp,
    ClippedPv,
}

pub(super) const VARIANTS: [Variant; 7] = [
    Variant::Clean,
    Variant::CoarseSampling,
    Variant::Exception,
    Variant::QuantisedPv,
    Variant::Frozen,
    Variant::CoarseOp,
    Variant::ClippedPv,
];

pub(super) struct TrustLoop {
    pub(super) family: Family,
    /// The plant and controller, noise-free.
    pub(super) plant: PlantSimConfig,
    pub(super) sample_s: f64,
    pub(super) schedule: Vec<(f64, f64)>,
    pub(super) duration_s: f64,
    pub(super) spec: Spec,
    /// The time between setpoint changes.
    pub(super) hold_s: f64,
}

pub(super) fn pick(rng: &mut Rng, lo: f64, hi: f64) -> f64 {
    lo + (hi - lo) * rng.uniform()
}

pub(super) fn one_of<const N: usize>(rng: &mut Rng, xs: [f64; N]) -> f64 {
    xs[((rng.uniform() * N as f64) as usize).min(N - 1)]
}

/// The sampling period: the slowest of 0.5, 1, 2, 5 s with at least 15 samples per `fast_s`
/// and one per dead time.
pub(super) fn sampling(fast_s: f64, dead_time_s: f64) -> f64 {
    [0.5, 1.0, 2.0, 5.0]
        .into_iter()
        .rfind(|dt| fast_s / dt >= 15.0 && dead_time_s / dt >= 1.0)
        .unwrap_or(0.5)
}

/// SIMC PI for K·e^(−θs)/(τs + 1): Kc = τ/(K(τc + θ)), τI = min(τ, 4(τc + θ)) (Skogestad 2003).
pub(super) fn simc(gain: f64, tau: f64, theta: f64, tau_c: f64) -> (f64, f64) {
    (
        tau / (gain * (tau_c + theta)),
        tau.min(4.0 * (tau_c + theta)),
    )
}

/// A random loop of `family`: plant, tuning (tight to sluggish), actuator limits, steps and spec.
pub(super) fn random_loop(family: Family, rng: &mut Rng) -> TrustLoop {
    let sign = if rng.uniform() < 0.25 { -1.0 } else { 1.0 };
    let u0 = pick(rng, 30.0, 50.0);
    let op_max = if rng.uniform() < 0.4 {
        pick(rng, 55.0, 75.0)
    } else {
        100.0
    };
    let op_min = if rng.uniform() < 0.3 {
        pick(rng, 10.0, 25.0)
    } else {
        0.0
    };
    let sp0 = 50.0;
    let tau = pick(rng, 20.0, 400.0);
    let theta = tau * pick(rng, 0.05, 0.4);
    let gain = sign * pick(rng, 0.3, 2.5);
    let bias = sp0 - gain * u0;
    let tight = [1.0, 1.5, 2.0, 3.0, 6.0];
    // (dynamics, fast time scale for sampling, slow one for the hold, (Kc, τI), spec)
    let (dynamics, fast_s, slow_s, pi, spec_s) = match family {
        Family::FirstOrder => {
            let p = Process {
                gain,
                time_constant_s: tau,
                second_time_constant_s: 0.0,
                dead_time_s: theta,
                bias,
            };
            let pi = simc(gain, tau, theta, theta * one_of(rng, tight));
            let spec = theta + tau * pick(rng, 0.7, 3.0);
            (Dynamics::Lags(p), tau, tau, pi, spec)
        }
        Family::SecondOrder => {
            // Two non-interacting tanks (or lags) in series, K/((τ1 s + 1)(τ2 s + 1))·e^(−θs)
            // (Seborg, Edgar & Mellichamp, Process Dynamics and Control, ch. 6 — from memory).
            let tau2 = tau * pick(rng, 0.2, 0.8);
            let p = Process {
                gain,
                time_constant_s: tau,
                second_time_constant_s: tau2,
                dead_time_s: theta,
                bias,
            };
            // Skogestad's half rule: half of τ2 to τ1, half to θ.
            let (tau_e, theta_e) = (tau + tau2 / 2.0, theta + tau2 / 2.0);
            let pi = simc(gain, tau_e, theta_e, theta_e * one_of(rng, tight));
            let spec = theta_e + tau_e * pick(rng, 0.7, 3.0);
            (Dynamics::Lags(p), tau2, tau + tau2, pi, spec)
        }
        Family::Integrating => {
            let k = sign * pick(rng, 0.002, 0.02);
            let theta = pick(rng, 2.0, 30.0);
            let lag = if rng.uniform() < 0.5 {
                0.0
            } else {
                theta * pick(rng, 0.5, 3.0)
            };
            let p = IntegratingProcess {
                gain_per_s: k,
                lag_s: lag,
                dead_time_s: theta,
                balance_op: u0,
            };
            // SIMC for k·e^(−θs)/s: Kc = 1/(k(τc + θ)), τI = 4(τc + θ) (Skogestad 2003); the lag
            // counted as dead time (common practice for a PI).
            let theta_e = theta + lag;
            let tau_c = theta_e * one_of(rng, tight);
            let pi = (1.0 / (k * (tau_c + theta_e)), 4.0 * (tau_c + theta_e));
            let spec = (tau_c + theta_e) * pick(rng, 2.0, 6.0);
            (
                Dynamics::Integrating(p),
                tau_c + theta_e,
                2.0 * (tau_c + theta_e),
                pi,
                spec,
            )
        }
        Family::TwoDirection => {
            // Heats actively, cools passively: slower when the PV falls (or, now and then, the
            // other way round).
            let ratio = pick(rng, 1.5, 4.0);
            let (rise, fall) = if rng.uniform() < 0.8 {
                (tau, tau * ratio)
            } else {
                (tau * ratio, tau)
            };
            let p = TwoDirectionProcess {
                gain,
                rise_time_constant_s: rise,
                fall_time_constant_s: fall,
                dead_time_s: theta,
                bias,
            };
            let pi = simc(gain, rise, theta, theta * one_of(rng, tight));
            let spec = theta + rise.min(fall) * pick(rng, 0.7, 3.0);
            (
                Dynamics::TwoDirection(p),
                rise.min(fall),
                rise.max(fall),
                pi,
                spec,
            )
        }
        Family::Valve => {
            let rangeability = pick(rng, 20.0, 50.0);
            let mut v = ValveProcess {
                gain: 1.0,
                rangeability,
                time_constant_s: tau,
                dead_time_s: theta,
                bias: 0.0,
            };
            // Scale so that the local gain at the operating point is `gain`, and put the PV at sp0.
            v.gain = gain / v.local_gain(u0);
            v.bias = sp0 - v.gain * 100.0 * v.flow_fraction(u0);
            // Tuned at the operating point; the loop gain grows with OP, so never tighter than
            // τc = 1.5θ.
            let pi = simc(gain, tau, theta, theta * one_of(rng, [1.5, 3.0, 6.0, 8.0]));
            let spec = theta + tau * pick(rng, 0.7, 3.0);
            (Dynamics::Valve(v), tau, tau, pi, spec)
        }
    };
    let sample_s = sampling(fast_s, theta);
    // Changes fall on samples, so the change time in the record is the true one.
    let on_samples = |t: f64| (t / sample_s).round() * sample_s;
    let spec_s = on_samples(spec_s);
    let hold_s = on_samples((spec_s * 4.0).max(8.0 * slow_s));
    let plant = PlantSimConfig {
        dynamics,
        controller: PiController {
            gain: pi.0,
            integral_time_s: pi.1,
            op_min,
            op_max,
        },
        step_s: sample_s / 5.0,
        noise_sd: 0.0,
        seed: 0,
        initial_sp: sp0,
    };
    let levels = setpoint_levels(rng, &plant, spec_s);
    let schedule: Vec<(f64, f64)> = levels
        .iter()
        .enumerate()
        .map(|(i, &sp)| (on_samples(hold_s * (i as f64 + 0.5)), sp))
        .collect();
    TrustLoop {
        family,
        plant,
        sample_s,
        duration_s: hold_s * (levels.len() as f64 + 0.5),
        schedule,
        spec: Spec {
            settle_band_pct: 100.0 * BAND,
            settle_band: None,
            settle_within_s: spec_s,
            // Level loops commonly carry no overshoot limit (averaging level control; common
            // practice), and a PI on an integrating process overshoots a setpoint step.
            max_overshoot_pct: (family != Family::Integrating).then_some(MAX_OVERSHOOT_PCT),
            hold_band: None,
            recover_within_s: None,
        },
        hold_s,
    }
}

/// Four excursions from the initial setpoint, each away (towards either OP limit, sized as a
/// share of the actuator's reach that may exceed it), sometimes on to a second level from
/// wherever the first left the PV, then back.
pub(super) fn setpoint_levels(rng: &mut Rng, plant: &PlantSimConfig, spec_s: f64) -> Vec<f64> {
    let sp0 = plant.initial_sp;
    let c = plant.controller;
    let d = plant.dynamics;
    let mut out = Vec::new();
    for _ in 0..4 {
        let more_op = rng.uniform() < 0.7;
        let limit = if more_op { c.op_max } else { c.op_min };
        // The distance the actuator can move the PV from sp0: to its plateau, or for an
        // integrating process, as far as the full headroom ramps in the spec time.
        let reach = match (d, d.steady_pv(limit)) {
            (_, Some(pv)) => pv - sp0,
            (Dynamics::Integrating(p), None) => {
                p.gain_per_s * (limit - p.balance_op) * (spec_s - p.dead_time_s - p.lag_s)
            }
            _ => unreachable!("only an integrating process has no steady state"),
        };
        let (lo, hi) = match d {
            Dynamics::Integrating(_) => (0.2, 2.0),
            _ => (0.15, 1.15),
        };
        let first = pick(rng, lo, hi);
        out.push(sp0 + first * reach);
        if rng.uniform() < 0.35 {
            // On from wherever the first level left the PV, by at least a tenth of the reach.
            let mut second = pick(rng, 0.2, 0.9);
            while (second - first).abs() < 0.1 {
                second = pick(rng, 0.2, 0.9);
            }
            out.push(sp0 + second * reach);
        }
        out.push(sp0);
    }
    out
}

/// The record the analysis sees for `variant`, and how far after the true change time the
/// analysis may place the change.
pub(super) fn degraded(
    l: &TrustLoop,
    noisy: &[SimSample],
    variant: Variant,
    k: usize,
) -> (Vec<SimSample>, f64) {
    let smallest = l
        .schedule
        .iter()
        .scan(l.plant.initial_sp, |prev, &(_, sp)| {
            let d = (sp - *prev).abs();
            *prev = sp;
            Some(d)
        })
        .filter(|d| *d > 0.0)
        .fold(f64::INFINITY, f64::min);
    let c = l.plant.controller;
    let dt = l.sample_s;
    match variant {
        Variant::Clean => (noisy.to_vec(), dt),
        Variant::CoarseSampling => {
            // Dead time under two samples.
            let theta = l.plant.dynamics.dead_time_s();
            let every = ((theta / (2.0 * dt)).floor() as usize + 1).max(2);
            (degrade::coarse(noisy, every), every as f64 * dt)
        }
        Variant::Exception => {
            let pv_db = 0.25 * BAND * smallest;
            let op_db = 0.005 * (c.op_max - c.op_min);
            (degrade::exception(noisy, pv_db, op_db, 30), dt)
        }
        Variant::QuantisedPv => (degrade::quantised_pv(noisy, BAND * smallest), dt),
        Variant::Frozen => {
            // Two stretches, each from a while after a change, for part of the spec time.
            let spec_rows = l.spec.settle_within_s / dt;
            let stretches: Vec<(usize, usize)> = [1, 4]
                .iter()
                .filter_map(|&i| l.schedule.get(i))
                .map(|&(t, _)| {
                    let from = (t / dt + 0.2 * spec_rows).round() as usize;
                    (from, (0.6 * spec_rows).round().max(5.0) as usize)
                })
                .collect();
            let signal = if (k / 2).is_multiple_of(2) {
                Signal::Pv
            } else {
                Signal::Op
            };
            (degrade::frozen(noisy, signal, &stretches), dt)
        }
        Variant::CoarseOp => (degrade::coarse_op(noisy, 10), dt),
        Variant::ClippedPv => {
            let sp0 = l.plant.initial_sp;
            let max = noisy.iter().map(|s| s.pv).fold(f64::NEG_INFINITY, f64::max);
            let min = noisy.iter().map(|s| s.pv).fold(f64::INFINITY, f64::min);
            let (lo, hi) = if max - sp0 >= sp0 - min {
                (f64::NEG_INFINITY, sp0 + 0.85 * (max - sp0))
            } else {
                (sp0 - 0.85 * (sp0 - min), f64::INFINITY)
            };
            (degrade::clipped_pv(noisy, lo, hi), dt)
        }
    }
}
