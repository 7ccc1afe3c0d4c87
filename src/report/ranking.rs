//! The plant page's ranking: loops by need for attention, most urgent first — actuator problems
//! (expensive decisions), then tuning, then misses without a clear cause; within each status by
//! the share of judged changes missed.

use super::section::{LoopSection, Status};
use crate::analysis::Verdict;
use serde::Serialize;

#[derive(Debug, Clone, Serialize)]
pub struct RankRow {
    pub rank: usize,
    pub tag: String,
    pub status: Status,
    pub status_word: &'static str,
    pub status_symbol: &'static str,
    pub status_class: &'static str,
    /// One line: why it ranks here.
    pub reason: String,
}

/// Ranks the loops and puts them in the ranking's order, so the meeting reads from the top.
pub(super) fn rank(loops: &mut [LoopSection]) -> Vec<RankRow> {
    let misses = |l: &LoopSection| l.stats.judged - l.stats.counts.met;
    let share = |l: &LoopSection| {
        if l.stats.judged == 0 {
            0.0
        } else {
            misses(l) as f64 / l.stats.judged as f64
        }
    };
    loops.sort_by(|a, b| {
        a.status
            .cmp(&b.status)
            .then(share(b).total_cmp(&share(a)))
            .then(misses(b).cmp(&misses(a)))
            .then(a.tag.cmp(&b.tag))
    });
    loops
        .iter()
        .enumerate()
        .map(|(i, l)| RankRow {
            rank: i + 1,
            tag: l.tag.clone(),
            status: l.status,
            status_word: l.status.word(),
            status_symbol: l.status.symbol(),
            status_class: l.status.class(),
            reason: rank_reason(l),
        })
        .collect()
}

fn rank_reason(l: &LoopSection) -> String {
    let s = &l.stats;
    let misses = s.judged - s.counts.met;
    match l.status {
        Status::NoChanges => "no setpoint changes this period".into(),
        _ if s.judged == 0 => format!(
            "{}, none could be judged",
            crate::units::count(s.changes, "change", "changes")
        ),
        _ => {
            let mut why = format!(
                "{misses} of {} missed the spec ({:.0} %)",
                crate::units::count(s.judged, "judged change", "judged changes"),
                100.0 * misses as f64 / s.judged as f64
            );
            let parts = s.counts.occurring(&[
                Verdict::TuningLimited,
                Verdict::ActuatorLimited,
                Verdict::Unreachable,
            ]);
            if !parts.is_empty() {
                why.push_str(&format!(": {}", parts.join(", ")));
            }
            why
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn statuses_rank_actuator_problems_first_and_met_loops_last() {
        let mut s = vec![
            Status::MeetsSpec,
            Status::Retune,
            Status::NoChanges,
            Status::Upgrade,
            Status::Undecided,
        ];
        s.sort();
        assert_eq!(
            s,
            [
                Status::Upgrade,
                Status::Retune,
                Status::Undecided,
                Status::NoChanges,
                Status::MeetsSpec
            ]
        );
    }
}
