//! The maximum sensitivity Ms = max over ω of |1/(1 + L(jω))|, L = C·G, of a controller on an
//! identified model, with the dead time exact (e^(−jωθ)). Ms ≤ 2 is the usual robustness limit
//! (it guarantees a gain margin of at least 2 and a phase margin of at least 29°; Åström &
//! Hägglund, *Advanced PID Control*, ISA 2006, ch. 4 — from memory).
//!
//! Found on a dense logarithmic grid of frequencies spanning the loop's time scales, then
//! refined by golden-section search around the largest grid value.

use super::super::controller::Ideal;
use super::super::identify::{Family, Model};

/// Points per decade of the grid: neighbours 1.2 % apart in frequency.
const PER_DECADE: f64 = 200.0;

/// Ms of `ideal` on `model`; a model whose gain varies with the OP is linearised at each of
/// `ops` and the largest Ms is taken, as is the larger of a two-direction model's two.
pub fn max_sensitivity(model: &Model, ideal: &Ideal, ops: &[f64]) -> f64 {
    linear_plants(model, ops)
        .iter()
        .map(|g| peak(g, ideal))
        .fold(0.0, f64::max)
}

/// A complex number, just what a frequency response needs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Complex {
    pub re: f64,
    pub im: f64,
}

impl Complex {
    const ONE: Complex = Complex { re: 1.0, im: 0.0 };

    fn new(re: f64, im: f64) -> Complex {
        Complex { re, im }
    }

    /// e^(jφ).
    fn unit(phi: f64) -> Complex {
        Complex::new(phi.cos(), phi.sin())
    }

    fn mul(self, o: Complex) -> Complex {
        Complex::new(
            self.re * o.re - self.im * o.im,
            self.re * o.im + self.im * o.re,
        )
    }

    fn div(self, o: Complex) -> Complex {
        let d = o.re * o.re + o.im * o.im;
        Complex::new(
            (self.re * o.re + self.im * o.im) / d,
            (self.im * o.re - self.re * o.im) / d,
        )
    }

    fn add(self, o: Complex) -> Complex {
        Complex::new(self.re + o.re, self.im + o.im)
    }

    fn scale(self, k: f64) -> Complex {
        Complex::new(self.re * k, self.im * k)
    }

    pub fn abs(self) -> f64 {
        self.re.hypot(self.im)
    }
}

/// A linear plant's transfer function, dead time included.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum Linear {
    /// K·e^(−θs)/((τ1·s + 1)(τ2·s + 1)); τ2 = 0 for first order.
    Lags {
        gain: f64,
        tau1: f64,
        tau2: f64,
        theta: f64,
    },
    /// k·e^(−θs)/(s·(τl·s + 1)); τl = 0 without a lag.
    Integrating { rate: f64, lag: f64, theta: f64 },
}

impl Linear {
    /// G(jω).
    pub(super) fn at(&self, w: f64) -> Complex {
        let lag = |t: f64| Complex::new(1.0, w * t);
        match *self {
            Linear::Lags {
                gain,
                tau1,
                tau2,
                theta,
            } => Complex::unit(-w * theta)
                .scale(gain)
                .div(lag(tau1).mul(lag(tau2))),
            Linear::Integrating {
                rate,
                lag: tl,
                theta,
            } => Complex::unit(-w * theta)
                .scale(rate)
                .div(Complex::new(0.0, w).mul(lag(tl))),
        }
    }

    /// The time scales that bound the frequencies of interest (s, positive ones only).
    fn times(&self) -> [f64; 3] {
        match *self {
            Linear::Lags {
                tau1, tau2, theta, ..
            } => [tau1, tau2, theta],
            Linear::Integrating { lag, theta, .. } => [lag, theta, 0.0],
        }
    }

    /// The loop's own time scale, τ/|Kc·K| (or 1/|Kc·k| for an integrator): near where the
    /// loop crosses over, so it joins the time scales the grid spans.
    fn crossover_time(&self, kc: f64) -> f64 {
        match *self {
            Linear::Lags { gain, tau1, .. } => (tau1.max(1e-9) / (kc * gain)).abs(),
            Linear::Integrating { rate, .. } => (1.0 / (kc * rate)).abs(),
        }
    }
}

