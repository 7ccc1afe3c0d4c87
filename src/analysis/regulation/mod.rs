//! Regulation health between setpoint changes: how the loop holds its setpoint against loads.
//!
//! Definitions (the product's contract, DESIGN.md "Regulation"):
//! - A **hold** is a stretch with the setpoint unchanged, after the response to the last change
//!   settled (or its window ended), up to the next change, a data gap, an exit from automatic or
//!   the end of data. Every figure below is over holds only.
//! - The **hold band** is max(4σ, the configured `hold_band`), σ the PV noise estimated robustly
//!   from second differences with the median absolute deviation (for white noise the second
//!   difference has variance 6σ²), so slow movements do not inflate it.
//! - A **disturbance** starts at the first sample of a run of at least 3 samples outside the
//!   band, once the PV has been inside it (before that, a hold's PV is still the tail of the
//!   response to the last change, settled in the spec's band, which may be wider); it recovers at the first sample from which the PV stays inside for at least 60 s or
//!   until the hold ends. Its verdict: `actuator_limited` when the OP was within 0.5 % of span of
//!   a limit on at least 30 % of its out-of-band samples (the load exceeded what the actuator
//!   can counter), else `recovered`, else `not_recovered` when the hold ended by a setpoint
//!   change or the end of data with the PV still out, else `inconclusive` (a gap or manual).
//! - **Oscillation** (after Hägglund, "A control-loop performance monitor", *Control Eng.
//!   Practice* 3(11), 1995): the control error's half-cycles between zero crossings are
//!   compared by their IAE with a sine of the acceptable amplitude a (here the hold band) over
//!   the same half-period, whose IAE is 2a/ω; larger ones are counted with exponential
//!   forgetting over 50 periods, afresh after a quiet stretch, and more than 10 regular ones
//!   make an oscillation. Period: the mean of the counted cycles; amplitude: the median half
//!   peak-to-peak PV swing per cycle. Details in `oscillation`.
//! - **Likely cause**, always with its evidence: `valve` when the PV's cycle has the shape a
//!   jumping valve gives it (flat-topped on a self-regulating process, triangular on an
//!   integrating one) with the OP off its limits; `tuning` when the OP swings into both its
//!   limits; `load` when the cycle kept its phase across setpoint changes (its clock is outside
//!   the loop); otherwise `tuning` when the period lies where a loop with the identified dead
//!   time cycles by itself (2 to 10 dead times, this product's rule), else `load`, and no cause
//!   without a model. Horch's OP–PV cross-correlation is stated beside it (why it does not
//!   decide: `oscillation`).
//! - Routine figures: time at an OP limit, OP travel per hour, OP reversals per hour (by more
//!   than 0.1 % of span, so noise does not count) and the minimum-variance index
//!   η = σ²_mv / σ²_y (Harris 1989, normalised as Huang & Shah 1999, 1 = minimum variance): an
//!   AR model of the PV deviation, its impulse response ψ, σ²_mv = σ²_a·Σ_{i<d} ψ_i² with
//!   d = ⌊θ/Ts⌋ + 1 samples of dead time.

mod holds;
mod oscillation;
pub mod words;

pub use holds::{Busy, holds};
use oscillation::OscillationFit;

use super::Series;
use super::linalg::solve;
use super::setup::OpRange;
use super::stats::{median_in_place, robust_sd};
use serde::Serialize;

/// Why a hold ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum HoldEnd {
    SetpointChange,
    DataGap,
    ManualMode,
    EndOfData,
}

/// A held-setpoint stretch: samples `[start, end)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Hold {
    pub start: usize,
    pub end: usize,
    pub end_reason: HoldEnd,
    /// Whether it starts where a setpoint change's response settled (or its window ended), so
    /// that its PV may still be the response's tail.
    pub after_change: bool,
}

/// A disturbance's outcome.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum DisturbanceVerdict {
    Recovered,
    ActuatorLimited,
    NotRecovered,
    Inconclusive,
}

