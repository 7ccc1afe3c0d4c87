//! Finding setpoint changes in the SP signal and cutting the data into episode windows.
//!
//! A setpoint change starts when the SP leaves its current level by more than the deadband. It
//! may be a step or a ramp; either way it ends when the SP has held still (within the deadband)
//! for `sp_hold_s`, and Δ is the whole move. The window of an episode runs from the start of the
//! move until the next change starts, a data gap, the loop leaving automatic, the evaluation
//! horizon, or the end of the data — whichever comes first.

use super::Series;
use serde::{Deserialize, Serialize};

/// Settings for segmentation, all in the loop's own units and seconds.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SegmentSettings {
    /// SP moves no larger than this are jitter, not setpoint changes.
    pub deadband: f64,
    /// How long the SP must hold still for a move to count as finished.
    pub sp_hold_s: f64,
    /// A silence longer than this between samples is a data gap.
    pub max_gap_s: f64,
    /// Windows are cut this long after the change starts, so that a load disturbance hours later
    /// is not scored as part of the setpoint response.
    pub horizon_s: f64,
}

/// How an SP move looked.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ChangeShape {
    Step,
    Ramp,
}

/// Why an episode window ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum WindowEnd {
    /// The next setpoint change started.
    NextChange,
    /// No sample for longer than the gap limit.
    DataGap,
    /// The loop left automatic.
    ManualMode,
    /// The evaluation horizon after the change was reached.
    Horizon,
    /// The data ended.
    EndOfData,
}

impl WindowEnd {
    /// Whether this end interrupts the response (as opposed to ending the evaluation normally).
    pub fn interrupts(self) -> bool {
        !matches!(self, WindowEnd::Horizon)
    }
}

/// One setpoint change and the samples that belong to its response.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EpisodeWindow {
    /// Index of the first sample of the SP move (t0).
    pub start: usize,
    /// Index at which the SP reached its new value.
    pub move_end: usize,
    /// One past the last sample of the window.
    pub end: usize,
    /// First index of the undisturbed stretch before the change (for the operating point and
    /// identification); equals `start` when there is none.
    pub pre_start: usize,
    pub sp_from: f64,
    pub sp_to: f64,
    pub shape: ChangeShape,
    pub end_reason: WindowEnd,
}

impl EpisodeWindow {
    pub fn delta(&self) -> f64 {
        self.sp_to - self.sp_from
    }
}

/// What segmentation found, including changes it could not turn into episodes.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Segmentation {
    pub windows: Vec<EpisodeWindow>,
    /// SP changes that happened while the loop was in manual (SP tracking), not scored.
    pub changes_in_manual: usize,
    /// SP changes hidden inside a data gap (their start time is unknown), not scored.
    pub changes_in_gaps: usize,
    /// SP excursions that came back to the old level before holding, not scored.
    pub returned_excursions: usize,
    /// Number of data gaps.
    pub gaps: usize,
}

/// Cuts a series into episode windows.
pub fn segment(series: &Series, s: &SegmentSettings) -> Segmentation {
    let t = series.time_s();
    let sp = series.sp();
    let n = series.len();
    let mut out = Segmentation::default();
    if n == 0 {
        return out;
    }
    let deadband = s.deadband.max(0.0);
    out.gaps = (0..n.saturating_sub(1))
        .filter(|&i| gap_after(series, i, s.max_gap_s))
        .count();

    let mut level = sp[0];
    // Start of the current undisturbed stretch: after the last gap, manual spell or move end.
    let mut calm_from = 0;
    let mut i = 1;
    while i < n {
        if t[i] - t[i - 1] > s.max_gap_s {
            if (sp[i] - level).abs() > deadband {
                out.changes_in_gaps += 1;
            }
            level = sp[i];
            calm_from = i;
            i += 1;
            continue;
        }
        if !series.is_auto(i) {
            // In manual the SP usually tracks the PV: follow it silently, count that it moved.
            let mut moved = false;
            while i < n && !series.is_auto(i) {
                moved |= (sp[i] - level).abs() > deadband;
                level = sp[i];
                i += 1;
            }
            if moved {
                out.changes_in_manual += 1;
            }
            calm_from = i;
            continue;
        }
        if (sp[i] - level).abs() <= deadband {
            i += 1;
            continue;
        }

        // A move starts.
        let start = move_start(sp, i, level, calm_from);
        let (move_end, interrupted) = move_end(series, i, deadband, s);
        let sp_to = sp[move_end];
        if (sp_to - level).abs() <= deadband {
            out.returned_excursions += 1;
            i = move_end + 1;
            continue;
        }

        let (end, end_reason) = if interrupted {
            (move_end + 1, interrupted_by(series, move_end, s))
        } else {
            window_end(series, move_end, t[start] + s.horizon_s, deadband, s)
        };
        out.windows.push(EpisodeWindow {
            start,
            move_end,
            end,
            pre_start: calm_from.min(start),
            sp_from: level,
            sp_to,
            shape: if move_end > start {
                ChangeShape::Ramp
            } else {
                ChangeShape::Step
            },
            end_reason,
        });
        level = sp_to;
        calm_from = move_end;
        // A window cut by the horizon leaves samples that belong to no episode; carry on from there
        // so a later change is still found.
        i = end.max(move_end + 1);
    }
    out
}

