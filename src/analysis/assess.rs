//! One loop's analysis end to end — the answer to "retune, or is the actuator what makes the
//! spec impossible?": segment the data into setpoint changes, score each change model-free,
//! identify the process from them, give each change its verdict ([`super::verdict`]) and the
//! loop its recommendation ([`super::advice`]).

use super::bound::{self, Bound, Change, StartState};
use super::confidence::{self, Confidence, Evidence, Stake};
use super::controller::ControllerSetup;
use super::feasibility;
use super::identify::{self, IdSegment, Model, Refusal};
use super::metrics::{self, OpRange, Response};
use super::quality::{self, Effect, Finding, Survey};
use super::regulation::{self, Busy, Hold, Regulation, RegulationSettings};
use super::segment::{self, EpisodeWindow, SegmentSettings};
use super::verdict::{self, Capability, Context, Facts};
use super::{LoopSetup, Series, Spec, Units, stats};
use serde::Serialize;

pub use super::advice::{Action, ActuatorEvidence, Recommendation, recommend};
pub use super::verdict::{EpisodeResult, Verdict, VerdictCounts};

/// Facts about the data themselves.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DataSummary {
    pub samples: usize,
    pub duration_s: f64,
    pub median_sample_s: f64,
    pub gaps: usize,
    /// Robust estimate of the PV measurement noise (standard deviation).
    pub pv_noise_sd: f64,
    pub sp_deadband: f64,
    pub changes_in_manual: usize,
    pub changes_in_gaps: usize,
    pub returned_excursions: usize,
    /// Changes that settled faster than the model's bound for them (the model was wrong there;
    /// no such bound is reported).
    pub bounds_beaten: usize,
    /// Conclusive changes whose verdict is marginal.
    pub marginal: usize,
    pub quality: DataQuality,
}

/// What in the record makes verdicts doubtful or impossible.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DataQuality {
    /// Loop-wide findings (judged against the median change's band); each change lists the
    /// findings that touch it.
    pub findings: Vec<Finding>,
    /// Changes a finding made inconclusive.
    pub changes_unjudgeable: usize,
    /// Conclusive changes a finding made marginal.
    pub changes_downgraded: usize,
}

/// The full analysis of one loop. Field names are a contract (JSON output).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoopReport {
    #[serde(rename = "loop")]
    pub tag: String,
    pub model: Option<Model>,
    /// Why there is no model, when there is none.
    pub model_refusal: Option<String>,
    pub spec: Spec,
    pub op_range: OpRange,
    /// The units people read the loop's numbers in.
    pub units: Units,
    /// The controller as described, when it is.
    pub controller: Option<ControllerSetup>,
    pub data: DataSummary,
    pub counts: VerdictCounts,
    pub episodes: Vec<EpisodeResult>,
    pub recommendation: Recommendation,
    /// How the loop held its setpoint between changes.
    pub regulation: Regulation,
}

/// Episodes, model and data facts of one loop: everything but the recommendation.
#[derive(Debug, Clone, PartialEq)]
pub struct Assessment {
    pub episodes: Vec<EpisodeResult>,
    pub model: Result<Model, Refusal>,
    pub data: DataSummary,
    /// The held-setpoint stretches between the responses to changes.
    pub holds: Vec<Hold>,
}

/// Analyses one loop's data end to end: [`assess`] then [`recommend`].
pub fn analyze_loop(series: &Series, setup: &LoopSetup) -> LoopReport {
    let a = assess(series, setup);
    let mut recommendation = recommend(
        &a.episodes,
        a.model.as_ref().ok(),
        setup,
        a.data.median_sample_s,
    );
    let regulation = regulation::regulation(
        series,
        &a.holds,
        &regulation_settings(setup, a.model.as_ref().ok()),
    );
    recommendation
        .cautions
        .extend(regulation::words::caution(&regulation.oscillation));
    LoopReport {
        tag: setup.tag.clone(),
        model: a.model.as_ref().ok().copied(),
        model_refusal: a.model.as_ref().err().map(Refusal::to_string),
        spec: setup.spec,
        op_range: setup.op,
        units: setup.units.clone(),
        controller: setup.controller,
        data: a.data,
        counts: VerdictCounts::of(&a.episodes),
        episodes: a.episodes,
        recommendation,
        regulation,
    }
}

