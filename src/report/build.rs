//! The pure part of the summary: store rows in, a [`WeeklyReport`] out. No I/O, no clock (the
//! generation time is an input). Every number comes from the stored episodes and models and from
//! the analysis core's own functions ([`recommend`], [`feasibility`]); this module only counts,
//! orders and picks.

use super::period::Period;
use crate::analysis::assess::{Action, Recommendation, VerdictCounts, recommend};
use crate::analysis::{EpisodeResult, Fopdt, LoopSetup, OpRange, Spec, Verdict};
use crate::sample::Signal;
use crate::store::{AlertRow, AlertState, EpisodeRow, ModelRow, SeriesCoverage};
use jiff::Timestamp;
use serde::Serialize;
use std::collections::BTreeMap;

/// Weeks in each loop's trend, the report's own week included.
pub const TREND_WEEKS: usize = 8;

/// What the builder needs to know about one loop.
#[derive(Debug, Clone, Default)]
pub struct LoopInput {
    pub tag: String,
    pub description: String,
    pub pv_unit: String,
    pub op_unit: String,
    /// The loop's spec, OP range and analysis options, from the configuration; `None` when the
    /// loop is only known from the store.
    pub setup: Option<LoopSetup>,
    /// The loop's sample period (s), for the tuning prediction.
    pub sample_s: Option<f64>,
    /// Stored episodes of the trend window (any order).
    pub episodes: Vec<EpisodeRow>,
    /// Models identified before the report period's end, oldest first.
    pub models: Vec<ModelRow>,
    /// Data coverage of each stored signal over the report period.
    pub coverage: Vec<SeriesCoverage>,
    /// Whether the loop is in the configuration (false: only in the store).
    pub configured: bool,
}

/// Everything the builder reads.
#[derive(Debug, Clone)]
pub struct Inputs {
    /// The trend weeks, oldest first; the last one is the report's period.
    pub periods: Vec<Period>,
    pub loops: Vec<LoopInput>,
    /// Every alert in the store.
    pub alerts: Vec<AlertRow>,
    pub generated: Timestamp,
    /// Where the data came from (the store file), for the header.
    pub source: String,
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
    /// Loops by need for attention, most urgent first.
    pub ranking: Vec<RankRow>,
    /// Open alerts by kind.
    pub open_alerts: Vec<AlertCount>,
    pub data_quality: Vec<String>,
}

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

#[derive(Debug, Clone, Serialize)]
pub struct AlertCount {
    pub kind: String,
    pub count: usize,
    pub loops: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Definition {
    pub term: &'static str,
    pub meaning: &'static str,
}

/// What a loop needs, in the summary's words. The order is the ranking's order of urgency.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    /// The actuator cannot meet the spec, and a bigger one within reason would.
    Upgrade,
    /// The actuator cannot meet the spec; the spec should change.
    Renegotiate,
    Retune,
    /// Misses without the evidence to say why (no model, no spec, nothing conclusive).
    Undecided,
    NoChanges,
    MeetsSpec,
}

impl Status {
    pub fn word(self) -> &'static str {
        match self {
            Status::Upgrade => "Upgrade the actuator",
            Status::Renegotiate => "Renegotiate the spec",
            Status::Retune => "Retune",
            Status::Undecided => "Undecided",
            Status::NoChanges => "No setpoint changes",
            Status::MeetsSpec => "Meets spec",
        }
    }

    /// A symbol beside the word, so that neither colour nor the symbol alone carries meaning.
    pub fn symbol(self) -> &'static str {
        match self {
            Status::Upgrade => "▲",
            Status::Renegotiate => "◆",
            Status::Retune => "↻",
            Status::Undecided => "?",
            Status::NoChanges => "–",
            Status::MeetsSpec => "✓",
        }
    }

    /// A CSS class name for the templates.
    pub fn class(self) -> &'static str {
        match self {
            Status::Upgrade | Status::Renegotiate => "actuator",
            Status::Retune => "tuning",
            Status::Undecided | Status::NoChanges => "neutral",
            Status::MeetsSpec => "met",
        }
    }
}