/// One load disturbance.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Disturbance {
    pub start_s: f64,
    pub end_s: f64,
    /// Largest PV − SP during it, signed, PV units.
    pub peak_deviation: f64,
    pub recovery_time_s: Option<f64>,
    pub op_at_limit_frac: f64,
    pub verdict: DisturbanceVerdict,
    /// When the spec sets a time to recover and the disturbance missed it (recovered later, or
    /// not at all): what limited the recovery — the actuator when the OP sat at its limit
    /// (`actuator_limited`), else the tuning (`tuning_limited`), as for a setpoint change.
    pub missed_spec: Option<RecoveryLimit>,
}

/// What kept a disturbance from being recovered within the spec's time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum RecoveryLimit {
    TuningLimited,
    ActuatorLimited,
}

/// Disturbances by verdict, and how many were slower than the spec's recovery time.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct DisturbanceCounts {
    pub total: usize,
    pub recovered: usize,
    pub actuator_limited: usize,
    pub not_recovered: usize,
    pub inconclusive: usize,
    pub missed_spec: usize,
}

impl DisturbanceCounts {
    /// The counts of `list`.
    pub fn of(list: &[Disturbance]) -> DisturbanceCounts {
        let of = |v: DisturbanceVerdict| list.iter().filter(|d| d.verdict == v).count();
        DisturbanceCounts {
            total: list.len(),
            recovered: of(DisturbanceVerdict::Recovered),
            actuator_limited: of(DisturbanceVerdict::ActuatorLimited),
            not_recovered: of(DisturbanceVerdict::NotRecovered),
            inconclusive: of(DisturbanceVerdict::Inconclusive),
            missed_spec: list.iter().filter(|d| d.missed_spec.is_some()).count(),
        }
    }

    /// How many have `verdict`.
    pub fn with(&self, verdict: DisturbanceVerdict) -> usize {
        match verdict {
            DisturbanceVerdict::Recovered => self.recovered,
            DisturbanceVerdict::ActuatorLimited => self.actuator_limited,
            DisturbanceVerdict::NotRecovered => self.not_recovered,
            DisturbanceVerdict::Inconclusive => self.inconclusive,
        }
    }
}

impl DisturbanceVerdict {
    /// The verdict as people read it (DESIGN.md, "Words and units").
    pub fn label(self) -> &'static str {
        match self {
            DisturbanceVerdict::Recovered => "recovered",
            DisturbanceVerdict::ActuatorLimited => "actuator-limited",
            DisturbanceVerdict::NotRecovered => "not recovered",
            DisturbanceVerdict::Inconclusive => "inconclusive",
        }
    }
}

impl RecoveryLimit {
    /// As people read it: the verdict words of a setpoint change that missed for this reason.
    pub fn label(self) -> &'static str {
        match self {
            RecoveryLimit::TuningLimited => "tuning-limited",
            RecoveryLimit::ActuatorLimited => "actuator-limited",
        }
    }
}

impl Cause {
    /// The cause as people read it.
    pub fn label(self) -> &'static str {
        match self {
            Cause::Valve => "the valve (stiction or deadband)",
            Cause::Tuning => "the tuning (too aggressive for the process)",
            Cause::Load => "a load from outside the loop",
        }
    }
}

impl Disturbance {
    /// What limited a recovery that missed `recover_within_s`, or `None` when it met it, no
    /// time is set, or the disturbance ended by a gap or manual before it could be judged.
    fn missed(&self, recover_within_s: Option<f64>) -> Option<RecoveryLimit> {
        let spec = recover_within_s?;
        let missed = match (self.verdict, self.recovery_time_s) {
            (DisturbanceVerdict::Inconclusive, _) => return None,
            (_, Some(r)) => r > spec,
            (_, None) => self.end_s - self.start_s > spec,
        };
        missed.then_some(if self.verdict == DisturbanceVerdict::ActuatorLimited {
            RecoveryLimit::ActuatorLimited
        } else {
            RecoveryLimit::TuningLimited
        })
    }
}