/// What the regulation analysis of a loop takes from its setup and model.
pub fn regulation_settings(setup: &LoopSetup, model: Option<&Model>) -> RegulationSettings {
    RegulationSettings {
        op: setup.op,
        hold_band: setup.spec.hold_band,
        recover_within_s: setup.spec.recover_within_s,
        dead_time_s: model.map(|m| m.dead_time_s),
    }
}

/// The holds of a series between its setpoint changes: each change keeps the loop busy until
/// its response settled, or to the end of its window when it never did (or was not scored).
pub(crate) fn holds_between(
    series: &Series,
    windows: &[EpisodeWindow],
    scored: &[Scored],
    settings: &SegmentSettings,
) -> Vec<Hold> {
    let mut next = scored.iter().peekable();
    let busy: Vec<Busy> = windows
        .iter()
        .map(|w| busy_of(series, w, next.next_if(|s| s.w.start == w.start)))
        .collect();
    regulation::holds(series, &busy, settings.max_gap_s, settings.deadband)
}

/// How long a change keeps the loop busy: until its response settled (`scored`, when it was
/// scored and settled), else to the end of its window.
pub(crate) fn busy_of(series: &Series, w: &EpisodeWindow, scored: Option<&Scored>) -> Busy {
    let t = series.time_s();
    let from_s = t[w.start];
    // The window's last sample is still busy when it never settled.
    let window_end = t.get(w.end).copied().unwrap_or(f64::INFINITY);
    let settled = scored.and_then(|s| s.m.settling_time_s);
    Busy {
        from_s,
        until_s: settled.map_or(window_end, |ts| from_s + ts),
    }
}

/// Scores every setpoint change, identifies the process and gives each change its verdict.
pub fn assess(series: &Series, setup: &LoopSetup) -> Assessment {
    let t = series.time_s();
    let n = series.len();
    let median_sample_s = median_interval(t);
    let max_abs_sp = series.sp().iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let period = setup.options.expected_period_s.unwrap_or(median_sample_s);
    let seg_settings = segment_settings(setup, max_abs_sp, period);
    let seg = segment::segment(series, &seg_settings);

    // Model-free scores first; they also bound the data used for identification.
    let scored: Vec<Scored> = seg
        .windows
        .iter()
        .filter_map(|w| score_window(series, w, setup))
        .collect();
    let pool: Vec<PoolEntry> = scored
        .iter()
        .filter_map(|s| PoolEntry::new(series, s, setup))
        .collect();
    let models = identify_pool(&pool, setup);
    let holds = holds_between(series, &seg.windows, &scored, &seg_settings);
    let pv_noise_sd = pv_noise_sd(series.pv());
    let survey = quality::survey(series, setup.op, pv_noise_sd);
    let mut knowledge = Knowledge {
        models: models.as_ref().ok(),
        survey: &survey,
        beaten: Beaten::default(),
    };
    let episodes: Vec<EpisodeResult> = scored
        .iter()
        .map(|s| {
            let r = judge(series, s, setup, &knowledge);
            knowledge.beaten.record(&r);
            r
        })
        .collect();
    let typical_band = typical_band(&episodes, setup);
    let touched = |effect: Effect| {
        episodes
            .iter()
            .filter(|e| e.quality.iter().any(|f| f.effect == effect))
            .filter(|e| effect == Effect::Inconclusive || e.confidence.is_some())
            .count()
    };
    let quality = DataQuality {
        findings: survey.findings(
            0,
            usize::MAX,
            typical_band,
            models.as_ref().ok().map(|ms| ms.model.dead_time_s),
        ),
        changes_unjudgeable: touched(Effect::Inconclusive),
        changes_downgraded: touched(Effect::Downgrade),
    };
    Assessment {
        data: DataSummary {
            samples: n,
            duration_s: if n > 0 { t[n - 1] - t[0] } else { 0.0 },
            median_sample_s,
            gaps: seg.gaps,
            pv_noise_sd,
            sp_deadband: seg_settings.deadband,
            changes_in_manual: seg.changes_in_manual,
            changes_in_gaps: seg.changes_in_gaps,
            returned_excursions: seg.returned_excursions,
            bounds_beaten: episodes.iter().filter(|e| e.bound_beaten).count(),
            marginal: episodes
                .iter()
                .filter(|e| e.confidence == Some(Confidence::Marginal))
                .count(),
            quality,
        },
        episodes,
        model: models.map(|ms| ms.model),
        holds,
    }
}

