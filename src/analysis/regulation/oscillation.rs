//! Oscillation in a hold: the test, its period and amplitude, and the likely cause with the
//! evidence behind it (DESIGN.md, "Regulation").
//!
//! **The test** (after Hägglund, "A control-loop performance monitor", *Control Eng. Practice*
//! 3(11), 1995): the control error's half-cycles between zero crossings are compared by their
//! IAE with a sine of the acceptable amplitude a (here the hold band) over the same half-period,
//! whose IAE is 2a/ω; larger ones are counted with exponential forgetting over 50 periods, and
//! more than 10 make an oscillation. Two conditions of our own keep loads that come and go from
//! passing for one: the count starts afresh after a quiet stretch (more than 1.5 half-periods
//! without a large half-cycle — an oscillation has no rest), and the counted stretch must repeat
//! itself: the error's autocorrelation one period apart at least 0.5. A loop answering random
//! loads through a resonance of damping ζ keeps about e^(−2πζ) of it after one period (derived
//! from the impulse response of a second-order resonance), so 0.5 passes loops with ζ under
//! about 0.11 and nothing better damped — in the spirit of the decay ratio of the
//! autocorrelation of Miao & Seborg (1999, ≥ 0.5 is excessively oscillatory — from memory).
//!
//! **Period and amplitude**: the counted stretch is cut into cycles where the error rises
//! through the upper threshold of a hysteresis — on each side half the typical peak of the
//! counted half-cycles there, at least half the hold band — so noise near zero does not cut a
//! cycle up. The period is the
//! stretch's length over its number of cycles; the amplitude the median half peak-to-peak swing
//! per cycle, read on the error smoothed over a twentieth of the cycle (a sine loses under 1 %
//! to that, the noise most of its spread).
//!
//! **The cause**, from the last 20 periods of the hold with the most counted cycles (and the
//! phase from every hold the oscillation was found in):
//! - `valve` when the PV's cycle has a shape no linear loop gives it. In each cycle the error is
//!   projected on e^(−ikφ) (k = 1, 3; φ from 0 to 2π over the cycle); the size of the pooled
//!   third harmonic against the fundamental, |c₃|/|c₁|, is 1/3 for a square wave, 1/9 for a
//!   triangle and 0 for a sine (their Fourier series), and a square wave through a first-order
//!   lag keeps a ratio between 1/9 and 1/3 whatever the lag (derived: the lag scales it by
//!   |1 + jωτ|/|1 + 3jωτ|, which lies between 1/3 and 1). A linear loop with the OP off its limits
//!   cycles as a sine whatever drives it, so a ratio of at least 0.05 (under half a triangle's)
//!   whose third harmonic also stands three standard errors clear of its noise says a
//!   nonlinearity sits inside the loop: a valve that jumps. It makes a self-regulating PV
//!   flat-topped and an integrating one triangular — the shape Horch reads from the PV's
//!   derivatives for integrating loops (Horch, *Condition monitoring of control loops*, thesis,
//!   KTH 2000 — from memory). A cycle in which the OP reaches its limits is shaped by the clamp
//!   instead, and is never called a valve.
//! - `tuning` when the OP swings into both its limits within the cycle: the loop drives itself
//!   across the actuator's whole range, as a loop beyond its stability limit does, and a load
//!   would have to exceed the actuator both ways (this product's rule; it needs no model, which
//!   such a loop seldom lets the identification find).
//! - `load` when the cycle kept its phase across at least two setpoint changes (within 30°,
//!   each side read over five cycles): a cycle entering from outside runs on its own clock, and
//!   a setpoint change only adds a transient that dies out (superposition in a linear loop),
//!   while a loop's own cycle — a sticky valve's, a clamp-bounded one, a lightly damped loop's
//!   ringing — starts afresh from wherever the change leaves it (this product's rule; it needs
//!   no model, so a dead time the identification got wrong cannot mislead it).
//! - Otherwise `tuning` when the period is 2 to 10 dead times of the identified model, where a
//!   loop too aggressive for its process cycles by itself (this product's rule), else `load`;
//!   without a model (or one without dead time), no cause.
//!
//! The OP–PV cross-correlation of Horch's stiction test ("A simple method for detection of
//! stiction in control valves", *Control Eng. Practice* 7, 1999 — from memory: odd means
//! stiction, even means none) is reported as evidence but does not decide: with the setpoint
//! held the OP is the controller's linear answer to the PV, OP = −C(jω)·PV, so at the cycle's
//! frequency the phase between them is that of −C alone — about 180° (even) when ω·τI ≫ 1 and
//! 90° (odd) when ω·τI ≪ 1, whatever drives the cycle (derived). A slow external load reads odd
//! and a sticky valve on a loop with a short integral time reads even.