/// What probably drives an oscillation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Cause {
    Valve,
    Tuning,
    Load,
}

/// The oscillation finding.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Oscillation {
    pub detected: bool,
    pub period_s: Option<f64>,
    pub amplitude: Option<f64>,
    pub likely_cause: Option<Cause>,
    /// The evidence behind the cause, in words.
    pub evidence: Option<String>,
}

/// Regulation figures of a loop.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Regulation {
    pub oscillation: Oscillation,
    pub disturbances: Vec<Disturbance>,
    pub time_at_limit_frac: Option<f64>,
    pub op_travel_per_h: Option<f64>,
    pub op_reversals_per_h: Option<f64>,
    pub min_variance_index: Option<f64>,
    /// The standard deviation of the PV about its setpoint over the holds (PV units), to set
    /// beside the hold band.
    pub pv_sd: Option<f64>,
    /// The band used (PV units, half-width) and the PV noise σ behind it.
    pub hold_band: Option<f64>,
    pub pv_noise_sd: Option<f64>,
    /// Hours of hold analysed.
    pub hold_hours: f64,
}

/// What the regulation analysis needs besides the data.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RegulationSettings {
    pub op: OpRange,
    /// A configured absolute hold band (PV units), if any.
    pub hold_band: Option<f64>,
    /// The spec's time to recover from a disturbance, if it sets one.
    pub recover_within_s: Option<f64>,
    /// The identified dead time, if a model exists.
    pub dead_time_s: Option<f64>,
}

/// Samples in a row outside the band that start a disturbance.
const MIN_OUT_RUN: usize = 3;
/// How long the PV must stay inside to count as recovered (s).
const RECOVERED_AFTER_S: f64 = 60.0;
/// The share of out-of-band samples at an OP limit that makes a disturbance actuator-limited.
const AT_LIMIT_SHARE: f64 = 0.3;
/// A reversal of the OP counts when it moves back by more than this share of its span.
const REVERSAL_SHARE: f64 = 0.001;
/// The AR order of the minimum-variance estimate (10–30 is typical — from memory).
pub const AR_ORDER: usize = 15;
/// The largest order [`harris_index`] takes.
const MAX_AR_ORDER: usize = 30;

/// Analyses the holds of a series.
pub fn regulation(series: &Series, holds: &[Hold], settings: &RegulationSettings) -> Regulation {
    let t = series.time_s();
    let holds: Vec<Hold> = holds
        .iter()
        .copied()
        .filter(|h| h.end > h.start + 2)
        .collect();
    let hold_hours: f64 = holds.iter().map(|h| t[h.end - 1] - t[h.start]).sum::<f64>() / 3600.0;
    let sigma = noise_sd(series.pv(), &holds);
    let band = sigma.map(|s| (4.0 * s).max(settings.hold_band.unwrap_or(0.0)));
    let mut oscillation = Oscillation {
        detected: false,
        period_s: None,
        amplitude: None,
        likely_cause: None,
        evidence: None,
    };
    let mut disturbances = Vec::new();
    if let Some(band) = band.filter(|b| *b > 0.0) {
        let mut found: Vec<OscillationFit> = Vec::new();
        for h in &holds {
            match oscillation::oscillation_in(series, h, band) {
                Some(fit) => found.push(fit),
                None => disturbances.extend(disturbances_in(series, h, band, settings.op)),
            }
        }
        if let Some(fit) = found.iter().max_by(|a, b| a.counted.total_cmp(&b.counted)) {
            let (cause, evidence) =
                oscillation::cause_of(series, fit, &found, settings.dead_time_s, settings.op);
            oscillation = Oscillation {
                detected: true,
                period_s: Some(fit.period_s),
                amplitude: Some(fit.amplitude),
                likely_cause: cause,
                evidence: Some(evidence),
            };
        }
    }
    for d in &mut disturbances {
        d.missed_spec = d.missed(settings.recover_within_s);
    }
    let per_hour = |x: f64| (hold_hours > 0.0).then(|| x / hold_hours);
    let (at_limit, travel, reversals) = op_figures(series, &holds, settings.op);
    Regulation {
        oscillation,
        disturbances,
        time_at_limit_frac: at_limit,
        op_travel_per_h: per_hour(travel),
        op_reversals_per_h: per_hour(reversals as f64),
        min_variance_index: min_variance_index(series, &holds, settings.dead_time_s),
        pv_sd: pv_sd(series, &holds),
        hold_band: band,
        pv_noise_sd: sigma,
        hold_hours,
    }
}