/// C(jω) of the ideal form: Kc·(1 + 1/(jωTi) + jωTd).
pub(super) fn controller_at(c: &Ideal, w: f64) -> Complex {
    let integral = if c.integral_time_s.is_finite() {
        -1.0 / (w * c.integral_time_s)
    } else {
        0.0
    };
    Complex::new(1.0, integral + w * c.derivative_time_s).scale(c.gain)
}

/// |S(jω)| = |1/(1 + C·G)|.
pub(super) fn sensitivity_at(g: &Linear, c: &Ideal, w: f64) -> f64 {
    Complex::ONE
        .div(Complex::ONE.add(controller_at(c, w).mul(g.at(w))))
        .abs()
}

/// The model's linear plants for Ms (see [`max_sensitivity`]).
pub(super) fn linear_plants(model: &Model, ops: &[f64]) -> Vec<Linear> {
    let (k, tau, theta) = (model.gain, model.time_constant_s, model.dead_time_s);
    let first = |gain: f64, tau1: f64, theta: f64| Linear::Lags {
        gain,
        tau1,
        tau2: 0.0,
        theta,
    };
    match model.family {
        Family::FirstOrder => vec![first(k, tau, theta)],
        Family::SecondOrder {
            first_time_constant_s,
            second_time_constant_s,
            process_dead_time_s,
        } => vec![Linear::Lags {
            gain: k,
            tau1: first_time_constant_s,
            tau2: second_time_constant_s,
            theta: process_dead_time_s,
        }],
        Family::Integrating {
            gain_per_s,
            lag_s,
            process_dead_time_s,
        } => vec![Linear::Integrating {
            rate: gain_per_s,
            lag: lag_s.unwrap_or(0.0),
            theta: process_dead_time_s,
        }],
        Family::TwoDirection {
            falling_gain,
            falling_time_constant_s,
            falling_dead_time_s,
            ..
        } => vec![
            first(k, tau, theta),
            first(falling_gain, falling_time_constant_s, falling_dead_time_s),
        ],
        Family::OpDependentGain { mapped_gain, .. } => {
            let map = model.op_map();
            ops.iter()
                .map(|&u| first(mapped_gain * map.slope(u), tau, theta))
                .collect()
        }
    }
}

/// max over ω of |S(jω)| for one plant.
pub(super) fn peak(g: &Linear, c: &Ideal) -> f64 {
    let mut times: Vec<f64> = g
        .times()
        .into_iter()
        .chain([
            c.integral_time_s,
            c.derivative_time_s,
            g.crossover_time(c.gain),
        ])
        .filter(|t| t.is_finite() && *t > 0.0)
        .collect();
    if times.is_empty() {
        times.push(1.0);
    }
    let longest = times.iter().copied().fold(0.0, f64::max);
    let shortest = times.iter().copied().fold(f64::INFINITY, f64::min);
    // From well below the slowest corner to well above the fastest: |S| → 1 beyond both ends
    // for a strictly proper plant (and → 0 at low frequency with integral action).
    let (lo, hi) = ((1e-3 / longest).ln(), (1e3 / shortest).ln());
    let n = (((hi - lo) / std::f64::consts::LN_10) * PER_DECADE).ceil() as usize + 1;
    let at = |x: f64| sensitivity_at(g, c, x.exp());
    let xs: Vec<f64> = (0..n)
        .map(|i| lo + (hi - lo) * i as f64 / (n - 1) as f64)
        .collect();
    let (best, best_value) = xs
        .iter()
        .enumerate()
        .map(|(i, &x)| (i, at(x)))
        .fold((0, f64::NEG_INFINITY), |a, b| if b.1 > a.1 { b } else { a });
    let a = xs[best.saturating_sub(1)];
    let b = xs[(best + 1).min(n - 1)];
    golden_max(at, a, b).max(best_value)
}

/// The largest value of `f` on [a, b] by golden-section search (f unimodal there).
fn golden_max(f: impl Fn(f64) -> f64, mut a: f64, mut b: f64) -> f64 {
    let r = (5f64.sqrt() - 1.0) / 2.0;
    let mut c = b - r * (b - a);
    let mut d = a + r * (b - a);
    let (mut fc, mut fd) = (f(c), f(d));
    for _ in 0..60 {
        if fc > fd {
            b = d;
            d = c;
            fd = fc;
            c = b - r * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + r * (b - a);
            fd = f(d);
        }
    }
    fc.max(fd)
}
