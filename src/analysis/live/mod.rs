//! The live tracker: the analysis core fed sample by sample, as the daemon receives them.
//!
//! Samples of a loop's signals arrive separately and not always in time order across signals.
//! [`Aligner`] joins them into rows on the PV's time stamps, taking for each PV sample the latest
//! SP, OP and mode at or before it ("as of" its time) — exactly what [`align`] does on stored data,
//! so an export of the store analysed offline sees the same rows. [`LoopTracker`] keeps a bounded
//! buffer of rows and, after each batch, runs the same segmentation, scoring, identification and
//! judging as the offline analysis: an episode is final once its window has closed (next change,
//! gap, manual, horizon), and reported early as provisional when it has already missed its spec
//! while its window is still open. Between changes, [`RegulationWatch`] runs the regulation core
//! on the buffered holds.

mod regulation;

pub use regulation::{RegulationEvent, RegulationWatch};

use super::assess::{self, Beaten, Knowledge, ModelSet, PoolEntry};
use super::identify::Model;
use super::quality::{self, Survey};
use super::segment::{self, WindowEnd};
use super::verdict::{EpisodeResult, Verdict};
use super::{LoopSetup, Series, SeriesError};
use crate::sample::Signal;
use std::collections::VecDeque;

/// One aligned row: the PV sample's time and value with the SP, OP and mode in force then.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Row {
    pub time_s: f64,
    pub sp: f64,
    pub pv: f64,
    pub op: f64,
    pub auto: bool,
}

/// Joins stored samples (each slice sorted by time) into rows on the PV's time stamps. A PV sample
/// before the first SP or OP sample gives no row. Without mode samples the loop counts as in
/// automatic; before the first mode sample likewise.
pub fn align(
    pv: &[(f64, f64)],
    sp: &[(f64, f64)],
    op: &[(f64, f64)],
    mode: &[(f64, f64)],
) -> Vec<Row> {
    let (mut i_sp, mut i_op, mut i_mode) = (0, 0, 0);
    let mut rows = Vec::with_capacity(pv.len());
    for &(t, v) in pv {
        let as_of = |series: &[(f64, f64)], i: &mut usize| -> Option<f64> {
            while *i < series.len() && series[*i].0 <= t {
                *i += 1;
            }
            (*i > 0).then(|| series[*i - 1].1)
        };
        let s = as_of(sp, &mut i_sp);
        let o = as_of(op, &mut i_op);
        let m = as_of(mode, &mut i_mode);
        if let (Some(s), Some(o)) = (s, o) {
            rows.push(Row {
                time_s: t,
                sp: s,
                pv: v,
                op: o,
                auto: m.is_none_or(|m| m != 0.0),
            });
        }
    }
    rows
}

/// Incremental form of [`align`]: accepts samples in arrival order and releases a PV sample's row
/// once every other signal has been heard from at or after its time — or, for a signal that has
/// gone quiet, once the PV has moved `patience_s` past it.
#[derive(Debug, Clone)]
pub struct Aligner {
    pv: VecDeque<(f64, f64)>,
    sp: VecDeque<(f64, f64)>,
    op: VecDeque<(f64, f64)>,
    mode: VecDeque<(f64, f64)>,
    uses_mode: bool,
    patience_s: f64,
    /// Samples that arrived older than one already released for their signal: too late to use.
    pub late: u64,
    released_to: f64,
}

impl Aligner {
    pub fn new(uses_mode: bool, patience_s: f64) -> Aligner {
        Aligner {
            pv: VecDeque::new(),
            sp: VecDeque::new(),
            op: VecDeque::new(),
            mode: VecDeque::new(),
            uses_mode,
            patience_s,
            late: 0,
            released_to: f64::NEG_INFINITY,
        }
    }

