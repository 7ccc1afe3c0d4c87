//! What is true of each change of a corpus loop, from its noise-free run and the true plant.

use super::loops::{BAND, TrustLoop};
use crate::common::truth::{Target, fastest_settling};
use headroom::analysis::Verdict;
use headroom::analysis::sim::{
    Dynamics, IntegratingProcess, LoopSim, PiController, PlantSimConfig, Process, SimSample,
    TwoDirectionProcess,
};

/// One setpoint change of the noise-free run and what is true of it.
#[derive(Debug, Clone)]
pub(super) struct Truth {
    pub(super) t0: f64,
    pub(super) sp_from: f64,
    pub(super) sp_to: f64,
    /// The clear-cut verdict, or `None` when the change is too close to a boundary.
    pub(super) verdict: Option<Verdict>,
    pub(super) settling_s: Option<f64>,
    /// Whether the settling time is well defined (see [`judge`]).
    pub(super) settling_clear: bool,
    /// The fastest settling the plant allows from its state at the change; `None` when
    /// unreachable.
    pub(super) t_star_s: Option<f64>,
    /// Whether the setpoint lies clearly inside the actuator's reach.
    pub(super) clearly_reachable: bool,
    /// Whether the plant was at rest at the change.
    pub(super) from_rest: bool,
}

/// Runs the loop noise-free, keeping the plant as it stood at each change, and judges each.
pub(super) fn truths(l: &TrustLoop) -> (Vec<SimSample>, Vec<Truth>) {
    let mut starts = Vec::new();
    let mut sim = LoopSim::of_plant(l.plant);
    let rec = sim.run_watched(&l.schedule, l.duration_s, l.sample_s, |s, sp| {
        starts.push((s.time_s(), sp, s.clone()));
    });
    let mut out = Vec::new();
    let mut sp_from = l.plant.initial_sp;
    for (i, (t0, sp_to, start)) in starts.iter().enumerate() {
        let t_end = starts.get(i + 1).map_or(f64::INFINITY, |s| s.0);
        out.push(judge(l, &rec, *t0, t_end, sp_from, *sp_to, start));
        sp_from = *sp_to;
    }
    (rec, out)
}