use super::{Cause, Hold, HoldEnd};
use crate::analysis::Series;
use crate::analysis::setup::OpRange;
use crate::analysis::stats::median_in_place;

/// Hägglund's alarm count, and the supervision time in periods.
const N_LIM: f64 = 10.0;
const SUPERVISION_PERIODS: f64 = 50.0;
/// A gap longer than this many half-periods between large half-cycles starts the count afresh.
const QUIET_HALF_PERIODS: f64 = 1.5;
/// The smallest autocorrelation of the error one period apart in an oscillation.
const MIN_REPEAT: f64 = 0.5;
/// Each cycle's swing is read on the error smoothed over this share of its samples.
const SWING_SMOOTHING_SHARE: f64 = 0.05;
/// The cause is read from at most this many of the oscillation's last periods.
const CAUSE_PERIODS: f64 = 20.0;
/// The smallest size of |c₃|/|c₁| that makes a shape, and how many standard errors the third
/// harmonic must stand clear of its noise.
const SHAPE_MIN: f64 = 0.05;
const SHAPE_SIGNIFICANCE: f64 = 3.0;
/// A cycle with the OP at a limit on more than this share of its samples is shaped by the clamp.
const CYCLE_AT_LIMIT_SHARE: f64 = 0.01;
/// A cycle keeps its phase across a setpoint change when it moved by at most this much (rad),
/// read over this many cycles either side; it takes this many changes to show it.
const KEPT_PHASE: f64 = std::f64::consts::PI / 6.0;
const PHASE_CYCLES: usize = 5;
const KEPT_CHANGES: usize = 2;

/// A detected oscillation in one hold.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct OscillationFit {
    pub(super) period_s: f64,
    pub(super) amplitude: f64,
    /// The forgetting count at its largest.
    pub(super) counted: f64,
    /// Its cycles, in order.
    cycles: Vec<Cycle>,
    /// The hold it was found in.
    hold: Hold,
}

/// One half-cycle of the control error between two zero crossings: Hägglund's unit.
#[derive(Debug, Clone, Copy, PartialEq)]
struct HalfCycle {
    /// Its samples `[start, end)`.
    start: usize,
    end: usize,
    duration: f64,
    /// Its largest |error|, and whether the error is positive in it (PV below SP).
    peak: f64,
    positive: bool,
    /// Whether its IAE exceeds that of a sine of the acceptable amplitude.
    large: bool,
}

/// One cycle of the control error, between two rises through the upper threshold of a
/// hysteresis (see [`oscillation_in`]), so noise near zero does not cut it up.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Cycle {
    /// Its samples `[start, end)`.
    start: usize,
    end: usize,
    /// Its ends, interpolated between samples (s).
    t_from: f64,
    t_to: f64,
}

impl Cycle {
    fn duration(&self) -> f64 {
        self.t_to - self.t_from
    }
}

/// The half-cycles of the control error in a hold. A half-cycle is large when its IAE exceeds
/// that of a sine of amplitude `band` over the same half-period: the IAE of a·sin over one
/// half-period T/2 is 2a/ω = a·T/π.
fn half_cycles(series: &Series, h: &Hold, band: f64) -> Vec<HalfCycle> {
    let (t, sp, pv) = (series.time_s(), series.sp(), series.pv());
    let e = |i: usize| sp[i] - pv[i];
    let crossings: Vec<usize> = (h.start + 1..h.end)
        .filter(|&i| (e(i) > 0.0) != (e(i - 1) > 0.0))
        .collect();
    crossings
        .windows(2)
        .map(|w| {
            let (a, b) = (w[0], w[1]);
            let iae: f64 = (a..b).map(|i| e(i).abs() * (t[i + 1] - t[i])).sum();
            let duration = t[b] - t[a];
            HalfCycle {
                start: a,
                end: b,
                duration,
                peak: (a..b).map(|i| e(i).abs()).fold(0.0, f64::max),
                positive: e(a) > 0.0,
                large: iae > 2.0 * band * duration / std::f64::consts::PI,
            }
        })
        .collect()
}