    /// Takes one sample. Within a signal, samples are expected in time order; an older one than
    /// the newest of its signal is inserted in order if its row has not been released yet.
    pub fn push(&mut self, signal: Signal, time_s: f64, value: f64) {
        let q = match signal {
            Signal::Pv => &mut self.pv,
            Signal::Sp => &mut self.sp,
            Signal::Op => &mut self.op,
            Signal::Mode => &mut self.mode,
        };
        if signal == Signal::Pv && time_s <= self.released_to {
            self.late += 1;
            return;
        }
        match q.back() {
            Some(&(t, _)) if time_s < t => {
                let at = q.partition_point(|&(x, _)| x < time_s);
                if q.get(at).is_some_and(|&(x, _)| x == time_s) {
                    q[at].1 = value;
                } else {
                    q.insert(at, (time_s, value));
                }
            }
            Some(&(t, _)) if time_s == t => {
                if let Some(b) = q.back_mut() {
                    b.1 = value;
                }
            }
            _ => q.push_back((time_s, value)),
        }
    }

    /// Releases every row that is now determined.
    pub fn drain(&mut self, out: &mut Vec<Row>) {
        let newest_pv = self.pv.back().map_or(f64::NEG_INFINITY, |p| p.0);
        let heard = |q: &VecDeque<(f64, f64)>| q.back().map_or(f64::NEG_INFINITY, |p| p.0);
        let mut watermark = heard(&self.sp).min(heard(&self.op));
        if self.uses_mode {
            watermark = watermark.min(heard(&self.mode));
        }
        let forced = newest_pv - self.patience_s;
        while let Some(&(t, v)) = self.pv.front() {
            if t > watermark && t > forced {
                break;
            }
            self.pv.pop_front();
            self.released_to = t;
            let sp = Self::as_of(&mut self.sp, t);
            let op = Self::as_of(&mut self.op, t);
            let mode = Self::as_of(&mut self.mode, t);
            if let (Some(sp), Some(op)) = (sp, op) {
                out.push(Row {
                    time_s: t,
                    sp,
                    pv: v,
                    op,
                    auto: mode.is_none_or(|m| m != 0.0),
                });
            }
        }
    }

    /// The value in force at `t`, dropping history no later row can need.
    fn as_of(q: &mut VecDeque<(f64, f64)>, t: f64) -> Option<f64> {
        while q.len() >= 2 && q[1].0 <= t {
            q.pop_front();
        }
        q.front().filter(|p| p.0 <= t).map(|p| p.1)
    }
}

/// Aligned rows as a series for the analysis, with their mode (live, and stored rows read back).
pub fn series_of(rows: &[Row]) -> Result<Series, SeriesError> {
    let column = |f: fn(&Row) -> f64| rows.iter().map(f).collect::<Vec<f64>>();
    Series::new(
        column(|r| r.time_s),
        column(|r| r.sp),
        column(|r| r.pv),
        column(|r| r.op),
        Some(rows.iter().map(|r| r.auto).collect()),
    )
}

/// What the tracker found after a batch.
#[derive(Debug, Clone, PartialEq)]
pub enum LiveEvent {
    /// An episode whose window has closed: its result will not change.
    Final(EpisodeResult),
    /// An episode still open that has already missed its spec (reported once per verdict).
    Provisional(EpisodeResult),
    /// The loop's model was re-identified with the latest episode.
    Model(Model),
    /// News of how the loop holds its setpoint between changes.
    Regulation(RegulationEvent),
}

/// Tracks one loop live.
#[derive(Debug, Clone)]
pub struct LoopTracker {
    setup: LoopSetup,
    rows: Vec<Row>,
    pool: VecDeque<PoolEntry>,
    models: Option<ModelSet>,
    /// Changes so far whose settling beat the model's bound.
    beaten: Beaten,
    /// Start time of the newest final episode; windows starting at or before it are done.
    final_until: f64,
    /// The open episode's start and the verdict last reported for it.
    provisional: Option<(f64, Verdict)>,
    max_abs_sp: f64,
    /// Data time of the newest row at the last evaluation.
    evaluated_to: f64,
    /// Whether an SP move arrived since the last evaluation.
    sp_moved: bool,
    /// What the regulation watch has reported so far.
    regulation: RegulationWatch,
}

/// At most this many episodes are kept for identification; the oldest drop out, so a drifting
/// process is followed.
const POOL_EPISODES: usize = 60;
/// Episodes needed before a model carried over from a previous run is replaced.
const MIN_POOL_TO_REPLACE: usize = 3;