/// The settling band (half-width, PV units) of the median change, for the loop-wide quality notes.
fn typical_band(episodes: &[EpisodeResult], setup: &LoopSetup) -> f64 {
    let mut steps: Vec<f64> = episodes
        .iter()
        .map(|e| (e.sp_to - e.sp_from).abs())
        .collect();
    setup.spec.band_abs(stats::median_in_place(&mut steps))
}

/// Median interval between samples, 0 for fewer than two samples.
pub(crate) fn median_interval(t: &[f64]) -> f64 {
    let mut dts: Vec<f64> = t.windows(2).map(|w| w[1] - w[0]).collect();
    stats::median_in_place(&mut dts)
}

/// Segmentation settings: what the setup gives, else derived — the SP deadband from the largest
/// |SP| seen, hold and gap limits from the sample period (the loop's expected one, or without
/// it the median sample interval of the data).
pub(crate) fn segment_settings(setup: &LoopSetup, max_abs_sp: f64, period: f64) -> SegmentSettings {
    let opts = &setup.options;
    SegmentSettings {
        deadband: opts.sp_deadband_for(max_abs_sp),
        sp_hold_s: opts.sp_hold_for(period),
        max_gap_s: opts.max_gap_for(period),
        horizon_s: setup.horizon_s(),
    }
}

/// One episode's contribution to identification, with what bounds the search.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct PoolEntry {
    pub(crate) segment: IdSegment,
    /// When the PV first covered 10 % of the change (relative to the change), if it did.
    pub(crate) t10_s: Option<f64>,
    pub(crate) noise: f64,
    pub(crate) delta: f64,
}

impl PoolEntry {
    pub(crate) fn new(series: &Series, s: &Scored, setup: &LoopSetup) -> Option<PoolEntry> {
        Some(PoolEntry {
            segment: id_segment(series, s, setup)?,
            t10_s: s.m.t10_s,
            noise: s.noise,
            delta: s.w.delta(),
        })
    }
}

/// The identified model with its plausible variants: the same identification on episodes drawn
/// again with replacement from the pool (a bootstrap over episodes), whose spread is the model's
/// uncertainty.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelSet {
    pub model: Model,
    pub variants: Vec<Model>,
}

impl ModelSet {
    /// Bootstrap variants drawn per identification.
    pub const VARIANTS: usize = 16;

    /// A model without variants (carried over from a store, where only the model is kept).
    pub fn alone(model: Model) -> ModelSet {
        ModelSet {
            model,
            variants: Vec::new(),
        }
    }

    /// What the deciding experiment is sized from, with `reach_hi` the top of the reach range.
    fn plausible(&self, reach_hi: f64) -> confidence::Plausible {
        let all = || std::iter::once(&self.model).chain(&self.variants);
        confidence::Plausible {
            reach_hi,
            time_constant_hi_s: all().map(|m| m.time_constant_s).fold(0.0, f64::max),
            dead_time_hi_s: all().map(|m| m.dead_time_s).fold(0.0, f64::max),
        }
    }
}