/// Counts large half-cycles with exponential forgetting over `t_sup`, starting afresh after a
/// gap longer than `quiet_s`: the largest count and the first and last half-cycles (indices
/// into `large`) of the run that reached it.
fn forgetting_count(
    t: &[f64],
    large: &[HalfCycle],
    t_sup: f64,
    quiet_s: f64,
) -> (f64, usize, usize) {
    let (mut count, mut best) = (0.0f64, 0.0f64);
    let (mut run_start, mut first, mut last) = (0, 0, 0);
    for (k, hc) in large.iter().enumerate() {
        match k.checked_sub(1).map(|p| &large[p]) {
            Some(prev) if t[hc.start] - t[prev.end] <= quiet_s => {
                count *= (-(t[hc.end] - t[prev.end]) / t_sup).exp();
            }
            _ => {
                count = 0.0;
                run_start = k;
            }
        }
        count += 1.0;
        if count > best {
            (best, first, last) = (count, run_start, k);
        }
    }
    (best, first, last)
}

/// The cycles of the error in samples `[from, to)`: from each rise through `+up` (after the
/// error was below `−down`) to the next.
fn cycles(series: &Series, from: usize, to: usize, up: f64, down: f64) -> Vec<Cycle> {
    let (t, sp, pv) = (series.time_s(), series.sp(), series.pv());
    let e = |i: usize| sp[i] - pv[i];
    let mut rises: Vec<(usize, f64)> = Vec::new();
    let mut low = false;
    for i in from.max(1)..to {
        if e(i) <= -down {
            low = true;
        } else if low && e(i) >= up {
            low = false;
            let (e0, e1) = (e(i - 1), e(i));
            let frac = if e1 > e0 { (up - e0) / (e1 - e0) } else { 1.0 };
            rises.push((i, t[i - 1] + (t[i] - t[i - 1]) * frac.clamp(0.0, 1.0)));
        }
    }
    rises
        .windows(2)
        .map(|w| Cycle {
            start: w[0].0,
            end: w[1].0,
            t_from: w[0].1,
            t_to: w[1].1,
        })
        .collect()
}

/// The autocorrelation of the error over samples `[from, to)` at `lag` samples.
fn autocorrelation(series: &Series, from: usize, to: usize, lag: usize) -> f64 {
    let x: Vec<f64> = (from..to)
        .map(|i| series.sp()[i] - series.pv()[i])
        .collect();
    let n = x.len();
    if lag == 0 || 2 * lag > n {
        return 0.0;
    }
    let mean = x.iter().sum::<f64>() / n as f64;
    let var = x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n as f64;
    let cov = (0..n - lag)
        .map(|k| (x[k] - mean) * (x[k + lag] - mean))
        .sum::<f64>()
        / (n - lag) as f64;
    if var > 0.0 { cov / var } else { 0.0 }
}

/// The smallest and largest of `x` after a centred moving average over
/// [`SWING_SMOOTHING_SHARE`] of its samples (cut short at the ends).
fn smoothed_extremes(x: &[f64]) -> (f64, f64) {
    let n = x.len();
    let half = ((SWING_SMOOTHING_SHARE * n as f64) as usize) / 2;
    let mut prefix = Vec::with_capacity(n + 1);
    prefix.push(0.0);
    for v in x {
        prefix.push(prefix.last().copied().unwrap_or(0.0) + v);
    }
    (0..n)
        .map(|j| {
            let (lo, hi) = (j.saturating_sub(half), (j + half + 1).min(n));
            (prefix[hi] - prefix[lo]) / (hi - lo) as f64
        })
        .fold((f64::MAX, f64::MIN), |(lo, hi), v| (lo.min(v), hi.max(v)))
}

