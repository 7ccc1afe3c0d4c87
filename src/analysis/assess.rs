//! One loop's analysis end to end — the answer to "retune, or is the actuator what makes the
//! spec impossible?": segment the data into setpoint changes, score each change model-free,
//! identify the process from them, give each change its verdict ([`super::verdict`]) and the
//! loop its recommendation ([`super::advice`]).

use super::feasibility::{self, Reach};
use super::identify::{self, IdSegment, Model, Refusal};
use super::metrics::{self, OpRange, Response};
use super::segment::{self, EpisodeWindow, SegmentSettings};
use super::verdict::{self, Capability, Context, Facts};
use super::{LoopSetup, Series, Spec, stats};
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
            median_sample_s,
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

/// Identifies the loop's model from a pool of episodes.
pub(crate) fn identify_pool(pool: &[PoolEntry], setup: &LoopSetup) -> Result<Model, Refusal> {
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
    identify::identify(
        pool.iter().map(|p| &p.segment),
        noise,
        (setup.op.min, setup.op.max),
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
    let band = setup.spec.band_fraction();
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

/// What the model says the actuator allows for one change, with the OP limit and capacity a
/// spec-meeting actuator would need.
struct Feasible {
    capability: Capability,
    headroom: f64,
    required_op_limit: Option<f64>,
    capacity_ratio: Option<f64>,
}

fn feasible(model: &Model, delta: f64, op_start: f64, setup: &LoopSetup) -> Feasible {
    let f = model.fopdt();
    let band = setup.spec.band_fraction();
    let dir = feasibility::op_direction(f.gain, delta);
    let h = feasibility::headroom(op_start, dir, setup.op.min, setup.op.max);
    let fastest_s = match feasibility::min_settling_time(&f, delta, h, band) {
        Reach::Reachable { t_star_s } => Some(t_star_s),
        Reach::Unreachable { .. } => None,
    };
    let required_op_limit =
        feasibility::required_headroom(&f, delta, band, setup.spec.settle_within_s)
            .map(|req_h| op_start + dir * req_h);
    Feasible {
        capability: Capability {
            reach: f.gain.abs() * h.max(0.0),
            fastest_s,
        },
        headroom: h,
        required_op_limit,
        capacity_ratio: required_op_limit
            .map(|limit| feasibility::capacity_ratio(limit, dir, setup.op)),
    }
}

/// Gives one scored change its verdict: gathers the facts (with the model's feasibility when
/// there is a model), lets [`verdict::decide`] decide, and records the result with its reason.
pub(crate) fn judge(
    series: &Series,
    s: &Scored,
    setup: &LoopSetup,
    model: Option<&Model>,
) -> EpisodeResult {
    let t = series.time_s();
    let (w, m) = (&s.w, &s.m);
    let delta = w.delta();
    let t0 = t[w.start];
    let feasible = model.map(|model| feasible(model, delta, s.op_start, setup));
    let facts = Facts {
        settling_time_s: m.settling_time_s,
        overshoot_pct: m.overshoot_pct,
        covered_s: t[w.end - 1] - t0,
        window_end: w.end_reason,
        distance: delta.abs(),
        band_abs: setup.spec.band_fraction() * delta.abs(),
        residual_noise: s.residual_noise,
        capability: feasible.as_ref().map(|f| f.capability),
    };
    let judgement = verdict::decide(&facts, &setup.spec);
    let context = Context {
        pv_noise_sd: s.noise,
        op_start: s.op_start,
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
        op_headroom: feasible
            .as_ref()
            .map(|f| f.headroom)
            .filter(|h| h.is_finite())
            .unwrap_or_else(|| {
                // Without a model, the direction the OP went.
                let dir = if m.peak_op >= s.op_start { 1.0 } else { -1.0 };
                feasibility::headroom(s.op_start, dir, setup.op.min, setup.op.max)
            }),
        peak_op: m.peak_op,
        min_settling_time_s: feasible.as_ref().and_then(|f| f.capability.fastest_s),
        reach: feasible.as_ref().map(|f| f.capability.reach),
        required_op_limit: feasible.as_ref().and_then(|f| f.required_op_limit),
        capacity_ratio: feasible.as_ref().and_then(|f| f.capacity_ratio),
        verdict: judgement.verdict(),
        reason: verdict::explain(&judgement, &facts, &setup.spec, &context),
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