/// Identifies the loop's model from a pool of episodes (choosing its family), with its bootstrap
/// variants: the same family fitted again to episodes drawn with replacement.
pub(crate) fn identify_pool(pool: &[PoolEntry], setup: &LoopSetup) -> Result<ModelSet, Refusal> {
    let mut noises: Vec<f64> = pool.iter().map(|p| p.noise).collect();
    let noise = stats::median_in_place(&mut noises);
    // The PV cannot respond before the dead time: the earliest 10 % crossing of a change well
    // above the noise bounds the dead-time search.
    let max_dead_time = pool
        .iter()
        .filter(|p| 0.1 * p.delta.abs() > 4.0 * p.noise)
        .filter_map(|p| p.t10_s)
        .fold(None, |m: Option<f64>, t| Some(m.map_or(t, |m| m.min(t))))
        .map(|t| 1.2 * t);
    let op_range = (setup.op.min, setup.op.max);
    let segments = || pool.iter().map(|p| &p.segment);
    let settings = &setup.options.identify;
    let model = identify::identify(segments(), noise, op_range, max_dead_time, settings)?;
    // Deterministic draws (the core has no clock): seeded by the pool's size.
    let variants = identify::replicates(
        &model,
        segments(),
        noise,
        op_range,
        max_dead_time,
        settings,
        ModelSet::VARIANTS,
        0x5eed ^ pool.len() as u64,
    );
    Ok(ModelSet { model, variants })
}

/// A window with its model-free metrics.
pub(crate) struct Scored {
    pub(crate) w: EpisodeWindow,
    pub(crate) m: metrics::StepMetrics,
    pub(crate) op_start: f64,
    /// PV noise estimated from this window and the samples just before it.
    pub(crate) noise: f64,
    /// Samples averaged (centred) before scoring; 1 when the PV is quiet enough as it is.
    pub(crate) filter_len: usize,
    /// PV noise left after that averaging.
    pub(crate) residual_noise: f64,
}

/// Scores one window model-free. Everything it uses comes from the window itself and at most
/// 50 samples before it, so the live tracker and the offline analysis score a window alike.
pub(crate) fn score_window(
    series: &Series,
    w: &EpisodeWindow,
    setup: &LoopSetup,
) -> Option<Scored> {
    let band = setup.spec.band_fraction(w.delta());
    let margin = crate::units::pct_to_fraction(setup.options.saturation_margin_pct);
    let r = w.start..w.end;
    let noise_from = w.pre_start.max(w.start.saturating_sub(50));
    let noise = pv_noise_sd(&series.pv()[noise_from..w.end]);
    let median_dt = median_interval(&series.time_s()[r.clone()]);
    let op = series.op();
    let pre_from = w.pre_start.max(w.start.saturating_sub(10));
    let op_start = if pre_from < w.start {
        op[pre_from..w.start].iter().sum::<f64>() / (w.start - pre_from) as f64
    } else {
        op[w.start]
    };
    // The needed OP direction is judged from the data here (the model may not exist yet): the
    // side the OP moved to on average during the window.
    let mean_after = op[r.clone()].iter().sum::<f64>() / r.len() as f64;
    let dir = if mean_after >= op_start { 1.0 } else { -1.0 };
    let filter_len = smoothing_len(
        noise,
        band * w.delta().abs(),
        setup.spec.settle_within_s,
        median_dt,
    );
    let pv = centred_mean(&series.pv()[r.clone()], filter_len);
    let m = metrics::step_metrics(
        Response {
            time_s: &series.time_s()[r.clone()],
            sp: &series.sp()[r.clone()],
            pv: &pv,
            op: &op[r],
        },
        w.sp_from,
        w.sp_to,
        band,
        setup.op,
        margin,
        dir,
    )?;
    Some(Scored {
        w: *w,
        m,
        op_start,
        noise,
        filter_len,
        residual_noise: noise / (filter_len as f64).sqrt(),
    })
}

