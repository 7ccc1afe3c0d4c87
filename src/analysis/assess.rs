//! Verdicts per episode and the loop's recommendation — the answer to "retune, or is the
//! actuator what makes the spec impossible?".
//!
//! An episode is `met` when it settled within the spec time with overshoot within spec. Otherwise
//! it is `unreachable` when |Δ| exceeds what the actuator can reach from the operating point,
//! else `actuator_limited` when even the fastest possible response t* is slower than the spec,
//! else `tuning_limited`. It is `inconclusive` when the window ended before the spec time (next
//! change, data gap, manual, end of data), the band is inside the PV noise, or a missed episode
//! has no usable model to judge it by.

use super::feasibility::{self, Reach};
use super::identify::{self, IdSegment, Model, Refusal};
use super::metrics::{self, OpRange, Response};
use super::segment::{self, ChangeShape, EpisodeWindow, SegmentSettings, WindowEnd};
use super::tuning::{self, PiSuggestion};
use super::{CAUTION, LoopSetup, Series, Spec};
use serde::{Deserialize, Serialize};

/// The outcome of one setpoint change.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    Met,
    TuningLimited,
    ActuatorLimited,
    Unreachable,
    Inconclusive,
}

impl Verdict {
    pub const ALL: [Verdict; 5] = [
        Verdict::Met,
        Verdict::TuningLimited,
        Verdict::ActuatorLimited,
        Verdict::Unreachable,
        Verdict::Inconclusive,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Met => "met",
            Verdict::TuningLimited => "tuning_limited",
            Verdict::ActuatorLimited => "actuator_limited",
            Verdict::Unreachable => "unreachable",
            Verdict::Inconclusive => "inconclusive",
        }
    }

    /// The verdict as people read it (tables, reports, alerts, logs): `met`, `tuning-limited`,
    /// `actuator-limited`, `unreachable`, `inconclusive`. JSON keeps [`Verdict::as_str`].
    pub fn label(self) -> &'static str {
        match self {
            Verdict::Met => "met",
            Verdict::TuningLimited => "tuning-limited",
            Verdict::ActuatorLimited => "actuator-limited",
            Verdict::Unreachable => "unreachable",
            Verdict::Inconclusive => "inconclusive",
        }
    }

    /// Whether the episode missed its spec for a known reason.
    pub fn is_miss(self) -> bool {
        matches!(
            self,
            Verdict::TuningLimited | Verdict::ActuatorLimited | Verdict::Unreachable
        )
    }
}

/// Everything known about one setpoint change. Field names are a contract (JSON output); the
/// store keeps it as that JSON and reads it back (`Deserialize`) for reports and summaries.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EpisodeResult {
    /// Time of the change (t0), on the data's time axis (s).
    pub start_s: f64,
    /// Time of the last sample of the window (s).
    pub end_s: f64,
    pub sp_from: f64,
    pub sp_to: f64,
    pub shape: ChangeShape,
    pub window_end: WindowEnd,
    pub samples: usize,
    pub settling_time_s: Option<f64>,
    pub overshoot_pct: f64,
    pub rise_time_s: Option<f64>,
    /// ∫|SP − PV| dt / |Δ| over the window (s).
    pub iae_per_delta_s: f64,
    pub saturation_duty: f64,
    /// Samples of PV averaged (centred) before scoring, to keep noise from deciding the settling
    /// time; 1 = scored on the raw PV.
    pub pv_smoothing_samples: usize,
    /// Mean OP just before the change: the operating point.
    pub op_start: f64,
    /// OP distance to the limit in the direction the change needs.
    pub op_headroom: f64,
    /// The OP value furthest in the needed direction during the window.
    pub peak_op: f64,
    /// The fastest possible settling time under the OP limit; `None` without a model or when the
    /// setpoint is unreachable.
    pub min_settling_time_s: Option<f64>,
    /// |K|·headroom: the largest change the actuator can hold from this operating point.
    pub reach: Option<f64>,
    /// The OP limit that would make t* equal the spec time; `None` without a model or when the
    /// spec time is not longer than the dead time.
    pub required_op_limit: Option<f64>,
    /// The OP capacity needed as a multiple of today's (1.0 = today's is just enough).
    pub capacity_ratio: Option<f64>,
    pub verdict: Verdict,
    /// One sentence on why this verdict.
    pub reason: String,
}

