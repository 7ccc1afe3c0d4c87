//! Identifying a first-order-plus-dead-time (FOPDT) model, G(s) = K·e^(−θs)/(τs + 1), from the
//! OP → PV data of a loop's episodes.
//!
//! Method: output-error least squares. Each episode is put on a uniform grid (PV averaged in
//! blocks centred on the grid points, OP averaged over each hold interval, so long episodes are
//! also thinned to a bounded number of points). For a candidate (τ, θ) the measured OP is run
//! through the exact zero-order-hold discretisation of 1/(τs + 1) with a fractional dead time,
//! giving a unit-gain simulated response s. The PV is then fitted as `c_e + K·s + z_e·a^k` —
//! one shared gain, and per episode an offset and a free initial transient (a = e^(−h/τ)) —
//! which is linear in (K, c_e, z_e) and solved in closed form. The sum of squared errors is
//! minimised over (ln τ, θ): an ARX regression with a dead-time scan seeds the search, a few
//! probes guard against a poor seed, and Nelder–Mead polishes the best.
//!
//! Why output error rather than an ARX regression: with measurement noise on the PV the ARX
//! regressor y[k] is noisy and biases τ low; simulating from the OP alone keeps the noise out of
//! the regressors. The recorded OP is what the actuator received (clamped to its range), so
//! saturated stretches are simply strong excitation. Reverse-acting processes give K < 0.

use serde::Serialize;

/// A first-order-plus-dead-time model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Fopdt {
    /// Steady-state gain K, PV units per OP unit (negative for reverse-acting processes).
    pub gain: f64,
    /// Time constant τ, seconds.
    pub time_constant_s: f64,
    /// Dead time θ, seconds.
    pub dead_time_s: f64,
}

/// An identified model with its fit quality.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Model {
    pub gain: f64,
    pub time_constant_s: f64,
    pub dead_time_s: f64,
    /// Share of the PV variation (about each episode's mean) that the model explains.
    pub fit_r2: f64,
    pub episodes_used: usize,
    pub points_used: usize,
}

impl Model {
    pub fn fopdt(&self) -> Fopdt {
        Fopdt {
            gain: self.gain,
            time_constant_s: self.time_constant_s,
            dead_time_s: self.dead_time_s,
        }
    }
}

/// Why no usable model could be identified. Each message says what would help.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum Refusal {
    #[error("no setpoint change with enough samples to identify the process")]
    NoEpisodes,
    #[error(
        "the data do not excite the process: the OP moved at most {op_move:.3} and the PV at most \
         {pv_move:.3} over the episodes (noise ≈ {noise:.3}); larger setpoint changes are needed"
    )]
    NoExcitation {
        op_move: f64,
        pv_move: f64,
        noise: f64,
    },
    #[error(
        "the best first-order-plus-dead-time model explains only {:.0} % of the PV variation \
         (at least {:.0} % needed); the process may not be first order, or disturbances dominate",
        r2 * 100.0,
        min_r2 * 100.0
    )]
    PoorFit { r2: f64, min_r2: f64 },
    #[error(
        "the time constant is longer than the episodes can show (over {limit_s:.0} s); the process \
         may be integrating, or the episodes are too short"
    )]
    TimeConstantUndetermined { limit_s: f64 },
}

/// One episode's data on a uniform grid, ready for fitting.
#[derive(Debug, Clone, PartialEq)]
pub struct IdSegment {
    /// Grid step, seconds.
    pub step_s: f64,
    /// OP held over each grid interval, clamped to the actuator range.
    pub op: Vec<f64>,
    /// PV at each grid point.
    pub pv: Vec<f64>,
}

/// Settings of the identification.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct IdentifySettings {
    /// Episodes longer than this many grid points are thinned.
    pub max_points_per_episode: usize,
    /// At most this many episodes are pooled (the largest changes are kept).
    pub max_episodes: usize,
    /// Fits explaining less than this share of the PV variation are refused.
    pub min_r2: f64,
}

impl Default for IdentifySettings {
    fn default() -> Self {
        IdentifySettings {
            max_points_per_episode: 200,
            max_episodes: 60,
            min_r2: 0.6,
        }
    }
}

