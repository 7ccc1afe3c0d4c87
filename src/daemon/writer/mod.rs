//! The writer: the one task that writes to the store. It commits samples in batches (every
//! `FLUSH_EVERY` or `MAX_BATCH` samples, whichever comes first), acknowledges the MQTT messages
//! whose samples it committed, feeds the live trackers, stores their episodes and models, raises
//! alerts, watches for stale tags, prunes old raw samples, and publishes status.

use crate::alerts::{self, Silent};
use crate::analysis::assess::EpisodeResult;
use crate::analysis::live::{Aligner, LiveEvent, LoopTracker, RegulationEvent, Row};
use crate::analysis::{LoopSetup, Model};
use crate::mqtt::source::Outbound;
use crate::sample::{Sample, Signal};
use crate::source::{Ingest, RateLimitedLog};
use crate::store::{self, AlertInput, GapRow, Store};
use crate::units::{ms_to_s, rfc3339, s_to_ms};
use std::collections::{BTreeMap, HashMap};
use std::sync::Arc;
use std::sync::atomic::AtomicU64;
use std::time::{Duration, Instant};
use tokio::sync::mpsc;

/// A batch is committed at the latest this long after its first sample arrived.
const FLUSH_EVERY: Duration = Duration::from_millis(100);
/// …or as soon as it holds this many samples; no transaction holds more.
const MAX_BATCH: usize = 5_000;
/// Staleness, status and counters are looked at on this tick.
const HOUSEKEEPING_EVERY: Duration = Duration::from_secs(1);
/// A status message is published this often (when a status topic is configured).
const STATUS_EVERY: Duration = Duration::from_secs(10);
/// The end of an outage in progress is written to its alert this often (not published: the
/// alert topic hears of an outage when it begins, grows or ends).
const OUTAGE_REFRESH_EVERY: Duration = Duration::from_secs(5);
/// Raw samples are pruned this often.
const PRUNE_EVERY: Duration = Duration::from_secs(3600);
/// After a failed commit the same batch is retried after this wait (nothing is acknowledged
/// meanwhile, so the broker keeps the messages).
const RETRY_AFTER: Duration = Duration::from_secs(1);

/// One loop as the writer sees it.
pub struct LoopRuntime {
    pub tracker: LoopTracker,
    pub aligner: Aligner,
    /// The signals the configuration says this loop has.
    pub expected: Vec<Signal>,
    /// A signal silent for longer than this is stale.
    stale_after_ms: i64,
    last_seen_ms: HashMap<Signal, i64>,
    /// The newest stored sample of each signal from before a restart, so that the silence
    /// across the restart is recorded as a gap.
    resumed_ms: HashMap<Signal, i64>,
    /// A silence longer than this between two samples of a signal is recorded as a gap: the
    /// same limit the analysis cuts episode windows at.
    gap_after_ms: i64,
    /// The outage in progress, if signals are silent.
    outage: Option<Outage>,
}

/// An outage in progress: every signal silent in it (a signal stays silent until its first
/// sample after the silence), and where the silence began.
#[derive(Debug, Clone)]
struct Outage {
    signals: Vec<Silent>,
    since_ms: i64,
}

impl Outage {
    /// Whether `signal` is in the outage and has not come back.
    fn holds(&self, signal: Signal) -> bool {
        self.signals
            .iter()
            .any(|s| s.signal == signal && s.back_ms.is_none())
    }

    /// Notes a sample of `signal` at `ts_ms`: its first after the silence ends its part.
    fn saw(&mut self, signal: Signal, ts_ms: i64) {
        if let Some(s) = self.signals.iter_mut().find(|s| {
            s.signal == signal && s.back_ms.is_none() && s.last_sample_ms.is_none_or(|l| ts_ms > l)
        }) {
            s.back_ms = Some(ts_ms);
        }
    }

