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
//! far (it cannot win). The first switch time is scanned on a grid refined around the best down to
//! one simulation step; for each, the brake length on a geometric grid (brakes are often short)
//! refined the same way.

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
    let try_bang = |n1: usize, best: &mut Best| {
        best.offer(search.settle(n1, 0, best.steps), n1, 0);
        if two_switch {
            search.best_brake(n1, n1_max.max(2), best);
        }
    };
    // The first switch time on a grid of 32, refined around the best on grids of 12 down to one
    // step.
    for &n1 in &grid(0, n1_max, 32) {
        try_bang(n1, &mut best);
    }
    let mut spacing = n1_max / 31 + 1;
    while spacing > 1 {
        let (lo, hi) = (
            best.n1.saturating_sub(spacing),
            (best.n1 + spacing).min(n1_max),
        );
        for &n1 in &grid(lo, hi, 12) {
            try_bang(n1, &mut best);
        }
        spacing = (hi - lo) / 11 + 1;
    }
    best.found.then_some(best.steps as f64 * h)
}

/// `n` points from `lo` to `hi` (inclusive), evenly spread and rounded to whole steps.
fn grid(lo: usize, hi: usize, n: usize) -> Vec<usize> {
    let mut out: Vec<usize> = (0..n)
        .map(|i| lo + ((hi - lo) as f64 * i as f64 / (n - 1) as f64).round() as usize)
        .collect();
    out.dedup();
    out
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
    /// The dead time in simulation steps.
    delay_steps: usize,
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
            delay_steps: (cfg.dynamics.dead_time_s() / cfg.step_s).round() as usize,
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

    /// Offers `best` the bang of `n1` steps followed by the best brake: brake lengths on a
    /// geometric grid from one step to `top` (brakes are often short), then refined around the
    /// best of them down to one step. Candidates up to a quarter slower than the best so far
    /// are still timed, so that a basin the grid only grazes gets refined.
    fn best_brake(&self, n1: usize, top: usize, best: &mut Best) {
        let slack = |b: &Best| b.steps + b.steps / 4;
        let mut local = Best::none(self.max_steps);
        let mut points: Vec<usize> = (0..12)
            .map(|i| (top as f64).powf(i as f64 / 11.0).round() as usize)
            .collect();
        points.dedup();
        for (i, &n2) in points.iter().enumerate() {
            let settled = self.settle(n1, n2, slack(best));
            best.offer(settled, n1, n2);
            local.offer(settled, n1, i);
        }
        // The fastest brake often lands the PV just inside the band's far edge, a valley the grid
        // can step over: find by bisection the shortest brake after which the PV never passes
        // the far edge (monotone: braking longer only holds the PV back), and time the brakes
        // around it.
        if self.passes_far_edge(n1, 0) && !self.passes_far_edge(n1, top) {
            let (mut yes, mut no) = (0, top);
            while no - yes > 1 {
                let mid = (yes + no) / 2;
                if self.passes_far_edge(n1, mid) {
                    yes = mid;
                } else {
                    no = mid;
                }
            }
            for n2 in yes.max(1)..=no + 3 {
                let settled = self.settle(n1, n2, slack(best));
                best.offer(settled, n1, n2);
            }
        }
        if !local.found {
            return;
        }
        let i = local.n2;
        let (mut lo, mut hi) = (
            points[i.saturating_sub(1)],
            points[(i + 1).min(points.len() - 1)],
        );
        loop {
            let mut round = Best::none(self.max_steps);
            for &n2 in &grid(lo, hi, 10) {
                let settled = self.settle(n1, n2, slack(best));
                best.offer(settled, n1, n2);
                round.offer(settled, n1, n2);
            }
            let spacing = (hi - lo) / 9 + 1;
            if spacing <= 1 || !round.found {
                break;
            }
            (lo, hi) = (round.n2.saturating_sub(spacing).max(1), round.n2 + spacing);
        }
    }

    /// The OP at step `k` of the sequence: `n1` steps at the far limit, `n2` at the near one,
    /// then the hold.
    fn input(&self, k: usize, n1: usize, n2: usize) -> f64 {
        if k < n1 {
            self.far
        } else if k < n1 + n2 {
            self.near
        } else {
            self.hold
        }
    }

    /// Whether the PV, after `n1` steps at the far limit, `n2` at the near one and then the hold,
    /// ever passes the band's far edge. Once the dead time has passed under the hold, a PV
    /// short of the band and moving away from it never comes back past the far edge (each
    /// family approaches its rest monotonically, a second lag never beyond its first).
    fn passes_far_edge(&self, n1: usize, n2: usize) -> bool {
        let mut sim = self.start.clone();
        let far_edge = if self.dir > 0.0 { self.hi } else { self.lo };
        let near_edge = if self.dir > 0.0 { self.lo } else { self.hi };
        let mut prev = sim.pv_true();
        for k in 0..self.max_steps {
            let pv = sim.pv_true();
            if self.dir * (pv - far_edge) > 0.0 {
                return true;
            }
            let flushed = k > n1 + n2 + self.delay_steps;
            if flushed
                && (sim.stays_within(self.lo, self.hi)
                    || (self.dir * (pv - near_edge) < 0.0 && self.dir * (pv - prev) <= 0.0))
            {
                return false;
            }
            prev = pv;
            sim.advance_open_loop(self.input(k, n1, n2));
        }
        false
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
            sim.advance_open_loop(self.input(k, n1, n2));
        }
        None
    }
}