/// Puts samples `time_s[..]`, `pv`, `op` (one episode, already cut) on a uniform grid whose step is
/// the larger of the median sample interval and duration / `max_points`. Returns `None` when there
/// are fewer than 4 samples.
pub fn build_segment(
    time_s: &[f64],
    pv: &[f64],
    op: &[f64],
    op_min: f64,
    op_max: f64,
    max_points: usize,
) -> Option<IdSegment> {
    let n = time_s.len();
    if n < 4 {
        return None;
    }
    let t_a = time_s[0];
    let duration = time_s[n - 1] - t_a;
    let mut gaps: Vec<f64> = time_s.windows(2).map(|w| w[1] - w[0]).collect();
    let median_dt = super::stats::median_in_place(&mut gaps);
    let step = median_dt.max(duration / max_points.max(4) as f64);
    if step.is_nan() || step <= 0.0 {
        return None;
    }
    let m = (duration / step).floor() as usize + 1;
    let (lo, hi) = if op_min <= op_max {
        (op_min, op_max)
    } else {
        (op_max, op_min)
    };
    let mut pv_sum = vec![0.0; m];
    let mut pv_n = vec![0u32; m];
    let mut op_sum = vec![0.0; m];
    let mut op_n = vec![0u32; m];
    for k in 0..n {
        let x = (time_s[k] - t_a) / step;
        let centred = (x.round() as usize).min(m - 1);
        pv_sum[centred] += pv[k];
        pv_n[centred] += 1;
        let held = ((x + 1e-9).floor() as usize).min(m - 1);
        op_sum[held] += op[k].clamp(lo, hi);
        op_n[held] += 1;
    }
    let fill = |sum: Vec<f64>, cnt: Vec<u32>| -> Vec<f64> {
        let mut out = Vec::with_capacity(m);
        let mut last = f64::NAN;
        for (s, c) in sum.into_iter().zip(cnt) {
            if c > 0 {
                last = s / f64::from(c);
            }
            out.push(last);
        }
        // A grid that starts with empty blocks takes the first value seen.
        if let Some(first) = out.iter().copied().find(|v| v.is_finite()) {
            for v in out.iter_mut().take_while(|v| !v.is_finite()) {
                *v = first;
            }
        }
        out
    };
    Some(IdSegment {
        step_s: step,
        op: fill(op_sum, op_n),
        pv: fill(pv_sum, pv_n),
    })
}

/// Identifies one FOPDT model from several episodes of the same loop. `noise_sd` is an estimate
/// of the PV measurement noise, used only to judge whether the data excite the process.
/// `max_dead_time_s`, when known, bounds the dead-time search: the PV cannot start to respond
/// before the dead time, so the earliest time any episode's PV covered 10 % of its change is a
/// safe upper bound, and a tight one keeps the search on the physically possible part.
pub fn identify<'a>(
    segments: impl IntoIterator<Item = &'a IdSegment>,
    noise_sd: f64,
    op_span: f64,
    max_dead_time_s: Option<f64>,
    settings: &IdentifySettings,
) -> Result<Model, Refusal> {
    let segments: Vec<&IdSegment> = segments.into_iter().collect();
    if segments.is_empty() {
        return Err(Refusal::NoEpisodes);
    }
    let prepared = excited(segments, noise_sd, op_span, settings.max_episodes)?;
    let min_h = prepared.iter().map(|p| p.h).fold(f64::INFINITY, f64::min);
    let durations: Vec<f64> = prepared.iter().map(|p| p.h * p.y.len() as f64).collect();
    let max_dur = durations.iter().copied().fold(0.0, f64::max);
    let mut sorted = durations.clone();
    let median_dur = super::stats::median_in_place(&mut sorted);
    let tau_lo = 0.3 * min_h;
    let tau_hi = 10.0 * max_dur;
    let theta_hi = match max_dead_time_s {
        Some(t) if t > 0.0 => t.min(0.5 * median_dur),
        _ => 0.5 * median_dur,
    }
    .max(min_h);

    // The search runs first on a thinned copy (at most COARSE_POINTS per episode), then polishes
    // on the full data from the coarse optimum: most cost evaluations are then cheap ones.
    const COARSE_POINTS: usize = 60;
    let coarse: Vec<Prepared> = prepared.iter().map(|p| p.thinned(COARSE_POINTS)).collect();
    let cost_on = |data: &[Prepared], ln_tau: f64, theta: f64| -> f64 {
        let tau = ln_tau.clamp(tau_lo.ln(), tau_hi.ln()).exp();
        let theta = theta.clamp(0.0, theta_hi);
        fit_linear(data, tau, theta).sse
    };
    let cost = |ln_tau: f64, theta: f64| cost_on(&coarse, ln_tau, theta);

    // Seed: an ARX regression with a scan over the dead time gives (τ, θ) in one cheap pass per
    // candidate delay. PV noise biases it, so it only seeds the output-error search: a few probes
    // around the seed and across the search box guard against a poor one, and Nelder–Mead
    // polishes the best probe.
    let (l0, l1) = (tau_lo.ln(), tau_hi.ln());
    let (tau_seed, theta_seed) =
        arx_seed(&coarse, theta_hi).unwrap_or(((l0 + l1) / 2.0, 0.2 * theta_hi));
    let lt_seed = tau_seed.clamp(tau_lo, tau_hi).ln();
    let (_, lt_best, th_best) = probes((lt_seed, theta_seed), min_h, (l0, l1), theta_hi)
        .iter()
        .map(|&(lt, th)| (cost(lt, th), lt, th))
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .unwrap_or((0.0, lt_seed, theta_seed));
    let coarse_h = coarse.iter().map(|p| p.h).fold(f64::INFINITY, f64::min);
    let (lt, th) = nelder_mead(
        |p| cost(p[0], p[1]),
        [lt_best, th_best],
        [0.3, (0.25 * th_best).max(coarse_h)],
        [1e-2, 0.1 * coarse_h],
        100,
    );
    let (lt, th) = nelder_mead(
        |p| cost_on(&prepared, p[0], p[1]),
        [lt, th],
        [0.05, (0.1 * th).max(min_h)],
        [2e-3, 0.03 * min_h],
        60,
    );
    let tau = lt.clamp(l0, l1).exp();
    let theta = th.clamp(0.0, theta_hi);
    accept(&prepared, tau, theta, tau_hi, settings.min_r2)
}