/// The test on one hold (see the module's notes).
pub(super) fn oscillation_in(series: &Series, h: &Hold, band: f64) -> Option<OscillationFit> {
    let t = series.time_s();
    let large: Vec<HalfCycle> = half_cycles(series, h, band)
        .into_iter()
        .filter(|hc| hc.large)
        .collect();
    if large.len() < 2 {
        return None;
    }
    let mut durations: Vec<f64> = large.iter().map(|hc| hc.duration).collect();
    let half_period = median_in_place(&mut durations);
    let t_sup = SUPERVISION_PERIODS * 2.0 * half_period;
    let (best, first, last) = forgetting_count(t, &large, t_sup, QUIET_HALF_PERIODS * half_period);
    if best <= N_LIM {
        return None;
    }
    let (from, to) = (large[first].start, large[last].end);
    // The hysteresis either side: half the typical peak of the counted half-cycles on that side
    // (a sine crosses it at 30°, steeply), and at least half the hold band (twice the noise).
    let threshold = |positive: bool| {
        let mut peaks: Vec<f64> = large[first..=last]
            .iter()
            .filter(|hc| hc.positive == positive)
            .map(|hc| hc.peak)
            .collect();
        (0.5 * median_in_place(&mut peaks)).max(band / 2.0)
    };
    let cycles = cycles(series, from, to, threshold(true), threshold(false));
    let (first_cycle, last_cycle) = (cycles.first()?, cycles.last()?);
    let period_s = (last_cycle.t_to - first_cycle.t_from) / cycles.len() as f64;
    let dt = (t[to - 1] - t[from]) / (to - from - 1).max(1) as f64;
    if autocorrelation(series, from, to, (period_s / dt).round() as usize) < MIN_REPEAT {
        return None;
    }
    let mut swings: Vec<f64> = cycles
        .iter()
        .map(|c| {
            let e: Vec<f64> = (c.start..c.end)
                .map(|i| series.sp()[i] - series.pv()[i])
                .collect();
            let (lo, hi) = smoothed_extremes(&e);
            0.5 * (hi - lo)
        })
        .collect();
    Some(OscillationFit {
        period_s,
        amplitude: median_in_place(&mut swings),
        counted: best,
        cycles,
        hold: *h,
    })
}

/// The mean and standard deviation of some values.
fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len().max(1) as f64;
    let mean = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n;
    (mean, var.sqrt())
}

/// The shape of the PV's cycle: the size of its third harmonic against the fundamental,
/// |c₃|/|c₁|, from the error's projections on e^(−ikφ) (k = 1, 3; φ from 0 to 2π over each
/// cycle) pooled over the cycles; and how many standard errors of the pooled third harmonic it
/// stands clear of zero (the noise in it).
fn shape(series: &Series, cycles: &[Cycle]) -> (f64, f64) {
    let (t, sp, pv) = (series.time_s(), series.sp(), series.pv());
    // Per cycle: the real and imaginary parts of c₁ and c₃.
    let projections: Vec<[f64; 4]> = cycles
        .iter()
        .map(|c| {
            let n = (c.end - c.start) as f64;
            let mean = (c.start..c.end).map(|j| sp[j] - pv[j]).sum::<f64>() / n;
            let mut p = [0.0; 4];
            for j in c.start..c.end {
                let phi = 2.0 * std::f64::consts::PI * (t[j] - c.t_from) / c.duration();
                let x = sp[j] - pv[j] - mean;
                let (s1, c1) = phi.sin_cos();
                let (s3, c3) = (3.0 * phi).sin_cos();
                for (acc, v) in p.iter_mut().zip([c1, -s1, c3, -s3]) {
                    *acc += x * v / n;
                }
            }
            p
        })
        .collect();
    let column = |k: usize| projections.iter().map(|p| p[k]).collect::<Vec<f64>>();
    let ((re1, _), (im1, _)) = (mean_sd(&column(0)), mean_sd(&column(1)));
    let ((re3, sd_re3), (im3, sd_im3)) = (mean_sd(&column(2)), mean_sd(&column(3)));
    let (first, third) = (re1.hypot(im1), re3.hypot(im3));
    if first <= 0.0 {
        return (0.0, 0.0);
    }
    let se = sd_re3.hypot(sd_im3) / (projections.len() as f64).sqrt();
    let clear = if se > 0.0 { third / se } else { f64::INFINITY };
    (third / first, clear)
}

