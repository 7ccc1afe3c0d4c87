//! PI settings by the SIMC rules (Skogestad, "Simple analytic rules for model reduction and PID
//! controller tuning", J. Process Control 13 (2003) 291–309), with the closed-loop time constant
//! chosen so the controller's initial OP move fits the actuator headroom, and the response those
//! settings would give, predicted by simulation on the identified model with the actuator limits.

use super::identify::Fopdt;
use super::metrics::{self, OpRange, Response};
use super::sim::{LoopSim, LoopSimConfig, PiController, Process};
use serde::Serialize;

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

/// Simulates a setpoint change on the model under the given PI with the OP limits and scores it.
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
    // A thousand steps across the slowest time scale keep the discretisation error of the
    // prediction near 0.1 % of the change, far below what the model's own accuracy allows.
    let slowest = m.time_constant_s + m.dead_time_s + ti;
    let step = (slowest / 1000.0).min(sample_s.max(1e-6)).max(1e-4);
    let y0 = m.gain * u0;
    let mut sim = LoopSim::new(LoopSimConfig {
        process: Process {
            gain: m.gain,
            time_constant_s: m.time_constant_s,
            second_time_constant_s: 0.0,
            dead_time_s: m.dead_time_s,
            bias: 0.0,
        },
        controller: PiController {
            gain: kc,
            integral_time_s: ti,
            op_min: op.min,
            op_max: op.max,
        },
        step_s: step,
        noise_sd: 0.0,
        seed: 0,
        initial_sp: y0,
    });
    let duration = 12.0 * slowest;
    let samples = sim.run(&[(0.0, y0 + delta)], duration, sample_s.max(step));
    let t: Vec<f64> = samples.iter().map(|s| s.time_s).collect();
    let sp: Vec<f64> = samples.iter().map(|s| s.sp).collect();
    let pv: Vec<f64> = samples.iter().map(|s| s.pv).collect();
    let u: Vec<f64> = samples.iter().map(|s| s.op).collect();
    let scored = metrics::step_metrics(
        Response {
            time_s: &t,
            sp: &sp,
            pv: &pv,
            op: &u,
        },
        y0,
        y0 + delta,
        band,
        op,
        0.005,
        1.0,
    );
    match scored {
        Some(s) => (s.settling_time_s, s.overshoot_pct),
        None => (None, 0.0),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn simc_matches_the_published_rule() {
        // Skogestad 2003, FOPDT PI: Kc = τ/(K(τc+θ)), τI = min(τ, 4(τc+θ)). K=2, τ=10, θ=2,
        // τc=θ → Kc = 1.25, τI = min(10, 16) = 10.
        let m = Fopdt {
            gain: 2.0,
            time_constant_s: 10.0,
            dead_time_s: 2.0,
        };
        let (kc, ti) = simc_pi(&m, 2.0);
        assert!((kc - 1.25).abs() < 1e-12 && (ti - 10.0).abs() < 1e-12);
        // A lag-dominant process hits the 4(τc+θ) cap: τ=100, θ=1, τc=1 → τI = 8.
        let lag = Fopdt {
            gain: 1.0,
            time_constant_s: 100.0,
            dead_time_s: 1.0,
        };
        assert_eq!(simc_pi(&lag, 1.0).1, 8.0);
    }

    #[test]
    fn simc_tight_tuning_gives_the_simulated_closed_loop_response() {
        // K=2, τ=10, θ=2, τc=θ, Δ=1, no actuator limit in reach: exact-delay simulation gives
        // overshoot 4.06 % and 2 % settling 12.12 (values computed independently with numpy).
        let m = Fopdt {
            gain: 2.0,
            time_constant_s: 10.0,
            dead_time_s: 2.0,
        };
        let (settle, os) = predict(
            &m,
            1.25,
            10.0,
            1.0,
            0.0,
            OpRange {
                min: -100.0,
                max: 100.0,
            },
            0.02,
            0.001,
        );
        assert!((os - 4.06).abs() < 0.02, "{os}");
        // Our settling time is the last sample outside the band, one sample before the
        // reference's convention.
        assert!((settle.unwrap() - 12.12).abs() < 0.01, "{settle:?}");
    }

    #[test]
    fn tau_c_grows_until_the_initial_kick_fits_the_headroom() {
        let m = Fopdt {
            gain: 2.0,
            time_constant_s: 10.0,
            dead_time_s: 2.0,
        };
        // SIMC tight would kick Kc·Δ = 1.25; with only 0.5 of headroom τc must be 10·1/(2·0.5) − 2 = 8.
        let tc = tau_c_for_headroom(&m, 1.0, 0.5, 0.1);
        assert!((tc - 8.0).abs() < 1e-12);
        let (kc, _) = simc_pi(&m, tc);
        assert!((kc * 1.0 - 0.5).abs() < 1e-12);
        // With plenty of headroom the tight choice τc = θ stands.
        assert_eq!(tau_c_for_headroom(&m, 1.0, 10.0, 0.1), 2.0);
    }

    #[test]
    fn reverse_acting_process_gets_a_negative_controller_gain() {
        let m = Fopdt {
            gain: -0.8,
            time_constant_s: 60.0,
            dead_time_s: 5.0,
        };
        let s = suggest(
            &m,
            -3.0,
            40.0,
            OpRange {
                min: 0.0,
                max: 100.0,
            },
            0.02,
            1.0,
            1e6,
        );
        assert!(s.gain < 0.0);
        assert!(s.expected_settling_time_s.is_some());
        assert!(s.initial_move_fits_headroom);
    }

    #[test]
    fn tau_c_is_tightened_below_the_headroom_fit_when_that_misses_the_spec() {
        let m = Fopdt {
            gain: 0.55,
            time_constant_s: 600.0,
            dead_time_s: 35.0,
        };
        let op = OpRange {
            min: 0.0,
            max: 100.0,
        };
        let relaxed = suggest(&m, 5.0, 80.0, op, 0.02, 10.0, 1e6);
        assert!(relaxed.initial_move_fits_headroom, "{relaxed:?}");
        let spec = 0.8 * relaxed.expected_settling_time_s.unwrap();
        let tight = suggest(&m, 5.0, 80.0, op, 0.02, 10.0, spec);
        assert!(tight.closed_loop_time_constant_s < relaxed.closed_loop_time_constant_s);
        assert!(tight.closed_loop_time_constant_s >= m.dead_time_s);
        assert!(tight.expected_settling_time_s.unwrap() <= spec, "{tight:?}");
        assert!(!tight.initial_move_fits_headroom, "{tight:?}");
    }
}