/// The PV noise σ from second differences inside holds, by the median absolute deviation (of
/// at most [`ROBUST_SAMPLES`] of them, evenly spread).
pub fn noise_sd(pv: &[f64], holds: &[Hold]) -> Option<f64> {
    let stride = evenly(holds);
    let mut d2: Vec<f64> = holds
        .iter()
        .flat_map(|h| (h.start + 1..h.end - 1).map(move |i| pv[i + 1] - 2.0 * pv[i] + pv[i - 1]))
        .step_by(stride)
        .collect();
    if d2.len() < 10 {
        return None;
    }
    Some(robust_sd(&mut d2) / 6f64.sqrt())
}

/// The root-mean-square of PV − SP over the holds.
fn pv_sd(series: &Series, holds: &[Hold]) -> Option<f64> {
    let (sp, pv) = (series.sp(), series.pv());
    let (sum, n) = holds.iter().fold((0.0, 0usize), |(s, n), h| {
        let sq: f64 = (h.start..h.end).map(|i| (pv[i] - sp[i]).powi(2)).sum();
        (s + sq, n + h.end - h.start)
    });
    (n > 0).then(|| (sum / n as f64).sqrt())
}

/// Robust statistics over the holds (a median, a median absolute deviation) take at most this
/// many values: their standard error is then well below a percent, and a week at 1 Hz costs no
/// more than an hour.
const ROBUST_SAMPLES: usize = 50_000;

/// The stride that takes at most [`ROBUST_SAMPLES`] samples of the holds, evenly spread.
fn evenly(holds: &[Hold]) -> usize {
    let n: usize = holds.iter().map(|h| h.end - h.start).sum();
    n.div_ceil(ROBUST_SAMPLES).max(1)
}

/// The first sample at or after `from` from which the PV stays inside the band for
/// [`RECOVERED_AFTER_S`], or until the hold ends.
fn back_inside(t: &[f64], h: &Hold, from: usize, out: &impl Fn(usize) -> bool) -> Option<usize> {
    let mut j = from;
    while j < h.end {
        if out(j) {
            j += 1;
            continue;
        }
        let mut k = j;
        while k < h.end && !out(k) && t[k] - t[j] < RECOVERED_AFTER_S {
            k += 1;
        }
        if k == h.end || !out(k) {
            return Some(j);
        }
        j = k;
    }
    None
}

