//! The fastest settling of a two-state plant with real poles, in closed form.
//!
//! The two-state plants of this module (overdamped second order, integrator with a lag, double
//! integrator) are cascades: ẋ1 = λ1·x1 + b1·u, ẏ = a21·x1 + λ2·y. Under a constant input the
//! state is a sum of exponentials e^(λ1·t), e^(λ2·t) and a constant, written here with divided
//! differences of z ↦ e^(z·t) (the convolution of exponentials is their divided difference —
//! the Hermite–Genocchi formula, from memory), which stay exact when the poles coincide or one
//! of them is zero. The output's rate then has at most one zero per constant-input phase,
//! found in closed form, so each phase is at most two monotone pieces.
//!
//! The optimum (derived here from the bang–bang principle for a target set): the output must
//! reach the near edge of the band with a speed the counter-bang can still stop before the far
//! edge. Braking at the near limit until the output comes to rest, then holding, keeps it in the
//! band (a self-regulating plant then creeps monotonically to the target, a plant with an
//! integrator stays), and the highest point of that rest is the turn of the counter-bang. That
//! turn rises with the first bang, so the fastest sequence is the longest first bang whose turn
//! stays inside the far edge (found by bisection), the counter-bang until rest, then the hold;
//! when even the full bang never passes the far edge, the first bang ends on entering the band.
//! The settling time of the chosen sequence is then evaluated exactly over its monotone pieces.

use super::{Plant, Question};

/// A plant ẋ1 = λ1·x1 + b1·u, ẏ = a21·x1 + λ2·y, y = x2.
#[derive(Debug, Clone, Copy)]
pub(super) struct Cascade {
    l1: f64,
    l2: f64,
    a21: f64,
    b1: f64,
    /// A time scale of the plant (s), where searches for long times start.
    scale: f64,
}

/// How far inside the far edge the output is brought to rest, as a fraction of the band.
const REST_MARGIN: f64 = 0.01;

/// Bisections stop when the bracket is this fraction of the time.
const TIME_TOLERANCE: f64 = 1e-10;

/// Sequences are searched up to this multiple of the plant's time scale, and "for good" is
/// evaluated this far out.
const FAR: f64 = 1e4;

/// The best (settling time without dead time, t1, t2) for `inputs` = [far, near, hold], `None`
/// when `q`'s plant is not a two-state cascade or no sequence of this form settles.
pub(super) fn fastest(q: &Question, inputs: [f64; 3]) -> Option<(f64, f64, f64)> {
    let plant = Cascade::of(&q.plant, q.delta, inputs[0])?;
    let [u_far, u_near, _] = inputs;
    let sign = q.delta.signum();
    let band = q.band_fraction * q.delta.abs();
    // The highest the counter-bang lets the output rise (in the direction of the change), and
    // the counter-bang that brings it to rest there.
    let turn = |t1: f64| -> (f64, f64) {
        let x = plant.advance([0.0; 2], u_far, t1);
        match plant.turn(x, u_near) {
            Some(s) => (sign * plant.advance(x, u_near, s)[1], s),
            None if sign * plant.rate(x) <= 0.0 => (sign * x[1], 0.0),
            None => (sign * plant.advance(x, u_near, FAR * plant.scale)[1], 0.0),
        }
    };
    // The rest is aimed a little inside the far edge, so that the bound does not hinge on a
    // tangency (the cost in t* is a small fraction of a percent).
    let far_edge = q.delta.abs() + band * (1.0 - REST_MARGIN);
    let t1 = match rise_point(plant.scale, |t1| turn(t1).0 - far_edge) {
        Some((t1, _)) => t1,
        // The full bang never passes the far edge: end it on entering the band.
        None => {
            let near_edge = q.delta.abs() - band;
            let progress = |t| sign * plant.advance([0.0; 2], u_far, t)[1] - near_edge;
            rise_point(plant.scale, progress)?.1
        }
    };
    let t2 = turn(t1).1;
    let settled = plant.settling(q, inputs, t1, t2);
    settled.is_finite().then_some((settled, t1, t2))
}