/// The linear fit at (τ, θ) as the model, unless it explains too little (R² below `min_r2`) or
/// τ ran to the top of the search (`tau_hi`), where the data cannot tell it.
fn accept(
    prepared: &[Prepared],
    tau: f64,
    theta: f64,
    tau_hi: f64,
    min_r2: f64,
) -> Result<Model, Refusal> {
    let fit = fit_linear(prepared, tau, theta);
    let r2 = if fit.sst > 0.0 {
        1.0 - fit.sse / fit.sst
    } else {
        0.0
    };
    if r2 < min_r2 || !fit.gain.is_finite() {
        return Err(Refusal::PoorFit { r2, min_r2 });
    }
    if tau > 0.95 * tau_hi {
        return Err(Refusal::TimeConstantUndetermined { limit_s: tau_hi });
    }
    Ok(Model {
        gain: fit.gain,
        time_constant_s: tau,
        dead_time_s: theta,
        fit_r2: r2,
        episodes_used: prepared.len(),
        points_used: prepared.iter().map(|p| p.y.len()).sum(),
    })
}

/// The episodes that move both OP and PV clearly, the largest PV moves first, at most
/// `max_episodes`, prepared for the fit; refuses when none does.
fn excited(
    segments: Vec<&IdSegment>,
    noise_sd: f64,
    op_span: f64,
    max_episodes: usize,
) -> Result<Vec<Prepared>, Refusal> {
    let range = |v: &[f64]| {
        v.iter().copied().fold(f64::NEG_INFINITY, f64::max)
            - v.iter().copied().fold(f64::INFINITY, f64::min)
    };
    let mut scored: Vec<(f64, &IdSegment)> = Vec::new();
    let (mut best_op, mut best_pv) = (0.0_f64, 0.0_f64);
    for s in segments {
        let (du, dy) = (range(&s.op), range(&s.pv));
        best_op = best_op.max(du);
        best_pv = best_pv.max(dy);
        if du > 0.002 * op_span.abs() && dy > 6.0 * noise_sd {
            scored.push((dy, s));
        }
    }
    if scored.is_empty() {
        return Err(Refusal::NoExcitation {
            op_move: best_op,
            pv_move: best_pv,
            noise: noise_sd,
        });
    }
    scored.sort_by(|a, b| b.0.total_cmp(&a.0));
    scored.truncate(max_episodes.max(1));
    Ok(scored.iter().map(|(_, s)| Prepared::new(s)).collect())
}

