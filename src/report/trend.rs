//! A loop's numbers over one period, and its eight-week trend: one definition of the week's
//! statistics for the report's own week and for each trend week.

use super::period::Period;
use crate::analysis::{EpisodeResult, Verdict, verdict::VerdictCounts};
use crate::store::{EpisodeRow, ModelRow};
use serde::Serialize;

/// Weeks in each loop's trend, the report's own week included.
pub const TREND_WEEKS: usize = 8;

/// A stored episode with its result read back.
pub(super) struct Episode<'a> {
    pub(super) row: &'a EpisodeRow,
    pub(super) result: EpisodeResult,
}

impl Episode<'_> {
    /// Whether the change started inside the period.
    pub(super) fn starts_in(&self, p: &Period) -> bool {
        self.row.start_ms >= p.from_ms() && self.row.start_ms < p.to_ms()
    }
}

/// Reads the stored episodes back, oldest first; also returns how many could not be read by
/// this version.
pub(super) fn read_episodes(rows: &[EpisodeRow]) -> (Vec<Episode<'_>>, usize) {
    let mut episodes: Vec<Episode> = Vec::new();
    let mut unreadable = 0;
    for row in rows {
        match serde_json::from_value::<EpisodeResult>(row.detail.clone()) {
            Ok(result) => episodes.push(Episode { row, result }),
            Err(_) => unreadable += 1,
        }
    }
    episodes.sort_by_key(|e| e.row.start_ms);
    (episodes, unreadable)
}

/// The final episodes that started inside the period.
pub(super) fn final_in<'e, 'a>(episodes: &'e [Episode<'a>], p: &Period) -> Vec<&'e Episode<'a>> {
    episodes
        .iter()
        .filter(|e| e.starts_in(p) && e.row.is_final)
        .collect()
}

/// The model in force at `t_ms`: the newest identified before it (`models` oldest first).
pub(super) fn model_at(models: &[ModelRow], t_ms: i64) -> Option<&ModelRow> {
    models.iter().rfind(|m| m.identified_ms < t_ms)
}

/// The numbers of one loop over one period. One definition for the week and for each trend
/// week.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct WeekStats {
    /// Final scored setpoint changes.
    pub changes: usize,
    pub counts: VerdictCounts,
    /// Changes with a verdict other than inconclusive.
    pub judged: usize,
    /// met / judged; `None` when nothing was judged.
    pub met_share: Option<f64>,
    /// Median settling time of the judged changes, a change that never settled counting as
    /// slower than any that did; `None` with `median_not_settled` when the median one never
    /// settled, `None` alone when nothing was judged.
    pub median_settling_s: Option<f64>,
    pub median_not_settled: bool,
    /// The slowest settling of the judged changes that settled.
    pub worst_settling_s: Option<f64>,
    /// Judged changes that never settled in their window.
    pub not_settled: usize,
    /// The largest overshoot among all changes (% of the change).
    pub worst_overshoot_pct: Option<f64>,
    /// Mean saturation duty over all changes (0–1): the share of each response spent with the
    /// OP at a limit.
    pub saturation_duty: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct TrendWeek {
    pub label: String,
    /// How the week reads at the start and the end of a run of weeks ([`Period::ends`]).
    #[serde(skip)]
    pub ends: (String, String),
    pub changes: usize,
    pub judged: usize,
    pub met_share: Option<f64>,
    pub median_settling_s: Option<f64>,
    pub median_not_settled: bool,
    /// The model in force at the end of that week.
    pub gain: Option<f64>,
    pub time_constant_s: Option<f64>,
    pub dead_time_s: Option<f64>,
}

/// One line of a trend for people: a week, or a run of quiet weeks told in one line instead of
/// empty rows.
#[derive(Debug, Clone, Serialize)]
pub struct WeekRow<T> {
    /// The week, when it was not quiet.
    pub week: Option<T>,
    /// For a run of quiet weeks: `no setpoint changes from 2026-W41 to 2026-W45 (5 weeks)`, or
    /// `no setpoint changes in 2026-W47`.
    pub quiet: Option<String>,
}

/// A line of the changes' trend: a week with changes, or a run of weeks without any.
pub type TrendRow = WeekRow<TrendWeek>;

/// The trend's weeks for people, oldest first: each run of weeks without changes collapsed
/// into one line.
pub(super) fn rows(weeks: &[TrendWeek]) -> Vec<TrendRow> {
    collapse(
        weeks,
        |w| w.changes == 0,
        |w| (&w.label, &w.ends),
        "no setpoint changes",
    )
}

/// Weeks for people, oldest first, each run of quiet weeks told in one line: `{none} in
/// 2026-W47`, or `{none} from 2026-W41 to 2026-W45 (5 weeks)`. `label_ends` gives a week's
/// label and how it reads at the start and the end of a run ([`Period::ends`]).
pub(super) fn collapse<T: Clone>(
    weeks: &[T],
    quiet: impl Fn(&T) -> bool,
    label_ends: impl Fn(&T) -> (&String, &(String, String)),
    none: &str,
) -> Vec<WeekRow<T>> {
    let mut out = Vec::new();
    let mut run: Vec<&T> = Vec::new();
    let flush = |run: &mut Vec<&T>, out: &mut Vec<WeekRow<T>>| {
        let words = match run.as_slice() {
            [] => return,
            [one] => match label_ends(one) {
                (label, (from, to)) if from == to => format!("{none} in {label}"),
                (_, (from, to)) => format!("{none} from {from} to {to}"),
            },
            [first, .., last] => format!(
                "{none} from {} to {} ({} weeks)",
                label_ends(first).1.0,
                label_ends(last).1.1,
                run.len()
            ),
        };
        out.push(WeekRow {
            week: None,
            quiet: Some(words),
        });
        run.clear();
    };
    for w in weeks {
        if quiet(w) {
            run.push(w);
        } else {
            flush(&mut run, &mut out);
            out.push(WeekRow {
                week: Some(w.clone()),
                quiet: None,
            });
        }
    }
    flush(&mut run, &mut out);
    out
}

