//! The generic search over bang–bang–hold sequences, by exact zero-order-hold simulation: any
//! plant of up to three states. Two-state plants are answered in closed form by the modal
//! module; this search serves other plants and checks the closed form in tests.

// Small dense matrices (n ≤ 4) read best with explicit indices.
#![allow(clippy::needless_range_loop)]

use super::super::linalg::solve;
use super::{Plant, Question, dot, mat_vec};

/// The best (settling time without dead time, t1, t2) found for `inputs` = [far, near, hold],
/// `None` when no searched sequence settles.
pub(super) fn fastest(q: &Question, inputs: [f64; 3]) -> Option<(f64, f64, f64)> {
    let [u_far, u_near, u_hold] = inputs;
    let sim = Sim::new(q, u_far, u_near, u_hold);
    let mut search = Search {
        t_max: sim.search_span(),
        sim,
        best: (f64::INFINITY, 0.0, 0.0),
    };
    search.bang_hold();
    if q.plant.n > 1 {
        search.bang_bang_hold();
    }
    search.refine();
    search.best.0.is_finite().then_some(search.best)
}

/// The search over (t1, t2): the best settling time found so far and where.
struct Search<'q> {
    sim: Sim<'q>,
    t_max: f64,
    /// (settling time, t1, t2).
    best: (f64, f64, f64),
}

impl Search<'_> {
    /// Steps of the first grid over t1.
    const N1: usize = 240;

    fn consider(&mut self, t1: f64, t2: f64) {
        let ts = self.sim.settling(t1, t2);
        if ts < self.best.0 {
            self.best = (ts, t1, t2);
        }
    }

    /// The counter-bang after a first bang of `t1` that brings the output to rest.
    fn rest(&self, t1: f64) -> Option<f64> {
        self.sim.rest_switch(t1, 0.5 * self.t_max)
    }

    /// Bang, then hold: a grid (enough for a plant that settles by itself on the hold), and the
    /// first bang long enough for the resting output to reach the band (what a plant with an
    /// integrator needs).
    fn bang_hold(&mut self) {
        for i in 0..=Self::N1 {
            self.consider(self.t_max * i as f64 / Self::N1 as f64, 0.0);
        }
        if let Some(t1) = self.sim.band_edge(self.t_max, |_| Some(0.0)) {
            for k in 0..=20 {
                self.consider(t1 * (1.0 + 0.002 * k as f64), 0.0);
            }
        }
    }

    /// Bang, counter-bang, then hold: a grid, the counter-bang that brings the output to rest
    /// for each first bang, and the first bang whose resting output reaches the band.
    fn bang_bang_hold(&mut self) {
        const M1: usize = 60;
        const M2: usize = 30;
        for i in 0..=M1 {
            let t1 = self.t_max * i as f64 / M1 as f64;
            for j in 1..=M2 {
                self.consider(t1, 0.5 * self.t_max * j as f64 / M2 as f64);
            }
            if let Some(t2) = self.rest(t1) {
                self.consider(t1, t2);
            }
        }
        if let Some(t1) = self.sim.band_edge(self.t_max, |t1| self.rest(t1)) {
            for k in 0..=20 {
                let t1 = t1 * (1.0 + 0.002 * k as f64);
                if let Some(t2) = self.rest(t1) {
                    self.consider(t1, t2);
                }
            }
        }
    }

    /// Refines around the best found on three ever finer local grids.
    fn refine(&mut self) {
        let two_phases = self.sim.q.plant.n > 1;
        let mut step = self.t_max / Self::N1 as f64;
        for _ in 0..3 {
            let (_, c1, c2) = self.best;
            for i in -10..=10 {
                let t1 = (c1 + step * i as f64 / 5.0).max(0.0);
                if two_phases && c2 > 0.0 {
                    for j in -10..=10 {
                        self.consider(t1, (c2 + step * j as f64 / 5.0).max(0.0));
                    }
                    if let Some(t2) = self.rest(t1) {
                        self.consider(t1, t2);
                    }
                } else {
                    self.consider(t1, 0.0);
                }
            }
            step /= 5.0;
        }
    }
}

