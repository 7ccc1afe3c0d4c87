//! The process a simulated loop drives: one of the model families of the design, each with its
//! exact update over one step under a held (zero-order hold) input, its steady states, and the
//! test of whether a held input keeps the PV inside a band for good.
//!
//! The state of every family is two numbers, `x1` and `x2`, whose meaning each family gives:
//!
//! | family | x1 | x2 | PV |
//! |---|---|---|---|
//! | [`Dynamics::Lags`] | first lag's output (PV units, from the bias) | second lag's output | bias + x2 |
//! | [`Dynamics::Integrating`] | the lagged OP z (OP units) | the PV y | y |
//! | [`Dynamics::TwoDirection`] | the PV from the bias | = x1 | bias + x1 |
//! | [`Dynamics::Valve`] | the PV from the bias | = x1 | bias + x1 |

use super::Process;

/// The process dynamics of a simulated loop, one per model family.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Dynamics {
    /// One or two first-order lags plus dead time (first order, second order overdamped).
    Lags(Process),
    /// An integrating process such as a level with a pumped outflow.
    Integrating(IntegratingProcess),
    /// A process whose time constant depends on the direction the PV moves.
    TwoDirection(TwoDirectionProcess),
    /// A first-order process fed through an equal-percentage valve: a gain that varies with OP.
    Valve(ValveProcess),
}

/// A level with a fixed (pumped) outflow: `A·dh/dt = q_in − q_out` with the inflow proportional to
/// the valve's OP, so `ẏ = k·(z(t − θ) − u_bal)`, where z is the OP through an optional first-order
/// lag (the valve and inflow line). The tank with a constant outflow is the textbook integrating
/// process (Seborg, Edgar & Mellichamp, *Process Dynamics and Control*, liquid-level examples —
/// from memory).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct IntegratingProcess {
    /// k: PV units per second per OP unit away from the balance.
    pub gain_per_s: f64,
    /// Lag of the inflow in seconds; 0 for none.
    pub lag_s: f64,
    /// Dead time θ in seconds (≥ 0).
    pub dead_time_s: f64,
    /// The OP at which inflow equals outflow, so the PV stands still.
    pub balance_op: f64,
}

/// A heated vessel that heats actively and cools passively: the PV follows `bias + K·u(t − θ)`
/// with the time constant `rise_time_constant_s` while it rises towards it and
/// `fall_time_constant_s` while it falls. A phenomenological model of our own (the steady state
/// `bias + K·u` is one curve, so the gain is shared; the speed differs by direction).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TwoDirectionProcess {
    /// Steady-state gain K, PV units per OP unit.
    pub gain: f64,
    /// Time constant while the PV rises (s, > 0).
    pub rise_time_constant_s: f64,
    /// Time constant while the PV falls (s, > 0).
    pub fall_time_constant_s: f64,
    /// Dead time θ in seconds (≥ 0).
    pub dead_time_s: f64,
    /// PV at steady state with the OP at zero.
    pub bias: f64,
}

/// A first-order process driven by the flow through an equal-percentage valve: the flow fraction
/// at opening u (%) is `f(u) = R^(u/100 − 1)` (the inherent equal-percentage characteristic, with
/// rangeability R, often 20–50; IEC 60534-1 / ISA-75 terminology — from memory), and the PV
/// follows `bias + K·100·f(u(t − θ))` through one lag. The local gain `K·ln R·f(u)` grows by the
/// factor R over the OP range.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ValveProcess {
    /// PV units per percent of full flow.
    pub gain: f64,
    /// Rangeability R (> 1).
    pub rangeability: f64,
    /// Time constant τ in seconds (> 0).
    pub time_constant_s: f64,
    /// Dead time θ in seconds (≥ 0).
    pub dead_time_s: f64,
    /// PV at steady state with no flow.
    pub bias: f64,
}

impl ValveProcess {
    /// The flow fraction through the valve at opening `op` (%).
    pub fn flow_fraction(&self, op: f64) -> f64 {
        self.rangeability.powf(op / 100.0 - 1.0)
    }

    /// dPV/dOP at steady state at opening `op`.
    pub fn local_gain(&self, op: f64) -> f64 {
        self.gain * self.rangeability.ln() * self.flow_fraction(op)
    }
}

impl Dynamics {
    /// Dead time θ in seconds.
    pub fn dead_time_s(&self) -> f64 {
        match self {
            Dynamics::Lags(p) => p.dead_time_s,
            Dynamics::Integrating(p) => p.dead_time_s,
            Dynamics::TwoDirection(p) => p.dead_time_s,
            Dynamics::Valve(p) => p.dead_time_s,
        }
    }

    /// Whether more OP moves the PV up.
    pub fn pv_rises_with_op(&self) -> bool {
        match self {
            Dynamics::Lags(p) => p.gain > 0.0,
            Dynamics::Integrating(p) => p.gain_per_s > 0.0,
            Dynamics::TwoDirection(p) => p.gain > 0.0,
            Dynamics::Valve(p) => p.gain > 0.0,
        }
    }

    /// The PV at steady state with the OP held at `op`; `None` for an integrating process, whose
    /// PV stands still only at the balance OP (and then anywhere).
    pub fn steady_pv(&self, op: f64) -> Option<f64> {
        match self {
            Dynamics::Lags(p) => Some(p.bias + p.gain * op),
            Dynamics::Integrating(_) => None,
            Dynamics::TwoDirection(p) => Some(p.bias + p.gain * op),
            Dynamics::Valve(p) => Some(p.bias + p.gain * 100.0 * p.flow_fraction(op)),
        }
    }