/// Where a move that is under way at sample `i` began: walks back over samples that were
/// already on their way from `level` (the beginning of a ramp), staying inside the calm stretch
/// that starts at `calm_from`.
fn move_start(sp: &[f64], i: usize, level: f64, calm_from: usize) -> usize {
    let dir = (sp[i] - level).signum();
    let mut start = i;
    while start > calm_from + 1 && {
        let prev = sp[start - 1];
        (prev - level) * dir > 0.0 && (sp[start] - prev) * dir > 0.0
    } {
        start -= 1;
    }
    start
}

/// Where the SP holds still after a move under way at sample `i`, and whether a gap, manual or
/// the end of the data stopped the search first (the move was interrupted).
fn move_end(series: &Series, i: usize, deadband: f64, s: &SegmentSettings) -> (usize, bool) {
    let n = series.len();
    let mut j = i;
    loop {
        if held_from(series, j, deadband, s.sp_hold_s) {
            return (j, false);
        }
        if j + 1 >= n || gap_after(series, j, s.max_gap_s) || !series.is_auto(j + 1) {
            return (j, true);
        }
        j += 1;
    }
}

/// Whether the interval after sample `i` is a data gap.
fn gap_after(series: &Series, i: usize, max_gap_s: f64) -> bool {
    let t = series.time_s();
    i + 1 < t.len() && t[i + 1] - t[i] > max_gap_s
}

/// What interrupted a move that ended at `move_end`: the end of the data, a gap or manual.
fn interrupted_by(series: &Series, move_end: usize, s: &SegmentSettings) -> WindowEnd {
    if move_end + 1 >= series.len() {
        WindowEnd::EndOfData
    } else if gap_after(series, move_end, s.max_gap_s) {
        WindowEnd::DataGap
    } else {
        WindowEnd::ManualMode
    }
}

/// The end (exclusive) of a window whose SP settled at `move_end`, and why it ended: it runs
/// until the next move starts, a gap, manual, the horizon time or the end of the data.
fn window_end(
    series: &Series,
    move_end: usize,
    horizon_t: f64,
    deadband: f64,
    s: &SegmentSettings,
) -> (usize, WindowEnd) {
    let (t, sp, n) = (series.time_s(), series.sp(), series.len());
    let sp_to = sp[move_end];
    for k in move_end + 1..n {
        if t[k] - t[k - 1] > s.max_gap_s {
            return (k, WindowEnd::DataGap);
        }
        if !series.is_auto(k) {
            return (k, WindowEnd::ManualMode);
        }
        if t[k] > horizon_t {
            return (k, WindowEnd::Horizon);
        }
        if (sp[k] - sp_to).abs() > deadband {
            return (k, WindowEnd::NextChange);
        }
    }
    (n, WindowEnd::EndOfData)
}

/// Whether the SP stays within `deadband` of `sp[j]` from sample `j` for at least `hold_s`.
fn held_from(series: &Series, j: usize, deadband: f64, hold_s: f64) -> bool {
    let t = series.time_s();
    let sp = series.sp();
    let mut k = j;
    while k < sp.len() && (sp[k] - sp[j]).abs() <= deadband {
        if t[k] - t[j] >= hold_s {
            return true;
        }
        k += 1;
    }
    false
}

#[cfg(test)]
mod tests {
    use super::*;

    fn settings() -> SegmentSettings {
        SegmentSettings {
            deadband: 0.05,
            sp_hold_s: 3.0,
            max_gap_s: 10.0,
            horizon_s: 1e9,
        }
    }

