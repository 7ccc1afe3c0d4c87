//! The fastest settling a simulated plant allows, found by brute force on the plant itself: the
//! truth the analysis's minimum settling time t* is measured against. It shares nothing with the
//! analysis (no identified model, no closed form, not its optimiser): it tries input sequences on
//! a copy of the true, possibly nonlinear, simulated plant from its true state at the change.
//!
//! The sequences tried are the ones time-optimal control says suffice (Athans & Falb, *Optimal
//! Control*, 1966, ch. 7, from memory: bang–bang with at most n − 1 switches for a plant of order
//! n with real poles, then the input that holds the output on the target):
//!
//! ```text
//!   bang–hold:       OP at the far limit for t1, then at the holding OP for good
//!   bang–bang–hold:  OP at the far limit for t1, at the near limit for t2, then holding
//! ```
//!
//! A sequence's settling time is the last instant the noise-free PV is outside the band. Each
//! sequence is simulated only until the PV provably stays inside the band for good
//! ([`LoopSim::stays_within`]), or until it is outside the band later than the best time found so
//! far (it cannot win); switch times are scanned on a coarse grid, then the grid is refined around
//! the best cells down to one simulation step.

use headroom::analysis::sim::LoopSim;

/// A setpoint change to judge: the loop as it stands at the change, the new setpoint and the
/// band's half-width.
pub struct Target<'a> {
    pub start: &'a LoopSim,
    pub sp: f64,
    pub half_band: f64,
}

/// The fastest settling time from `target.start` into `sp ± half_band` with the OP inside the
/// actuator's limits, in seconds from the change; `None` when no admissible OP holds the PV on
/// the setpoint (unreachable) or nothing settles within `horizon_s`. `two_switch` adds the
/// bang–bang–hold sequences (needed for plants with two states, such as two lags or an
/// integrator with a lag).
pub fn fastest_settling(target: &Target, two_switch: bool, horizon_s: f64) -> Option<f64> {
    let search = Search::new(target, horizon_s)?;
    let h = target.start.config().step_s;
    let n1_max = search.useful_bang_steps();
    let mut best = Best::none(search.max_steps);
    let grid = |lo: usize, hi: usize, n: usize| -> Vec<usize> {
        (0..n)
            .map(|i| lo + ((hi - lo) as f64 * i as f64 / (n - 1) as f64).round() as usize)
            .collect()
    };
    // Bang–hold: t1 on a grid of 48, refined around the best; then both switch times on a grid
    // of 20 × 20, refined on grids of 11 × 11 around the best.
    let (mut lo, mut hi) = (0, n1_max);
    loop {
        let points = grid(lo, hi, 48.min(hi - lo + 1).max(2));
        for &n1 in &points {
            best.offer(search.settle(n1, 0, best.steps), n1, 0);
        }
        let spacing = (hi - lo) / 47 + 1;
        if spacing <= 1 {
            break;
        }
        lo = best.n1.saturating_sub(spacing);
        hi = (best.n1 + spacing).min(n1_max);
    }
    if two_switch {
        let (mut lo1, mut hi1, mut lo2, mut hi2) = (0, n1_max, 1, n1_max.max(2));
        for round in 0..5 {
            let n = if round == 0 { 20 } else { 11 };
            let (g1, g2) = (grid(lo1, hi1, n), grid(lo2, hi2, n));
            for &n1 in &g1 {
                for &n2 in &g2 {
                    best.offer(search.settle(n1, n2, best.steps), n1, n2);
                }
            }
            if best.n2 == 0 {
                break;
            }
            let s1 = (hi1 - lo1) / (n - 1) + 1;
            let s2 = (hi2 - lo2) / (n - 1) + 1;
            if s1 <= 1 && s2 <= 1 {
                break;
            }
            (lo1, hi1) = (best.n1.saturating_sub(s1), (best.n1 + s1).min(n1_max));
            (lo2, hi2) = (best.n2.saturating_sub(s2).max(1), best.n2 + s2);
        }
    }
    best.found.then_some(best.steps as f64 * h)
}

/// The best sequence so far: its settling time in steps and its switch steps.
struct Best {
    steps: usize,
    n1: usize,
    n2: usize,
    found: bool,
}

impl Best {
    fn none(max_steps: usize) -> Best {
        Best {
            steps: max_steps,
            n1: 0,
            n2: 0,
            found: false,
        }
    }

    fn offer(&mut self, settled: Option<usize>, n1: usize, n2: usize) {
        if let Some(s) = settled
            && (!self.found || s < self.steps)
        {
            *self = Best {
                steps: s,
                n1,
                n2,
                found: true,
            };
        }
    }
}

struct Search<'a> {
    start: &'a LoopSim,
    lo: f64,
    hi: f64,
    far: f64,
    near: f64,
    hold: f64,
    /// +1 when the PV must rise, −1 when it must fall.
    dir: f64,
    max_steps: usize,
}

impl<'a> Search<'a> {
    fn new(t: &Target<'a>, horizon_s: f64) -> Option<Search<'a>> {
        let cfg = t.start.config();
        let c = cfg.controller;
        let hold = cfg.dynamics.holding_op(t.sp)?;
        if !(c.op_min..=c.op_max).contains(&hold) {
            return None;
        }
        let dir = if t.sp >= t.start.pv_true() { 1.0 } else { -1.0 };
        let more_op = (dir > 0.0) == cfg.dynamics.pv_rises_with_op();
        let (far, near) = if more_op {
            (c.op_max, c.op_min)
        } else {
            (c.op_min, c.op_max)
        };
        Some(Search {
            start: t.start,
            lo: t.sp - t.half_band,
            hi: t.sp + t.half_band,
            far,
            near,
            hold,
            dir,
            max_steps: (horizon_s / cfg.step_s).round() as usize,
        })
    }

    fn outside(&self, pv: f64) -> bool {
        pv < self.lo || pv > self.hi
    }

    /// How long a bang can usefully last: until the PV under the bang alone leaves the band on
    /// its far side (any longer and it must end outside), or the horizon.
    fn useful_bang_steps(&self) -> usize {
        let mut sim = self.start.clone();
        let far_edge = if self.dir > 0.0 { self.hi } else { self.lo };
        for k in 0..self.max_steps {
            if self.dir * (sim.pv_true() - far_edge) > 0.0 {
                return k.max(1);
            }
            sim.advance_open_loop(self.far);
        }
        self.max_steps
    }

    /// The settling time in steps of `n1` steps at the far limit, `n2` at the near one, then the
    /// hold; `None` when it settles no sooner than `bound` steps, or not within the horizon.
    fn settle(&self, n1: usize, n2: usize, bound: usize) -> Option<usize> {
        let mut sim = self.start.clone();
        let mut last_out = 0;
        for k in 0..self.max_steps {
            if self.outside(sim.pv_true()) {
                if k >= bound {
                    return None;
                }
                last_out = k;
            }
            if k > n1 + n2 && sim.stays_within(self.lo, self.hi) {
                return Some(last_out);
            }
            let u = if k < n1 {
                self.far
            } else if k < n1 + n2 {
                self.near
            } else {
                self.hold
            };
            sim.advance_open_loop(u);
        }
        None
    }
}
