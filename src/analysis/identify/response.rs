//! The simulated unit responses of each family and the linear part of the fit.
//!
//! For a fixed shape (every parameter but the shared gain) each episode's OP is run through the
//! exact zero-order-hold discretisation of the unit-gain model with a fractional dead time,
//! giving a response s. The PV is fitted as `nuisance + K·s`: one shared gain K and, per
//! episode, an offset and the free initial transients of the model's modes (for `integrating`
//! also a drift, the episode's unknown balance OP). That is linear, so for each episode the
//! nuisance is projected out in closed form and [`EpStats`] keeps what the shared gain needs;
//! held-out episodes are scored the same way with the gain fixed (only their nuisance refitted).

/// What one episode contributes to the fit at a fixed shape, nuisance projected out.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(super) struct EpStats {
    /// <s⊥, s⊥>, <s⊥, y⊥>, <y⊥, y⊥>.
    pub(super) ss: f64,
    pub(super) sy: f64,
    pub(super) yy: f64,
    /// Σ(y − ȳ)², the variation a model could explain.
    pub(super) sst: f64,
    pub(super) n: usize,
}

impl EpStats {
    /// The squared error of this episode with gain `k`.
    pub(super) fn sse_at(&self, k: f64) -> f64 {
        (self.yy - 2.0 * k * self.sy + k * k * self.ss).max(0.0)
    }
}

/// The shared gain and the squared error over episodes.
#[derive(Debug, Clone, Copy)]
pub(super) struct LinearFit {
    pub(super) gain: f64,
    pub(super) sse: f64,
}

pub(super) fn pool(stats: impl IntoIterator<Item = EpStats>) -> LinearFit {
    let (mut sy, mut ss, mut yy) = (0.0, 0.0, 0.0);
    for e in stats {
        sy += e.sy;
        ss += e.ss;
        yy += e.yy;
    }
    let gain = if ss > 0.0 { sy / ss } else { 0.0 };
    LinearFit {
        gain,
        sse: (yy - gain * sy).max(0.0),
    }
}

/// Every parameter of a family but its shared gain.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum Shape {
    First {
        tau: f64,
        theta: f64,
    },
    Second {
        tau1: f64,
        tau2: f64,
        theta: f64,
    },
    /// `lag` 0: no lag.
    Integrating {
        lag: f64,
        theta: f64,
    },
}

impl Shape {
    pub(super) fn stats(&self, seg: &super::data::Prepared) -> EpStats {
        match *self {
            Shape::First { tau, theta } => first_order(seg, tau, theta),
            _ => by_gram(seg, self),
        }
    }

    pub(super) fn fit(&self, data: &[super::data::Prepared]) -> LinearFit {
        pool(data.iter().map(|s| self.stats(s)))
    }
}

/// The dead time as whole steps d and a fraction f of a step.
fn delay(theta: f64, h: f64) -> (usize, f64) {
    let dd = (theta / h).floor();
    (dd as usize, theta / h - dd)
}

/// One first-order mode's step: pole a and the weights of the two input pieces of a step
/// (the earlier input for the fraction f of the step, then the later one).
#[derive(Clone, Copy)]
struct Mode {
    a: f64,
    wa: f64,
    wb: f64,
}

impl Mode {
    fn new(tau: f64, h: f64, f: f64) -> Mode {
        let a = (-h / tau).exp();
        let a1 = (-f * h / tau).exp();
        let a2 = (-(1.0 - f) * h / tau).exp();
        Mode {
            a,
            wa: a2 * (1.0 - a1),
            wb: 1.0 - a2,
        }
    }
}