    /// Takes in the signals silent now; whether one of them is new to the outage.
    fn extend(
        &mut self,
        silent: &[Signal],
        last_seen: &HashMap<Signal, i64>,
        watched_from: i64,
    ) -> bool {
        let mut news = false;
        for &signal in silent {
            match self.signals.iter_mut().find(|s| s.signal == signal) {
                // Back, then silent again within the same outage: not back after all.
                Some(s) => s.back_ms = None,
                None => {
                    let last = last_seen.get(&signal).copied();
                    self.signals.push(Silent {
                        signal,
                        last_sample_ms: last,
                        back_ms: None,
                    });
                    self.since_ms = self.since_ms.min(last.unwrap_or(watched_from));
                    news = true;
                }
            }
        }
        news
    }
}

impl LoopRuntime {
    pub fn new(
        setup: LoopSetup,
        expected: Vec<Signal>,
        expected_period_s: f64,
        stale_after: Duration,
    ) -> LoopRuntime {
        let uses_mode = expected.contains(&Signal::Mode);
        // A signal that has gone quiet holds rows back for at most a few periods.
        let patience = 5.0 * expected_period_s;
        let gap_after_ms = s_to_ms(setup.options.max_gap_for(expected_period_s));
        LoopRuntime {
            tracker: LoopTracker::new(setup),
            aligner: Aligner::new(uses_mode, patience),
            expected,
            stale_after_ms: i64::try_from(stale_after.as_millis()).unwrap_or(i64::MAX),
            last_seen_ms: HashMap::new(),
            resumed_ms: HashMap::new(),
            gap_after_ms,
            outage: None,
        }
    }

    /// Picks up an outage that was in progress when the daemon stopped, from its alert: it
    /// ends when its signals flow again, whether or not they go stale in this run.
    pub fn resume_outage(&mut self, alert: &store::AlertRow) {
        let signals = alerts::outage_signals(alert);
        if !signals.is_empty() {
            self.outage = Some(Outage {
                signals,
                since_ms: alert.first_seen_ms,
            });
        }
    }

    /// Tells the runtime the newest stored sample of a signal from before a restart.
    pub fn resumed_from(&mut self, signal: Signal, ts_ms: i64) {
        self.resumed_ms.insert(signal, ts_ms);
    }
}

/// Where alerts and status go, and how long raw samples are kept.
#[derive(Debug, Clone)]
pub struct WriterSettings {
    pub alert_topic: Option<String>,
    pub status_topic: Option<String>,
    pub raw_retention_ms: Option<i64>,
}

/// Counts since start, for the status message and the log.
#[derive(Debug, Default, Clone, serde::Serialize)]
pub struct Counters {
    pub samples_committed: u64,
    pub duplicates: u64,
    pub messages_acknowledged: u64,
    pub episodes_final: u64,
    pub alerts_raised: u64,
    pub rejected: BTreeMap<&'static str, u64>,
    pub late_samples: u64,
    /// Transactions that stored samples, and the most samples one of them held (not published).
    #[serde(skip)]
    pub commits: u64,
    #[serde(skip)]
    pub largest_commit: usize,
}

/// The plant's clock: data time, advanced by wall time while nothing arrives, so staleness is
/// judged the same in live operation and in an accelerated replay.
#[derive(Debug, Clone, Copy, Default)]
struct PlantClock {
    newest_ms: Option<i64>,
    at: Option<Instant>,
    /// The first data time seen: where watching began. A signal not seen since then has been
    /// silent since then.
    first_ms: Option<i64>,
}

impl PlantClock {
    fn saw(&mut self, ts_ms: i64) {
        self.first_ms.get_or_insert(ts_ms);
        if self.newest_ms.is_none_or(|n| ts_ms > n) {
            self.newest_ms = Some(ts_ms);
            self.at = Some(Instant::now());
        }
    }

    fn now_ms(&self) -> Option<i64> {
        let (n, at) = (self.newest_ms?, self.at?);
        Some(n + at.elapsed().as_millis() as i64)
    }
}