    fn series(sp: Vec<f64>) -> Series {
        let n = sp.len();
        Series::new(
            (0..n).map(|i| i as f64).collect(),
            sp,
            vec![0.0; n],
            vec![0.0; n],
            None,
        )
        .unwrap()
    }

    #[test]
    fn two_steps_make_two_windows_cut_by_the_next_change() {
        let mut sp = vec![50.0; 30];
        sp[10..20].fill(55.0);
        sp[20..].fill(52.0);
        let seg = segment(&series(sp), &settings());
        assert_eq!(seg.windows.len(), 2);
        let w = seg.windows[0];
        assert_eq!((w.start, w.move_end, w.end), (10, 10, 20));
        assert_eq!((w.sp_from, w.sp_to), (50.0, 55.0));
        assert_eq!(w.shape, ChangeShape::Step);
        assert_eq!(w.end_reason, WindowEnd::NextChange);
        assert_eq!(w.pre_start, 0);
        let w = seg.windows[1];
        assert_eq!((w.start, w.end, w.sp_from, w.sp_to), (20, 30, 55.0, 52.0));
        assert_eq!(w.end_reason, WindowEnd::EndOfData);
    }

    #[test]
    fn jitter_inside_the_deadband_is_not_a_change() {
        let sp: Vec<f64> = (0..50)
            .map(|i| 50.0 + if i % 2 == 0 { 0.02 } else { -0.02 })
            .collect();
        assert!(segment(&series(sp), &settings()).windows.is_empty());
    }

    #[test]
    fn a_ramp_is_one_episode_from_its_start_with_the_whole_move() {
        let mut sp = vec![20.0; 10];
        sp.extend((1..=10).map(|k| 20.0 + k as f64));
        sp.extend(vec![30.0; 20]);
        let seg = segment(&series(sp), &settings());
        assert_eq!(seg.windows.len(), 1);
        let w = seg.windows[0];
        assert_eq!(w.start, 10);
        assert_eq!(w.move_end, 19);
        assert_eq!(w.shape, ChangeShape::Ramp);
        assert_eq!(w.delta(), 10.0);
    }

    #[test]
    fn a_data_gap_cuts_the_window() {
        let n = 30;
        let mut t: Vec<f64> = (0..n).map(|i| i as f64).collect();
        for x in t.iter_mut().skip(15) {
            *x += 100.0;
        }
        let mut sp = vec![1.0; n];
        sp[5..].fill(2.0);
        let s = Series::new(t, sp, vec![0.0; n], vec![0.0; n], None).unwrap();
        let seg = segment(&s, &settings());
        assert_eq!(seg.gaps, 1);
        assert_eq!(seg.windows.len(), 1);
        assert_eq!(seg.windows[0].end, 15);
        assert_eq!(seg.windows[0].end_reason, WindowEnd::DataGap);
    }

    #[test]
    fn leaving_automatic_cuts_the_window_and_manual_changes_are_not_scored() {
        let n = 40;
        let mut sp = vec![1.0; n];
        sp[5..].fill(2.0);
        sp[25..].fill(3.0); // changed while in manual
        let mut auto = vec![true; n];
        auto[20..30].fill(false);
        let s = Series::new(
            (0..n).map(|i| i as f64).collect(),
            sp,
            vec![0.0; n],
            vec![0.0; n],
            Some(auto),
        )
        .unwrap();
        let seg = segment(&s, &settings());
        assert_eq!(seg.windows.len(), 1);
        assert_eq!(seg.windows[0].end, 20);
        assert_eq!(seg.windows[0].end_reason, WindowEnd::ManualMode);
        assert_eq!(seg.changes_in_manual, 1);
    }

    #[test]
    fn the_horizon_caps_a_long_window() {
        let mut sp = vec![1.0; 100];
        sp[10..].fill(2.0);
        let s = SegmentSettings {
            horizon_s: 20.0,
            ..settings()
        };
        let seg = segment(&series(sp), &s);
        assert_eq!(seg.windows[0].end, 31);
        assert_eq!(seg.windows[0].end_reason, WindowEnd::Horizon);
    }

    #[test]
    fn an_excursion_that_returns_is_not_an_episode() {
        let mut sp = vec![1.0; 30];
        sp[10] = 2.0;
        let seg = segment(&series(sp), &settings());
        assert!(seg.windows.is_empty());
        assert_eq!(seg.returned_excursions, 1);
    }
}
