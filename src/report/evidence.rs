//! What makes a verdict checkable: each loop's worst misses of the period, each with the exact
//! commands that bring back its record (`headroom episodes`) and its raw data for a fresh
//! analysis (`headroom export`, then `headroom analyze`), and the period's unreachable changes
//! listed on their own, since they have no fastest settling time t* to draw.

use super::period::local;
use super::trend::Episode;
use crate::analysis::{LoopSetup, Verdict};
use crate::units::{human_duration, quantity, rfc3339, sig};
use jiff::tz::TimeZone;
use serde::Serialize;

/// Misses shown per loop: enough to see whether the worst one is typical, few enough to read.
pub const WORST_MISSES: usize = 3;

/// Where the summary's data came from, for the commands that reproduce its numbers.
#[derive(Debug, Clone, Default)]
pub struct Sources {
    /// The store file, as the summary names it.
    pub store: String,
    /// The configuration file, when the summary was made with one that has a path.
    pub config_file: Option<String>,
}

/// One of a loop's worst misses with the commands that reproduce it.
#[derive(Debug, Clone, Serialize)]
pub struct WorstMiss {
    /// RFC 3339 in the report's time zone.
    pub start: String,
    pub verdict: Verdict,
    /// The verdict as people read it ([`Verdict::label`]).
    pub verdict_words: &'static str,
    /// The change, with its unit: `60.0 → 65.0 °C`.
    pub change: String,
    /// How far it missed, in words with units.
    pub missed_by: String,
    /// Lists this change's stored record: `headroom episodes ... --since T --until T`.
    pub record_command: String,
    /// Exports the change's raw samples and analyses them afresh.
    pub data_commands: [String; 2],
}

/// An unreachable change: no t* exists, because even the OP held at its limit cannot bring the
/// PV to the new setpoint.
#[derive(Debug, Clone, Serialize)]
pub struct UnreachableChange {
    /// RFC 3339 in the report's time zone.
    pub start: String,
    pub change: String,
    /// The reach against the distance to go, in words with units (when the model gave a reach).
    pub short_by: Option<String>,
}

/// The data before a change that a plot or an export takes with it: a tenth of the window, at
/// least a minute, so the setpoint's move and the steady state before it are in view.
pub(super) fn lead_in_ms(window_ms: i64) -> i64 {
    (window_ms / 10).max(60_000)
}

/// `from → to unit`, each to the display's significant figures.
pub fn change_words(sp_from: f64, sp_to: f64, pv_unit: &str) -> String {
    format!(
        "{} → {}",
        sig(sp_from, crate::units::DISPLAY_DIGITS),
        quantity(sp_to, pv_unit)
    )
}

/// How far a change missed its spec, as a number to rank by (larger is worse; a change that
/// never settled ranks above every one that did) and in words.
fn how_far(e: &Episode, setup: Option<&LoopSetup>) -> (f64, String) {
    let r = &e.result;
    let spec = setup.map(|s| s.spec);
    let spec_s = spec.map(|s| s.settle_within_s);
    let window_s = crate::units::ms_to_s(e.row.end_ms - e.row.start_ms);
    let mut words = Vec::new();
    let late = match (r.settling_time_s, spec_s) {
        (None, _) => {
            words.push(format!(
                "never settled in its {} window",
                human_duration(window_s)
            ));
            f64::INFINITY
        }
        (Some(t), Some(s)) if t > s => {
            words.push(format!(
                "settled in {} against the spec's {}",
                human_duration(t),
                human_duration(s)
            ));
            t / s
        }
        (Some(t), None) => t,
        (Some(_), Some(_)) => 0.0,
    };
    let over = match spec.and_then(|s| s.max_overshoot_pct) {
        Some(max) if r.overshoot_pct > max => {
            words.push(format!(
                "overshot by {} against the spec's {}",
                quantity(r.overshoot_pct, "%"),
                quantity(max, "%")
            ));
            r.overshoot_pct / max.max(f64::MIN_POSITIVE)
        }
        _ => 0.0,
    };
    if words.is_empty() {
        words.push(r.reason.clone());
    }
    (late.max(over), words.join("; "))
}

