//! Episodes on a uniform grid ([`IdSegment`], [`build_segment`]), the choice of the episodes that
//! excite the process, and their prepared form for the fits.

use super::super::stats::median_in_place;
use super::{OpMap, Refusal};

/// One episode's data on a uniform grid, ready for fitting.
#[derive(Debug, Clone, PartialEq)]
pub struct IdSegment {
    /// Grid step, seconds.
    pub step_s: f64,
    /// OP held over each grid interval, clamped to the actuator range.
    pub op: Vec<f64>,
    /// PV at each grid point.
    pub pv: Vec<f64>,
    /// Whether the PV ended higher than it started (the last quarter's mean against the first
    /// tenth's): the direction a `two_direction` model uses for this episode.
    pub pv_rising: bool,
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
    let median_dt = median_in_place(&mut gaps);
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
    let pv = fill(pv_sum, pv_n);
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len().max(1) as f64;
    let pv_rising = mean(&pv[m - m.div_ceil(4)..]) >= mean(&pv[..m.div_ceil(10)]);
    Some(IdSegment {
        step_s: step,
        op: fill(op_sum, op_n),
        pv,
        pv_rising,
    })
}

/// The episodes that move both OP and PV clearly, the largest PV moves first, at most
/// `max_episodes`, prepared for the fit; refuses when none does.
pub(super) fn excited(
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

/// A segment with its PV centred and OP shifted, which leaves the fit unchanged (the offsets are
/// free parameters) but keeps the sums well conditioned.
#[derive(Debug, Clone)]
pub(super) struct Prepared {
    pub(super) h: f64,
    pub(super) u: Vec<f64>,
    pub(super) y: Vec<f64>,
    /// Σy and Σy², which the fit needs at every (τ, θ).
    pub(super) sum_y: f64,
    pub(super) sum_yy: f64,
    /// The OP the shifted `u` is measured from.
    pub(super) u0: f64,
    pub(super) rising: bool,
}

impl Prepared {
    /// A copy with every `f`-th point so that at most `max_points` remain.
    pub(super) fn thinned(&self, max_points: usize) -> Prepared {
        let f = self.y.len().div_ceil(max_points.max(1)).max(1);
        if f == 1 {
            return self.clone();
        }
        // The OP is averaged over each coarse hold interval; the PV is taken at the start of the
        // interval, as the model's state is: averaging it too would move it half an interval
        // later and bias the dead time low.
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
        self.with(
            self.h * f as f64,
            self.u.chunks(f).map(mean).collect(),
            self.y.iter().step_by(f).copied().collect(),
        )
    }

    /// A copy whose OP went through `map` (measured from the mapped start).
    pub(super) fn mapped(&self, map: &OpMap) -> Prepared {
        let v0 = map.apply(self.u0);
        let u = self.u.iter().map(|u| map.apply(u + self.u0) - v0).collect();
        Prepared {
            u,
            u0: v0,
            ..self.clone()
        }
    }

    pub(super) fn new(s: &IdSegment) -> Prepared {
        let y_mean = s.pv.iter().sum::<f64>() / s.pv.len() as f64;
        let u0 = s.op[0];
        Prepared {
            u0,
            rising: s.pv_rising,
            ..Prepared::from_parts(
                s.step_s,
                s.op.iter().map(|u| u - u0).collect(),
                s.pv.iter().map(|y| y - y_mean).collect(),
            )
        }
    }

    fn with(&self, h: f64, u: Vec<f64>, y: Vec<f64>) -> Prepared {
        Prepared {
            u0: self.u0,
            rising: self.rising,
            ..Prepared::from_parts(h, u, y)
        }
    }

    fn from_parts(h: f64, u: Vec<f64>, y: Vec<f64>) -> Prepared {
        Prepared {
            h,
            sum_y: y.iter().sum(),
            sum_yy: y.iter().map(|v| v * v).sum(),
            u,
            y,
            u0: 0.0,
            rising: true,
        }
    }

    pub(super) fn duration(&self) -> f64 {
        self.h * self.y.len() as f64
    }
}

/// Where the nonlinear parameters are searched, from the data.
#[derive(Debug, Clone, Copy)]
pub(super) struct Bounds {
    pub(super) min_h: f64,
    pub(super) max_dur: f64,
    pub(super) tau_lo: f64,
    pub(super) tau_hi: f64,
    pub(super) theta_hi: f64,
}

impl Bounds {
    /// A middle (τ, θ), should no first-order fit be at hand.
    pub(super) fn seed(&self) -> (f64, f64) {
        ((self.tau_lo * self.tau_hi).sqrt(), 0.2 * self.theta_hi)
    }

    /// τ from 0.3 grid steps to 10 × the longest episode; θ up to half the median episode (or
    /// the known bound on the dead time, if tighter), at least one grid step.
    pub(super) fn of(prepared: &[Prepared], max_dead_time_s: Option<f64>) -> Bounds {
        let min_h = prepared.iter().map(|p| p.h).fold(f64::INFINITY, f64::min);
        let durations: Vec<f64> = prepared.iter().map(Prepared::duration).collect();
        let max_dur = durations.iter().copied().fold(0.0, f64::max);
        let mut sorted = durations;
        let median_dur = median_in_place(&mut sorted);
        let theta_hi = match max_dead_time_s {
            Some(t) if t > 0.0 => t.min(0.5 * median_dur),
            _ => 0.5 * median_dur,
        }
        .max(min_h);
        Bounds {
            min_h,
            max_dur,
            tau_lo: 0.3 * min_h,
            tau_hi: 10.0 * max_dur,
            theta_hi,
        }
    }
}

/// The coarse copies the searches run on: at most this many points per episode.
pub(super) const COARSE_POINTS: usize = 60;

pub(super) fn coarse(prepared: &[Prepared]) -> Vec<Prepared> {
    prepared.iter().map(|p| p.thinned(COARSE_POINTS)).collect()
}