/// How many samples to average (odd, centred) so that measurement noise alone almost never
/// carries the PV out of the settling band: the averaged noise must stay below a fifth of the
/// band's half-width (about one sample in a million crosses it). Averaging never spans more than a
/// tenth of the spec time, so it cannot hide a slow response.
fn smoothing_len(noise: f64, band_abs: f64, spec_s: f64, median_dt: f64) -> usize {
    if noise <= 0.0 || band_abs <= 0.0 {
        return 1;
    }
    let needed = ((5.0 * noise / band_abs).powi(2)).ceil() as usize;
    let cap = if median_dt > 0.0 {
        ((0.1 * spec_s / median_dt).floor() as usize).max(1)
    } else {
        1
    };
    let n = needed.clamp(1, cap);
    if n % 2 == 0 { n + 1 } else { n }
}

/// Centred moving average of odd length `len`, shrinking at the ends.
fn centred_mean(x: &[f64], len: usize) -> Vec<f64> {
    if len <= 1 {
        return x.to_vec();
    }
    let half = len / 2;
    let mut prefix = Vec::with_capacity(x.len() + 1);
    prefix.push(0.0);
    for v in x {
        prefix.push(prefix.last().copied().unwrap_or(0.0) + v);
    }
    (0..x.len())
        .map(|i| {
            let a = i.saturating_sub(half);
            let b = (i + half + 1).min(x.len());
            (prefix[b] - prefix[a]) / (b - a) as f64
        })
        .collect()
}

/// The stretch of one episode used for identification: some undisturbed data before the change,
/// and after it up to a few settling times (or the whole window if it never settled).
pub(crate) fn id_segment(series: &Series, s: &Scored, setup: &LoopSetup) -> Option<IdSegment> {
    let t = series.time_s();
    let t0 = t[s.w.start];
    let post_cap = match s.m.settling_time_s {
        Some(ts) => (3.0 * ts).max(setup.spec.settle_within_s),
        None => f64::INFINITY,
    };
    let end = s.w.start + t[s.w.start..s.w.end].partition_point(|&x| x <= t0 + post_cap);
    let post = t[end - 1] - t0;
    let pre_from =
        s.w.pre_start + t[s.w.pre_start..s.w.start].partition_point(|&x| x < t0 - 0.25 * post);
    if end - s.w.start < 8 {
        return None;
    }
    let r = pre_from..end;
    identify::build_segment(
        &t[r.clone()],
        &series.pv()[r.clone()],
        &series.op()[r],
        setup.op.min,
        setup.op.max,
        setup.options.identify.max_points_per_episode,
    )
}

/// What is known about the loop when a change is judged: the model with its plausible variants,
/// the survey of the data, and the changes whose settling beat the model's bound so far.
pub(crate) struct Knowledge<'a> {
    pub(crate) models: Option<&'a ModelSet>,
    pub(crate) survey: &'a Survey,
    pub(crate) beaten: Beaten,
}