/// The loop's worst misses of the period, worst first.
pub(super) fn worst_misses(
    week: &[&Episode],
    tag: &str,
    pv_unit: &str,
    setup: Option<&LoopSetup>,
    sources: &Sources,
    tz: &TimeZone,
) -> Vec<WorstMiss> {
    let mut misses: Vec<(f64, String, &Episode)> = week
        .iter()
        .filter(|e| e.result.verdict.is_miss())
        .map(|e| {
            let (score, words) = how_far(e, setup);
            (score, words, *e)
        })
        .collect();
    misses.sort_by(|a, b| {
        b.0.total_cmp(&a.0)
            .then(a.2.row.start_ms.cmp(&b.2.row.start_ms))
    });
    misses
        .into_iter()
        .take(WORST_MISSES)
        .map(|(_, missed_by, e)| WorstMiss {
            start: local(e.row.start_ms, tz),
            verdict: e.result.verdict,
            verdict_words: e.result.verdict.label(),
            change: change_words(e.result.sp_from, e.result.sp_to, pv_unit),
            missed_by,
            record_command: record_command(sources, tag, e.row.start_ms),
            data_commands: data_commands(sources, tag, setup, e.row.start_ms, e.row.end_ms),
        })
        .collect()
}

/// The period's unreachable changes, oldest first.
pub(super) fn unreachable(
    week: &[&Episode],
    pv_unit: &str,
    tz: &TimeZone,
) -> Vec<UnreachableChange> {
    week.iter()
        .filter(|e| e.result.verdict == Verdict::Unreachable)
        .map(|e| {
            let r = &e.result;
            let to_go = (r.sp_to - r.start_pv.unwrap_or(r.sp_from)).abs();
            UnreachableChange {
                start: local(e.row.start_ms, tz),
                change: change_words(r.sp_from, r.sp_to, pv_unit),
                short_by: r.reach.map(|reach| {
                    format!(
                        "with the OP held at its limit the PV moves at most {}, and {} were needed",
                        quantity(reach, pv_unit),
                        quantity(to_go, pv_unit)
                    )
                }),
            }
        })
        .collect()
}

/// `headroom episodes` for the one change that started at `start_ms`: from its start to one
/// second later (the flag's own reading of RFC 3339; no two changes of a loop start within a
/// second of each other).
fn record_command(sources: &Sources, tag: &str, start_ms: i64) -> String {
    command(&[
        "headroom",
        "episodes",
        "--db",
        &sources.store,
        "--loop",
        tag,
        "--since",
        &rfc3339(start_ms),
        "--until",
        &rfc3339(start_ms + 1_000),
    ])
}

/// `headroom export` of the change's window with its lead-in, then `headroom analyze` of the
/// file with the loop's configuration (or, without a configuration file, the setup's own
/// numbers as flags).
fn data_commands(
    sources: &Sources,
    tag: &str,
    setup: Option<&LoopSetup>,
    start_ms: i64,
    end_ms: i64,
) -> [String; 2] {
    let file = format!("{tag}.csv");
    let export = format!(
        "{} > {}",
        command(&[
            "headroom",
            "export",
            "--db",
            &sources.store,
            "--loop",
            tag,
            "--from",
            // From a whole second: easier to read, and a little more lead-in does no harm.
            &rfc3339((start_ms - lead_in_ms(end_ms - start_ms)).div_euclid(1_000) * 1_000),
            "--to",
            &rfc3339(end_ms),
        ]),
        shell_word(&file)
    );
    let mut analyze: Vec<String> = vec!["headroom".into(), "analyze".into(), file];
    match (&sources.config_file, setup) {
        (Some(config), _) => {
            analyze.extend([
                "--config".into(),
                config.clone(),
                "--loop".into(),
                tag.into(),
            ]);
        }
        (None, Some(s)) => {
            let mut flag = |name: &str, v: Option<f64>| {
                if let Some(v) = v {
                    analyze.extend([name.to_string(), v.to_string()]);
                }
            };
            flag("--op-min", Some(s.op.min));
            flag("--op-max", Some(s.op.max));
            flag("--settle-band-pct", Some(s.spec.settle_band_pct));
            flag("--settle-band", s.spec.settle_band);
            flag("--settle-within-s", Some(s.spec.settle_within_s));
            flag("--max-overshoot-pct", s.spec.max_overshoot_pct);
            flag("--sp-deadband", s.options.sp_deadband);
            flag("--max-gap-s", s.options.max_gap_s);
        }
        (None, None) => {}
    }
    let words: Vec<&str> = analyze.iter().map(String::as_str).collect();
    [export, command(&words)]
}

