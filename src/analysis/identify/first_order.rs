//! The first-order search: (ln τ, θ) seeded by an ARX regression with a dead-time scan, probed
//! across the search box, polished by Nelder–Mead on the coarse data and then on the full data.

use super::data::{Bounds, Prepared};
use super::response::{Shape, nelder_mead};

/// The first-order (τ, θ) that minimise the squared error, searched on `coarse` and polished on
/// `full`.
pub(super) fn search(coarse: &[Prepared], full: &[Prepared], b: &Bounds) -> (f64, f64) {
    let (l0, l1) = (b.tau_lo.ln(), b.tau_hi.ln());
    let cost_on = |data: &[Prepared], ln_tau: f64, theta: f64| -> f64 {
        let tau = ln_tau.clamp(l0, l1).exp();
        let theta = theta.clamp(0.0, b.theta_hi);
        Shape::First { tau, theta }.fit(data).sse
    };
    let cost = |ln_tau: f64, theta: f64| cost_on(coarse, ln_tau, theta);

    // Seed: an ARX regression with a scan over the dead time gives (τ, θ) in one cheap pass per
    // candidate delay. PV noise biases it, so it only seeds the output-error search: a few probes
    // around the seed and across the search box guard against a poor one, and Nelder–Mead
    // polishes the best probe.
    let (tau_seed, theta_seed) =
        arx_seed(coarse, b.theta_hi).unwrap_or(((l0 + l1) / 2.0, 0.2 * b.theta_hi));
    let lt_seed = tau_seed.clamp(b.tau_lo, b.tau_hi).ln();
    let (_, lt_best, th_best) = probes((lt_seed, theta_seed), b.min_h, (l0, l1), b.theta_hi)
        .iter()
        .map(|&(lt, th)| (cost(lt, th), lt, th))
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .unwrap_or((0.0, lt_seed, theta_seed));
    let coarse_h = coarse.iter().map(|p| p.h).fold(f64::INFINITY, f64::min);
    let [lt, th] = nelder_mead(
        |p| cost(p[0], p[1]),
        [lt_best, th_best],
        [0.3, (0.25 * th_best).max(coarse_h)],
        [1e-2, 0.1 * coarse_h],
        100,
    );
    let [lt, th] = polish(full, b, [lt, th]);
    (lt.clamp(l0, l1).exp(), th.clamp(0.0, b.theta_hi))
}

/// Nelder–Mead from (ln τ, θ) on `data` with small steps: the last stage of a search, on the
/// full data. Returns (ln τ, θ), unclamped.
pub(super) fn polish(data: &[Prepared], b: &Bounds, [lt, theta]: [f64; 2]) -> [f64; 2] {
    let (l0, l1) = (b.tau_lo.ln(), b.tau_hi.ln());
    let min_h = data.iter().map(|p| p.h).fold(f64::INFINITY, f64::min);
    nelder_mead(
        |p| {
            let tau = p[0].clamp(l0, l1).exp();
            Shape::First {
                tau,
                theta: p[1].clamp(0.0, b.theta_hi),
            }
            .fit(data)
            .sse
        },
        [lt, theta],
        [0.05, (0.1 * theta).max(min_h)],
        [2e-3, 0.03 * min_h],
        60,
    )
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
            let Some(p) = super::super::linalg::solve(m, r, 3) else {
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
    Some((super::super::stats::median_in_place(&mut taus), theta))
}
