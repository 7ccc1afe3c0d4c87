//! The pure part of the summary: store rows in, a [`WeeklyReport`] out. No I/O, no clock (the
//! generation time is an input). Every number comes from the stored episodes and models and from
//! the analysis core's own functions (`recommend`, `feasibility`); this module and its parts
//! only count, order and pick: [`super::section`] builds each loop's section (with
//! [`super::trend`] for the numbers of each week), [`super::ranking`] orders the loops and
//! [`super::quality`] words what is missing or odd.

use super::evidence::Sources;
use super::period::{Period, local, rfc3339_zoned};
use super::quality;
use super::ranking::{self, RankRow};
use super::section::{self, LoopSection, Status};
use crate::store::{AlertRow, AlertState};
use jiff::Timestamp;
use serde::Serialize;
use std::collections::BTreeMap;

pub use super::section::LoopInput;
pub use super::trend::TREND_WEEKS;

/// Everything the builder reads.
#[derive(Debug, Clone)]
pub struct Inputs {
    /// The trend weeks, oldest first; the last one is the report's period.
    pub periods: Vec<Period>,
    pub loops: Vec<LoopInput>,
    /// Every alert in the store.
    pub alerts: Vec<AlertRow>,
    pub generated: Timestamp,
    /// Where the data came from (the store file), for the header and the reproduce commands.
    pub source: String,
    /// The configuration file, when there is one with a path, for the reproduce commands.
    pub config_file: Option<String>,
    /// Whether a configuration was given (specs and OP ranges known).
    pub config_given: bool,
    /// The newest data time in the store (ms), to tell a period that is not over yet.
    pub newest_data_ms: Option<i64>,
}