pub struct Writer {
    store: Store,
    loops: HashMap<Arc<str>, LoopRuntime>,
    outbound: mpsc::Sender<Outbound>,
    settings: WriterSettings,
    counters: Counters,
    clock: PlantClock,
    rejections: HashMap<(&'static str, String), u64>,
    reject_log: RateLimitedLog,
    committed: Arc<AtomicU64>,
}

/// Samples and acknowledgements gathered for one commit.
#[derive(Default)]
struct Batch {
    samples: Vec<Sample>,
    acks: Vec<rumqttc::Publish>,
    since: Option<Instant>,
}

impl Batch {
    fn is_empty(&self) -> bool {
        self.samples.is_empty() && self.acks.is_empty()
    }

    /// When the batch must be committed at the latest.
    fn deadline(&self) -> Option<tokio::time::Instant> {
        self.since
            .map(|s| tokio::time::Instant::from_std(s + FLUSH_EVERY))
    }
}

/// When the periodic chores last ran.
struct Chores {
    tick: tokio::time::Interval,
    last_status: Instant,
    last_prune: Instant,
    last_outage_refresh: Instant,
}

impl Chores {
    fn new() -> Chores {
        let mut tick = tokio::time::interval(HOUSEKEEPING_EVERY);
        tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        Chores {
            tick,
            last_status: Instant::now(),
            last_prune: Instant::now(),
            last_outage_refresh: Instant::now(),
        }
    }

    /// Whether `every` has passed since `last`; if so, starts the next period.
    fn due(last: &mut Instant, every: Duration) -> bool {
        let due = last.elapsed() >= every;
        if due {
            *last = Instant::now();
        }
        due
    }
}

impl Writer {
    pub fn new(
        store: Store,
        loops: HashMap<Arc<str>, LoopRuntime>,
        outbound: mpsc::Sender<Outbound>,
        settings: WriterSettings,
        committed: Arc<AtomicU64>,
    ) -> Writer {
        Writer {
            store,
            loops,
            outbound,
            settings,
            counters: Counters::default(),
            clock: PlantClock::default(),
            rejections: HashMap::new(),
            reject_log: RateLimitedLog::new(Duration::from_secs(60)),
            committed,
        }
    }

    /// Runs until the ingest channel closes (every source has stopped), then commits what it
    /// holds and returns. Dropping the writer drops the outbound sender, which tells the MQTT
    /// task that every acknowledgement has been handed over.
    pub async fn run(mut self, mut rx: mpsc::Receiver<Ingest>) -> Result<Counters, store::Error> {
        let mut batch = Batch::default();
        let mut chores = Chores::new();
        loop {
            let deadline = batch.deadline();
            tokio::select! {
                msg = rx.recv() => match msg {
                    Some(msg) => self.receive(msg, &mut batch).await?,
                    None => break,
                },
                _ = sleep_until(deadline), if deadline.is_some() => {
                    self.flush(&mut batch).await?;
                }
                _ = chores.tick.tick() => self.housekeep(&mut chores).await,
            }
        }
        self.flush(&mut batch).await?;
        self.flush_rejections().await;
        tracing::info!(
            samples = self.counters.samples_committed,
            acknowledged = self.counters.messages_acknowledged,
            "writer finished: everything received is committed"
        );
        Ok(self.counters)
    }

    /// Takes one message from a source: samples join the batch (committed once it is full),
    /// refusals and failures are counted.
    async fn receive(&mut self, msg: Ingest, batch: &mut Batch) -> Result<(), store::Error> {
        match msg {
            Ingest::Samples { samples, ack } => {
                batch.since.get_or_insert_with(Instant::now);
                batch.samples.extend(samples);
                batch.acks.extend(ack);
                if batch.samples.len() >= MAX_BATCH {
                    self.flush(batch).await?;
                }
            }
            Ingest::Rejected {
                reason,
                source,
                detail,
            } => self.reject(reason, source, detail),
            Ingest::Failure { reason, source } => self.count_rejection(reason, source),
        }
        Ok(())
    }