/// What the loop needs, by the weight of its episodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Action {
    /// Every conclusive change met the spec.
    None,
    Retune,
    Renegotiate,
    Upgrade,
    /// Not enough conclusive evidence to say.
    Undecided,
}

/// Numbers behind an actuator-side recommendation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ActuatorEvidence {
    /// The typical change of the episodes that missed for actuator reasons (signed).
    pub typical_step: f64,
    pub typical_op_start: f64,
    /// t* for the typical change: no tuning can settle faster.
    pub fastest_settling_time_s: Option<f64>,
    /// What a PI tuned by SIMC (τc = θ) achieves on the model with today's OP limits.
    pub practical_settling_time_s: Option<f64>,
    /// The largest change that can meet today's spec from the typical operating point.
    pub largest_compliant_step: Option<f64>,
    /// The OP limit needed for the typical change to meet the spec.
    pub required_op_limit: Option<f64>,
    pub capacity_ratio: Option<f64>,
}

/// The loop's recommendation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Recommendation {
    pub action: Action,
    /// One or two sentences with the numbers.
    pub summary: String,
    pub retune: Option<PiSuggestion>,
    pub actuator: Option<ActuatorEvidence>,
    pub caution: &'static str,
}

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
}

/// Counts of episodes by verdict.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize)]
pub struct VerdictCounts {
    pub met: usize,
    pub tuning_limited: usize,
    pub actuator_limited: usize,
    pub unreachable: usize,
    pub inconclusive: usize,
}

impl VerdictCounts {
    pub fn of(episodes: &[EpisodeResult]) -> VerdictCounts {
        let mut c = VerdictCounts::default();
        for e in episodes {
            *c.slot(e.verdict) += 1;
        }
        c
    }

    fn slot(&mut self, v: Verdict) -> &mut usize {
        match v {
            Verdict::Met => &mut self.met,
            Verdict::TuningLimited => &mut self.tuning_limited,
            Verdict::ActuatorLimited => &mut self.actuator_limited,
            Verdict::Unreachable => &mut self.unreachable,
            Verdict::Inconclusive => &mut self.inconclusive,
        }
    }
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
    pub data: DataSummary,
    pub counts: VerdictCounts,
    pub episodes: Vec<EpisodeResult>,
    pub recommendation: Recommendation,
}

/// Episodes, model and data facts of one loop: everything but the recommendation.
#[derive(Debug, Clone, PartialEq)]
pub struct Assessment {
    pub episodes: Vec<EpisodeResult>,
    pub model: Result<Model, Refusal>,
    pub data: DataSummary,
}

/// Analyses one loop's data end to end: [`assess`] then [`recommend`].
pub fn analyze_loop(series: &Series, setup: &LoopSetup) -> LoopReport {
    let a = assess(series, setup);
    let recommendation = recommend(
        &a.episodes,
        a.model.as_ref().ok(),
        setup,
        a.data.median_sample_s,
    );
    LoopReport {
        tag: setup.tag.clone(),
        model: a.model.as_ref().ok().copied(),
        model_refusal: a.model.as_ref().err().map(Refusal::to_string),
        spec: setup.spec,
        op_range: setup.op,
        data: a.data,
        counts: VerdictCounts::of(&a.episodes),
        episodes: a.episodes,
        recommendation,
    }
}

/// Scores every setpoint change, identifies the process and gives each change its verdict.
pub fn assess(series: &Series, setup: &LoopSetup) -> Assessment {
    let t = series.time_s();
    let n = series.len();
    let seg_settings = segment_settings(series, setup);
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
    let model = identify_pool(&pool, setup);

    let episodes: Vec<EpisodeResult> = scored
        .iter()
        .map(|s| judge(series, s, setup, model.as_ref().ok()))
        .collect();
    Assessment {
        episodes,
        model,
        data: DataSummary {
            samples: n,
            duration_s: if n > 0 { t[n - 1] - t[0] } else { 0.0 },
            median_sample_s: median_interval(t),
            gaps: seg.gaps,
            pv_noise_sd: pv_noise_sd(series.pv()),
            sp_deadband: seg_settings.deadband,
            changes_in_manual: seg.changes_in_manual,
            changes_in_gaps: seg.changes_in_gaps,
            returned_excursions: seg.returned_excursions,
        },
    }
}