/// The disturbances of one hold.
fn disturbances_in(series: &Series, h: &Hold, band: f64, op: OpRange) -> Vec<Disturbance> {
    let (t, sp, pv, u) = (series.time_s(), series.sp(), series.pv(), series.op());
    let out = |i: usize| (pv[i] - sp[i]).abs() > band;
    let mut list = Vec::new();
    // In a hold after a change, until the PV has come inside the hold band for good (as a
    // disturbance recovers), it is still the tail of the response (settled in the spec's band,
    // which may be wider): no load has started.
    let mut i = if h.after_change {
        back_inside(t, h, h.start, &out).unwrap_or(h.end)
    } else {
        h.start
    };
    while i < h.end {
        // The start: the first sample of a run of at least MIN_OUT_RUN outside.
        if !(i + MIN_OUT_RUN <= h.end && (i..i + MIN_OUT_RUN).all(out)) {
            i += 1;
            continue;
        }
        let start = i;
        // The recovery: the first sample from which the PV stays inside for RECOVERED_AFTER_S,
        // or until the hold ends.
        let recovered = back_inside(t, h, start + 1, &out);
        let stop = recovered.unwrap_or(h.end);
        let outside: Vec<usize> = (start..stop).filter(|&k| out(k)).collect();
        let limited = outside.iter().filter(|&&k| op.is_saturated(u[k])).count();
        let frac = limited as f64 / outside.len().max(1) as f64;
        let peak = (start..stop)
            .map(|k| pv[k] - sp[k])
            .max_by(|a, b| a.abs().total_cmp(&b.abs()))
            .unwrap_or(0.0);
        let verdict = if frac >= AT_LIMIT_SHARE {
            DisturbanceVerdict::ActuatorLimited
        } else if recovered.is_some() {
            DisturbanceVerdict::Recovered
        } else {
            match h.end_reason {
                HoldEnd::SetpointChange | HoldEnd::EndOfData => DisturbanceVerdict::NotRecovered,
                HoldEnd::DataGap | HoldEnd::ManualMode => DisturbanceVerdict::Inconclusive,
            }
        };
        list.push(Disturbance {
            start_s: t[start],
            end_s: t[stop.min(h.end - 1)],
            peak_deviation: peak,
            recovery_time_s: recovered.map(|r| t[r] - t[start]),
            op_at_limit_frac: frac,
            verdict,
            missed_spec: None,
        });
        i = stop.max(start + 1);
    }
    list
}

/// Share of hold samples at an OP limit, total OP travel, and OP reversals by more than 0.1 % of
/// span.
fn op_figures(series: &Series, holds: &[Hold], op: OpRange) -> (Option<f64>, f64, usize) {
    let u = series.op();
    let threshold = REVERSAL_SHARE * op.span();
    let (mut n, mut at, mut travel, mut reversals) = (0usize, 0usize, 0.0, 0usize);
    for h in holds {
        // The direction of travel (+1, −1, or 0 before the first clear move) and the extreme
        // reached in it; a move back from the extreme by more than the threshold is a reversal.
        let (mut dir, mut extreme) = (0i8, u[h.start]);
        for i in h.start..h.end {
            let v = u[i];
            n += 1;
            if op.is_saturated(v) {
                at += 1;
            }
            if i > h.start {
                travel += (v - u[i - 1]).abs();
            }
            match dir {
                0 if (v - extreme).abs() > threshold => {
                    dir = if v > extreme { 1 } else { -1 };
                    extreme = v;
                }
                1 if v > extreme => extreme = v,
                1 if extreme - v > threshold => {
                    reversals += 1;
                    dir = -1;
                    extreme = v;
                }
                -1 if v < extreme => extreme = v,
                -1 if v - extreme > threshold => {
                    reversals += 1;
                    dir = 1;
                    extreme = v;
                }
                _ => {}
            }
        }
    }
    ((n > 0).then(|| at as f64 / n as f64), travel, reversals)
}

/// The minimum-variance index η = σ²_mv/σ²_y of the PV deviation in holds (Harris 1989; Huang &
/// Shah normalisation), `None` without a dead time or with too little data.
pub fn min_variance_index(
    series: &Series,
    holds: &[Hold],
    dead_time_s: Option<f64>,
) -> Option<f64> {
    let theta = dead_time_s?;
    let t = series.time_s();
    let mut dts: Vec<f64> = holds
        .iter()
        .flat_map(|h| (h.start + 1..h.end).map(move |i| t[i] - t[i - 1]))
        .step_by(evenly(holds))
        .collect();
    if dts.is_empty() {
        return None;
    }
    let ts = median_in_place(&mut dts);
    let d = (theta / ts).floor() as usize + 1;
    let deviations: Vec<Vec<f64>> = holds
        .iter()
        .map(|h| {
            let y: Vec<f64> = (h.start..h.end)
                .map(|i| series.pv()[i] - series.sp()[i])
                .collect();
            let m = y.iter().sum::<f64>() / y.len().max(1) as f64;
            y.into_iter().map(|v| v - m).collect()
        })
        .filter(|y: &Vec<f64>| y.len() > 4 * AR_ORDER)
        .collect();
    harris_index(&deviations, AR_ORDER, d)
}