#[derive(Debug, Clone, Serialize)]
pub struct LoopSection {
    pub tag: String,
    pub description: String,
    pub pv_unit: String,
    pub op_unit: String,
    pub spec: Option<Spec>,
    pub op_range: Option<OpRange>,
    pub status: Status,
    pub status_word: &'static str,
    pub status_symbol: &'static str,
    pub status_class: &'static str,
    pub stats: WeekStats,
    /// Changes still being watched when the summary was made; not counted above.
    pub provisional: usize,
    pub model: Option<ModelSummary>,
    /// The analysis core's recommendation, as `analyze --json` prints it.
    pub recommendation: Option<Recommendation>,
    /// The recommendation's numbers, labelled for people.
    pub advice: Vec<Figure>,
    pub telling: Option<TellingEpisode>,
    pub trend: Vec<TrendWeek>,
    /// Plain sentences about what is missing or odd (no changes, no model, no spec...).
    pub notes: Vec<String>,
    /// Inline SVG of the telling episode (HTML only).
    #[serde(skip)]
    pub episode_svg: Option<String>,
    /// Inline SVG of the trend (HTML only).
    #[serde(skip)]
    pub trend_svg: Option<String>,
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
pub struct ModelSummary {
    pub gain: f64,
    pub time_constant_s: f64,
    pub dead_time_s: f64,
    pub fit_r2: f64,
    pub episodes_used: u64,
    /// RFC 3339: data time of the newest sample the fit used.
    pub identified_at: String,
    /// Whether it was identified during the report period.
    pub identified_this_period: bool,
    /// Against the model in force at the start of the trend window (or the earliest one since).
    pub change: Option<ModelChange>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ModelChange {
    /// The period whose model it is compared with.
    pub against: String,
    pub gain_pct: f64,
    pub time_constant_pct: f64,
    pub dead_time_pct: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct Figure {
    pub label: String,
    pub value: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct TrendWeek {
    pub label: String,
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

/// The episode the loop's plot shows, with what the plot needs.
#[derive(Debug, Clone, Serialize)]
pub struct TellingEpisode {
    pub start_ms: i64,
    pub end_ms: i64,
    /// RFC 3339 in the report's time zone.
    pub start: String,
    /// Why this one was picked.
    pub why: String,
    pub verdict: Verdict,
    /// The verdict as people read it ([`Verdict::label`]).
    pub verdict_words: &'static str,
    pub reason: String,
    pub sp_from: f64,
    pub sp_to: f64,
    pub settling_time_s: Option<f64>,
    pub min_settling_time_s: Option<f64>,
    pub overshoot_pct: f64,
    pub saturation_duty: f64,
    pub op_start: f64,
    pub op_headroom: f64,
    /// The model in force when the change ended, for the fastest-response curve.
    pub model: Option<Fopdt>,
}

/// A stored episode with its result read back.
struct Episode<'a> {
    row: &'a EpisodeRow,
    result: EpisodeResult,
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
        data_quality.push(
            "No configuration was given: the loops' specs and OP ranges are unknown, so settling \
             times stand without their spec and no recommendation is made. Run with --config."
                .to_string(),
        );
    }
    let mut loops: Vec<LoopSection> = inputs
        .loops
        .iter()
        .map(|l| build_loop(l, &inputs.periods, &tz, &mut data_quality))
        .collect();

    // Open alerts by kind: raised before the period ended and still open.
    let mut by_kind: BTreeMap<String, (usize, Vec<String>)> = BTreeMap::new();
    for a in inputs
        .alerts
        .iter()
        .filter(|a| a.state == AlertState::Open && a.first_seen_ms < period.to_ms())
    {
        let e = by_kind.entry(a.kind.clone()).or_default();
        e.0 += 1;
        if !e.1.contains(&a.loop_tag) {
            e.1.push(a.loop_tag.clone());
        }
    }
    for a in inputs.alerts.iter().filter(|a| {
        a.kind == "stale_tag"
            && a.last_seen_ms >= period.from_ms()
            && a.first_seen_ms < period.to_ms()
    }) {
        // Alert messages start with their loop's tag; it is said once.
        let message = a
            .message
            .strip_prefix(&format!("{}: ", a.loop_tag))
            .unwrap_or(&a.message);
        data_quality.push(format!(
            "{}: stale tag — {} (from {} to {}, {} time(s))",
            a.loop_tag,
            message,
            local(a.first_seen_ms, &tz),
            local(a.last_seen_ms, &tz),
            a.count
        ));
    }

    let mut ranking: Vec<&LoopSection> = loops.iter().collect();
    ranking.sort_by(|a, b| {
        let misses = |l: &LoopSection| l.stats.judged - l.stats.counts.met;
        let share = |l: &LoopSection| {
            if l.stats.judged == 0 {
                0.0
            } else {
                misses(l) as f64 / l.stats.judged as f64
            }
        };
        a.status
            .cmp(&b.status)
            .then(share(b).total_cmp(&share(a)))
            .then(misses(b).cmp(&misses(a)))
            .then(a.tag.cmp(&b.tag))
    });
    let order: Vec<String> = ranking.iter().map(|l| l.tag.clone()).collect();
    let ranking: Vec<RankRow> = ranking
        .into_iter()
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
        .collect();

    // The loops in the order of the ranking, so the meeting reads from the top.
    loops.sort_by_key(|l| order.iter().position(|t| *t == l.tag));

    // Data that stop before the period ends: the period is not over yet, or the data stopped
    // early (a day or more before its end).
    let incomplete = match inputs.newest_data_ms {
        Some(n)
            if n >= period.from_ms()
                && n < period.to_ms()
                && (inputs.generated.as_millisecond() < period.to_ms()
                    || n < period.to_ms() - 86_400_000) =>
        {
            Some(format!(
                "The store's data end at {}, before the period does: this summary covers the \
                 period so far.",
                local(n, &tz)
            ))
        }
        _ => None,
    };
    let changes = loops.iter().map(|l| l.stats.changes).sum();
    let judged = loops.iter().map(|l| l.stats.judged).sum();
    let met = loops.iter().map(|l| l.stats.counts.met).sum();
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
            incomplete,
        },
        generated_at: local(inputs.generated.as_millisecond(), &tz),
        store: inputs.source.clone(),
        plant: PlantSummary {
            loops: loops.len(),
            changes,
            judged,
            met,
            ranking,
            open_alerts: by_kind
                .into_iter()
                .map(|(kind, (count, loops))| AlertCount { kind, count, loops })
                .collect(),
            data_quality,
        },
        loops,
        caution: crate::analysis::CAUTION,
        definitions: DEFINITIONS.to_vec(),
    }
}

const DEFINITIONS: [Definition; 6] = [
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
        term: "ranking",
        meaning: "actuator problems first (expensive decisions), then tuning, then loops that \
                  missed without a clear cause; within each, by share of judged changes missed",
    },
];