/// Simulates candidate sequences exactly (zero-order hold between steps).
struct Sim<'q> {
    q: &'q Question,
    u_far: f64,
    u_near: f64,
    u_hold: f64,
    dt: f64,
    /// One step's transition (Φ) and input (Γ) matrices.
    step: Step,
    /// How far t1 (and twice t2) is searched.
    span: f64,
    /// The step from the end of a sequence to "far in the future", under the hold input.
    far: Step,
    /// Where the hold leaves a plant that settles by itself (`None` with an integrator).
    rest_state: Option<[f64; 3]>,
}

#[derive(Debug, Clone, Copy)]
struct Step {
    phi: [[f64; 3]; 3],
    gamma: [f64; 3],
}

impl<'q> Sim<'q> {
    fn new(q: &'q Question, u_far: f64, u_near: f64, u_hold: f64) -> Sim<'q> {
        let p = &q.plant;
        let scale = Sim::time_scale(q, u_far);
        let dt = scale / 400.0;
        // At full input a self-regulating plant reaches (1 − b) of a reachable change within a
        // few time constants; the search covers well beyond.
        let span = 12.0 * scale;
        Sim {
            q,
            u_far,
            u_near,
            u_hold,
            dt,
            step: Step::of(p, dt),
            span,
            far: Step::of(p, 1000.0 * p.slowest_s.max(span)),
            rest_state: solve(p.a, p.b.map(|b| -b * u_hold), p.n),
        }
    }

    /// A time scale of the change: the slowest lag, or the time to cover the distance at full
    /// input rate for a plant without one.
    fn time_scale(q: &Question, u_far: f64) -> f64 {
        let p = &q.plant;
        let distance = q.delta.abs();
        // Time to cover the distance if the output moved at its initial full-input rate after
        // the fastest lag: a lower bound for pure integrators.
        let rate = (0..p.n)
            .map(|k| {
                let mut v = p.b;
                for _ in 0..k {
                    v = mat_vec(&p.a, &v, p.n);
                }
                dot(&p.c, &v, p.n).abs()
            })
            .fold(0.0, f64::max)
            * u_far.abs();
        let by_rate = if rate > 0.0 {
            (distance / rate).sqrt().max(distance / rate)
        } else {
            1.0
        };
        p.slowest_s.max(by_rate).max(1e-9)
    }

    /// How far t1 (and twice t2) is searched: long enough for the slowest plant to cover the
    /// change at full input.
    fn search_span(&self) -> f64 {
        self.span
    }

    /// The settling time (dead time excluded) of the sequence (t1, t2, hold), or infinity when
    /// the output never stays in the band. The entry into the band is interpolated between
    /// steps.
    fn settling(&self, t1: f64, t2: f64) -> f64 {
        let p = &self.q.plant;
        let target = self.q.delta;
        let band = self.q.band_fraction * target.abs();
        // Distance outside the band (negative inside).
        let excess = |y: f64| (y - target).abs() - band;
        let mut x = [0.0; 3];
        let mut t = 0.0;
        let mut prev_excess = excess(0.0);
        // Time of the last entry into the band.
        let mut entered: Option<f64> = None;
        // The watch of the hold ends once the state is so close to where the hold leaves it that
        // the output cannot leave the band any more.
        let rest_state = self.rest_state;
        let scale_c = (0..p.n).map(|i| p.c[i].abs()).sum::<f64>().max(1e-300);
        let near_rest = |x: &[f64; 3]| {
            rest_state.is_some_and(|xs| {
                (0..p.n).all(|i| (x[i] - xs[i]).abs() * scale_c <= 1e-3 * band.max(1e-300))
            })
        };
        let mut run = |x: &mut [f64; 3], dur: f64, u: f64, until_rest: bool| {
            let full = (dur / self.dt).floor() as usize;
            let rest = dur - full as f64 * self.dt;
            let rest_step = (rest > 0.0).then(|| Step::of(p, rest));
            for k in 0..=full {
                let (step, h) = match (k < full, &rest_step) {
                    (true, _) => (&self.step, self.dt),
                    (false, Some(s)) => (s, rest),
                    (false, None) => break,
                };
                *x = step.apply(x, u, p.n);
                t += h;
                let e = excess(p.output(x));
                if e > 0.0 {
                    entered = None;
                } else if prev_excess > 0.0 {
                    entered = Some(t - h * (-e) / (prev_excess - e));
                }
                prev_excess = e;
                if until_rest && e <= 0.0 && near_rest(x) {
                    break;
                }
            }
        };
        run(&mut x, t1, self.u_far, false);
        run(&mut x, t2, self.u_near, false);
        // Hold: watch until the state can no longer leave the band.
        let watch = 12.0 * p.slowest_s.max(self.dt * 10.0) + 10.0 * self.dt;
        run(&mut x, watch, self.u_hold, true);
        let Some(entry) = entered else {
            return if excess(p.output(&x)) <= 0.0 && prev_excess <= 0.0 && excess(0.0) <= 0.0 {
                0.0
            } else {
                f64::INFINITY
            };
        };
        // Far in the future the held output must still be inside (a plant with integrators
        // drifts unless it came to rest).
        if excess(self.resting_output(&x)) > 0.0 {
            return f64::INFINITY;
        }
        entry
    }

    /// Where the output rests when the hold input is applied from state `x` on (far in the
    /// future; it drifts off for a plant with two integrators that is still moving).
    fn resting_output(&self, x: &[f64; 3]) -> f64 {
        let p = &self.q.plant;
        p.output(&self.far.apply(x, self.u_hold, p.n))
    }

    /// The state after the first bang of `t1` and a counter-bang of `t2`.
    fn state_after(&self, t1: f64, t2: f64) -> [f64; 3] {
        let p = &self.q.plant;
        let x = Step::of(p, t1).apply(&[0.0; 3], self.u_far, p.n);
        Step::of(p, t2).apply(&x, self.u_near, p.n)
    }

    /// The shortest first bang (with the counter-bang `counter(t1)` after it) whose resting
    /// output reaches the near edge of the band, by bisection; `None` when even the longest
    /// searched does not.
    fn band_edge(&self, t_max: f64, counter: impl Fn(f64) -> Option<f64>) -> Option<f64> {
        let target = self.q.delta;
        let edge = target - target.signum() * self.q.band_fraction * target.abs() * 0.999;
        // Signed progress past the edge in the direction of the change.
        let progress = |t1: f64| -> Option<f64> {
            let t2 = counter(t1)?;
            let y = self.resting_output(&self.state_after(t1, t2));
            Some((y - edge) * target.signum())
        };
        const N: usize = 400;
        let mut lo = 0.0;
        for i in 1..=N {
            let hi = t_max * i as f64 / N as f64;
            if progress(hi).is_some_and(|v| v >= 0.0) {
                let (mut a, mut b) = (lo, hi);
                for _ in 0..60 {
                    let m = 0.5 * (a + b);
                    if progress(m).is_some_and(|v| v >= 0.0) {
                        b = m;
                    } else {
                        a = m;
                    }
                }
                return Some(b);
            }
            lo = hi;
        }
        None
    }

    /// The t2 at which the output's rate under the hold input crosses zero (the output comes to
    /// rest), searched up to `t2_max`.
    fn rest_switch(&self, t1: f64, t2_max: f64) -> Option<f64> {
        let p = &self.q.plant;
        let at_t1 = self.state_after(t1, 0.0);
        let rate_after = |t2: f64| {
            let x = Step::of(p, t2).apply(&at_t1, self.u_near, p.n);
            p.output_rate(&x, self.u_hold)
        };
        let r0 = rate_after(0.0);
        if r0 == 0.0 {
            return None;
        }
        // Scan for the first sign change, then bisect.
        const N: usize = 200;
        let mut lo = 0.0;
        for i in 1..=N {
            let hi = t2_max * i as f64 / N as f64;
            if rate_after(hi).signum() != r0.signum() {
                let (mut a, mut b) = (lo, hi);
                for _ in 0..80 {
                    let m = 0.5 * (a + b);
                    if rate_after(m).signum() == r0.signum() {
                        a = m;
                    } else {
                        b = m;
                    }
                }
                return Some(0.5 * (a + b));
            }
            lo = hi;
        }
        None
    }
}

impl Step {
    /// The exact zero-order-hold step of length `h`: Φ = e^(A·h), Γ = ∫₀ʰ e^(A·s) ds · B, from the
    /// exponential of the augmented matrix [[A, B], [0, 0]].
    fn of(p: &Plant, h: f64) -> Step {
        let n = p.n;
        let m = n + 1;
        let mut aug = [[0.0; 4]; 4];
        for i in 0..n {
            for j in 0..n {
                aug[i][j] = p.a[i][j] * h;
            }
            aug[i][n] = p.b[i] * h;
        }
        let e = expm(&aug, m);
        let mut phi = [[0.0; 3]; 3];
        let mut gamma = [0.0; 3];
        for i in 0..n {
            phi[i][..n].copy_from_slice(&e[i][..n]);
            gamma[i] = e[i][n];
        }
        Step { phi, gamma }
    }