/// The first-order statistics.
///
/// This is the innermost loop of the identification, so it is written for speed: sums that do not
/// depend on (τ, θ) are kept in the prepared data, the geometric sums of the transient are in
/// closed form, and the simulation runs in two branch-free phases (before and after the dead
/// time has passed the start of the data).
fn first_order(seg: &super::data::Prepared, tau: f64, theta: f64) -> EpStats {
    let h = seg.h;
    let n = seg.y.len();
    let (d, f) = delay(theta, h);
    let Mode { a, wa, wb } = Mode::new(tau, h, f);
    let u = &seg.u;
    let y = &seg.y;
    let (mut ss, mut ssg, mut sss, mut syg, mut ssy) = (0.0, 0.0, 0.0, 0.0, 0.0);
    let mut s = u[0];
    let mut g = 1.0;
    // Phase 1: the delayed input is still the first value.
    let head = (d + 1).min(n);
    for &yk in &y[..head] {
        ss += s;
        sss += s * s;
        ssg += s * g;
        ssy += s * yk;
        syg += yk * g;
        s = a * s + (wa + wb) * u[0];
        g *= a;
    }
    // Phase 2: k > d, the input is u[k−d−1] for a fraction f of the step, then u[k−d].
    if head < n {
        let ya = &y[head..];
        let ua = &u[..n - head];
        let ub = &u[1..n - head + 1];
        for ((&yk, &uak), &ubk) in ya.iter().zip(ua).zip(ub) {
            ss += s;
            sss += s * s;
            ssg += s * g;
            ssy += s * yk;
            syg += yk * g;
            s = a * s + wa * uak + wb * ubk;
            g *= a;
        }
    }
    let s1 = n as f64;
    let an = a.powi(n as i32);
    let sg = if a < 1.0 { (1.0 - an) / (1.0 - a) } else { s1 };
    let sgg = if a < 1.0 {
        (1.0 - an * an) / (1.0 - a * a)
    } else {
        s1
    };
    let (sy, syy) = (seg.sum_y, seg.sum_yy);
    // Project out span{1, g}; fall back to {1} when g is nearly constant.
    let det = s1 * sgg - sg * sg;
    let proj = |bv: (f64, f64), bw: (f64, f64)| -> f64 {
        if det > 1e-9 * s1 * sgg.max(1e-300) {
            (bv.0 * (sgg * bw.0 - sg * bw.1) + bv.1 * (-sg * bw.0 + s1 * bw.1)) / det
        } else {
            bv.0 * bw.0 / s1
        }
    };
    EpStats {
        sy: ssy - proj((ss, ssg), (sy, syg)),
        ss: sss - proj((ss, ssg), (ss, ssg)),
        yy: syy - proj((sy, syg), (sy, syg)),
        sst: syy - sy * sy / s1,
        n,
    }
}

/// Second order and integrating: the response and the nuisance basis are built step by step and
/// their Gram matrix [basis…, s, y] summed, then the basis is projected out.
///
/// Second order, by partial fractions: 1/((τ1 s + 1)(τ2 s + 1)) = (τ1·m1 − τ2·m2)/(τ1 − τ2) with
/// m_i the unit first-order responses (each exact under a zero-order hold); basis {1, a1^k, a2^k}.
/// Integrating with lag τl: 1/(s(τl s + 1)) = 1/s − τl/(τl s + 1), the exact integral of the
/// delayed input minus τl times the lag's response; basis {1, k/n (the drift), al^k}.
fn by_gram(seg: &super::data::Prepared, shape: &Shape) -> EpStats {
    let h = seg.h;
    let n = seg.y.len();
    let (taus, theta, integrating) = match *shape {
        Shape::Second { tau1, tau2, theta } => ([tau1, tau2], theta, false),
        Shape::Integrating { lag, theta } => ([lag, lag], theta, true),
        Shape::First { tau, theta } => ([tau, tau], theta, false),
    };
    let (d, f) = delay(theta, h);
    let has_lag = taus[0] > 0.0;
    let m = if has_lag {
        [Mode::new(taus[0], h, f), Mode::new(taus[1], h, f)]
    } else {
        [Mode {
            a: 0.0,
            wa: 0.0,
            wb: 0.0,
        }; 2]
    };
    let u = &seg.u;
    let p = if integrating && !has_lag { 2 } else { 3 };
    let (mut x1, mut x2, mut integral) = (u[0], u[0], 0.0);
    let (mut g1, mut g2) = (1.0, 1.0);
    let mut gram = [[0.0f64; 5]; 5];
    let inv_n = 1.0 / n as f64;
    for (k, &yk) in seg.y.iter().enumerate() {
        let (s, b2) = if integrating {
            (integral - taus[0] * x1, g1)
        } else {
            ((taus[0] * x1 - taus[1] * x2) / (taus[0] - taus[1]), g2)
        };
        let b1 = if integrating { k as f64 * inv_n } else { g1 };
        let v = [1.0, b1, b2, s, yk];
        for i in 0..5 {
            for j in i..5 {
                gram[i][j] += v[i] * v[j];
            }
        }
        let ua = if k > d { u[k - d - 1] } else { u[0] };
        let ub = if k >= d { u[k - d] } else { u[0] };
        x1 = m[0].a * x1 + m[0].wa * ua + m[0].wb * ub;
        x2 = m[1].a * x2 + m[1].wa * ua + m[1].wb * ub;
        integral += h * (f * ua + (1.0 - f) * ub);
        g1 *= m[0].a;
        g2 *= m[1].a;
    }
    project(&gram, p, n, seg.sum_y)
}