    /// Staleness and rejection counts every tick; status and pruning when they are due.
    async fn housekeep(&mut self, chores: &mut Chores) {
        let refresh = Chores::due(&mut chores.last_outage_refresh, OUTAGE_REFRESH_EVERY);
        self.check_stale(refresh).await;
        self.flush_rejections().await;
        if Chores::due(&mut chores.last_status, STATUS_EVERY) {
            self.publish_status().await;
        }
        if Chores::due(&mut chores.last_prune, PRUNE_EVERY) {
            self.prune().await;
        }
    }

    fn count_rejection(&mut self, reason: &'static str, source: String) {
        *self.counters.rejected.entry(reason).or_default() += 1;
        *self.rejections.entry((reason, source)).or_default() += 1;
    }

    fn reject(&mut self, reason: &'static str, source: String, detail: String) {
        self.count_rejection(reason, source);
        if let Some(suppressed) = self.reject_log.allow() {
            tracing::warn!(reason, suppressed, "rejected input: {detail}");
        }
    }

    async fn flush_rejections(&mut self) {
        if self.rejections.is_empty() {
            return;
        }
        let now = jiff::Timestamp::now().as_millisecond();
        for ((reason, source), n) in std::mem::take(&mut self.rejections) {
            if let Err(e) = self.store.count_rejection(reason, &source, n, now).await {
                tracing::warn!(error = %e, "could not record rejection counts");
            }
        }
    }

    /// Commits the batch (in transactions of at most [`MAX_BATCH`] samples), then acknowledges
    /// and analyses it. Nothing is acknowledged before every sample of the batch is committed.
    async fn flush(&mut self, batch: &mut Batch) -> Result<(), store::Error> {
        if batch.is_empty() {
            batch.since = None;
            return Ok(());
        }
        let samples = std::mem::take(&mut batch.samples);
        let acks = std::mem::take(&mut batch.acks);
        batch.since = None;
        for chunk in samples.chunks(MAX_BATCH) {
            self.commit(chunk).await?;
        }
        for p in acks {
            self.counters.messages_acknowledged += 1;
            if self.outbound.send(Outbound::Ack(p)).await.is_err() {
                break;
            }
        }
        self.analyse(&samples).await;
        Ok(())
    }

    /// Stores samples in one transaction. A transient failure (the database busy, the disk
    /// full) is retried until it clears, holding the batch unacknowledged; any other failure (a
    /// read-only or damaged file) ends the writer with the error, since waiting will not mend
    /// it — nothing uncommitted has been acknowledged, so nothing is lost.
    async fn commit(&mut self, samples: &[Sample]) -> Result<(), store::Error> {
        let mut failures = RateLimitedLog::new(Duration::from_secs(30));
        loop {
            match self.store.insert_samples(samples).await {
                Ok(outcome) => {
                    self.counters.samples_committed += outcome.inserted;
                    self.committed
                        .fetch_add(outcome.inserted, std::sync::atomic::Ordering::Relaxed);
                    self.counters.duplicates += outcome.duplicates;
                    self.counters.commits += 1;
                    self.counters.largest_commit = self.counters.largest_commit.max(samples.len());
                    return Ok(());
                }
                Err(e) if !e.is_transient() => {
                    tracing::error!(error = %e, "cannot write to the store; stopping");
                    return Err(e);
                }
                Err(e) => {
                    if let Some(suppressed) = failures.allow() {
                        tracing::error!(error = %e, suppressed, samples = samples.len(),
                            "could not commit samples; holding them and retrying (nothing is acknowledged meanwhile)");
                    }
                    tokio::time::sleep(RETRY_AFTER).await;
                }
            }
        }
    }

