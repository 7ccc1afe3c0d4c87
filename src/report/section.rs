//! One loop's section of the summary: its status (what it needs), the week's numbers, its model
//! and how that moved, the recommendation with its figures, the most telling change and the
//! notes.

use super::evidence::{self, Sources, UnreachableChange, WorstMiss};
use super::period::{Period, local};
use super::quality::{self, LoopFacts};
use super::regulation::{self, RegulationRun, RegulationSection};
use super::trend::{self, Episode, TrendRow, TrendWeek, WeekStats};
use crate::analysis::advice::{Action, Recommendation, recommend};
use crate::analysis::{EpisodeResult, Fopdt, LoopSetup, OpRange, Spec, Verdict};
use crate::store::{EpisodeRow, ModelRow, SeriesCoverage};
use crate::units::human_duration;
use jiff::tz::TimeZone;
use serde::Serialize;

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
    /// The regulation analysis of each period (as `Inputs::periods`, oldest first; `None` for
    /// a period without samples); empty when the loop was not analysed (no setup).
    pub regulation: Vec<Option<RegulationRun>>,
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
    /// The status as people read it: an action's own label ([`Action::label`]) where the status
    /// is that action, so an action is spelled alike everywhere.
    pub fn word(self) -> &'static str {
        match self {
            Status::Upgrade => Action::Upgrade.label(),
            Status::Renegotiate => Action::Renegotiate.label(),
            Status::Retune => Action::Retune.label(),
            Status::Undecided => Action::Undecided.label(),
            Status::NoChanges => "no setpoint changes",
            Status::MeetsSpec => "meets the spec",
        }
    }

    /// Whether the status advises a change to the plant or its spec (the caution goes beside
    /// it).
    pub fn advises_change(self) -> bool {
        matches!(self, Status::Upgrade | Status::Renegotiate | Status::Retune)
    }

    /// A symbol kept in the JSON for the programs that read it since the first summaries; the
    /// HTML and Markdown show the words only.
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

    /// The status of a loop with these changes and this recommendation (none without a spec).
    fn of(recommendation: Option<&Recommendation>, stats: &WeekStats) -> Status {
        match recommendation {
            _ if stats.changes == 0 => Status::NoChanges,
            Some(r) => match r.action {
                Action::None => Status::MeetsSpec,
                Action::Retune => Status::Retune,
                Action::Renegotiate => Status::Renegotiate,
                Action::Upgrade => Status::Upgrade,
                Action::Undecided => Status::Undecided,
            },
            None if stats.judged > 0 && stats.counts.met == stats.judged => Status::MeetsSpec,
            None => Status::Undecided,
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
    /// Whether the status advises a change (retune, renegotiate, upgrade).
    pub advises_change: bool,
    /// The unit of the process gain K (PV unit per OP unit) and of the controller gain Kc (OP
    /// unit per PV unit), for people.
    pub gain_unit: String,
    pub controller_gain_unit: String,
    /// The hash of this loop's settings ([`crate::summary_format::settings_hash`]); the same
    /// as `analyze --json --config F --loop TAG` carries. `None` when the loop has no setup.
    pub settings_hash: Option<String>,
    pub stats: WeekStats,
    /// Changes still being watched when the summary was made; not counted above.
    pub provisional: usize,
    pub model: Option<ModelSummary>,
    /// The analysis core's recommendation, as `analyze --json` prints it.
    pub recommendation: Option<Recommendation>,
    /// The recommendation's numbers, labelled for people.
    pub advice: Vec<Figure>,
    pub telling: Option<TellingEpisode>,
    /// The period's worst misses, worst first, with the commands that reproduce them.
    pub worst_misses: Vec<WorstMiss>,
    /// The period's unreachable changes (no t* exists for them).
    pub unreachable: Vec<UnreachableChange>,
    /// The period's marginal verdicts: listed to watch, never alerted or advised on.
    pub watch: Vec<Watch>,
    pub trend: Vec<TrendWeek>,
    /// The trend for people: weeks without changes run together into one line.
    pub trend_rows: Vec<TrendRow>,
    /// How the loop held its setpoint between changes; `None` with `regulation_missing` saying
    /// why.
    pub regulation: Option<RegulationSection>,
    pub regulation_missing: Option<&'static str>,
    /// Plain sentences about what is missing or odd (no changes, no model, no spec...).
    pub notes: Vec<String>,
    /// Inline SVG of the largest load disturbance (HTML only).
    #[serde(skip)]
    pub disturbance_svg: Option<String>,
    /// Inline SVG of the telling episode (HTML only).
    #[serde(skip)]
    pub episode_svg: Option<String>,
    /// Inline SVG of the trend (HTML only).
    #[serde(skip)]
    pub trend_svg: Option<String>,
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

/// A marginal verdict to watch, with why it is marginal and the step that would decide it.
#[derive(Debug, Clone, Serialize)]
pub struct Watch {
    /// RFC 3339 in the report's time zone.
    pub start: String,
    pub sp_from: f64,
    pub sp_to: f64,
    /// The change with its unit, for people.
    pub change: String,
    pub verdict: Verdict,
    /// The verdict as people read it ([`Verdict::label`]).
    pub verdict_words: &'static str,
    pub min_settling_time_range_s: Option<[f64; 2]>,
    /// Why it is marginal, in words.
    pub reasons: Vec<String>,
    /// The experiment that would decide it, when the model can say.
    pub plan: Option<String>,
}

fn watch_list(week: &[&Episode], pv_unit: &str, tz: &TimeZone) -> Vec<Watch> {
    week.iter()
        .filter(|e| e.result.is_marginal())
        .map(|e| {
            let r = &e.result;
            Watch {
                start: local(e.row.start_ms, tz),
                sp_from: r.sp_from,
                sp_to: r.sp_to,
                change: evidence::change_words(r.sp_from, r.sp_to, pv_unit),
                verdict: r.verdict,
                verdict_words: r.verdict.label(),
                min_settling_time_range_s: r.min_settling_time_range_s,
                reasons: r.confidence_reasons.clone(),
                plan: r.deciding_step.as_ref().map(|x| x.plan.clone()),
            }
        })
        .collect()
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
    /// The change with its unit, for people.
    pub change: String,
    pub settling_time_s: Option<f64>,
    pub min_settling_time_s: Option<f64>,
    /// The actuator's reach from the operating point (PV units), when the model gave one.
    pub reach: Option<f64>,
    /// The PV at the change, where the fastest response starts.
    pub start_pv: Option<f64>,
    pub overshoot_pct: f64,
    pub saturation_duty: f64,
    pub op_start: f64,
    pub op_headroom: f64,
    /// The model in force when the change ended, for the fastest-response curve.
    pub model: Option<Fopdt>,
}

/// Builds one loop's section over the last of `periods` (the others are its trend), adding
/// what is odd about its data to `data_quality`. `config_given`: whether the report had a
/// configuration at all.
pub(super) fn build_loop(
    l: &LoopInput,
    periods: &[Period],
    tz: &TimeZone,
    (config_given, sources): (bool, &Sources),
    data_quality: &mut Vec<String>,
) -> LoopSection {
    let period = periods.last().expect("at least one period");
    let (episodes, unreadable) = trend::read_episodes(&l.episodes);
    if unreadable > 0 {
        data_quality.push(quality::unreadable(&l.tag, unreadable));
    }
    let week = trend::final_in(&episodes, period);
    let provisional = episodes
        .iter()
        .filter(|e| e.starts_in(period) && !e.row.is_final)
        .count();
    let stats = trend::week_stats(&week);

    // The model in force at the end of the period.
    let model_row = trend::model_at(&l.models, period.to_ms());
    let model = model_row.map(|m| model_summary(m, &l.models, periods, tz));
    let recommendation = l.setup.as_ref().filter(|_| !week.is_empty()).map(|setup| {
        let results: Vec<EpisodeResult> = week.iter().map(|e| e.result.clone()).collect();
        recommend(
            &results,
            model_row.map(|m| m.model()).as_ref(),
            setup,
            l.sample_s.unwrap_or(1.0),
        )
    });
    let status = Status::of(recommendation.as_ref(), &stats);
    let notes = quality::loop_notes(&LoopFacts {
        changes: week.len(),
        has_model: model_row.is_some(),
        has_setup: l.setup.is_some(),
        configured: l.configured,
        provisional,
        inconclusive: stats.counts.inconclusive,
    });
    data_quality.extend(quality::coverage_findings(
        &l.tag,
        &l.coverage,
        l.configured,
    ));
    // Without any configuration the report says so once, not per loop.
    if !l.configured && l.setup.is_none() && config_given {
        data_quality.push(quality::not_configured(&l.tag));
    }

    let units = crate::analysis::Units {
        pv: l.pv_unit.clone(),
        op: l.op_unit.clone(),
    };
    let advice = recommendation
        .as_ref()
        .map(|r| advice_figures(r, l.setup.as_ref(), &units))
        .unwrap_or_default();
    let telling = pick_telling(&week, status).map(|(e, why)| {
        let m = trend::model_at(&l.models, e.row.end_ms + 1).or(model_row);
        telling_episode(e, why, m.map(|m| m.model().fopdt()), &l.pv_unit, tz)
    });
    let trend = trend::trend(&episodes, periods, &l.models);
    let recover_within_s = l.setup.as_ref().and_then(|s| s.spec.recover_within_s);
    let (regulation, regulation_missing) =
        match regulation::section(&l.regulation, periods, recover_within_s, &units, tz) {
            Ok(r) => (Some(r), None),
            Err(why) => (None, Some(why)),
        };
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
        advises_change: status.advises_change(),
        gain_unit: units.process_gain(),
        controller_gain_unit: units.controller_gain(),
        settings_hash: l
            .setup
            .as_ref()
            .map(|s| crate::summary_format::settings_hash([s])),
        stats,
        provisional,
        model,
        recommendation,
        advice,
        telling,
        worst_misses: evidence::worst_misses(
            &week,
            &l.tag,
            &l.pv_unit,
            l.setup.as_ref(),
            sources,
            tz,
        ),
        unreachable: evidence::unreachable(&week, &l.pv_unit, tz),
        watch: watch_list(&week, &l.pv_unit, tz),
        trend_rows: trend::rows(&trend),
        trend,
        regulation,
        regulation_missing,
        notes,
        disturbance_svg: None,
        episode_svg: None,
        trend_svg: None,
    }
}

/// The model in force at the end of the period, with how it moved since the start of the trend
/// window (or since its first fit inside the window).
fn model_summary(
    m: &ModelRow,
    models: &[ModelRow],
    periods: &[Period],
    tz: &TimeZone,
) -> ModelSummary {
    let (first, period) = match periods {
        [first, .., last] => (first, last),
        [only] => (only, only),
        [] => unreachable!("at least one period"),
    };
    let earlier = trend::model_at(models, first.from_ms())
        .map(|e| (e, format!("the start of {}", first.label)))
        .or_else(|| {
            models
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
}

fn telling_episode(
    e: &Episode,
    why: String,
    model: Option<Fopdt>,
    pv_unit: &str,
    tz: &TimeZone,
) -> TellingEpisode {
    let r = &e.result;
    TellingEpisode {
        start_ms: e.row.start_ms,
        end_ms: e.row.end_ms,
        start: local(e.row.start_ms, tz),
        why,
        verdict: r.verdict,
        verdict_words: r.verdict.label(),
        reason: r.reason.clone(),
        sp_from: r.sp_from,
        sp_to: r.sp_to,
        change: evidence::change_words(r.sp_from, r.sp_to, pv_unit),
        settling_time_s: r.settling_time_s,
        min_settling_time_s: r.min_settling_time_s,
        reach: r.reach,
        start_pv: r.start_pv,
        overshoot_pct: r.overshoot_pct,
        saturation_duty: r.saturation_duty,
        op_start: r.op_start,
        op_headroom: r.op_headroom,
        model,
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
        Status::Upgrade | Status::Renegotiate => slowest(&|e| e.result.verdict.is_actuator_miss())
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

/// The recommendation's numbers with labels and units, for the HTML and Markdown tables.
fn advice_figures(
    r: &Recommendation,
    setup: Option<&LoopSetup>,
    people: &crate::analysis::Units,
) -> Vec<Figure> {
    use crate::analysis::advice::{actuator_figures, retune_figures};
    let mut out: Vec<(String, String)> = r
        .retune
        .as_ref()
        .map(|rt| retune_figures(rt, people))
        .unwrap_or_default()
        .into_iter()
        .map(|(label, value)| (label.to_string(), value))
        .collect();
    out.extend(
        r.per_direction
            .iter()
            .flat_map(|e| actuator_figures(e, people)),
    );
    if let Some(s) = setup.map(|s| s.spec.settle_within_s)
        && !out.is_empty()
    {
        out.push(("Spec settling time".to_string(), human_duration(s)));
    }
    out.extend(
        r.cautions
            .iter()
            .map(|c| ("Check before acting".to_string(), c.clone())),
    );
    out.into_iter()
        .map(|(label, value)| Figure { label, value })
        .collect()
}
