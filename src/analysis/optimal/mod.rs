//! The fastest settling an actuator allows, for any linear process model of up to three states,
//! by search over bang–bang–hold input sequences.
//!
//! The process starts at rest (all deviation variables 0) and must bring its output into the band
//! `Δ ± b·|Δ|` and keep it there, with its input (the OP, as a deviation from the operating
//! point) inside `[u_lo, u_hi]`. By the bang–bang principle the fastest inputs sit at a limit,
//! with at most n − 1 switches for a plant of order n with real poles (time-optimal control of
//! linear systems; Athans & Falb, *Optimal Control*, 1966, ch. 7 — from memory); to stay in the
//! band the input then holds the value that keeps the output at the target. The search therefore
//! tries the sequences
//!
//! ```text
//!   u = u_far  for t1,   then u = u_near for t2,   then u = u_hold for good
//! ```
//!
//! (`u_far` the limit in the direction the change needs, `u_near` the opposite one), over a grid of
//! (t1, t2) refined around the best cell, plus, for each t1, the t2 at which the output comes to
//! rest under the hold (which is where the optimum of a plant with two integrators lies). The
//! dead time only shifts the answer: the switching times of a delayed process are those of the
//! undelayed one.
//!
//! A plant of one state (first order, or a pure integrator) is answered in closed form without
//! the search (the bang to the near band edge, then the hold); a plant of two states with real
//! poles (overdamped second order, integrator with a lag) in closed form too, from its modal
//! solution (`modal`); the generic search (`search`) serves any other plant and checks the
//! closed forms in tests. A change already inside its band (|Δ| within the band) settles at
//! once: t* = 0.
//!
//! For a first-order plant the result equals the closed form of the feasibility module,
//! t* = θ + τ·ln(R / (R − (1 − b)|Δ|)); tests check that, the double integrator's rest-to-rest
//! time 2·√(d/a), and every family against a brute-force scan.

// Small dense matrices (n ≤ 4) read best with explicit indices.
#![allow(clippy::needless_range_loop)]

use super::linalg::solve;

mod modal;
mod search;

/// A linear process in deviation variables: ẋ = A·x + B·u(t − θ), y = C·x, with n ≤ 3 states.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Plant {
    n: usize,
    a: [[f64; 3]; 3],
    b: [f64; 3],
    c: [f64; 3],
    /// Dead time θ (s).
    pub dead_time_s: f64,
    /// The slowest time scale of the plant (s), which sets how long a hold is watched.
    slowest_s: f64,
}

impl Plant {
    /// K·e^(−θs)/(τs + 1).
    pub fn first_order(gain: f64, time_constant_s: f64, dead_time_s: f64) -> Plant {
        let t = time_constant_s;
        Plant {
            n: 1,
            a: [[-1.0 / t, 0.0, 0.0], [0.0; 3], [0.0; 3]],
            b: [gain / t, 0.0, 0.0],
            c: [1.0, 0.0, 0.0],
            dead_time_s,
            slowest_s: t,
        }
    }

    /// K·e^(−θs)/((τ1·s + 1)(τ2·s + 1)), overdamped.
    pub fn second_order(gain: f64, tau1_s: f64, tau2_s: f64, dead_time_s: f64) -> Plant {
        // x1 = first lag's output, x2 = second lag's output = y.
        Plant {
            n: 2,
            a: [
                [-1.0 / tau1_s, 0.0, 0.0],
                [1.0 / tau2_s, -1.0 / tau2_s, 0.0],
                [0.0; 3],
            ],
            b: [gain / tau1_s, 0.0, 0.0],
            c: [0.0, 1.0, 0.0],
            dead_time_s,
            slowest_s: tau1_s.max(tau2_s),
        }
    }

    /// k·e^(−θs)/s, or k·e^(−θs)/(s·(τs + 1)) with a lag: the output rate per unit of input is
    /// `gain_per_s` (PV units per second per OP unit).
    pub fn integrating(gain_per_s: f64, lag_s: Option<f64>, dead_time_s: f64) -> Plant {
        match lag_s {
            None => Plant {
                n: 1,
                a: [[0.0; 3]; 3],
                b: [gain_per_s, 0.0, 0.0],
                c: [1.0, 0.0, 0.0],
                dead_time_s,
                slowest_s: 0.0,
            },
            Some(t) => Plant {
                // x1 = lagged input, x2 = y.
                n: 2,
                a: [[-1.0 / t, 0.0, 0.0], [gain_per_s, 0.0, 0.0], [0.0; 3]],
                b: [1.0 / t, 0.0, 0.0],
                c: [0.0, 1.0, 0.0],
                dead_time_s,
                slowest_s: t,
            },
        }
    }

    /// ÿ = a·u: two integrators, a test plant with a published time-optimal solution.
    pub fn double_integrator(accel_per_unit: f64) -> Plant {
        Plant {
            n: 2,
            a: [[0.0; 3], [1.0, 0.0, 0.0], [0.0; 3]],
            b: [accel_per_unit, 0.0, 0.0],
            c: [0.0, 1.0, 0.0],
            dead_time_s: 0.0,
            slowest_s: 0.0,
        }
    }

    /// The steady-state gain, `None` for a plant with an integrator.
    pub fn static_gain(&self) -> Option<f64> {
        // Solve A·x = −B; the gain is C·x.
        let x = solve(self.a, self.b.map(|v| -v), self.n)?;
        Some(dot(&self.c, &x, self.n))
    }

    fn output(&self, x: &[f64; 3]) -> f64 {
        dot(&self.c, x, self.n)
    }