    /// The OP that holds the PV at `pv` at steady state, whatever the actuator's limits; `None`
    /// when no OP can (a PV the valve's flow cannot give).
    pub fn holding_op(&self, pv: f64) -> Option<f64> {
        match self {
            Dynamics::Lags(p) => Some((pv - p.bias) / p.gain),
            Dynamics::Integrating(p) => Some(p.balance_op),
            Dynamics::TwoDirection(p) => Some((pv - p.bias) / p.gain),
            Dynamics::Valve(p) => {
                let f = (pv - p.bias) / (p.gain * 100.0);
                (f > 0.0).then(|| 100.0 * (1.0 + f.ln() / p.rangeability.ln()))
            }
        }
    }

    /// The state `(x1, x2)` at rest with the OP at `op` and the PV at `pv` (the PV only matters
    /// for an integrating process, which rests anywhere).
    pub(super) fn rest_state(&self, op: f64, pv: f64) -> (f64, f64) {
        match self {
            Dynamics::Integrating(_) => (op, pv),
            _ => {
                let x = self.steady_pv(op).unwrap_or(pv) - self.bias();
                (x, x)
            }
        }
    }

    fn bias(&self) -> f64 {
        match self {
            Dynamics::Lags(p) => p.bias,
            Dynamics::Integrating(_) => 0.0,
            Dynamics::TwoDirection(p) => p.bias,
            Dynamics::Valve(p) => p.bias,
        }
    }

    /// The noise-free PV of state `(x1, x2)`, without disturbance.
    pub(super) fn output(&self, x1: f64, x2: f64) -> f64 {
        match self {
            Dynamics::Lags(p) if p.second_time_constant_s > 0.0 => p.bias + x2,
            Dynamics::Lags(p) => p.bias + x1,
            Dynamics::Integrating(_) => x2,
            Dynamics::TwoDirection(p) => p.bias + x1,
            Dynamics::Valve(p) => p.bias + x1,
        }
    }

    /// The state after `h` seconds with the (delayed) input held at `u`: exact for every family.
    pub(super) fn step(&self, x1: f64, x2: f64, u: f64, h: f64) -> (f64, f64) {
        match self {
            Dynamics::Lags(p) => lags_step(p, x1, x2, u, h),
            Dynamics::Integrating(p) => {
                let k = p.gain_per_s;
                if p.lag_s > 0.0 {
                    // z(t) = u + (z0 − u)e^(−t/τ), so ∫z over the step = u·h + (z0 − u)·τ·(1 − a).
                    let a = (-h / p.lag_s).exp();
                    let int_z = u * h + (x1 - u) * p.lag_s * (1.0 - a);
                    (u + (x1 - u) * a, x2 + k * (int_z - p.balance_op * h))
                } else {
                    (u, x2 + k * (u - p.balance_op) * h)
                }
            }
            Dynamics::TwoDirection(p) => {
                let target = p.gain * u;
                // The approach to the target is monotone, so the direction holds over the step.
                let tau = if target > x1 {
                    p.rise_time_constant_s
                } else {
                    p.fall_time_constant_s
                };
                let x = target + (x1 - target) * (-h / tau).exp();
                (x, x)
            }
            Dynamics::Valve(p) => {
                let target = p.gain * 100.0 * p.flow_fraction(u);
                let x = target + (x1 - target) * (-h / p.time_constant_s).exp();
                (x, x)
            }
        }
    }

    /// Whether, with the input held at `u` from now on (and every input still in the dead time
    /// equal to `u`), the noise-free PV of state `(x1, x2)` stays inside `[lo, hi]` for good.
    ///
    /// Every family approaches its rest monotonically under a held input: a lag's output moves
    /// from where it is towards its target, and a second lag in series stays between the first
    /// lag's output and its own; so the PV stays inside the band exactly when every state and the
    /// target lie inside it. An integrating PV stands still only at the balance OP, and then
    /// moves from y to y + k·τ·(z − u_bal) as the lag settles.
    pub(super) fn stays_within(&self, x1: f64, x2: f64, u: f64, lo: f64, hi: f64) -> bool {
        let inside = |y: f64| (lo..=hi).contains(&y);
        match self {
            Dynamics::Integrating(p) => {
                let drift = p.gain_per_s * (u - p.balance_op);
                let y_final = x2 + p.gain_per_s * p.lag_s * (x1 - u);
                drift.abs() < 1e-12 && inside(x2) && inside(y_final)
            }
            _ => {
                let b = self.bias();
                let Some(target) = self.steady_pv(u) else {
                    return false;
                };
                inside(target) && inside(b + x1) && inside(b + x2)
            }
        }
    }
}

/// Exact ZOH update of one lag, or two lags in series (distinct time constants assumed; equal ones
/// are nudged apart by a part in a million, far below any effect on the response).
fn lags_step(p: &Process, x1: f64, x2: f64, u: f64, h: f64) -> (f64, f64) {
    let a1 = (-h / p.time_constant_s).exp();
    let target = p.gain * u;
    if p.second_time_constant_s > 0.0 {
        let t1 = p.time_constant_s;
        let mut t2 = p.second_time_constant_s;
        if ((t1 - t2) / t1).abs() < 1e-6 {
            t2 *= 1.000_001;
        }
        let a2 = (-h / t2).exp();
        let d1 = x1 - target;
        let d2 = x2 - target;
        // x2 driven by x1: closed form of the cascade over one step.
        let new_d1 = d1 * a1;
        let new_d2 = d2 * a2 + d1 * t1 / (t1 - t2) * (a1 - a2);
        (target + new_d1, target + new_d2)
    } else {
        let x = target + (x1 - target) * a1;
        (x, x)
    }
}