impl LoopTracker {
    pub fn new(setup: LoopSetup) -> LoopTracker {
        LoopTracker {
            setup,
            rows: Vec::new(),
            pool: VecDeque::new(),
            models: None,
            beaten: Beaten::default(),
            final_until: f64::NEG_INFINITY,
            provisional: None,
            max_abs_sp: 0.0,
            evaluated_to: f64::NEG_INFINITY,
            sp_moved: false,
            regulation: RegulationWatch::default(),
        }
    }

    pub fn setup(&self) -> &LoopSetup {
        &self.setup
    }

    pub fn model(&self) -> Option<&Model> {
        self.models.as_ref().map(|ms| &ms.model)
    }

    /// Rows currently buffered (bounded by the evaluation horizon).
    pub fn buffered(&self) -> usize {
        self.rows.len()
    }

    /// Picks up after a restart: the rows stored before it (the last horizon or so), the start of
    /// the newest episode already final in the store (it and earlier ones are not reported
    /// again), and the newest stored model.
    pub fn resume(&mut self, rows: &[Row], final_until_s: Option<f64>, model: Option<Model>) {
        self.extend(rows);
        if let Some(t) = final_until_s {
            self.final_until = self.final_until.max(t);
        }
        if self.models.is_none() {
            self.models = model.map(ModelSet::alone);
        }
    }

    /// Appends aligned rows (in time order; older rows than the newest are dropped).
    pub fn extend(&mut self, rows: &[Row]) {
        for r in rows {
            let Some(last) = self.rows.last() else {
                self.rows.push(*r);
                continue;
            };
            if r.time_s <= last.time_s {
                continue;
            }
            self.sp_moved |= r.sp != last.sp || r.auto != last.auto;
            self.max_abs_sp = self.max_abs_sp.max(r.sp.abs());
            // Grow by a quarter rather than doubling: a thousand loops' buffers are most of the
            // daemon's memory.
            if self.rows.len() == self.rows.capacity() {
                self.rows.reserve_exact(self.rows.len() / 4 + 64);
            }
            self.rows.push(*r);
        }
    }

    /// The data time that must pass between evaluations when the SP has not moved: a hundredth
    /// of the spec time (so a miss is reported within 1 % of the spec time), at least one
    /// expected sample period. Evaluating less often changes no result, since a window is only
    /// final once it has closed; it saves re-reading the buffer on every batch.
    fn evaluation_interval(&self) -> f64 {
        let period = self.setup.options.expected_period_s.unwrap_or(0.0);
        (0.01 * self.setup.spec.settle_within_s).max(period)
    }