pub(super) fn judge(
    l: &TrustLoop,
    rec: &[SimSample],
    t0: f64,
    t_end: f64,
    sp_from: f64,
    sp_to: f64,
    start: &LoopSim,
) -> Truth {
    let delta = sp_to - sp_from;
    let mag = delta.abs();
    let half_band = BAND * mag;
    let eps = 1e-6;
    let window: Vec<&SimSample> = rec
        .iter()
        .filter(|s| s.time_s >= t0 - eps && s.time_s < t_end - eps)
        .collect();
    // Settling as DESIGN.md defines it: t0 until the last sample outside the band.
    let settling_in = |half: f64| match window.iter().rposition(|s| (s.pv - sp_to).abs() > half) {
        None => Some(0.0),
        Some(i) if i + 1 == window.len() => None,
        Some(i) => Some(window[i].time_s - t0),
    };
    let settling_s = settling_in(half_band);
    // A settling time is well defined when a band 20 % narrower or wider gives nearly the same
    // time; when the PV lingers near the band's edge, PV noise of a few percent of the band moves
    // it anywhere between the two.
    let (narrow, wide) = (settling_in(0.8 * half_band), settling_in(1.2 * half_band));
    let settling_tol = |a: f64| (2.0 * l.sample_s).max(0.05 * a);
    let settling_clear = match (narrow, settling_s, wide) {
        (Some(n), Some(a), Some(w)) => n - a <= settling_tol(a) && a - w <= settling_tol(a),
        (None, None, None) => true,
        _ => false,
    };
    let overshoot = window
        .iter()
        .map(|s| delta.signum() * (s.pv - sp_to))
        .fold(0.0_f64, f64::max)
        / mag
        * 100.0;
    // At rest: over the half hold before the change the PV and OP stood still.
    let before: Vec<&SimSample> = rec
        .iter()
        .filter(|s| s.time_s < t0 - eps && s.time_s >= t0 - l.hold_s / 2.0)
        .collect();
    let span = |f: fn(&SimSample) -> f64| {
        let (lo, hi) = before
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), s| {
                (a.min(f(s)), b.max(f(s)))
            });
        hi - lo
    };
    let c = l.plant.controller;
    let from_rest = !before.is_empty()
        && span(|s| s.pv) <= 0.005 * mag
        && span(|s| s.op) <= 0.002 * (c.op_max - c.op_min);

    // Reach: how far beyond the setpoint the actuator's plateau lies, as a share of |Δ|.
    let d = l.plant.dynamics;
    let dir = if sp_to >= start.pv_true() { 1.0 } else { -1.0 };
    let far = if (dir > 0.0) == d.pv_rises_with_op() {
        c.op_max
    } else {
        c.op_min
    };
    let room = match d.steady_pv(far) {
        Some(pv) => dir * (pv - sp_to) / mag,
        None => {
            let hold = d.holding_op(sp_to).unwrap_or(f64::NAN);
            if (c.op_min..=c.op_max).contains(&hold) {
                f64::INFINITY
            } else {
                f64::NEG_INFINITY
            }
        }
    };
    let two_switch = match d {
        Dynamics::Lags(p) => p.second_time_constant_s > 0.0,
        Dynamics::Integrating(p) => p.lag_s > 0.0,
        _ => false,
    };
    let target = Target {
        start,
        sp: sp_to,
        half_band,
    };
    let t_star_s = (room > 0.0)
        .then(|| fastest_settling(&target, two_switch, 4.0 * l.hold_s))
        .flatten();

    let spec = l.spec.settle_within_s;
    let max_os = l.spec.max_overshoot_pct.unwrap_or(f64::INFINITY);
    let met = settling_s.is_some_and(|ts| ts <= spec) && overshoot <= max_os;
    let spec_between = |a: Option<f64>, b: Option<f64>| {
        let (a, b) = (a.unwrap_or(f64::INFINITY), b.unwrap_or(f64::INFINITY));
        a.min(b) <= spec && spec <= a.max(b)
    };
    let unclear = settling_s.is_some_and(|ts| (ts - spec).abs() < 0.1 * spec)
        || spec_between(narrow, wide)
        || (overshoot - max_os).abs() < 3.0
        || t_end - t0 < spec;
    let verdict = if unclear {
        None
    } else if met {
        Some(Verdict::Met)
    } else if room < -0.05 {
        Some(Verdict::Unreachable)
    } else if room <= 0.05 {
        None
    } else {
        match t_star_s {
            Some(t) if t > 1.25 * spec => Some(Verdict::ActuatorLimited),
            Some(t) if t < 0.75 * spec => Some(Verdict::TuningLimited),
            _ => None,
        }
    };
    Truth {
        t0,
        sp_from,
        sp_to,
        verdict,
        settling_s,
        settling_clear,
        t_star_s,
        clearly_reachable: room > 0.05,
        from_rest,
    }
}

/// A loop of `dynamics` at rest at `pv0` with the OP free in `[op_min, op_max]` (the controller
/// is never used: the truth search drives the OP itself).
fn at_rest(dynamics: Dynamics, pv0: f64, op_min: f64, op_max: f64, step_s: f64) -> LoopSim {
    LoopSim::of_plant(PlantSimConfig {
        dynamics,
        controller: PiController {
            gain: 1.0,
            integral_time_s: 1.0,
            op_min,
            op_max,
        },
        step_s,
        noise_sd: 0.0,
        seed: 1,
        initial_sp: pv0,
    })
}

#[test]
fn the_brute_force_truth_matches_the_first_order_closed_form() {
    // FOPDT from rest: t* = θ + τ·ln(R / (R − (1 − b)|Δ|)), R = |K|·h (DESIGN.md, "minimum
    // settling time"). K = 2, τ = 10 s, θ = 2 s, OP at 0.5 of [0, 1]: R = 1; Δ = 0.6 →
    // t* = 2 + 10·ln(1/0.412) = 10.867 s.
    let p = Process {
        gain: 2.0,
        time_constant_s: 10.0,
        second_time_constant_s: 0.0,
        dead_time_s: 2.0,
        bias: 0.0,
    };
    let start = at_rest(Dynamics::Lags(p), 1.0, 0.0, 1.0, 0.01);
    let target = Target {
        start: &start,
        sp: 1.6,
        half_band: BAND * 0.6,
    };
    let want = 2.0 + 10.0 * (1.0 / (1.0 - 0.98 * 0.6f64)).ln();
    let got = fastest_settling(&target, false, 200.0).unwrap();
    assert!((got - want).abs() < 0.03, "{got} vs {want}");
    // Braking cannot help a single lag.
    let got2 = fastest_settling(&target, true, 200.0).unwrap();
    assert!((got2 - got).abs() < 0.03, "{got2} vs {got}");
    // Beyond the reach there is no holding OP: unreachable.
    let far = Target { sp: 2.2, ..target };
    assert_eq!(fastest_settling(&far, false, 200.0), None);
}