/// Projects the first `p` basis columns out of s and y (dropping trailing columns that make the
/// basis singular).
fn project(gram: &[[f64; 5]; 5], p: usize, n: usize, sum_y: f64) -> EpStats {
    let at = |i: usize, j: usize| if i <= j { gram[i][j] } else { gram[j][i] };
    // The basis occupies columns 0..3 (column 2 unused when p = 2); s is column 3, y column 4.
    let cols: Vec<usize> = (0..p).collect();
    for q in (1..=p).rev() {
        let mut b = [[0.0; 3]; 3];
        let (mut rs, mut ry) = ([0.0; 3], [0.0; 3]);
        for (a, &i) in cols[..q].iter().enumerate() {
            for (c, &j) in cols[..q].iter().enumerate() {
                b[a][c] = at(i, j);
            }
            rs[a] = at(i, 3);
            ry[a] = at(i, 4);
        }
        let (Some(xs), Some(xy)) = (
            super::super::linalg::solve(b, rs, q),
            super::super::linalg::solve(b, ry, q),
        ) else {
            continue;
        };
        let dot = |r: &[f64; 3], x: &[f64; 3]| (0..q).map(|i| r[i] * x[i]).sum::<f64>();
        let stats = EpStats {
            ss: at(3, 3) - dot(&rs, &xs),
            sy: at(3, 4) - dot(&rs, &xy),
            yy: at(4, 4) - dot(&ry, &xy),
            sst: at(4, 4) - sum_y * sum_y / n as f64,
            n,
        };
        if stats.ss >= -1e-9 * at(3, 3).abs() && stats.yy >= -1e-9 * at(4, 4).abs() {
            return EpStats {
                ss: stats.ss.max(0.0),
                yy: stats.yy.max(0.0),
                ..stats
            };
        }
    }
    EpStats {
        sst: at(4, 4) - sum_y * sum_y / n as f64,
        yy: at(4, 4) - sum_y * sum_y / n as f64,
        n,
        ..EpStats::default()
    }
}

/// Nelder–Mead in `N` dimensions with the usual coefficients (reflection 1, expansion 2,
/// contraction ½, shrink ½).
pub(super) fn nelder_mead<const N: usize>(
    f: impl Fn([f64; N]) -> f64,
    x0: [f64; N],
    step: [f64; N],
    tol: [f64; N],
    max_iter: usize,
) -> [f64; N] {
    let mut pts: Vec<[f64; N]> = (0..=N)
        .map(|i| {
            let mut p = x0;
            if i > 0 {
                p[i - 1] += step[i - 1];
            }
            p
        })
        .collect();
    let mut vals: Vec<f64> = pts.iter().map(|p| f(*p)).collect();
    for _ in 0..max_iter {
        let mut idx: Vec<usize> = (0..=N).collect();
        idx.sort_by(|&a, &b| vals[a].total_cmp(&vals[b]));
        let (b, m, w) = (idx[0], idx[N - 1], idx[N]);
        let small = (0..N).all(|d| pts.iter().all(|p| (p[d] - pts[b][d]).abs() <= tol[d]));
        if small || (vals[w] - vals[b]).abs() <= 1e-12 * vals[b].abs().max(1e-300) {
            break;
        }
        let mut c = [0.0; N];
        for d in 0..N {
            c[d] = idx[..N].iter().map(|&i| pts[i][d]).sum::<f64>() / N as f64;
        }
        let at = |t: f64| {
            let mut p = c;
            for d in 0..N {
                p[d] = c[d] + t * (pts[w][d] - c[d]);
            }
            p
        };
        let r = at(-1.0);
        let fr = f(r);
        if fr < vals[b] {
            let e = at(-2.0);
            let fe = f(e);
            (pts[w], vals[w]) = if fe < fr { (e, fe) } else { (r, fr) };
        } else if fr < vals[m] {
            (pts[w], vals[w]) = (r, fr);
        } else {
            let k = if fr < vals[w] { at(-0.5) } else { at(0.5) };
            let fk = f(k);
            if fk < vals[w].min(fr) {
                (pts[w], vals[w]) = (k, fk);
            } else {
                let best = pts[b];
                for &i in &idx[1..] {
                    for (p, q) in pts[i].iter_mut().zip(best) {
                        *p = (*p + q) / 2.0;
                    }
                    vals[i] = f(pts[i]);
                }
            }
        }
    }
    let best = (0..=N)
        .min_by(|&a, &b| vals[a].total_cmp(&vals[b]))
        .unwrap_or(0);
    pts[best]
}