/// Gives one scored change its verdict: gathers the facts (with the bound of the model and its
/// variants when there is a model, and the data-quality findings), lets [`verdict::decide`]
/// decide, reads the confidence ([`confidence`]) and records the result with its reasons.
pub(crate) fn judge(
    series: &Series,
    s: &Scored,
    setup: &LoopSetup,
    k: &Knowledge,
) -> EpisodeResult {
    let t = series.time_s();
    let (w, m) = (&s.w, &s.m);
    let delta = w.delta();
    let t0 = t[w.start];
    let spec_s = setup.spec.settle_within_s;
    let band_abs = setup.spec.band_abs(delta);
    let state = StartState::read(t, series.pv(), w.pre_start, w.start);
    let change = Change {
        state,
        sp_to: w.sp_to,
        band_abs,
        op_start: s.op_start,
    };
    let rising = w.sp_to >= state.pv;
    let point = k.models.map(|ms| {
        let b = bound::bound(&ms.model, &change, setup.op, spec_s);
        let variants: Vec<Bound> = ms
            .variants
            .iter()
            .map(|v| bound::bound(v, &change, setup.op, spec_s))
            .collect();
        (b, bound::spread(&b, &variants))
    });
    let quality = k.survey.findings(
        w.start,
        w.end,
        band_abs,
        k.models.map(|ms| ms.model.dead_time_s),
    );
    let unfit = |about_pv: bool| {
        quality
            .iter()
            .find(|f| f.effect == Effect::Inconclusive && f.issue.about_pv() == about_pv)
    };
    let (pv_unfit, op_unfit) = (unfit(true), unfit(false));
    let facts = Facts {
        settling_time_s: m.settling_time_s,
        overshoot_pct: m.overshoot_pct,
        covered_s: t[w.end - 1] - t0,
        window_end: w.end_reason,
        distance: (w.sp_to - state.pv).abs(),
        band_abs,
        residual_noise: s.residual_noise,
        capability: point.as_ref().map(|(b, _)| Capability {
            reach: b.reach,
            fastest_s: b.fastest_s,
        }),
        pv_unfit: pv_unfit.is_some(),
        op_unfit: op_unfit.is_some(),
    };
    let judgement = verdict::decide(&facts, &setup.spec);
    let verdict = judgement.verdict();
    let beaten_now = facts.beats_bound();
    let unfit_words = match judgement.ground {
        verdict::Ground::DataUnfit => pv_unfit.or(op_unfit).map(|f| f.describe("")),
        _ => None,
    };
    let doubts = confidence::doubts(
        &quality,
        &Stake {
            verdict,
            settling_time_s: m.settling_time_s,
            fastest_s: point.as_ref().and_then(|(b, _)| b.fastest_s),
            spec_s,
        },
    );
    let (conf, reasons) = confidence::confidence(&Evidence {
        verdict,
        spread: point.as_ref().map(|(_, sp)| sp),
        distance: facts.distance,
        spec_s,
        saturation_duty: m.saturation_duty,
        doubts: &doubts,
        beaten: k.beaten.towards(rising),
    });
    let deciding_step = match (conf, k.models, &point) {
        (Some(Confidence::Marginal), Some(ms), Some((_, sp))) if reasons.len() > doubts.len() => {
            Some(confidence::deciding_step(
                &state,
                s.op_start,
                w.sp_to - state.pv,
                spec_s,
                &ms.plausible(sp.reach[1]),
                &setup.units,
            ))
        }
        _ => None,
    };
    let context = Context {
        pv_noise_sd: s.noise,
        op_start: s.op_start,
        data_problem: unfit_words.as_deref(),
        units: &setup.units,
    };
    let b = point.as_ref().map(|(b, _)| b).filter(|_| !beaten_now);
    EpisodeResult {
        start_s: t0,
        end_s: t[w.end - 1],
        sp_from: w.sp_from,
        sp_to: w.sp_to,
        shape: w.shape,
        window_end: w.end_reason,
        samples: w.end - w.start,
        settling_time_s: m.settling_time_s,
        overshoot_pct: m.overshoot_pct,
        rise_time_s: m.rise_time_s,
        iae_per_delta_s: m.iae_per_delta_s,
        saturation_duty: m.saturation_duty,
        pv_smoothing_samples: s.filter_len,
        op_start: s.op_start,
        op_headroom: point
            .as_ref()
            .map(|(b, _)| b.headroom)
            .filter(|h| h.is_finite())
            .unwrap_or_else(|| {
                // Without a model, the direction the OP went.
                let dir = if m.peak_op >= s.op_start { 1.0 } else { -1.0 };
                feasibility::headroom(s.op_start, dir, setup.op.min, setup.op.max)
            }),
        peak_op: m.peak_op,
        min_settling_time_s: b.and_then(|b| b.fastest_s),
        reach: b.map(|b| b.reach).filter(|r| r.is_finite()),
        required_op_limit: b.and_then(|b| b.required_op_limit),
        capacity_ratio: b.and_then(|b| b.capacity_ratio),
        verdict,
        reason: verdict::explain(&judgement, &facts, &setup.spec, &context),
        start_pv: Some(state.pv),
        pv_moving: state.moving(),
        confidence: conf,
        confidence_reasons: reasons,
        min_settling_time_range_s: point
            .as_ref()
            .filter(|_| !beaten_now)
            .and_then(|(_, sp)| sp.fastest_s),
        reach_range: point
            .as_ref()
            .map(|(_, sp)| sp.reach)
            .filter(|r| r.iter().all(|x| x.is_finite())),
        capacity_ratio_range: point.as_ref().and_then(|(_, sp)| sp.capacity_ratio),
        bound_beaten: beaten_now,
        quality,
        deciding_step,
    }
}