    /// Runs the analysis on the buffer and reports what is new (nothing when too little data
    /// time has passed since the last evaluation and the SP has not moved).
    pub fn evaluate(&mut self) -> Vec<LiveEvent> {
        let mut events = Vec::new();
        if self.rows.len() < 2 {
            return events;
        }
        let newest = self.rows[self.rows.len() - 1].time_s;
        if !self.sp_moved && newest - self.evaluated_to < self.evaluation_interval() {
            return events;
        }
        self.evaluated_to = newest;
        self.sp_moved = false;
        let Ok(series) = series_of(&self.rows) else {
            return events;
        };
        let period = self
            .setup
            .options
            .expected_period_s
            .unwrap_or_else(|| assess::median_interval(series.time_s()));
        let settings = assess::segment_settings(&self.setup, self.max_abs_sp, period);
        let seg = segment::segment(&series, &settings);
        let t = series.time_s();
        let mut keep_from = t.len().saturating_sub(1);
        // The data-quality survey of the buffered rows, made once per evaluation when needed.
        let mut survey: Option<Survey> = None;
        for w in &seg.windows {
            let t0 = t[w.start];
            if t0 <= self.final_until {
                continue;
            }
            let Some(scored) = assess::score_window(&series, w, &self.setup) else {
                continue;
            };
            if w.end_reason != WindowEnd::EndOfData {
                if let Some(entry) = PoolEntry::new(&series, &scored, &self.setup) {
                    self.pool.push_back(entry);
                    while self.pool.len() > POOL_EPISODES {
                        self.pool.pop_front();
                    }
                    // A model carried over from before a restart is only replaced once a few new
                    // episodes can outvote it.
                    if self.models.is_none() || self.pool.len() >= MIN_POOL_TO_REPLACE {
                        let pool = self.pool.make_contiguous();
                        if let Ok(ms) = assess::identify_pool(pool, &self.setup) {
                            events.push(LiveEvent::Model(ms.model));
                            self.models = Some(ms);
                        }
                    }
                }
                let survey = survey.get_or_insert_with(|| self.survey(&series));
                let result = assess::judge(&series, &scored, &self.setup, &self.knowing(survey));
                self.beaten.record(&result);
                self.final_until = t0;
                if self.provisional.is_some_and(|(s, _)| s == t0) {
                    self.provisional = None;
                }
                events.push(LiveEvent::Final(result));
            } else {
                keep_from = keep_from.min(w.pre_start);
                let elapsed = t[w.end - 1] - t0;
                if elapsed >= self.setup.spec.settle_within_s {
                    let survey = survey.get_or_insert_with(|| self.survey(&series));
                    let result =
                        assess::judge(&series, &scored, &self.setup, &self.knowing(survey));
                    let already = self
                        .provisional
                        .is_some_and(|(s, v)| s == t0 && v == result.verdict);
                    if result.verdict.is_miss() && !already {
                        self.provisional = Some((t0, result.verdict));
                        events.push(LiveEvent::Provisional(result));
                    }
                }
            }
        }
        let model = self.models.as_ref().map(|ms| &ms.model);
        events.extend(
            self.regulation
                .evaluate(&series, &seg, &settings, &self.setup, model)
                .into_iter()
                .map(LiveEvent::Regulation),
        );
        self.trim(&series, keep_from);
        events
    }

    /// The data-quality survey of the buffered rows.
    fn survey(&self, series: &Series) -> Survey {
        quality::survey(series, self.setup.op, assess::pv_noise_sd(series.pv()))
    }

    /// What a change is judged with now.
    fn knowing<'a>(&'a self, survey: &'a Survey) -> Knowledge<'a> {
        Knowledge {
            models: self.models.as_ref(),
            survey,
            beaten: self.beaten,
        }
    }