/// The normalised OP–PV cross-correlation at a quarter period with the OP leading, at lag 0,
/// and at a quarter period with the OP lagging, over samples `[from, to)`.
fn cross_correlation(series: &Series, from: usize, to: usize, quarter: usize) -> [f64; 3] {
    let centred = |v: &[f64]| {
        let mean = v.iter().sum::<f64>() / v.len().max(1) as f64;
        v.iter().map(|x| x - mean).collect::<Vec<f64>>()
    };
    let u = centred(&series.op()[from..to]);
    let y = centred(&series.pv()[from..to]);
    let norm = (u.iter().map(|x| x * x).sum::<f64>() * y.iter().map(|x| x * x).sum::<f64>()).sqrt();
    let at = |lag: isize| {
        if norm == 0.0 {
            return 0.0;
        }
        let s: f64 = (0..u.len())
            .filter_map(|k| {
                let j = k as isize + lag;
                (j >= 0 && (j as usize) < y.len()).then(|| u[k] * y[j as usize])
            })
            .sum();
        s / norm
    };
    let q = quarter.min(u.len() / 2) as isize;
    [at(-q), at(0), at(q)]
}

/// The phase (rad) of the error's component at `w` (rad/s) over the given cycles, against the
/// series' own clock.
fn phase(series: &Series, cycles: &[Cycle], w: f64) -> f64 {
    let (t, sp, pv) = (series.time_s(), series.sp(), series.pv());
    let (from, to) = (cycles[0].start, cycles[cycles.len() - 1].end);
    let mean = (from..to).map(|j| sp[j] - pv[j]).sum::<f64>() / (to - from).max(1) as f64;
    let (re, im) = (from..to).fold((0.0, 0.0), |(re, im), j| {
        let x = sp[j] - pv[j] - mean;
        let (s, c) = (w * t[j]).sin_cos();
        (re + x * c, im - x * s)
    });
    im.atan2(re)
}

/// When the cycle kept its phase across the setpoint changes (or other breaks) between the holds
/// it was found in: the number of such changes and the largest phase move (rad). `None` when it
/// moved by more than [`KEPT_PHASE`] across any of them, when fewer than [`KEPT_CHANGES`] show
/// it, or when the holds' cycles differ in period by more than 5 % (not the same cycle).
fn phase_kept(series: &Series, all: &[OscillationFit]) -> Option<(usize, f64)> {
    let span: f64 = all.iter().map(|f| f.period_s * f.cycles.len() as f64).sum();
    let count: usize = all.iter().map(|f| f.cycles.len()).sum();
    let w = 2.0 * std::f64::consts::PI * count as f64 / span;
    let mut moves = Vec::new();
    for pair in all.windows(2) {
        let (a, b) = (&pair[0], &pair[1]);
        if a.hold.end_reason == HoldEnd::EndOfData {
            continue;
        }
        if (a.period_s / b.period_s - 1.0).abs() > 0.05 {
            return None;
        }
        let before = &a.cycles[a.cycles.len().saturating_sub(PHASE_CYCLES)..];
        let after = &b.cycles[..b.cycles.len().min(PHASE_CYCLES)];
        let moved = (phase(series, after, w) - phase(series, before, w))
            .rem_euclid(2.0 * std::f64::consts::PI);
        moves.push(moved.min(2.0 * std::f64::consts::PI - moved));
    }
    let largest = moves.iter().copied().fold(0.0, f64::max);
    (moves.len() >= KEPT_CHANGES && largest <= KEPT_PHASE).then_some((moves.len(), largest))
}

