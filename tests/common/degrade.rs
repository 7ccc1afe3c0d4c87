//! Degraded copies of a recorded run, as plant historians and exports commonly deliver them
//! (common practice): coarse sampling, exception (deadband) recording, a quantised PV, a frozen
//! signal, an OP logged more coarsely than the PV, a PV clipped at its transmitter's range end.
//! Each takes the samples as recorded at the base rate and returns what the export would hold.

use headroom::analysis::sim::SimSample;

/// Every `k`-th sample: a historian that samples `k` times more slowly.
pub fn coarse(samples: &[SimSample], k: usize) -> Vec<SimSample> {
    samples.iter().step_by(k.max(1)).copied().collect()
}

/// Exception recording: a row is kept when the setpoint changed, the PV moved more than
/// `pv_deadband` or the OP more than `op_deadband` since the last kept row, or `max_gap` rows
/// went by without one (the historian's heartbeat); time stamps become irregular.
pub fn exception(
    samples: &[SimSample],
    pv_deadband: f64,
    op_deadband: f64,
    max_gap: usize,
) -> Vec<SimSample> {
    let mut out: Vec<SimSample> = Vec::new();
    let mut since = 0;
    for s in samples {
        since += 1;
        let keep = out.last().is_none_or(|l| {
            l.sp != s.sp
                || (s.pv - l.pv).abs() > pv_deadband
                || (s.op - l.op).abs() > op_deadband
                || since >= max_gap
        });
        if keep {
            out.push(*s);
            since = 0;
        }
    }
    out
}

/// The PV rounded to a grid of `step` (a coarse analogue-to-digital conversion or a rounded
/// export).
pub fn quantised_pv(samples: &[SimSample], step: f64) -> Vec<SimSample> {
    samples
        .iter()
        .map(|s| SimSample {
            pv: (s.pv / step).round() * step,
            ..*s
        })
        .collect()
}

/// Which recorded signal a degradation touches.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Signal {
    Pv,
    Op,
}

/// `signal` frozen at its value at each stretch's start for the stretch (`(from, len)` in rows):
/// a stale tag that keeps reporting its last value.
pub fn frozen(
    samples: &[SimSample],
    signal: Signal,
    stretches: &[(usize, usize)],
) -> Vec<SimSample> {
    let mut out = samples.to_vec();
    for &(from, len) in stretches {
        let Some(first) = out.get(from).copied() else {
            continue;
        };
        let end = (from + len).min(out.len());
        for s in &mut out[from..end] {
            match signal {
                Signal::Pv => s.pv = first.pv,
                Signal::Op => s.op = first.op,
            }
        }
    }
    out
}

/// The OP logged only every `k`-th row and held in between, while the PV keeps every row.
pub fn coarse_op(samples: &[SimSample], k: usize) -> Vec<SimSample> {
    let k = k.max(1);
    samples
        .iter()
        .enumerate()
        .map(|(i, s)| SimSample {
            op: samples[i - i % k].op,
            ..*s
        })
        .collect()
}

/// The PV as a transmitter with the range `[lo, hi]` reports it: clipped at the range ends.
pub fn clipped_pv(samples: &[SimSample], lo: f64, hi: f64) -> Vec<SimSample> {
    samples
        .iter()
        .map(|s| SimSample {
            pv: s.pv.clamp(lo, hi),
            ..*s
        })
        .collect()
}