/// The week's numbers from its final episodes.
pub(super) fn week_stats(week: &[&Episode]) -> WeekStats {
    let results: Vec<EpisodeResult> = week.iter().map(|e| e.result.clone()).collect();
    let counts = VerdictCounts::of(&results);
    let judged_eps: Vec<&EpisodeResult> = results
        .iter()
        .filter(|e| e.verdict != Verdict::Inconclusive)
        .collect();
    let judged = judged_eps.len();
    let settling: Vec<Option<f64>> = judged_eps.iter().map(|e| e.settling_time_s).collect();
    let (median, median_not_settled) = median_settling(&settling);
    let finite = |it: &mut dyn Iterator<Item = f64>| {
        it.fold(None, |m: Option<f64>, x| Some(m.map_or(x, |m| m.max(x))))
    };
    WeekStats {
        changes: results.len(),
        counts,
        judged,
        met_share: counts.met_share(),
        median_settling_s: median,
        median_not_settled,
        worst_settling_s: finite(&mut settling.iter().flatten().copied()),
        not_settled: settling.iter().filter(|s| s.is_none()).count(),
        worst_overshoot_pct: finite(&mut results.iter().map(|e| e.overshoot_pct)),
        saturation_duty: (!results.is_empty())
            .then(|| results.iter().map(|e| e.saturation_duty).sum::<f64>() / results.len() as f64),
    }
}

/// The median of settling times where `None` (never settled) ranks above every time. Returns the
/// median, or `(None, true)` when the middle value(s) never settled; `(None, false)` for none.
pub fn median_settling(times: &[Option<f64>]) -> (Option<f64>, bool) {
    if times.is_empty() {
        return (None, false);
    }
    let mut v: Vec<f64> = times.iter().map(|t| t.unwrap_or(f64::INFINITY)).collect();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    let m = if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    };
    if m.is_finite() {
        (Some(m), false)
    } else {
        (None, true)
    }
}

/// Each period's numbers and the model in force at its end, oldest first.
pub(super) fn trend(
    episodes: &[Episode],
    periods: &[Period],
    models: &[ModelRow],
) -> Vec<TrendWeek> {
    periods
        .iter()
        .map(|p| {
            let s = week_stats(&final_in(episodes, p));
            let m = model_at(models, p.to_ms());
            TrendWeek {
                label: p.label.clone(),
                ends: p.ends(),
                changes: s.changes,
                judged: s.judged,
                met_share: s.met_share,
                median_settling_s: s.median_settling_s,
                median_not_settled: s.median_not_settled,
                gain: m.map(|m| m.gain),
                time_constant_s: m.map(|m| m.time_constant_s),
                dead_time_s: m.map(|m| m.dead_time_s),
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn week(label: &str, changes: usize) -> TrendWeek {
        let ends = (label.to_string(), label.to_string());
        TrendWeek {
            label: label.into(),
            ends,
            changes,
            judged: changes,
            met_share: None,
            median_settling_s: None,
            median_not_settled: false,
            gain: None,
            time_constant_s: None,
            dead_time_s: None,
        }
    }

    #[test]
    fn runs_of_weeks_without_changes_read_as_one_line() {
        let weeks = [
            week("2026-W41", 0),
            week("2026-W42", 0),
            week("2026-W43", 0),
            week("2026-W44", 2),
            week("2026-W45", 0),
            week("2026-W46", 1),
            week("2026-W47", 0),
            week("2026-W48", 0),
        ];
        let lines: Vec<String> = rows(&weeks)
            .into_iter()
            .map(|r| r.quiet.unwrap_or_else(|| r.week.unwrap().label))
            .collect();
        assert_eq!(
            lines,
            [
                "no setpoint changes from 2026-W41 to 2026-W43 (3 weeks)",
                "2026-W44",
                "no setpoint changes in 2026-W45",
                "2026-W46",
                "no setpoint changes from 2026-W47 to 2026-W48 (2 weeks)",
            ]
        );
        assert!(rows(&[]).is_empty());
        // Free ranges read from the first one's start to the last one's end.
        let range = |from: &str, to: &str| TrendWeek {
            label: format!("{from} to {to}"),
            ends: (from.into(), to.into()),
            ..week("", 0)
        };
        let lines: Vec<String> = rows(&[range("10-01", "10-08"), range("10-08", "10-15")])
            .into_iter()
            .filter_map(|r| r.quiet)
            .collect();
        assert_eq!(lines, ["no setpoint changes from 10-01 to 10-15 (2 weeks)"]);
        let one: Vec<String> = rows(&[range("10-01", "10-08")])
            .into_iter()
            .filter_map(|r| r.quiet)
            .collect();
        assert_eq!(one, ["no setpoint changes from 10-01 to 10-08"]);
    }

    #[test]
    fn the_median_settling_time_ranks_never_settled_above_every_time() {
        assert_eq!(median_settling(&[]), (None, false));
        assert_eq!(
            median_settling(&[Some(300.0), Some(100.0), Some(200.0)]),
            (Some(200.0), false)
        );
        assert_eq!(
            median_settling(&[Some(300.0), None, Some(100.0), Some(200.0)]),
            (Some(250.0), false)
        );
        assert_eq!(median_settling(&[Some(300.0), None, None]), (None, true));
        assert_eq!(median_settling(&[Some(300.0), None]), (None, true));
    }
}