fn build_loop(
    l: &LoopInput,
    periods: &[Period],
    tz: &jiff::tz::TimeZone,
    data_quality: &mut Vec<String>,
) -> LoopSection {
    let period = periods.last().expect("at least one period");
    let mut notes = Vec::new();
    let mut episodes: Vec<Episode> = Vec::new();
    let mut unreadable = 0;
    for row in &l.episodes {
        match serde_json::from_value::<EpisodeResult>(row.detail.clone()) {
            Ok(result) => episodes.push(Episode { row, result }),
            Err(_) => unreadable += 1,
        }
    }
    episodes.sort_by_key(|e| e.row.start_ms);
    if unreadable > 0 {
        data_quality.push(format!(
            "{}: {unreadable} stored change(s) could not be read by this version and were left out",
            l.tag
        ));
    }
    let in_period =
        |e: &&Episode, p: &Period| e.row.start_ms >= p.from_ms() && e.row.start_ms < p.to_ms();
    let week: Vec<&Episode> = episodes
        .iter()
        .filter(|e| in_period(e, period) && e.row.is_final)
        .collect();
    let provisional = episodes
        .iter()
        .filter(|e| in_period(e, period) && !e.row.is_final)
        .count();
    let stats = week_stats(&week);

    // The model in force at the end of the period, and at the end of each trend week.
    let model_at = |t_ms: i64| l.models.iter().rfind(|m| m.identified_ms < t_ms);
    let model_row = model_at(period.to_ms());
    let model = model_row.map(|m| {
        let first = periods.first().expect("at least one period");
        let earlier = model_at(first.from_ms())
            .map(|e| (e, format!("the start of {}", first.label)))
            .or_else(|| {
                l.models
                    .iter()
                    .find(|e| e.identified_ms >= first.from_ms())
                    .map(|e| (e, format!("its first fit, {}", local(e.identified_ms, tz))))
            })
            .filter(|(e, _)| e.id != m.id);
        let pct = |new: f64, old: f64| 100.0 * (new - old) / old.abs().max(f64::MIN_POSITIVE);
        ModelSummary {
            gain: m.gain,
            time_constant_s: m.time_constant_s,
            dead_time_s: m.dead_time_s,
            fit_r2: m.fit_r2,
            episodes_used: m.episodes_used,
            identified_at: local(m.identified_ms, tz),
            identified_this_period: m.identified_ms >= period.from_ms(),
            change: earlier.map(|(e, against)| ModelChange {
                against,
                gain_pct: pct(m.gain, e.gain),
                time_constant_pct: pct(m.time_constant_s, e.time_constant_s),
                dead_time_pct: pct(m.dead_time_s, e.dead_time_s),
            }),
        }
    });

    let results: Vec<EpisodeResult> = week.iter().map(|e| e.result.clone()).collect();
    let recommendation = match (&l.setup, week.is_empty()) {
        (Some(setup), false) => Some(recommend(
            &results,
            model_row.map(|m| m.model()).as_ref(),
            setup,
            l.sample_s.unwrap_or(1.0),
        )),
        _ => None,
    };
    let status = match (&recommendation, week.is_empty()) {
        (_, true) => Status::NoChanges,
        (Some(r), false) => match r.action {
            Action::None => Status::MeetsSpec,
            Action::Retune => Status::Retune,
            Action::Renegotiate => Status::Renegotiate,
            Action::Upgrade => Status::Upgrade,
            Action::Undecided => Status::Undecided,
        },
        (None, false) if stats.judged > 0 && stats.counts.met == stats.judged => Status::MeetsSpec,
        (None, false) => Status::Undecided,
    };

    if week.is_empty() {
        notes.push(
            "No setpoint changes were scored this period, so there is nothing to judge: the \
             loop held its setpoint (or its data did not reach the store)."
                .to_string(),
        );
    }
    if model_row.is_none() {
        notes.push(
            "No usable process model has been identified for this loop yet: misses cannot be \
             told apart (tuning or actuator), and no PI settings or capacity figures can be \
             given. Larger setpoint changes in automatic help the identification."
                .to_string(),
        );
    }
    if l.setup.is_none() {
        notes.push(if l.configured {
            "The configuration of this loop could not be turned into a spec; see check-config."
                .to_string()
        } else {
            "This loop is in the store but not in the configuration: its spec and OP range are \
             unknown, so no recommendation is made."
                .to_string()
        });
    }
    if provisional > 0 {
        notes.push(format!(
            "{provisional} change(s) were still being watched when this summary was made and are \
             not counted."
        ));
    }
    if stats.counts.inconclusive > 0 {
        notes.push(format!(
            "{} change(s) were inconclusive (window cut short, inside the noise, or no model) \
             and are not judged.",
            stats.counts.inconclusive
        ));
    }

    // One line per finding, naming every signal it holds for (SP, PV and OP usually share a gap).
    let mut findings: Vec<(String, Vec<String>)> = Vec::new();
    for c in &l.coverage {
        if c.signal == Signal::Mode && c.samples == 0 {
            continue;
        }
        let finding = if c.samples == 0 {
            "no samples in this period".to_string()
        } else if c.gaps > 0 {
            format!(
                "{} gap(s) longer than {}, {} in all (longest {})",
                c.gaps,
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
    for (finding, signals) in findings {
        data_quality.push(format!("{} {}: {finding}", l.tag, signals.join(", ")));
    }
    if l.coverage.is_empty() && l.configured {
        data_quality.push(format!(
            "{}: the store holds no samples of this loop",
            l.tag
        ));
    }
    if !l.configured
        && l.setup.is_none()
        && !data_quality
            .iter()
            .any(|d| d.starts_with("No configuration"))
    {
        data_quality.push(format!(
            "{}: in the store but not in the configuration (spec unknown)",
            l.tag
        ));
    }

    let advice = recommendation
        .as_ref()
        .map(|r| advice_figures(r, l.setup.as_ref()))
        .unwrap_or_default();
    let telling = pick_telling(&week, status).map(|(e, why)| {
        let m = model_at(e.row.end_ms + 1)
            .or(model_row)
            .map(|m| m.model().fopdt());
        TellingEpisode {
            start_ms: e.row.start_ms,
            end_ms: e.row.end_ms,
            start: local(e.row.start_ms, tz),
            why,
            verdict: e.result.verdict,
            verdict_words: e.result.verdict.label(),
            reason: e.result.reason.clone(),
            sp_from: e.result.sp_from,
            sp_to: e.result.sp_to,
            settling_time_s: e.result.settling_time_s,
            min_settling_time_s: e.result.min_settling_time_s,
            overshoot_pct: e.result.overshoot_pct,
            saturation_duty: e.result.saturation_duty,
            op_start: e.result.op_start,
            op_headroom: e.result.op_headroom,
            model: m,
        }
    });

    let trend = periods
        .iter()
        .map(|p| {
            let eps: Vec<&Episode> = episodes
                .iter()
                .filter(|e| in_period(e, p) && e.row.is_final)
                .collect();
            let s = week_stats(&eps);
            let m = model_at(p.to_ms());
            TrendWeek {
                label: p.label.clone(),
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
        .collect();

    LoopSection {
        tag: l.tag.clone(),
        description: l.description.clone(),
        pv_unit: l.pv_unit.clone(),
        op_unit: l.op_unit.clone(),
        spec: l.setup.as_ref().map(|s| s.spec),
        op_range: l.setup.as_ref().map(|s| s.op),
        status,
        status_word: status.word(),
        status_symbol: status.symbol(),
        status_class: status.class(),
        stats,
        provisional,
        model,
        recommendation,
        advice,
        telling,
        trend,
        notes,
        episode_svg: None,
        trend_svg: None,
    }
}

/// The week's numbers from its final episodes.
fn week_stats(week: &[&Episode]) -> WeekStats {
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
        met_share: (judged > 0).then(|| counts.met as f64 / judged as f64),
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

/// The episode that shows best why the loop has its status: for a retune, the slowest
/// tuning-limited change; for an actuator problem, the slowest change held back by the
/// actuator; for a loop that meets its spec, the largest change; otherwise the slowest one.
fn pick_telling<'a>(week: &[&'a Episode<'a>], status: Status) -> Option<(&'a Episode<'a>, String)> {
    let slowness = |e: &Episode| e.result.settling_time_s.unwrap_or(f64::INFINITY);
    let size = |e: &Episode| (e.result.sp_to - e.result.sp_from).abs();
    let slowest = |filter: &dyn Fn(&Episode) -> bool| {
        week.iter().copied().filter(|e| filter(e)).max_by(|a, b| {
            slowness(a)
                .total_cmp(&slowness(b))
                .then(size(a).total_cmp(&size(b)))
        })
    };
    let pick = match status {
        Status::Retune => slowest(&|e| e.result.verdict == Verdict::TuningLimited)
            .map(|e| (e, "the slowest change that the tuning held back")),
        Status::Upgrade | Status::Renegotiate => slowest(&|e| {
            matches!(
                e.result.verdict,
                Verdict::ActuatorLimited | Verdict::Unreachable
            )
        })
        .map(|e| (e, "the slowest change that the actuator held back")),
        Status::MeetsSpec => week
            .iter()
            .copied()
            .filter(|e| e.result.verdict == Verdict::Met)
            .max_by(|a, b| size(a).total_cmp(&size(b)))
            .map(|e| (e, "the largest change, which met the spec")),
        _ => None,
    };
    pick.map(|(e, why)| (e, why.to_string()))
        .or_else(|| slowest(&|_| true).map(|e| (e, "the slowest change of the period".to_string())))
}

/// The recommendation's numbers with labels, for the HTML and Markdown tables.
fn advice_figures(r: &Recommendation, setup: Option<&LoopSetup>) -> Vec<Figure> {
    let mut out: Vec<Figure> = Vec::new();
    let add = |out: &mut Vec<Figure>, label: &str, value: String| {
        out.push(Figure {
            label: label.to_string(),
            value,
        })
    };
    let secs = |s: Option<f64>| s.map_or("—".to_string(), |s| format!("{s:.0} s"));
    let spec_s = setup.map(|s| s.spec.settle_within_s);
    if let Some(pi) = &r.retune {
        add(
            &mut out,
            "Suggested controller gain Kc (SIMC PI)",
            format!("{:.4}", pi.gain),
        );
        add(
            &mut out,
            "Suggested integral time τI",
            format!("{:.0} s", pi.integral_time_s),
        );
        add(
            &mut out,
            "Closed-loop time constant τc chosen",
            format!("{:.0} s", pi.closed_loop_time_constant_s),
        );
        add(
            &mut out,
            "Expected settling time with these settings",
            pi.expected_settling_time_s
                .map_or("does not settle".into(), |s| format!("{s:.0} s")),
        );
        add(
            &mut out,
            "Expected overshoot",
            format!("{:.1} %", pi.expected_overshoot_pct),
        );
        if !pi.initial_move_fits_headroom {
            add(
                &mut out,
                "Anti-windup",
                "needed: the first OP move exceeds the headroom".into(),
            );
        }
    }
    if let Some(a) = &r.actuator {
        add(
            &mut out,
            "Typical change (held back by the actuator)",
            format!("{:+.3} from OP {:.1}", a.typical_step, a.typical_op_start),
        );
        add(
            &mut out,
            "Fastest possible settling t*",
            match a.fastest_settling_time_s {
                Some(t) => format!("{t:.0} s"),
                None => "unreachable with today's OP limit".into(),
            },
        );
        add(
            &mut out,
            "Settling achievable for the typical change (SIMC PI, τc = θ)",
            secs(a.practical_settling_time_s),
        );
        add(
            &mut out,
            "Largest change that meets today's spec",
            a.largest_compliant_step
                .map_or("none".into(), |d| format!("{d:.3}")),
        );
        add(
            &mut out,
            "OP limit needed for the typical change",
            a.required_op_limit.map_or(
                "no actuator can: the spec time is within the dead time".into(),
                |l| format!("{l:.1}"),
            ),
        );
        add(
            &mut out,
            "Capacity needed, as a ratio of today's",
            a.capacity_ratio.map_or("—".into(), |k| format!("{k:.2}×")),
        );
    }
    if let Some(s) = spec_s
        && !out.is_empty()
    {
        add(&mut out, "Spec settling time", format!("{s:.0} s"));
    }
    out
}

fn rank_reason(l: &LoopSection) -> String {
    let s = &l.stats;
    let misses = s.judged - s.counts.met;
    match l.status {
        Status::NoChanges => "no setpoint changes this period".into(),
        _ if s.judged == 0 => format!("{} change(s), none could be judged", s.changes),
        _ => {
            let mut why = format!(
                "{misses} of {} judged change(s) missed the spec ({:.0} %)",
                s.judged,
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

/// RFC 3339 in the report's zone, e.g. `2026-11-23T08:00:00+01:00`.
pub fn local(ms: i64, tz: &jiff::tz::TimeZone) -> String {
    match Timestamp::from_millisecond(ms) {
        Ok(t) => rfc3339_zoned(&t.to_zoned(tz.clone())),
        Err(_) => ms.to_string(),
    }
}

fn rfc3339_zoned(z: &jiff::Zoned) -> String {
    z.strftime("%Y-%m-%dT%H:%M:%S%:z").to_string()
}

/// "45 s", "12 min", "1 h 20 min", "2 d 3 h".
pub fn duration_words(ms: i64) -> String {
    let s = ms / 1000;
    match s {
        _ if s < 120 => format!("{s} s"),
        _ if s < 3_600 => format!("{} min", s / 60),
        _ if s < 86_400 => format!("{} h {} min", s / 3_600, (s % 3_600) / 60),
        _ => format!("{} d {} h", s / 86_400, (s % 86_400) / 3_600),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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

    #[test]
    fn durations_read_in_the_largest_sensible_units() {
        assert_eq!(duration_words(45_000), "45 s");
        assert_eq!(duration_words(12 * 60_000), "12 min");
        assert_eq!(duration_words(80 * 60_000), "1 h 20 min");
        assert_eq!(duration_words((51 * 3_600) * 1000), "2 d 3 h");
    }

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