    /// Feeds committed samples to the trackers and stores what they find.
    async fn analyse(&mut self, samples: &[Sample]) {
        let (touched, gaps) = self.take_in(samples);
        for g in &gaps {
            tracing::warn!(
                loop_tag = %g.loop_tag,
                signal = %g.signal,
                from = %rfc3339(g.from_ms),
                to = %rfc3339(g.to_ms),
                "data gap: no sample of this signal in between; episodes across it are inconclusive"
            );
        }
        if let Err(e) = self.store.record_gaps(&gaps).await {
            tracing::warn!(error = %e, "could not record data gaps");
        }
        // The analysis is CPU work: let the runtime move other tasks off this thread meanwhile.
        let found = tokio::task::block_in_place(|| self.evaluate(&touched));
        for (tag, event) in found {
            self.record(&tag, event).await;
        }
    }

    /// Notes each sample's time, hands it to its loop's aligner, and returns the loops touched
    /// and the silences longer than a loop's gap limit.
    fn take_in(&mut self, samples: &[Sample]) -> (Vec<Arc<str>>, Vec<GapRow>) {
        let mut touched: Vec<Arc<str>> = Vec::new();
        let mut gaps: Vec<GapRow> = Vec::new();
        for s in samples {
            self.clock.saw(s.ts_ms);
            let Some(rt) = self.loops.get_mut(&s.loop_tag) else {
                continue;
            };
            let before = rt
                .last_seen_ms
                .get(&s.signal)
                .or_else(|| rt.resumed_ms.get(&s.signal))
                .copied();
            if let Some(before) = before
                && s.ts_ms - before > rt.gap_after_ms
            {
                gaps.push(GapRow {
                    loop_tag: s.loop_tag.to_string(),
                    signal: s.signal,
                    from_ms: before,
                    to_ms: s.ts_ms,
                });
            }
            if let Some(outage) = rt.outage.as_mut() {
                outage.saw(s.signal, s.ts_ms);
            }
            let seen = rt.last_seen_ms.entry(s.signal).or_insert(s.ts_ms);
            *seen = (*seen).max(s.ts_ms);
            rt.aligner.push(s.signal, ms_to_s(s.ts_ms), s.value);
            if !touched.contains(&s.loop_tag) {
                touched.push(s.loop_tag.clone());
            }
        }
        (touched, gaps)
    }

    /// Joins the touched loops' new rows and lets their trackers judge them.
    fn evaluate(&mut self, touched: &[Arc<str>]) -> Vec<(Arc<str>, LiveEvent)> {
        let mut found = Vec::new();
        let mut rows: Vec<Row> = Vec::new();
        for tag in touched {
            let Some(rt) = self.loops.get_mut(tag) else {
                continue;
            };
            rows.clear();
            let late_before = rt.aligner.late;
            rt.aligner.drain(&mut rows);
            self.counters.late_samples += rt.aligner.late - late_before;
            rt.tracker.extend(&rows);
            for e in rt.tracker.evaluate() {
                found.push((tag.clone(), e));
            }
        }
        found
    }

    async fn record(&mut self, tag: &Arc<str>, event: LiveEvent) {
        let now = jiff::Timestamp::now().as_millisecond();
        match event {
            LiveEvent::Model(m) => {
                let at = self.clock.newest_ms.unwrap_or(now);
                if let Err(e) = self.store.insert_model(tag, &m, at).await {
                    tracing::warn!(loop_tag = %tag, error = %e, "could not store the model");
                }
                log_model(tag, &m);
            }
            LiveEvent::Final(r) => {
                self.counters.episodes_final += 1;
                self.store_episode(tag, &r, true, now).await;
            }
            LiveEvent::Provisional(r) => {
                self.store_episode(tag, &r, false, now).await;
            }
            LiveEvent::Regulation(e) => self.regulation_news(tag, e).await,
        }
    }