/// The starting points of the output-error search: around the seed (ln τ, θ) and across the
/// search box (ln τ from `l0` to `l1`, θ up to `theta_hi`).
fn probes(
    (lt_seed, theta_seed): (f64, f64),
    min_h: f64,
    (l0, l1): (f64, f64),
    theta_hi: f64,
) -> Vec<(f64, f64)> {
    let mut probes: Vec<(f64, f64)> = Vec::with_capacity(24);
    for ft in [0.5f64, 1.0, 2.0] {
        for th in [0.5 * theta_seed, theta_seed, 1.5 * theta_seed + min_h] {
            probes.push((lt_seed + ft.ln(), th));
        }
    }
    for fl in [0.2, 0.5, 0.8] {
        for fth in [0.1, 0.5] {
            probes.push((l0 + fl * (l1 - l0), fth * theta_hi));
        }
    }
    probes
}

/// Seeds the search with an ARX fit y[k+1] = a·y[k] + b·u[k−d] + c per episode, scanning the
/// dead time over up to 24 candidates in [0, `theta_hi`] and keeping the one with the least total
/// squared error. Returns (τ, θ) with τ the median of −h/ln a over the episodes, or `None` when
/// no candidate gives a usable pole (0 < a < 1).
fn arx_seed(segments: &[Prepared], theta_hi: f64) -> Option<(f64, f64)> {
    let min_h = segments.iter().map(|p| p.h).fold(f64::INFINITY, f64::min);
    let candidates = ((theta_hi / min_h).ceil() as usize).clamp(1, 24);
    let mut best: Option<(f64, f64, Vec<f64>)> = None;
    for j in 0..=candidates {
        let theta = theta_hi * j as f64 / candidates as f64;
        let mut sse = 0.0;
        let mut taus = Vec::with_capacity(segments.len());
        for seg in segments {
            let d = (theta / seg.h).round() as usize;
            let n = seg.y.len();
            // Normal equations of [y, u, 1].
            let mut m = [[0.0f64; 3]; 3];
            let mut r = [0.0f64; 3];
            let mut yy1 = 0.0;
            for k in 0..n.saturating_sub(1) {
                let x = [seg.y[k], seg.u[k.saturating_sub(d)], 1.0];
                let y1 = seg.y[k + 1];
                for a in 0..3 {
                    for b in 0..3 {
                        m[a][b] += x[a] * x[b];
                    }
                    r[a] += x[a] * y1;
                }
                yy1 += y1 * y1;
            }
            let Some(p) = super::linalg::solve(m, r, 3) else {
                continue;
            };
            sse += (yy1 - (p[0] * r[0] + p[1] * r[1] + p[2] * r[2])).max(0.0);
            if p[0] > 0.0 && p[0] < 1.0 {
                taus.push(-seg.h / p[0].ln());
            }
        }
        if !taus.is_empty() && best.as_ref().is_none_or(|b| sse < b.0) {
            best = Some((sse, theta, taus));
        }
    }
    let (_, theta, mut taus) = best?;
    Some((super::stats::median_in_place(&mut taus), theta))
}

/// A segment with its PV centred and OP shifted, which leaves the fit unchanged (the offsets are
/// free parameters) but keeps the sums well conditioned.
struct Prepared {
    h: f64,
    u: Vec<f64>,
    y: Vec<f64>,
    /// Σy and Σy², which the fit needs at every (τ, θ).
    sum_y: f64,
    sum_yy: f64,
}

impl Prepared {
    /// A copy with every `f`-th point so that at most `max_points` remain.
    fn thinned(&self, max_points: usize) -> Prepared {
        let f = self.y.len().div_ceil(max_points.max(1)).max(1);
        if f == 1 {
            return Prepared::from_parts(self.h, self.u.clone(), self.y.clone());
        }
        // The OP is averaged over each coarse hold interval; the PV is taken at the start of the
        // interval, as the model's state is: averaging it too would move it half an interval
        // later and bias the dead time low.
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
        Prepared::from_parts(
            self.h * f as f64,
            self.u.chunks(f).map(mean).collect(),
            self.y.iter().step_by(f).copied().collect(),
        )
    }

    fn new(s: &IdSegment) -> Prepared {
        let y_mean = s.pv.iter().sum::<f64>() / s.pv.len() as f64;
        let u0 = s.op[0];
        Prepared::from_parts(
            s.step_s,
            s.op.iter().map(|u| u - u0).collect(),
            s.pv.iter().map(|y| y - y_mean).collect(),
        )
    }