/// Median interval between samples, 0 for fewer than two samples.
pub(crate) fn median_interval(t: &[f64]) -> f64 {
    let mut dts: Vec<f64> = t.windows(2).map(|w| w[1] - w[0]).collect();
    identify::median_in_place(&mut dts)
}

/// Segmentation settings: what the setup gives, else derived — the SP deadband from the largest
/// |SP| in the data, hold and gap limits from the loop's expected sample period (or, without
/// one, the median sample interval of the data).
pub(crate) fn segment_settings(series: &Series, setup: &LoopSetup) -> SegmentSettings {
    let opts = &setup.options;
    let max_abs_sp = series.sp().iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let period = opts
        .expected_period_s
        .unwrap_or_else(|| median_interval(series.time_s()));
    SegmentSettings {
        deadband: opts.sp_deadband.unwrap_or((1e-3 * max_abs_sp).max(1e-9)),
        sp_hold_s: opts.sp_hold_s.unwrap_or(3.0 * period),
        max_gap_s: opts.max_gap_for(period),
        horizon_s: opts.horizon_factor * setup.spec.settle_within_s,
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

/// Identifies the loop's model from a pool of episodes.
pub(crate) fn identify_pool(pool: &[PoolEntry], setup: &LoopSetup) -> Result<Model, Refusal> {
    let mut noises: Vec<f64> = pool.iter().map(|p| p.noise).collect();
    let noise = identify::median_in_place(&mut noises);
    // The PV cannot respond before the dead time: the earliest 10 % crossing of a change well
    // above the noise bounds the dead-time search.
    let max_dead_time = pool
        .iter()
        .filter(|p| 0.1 * p.delta.abs() > 4.0 * p.noise)
        .filter_map(|p| p.t10_s)
        .fold(None, |m: Option<f64>, t| Some(m.map_or(t, |m| m.min(t))))
        .map(|t| 1.2 * t);
    identify::identify(
        pool.iter().map(|p| &p.segment),
        noise,
        setup.op.span(),
        max_dead_time,
        &setup.options.identify,
    )
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
    let band = setup.spec.settle_band_pct / 100.0;
    let margin = setup.options.saturation_margin_pct / 100.0;
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

pub(crate) fn judge(
    series: &Series,
    s: &Scored,
    setup: &LoopSetup,
    model: Option<&Model>,
) -> EpisodeResult {
    let band = setup.spec.settle_band_pct / 100.0;
    let noise = s.noise;
    let t = series.time_s();
    let w = &s.w;
    let m = &s.m;
    let delta = w.delta();
    let spec = &setup.spec;
    let t0 = t[w.start];
    let covered = t[w.end - 1] - t0;

    // Model-based feasibility, for every episode when a model exists.
    let mut min_settling = None;
    let mut reach = None;
    let mut required_limit = None;
    let mut capacity = None;
    let mut headroom = f64::NAN;
    let mut unreachable = false;
    if let Some(model) = model {
        let f = model.fopdt();
        let dir = feasibility::op_direction(f.gain, delta);
        let h = feasibility::headroom(s.op_start, dir, setup.op.min, setup.op.max);
        headroom = h;
        reach = Some(f.gain.abs() * h.max(0.0));
        match feasibility::min_settling_time(&f, delta, h, band) {
            Reach::Reachable { t_star_s } => min_settling = Some(t_star_s),
            Reach::Unreachable { .. } => unreachable = true,
        }
        if let Some(req_h) = feasibility::required_headroom(&f, delta, band, spec.settle_within_s) {
            let limit = s.op_start + dir * req_h;
            required_limit = Some(limit);
            capacity = Some(capacity_ratio(limit, dir, setup.op));
        }
    }

    let settled_in_time = m
        .settling_time_s
        .is_some_and(|ts| ts <= spec.settle_within_s);
    let overshoot_ok = spec
        .max_overshoot_pct
        .is_none_or(|mx| m.overshoot_pct <= mx);
    let fmt_s = |x: f64| format!("{x:.0} s");
    // A window cut before the spec time cannot show whether the PV would have settled in time;
    // only an overshoot beyond spec is already a miss.
    let (verdict, reason) = if 3.0 * s.residual_noise > band * delta.abs() {
        (
            Verdict::Inconclusive,
            format!(
                "the settling band (±{:.3}) lies inside the PV noise (σ ≈ {:.3}): the change is \
                 too small to score",
                band * delta.abs(),
                noise
            ),
        )
    } else if covered < spec.settle_within_s && w.end_reason.interrupts() && overshoot_ok {
        (
            Verdict::Inconclusive,
            format!(
                "the window ended ({}) {} after the change, before the spec time of {}",
                end_phrase(w.end_reason),
                fmt_s(covered),
                fmt_s(spec.settle_within_s)
            ),
        )
    } else if settled_in_time && overshoot_ok {
        (
            Verdict::Met,
            format!(
                "settled in {} (spec {})",
                fmt_s(m.settling_time_s.unwrap_or(0.0)),
                fmt_s(spec.settle_within_s)
            ),
        )
    } else {
        let miss = if !settled_in_time {
            match m.settling_time_s {
                Some(ts) => format!(
                    "settled in {} (spec {})",
                    fmt_s(ts),
                    fmt_s(spec.settle_within_s)
                ),
                None => format!("never settled within {}", fmt_s(covered)),
            }
        } else {
            format!(
                "overshoot {:.1} % (spec {:.1} %)",
                m.overshoot_pct,
                spec.max_overshoot_pct.unwrap_or(f64::INFINITY)
            )
        };
        match model {
            None => (
                Verdict::Inconclusive,
                format!("{miss}; no usable process model to tell tuning from actuator"),
            ),
            Some(_) if unreachable => (
                Verdict::Unreachable,
                format!(
                    "{miss}; the change of {:.3} exceeds the actuator's reach of {:.3} from OP {:.1}",
                    delta.abs(),
                    reach.unwrap_or(0.0),
                    s.op_start
                ),
            ),
            Some(_) => {
                let ts = min_settling.unwrap_or(f64::INFINITY);
                if ts > spec.settle_within_s {
                    (
                        Verdict::ActuatorLimited,
                        format!(
                            "{miss}; even with the OP held at its limit the fastest settling is {}",
                            fmt_s(ts)
                        ),
                    )
                } else {
                    (
                        Verdict::TuningLimited,
                        format!("{miss}; the actuator allows settling in {}", fmt_s(ts)),
                    )
                }
            }
        }
    };

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
        op_headroom: if headroom.is_finite() {
            headroom
        } else {
            feasibility::headroom(
                s.op_start,
                if m.peak_op >= s.op_start { 1.0 } else { -1.0 },
                setup.op.min,
                setup.op.max,
            )
        },
        peak_op: m.peak_op,
        min_settling_time_s: min_settling,
        reach,
        required_op_limit: required_limit,
        capacity_ratio: capacity,
        verdict,
        reason,
    }
}

fn end_phrase(e: WindowEnd) -> &'static str {
    match e {
        WindowEnd::NextChange => "next setpoint change",
        WindowEnd::DataGap => "data gap",
        WindowEnd::ManualMode => "loop left automatic",
        WindowEnd::Horizon => "evaluation horizon",
        WindowEnd::EndOfData => "end of data",
    }
}

/// The needed OP capacity as a multiple of today's, measured from the opposite limit: for a
/// heater on 0–100 % that must reach 140 %, the ratio is 1.4.
fn capacity_ratio(required_limit: f64, dir: f64, op: OpRange) -> f64 {
    let (limit, other) = if dir > 0.0 {
        (op.max, op.min)
    } else {
        (op.min, op.max)
    };
    (required_limit - other).abs() / (limit - other).abs()
}

/// The loop's recommendation from its judged episodes: none, retune (SIMC settings), or, when
/// the actuator is what misses the spec, upgrade or renegotiate with the numbers for both.
pub fn recommend(
    episodes: &[EpisodeResult],
    model: Option<&Model>,
    setup: &LoopSetup,
    sample_s: f64,
) -> Recommendation {
    let band = setup.spec.settle_band_pct / 100.0;
    let c = VerdictCounts::of(episodes);
    let conclusive = episodes.len() - c.inconclusive;
    let actuator_misses = c.unreachable + c.actuator_limited;
    let done = |action, summary: String| Recommendation {
        action,
        summary,
        retune: None,
        actuator: None,
        caution: CAUTION,
    };
    if conclusive == 0 {
        return done(
            Action::Undecided,
            format!(
                "No conclusive setpoint change among {} found; nothing to recommend yet.",
                episodes.len()
            ),
        );
    }
    if actuator_misses + c.tuning_limited == 0 {
        return done(
            Action::None,
            format!(
                "Met the spec on {} of {} conclusive setpoint changes; no change needed.",
                c.met, conclusive
            ),
        );
    }
    let Some(model) = model else {
        return done(
            Action::Undecided,
            "Missed the spec, but no usable process model to tell tuning from actuator.".into(),
        );
    };
    let f = model.fopdt();
    let spec = setup.spec;

    let actuator_side = actuator_misses >= c.tuning_limited;
    let relevant: Vec<&EpisodeResult> = episodes
        .iter()
        .filter(|e| {
            if actuator_side {
                matches!(e.verdict, Verdict::Unreachable | Verdict::ActuatorLimited)
            } else {
                e.verdict == Verdict::TuningLimited
            }
        })
        .collect();
    let typical_step = signed_median(relevant.iter().map(|e| e.sp_to - e.sp_from));
    // The operating point of the changes in the typical direction.
    let typical_u0 = median(
        relevant
            .iter()
            .filter(|e| (e.sp_to - e.sp_from).signum() == typical_step.signum())
            .map(|e| e.op_start),
    );

    if !actuator_side {
        let pi = tuning::suggest(
            &f,
            typical_step,
            typical_u0,
            setup.op,
            band,
            sample_s,
            spec.settle_within_s,
        );
        let expected = pi
            .expected_settling_time_s
            .map_or("does not settle".to_string(), |s| format!("{s:.0} s"));
        let saturation_note = if pi.initial_move_fits_headroom {
            ""
        } else {
            " The OP will saturate briefly after each change: the controller needs anti-windup."
        };
        let mut r = done(
            Action::Retune,
            format!(
                "{} of {} conclusive changes missed the spec although the actuator had room. \
                 Suggested PI (SIMC, τc = {:.0} s): Kc = {:.4}, τI = {:.0} s; expected settling \
                 for a {:+.3} change: {} (spec {:.0} s).{}",
                c.tuning_limited,
                conclusive,
                pi.closed_loop_time_constant_s,
                pi.gain,
                pi.integral_time_s,
                typical_step,
                expected,
                spec.settle_within_s,
                saturation_note
            ),
        );
        r.retune = Some(pi);
        if actuator_misses > 0 {
            // The minority of misses that retuning cannot fix, with the step size that would.
            let big: Vec<&EpisodeResult> = episodes
                .iter()
                .filter(|e| matches!(e.verdict, Verdict::Unreachable | Verdict::ActuatorLimited))
                .collect();
            let u0 = median(big.iter().map(|e| e.op_start));
            let step = signed_median(big.iter().map(|e| e.sp_to - e.sp_from));
            let dir = feasibility::op_direction(f.gain, step);
            let h = feasibility::headroom(u0, dir, setup.op.min, setup.op.max);
            let largest = feasibility::largest_compliant_step(&f, h, band, spec.settle_within_s);
            r.summary.push_str(&format!(
                " Separately, {actuator_misses} change(s) asked more than the actuator can give{}.",
                largest.map_or(String::new(), |d| format!(
                    "; from OP {u0:.1}, changes up to {d:.3} can meet the spec"
                ))
            ));
        }
        return r;
    }

    let dir = feasibility::op_direction(f.gain, typical_step);
    let h = feasibility::headroom(typical_u0, dir, setup.op.min, setup.op.max);
    let fastest = match feasibility::min_settling_time(&f, typical_step, h, band) {
        Reach::Reachable { t_star_s } => Some(t_star_s),
        Reach::Unreachable { .. } => None,
    };
    let tight =
        tuning::tau_c_for_headroom(&f, typical_step, f64::INFINITY, sample_s).max(f.dead_time_s);
    let (kc, ti) = tuning::simc_pi(&f, tight);
    let practical = if fastest.is_some() {
        tuning::predict(
            &f,
            kc,
            ti,
            typical_step,
            typical_u0,
            setup.op,
            band,
            sample_s,
        )
        .0
    } else {
        None
    };
    let largest = feasibility::largest_compliant_step(&f, h, band, spec.settle_within_s);
    let required_h = feasibility::required_headroom(&f, typical_step, band, spec.settle_within_s);
    let required_limit = required_h.map(|rh| typical_u0 + dir * rh);
    let capacity = required_limit.map(|l| capacity_ratio(l, dir, setup.op));
    let evidence = ActuatorEvidence {
        typical_step,
        typical_op_start: typical_u0,
        fastest_settling_time_s: fastest,
        practical_settling_time_s: practical,
        largest_compliant_step: largest,
        required_op_limit: required_limit,
        capacity_ratio: capacity,
    };
    let fastest_txt = fastest.map_or("it cannot be reached at all".to_string(), |s| {
        format!("the fastest possible settling is {s:.0} s")
    });
    let largest_txt = largest.map_or("no step".to_string(), |d| format!("steps up to {d:.3}"));
    let upgrade = capacity.is_some_and(|r| r <= setup.options.upgrade_ratio_limit);
    let head = format!(
        "{} of {} conclusive changes missed the spec because of the actuator. For a typical \
         {:+.3} change from OP {:.1}, {} (spec {:.0} s).",
        actuator_misses, conclusive, typical_step, typical_u0, fastest_txt, spec.settle_within_s
    );
    let mut r = if upgrade {
        done(
            Action::Upgrade,
            format!(
                "{head} Meeting it needs an OP limit of {:.1} ({:.2}× today's capacity); \
                 alternatively, today's actuator meets the spec for {largest_txt}.",
                required_limit.unwrap_or(f64::NAN),
                capacity.unwrap_or(f64::NAN)
            ),
        )
    } else {
        let capacity_txt = match (required_limit, capacity) {
            (Some(l), Some(k)) => {
                format!("an upgrade would need an OP limit of {l:.1} ({k:.2}× today's capacity)")
            }
            _ => "no actuator can meet it, the spec time is within the dead time".to_string(),
        };
        done(
            Action::Renegotiate,
            format!(
                "{head} Renegotiate: today's actuator meets the spec for {largest_txt}, or \
                 allow about {} for typical changes; {capacity_txt}.",
                practical
                    .or(fastest)
                    .map_or("more time".to_string(), |s| format!("{s:.0} s")),
            ),
        )
    };
    r.actuator = Some(evidence);
    if c.tuning_limited > 0 {
        r.summary.push_str(&format!(
            " Separately, {} change(s) missed although the actuator had room: retuning would help \
             those.",
            c.tuning_limited
        ));
    }
    r
}

fn median(values: impl Iterator<Item = f64>) -> f64 {
    let mut v: Vec<f64> = values.collect();
    identify::median_in_place(&mut v)
}

/// Median magnitude, with the sign of the majority.
fn signed_median(values: impl Iterator<Item = f64>) -> f64 {
    let v: Vec<f64> = values.collect();
    let ups = v.iter().filter(|d| **d > 0.0).count();
    let sign = if 2 * ups >= v.len() { 1.0 } else { -1.0 };
    sign * median(v.iter().filter(|d| d.signum() == sign).map(|d| d.abs()))
}

/// Robust PV noise estimate from first differences: σ ≈ 1.4826·MAD(Δy)/√2. Smooth process motion
/// barely moves the median of the differences, so this reads the measurement noise.
pub fn pv_noise_sd(pv: &[f64]) -> f64 {
    if pv.len() < 3 {
        return 0.0;
    }
    let mut d: Vec<f64> = pv.windows(2).map(|w| w[1] - w[0]).collect();
    let med = identify::median_in_place(&mut d);
    let mut dev: Vec<f64> = d.iter().map(|x| (x - med).abs()).collect();
    1.4826 * identify::median_in_place(&mut dev) / std::f64::consts::SQRT_2
}
