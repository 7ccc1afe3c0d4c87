//! Finding the held-setpoint stretches (holds) of a series: the loop in automatic, the SP
//! unchanged, outside the responses to setpoint changes that are still settling (DESIGN.md,
//! "Regulation").
//!
//! A change's response is *busy* from the change until it settled in its band, or to the end
//! of its window when it never did (the evaluation horizon, the next change, a gap or manual
//! ended it). A hold is a maximal run of samples that are in automatic, not busy, with no data
//! gap and no SP move beyond the deadband inside it; it ends at the next change (a busy or moved
//! sample), a gap, the loop leaving automatic, or the end of the data.

use super::{Hold, HoldEnd};
use crate::analysis::Series;

/// When a setpoint change's response keeps the loop busy: from `from_s` (the change) until
/// `until_s` (settled, or the end of its window).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Busy {
    pub from_s: f64,
    pub until_s: f64,
}

/// The holds of `series`: runs of samples in automatic, outside every `busy` interval, with no
/// interval between samples longer than `max_gap_s` and no SP move larger than `deadband`.
pub fn holds(series: &Series, busy: &[Busy], max_gap_s: f64, deadband: f64) -> Vec<Hold> {
    let (t, sp) = (series.time_s(), series.sp());
    let n = series.len();
    let mut free = vec![true; n];
    for b in busy {
        let from = t.partition_point(|&x| x < b.from_s);
        let until = t.partition_point(|&x| x < b.until_s);
        free[from..until.max(from)]
            .iter_mut()
            .for_each(|f| *f = false);
    }
    let usable = |i: usize| free[i] && series.is_auto(i);
    let gap_before = |i: usize| t[i] - t[i - 1] > max_gap_s;
    let moved_before = |i: usize| (sp[i] - sp[i - 1]).abs() > deadband;
    let mut out = Vec::new();
    let mut i = 0;
    while i < n {
        if !usable(i) {
            i += 1;
            continue;
        }
        let start = i;
        i += 1;
        while i < n && usable(i) && !gap_before(i) && !moved_before(i) {
            i += 1;
        }
        let end_reason = if i == n {
            HoldEnd::EndOfData
        } else if gap_before(i) {
            HoldEnd::DataGap
        } else if !series.is_auto(i) {
            HoldEnd::ManualMode
        } else {
            HoldEnd::SetpointChange
        };
        out.push(Hold {
            start,
            end: i,
            end_reason,
            after_change: start > 0 && !free[start - 1],
        });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// 1 s samples over `n` s, SP 50 with steps at the given times, all in automatic unless a
    /// manual spell is given.
    fn series(n: usize, steps: &[(f64, f64)], manual: Option<(usize, usize)>) -> Series {
        let t: Vec<f64> = (0..n).map(|i| i as f64).collect();
        let sp: Vec<f64> = t
            .iter()
            .map(|&x| steps.iter().rfind(|(at, _)| *at <= x).map_or(50.0, |s| s.1))
            .collect();
        let auto = manual.map(|(a, b)| (0..n).map(|i| !(a..b).contains(&i)).collect());
        Series::new(t, sp.clone(), sp, vec![40.0; n], auto).unwrap()
    }

    fn spans(h: &[Hold]) -> Vec<(usize, usize, HoldEnd)> {
        h.iter().map(|h| (h.start, h.end, h.end_reason)).collect()
    }

    #[test]
    fn holds_lie_between_settled_responses_and_the_next_change() {
        // Changes at 100 s and 300 s, settled 40 s and 60 s after them.
        let s = series(500, &[(100.0, 55.0), (300.0, 52.0)], None);
        let busy = [
            Busy {
                from_s: 100.0,
                until_s: 140.0,
            },
            Busy {
                from_s: 300.0,
                until_s: 360.0,
            },
        ];
        assert_eq!(
            spans(&holds(&s, &busy, 10.0, 0.01)),
            [
                (0, 100, HoldEnd::SetpointChange),
                (140, 300, HoldEnd::SetpointChange),
                (360, 500, HoldEnd::EndOfData),
            ]
        );
        // The first starts with the data; the others where a response settled.
        let after: Vec<bool> = holds(&s, &busy, 10.0, 0.01)
            .iter()
            .map(|h| h.after_change)
            .collect();
        assert_eq!(after, [false, true, true]);
    }

    #[test]
    fn a_gap_or_manual_ends_a_hold_and_an_unsettled_response_has_none() {
        // A 30 s gap after sample 199 (times jump), manual from 300 to 350.
        let mut s = series(500, &[], Some((300, 350)));
        let mut t = s.time_s().to_vec();
        t.iter_mut().skip(200).for_each(|x| *x += 30.0);
        s = Series::new(
            t,
            s.sp().to_vec(),
            s.pv().to_vec(),
            s.op().to_vec(),
            Some((0..500).map(|i| !(300..350).contains(&i)).collect()),
        )
        .unwrap();
        assert_eq!(
            spans(&holds(&s, &[], 10.0, 0.01)),
            [
                (0, 200, HoldEnd::DataGap),
                (200, 300, HoldEnd::ManualMode),
                (350, 500, HoldEnd::EndOfData),
            ]
        );
        // A response still busy to the end of the data leaves no hold after its change.
        let s = series(300, &[(100.0, 55.0)], None);
        let busy = [Busy {
            from_s: 100.0,
            until_s: f64::INFINITY,
        }];
        assert_eq!(
            spans(&holds(&s, &busy, 10.0, 0.01)),
            [(0, 100, HoldEnd::SetpointChange)]
        );
    }

    #[test]
    fn sp_jitter_inside_the_deadband_does_not_end_a_hold() {
        let s = series(200, &[(50.0, 50.004), (120.0, 49.998)], None);
        assert_eq!(
            spans(&holds(&s, &[], 10.0, 0.01)),
            [(0, 200, HoldEnd::EndOfData)]
        );
        // Beyond the deadband, an SP move the segmentation did not take as a change still ends
        // the hold.
        assert_eq!(
            spans(&holds(&s, &[], 10.0, 0.001)),
            [
                (0, 50, HoldEnd::SetpointChange),
                (50, 120, HoldEnd::SetpointChange),
                (120, 200, HoldEnd::EndOfData)
            ]
        );
    }
}