/// Where `f` turns non-negative (negative up to a point, non-negative beyond it), as a bracket
/// (last negative, first non-negative), by doubling from `start` and then a root search; `None`
/// when `f` stays negative over the searched span.
fn rise_point(start: f64, f: impl Fn(f64) -> f64) -> Option<(f64, f64)> {
    let mut hi = start;
    let mut f_hi = f(hi);
    while f_hi < 0.0 {
        hi *= 2.0;
        if hi > FAR * start {
            return None;
        }
        f_hi = f(hi);
    }
    Some(bracket(0.0, f(0.0), hi, f_hi, f))
}

/// Narrows the bracket (a, b), f(a) < 0 ≤ f(b), a < b, to `TIME_TOLERANCE` of b by the
/// Illinois variant of regula falsi (Dowell & Jarratt 1971 — from memory), which keeps the
/// bracket and converges superlinearly; bisection steps where the interpolation leaves it.
fn bracket(mut a: f64, mut fa: f64, mut b: f64, mut fb: f64, f: impl Fn(f64) -> f64) -> (f64, f64) {
    // The side that moved last (−1 for a, 1 for b).
    let mut side = 0;
    for _ in 0..200 {
        if b - a <= TIME_TOLERANCE * b.abs() {
            break;
        }
        let mut c = (a * fb - b * fa) / (fb - fa);
        if !(c > a && c < b) {
            c = 0.5 * (a + b);
        }
        let fc = f(c);
        if fc >= 0.0 {
            (b, fb) = (c, fc);
            if side == 1 {
                fa *= 0.5;
            }
            side = 1;
        } else {
            (a, fa) = (c, fc);
            if side == -1 {
                fb *= 0.5;
            }
            side = -1;
        }
    }
    (a, b)
}

impl Cascade {
    /// The cascade form of `p`, if it has one.
    pub(super) fn of(p: &Plant, delta: f64, u_far: f64) -> Option<Cascade> {
        let cascade = p.n == 2
            && p.a[0][1] == 0.0
            && p.b[1] == 0.0
            && p.c[..2] == [0.0, 1.0]
            && p.a[0][0] <= 0.0
            && p.a[1][1] <= 0.0;
        if !cascade {
            return None;
        }
        let (l1, l2, a21, b1) = (p.a[0][0], p.a[1][1], p.a[1][0], p.b[0]);
        // The slowest lag, or the time to cover the change at full input through the two
        // integrators.
        let by_rate = (delta / (a21 * b1 * u_far)).abs().sqrt();
        let scale = p.slowest_s.max(by_rate);
        (scale.is_finite() && scale > 0.0).then_some(Cascade {
            l1,
            l2,
            a21,
            b1,
            scale,
        })
    }

    /// The state after `s` seconds at input `u` from `x`.
    fn advance(&self, x: [f64; 2], u: f64, s: f64) -> [f64; 2] {
        let (w1, w2) = (self.l1 * s, self.l2 * s);
        [
            w1.exp() * x[0] + self.b1 * u * s * dd1(0.0, w1),
            w2.exp() * x[1]
                + self.a21 * x[0] * s * dd1(w1, w2)
                + self.a21 * self.b1 * u * s * s * dd2(0.0, w1, w2),
        ]
    }

    /// The output's rate ẏ at state `x` (it does not depend on the input).
    fn rate(&self, x: [f64; 2]) -> f64 {
        self.a21 * x[0] + self.l2 * x[1]
    }

    /// The time s > 0 at which the output's rate crosses zero under the input `u` from `x`, if
    /// it does. With v = ẋ(0), ẏ(s) = e^(λ2·s)·(v2 + a21·v1·(e^(δ·s) − 1)/δ), δ = λ1 − λ2.
    fn turn(&self, x: [f64; 2], u: f64) -> Option<f64> {
        let v1 = self.l1 * x[0] + self.b1 * u;
        let v2 = self.rate(x);
        let m = -v2 / (self.a21 * v1);
        if !(m > 0.0 && m.is_finite()) {
            return None;
        }
        let d = self.l1 - self.l2;
        if d == 0.0 {
            return Some(m);
        }
        let s = (d * m).ln_1p() / d;
        (s > 0.0 && s.is_finite()).then_some(s)
    }