/// Changes so far whose settling beat the model's bound, by the direction the PV had to go.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub(crate) struct Beaten {
    rising: usize,
    falling: usize,
}

impl Beaten {
    /// Earlier changes in this direction that beat the bound.
    pub(crate) fn towards(&self, rising: bool) -> usize {
        if rising { self.rising } else { self.falling }
    }

    /// Counts a judged change.
    pub(crate) fn record(&mut self, r: &EpisodeResult) {
        if r.bound_beaten {
            if r.sp_to >= r.start_pv.unwrap_or(r.sp_from) {
                self.rising += 1;
            } else {
                self.falling += 1;
            }
        }
    }
}

/// Robust PV noise estimate from first differences: σ ≈ 1.4826·MAD(Δy)/√2. Smooth process motion
/// barely moves the median of the differences, so this reads the measurement noise.
pub fn pv_noise_sd(pv: &[f64]) -> f64 {
    if pv.len() < 3 {
        return 0.0;
    }
    let mut d: Vec<f64> = pv.windows(2).map(|w| w[1] - w[0]).collect();
    stats::robust_sd(&mut d) / std::f64::consts::SQRT_2
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::sim::{LoopSim, LoopSimConfig, Process, series};
    use crate::analysis::{OpRange, Verdict};

    /// The jacketed vessel (K 0.8, τ 300 s, θ 30 s, ambient 20) whose valve tops out at 60 %, so
    /// the PV can reach at most 68: from 50 up to 75 (beyond reach: the PV settles on its plateau
    /// at 68), then down to 60, then up to 64.
    fn plateau_run(quantum: Option<f64>) -> (Series, LoopSetup) {
        let mut sim = LoopSim::new(LoopSimConfig::jacketed_vessel(60.0, 7));
        let schedule = [(600.0, 75.0), (6600.0, 60.0), (10_200.0, 64.0)];
        let mut samples = sim.run(&schedule, 13_800.0, 2.0);
        if let Some(q) = quantum {
            for s in &mut samples {
                s.pv = (s.pv / q).round() * q;
            }
        }
        let mut setup = LoopSetup::new("TIC-1", Spec::within(600.0));
        setup.op = OpRange {
            min: 0.0,
            max: 60.0,
        };
        (series(&samples, 0.0), setup)
    }

    #[test]
    fn after_an_unreachable_change_the_next_bound_starts_from_the_plateau() {
        let (s, setup) = plateau_run(None);
        let r = analyze_loop(&s, &setup);
        let [up, down, _] = &r.episodes[..] else {
            panic!("three changes: {:#?}", r.episodes);
        };
        assert_eq!(up.verdict, Verdict::Unreachable, "{}", up.reason);
        let plateau = Process::JACKETED_VESSEL.bias + Process::JACKETED_VESSEL.gain * 60.0;
        let start = down.start_pv.unwrap();
        assert!(
            (start - plateau).abs() < 0.2,
            "start PV {start} vs {plateau}"
        );
        // Closed form of DESIGN.md on the true plant from the plateau: the OP may fall by its
        // whole 60 %, R = 0.8·60 = 48; to go 68 − 60 − 0.02·15 = 7.7;
        // t* = 30 + 300·ln(48 / 40.3) ≈ 82 s. From sp_from (75 → 60, to go 14.7) it would be
        // 30 + 300·ln(48 / 33.3) ≈ 140 s.
        let truth = 30.0 + 300.0 * (48.0_f64 / (48.0 - (plateau - 60.0 - 0.3))).ln();
        let t_star = down.min_settling_time_s.unwrap();
        assert!(
            (t_star - truth).abs() <= 0.15 * truth,
            "t* {t_star} vs {truth} (true plant from the plateau)"
        );
        for e in &r.episodes {
            assert!(e.confidence.is_some() || e.verdict == Verdict::Inconclusive);
            if let (Some(ts), Some(t)) = (e.settling_time_s, e.min_settling_time_s) {
                assert!(ts >= t, "a reported bound beaten: {e:#?}");
            }
        }
    }

    #[test]
    fn marginal_changes_drive_no_advice() {
        let (s, setup) = plateau_run(None);
        let a = assess(&s, &setup);
        let model = a.model.as_ref().ok();
        let advised = recommend(&a.episodes, model, &setup, 2.0);
        assert_ne!(advised.action, Action::None, "{}", advised.summary);
        // The same changes, every miss marked marginal: nothing left to act on.
        let mut marked = a.episodes.clone();
        for e in marked.iter_mut().filter(|e| e.verdict.is_miss()) {
            e.confidence = Some(Confidence::Marginal);
        }
        let r = recommend(&marked, model, &setup, 2.0);
        assert!(
            matches!(r.action, Action::None | Action::Undecided),
            "{r:#?}"
        );
        assert!(r.summary.contains("listed to watch"), "{}", r.summary);
        assert!(r.actuator.is_none() && r.retune.is_none());
    }

    #[test]
    fn a_pv_quantised_as_coarsely_as_the_band_makes_every_change_inconclusive() {
        // Steps of 0.5 against bands of ±0.14 … ±0.5: the settling time is left to rounding.
        let (s, setup) = plateau_run(Some(0.5));
        let r = analyze_loop(&s, &setup);
        assert!(!r.episodes.is_empty());
        for e in &r.episodes {
            assert_eq!(e.verdict, Verdict::Inconclusive, "{e:#?}");
            assert!(e.reason.contains("steps of 0.5"), "{}", e.reason);
        }
        assert_eq!(r.data.quality.changes_unjudgeable, r.episodes.len());
        assert!(
            r.data
                .quality
                .findings
                .iter()
                .any(|f| matches!(f.issue, quality::Issue::QuantisedPv { .. }))
        );
    }

    #[test]
    fn a_frozen_pv_makes_the_change_it_touches_inconclusive() {
        let (s, setup) = plateau_run(None);
        // The transmitter sticks for 20 minutes during the 60 → 64 change.
        let t = s.time_s().to_vec();
        let mut pv = s.pv().to_vec();
        let from = t.partition_point(|&x| x < 10_300.0);
        let to = t.partition_point(|&x| x < 11_500.0);
        let stuck = pv[from];
        pv[from..to].fill(stuck);
        let s = Series::new(t, s.sp().to_vec(), pv, s.op().to_vec(), None).unwrap();
        let r = analyze_loop(&s, &setup);
        let last = r.episodes.last().unwrap();
        assert_eq!(last.verdict, Verdict::Inconclusive, "{last:#?}");
        assert!(
            last.reason.contains("the PV stayed at exactly"),
            "{}",
            last.reason
        );
        assert_ne!(r.episodes[1].verdict, Verdict::Inconclusive);
    }
}