    /// Raises, follows and returns the regulation alerts: an oscillation's spell, and each load
    /// disturbance the actuator could not counter.
    async fn regulation_news(&mut self, tag: &Arc<str>, event: RegulationEvent) {
        let Some(units) = self
            .loops
            .get(tag)
            .map(|rt| rt.tracker.setup().units.clone())
        else {
            return;
        };
        let newest = self
            .clock
            .newest_ms
            .unwrap_or_else(|| jiff::Timestamp::now().as_millisecond());
        match event {
            RegulationEvent::Oscillating(o) => {
                tracing::warn!(loop_tag = %tag, period_s = o.period_s, amplitude = o.amplitude, "oscillation found");
                self.raise(alerts::oscillation(tag, &o, &units, newest), true)
                    .await;
            }
            RegulationEvent::OscillationGone { at_s } => {
                self.settle(alerts::oscillation_gone(tag, s_to_ms(at_s)))
                    .await;
            }
            RegulationEvent::ActuatorLimited {
                disturbance,
                ongoing,
                id_start_s,
            } => {
                let alert = alerts::actuator_limited_disturbance(
                    tag,
                    &disturbance,
                    &units,
                    s_to_ms(id_start_s),
                    ongoing,
                );
                // Published when raised and when over; quietly followed in between.
                self.raise(alert, !ongoing).await;
            }
        }
    }

    async fn store_episode(&mut self, tag: &Arc<str>, r: &EpisodeResult, is_final: bool, now: i64) {
        let (start_ms, end_ms) = (s_to_ms(r.start_s), s_to_ms(r.end_s));
        if let Err(e) = self
            .store
            .upsert_episode(tag, r, start_ms, end_ms, is_final, now)
            .await
        {
            tracing::warn!(loop_tag = %tag, error = %e, "could not store the episode");
        }
        tracing::info!(
            loop_tag = %tag,
            verdict = r.verdict.as_str(),
            is_final,
            sp_from = r.sp_from,
            sp_to = r.sp_to,
            settling_time_s = r.settling_time_s,
            min_settling_time_s = r.min_settling_time_s,
            "setpoint change scored"
        );
        // One alert per change: raised or updated in place by a miss, returned by a look that
        // finds none (a final verdict that is no miss, or a marginal one).
        match alerts::missed_change(tag, r, is_final) {
            Some(alert) => self.raise(alert, true).await,
            None => self.settle(alerts::change_cleared(tag, r, is_final)).await,
        }
    }

    /// Records a sighting of an alert condition (a new alert, or an update of the one it
    /// belongs to); when `announce`, logs it and publishes the alert.
    async fn raise(&mut self, alert: AlertInput, announce: bool) {
        let (tag, kind) = (alert.loop_tag.clone(), alert.kind.clone());
        match self.store.raise_alert(alert).await {
            Ok(row) => {
                if row.is_new {
                    self.counters.alerts_raised += 1;
                }
                if announce || row.is_new {
                    let what = if row.is_new { "raised" } else { "updated" };
                    tracing::warn!(alert_id = row.id, loop_tag = %tag, kind, state = row.state.as_str(), "alert {what}: {}", row.message);
                    self.announce(&row).await;
                }
            }
            Err(e) => {
                tracing::error!(loop_tag = %tag, kind, error = %e, "could not record an alert")
            }
        }
    }

    /// Records that an alert's condition has gone (if an alert is following it), logs it and
    /// publishes the alert.
    async fn settle(&mut self, alert: AlertInput) {
        let (tag, kind) = (alert.loop_tag.clone(), alert.kind.clone());
        match self.store.return_alert(alert).await {
            Ok(Some(row)) => {
                tracing::info!(alert_id = row.id, loop_tag = %tag, kind = row.kind, state = row.state.as_str(), "alert condition gone: {}", row.message);
                self.announce(&row).await;
            }
            Ok(None) => {}
            Err(e) => {
                tracing::error!(loop_tag = %tag, kind, error = %e, "could not record that an alert's condition has gone")
            }
        }
    }

    async fn announce(&self, row: &store::AlertRow) {
        if let Some(topic) = self.settings.alert_topic.clone() {
            self.publish(topic, alerts::payload(row)).await;
        }
    }