    fn apply(&self, x: &[f64; 3], u: f64, n: usize) -> [f64; 3] {
        let mut out = [0.0; 3];
        for i in 0..n {
            out[i] = (0..n).map(|j| self.phi[i][j] * x[j]).sum::<f64>() + self.gamma[i] * u;
        }
        out
    }
}

/// Matrix exponential of an m×m matrix (m ≤ 4) by scaling and squaring with a Taylor series.
pub(super) fn expm(a: &[[f64; 4]; 4], m: usize) -> [[f64; 4]; 4] {
    let norm = (0..m)
        .map(|i| (0..m).map(|j| a[i][j].abs()).sum::<f64>())
        .fold(0.0, f64::max);
    let squarings = if norm > 0.5 {
        (norm / 0.5).log2().ceil() as u32
    } else {
        0
    };
    let scale = 0.5f64.powi(squarings as i32);
    let mut s = [[0.0; 4]; 4];
    for i in 0..m {
        for j in 0..m {
            s[i][j] = a[i][j] * scale;
        }
    }
    // Σ s^k / k! up to k = 18: with ‖s‖ ≤ 0.5 the remainder is below 1e-20.
    let mut result = identity(m);
    let mut term = identity(m);
    for k in 1..=18 {
        term = mat_mul(&term, &s, m);
        for row in term.iter_mut().take(m) {
            for v in row.iter_mut().take(m) {
                *v /= k as f64;
            }
        }
        for i in 0..m {
            for j in 0..m {
                result[i][j] += term[i][j];
            }
        }
    }
    for _ in 0..squarings {
        result = mat_mul(&result, &result, m);
    }
    result
}

fn identity(m: usize) -> [[f64; 4]; 4] {
    let mut out = [[0.0; 4]; 4];
    for (i, row) in out.iter_mut().enumerate().take(m) {
        row[i] = 1.0;
    }
    out
}

fn mat_mul(a: &[[f64; 4]; 4], b: &[[f64; 4]; 4], m: usize) -> [[f64; 4]; 4] {
    let mut out = [[0.0; 4]; 4];
    for i in 0..m {
        for j in 0..m {
            out[i][j] = (0..m).map(|k| a[i][k] * b[k][j]).sum();
        }
    }
    out
}