/// η for zero-mean series (pooled), an AR(`order`) fit by least squares and `d` samples of
/// dead time.
///
/// The least-squares normal equations are built from the lagged sums S(ℓ) = Σ y[m]·y[m−ℓ] over
/// each whole series, less the few edge terms the regression leaves out, so the fit costs
/// O(n·order) rather than O(n·order²) and equals the direct sums up to rounding.
pub fn harris_index(series: &[Vec<f64>], order: usize, d: usize) -> Option<f64> {
    let p = order;
    if p == 0 || p > MAX_AR_ORDER {
        return None;
    }
    // Normal equations of y[k] = Σ a_i·y[k−1−i] + ε over k in p..n:
    // m[i][j] = Σ_k y[k−1−i]·y[k−1−j], r[i] = Σ_k y[k−1−i]·y[k], s0 = Σ_k y[k]².
    let mut m = [[0.0; MAX_AR_ORDER]; MAX_AR_ORDER];
    let mut r = [0.0; MAX_AR_ORDER];
    let (mut count, mut sum_sq, mut s0, mut n_res) = (0usize, 0.0, 0.0, 0usize);
    for y in series {
        let n = y.len();
        sum_sq += y.iter().map(|v| v * v).sum::<f64>();
        count += n;
        if n <= p {
            continue;
        }
        n_res += n - p;
        // Partial lagged sum over later indices `from..=to`.
        let part = |lag: usize, from: usize, to: usize| -> f64 {
            (from.max(lag)..=to.min(n - 1))
                .map(|k| y[k] * y[k - lag])
                .sum()
        };
        let full: Vec<f64> = (0..=p)
            .map(|lag| y[lag..].iter().zip(y).map(|(a, b)| a * b).sum())
            .collect();
        s0 += full[0] - part(0, 0, p - 1);
        for i in 0..p {
            // The later index k−1−i runs over p−1−i..=n−2−i.
            r[i] += full[i + 1] - part(i + 1, 0, p - 1);
            for (lag, full_lag) in full.iter().enumerate().take(p - i) {
                let j = i + lag;
                // Leave out the later indices below p−1−i and above n−2−i.
                let below = if i + 2 <= p {
                    part(lag, 0, p - 2 - i)
                } else {
                    0.0
                };
                let v = full_lag - below - part(lag, n - 1 - i, n - 1);
                m[i][j] += v;
                if lag > 0 {
                    m[j][i] += v;
                }
            }
        }
    }
    if count < 10 * p || n_res == 0 {
        return None;
    }
    let a = solve(m, r, p)?;
    // Residual sum of squares Σ(y − a·φ)² = s0 − 2·a·r + a·M·a.
    let ar: f64 = (0..p).map(|i| a[i] * r[i]).sum();
    let ama: f64 = (0..p)
        .map(|i| a[i] * (0..p).map(|j| m[i][j] * a[j]).sum::<f64>())
        .sum();
    let var_a = ((s0 - 2.0 * ar + ama) / n_res as f64).max(0.0);
    let var_y = sum_sq / count as f64;
    // Impulse response of 1/(1 − Σ a_i q^−i): ψ0 = 1, ψk = Σ a_i ψ_{k−i}.
    let mut psi = vec![0.0; d];
    for k in 0..d {
        psi[k] = if k == 0 {
            1.0
        } else {
            (1..=p.min(k)).map(|i| a[i - 1] * psi[k - i]).sum()
        };
    }
    let var_mv = var_a * psi.iter().map(|v| v * v).sum::<f64>();
    (var_y > 0.0).then(|| (var_mv / var_y).clamp(0.0, 1.0))
}

#[cfg(test)]
mod tests;