/// Words joined into a command line a POSIX shell reads back word for word.
fn command(words: &[&str]) -> String {
    words
        .iter()
        .map(|w| shell_word(w))
        .collect::<Vec<_>>()
        .join(" ")
}

/// A word as a POSIX shell reads it back: as it is when it holds only safe characters, else in
/// single quotes (a quote inside written as `'\''`).
fn shell_word(w: &str) -> String {
    let safe = |c: char| c.is_ascii_alphanumeric() || "_-./:+=@%,".contains(c);
    if !w.is_empty() && w.chars().all(safe) {
        w.to_string()
    } else {
        format!("'{}'", w.replace('\'', r"'\''"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::Spec;

    #[test]
    fn shell_words_are_quoted_only_when_needed() {
        assert_eq!(
            shell_word("/tmp/plant/headroom.db"),
            "/tmp/plant/headroom.db"
        );
        assert_eq!(shell_word("2026-11-23T08:00:00Z"), "2026-11-23T08:00:00Z");
        assert_eq!(shell_word("my plant.db"), "'my plant.db'");
        assert_eq!(shell_word("it's"), r"'it'\''s'");
        assert_eq!(shell_word(""), "''");
    }

    #[test]
    fn the_record_command_spans_one_second_from_the_change() {
        let s = Sources {
            store: "/data/plant db.sqlite".into(),
            config_file: None,
        };
        // 1 795 420 800 000 ms = 2026-11-23T08:00:00Z (see cli::time's test).
        assert_eq!(
            record_command(&s, "TIC-101", 1_795_420_800_000),
            "headroom episodes --db '/data/plant db.sqlite' --loop TIC-101 \
             --since 2026-11-23T08:00:00Z --until 2026-11-23T08:00:01Z"
        );
    }

    #[test]
    fn without_a_config_file_analyze_gets_the_setup_as_flags() {
        let mut setup = LoopSetup::new("TIC-101", Spec::within(900.0));
        setup.spec.max_overshoot_pct = Some(10.0);
        setup.op.max = 80.0;
        let s = Sources {
            store: "h.db".into(),
            config_file: None,
        };
        let t0 = 1_795_420_800_000;
        let [export, analyze] = data_commands(&s, "TIC-101", Some(&setup), t0, t0 + 3_000_000);
        // A 3,000 s window takes a 300 s lead-in.
        assert_eq!(
            export,
            "headroom export --db h.db --loop TIC-101 --from 2026-11-23T07:55:00Z \
             --to 2026-11-23T08:50:00Z > TIC-101.csv"
        );
        assert_eq!(
            analyze,
            "headroom analyze TIC-101.csv --op-min 0 --op-max 80 --settle-band-pct 2 \
             --settle-within-s 900 --max-overshoot-pct 10"
        );
        let with_config = Sources {
            config_file: Some("plant.toml".into()),
            ..s
        };
        let [_, analyze] = data_commands(&with_config, "TIC-101", Some(&setup), t0, t0 + 1);
        assert_eq!(
            analyze,
            "headroom analyze TIC-101.csv --config plant.toml --loop TIC-101"
        );
    }
}