    fn from_parts(h: f64, u: Vec<f64>, y: Vec<f64>) -> Prepared {
        Prepared {
            h,
            sum_y: y.iter().sum(),
            sum_yy: y.iter().map(|v| v * v).sum(),
            u,
            y,
        }
    }
}

struct LinearFit {
    gain: f64,
    sse: f64,
    sst: f64,
}

/// For fixed (τ, θ), fits the shared gain and the per-episode offset and initial transient in
/// closed form, and returns the residual sum of squares.
///
/// This is the innermost loop of the identification, so it is written for speed: sums that do not
/// depend on (τ, θ) are kept in [`Prepared`], the geometric sums of the transient are in closed
/// form, and the simulation runs in two branch-free phases (before and after the dead time has
/// passed the start of the data).
fn fit_linear(segments: &[Prepared], tau: f64, theta: f64) -> LinearFit {
    let mut sy_s = 0.0; // Σ <s⊥, y⊥>
    let mut ss_s = 0.0; // Σ <s⊥, s⊥>
    let mut yy_s = 0.0; // Σ <y⊥, y⊥>
    let mut sst = 0.0;
    for seg in segments {
        let h = seg.h;
        let n = seg.y.len();
        let a = (-h / tau).exp();
        let dd = (theta / h).floor();
        let f = theta / h - dd;
        let d = dd as usize;
        let a1 = (-f * h / tau).exp();
        let a2 = (-(1.0 - f) * h / tau).exp();
        let (wa, wb) = (a2 * (1.0 - a1), 1.0 - a2);
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
        sy_s += ssy - proj((ss, ssg), (sy, syg));
        ss_s += sss - proj((ss, ssg), (ss, ssg));
        yy_s += syy - proj((sy, syg), (sy, syg));
        sst += syy - sy * sy / s1;
    }
    let gain = if ss_s > 0.0 { sy_s / ss_s } else { 0.0 };
    let sse = (yy_s - gain * sy_s).max(0.0);
    LinearFit { gain, sse, sst }
}

