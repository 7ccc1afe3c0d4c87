//! Simulated data of each family for the tests: open-loop OP steps through an invented plant,
//! integrated by small Euler steps (an integrator independent of the fits' exact
//! discretisation), sampled at 1 s with seeded measurement noise, cut into episodes the way the
//! analysis cuts them (a quarter of the episode's length before the change).

use super::{IdSegment, OpMap, build_segment};
use crate::analysis::sim::Rng;

/// An invented plant of each family.
#[derive(Debug, Clone, Copy)]
pub(super) enum Truth {
    First {
        k: f64,
        tau: f64,
        theta: f64,
    },
    Second {
        k: f64,
        tau1: f64,
        tau2: f64,
        theta: f64,
    },
    /// ẏ = k·(lagged u(t − θ) − u_bal); `lag` 0 for none.
    Integrating {
        k: f64,
        lag: f64,
        theta: f64,
        u_bal: f64,
    },
    /// Heating with `tau_up`, passive cooling with `tau_down`, one gain.
    TwoDirection {
        k: f64,
        tau_up: f64,
        tau_down: f64,
        theta: f64,
    },
    /// First order after an equal-percentage map of the OP over [0, 100].
    Valve {
        k: f64,
        tau: f64,
        theta: f64,
        shape: f64,
    },
}

impl Truth {
    fn dead_time(&self) -> f64 {
        match *self {
            Truth::First { theta, .. }
            | Truth::Second { theta, .. }
            | Truth::Integrating { theta, .. }
            | Truth::TwoDirection { theta, .. }
            | Truth::Valve { theta, .. } => theta,
        }
    }

    /// One Euler step of `dt` with delayed input `u`; the output is x[1].
    fn step(&self, x: &mut [f64; 2], u: f64, dt: f64) {
        match *self {
            Truth::First { k, tau, .. } => x[1] += dt / tau * (k * u - x[1]),
            Truth::Second { k, tau1, tau2, .. } => {
                x[0] += dt / tau1 * (k * u - x[0]);
                x[1] += dt / tau2 * (x[0] - x[1]);
            }
            Truth::Integrating { k, lag, u_bal, .. } => {
                x[0] = if lag > 0.0 {
                    x[0] + dt / lag * (u - x[0])
                } else {
                    u
                };
                x[1] += dt * k * (x[0] - u_bal);
            }
            Truth::TwoDirection {
                k,
                tau_up,
                tau_down,
                ..
            } => {
                let tau = if k * u > x[1] { tau_up } else { tau_down };
                x[1] += dt / tau * (k * u - x[1]);
            }
            Truth::Valve { k, tau, shape, .. } => {
                let v = OpMap::new(shape, 0.0, 100.0).apply(u);
                x[1] += dt / tau * (k * v - x[1]);
            }
        }
    }

    /// The state at rest under `u` (the integrator starts at 0).
    fn rest(&self, u: f64) -> [f64; 2] {
        match *self {
            Truth::First { k, .. } | Truth::Second { k, .. } | Truth::TwoDirection { k, .. } => {
                [k * u, k * u]
            }
            Truth::Integrating { .. } => [u, 0.0],
            Truth::Valve { k, shape, .. } => {
                let v = k * OpMap::new(shape, 0.0, 100.0).apply(u);
                [v, v]
            }
        }
    }
}

/// Episodes of `len_s` seconds, one per OP level in `ops` (the first level also before the
/// first change), PV noise `noise`, cut into segments.
pub(super) fn episodes(
    truth: Truth,
    ops: &[f64],
    len_s: f64,
    noise: f64,
    seed: u64,
) -> Vec<IdSegment> {
    let mut rng = Rng::new(seed);
    let dt: f64 = 0.02;
    let lead = 0.25 * len_s;
    let op_at = |t: f64| -> f64 {
        let i = (t / len_s).floor();
        if i < 0.0 {
            ops[0]
        } else {
            ops[(i as usize).min(ops.len() - 1)]
        }
    };
    let mut x = truth.rest(ops[0]);
    let (mut t, end) = (-lead, len_s * ops.len() as f64);
    let (mut time, mut pv, mut op) = (Vec::new(), Vec::new(), Vec::new());
    let per_sample = (1.0 / dt).round() as usize;
    while t < end {
        time.push(t);
        pv.push(50.0 + x[1] + noise * rng.normal());
        op.push(op_at(t));
        for _ in 0..per_sample {
            truth.step(&mut x, op_at(t - truth.dead_time()), dt);
            t += dt;
        }
    }
    (0..ops.len())
        .filter_map(|e| {
            let t0 = e as f64 * len_s;
            let r: Vec<usize> = (0..time.len())
                .filter(|&i| time[i] >= t0 - lead && time[i] < t0 + len_s)
                .collect();
            let pick = |v: &[f64]| r.iter().map(|&i| v[i]).collect::<Vec<f64>>();
            build_segment(&pick(&time), &pick(&pv), &pick(&op), 0.0, 100.0, 200)
        })
        .collect()
}

/// `n` OP levels alternating up and down between `lo` and `hi`, spread by the seed.
pub(super) fn levels(n: usize, lo: f64, hi: f64, seed: u64) -> Vec<f64> {
    let mut rng = Rng::new(seed);
    let mid = 0.5 * (lo + hi);
    (0..n)
        .map(|i| {
            let r = (rng.next_u64() % 1000) as f64 / 1000.0;
            if i % 2 == 0 {
                mid + r * (hi - mid)
            } else {
                lo + r * (mid - lo)
            }
        })
        .collect()
}