    /// The output's rate ẏ = C·(A·x + B·u).
    fn output_rate(&self, x: &[f64; 3], u: f64) -> f64 {
        let mut dx = [0.0; 3];
        for (i, d) in dx.iter_mut().enumerate().take(self.n) {
            *d = (0..self.n).map(|j| self.a[i][j] * x[j]).sum::<f64>() + self.b[i] * u;
        }
        dot(&self.c, &dx, self.n)
    }
}

/// One question: how fast can the plant, at rest, settle on a change of `delta`?
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Question {
    pub plant: Plant,
    /// The change of the output (PV units, signed).
    pub delta: f64,
    /// Half-width of the band as a fraction of |Δ| (0.02 for 2 %).
    pub band_fraction: f64,
    /// Input limits as deviations from the operating point: `u_lo ≤ 0 ≤ u_hi`.
    pub u_lo: f64,
    pub u_hi: f64,
}

/// The input sequence behind a bound.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Sequence {
    /// Time at the far limit, then at the near limit (s).
    pub t1_s: f64,
    pub t2_s: f64,
    pub u_far: f64,
    pub u_near: f64,
    pub u_hold: f64,
}

/// The answer.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Fastest {
    /// The band can be entered and kept from `t_star_s` after the change on (dead time
    /// included), with this input sequence.
    Settles { t_star_s: f64, sequence: Sequence },
    /// No admissible input holds the output at the target: the hold value lies outside the
    /// limits.
    Unreachable,
}

/// The fastest settling for `q`: in closed form for plants of one or two states, by search
/// otherwise (see the module documentation).
pub fn fastest(q: &Question) -> Fastest {
    answer(q, true)
}

/// The answer, in closed form where there is one (`closed_form`) or else by the generic search.
fn answer(q: &Question, closed_form: bool) -> Fastest {
    if already_inside(q) {
        // Doing nothing keeps the output where it is, inside the band.
        return Fastest::Settles {
            t_star_s: 0.0,
            sequence: Sequence {
                t1_s: 0.0,
                t2_s: 0.0,
                u_far: 0.0,
                u_near: 0.0,
                u_hold: 0.0,
            },
        };
    }
    let Some(u_hold) = hold_input(q) else {
        return Fastest::Unreachable;
    };
    let (u_far, u_near) = if needs_positive_input(q) {
        (q.u_hi, q.u_lo)
    } else {
        (q.u_lo, q.u_hi)
    };
    let inputs = [u_far, u_near, u_hold];
    let single = || single_state_bang(q, u_far).map(|t1| (t1, t1, 0.0));
    let two = || modal::fastest(q, inputs);
    let found = if closed_form {
        single().or_else(two)
    } else {
        None
    };
    let Some((ts, t1, t2)) = found.or_else(|| search::fastest(q, inputs)) else {
        return Fastest::Unreachable;
    };
    Fastest::Settles {
        t_star_s: q.plant.dead_time_s + ts,
        sequence: Sequence {
            t1_s: t1,
            t2_s: t2,
            u_far,
            u_near,
            u_hold,
        },
    }
}

/// Whether the output starts inside the band (no change, or a band at least as wide as the
/// change): it settles at once.
fn already_inside(q: &Question) -> bool {
    q.delta == 0.0 || q.band_fraction >= 1.0
}

/// For a plant of one state, the bang that ends on the near edge of the band, in closed form:
/// at full input the output approaches its reach R = |K·u_far| as R·(1 − e^(−t/τ)) (or rises at
/// |k·u_far| with an integrator), and the hold then keeps it inside, so the fastest settling is
/// the time to the edge (1 − b)·|Δ| — the closed form of the design for first order. `None` for
/// larger plants.
fn single_state_bang(q: &Question, u_far: f64) -> Option<f64> {
    let p = &q.plant;
    if p.n != 1 {
        return None;
    }
    let edge = (1.0 - q.band_fraction) * q.delta.abs();
    let rate = (p.b[0] * p.c[0] * u_far).abs();
    if p.a[0][0] == 0.0 {
        return (rate > 0.0).then(|| edge / rate);
    }
    let tau = -1.0 / p.a[0][0];
    let reach = rate * tau;
    (tau > 0.0 && reach > edge).then(|| tau * (reach / (reach - edge)).ln())
}

/// The input that holds the output at the target for good, if the limits allow it.
fn hold_input(q: &Question) -> Option<f64> {
    let u = match q.plant.static_gain() {
        Some(k) if k != 0.0 => q.delta / k,
        Some(_) => return None,
        // A plant with an integrator rests at the operating point's input.
        None => 0.0,
    };
    (q.u_lo <= u && u <= q.u_hi).then_some(u)
}

/// Whether the change needs the input above the operating point first.
fn needs_positive_input(q: &Question) -> bool {
    // The output's initial direction under a positive input is the sign of the first non-zero
    // Markov parameter C·A^k·B.
    let mut v = q.plant.b;
    for _ in 0..q.plant.n {
        let m = dot(&q.plant.c, &v, q.plant.n);
        if m != 0.0 {
            return (m > 0.0) == (q.delta > 0.0);
        }
        v = mat_vec(&q.plant.a, &v, q.plant.n);
    }
    q.delta > 0.0
}

fn mat_vec(a: &[[f64; 3]; 3], v: &[f64; 3], n: usize) -> [f64; 3] {
    let mut out = [0.0; 3];
    for i in 0..n {
        out[i] = (0..n).map(|j| a[i][j] * v[j]).sum();
    }
    out
}

fn dot(a: &[f64; 3], b: &[f64; 3], n: usize) -> f64 {
    (0..n).map(|i| a[i] * b[i]).sum()
}

#[cfg(test)]
mod tests;