/// The likely cause of an oscillation, and the evidence in words.
pub(super) fn cause_of(
    series: &Series,
    fit: &OscillationFit,
    all: &[OscillationFit],
    dead_time_s: Option<f64>,
    op: OpRange,
) -> (Option<Cause>, String) {
    let t = series.time_s();
    let end = fit.cycles.last().map_or(0.0, |c| c.t_to);
    let recent: Vec<Cycle> = fit
        .cycles
        .iter()
        .copied()
        .filter(|c| c.t_from >= end - CAUSE_PERIODS * fit.period_s)
        .collect();
    let (from, to) = (recent[0].start, recent[recent.len() - 1].end);
    let share = |at: &dyn Fn(f64) -> bool| {
        (from..to).filter(|&i| at(series.op()[i])).count() as f64 / (to - from).max(1) as f64
    };
    let mid = 0.5 * (op.min + op.max);
    let at_low = share(&|u| op.is_saturated(u) && u < mid);
    let at_high = share(&|u| op.is_saturated(u) && u >= mid);
    let (ratio, clear) = shape(series, &recent);
    let dt = (t[to - 1] - t[from]) / (to - from - 1).max(1) as f64;
    let [lead, r0, lag] = cross_correlation(series, from, to, (fit.period_s / (4.0 * dt)) as usize);
    let odd = r0.abs() < 0.3 * lead.abs().max(lag.abs()) && lead * lag < 0.0;
    let ccf = format!(
        "the OP–PV cross-correlation is {} (r(0) = {r0:.2}, r(±¼ period) = {lead:.2} and \
         {lag:.2})",
        if odd { "odd" } else { "even" }
    );
    let at_limit = at_low + at_high;
    if ratio >= SHAPE_MIN && clear >= SHAPE_SIGNIFICANCE && at_limit <= CYCLE_AT_LIMIT_SHARE {
        return (
            Some(Cause::Valve),
            format!(
                "the PV's cycle is not sinusoidal (its third harmonic is {ratio:.2} of the \
                 fundamental; a square wave's is 0.33, a triangle's 0.11, a sine's 0) while the \
                 OP stays off its limits: the process input moves in jumps, the mark of a \
                 sticking valve; {ccf}"
            ),
        );
    }
    if at_low > CYCLE_AT_LIMIT_SHARE && at_high > CYCLE_AT_LIMIT_SHARE {
        return (
            Some(Cause::Tuning),
            format!(
                "the OP swings between both its limits ({:.0} % of the cycle at the lower, {:.0} \
                 % at the upper): the loop drives itself across the actuator's whole range, as \
                 a loop beyond its stability limit does — a load would have to exceed the \
                 actuator both ways; {ccf}",
                100.0 * at_low,
                100.0 * at_high
            ),
        );
    }
    if let Some((changes, moved)) = phase_kept(series, all) {
        return (
            Some(Cause::Load),
            format!(
                "the cycle kept its phase across {changes} setpoint changes (it moved {:.0}° at \
                 most): it runs on a clock outside the loop, as a load entering from outside \
                 does, while a loop's own cycle starts afresh with each change; {ccf}",
                moved.to_degrees()
            ),
        );
    }
    let shape_words = if at_limit > CYCLE_AT_LIMIT_SHARE {
        format!(
            "the OP reaches a limit in {:.0} % of the cycle, so the clamp shapes it",
            100.0 * at_limit
        )
    } else {
        format!("the PV's cycle is sinusoidal (third harmonic {ratio:.2} of the fundamental)")
    };
    match dead_time_s {
        Some(theta) if theta > 0.0 => {
            let periods = fit.period_s / theta;
            if (2.0..=10.0).contains(&periods) {
                (
                    Some(Cause::Tuning),
                    format!(
                        "{shape_words} and its period is {periods:.1} dead times, where a loop \
                         too aggressive for its process cycles by itself; {ccf}"
                    ),
                )
            } else {
                (
                    Some(Cause::Load),
                    format!(
                        "{shape_words} and its period is {periods:.1} dead times, far from the \
                         loop's own cycle: it enters from outside; {ccf}"
                    ),
                )
            }
        }
        Some(_) => (
            None,
            format!(
                "{shape_words}; the identified model has no dead time to judge the period \
                 against, so the cause is not judged; {ccf}"
            ),
        ),
        None => (
            None,
            format!("{shape_words}; without a process model the cause is not judged; {ccf}"),
        ),
    }
}
