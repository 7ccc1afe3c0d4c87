//! The plain sentences about what is missing or odd: the data-quality list of the plant page
//! (gaps, stale tags, unreadable or unconfigured loops) and the notes under each loop.

use super::period::{Period, local};
use crate::sample::Signal;
use crate::store::{AlertRow, SeriesCoverage};
use crate::units::count;
use jiff::tz::TimeZone;

/// The data-quality line when no configuration was given.
pub(super) const NO_CONFIG: &str = "No configuration was given: the loops' specs and OP ranges \
are unknown, so settling times stand without their spec, no recommendation is made and the \
regulation between setpoint changes is not analysed. Run with --config.";

/// "was" for one, "were" for more.
fn were(n: usize) -> &'static str {
    if n == 1 { "was" } else { "were" }
}

/// Stored changes this version could not read back.
pub(super) fn unreadable(tag: &str, n: usize) -> String {
    let (changes, were) = (count(n, "stored change", "stored changes"), were(n));
    format!("{tag}: {changes} could not be read by this version and {were} left out")
}

/// A loop the store knows but the configuration does not.
pub(super) fn not_configured(tag: &str) -> String {
    format!("{tag}: in the store but not in the configuration (spec unknown)")
}

/// One line per coverage finding of a loop, naming every signal it holds for (SP, PV and OP
/// usually share a gap); a configured loop without any stored samples says so.
pub(super) fn coverage_findings(
    tag: &str,
    coverage: &[SeriesCoverage],
    configured: bool,
) -> Vec<String> {
    let mut findings: Vec<(String, Vec<String>)> = Vec::new();
    for c in coverage {
        if c.signal == Signal::Mode && c.samples == 0 {
            continue;
        }
        let finding = if c.samples == 0 {
            "no samples in this period".to_string()
        } else if c.gaps > 0 {
            format!(
                "{} longer than {}, {} in all (longest {})",
                count(usize::try_from(c.gaps).unwrap_or(usize::MAX), "gap", "gaps"),
                duration_words(c.gap_threshold_ms),
                duration_words(c.gap_ms),
                duration_words(c.longest_gap_ms)
            )
        } else {
            continue;
        };
        let signal = c.signal.as_str().to_uppercase();
        match findings.iter_mut().find(|(f, _)| *f == finding) {
            Some((_, signals)) => signals.push(signal),
            None => findings.push((finding, vec![signal])),
        }
    }
    let mut out: Vec<String> = findings
        .into_iter()
        .map(|(finding, signals)| format!("{tag} {}: {finding}", signals.join(", ")))
        .collect();
    if coverage.is_empty() && configured {
        out.push(format!("{tag}: the store holds no samples of this loop"));
    }
    out
}

/// The stale-tag alerts active during the period, one line each.
pub(super) fn stale_tags(alerts: &[AlertRow], period: &Period, tz: &TimeZone) -> Vec<String> {
    alerts
        .iter()
        .filter(|a| {
            a.kind == "stale_tag"
                && a.last_seen_ms >= period.from_ms()
                && a.first_seen_ms < period.to_ms()
        })
        .map(|a| {
            // Alert messages start with their loop's tag; it is said once.
            let message = a
                .message
                .strip_prefix(&format!("{}: ", a.loop_tag))
                .unwrap_or(&a.message);
            format!(
                "{}: stale tag — {} (from {} to {}, {})",
                a.loop_tag,
                message,
                local(a.first_seen_ms, tz),
                local(a.last_seen_ms, tz),
                count(
                    usize::try_from(a.count).unwrap_or(usize::MAX),
                    "time",
                    "times"
                )
            )
        })
        .collect()
}

/// What the notes under a loop are drawn from.
pub(super) struct LoopFacts {
    pub(super) changes: usize,
    pub(super) has_model: bool,
    pub(super) has_setup: bool,
    pub(super) configured: bool,
    pub(super) provisional: usize,
    pub(super) inconclusive: usize,
}

/// The notes under a loop: what is missing (changes, model, spec) and what was not counted.
pub(super) fn loop_notes(f: &LoopFacts) -> Vec<String> {
    let mut notes = Vec::new();
    if f.changes == 0 {
        notes.push(
            "No setpoint changes were scored this period, so there is nothing to judge: the \
             loop held its setpoint (or its data did not reach the store)."
                .to_string(),
        );
    }
    if !f.has_model {
        notes.push(
            "No usable process model has been identified for this loop yet: misses cannot be \
             told apart (tuning or actuator), and no PI settings or capacity figures can be \
             given. Larger setpoint changes in automatic help the identification."
                .to_string(),
        );
    }
    if !f.has_setup {
        notes.push(if f.configured {
            "The configuration of this loop could not be turned into a spec; see check-config."
                .to_string()
        } else {
            "This loop is in the store but not in the configuration: its spec and OP range are \
             unknown, so no recommendation is made."
                .to_string()
        });
    }
    if f.provisional > 0 {
        let n = f.provisional;
        notes.push(format!(
            "{} {} still being watched when this summary was made and {} not counted.",
            count(n, "change", "changes"),
            were(n),
            if n == 1 { "is" } else { "are" }
        ));
    }
    if f.inconclusive > 0 {
        let n = f.inconclusive;
        notes.push(format!(
            "{} {} inconclusive (window cut short, inside the noise, or no model) and {} not \
             judged.",
            count(n, "change", "changes"),
            were(n),
            if n == 1 { "is" } else { "are" }
        ));
    }
    notes
}

/// A span of milliseconds for people, by the one rule of [`crate::units::human_duration`].
fn duration_words(ms: i64) -> String {
    crate::units::human_duration(crate::units::ms_to_s(ms))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn signals_sharing_a_finding_are_named_on_one_line() {
        let cov = |signal, samples, gaps| SeriesCoverage {
            loop_tag: "TIC-1".into(),
            signal,
            samples,
            first_ms: None,
            last_ms: None,
            gaps,
            gap_ms: 600_000,
            longest_gap_ms: 300_000,
            gap_threshold_ms: 30_000,
        };
        let lines = coverage_findings(
            "TIC-1",
            &[
                cov(Signal::Sp, 10, 2),
                cov(Signal::Pv, 10, 2),
                cov(Signal::Op, 0, 0),
                cov(Signal::Mode, 0, 0),
            ],
            true,
        );
        assert_eq!(
            lines,
            [
                "TIC-1 SP, PV: 2 gaps longer than 30.0 s, 10.0 min in all (longest 5.0 min)",
                "TIC-1 OP: no samples in this period"
            ]
        );
        assert_eq!(
            coverage_findings("TIC-1", &[], true),
            ["TIC-1: the store holds no samples of this loop"]
        );
        assert!(coverage_findings("TIC-1", &[], false).is_empty());
    }
}