/// The weekly loop-health summary. Field names are what the JSON format prints.
#[derive(Debug, Clone, Serialize)]
pub struct WeeklyReport {
    pub title: String,
    pub period: PeriodSummary,
    /// RFC 3339.
    pub generated_at: String,
    pub store: String,
    pub plant: PlantSummary,
    pub loops: Vec<LoopSection>,
    pub caution: &'static str,
    pub definitions: Vec<Definition>,
    /// The JSON document's version and the product's.
    pub schema_version: u32,
    pub version: &'static str,
    /// The hash of all the loops' settings the summary was made with
    /// ([`crate::summary_format::settings_hash`]); `None` when no loop has a setup.
    pub settings_hash: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct PeriodSummary {
    pub label: String,
    /// RFC 3339 with the zone's offset; the period is `[from, to)`.
    pub from: String,
    pub to: String,
    pub time_zone: String,
    pub hours: f64,
    /// The dates for people.
    pub dates: String,
    /// Set when the store's data end before the period does.
    pub incomplete: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct PlantSummary {
    pub loops: usize,
    /// Scored setpoint changes of the period (final ones).
    pub changes: usize,
    /// Of those, the ones with a verdict other than inconclusive.
    pub judged: usize,
    pub met: usize,
    /// Loops whose status advises a change (retune, renegotiate, upgrade).
    pub need_action: usize,
    /// Loops whose judged changes all met the spec.
    pub meeting_spec: usize,
    /// The headline counts as people read them, each with what it counts out of.
    pub tiles: Vec<Tile>,
    /// Loops by need for attention, most urgent first.
    pub ranking: Vec<RankRow>,
    /// Alerts not yet acknowledged, by kind.
    pub open_alerts: Vec<AlertCount>,
    pub data_quality: Vec<String>,
}

/// A headline count: `2 of 4` over `loops need action`.
#[derive(Debug, Clone, Serialize)]
pub struct Tile {
    pub value: String,
    pub words: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct AlertCount {
    /// As stored (the JSON spelling).
    pub kind: String,
    /// As people read it ([`crate::alerts::AlertKind::label`]).
    pub label: String,

    pub count: usize,
    pub loops: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Definition {
    pub term: &'static str,
    pub meaning: &'static str,
}

/// Builds the summary. Pure: the same inputs give the same report.
pub fn build(inputs: &Inputs) -> WeeklyReport {
    let period = inputs
        .periods
        .last()
        .expect("at least the report's own period");
    let tz = period.from.time_zone().clone();
    let mut data_quality = Vec::new();
    if !inputs.config_given {
        data_quality.push(quality::NO_CONFIG.to_string());
    }
    let sources = Sources {
        store: inputs.source.clone(),
        config_file: inputs.config_file.clone(),
    };
    let mut loops: Vec<LoopSection> = inputs
        .loops
        .iter()
        .map(|l| {
            section::build_loop(
                l,
                &inputs.periods,
                &tz,
                (inputs.config_given, &sources),
                &mut data_quality,
            )
        })
        .collect();
    let setups: Vec<&crate::analysis::LoopSetup> = inputs
        .loops
        .iter()
        .filter_map(|l| l.setup.as_ref())
        .collect();
    data_quality.extend(quality::stale_tags(&inputs.alerts, period, &tz));
    let ranking = ranking::rank(&mut loops);
    let changes = loops.iter().map(|l| l.stats.changes).sum();
    let judged = loops.iter().map(|l| l.stats.judged).sum();
    let met = loops.iter().map(|l| l.stats.counts.met).sum();
    let need_action = loops.iter().filter(|l| l.advises_change).count();
    let meeting_spec = loops
        .iter()
        .filter(|l| l.status == Status::MeetsSpec)
        .count();
    WeeklyReport {
        title: if period.week.is_some() {
            format!("Loop health, week {}", period.label)
        } else {
            format!("Loop health, {}", period.label)
        },
        period: PeriodSummary {
            label: period.label.clone(),
            from: rfc3339_zoned(&period.from),
            to: rfc3339_zoned(&period.to),
            time_zone: period.time_zone_name(),
            hours: period.hours(),
            dates: period.dates_for_people(),
            incomplete: incomplete(inputs, period),
        },
        generated_at: local(inputs.generated.as_millisecond(), &tz),
        store: inputs.source.clone(),
        plant: PlantSummary {
            loops: loops.len(),
            changes,
            judged,
            met,
            need_action,
            meeting_spec,
            tiles: tiles(
                loops.len(),
                need_action,
                meeting_spec,
                (changes, judged, met),
            ),
            ranking,
            open_alerts: open_alerts(&inputs.alerts, period),
            data_quality,
        },
        loops,
        caution: crate::analysis::CAUTION,
        definitions: DEFINITIONS.to_vec(),
        schema_version: crate::summary_format::SCHEMA_VERSION,
        version: crate::summary_format::PRODUCT_VERSION,
        settings_hash: (!setups.is_empty())
            .then(|| crate::summary_format::settings_hash(setups.iter().copied())),
    }
}

/// The headline counts, each out of what it counts, so no share hides how few there were.
fn tiles(
    loops: usize,
    need_action: usize,
    meeting_spec: usize,
    (changes, judged, met): (usize, usize, usize),
) -> Vec<Tile> {
    let of = |n: usize, m: usize| format!("{n} of {m}");
    let verb = |n: usize, one: &str, many: &str| if n == 1 { one } else { many }.to_string();
    vec![
        Tile {
            value: of(need_action, loops),
            words: format!(
                "{} action",
                verb(
                    loops,
                    "loop needs",
                    if need_action == 1 {
                        "loops needs"
                    } else {
                        "loops need"
                    }
                )
            ),
        },
        Tile {
            value: of(meeting_spec, loops),
            words: verb(loops, "loop meets its spec", "loops meet their spec"),
        },
        Tile {
            value: of(met, judged),
            words: verb(
                judged,
                "judged change met the spec",
                "judged changes met the spec",
            ),
        },
        Tile {
            value: changes.to_string(),
            words: verb(changes, "setpoint change scored", "setpoint changes scored"),
        },
    ]
}

/// Alerts not yet acknowledged, by kind: raised before the period ended and not acknowledged.
fn open_alerts(alerts: &[AlertRow], period: &Period) -> Vec<AlertCount> {
    let mut by_kind: BTreeMap<String, (usize, Vec<String>)> = BTreeMap::new();
    for a in alerts
        .iter()
        .filter(|a| a.state != AlertState::Acknowledged && a.first_seen_ms < period.to_ms())
    {
        let e = by_kind.entry(a.kind.clone()).or_default();
        e.0 += 1;
        if !e.1.contains(&a.loop_tag) {
            e.1.push(a.loop_tag.clone());
        }
    }
    by_kind
        .into_iter()
        .map(|(kind, (count, loops))| AlertCount {
            label: crate::alerts::AlertKind::label_of(&kind).to_string(),
            kind,
            count,
            loops,
        })
        .collect()
}

/// Data that stop before the period ends: the period is not over yet, or the data stopped
/// early (a day or more before its end).
fn incomplete(inputs: &Inputs, period: &Period) -> Option<String> {
    const DAY_MS: i64 = 86_400_000;
    let n = inputs.newest_data_ms?;
    let stopped = n >= period.from_ms()
        && n < period.to_ms()
        && (inputs.generated.as_millisecond() < period.to_ms() || n < period.to_ms() - DAY_MS);
    stopped.then(|| {
        format!(
            "The store's data end at {}, before the period does: this summary covers the \
             period so far.",
            local(n, period.from.time_zone())
        )
    })
}

const DEFINITIONS: [Definition; 9] = [
    Definition {
        term: "settling time",
        meaning: "from the setpoint change until the PV stays inside the band (± the spec's \
                  percentage of the change around the new setpoint)",
    },
    Definition {
        term: "judged",
        meaning: "changes with a verdict; inconclusive ones (cut short, inside the noise, no \
                  model) are counted but not judged",
    },
    Definition {
        term: "saturation duty",
        meaning: "share of the response with the OP within 0.5 % of its span from a limit, \
                  averaged over the changes",
    },
    Definition {
        term: "t* (fastest possible)",
        meaning: "the quickest settling the OP limit allows from the operating point, by the \
                  identified model; a change whose t* exceeds the spec time is held back by the \
                  actuator, one that missed with a shorter t* by the tuning",
    },
    Definition {
        term: "model",
        meaning: "first order plus dead time fitted to the loop's own OP → PV data: gain K, \
                  time constant τ, dead time θ",
    },
    Definition {
        term: "hold band",
        meaning: "while the setpoint is held (after a change has settled, until the next one), \
                  ± the larger of four standard deviations of the PV noise and the configured \
                  hold band around the setpoint; the regulation figures are over these holds only",
    },
    Definition {
        term: "load disturbance",
        meaning: "the PV out of the hold band for at least three samples, until it stays inside \
                  for a minute; actuator-limited when the OP sat at a limit for at least 30 % of \
                  it, so no tuning could have held the PV",
    },
    Definition {
        term: "Harris index",
        meaning: "the minimum-variance index: the PV variance the best possible controller would \
                  leave, given the process dead time, over the PV variance seen (1 = as good as \
                  any controller can do; near 0 = much room to improve)",
    },
    Definition {
        term: "ranking",
        meaning: "actuator problems first (expensive decisions), then tuning, then loops that \
                  missed without a clear cause; within each, by share of judged changes missed",
    },
];