    /// Drops rows no future episode can need: everything before the open window's undisturbed
    /// stretch, and at most a quarter horizon plus 50 samples of history before the newest row
    /// (the most any window looks back: identification takes a quarter of the window before a
    /// change, noise estimation 50 samples).
    fn trim(&mut self, series: &Series, open_from: usize) {
        let t = series.time_s();
        let n = t.len();
        let horizon = self.setup.horizon_s();
        let look_back = 0.25 * horizon;
        let idle_cut = t[n - 1] - look_back;
        let by_time = t.partition_point(|&x| x < idle_cut).saturating_sub(50);
        let by_open = open_from.saturating_sub(50);
        let cut = by_time.min(by_open).min(n.saturating_sub(2));
        if cut > 0 {
            self.rows.drain(..cut);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::sim::{LoopSim, LoopSimConfig};
    use crate::analysis::{AnalysisOptions, OpRange, Spec, analyze_loop};

    fn setup() -> LoopSetup {
        LoopSetup {
            units: crate::analysis::Units::default(),
            controller: None,
            actuator: None,
            tag: "TIC-1".into(),
            op: OpRange {
                min: 0.0,
                max: 60.0,
            },
            spec: Spec {
                settle_band_pct: 2.0,
                settle_band: None,
                settle_within_s: 600.0,
                max_overshoot_pct: Some(15.0),
                hold_band: None,
                recover_within_s: None,
            },
            options: AnalysisOptions {
                expected_period_s: Some(2.0),
                ..AnalysisOptions::default()
            },
        }
    }

    fn simulated() -> Vec<Row> {
        let mut sim = LoopSim::new(LoopSimConfig::jacketed_vessel(60.0, 3));
        let schedule = [
            (600.0, 55.0),
            (4200.0, 66.0),
            (7800.0, 50.0),
            (11400.0, 75.0),
            (15000.0, 52.0),
        ];
        sim.run(&schedule, 18_000.0, 2.0)
            .iter()
            .map(|s| Row {
                time_s: s.time_s,
                sp: s.sp,
                pv: s.pv,
                op: s.op,
                auto: true,
            })
            .collect()
    }

    #[test]
    fn live_episodes_match_the_offline_analysis_of_the_same_rows() {
        let rows = simulated();
        let mut tracker = LoopTracker::new(setup());
        let mut finals = Vec::new();
        let mut provisional = Vec::new();
        for chunk in rows.chunks(37) {
            tracker.extend(chunk);
            for e in tracker.evaluate() {
                match e {
                    LiveEvent::Final(r) => finals.push(r),
                    LiveEvent::Provisional(r) => provisional.push(r),
                    LiveEvent::Model(_) | LiveEvent::Regulation(_) => {}
                }
            }
        }
        let series = Series::new(
            rows.iter().map(|r| r.time_s).collect(),
            rows.iter().map(|r| r.sp).collect(),
            rows.iter().map(|r| r.pv).collect(),
            rows.iter().map(|r| r.op).collect(),
            None,
        )
        .unwrap();
        let offline = analyze_loop(&series, &setup());
        // The last window is still open at the end of the data: offline scores it, live waits.
        assert_eq!(finals.len(), offline.episodes.len() - 1);
        for (live, off) in finals.iter().zip(&offline.episodes) {
            assert_eq!(live.start_s, off.start_s);
            assert_eq!(live.settling_time_s, off.settling_time_s);
            assert_eq!(live.overshoot_pct, off.overshoot_pct);
            assert_eq!(live.saturation_duty, off.saturation_duty);
            assert_eq!(live.verdict, off.verdict, "{live:#?} vs {off:#?}");
        }
        // The 66 → 50 … steps that miss were flagged before their windows closed.
        assert!(!provisional.is_empty());
        assert!(
            tracker.buffered() < rows.len() / 2,
            "the buffer must stay bounded"
        );
    }

    #[test]
    fn aligner_releases_rows_as_of_the_pv_time_whatever_the_arrival_order() {
        let mut a = Aligner::new(false, 100.0);
        let mut out = Vec::new();
        a.push(Signal::Pv, 1.0, 10.0);
        a.push(Signal::Pv, 2.0, 11.0);
        a.drain(&mut out);
        assert!(out.is_empty(), "SP and OP not heard yet");
        a.push(Signal::Op, 0.5, 40.0);
        a.push(Signal::Sp, 1.5, 12.0);
        a.push(Signal::Sp, 0.0, 11.0); // late, but its row is not released yet
        a.drain(&mut out);
        assert!(out.is_empty(), "OP not heard at or after t = 1 yet");
        a.push(Signal::Op, 2.0, 41.0);
        a.drain(&mut out);
        assert_eq!(out.len(), 1, "{out:?}");
        assert_eq!((out[0].time_s, out[0].sp, out[0].op), (1.0, 11.0, 40.0));
        a.push(Signal::Sp, 2.5, 12.0);
        a.drain(&mut out);
        assert_eq!((out[1].time_s, out[1].sp, out[1].op), (2.0, 12.0, 41.0));
        let stored = align(
            &[(1.0, 10.0), (2.0, 11.0)],
            &[(0.0, 11.0), (1.5, 12.0), (2.5, 12.0)],
            &[(0.5, 40.0), (2.0, 41.0)],
            &[],
        );
        assert_eq!(stored, out);
    }

    #[test]
    fn a_quiet_signal_does_not_hold_rows_back_forever() {
        let mut a = Aligner::new(false, 10.0);
        let mut out = Vec::new();
        a.push(Signal::Sp, 0.0, 1.0);
        a.push(Signal::Op, 0.0, 5.0);
        for k in 1..=30 {
            a.push(Signal::Pv, k as f64, 1.0);
            a.push(Signal::Sp, k as f64, 1.0);
        }
        a.drain(&mut out);
        assert_eq!(
            out.len(),
            20,
            "rows older than the patience are released with the OP held"
        );
        assert!(out.iter().all(|r| r.op == 5.0));
    }
}