    /// Follows each loop's outage: raises its `stale_tag` alert when a signal has been silent
    /// for longer than its limit, updates it when another falls silent (and its end, quietly,
    /// when `refresh`), and returns it once every signal flows again.
    async fn check_stale(&mut self, refresh: bool) {
        let Some(now) = self.clock.now_ms() else {
            return;
        };
        // A signal never seen counts as silent from where watching began, not as silent
        // forever: one that starts a little after the others is not stale.
        let watched_from = self.clock.first_ms.unwrap_or(now);
        let mut sightings: Vec<(AlertInput, bool)> = Vec::new();
        let mut ended: Vec<AlertInput> = Vec::new();
        for (tag, rt) in self.loops.iter_mut() {
            let limit_ms = rt.stale_after_ms;
            let silent: Vec<Signal> = rt
                .expected
                .iter()
                .copied()
                .filter(|&s| {
                    let since = rt.last_seen_ms.get(&s).copied().unwrap_or(watched_from);
                    rt.outage.as_ref().is_some_and(|o| o.holds(s)) || now - since > limit_ms
                })
                .collect();
            if silent.is_empty() {
                if let Some(o) = rt.outage.take() {
                    let back = o
                        .signals
                        .iter()
                        .filter_map(|s| s.back_ms)
                        .max()
                        .unwrap_or(now);
                    ended.push(alerts::stale_tag_returned(
                        tag, &o.signals, o.since_ms, back,
                    ));
                }
                continue;
            }
            let outage = rt.outage.get_or_insert(Outage {
                signals: Vec::new(),
                since_ms: i64::MAX,
            });
            let news = outage.extend(&silent, &rt.last_seen_ms, watched_from);
            if news || refresh {
                let alert = alerts::stale_tag(tag, &outage.signals, outage.since_ms, now);
                sightings.push((alert, news));
            }
        }
        for (alert, news) in sightings {
            self.raise(alert, news).await;
        }
        for alert in ended {
            self.settle(alert).await;
        }
    }

    async fn publish_status(&mut self) {
        let Some(topic) = self.settings.status_topic.clone() else {
            return;
        };
        let payload = serde_json::json!({
            "time": jiff::Timestamp::now().to_string(),
            "counters": &self.counters,
            "loops": self.loops.len(),
        });
        self.publish(topic, payload).await;
    }

    /// Hands a message for one of the daemon's own topics to the MQTT task. When that task has
    /// ended there is no one to publish it; the alert or status is in the store and the log.
    async fn publish(&self, topic: String, payload: serde_json::Value) {
        let payload = payload.to_string().into_bytes();
        let _ = self
            .outbound
            .send(Outbound::Publish { topic, payload })
            .await;
    }

    async fn prune(&mut self) {
        let (Some(keep), Some(now)) = (self.settings.raw_retention_ms, self.clock.now_ms()) else {
            return;
        };
        // Keep the undisturbed stretch before every episode that identification looks at.
        let margin = self
            .loops
            .values()
            .map(|rt| horizon_ms(rt.tracker.setup(), 0.25))
            .max()
            .unwrap_or(0);
        match self.store.prune_samples(now - keep, margin).await {
            Ok(n) if n > 0 => tracing::info!(deleted = n, "pruned old raw samples"),
            Ok(_) => {}
            Err(e) => tracing::warn!(error = %e, "could not prune old raw samples"),
        }
    }
}

/// `times` the loop's evaluation horizon (its horizon factor times its spec's settling time),
/// in milliseconds: how far back the live analysis can look.
pub fn horizon_ms(setup: &LoopSetup, times: f64) -> i64 {
    s_to_ms(times * setup.horizon_s())
}

fn log_model(tag: &str, m: &Model) {
    tracing::info!(
        loop_tag = tag,
        gain = m.gain,
        time_constant_s = m.time_constant_s,
        dead_time_s = m.dead_time_s,
        fit_r2 = m.fit_r2,
        "process model identified"
    );
}

async fn sleep_until(deadline: Option<tokio::time::Instant>) {
    match deadline {
        Some(d) => tokio::time::sleep_until(d).await,
        None => std::future::pending().await,
    }
}

#[cfg(test)]
mod tests;