/// Nelder–Mead in two dimensions with the usual coefficients (reflection 1, expansion 2,
/// contraction ½, shrink ½).
fn nelder_mead(
    f: impl Fn([f64; 2]) -> f64,
    x0: [f64; 2],
    step: [f64; 2],
    tol: [f64; 2],
    max_iter: usize,
) -> (f64, f64) {
    let mut pts = [x0, [x0[0] + step[0], x0[1]], [x0[0], x0[1] + step[1]]];
    let mut vals = pts.map(&f);
    for _ in 0..max_iter {
        let mut idx = [0, 1, 2];
        idx.sort_by(|&a, &b| vals[a].total_cmp(&vals[b]));
        let (b, m, w) = (idx[0], idx[1], idx[2]);
        let small = (0..2).all(|d| pts.iter().all(|p| (p[d] - pts[b][d]).abs() <= tol[d]));
        if small || (vals[w] - vals[b]).abs() <= 1e-12 * vals[b].abs().max(1e-300) {
            break;
        }
        let c = [(pts[b][0] + pts[m][0]) / 2.0, (pts[b][1] + pts[m][1]) / 2.0];
        let at = |t: f64| [c[0] + t * (pts[w][0] - c[0]), c[1] + t * (pts[w][1] - c[1])];
        let r = at(-1.0);
        let fr = f(r);
        if fr < vals[b] {
            let e = at(-2.0);
            let fe = f(e);
            if fe < fr {
                pts[w] = e;
                vals[w] = fe;
            } else {
                pts[w] = r;
                vals[w] = fr;
            }
        } else if fr < vals[m] {
            pts[w] = r;
            vals[w] = fr;
        } else {
            let k = if fr < vals[w] { at(-0.5) } else { at(0.5) };
            let fk = f(k);
            if fk < vals[w].min(fr) {
                pts[w] = k;
                vals[w] = fk;
            } else {
                for i in [m, w] {
                    pts[i] = [(pts[i][0] + pts[b][0]) / 2.0, (pts[i][1] + pts[b][1]) / 2.0];
                    vals[i] = f(pts[i]);
                }
            }
        }
    }
    let best = (0..3)
        .min_by(|&a, &b| vals[a].total_cmp(&vals[b]))
        .unwrap_or(0);
    (pts[best][0], pts[best][1])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::sim::Rng;

    /// Exact samples of an FOPDT driven by a piecewise-constant input (ZOH), K=2, τ=10, θ=3.
    fn open_loop_data(noise: f64, seed: u64) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
        let (k, tau, theta, dt) = (2.0, 10.0, 3.0, 0.5);
        let n = 400;
        let mut rng = Rng::new(seed);
        let t: Vec<f64> = (0..n).map(|i| i as f64 * dt).collect();
        let u: Vec<f64> = t
            .iter()
            .map(|&s| {
                if s < 20.0 {
                    40.0
                } else if s < 110.0 {
                    55.0
                } else {
                    47.0
                }
            })
            .collect();
        // Fine-step simulation of the continuous process.
        let fine = 0.001;
        let mut x = k * 40.0;
        let mut y = Vec::with_capacity(n);
        let mut s = 0.0;
        for &ti in &t {
            while s < ti - 1e-12 {
                let ud = if s - theta < 20.0 {
                    40.0
                } else if s - theta < 110.0 {
                    55.0
                } else {
                    47.0
                };
                x += fine / tau * (k * ud - x);
                s += fine;
            }
            y.push(10.0 + x + noise * rng.normal());
        }
        (t, u, y)
    }

    #[test]
    fn recovers_a_known_fopdt_from_noise_free_step_data() {
        let (t, u, y) = open_loop_data(0.0, 1);
        let seg = build_segment(&t, &y, &u, 0.0, 100.0, 400).unwrap();
        let m = identify([&seg], 0.0, 100.0, None, &IdentifySettings::default()).unwrap();
        assert!((m.gain - 2.0).abs() < 0.01, "{m:?}");
        assert!((m.time_constant_s - 10.0).abs() < 0.1, "{m:?}");
        assert!((m.dead_time_s - 3.0).abs() < 0.1, "{m:?}");
        assert!(m.fit_r2 > 0.999);
    }

    #[test]
    fn noise_on_the_pv_does_not_bias_the_time_constant() {
        let (t, u, y) = open_loop_data(0.5, 9);
        let seg = build_segment(&t, &y, &u, 0.0, 100.0, 400).unwrap();
        let m = identify([&seg], 0.5, 100.0, None, &IdentifySettings::default()).unwrap();
        assert!((m.gain - 2.0).abs() < 0.1, "{m:?}");
        assert!((m.time_constant_s - 10.0).abs() < 1.5, "{m:?}");
        assert!((m.dead_time_s - 3.0).abs() < 1.0, "{m:?}");
    }

    #[test]
    fn reverse_acting_process_gives_a_negative_gain() {
        let (t, u, y) = open_loop_data(0.0, 1);
        let flipped: Vec<f64> = y.iter().map(|v| 100.0 - v).collect();
        let seg = build_segment(&t, &flipped, &u, 0.0, 100.0, 400).unwrap();
        let m = identify([&seg], 0.0, 100.0, None, &IdentifySettings::default()).unwrap();
        assert!((m.gain + 2.0).abs() < 0.01, "{m:?}");
    }

    #[test]
    fn thinning_long_episodes_keeps_the_model() {
        let (t, u, y) = open_loop_data(0.0, 1);
        let seg = build_segment(&t, &y, &u, 0.0, 100.0, 100).unwrap();
        assert_eq!(seg.step_s, 199.5 / 100.0);
        let m = identify([&seg], 0.0, 100.0, None, &IdentifySettings::default()).unwrap();
        assert!((m.time_constant_s - 10.0).abs() < 1.0, "{m:?}");
        assert!((m.dead_time_s - 3.0).abs() < 1.0, "{m:?}");
    }

    #[test]
    fn flat_data_are_refused_as_not_exciting_the_process() {
        let t: Vec<f64> = (0..100).map(f64::from).collect();
        let seg = build_segment(&t, &vec![50.0; 100], &vec![30.0; 100], 0.0, 100.0, 400).unwrap();
        let err = identify([&seg], 0.1, 100.0, None, &IdentifySettings::default()).unwrap_err();
        assert!(matches!(err, Refusal::NoExcitation { .. }), "{err}");
    }

    #[test]
    fn zoh_discretisation_matches_the_published_check_values() {
        // ZOH FOPDT K=2, τ=10, Ts=1: a = e^(−1/10) = 0.904837, b = K(1−a) = 0.190325
        // (standard zero-order-hold discretisation; values computed independently with numpy).
        let a = (-1.0f64 / 10.0).exp();
        assert!((a - 0.904837).abs() < 1e-6);
        assert!((2.0 * (1.0 - a) - 0.190325).abs() < 1e-6);
    }
}