#[test]
fn the_brute_force_truth_matches_the_ramp_of_an_integrating_level() {
    // ẏ = k·(u − u_bal) at the limit ramps at k·h; the band's near edge is reached after
    // θ + (1 − b)|Δ|/(k·h), where the balance OP holds it: 4 + 9.8/1.2 = 12.167 s.
    let p = IntegratingProcess {
        gain_per_s: 0.02,
        lag_s: 0.0,
        dead_time_s: 4.0,
        balance_op: 40.0,
    };
    let start = at_rest(Dynamics::Integrating(p), 30.0, 0.0, 100.0, 0.01);
    let target = Target {
        start: &start,
        sp: 40.0,
        half_band: BAND * 10.0,
    };
    let got = fastest_settling(&target, false, 200.0).unwrap();
    assert!((got - (4.0 + 9.8 / 1.2)).abs() < 0.03, "{got}");
}

#[test]
fn the_brute_force_truth_agrees_with_the_analysis_search_on_two_state_plants() {
    // Two searches written apart (the analysis's over a linear model, this one on the simulator)
    // must agree from rest, where both apply; the analysis's own is checked against the double
    // integrator's rest-to-rest time (Athans & Falb 1966).
    use headroom::analysis::optimal::{self, Fastest, Question};
    let lags = Process {
        gain: 2.0,
        time_constant_s: 30.0,
        second_time_constant_s: 10.0,
        dead_time_s: 5.0,
        bias: 0.0,
    };
    let level = IntegratingProcess {
        gain_per_s: 0.05,
        lag_s: 12.0,
        dead_time_s: 3.0,
        balance_op: 0.4,
    };
    let cases = [
        (
            Dynamics::Lags(lags),
            optimal::Plant::second_order(2.0, 30.0, 10.0, 5.0),
            0.8,
            0.9,
        ),
        (
            Dynamics::Lags(lags),
            optimal::Plant::second_order(2.0, 30.0, 10.0, 5.0),
            0.8,
            -0.5,
        ),
        (
            Dynamics::Integrating(level),
            optimal::Plant::integrating(0.05, Some(12.0), 3.0),
            0.0,
            1.5,
        ),
        (
            Dynamics::Integrating(level),
            optimal::Plant::integrating(0.05, Some(12.0), 3.0),
            0.0,
            -0.6,
        ),
    ];
    for (dynamics, plant, pv0, delta) in cases {
        let u0 = dynamics.holding_op(pv0).unwrap();
        let start = at_rest(dynamics, pv0, 0.0, 1.0, 0.05);
        let target = Target {
            start: &start,
            sp: pv0 + delta,
            half_band: BAND * delta.abs(),
        };
        let ours = fastest_settling(&target, true, 400.0).unwrap();
        let Fastest::Settles { t_star_s, .. } = optimal::fastest(&Question {
            plant,
            delta,
            band_fraction: BAND,
            u_lo: -u0,
            u_hi: 1.0 - u0,
        }) else {
            panic!("{dynamics:?}: the analysis calls {delta} unreachable");
        };
        assert!(
            (ours - t_star_s).abs() <= 0.01 * t_star_s + 0.1,
            "{dynamics:?} Δ {delta}: brute force {ours} vs search {t_star_s}"
        );
    }
}

#[test]
fn the_brute_force_truth_of_a_two_direction_plant_uses_each_direction_s_time_constant() {
    // Each direction is first order, so the closed form of DESIGN.md holds with that direction's
    // τ: K = 0.5, θ = 10 s, at rest at 40 (OP 40 of 0–100). Up 10: R = 30,
    // t* = 10 + 100·ln(30/20.2) = 49.55 s; down 10: R = 20, t* = 10 + 400·ln(20/10.2) = 279.3 s.
    let p = TwoDirectionProcess {
        gain: 0.5,
        rise_time_constant_s: 100.0,
        fall_time_constant_s: 400.0,
        dead_time_s: 10.0,
        bias: 20.0,
    };
    let start = at_rest(Dynamics::TwoDirection(p), 40.0, 0.0, 100.0, 0.05);
    for (delta, reach, tau) in [(10.0, 30.0, 100.0), (-10.0, 20.0, 400.0)] {
        let target = Target {
            start: &start,
            sp: 40.0 + delta,
            half_band: BAND * 10.0,
        };
        let want = 10.0 + tau * (reach / (reach - 9.8f64)).ln();
        let got = fastest_settling(&target, false, 2000.0).unwrap();
        assert!((got - want).abs() < 0.1, "Δ {delta}: {got} vs {want}");
    }
}