    /// The last time (dead time excluded) the output of the sequence (t1 at the far input, t2
    /// at the near one, then the hold) is outside the band, or infinity when it does not stay
    /// inside for good: backwards over the monotone pieces, the first piece that starts outside
    /// holds the last crossing.
    pub(super) fn settling(&self, q: &Question, inputs: [f64; 3], t1: f64, t2: f64) -> f64 {
        let band = q.band_fraction * q.delta.abs();
        let outside = |y: f64| (y - q.delta).abs() > band;
        // (start time, start state, input, duration) of each monotone piece.
        let mut pieces = [(0.0, [0.0; 2], 0.0, 0.0); 6];
        let mut count = 0;
        let (mut t, mut x) = (0.0, [0.0; 2]);
        let far = FAR * self.scale;
        for (u, mut duration) in inputs.into_iter().zip([t1, t2, far]) {
            if let Some(s) = self.turn(x, u).filter(|&s| s < duration) {
                pieces[count] = (t, x, u, s);
                count += 1;
                (t, x, duration) = (t + s, self.advance(x, u, s), duration - s);
            }
            if duration > 0.0 {
                pieces[count] = (t, x, u, duration);
                count += 1;
                (t, x) = (t + duration, self.advance(x, u, duration));
            }
        }
        if outside(x[1]) {
            return f64::INFINITY;
        }
        for &(start, x0, u, duration) in pieces[..count].iter().rev() {
            if outside(x0[1]) {
                // From outside to inside, crossing the edge once.
                let inside_by = |s: f64| band - (self.advance(x0, u, s)[1] - q.delta).abs();
                let (_, hi) = bracket(
                    0.0,
                    inside_by(0.0),
                    duration,
                    inside_by(duration),
                    inside_by,
                );
                return start + hi;
            }
        }
        0.0
    }
}

/// The divided difference exp[w0, w1] = (e^w1 − e^w0)/(w1 − w0), exact for close or equal
/// arguments (w ≤ 0 here, so nothing overflows).
fn dd1(w0: f64, w1: f64) -> f64 {
    let (lo, hi) = (w0.min(w1), w0.max(w1));
    let d = hi - lo;
    if d == 0.0 {
        return hi.exp();
    }
    // e^hi·(1 − e^(−d))/d.
    hi.exp() * (-(-d).exp_m1() / d)
}

/// The divided difference exp[w0, w1, w2], by the recurrence when the arguments spread, and by
/// its Taylor series about their middle when they are close: exp[w0, w1, w2] =
/// e^c·Σ_k h_k(d0, d1, d2)/(k + 2)!, h_k the complete homogeneous symmetric polynomials of the
/// offsets d_i = w_i − c.
fn dd2(w0: f64, w1: f64, w2: f64) -> f64 {
    let mut w = [w0, w1, w2];
    w.sort_by(f64::total_cmp);
    let spread = w[2] - w[0];
    if spread > 0.1 {
        return (dd1(w[1], w[2]) - dd1(w[0], w[1])) / spread;
    }
    let c = 0.5 * (w[0] + w[2]);
    let [d0, d1, d2] = w.map(|v| v - c);
    // h_k of one, two and three offsets, built up together.
    let (mut h1, mut h2, mut h3) = (1.0, 1.0, 1.0);
    let mut factorial = 2.0;
    let mut sum = 0.5;
    for k in 1..14 {
        h1 *= d0;
        h2 = h2 * d1 + h1;
        h3 = h3 * d2 + h2;
        factorial *= (k + 2) as f64;
        sum += h3 / factorial;
    }
    c.exp() * sum
}
