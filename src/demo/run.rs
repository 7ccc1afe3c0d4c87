//! The demo's orchestration: broker, configuration, daemon, plant, progress, summary (see the
//! module docs of `demo`).

use super::plant::{Link, LoopDef, Plant, Reading};
use super::{
    CONFIG_FILE, DemoArgs, LOG_FILE, MAX_BATCH, MAX_LAG_SAMPLES, MAX_TICK_WALL, PUBLISH_EVERY,
    STALE_AFTER_S, STORE_FILE, TICK, broker, summary,
};
use crate::cli::UsageError;
use crate::config::Config;
use crate::daemon::Daemon;
use crate::store::Store;
use anyhow::Context;
use rumqttc::{AsyncClient, EventLoop, MqttOptions, QoS};
use std::fmt::Write as _;
use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicI64, AtomicU64, Ordering};
use std::time::{Duration, Instant};
use tokio::sync::{mpsc, oneshot, watch};

/// The topic prefix of the plant's controllers.
const TOPIC_ROOT: &str = "heronreach";
/// How long the daemon may take to receive the plant's first samples.
const FIRST_SAMPLES_TIMEOUT: Duration = Duration::from_secs(20);
/// How long the end of the run waits for the daemon to commit what it was sent.
const DRAIN_TIMEOUT: Duration = Duration::from_secs(60);
/// The committed count must hold still this long to call the daemon caught up.
const QUIET_FOR: Duration = Duration::from_millis(500);

/// Where the demo's files go.
struct Files {
    dir: PathBuf,
    config: PathBuf,
    store: PathBuf,
    log: PathBuf,
}

impl Files {
    fn new(dir: &Path) -> Files {
        Files {
            dir: dir.to_owned(),
            config: dir.join(CONFIG_FILE),
            store: dir.join(STORE_FILE),
            log: dir.join(LOG_FILE),
        }
    }

    /// Creates the folder and removes the previous run's store (with SQLite's side files).
    fn prepare(&self) -> anyhow::Result<()> {
        std::fs::create_dir_all(&self.dir)
            .with_context(|| format!("cannot create the folder {}", self.dir.display()))?;
        for suffix in ["", "-wal", "-shm"] {
            let mut p = self.store.clone().into_os_string();
            p.push(suffix);
            let p = PathBuf::from(p);
            match std::fs::remove_file(&p) {
                Ok(()) => {}
                Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
                Err(e) => {
                    return Err(e).with_context(|| {
                        format!("cannot remove the previous demo store {}", p.display())
                    });
                }
            }
        }
        Ok(())
    }
}

/// The MQTT topic of one loop signal.
fn topic(def: &LoopDef, signal: &str) -> String {
    format!("{TOPIC_ROOT}/{}/{}/{signal}", def.area, def.tag)
}

/// The daemon's configuration for the plant, as a TOML file a user can read and reuse.
pub fn config_text(defs: &[LoopDef], mqtt_port: u16) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "# headroom configuration for the Heron Reach pilot plant, written by `headroom demo`.\n\
         # The plant is simulated; `headroom check-config --config {CONFIG_FILE}` describes it.\n\n\
         [store]\npath = \"{STORE_FILE}\"\n\
         # The demo's data span at most 60 days; keep every raw sample.\n\
         raw_retention_days = 90\n\n\
         [mqtt]\n\
         # The demo's embedded broker; it runs only while the demo does.\n\
         url = \"mqtt://127.0.0.1:{mqtt_port}\"\n\
         client_id = \"headroom-demo\"\n\
         alert_topic = \"headroom/heronreach/alerts\"\n\
         status_topic = \"headroom/heronreach/status\""
    );
    for d in defs {
        let _ = writeln!(
            t,
            "\n[loops.{tag}]\ndescription = \"{desc}\"\npv_unit = \"{unit}\"\n\
             op_min = {op_min:?}\nop_max = {op_max:?}\nexpected_period_s = {period:?}\n\
             # {STALE_AFTER_S} s of plant time: see `demo::STALE_AFTER_S`.\n\
             stale_after_periods = {stale:?}\n\n[loops.{tag}.spec]\n\
             settle_band_pct = {band:?}\nsettle_within_s = {within:?}",
            tag = d.tag,
            desc = d.description,
            unit = d.pv_unit,
            op_min = d.op_min(),
            op_max = d.op_max(),
            period = d.sample_period_s,
            stale = (STALE_AFTER_S / d.sample_period_s).ceil(),
            band = d.settle_band_pct,
            within = d.settle_within_s,
        );
        if let Some(o) = d.max_overshoot_pct {
            let _ = writeln!(t, "max_overshoot_pct = {o:?}");
        }
        match d.link {
            Link::Mqtt | Link::Modbus => {
                for s in ["sp", "pv", "op"] {
                    let _ = writeln!(
                        t,
                        "\n[loops.{}.{s}]\ntopic = \"{}\"\nformat = \"json\"\n\
                         value_field = \"v\"\ntime_field = \"t\"",
                        d.tag,
                        topic(d, s)
                    );
                }
            }
        }
    }
    t
}

/// Samples waiting to be published, per loop and signal.
struct Outbox {
    /// `[loop][sp, pv, op]` → (epoch ms, value).
    pending: Vec<[Vec<(i64, f64)>; 3]>,
    start_ms: i64,
}

impl Outbox {
    fn new(loops: usize, start_ms: i64) -> Outbox {
        Outbox {
            pending: (0..loops).map(|_| Default::default()).collect(),
            start_ms,
        }
    }

    fn push(&mut self, index: usize, r: Reading) {
        let ms = self.start_ms + (r.time_s * 1000.0).round() as i64;
        let p = &mut self.pending[index];
        p[0].push((ms, r.sp));
        if let Some(pv) = r.pv {
            p[1].push((ms, pv));
        }
        p[2].push((ms, r.op));
    }

    /// The messages for everything pending: (topic, JSON array payload, samples).
    fn drain(&mut self, defs: &[LoopDef]) -> Vec<(String, Vec<u8>, u64)> {
        let mut out = Vec::new();
        for (d, signals) in defs.iter().zip(self.pending.iter_mut()) {
            for (s, samples) in ["sp", "pv", "op"].into_iter().zip(signals.iter_mut()) {
                for chunk in samples.chunks(MAX_BATCH) {
                    out.push((topic(d, s), payload(chunk), chunk.len() as u64));
                }
                samples.clear();
            }
        }
        out
    }
}

/// A JSON batch: `[{"t":1732345678000,"v":61.2346}, ...]`. Values carry four decimals, finer
/// than any of the plant's transmitters resolve.
fn payload(samples: &[(i64, f64)]) -> Vec<u8> {
    let mut s = String::with_capacity(samples.len() * 32 + 2);
    s.push('[');
    for (i, (t, v)) in samples.iter().enumerate() {
        if i > 0 {
            s.push(',');
        }
        let _ = write!(s, "{{\"t\":{t},\"v\":{v:.4}}}");
    }
    s.push(']');
    s.into_bytes()
}

/// Counters shared between the plant, the progress line and the end of the run.
#[derive(Default)]
struct Shared {
    /// The plant's clock, epoch ms.
    clock_ms: AtomicI64,
    /// Samples handed to the MQTT publisher.
    published: AtomicU64,
}

/// `headroom demo`.
pub async fn run(args: &DemoArgs, out: &mut dyn Write) -> anyhow::Result<()> {
    let duration_s = args.duration_s()?;
    let speed = args.checked_speed()?;
    let files = Files::new(&args.out);
    files.prepare()?;

    // A port in use is the user's to fix (exit code 2).
    let broker = broker::start(args.mqtt_port).map_err(|e| match e {
        broker::BrokerError::PortInUse { .. } => anyhow::Error::new(UsageError(e.to_string())),
        e => anyhow::Error::new(e),
    })?;
    let mqtt_port = broker.addr.port();

    // Schedules run on past the demo's end when it keeps running, so the plant stays lively.
    let horizon_s = if args.keep_running {
        duration_s + 30.0 * super::plant::DAY_S
    } else {
        duration_s
    };
    let mut plant = Plant::new(horizon_s);
    let defs: Vec<LoopDef> = plant.defs().to_vec();
    std::fs::write(&files.config, config_text(&defs, mqtt_port))
        .with_context(|| format!("cannot write {}", files.config.display()))?;
    let config = Config::load(&files.config)
        .with_context(|| format!("the demo's configuration {}", files.config.display()))?;
    let daemon = Daemon::build(&config, &files.config).await?;
    let committed = daemon.committed();
    let (stop_daemon, daemon_stop) = oneshot::channel::<()>();
    let mut daemon_task = tokio::spawn(daemon.run(async {
        let _ = daemon_stop.await;
    }));
    let reader = Store::open_read_only(&files.store)
        .await
        .context("cannot open the demo's store for reading")?;

    let now_ms = jiff::Timestamp::now().as_millisecond();
    // Whole seconds, so the plant's sample stamps are round.
    let start_ms = (now_ms - (duration_s * 1000.0) as i64).div_euclid(1000) * 1000;
    let shared = Arc::new(Shared::default());
    shared.clock_ms.store(start_ms, Ordering::Relaxed);

    let (publish_tx, stop_publisher) = start_publisher(mqtt_port);
    writeln!(
        out,
        "Heron Reach pilot plant, simulated: {} loops, {:.1} days of plant time at {speed:.0}× real time.\n\
         Embedded MQTT broker: mqtt://{} (the plant publishes on {TOPIC_ROOT}/#, headroom on headroom/#)\n\
         headroom is watching; its store is {} and its log {}.",
        defs.len(),
        duration_s / 86_400.0,
        broker.addr,
        files.store.display(),
        files.log.display()
    )?;
    out.flush()?;
    let wall_start = Instant::now();

    let progress = Progress::start(
        shared.clone(),
        committed.clone(),
        reader.clone(),
        start_ms,
        duration_s,
    );

    let interrupt = crate::cli::shutdown_signal();
    tokio::pin!(interrupt);
    let mut outbox = Outbox::new(defs.len(), start_ms);
    let mut interrupted = false;

    // The first samples go out until the daemon has stored some: messages published before its
    // subscription is in place are dropped by the broker, and inserts are idempotent, so sending
    // the same samples again is harmless.
    plant.advance_to(0.0, &mut |i, r| outbox.push(i, r));
    let first = outbox.drain(&defs);
    let first_count: u64 = first.iter().map(|m| m.2).sum();
    let deadline = Instant::now() + FIRST_SAMPLES_TIMEOUT;
    while committed.load(Ordering::Relaxed) == 0 {
        for (t, p, _) in &first {
            publish_tx
                .send((t.clone(), p.clone()))
                .await
                .context("the demo's MQTT publisher stopped")?;
        }
        anyhow::ensure!(
            Instant::now() < deadline,
            "the daemon received nothing from the embedded broker at {} within {} s; see {}",
            broker.addr,
            FIRST_SAMPLES_TIMEOUT.as_secs(),
            files.log.display()
        );
        tokio::select! {
            _ = tokio::time::sleep(Duration::from_millis(300)) => {}
            _ = &mut interrupt => { interrupted = true; break; }
        }
    }
    shared.published.fetch_add(first_count, Ordering::Relaxed);

    // The accelerated run.
    let mut sim_s = 0.0f64;
    let mut last = Instant::now();
    let mut last_publish = Instant::now();
    let mut tick = tokio::time::interval(TICK);
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    while !interrupted && plant.time_s() < duration_s {
        tokio::select! {
            _ = tick.tick() => {}
            _ = &mut interrupt => { interrupted = true; }
            res = &mut daemon_task => {
                progress.stop().await;
                return Err(daemon_ended(res));
            }
        }
        let dt = last.elapsed().min(MAX_TICK_WALL);
        last = Instant::now();
        let lag = shared
            .published
            .load(Ordering::Relaxed)
            .saturating_sub(committed.load(Ordering::Relaxed));
        if lag < MAX_LAG_SAMPLES {
            sim_s = (sim_s + speed * dt.as_secs_f64()).min(duration_s);
        }
        plant.advance_to(sim_s.floor(), &mut |i, r| outbox.push(i, r));
        shared.clock_ms.store(
            start_ms + (plant.time_s() * 1000.0) as i64,
            Ordering::Relaxed,
        );
        if last_publish.elapsed() >= PUBLISH_EVERY || plant.time_s() >= duration_s {
            last_publish = Instant::now();
            publish(&mut outbox, &defs, &publish_tx, &shared).await?;
        }
    }
    publish(&mut outbox, &defs, &publish_tx, &shared).await?;
    let caught_up = wait_for_commits(&shared, &committed).await;
    let run_wall = wall_start.elapsed();
    progress.stop().await;
    if !caught_up {
        tracing::warn!("the daemon had not committed everything it was sent when the demo ended");
    }

    let write_summary = |out: &mut dyn Write, summaries: &[summary::LoopSummary]| {
        summary::render(
            summaries,
            &summary::RunFacts {
                simulated_s: plant_time(&shared, start_ms),
                wall: run_wall,
                speed,
                interrupted,
                files: summary::FilePaths {
                    config: files.config.clone(),
                    store: files.store.clone(),
                    log: files.log.clone(),
                },
            },
            out,
        )
    };

    if args.keep_running && !interrupted {
        let summaries = summary::gather(&reader, &config, &files.config, &defs).await?;
        write_summary(out, &summaries)?;
        writeln!(
            out,
            "\nStill running in real time: the broker at mqtt://{addr}, the plant and the daemon. \
             Watch with any MQTT client, e.g.\n  mosquitto_sub -h 127.0.0.1 -p {port} -t '{TOPIC_ROOT}/#' -t 'headroom/#' -v\n\
             Ctrl-C stops.",
            addr = broker.addr,
            port = mqtt_port,
        )?;
        out.flush()?;
        let mut tick = tokio::time::interval(Duration::from_millis(250));
        let mut last = Instant::now();
        loop {
            tokio::select! {
                _ = tick.tick() => {}
                _ = &mut interrupt => break,
                res = &mut daemon_task => return Err(daemon_ended(res)),
            }
            sim_s += last.elapsed().as_secs_f64();
            last = Instant::now();
            plant.advance_to(sim_s.floor(), &mut |i, r| outbox.push(i, r));
            shared.clock_ms.store(
                start_ms + (plant.time_s() * 1000.0) as i64,
                Ordering::Relaxed,
            );
            publish(&mut outbox, &defs, &publish_tx, &shared).await?;
        }
    }

    // The daemon's own shutdown path: it commits what has arrived and closes the store.
    let _ = stop_daemon.send(());
    let daemon_result = daemon_task.await;
    drop(publish_tx);
    stop_publisher.send_replace(true);
    match daemon_result {
        Ok(r) => r.context("the daemon failed")?,
        Err(e) => return Err(anyhow::anyhow!("the daemon task failed: {e}")),
    }
    if !args.keep_running || interrupted {
        let summaries = summary::gather(&reader, &config, &files.config, &defs).await?;
        write_summary(out, &summaries)?;
    }
    reader.close().await;
    Ok(())
}

fn plant_time(shared: &Shared, start_ms: i64) -> f64 {
    (shared.clock_ms.load(Ordering::Relaxed) - start_ms) as f64 / 1000.0
}

fn daemon_ended(res: Result<anyhow::Result<()>, tokio::task::JoinError>) -> anyhow::Error {
    match res {
        Ok(Ok(())) => anyhow::anyhow!("the daemon stopped before the demo ended"),
        Ok(Err(e)) => e.context("the daemon stopped"),
        Err(e) => anyhow::anyhow!("the daemon task failed: {e}"),
    }
}

/// Publishes everything pending, counting the samples.
async fn publish(
    outbox: &mut Outbox,
    defs: &[LoopDef],
    tx: &mpsc::Sender<(String, Vec<u8>)>,
    shared: &Shared,
) -> anyhow::Result<()> {
    for (topic, payload, n) in outbox.drain(defs) {
        tx.send((topic, payload))
            .await
            .context("the demo's MQTT publisher stopped")?;
        shared.published.fetch_add(n, Ordering::Relaxed);
    }
    Ok(())
}

/// Waits until the daemon has committed at least what was published and its count holds still;
/// `false` when that did not happen within `DRAIN_TIMEOUT`.
async fn wait_for_commits(shared: &Shared, committed: &AtomicU64) -> bool {
    let deadline = Instant::now() + DRAIN_TIMEOUT;
    let mut seen = committed.load(Ordering::Relaxed);
    let mut since = Instant::now();
    while Instant::now() < deadline {
        tokio::time::sleep(Duration::from_millis(50)).await;
        let now = committed.load(Ordering::Relaxed);
        if now != seen {
            seen = now;
            since = Instant::now();
        } else if now >= shared.published.load(Ordering::Relaxed) && since.elapsed() >= QUIET_FOR {
            return true;
        }
    }
    false
}

/// The plant's MQTT publisher: a client whose event loop runs in its own task, fed through a
/// bounded channel (when it is full the plant waits). Returns the channel and the stop switch
/// for the event loop.
fn start_publisher(port: u16) -> (mpsc::Sender<(String, Vec<u8>)>, watch::Sender<bool>) {
    let mut o = MqttOptions::new("heronreach-plant", "127.0.0.1", port);
    o.set_keep_alive(Duration::from_secs(30));
    o.set_inflight(200);
    o.set_max_packet_size(1 << 20, 1 << 20);
    let (client, eventloop) = AsyncClient::new(o, 256);
    let (tx, mut rx) = mpsc::channel::<(String, Vec<u8>)>(64);
    let (stop_tx, stop_rx) = watch::channel(false);
    tokio::spawn(drive(eventloop, stop_rx));
    tokio::spawn(async move {
        while let Some((topic, payload)) = rx.recv().await {
            if client
                .publish(topic, QoS::AtLeastOnce, false, payload)
                .await
                .is_err()
            {
                break;
            }
        }
        let _ = client.disconnect().await;
    });
    (tx, stop_tx)
}

/// Polls the publisher's event loop until stopped, waiting a moment after an error (rumqttc
/// reconnects at once otherwise, a busy spin).
async fn drive(mut eventloop: EventLoop, mut stop: watch::Receiver<bool>) {
    loop {
        tokio::select! {
            ev = eventloop.poll() => {
                if let Err(e) = ev {
                    tracing::debug!(error = %e, "demo publisher connection");
                    tokio::time::sleep(Duration::from_millis(200)).await;
                }
            }
            _ = stop.changed() => break,
        }
    }
}

/// The live status line: a bar, simulated time, samples stored, episodes scored, alerts raised.
/// On a terminal it redraws one line; otherwise it prints a line at every tenth of the run.
struct Progress {
    stop: oneshot::Sender<()>,
    task: tokio::task::JoinHandle<()>,
}

impl Progress {
    fn start(
        shared: Arc<Shared>,
        committed: Arc<AtomicU64>,
        store: Store,
        start_ms: i64,
        duration_s: f64,
    ) -> Progress {
        let (stop, mut stopped) = oneshot::channel::<()>();
        let task = tokio::spawn(async move {
            let tty = std::io::stderr().is_terminal();
            let mut tick =
                tokio::time::interval(Duration::from_millis(if tty { 250 } else { 500 }));
            let mut printed_tenth = -1i64;
            let mut printed_line = String::new();
            let mut counts = (0usize, 0u64);
            loop {
                let last = tokio::select! {
                    _ = tick.tick() => false,
                    _ = &mut stopped => true,
                };
                if let (Ok(e), Ok(a)) =
                    (store.episodes(None, None).await, store.alerts(false).await)
                {
                    counts = (
                        e.iter().filter(|e| e.is_final).count(),
                        a.iter().map(|a| a.count).sum(),
                    );
                }
                let sim_s = (shared.clock_ms.load(Ordering::Relaxed) - start_ms) as f64 / 1000.0;
                let frac = (sim_s / duration_s).clamp(0.0, 1.0);
                let line = status_line(
                    frac,
                    shared.clock_ms.load(Ordering::Relaxed),
                    committed.load(Ordering::Relaxed),
                    counts.0,
                    counts.1,
                );
                let mut err = std::io::stderr().lock();
                if tty {
                    let _ = write!(err, "\r\x1b[2K{line}");
                    if last {
                        let _ = writeln!(err);
                    }
                } else {
                    let tenth = (frac * 10.0).floor() as i64;
                    if tenth > printed_tenth || (last && line != printed_line) {
                        printed_line.clone_from(&line);
                        printed_tenth = tenth;
                        let _ = writeln!(err, "{line}");
                    }
                }
                let _ = err.flush();
                if last {
                    break;
                }
            }
        });
        Progress { stop, task }
    }

    async fn stop(self) {
        let _ = self.stop.send(());
        let _ = self.task.await;
    }
}

/// `[██████████░░░░░░░░░░]  52 %  plant time 2026-11-19 14:05  samples 1,234,567  episodes 123  alerts 9`
fn status_line(frac: f64, clock_ms: i64, samples: u64, episodes: usize, alerts: u64) -> String {
    const WIDTH: usize = 24;
    let filled = (frac * WIDTH as f64).round() as usize;
    let bar: String = "█".repeat(filled) + &"░".repeat(WIDTH - filled);
    let when = jiff::Timestamp::from_millisecond(clock_ms)
        .map(|t| t.strftime("%Y-%m-%d %H:%M").to_string())
        .unwrap_or_default();
    format!(
        "[{bar}] {:>3.0} %  plant time {when} UTC  samples {}  episodes {episodes}  alerts {alerts}",
        frac * 100.0,
        thousands(samples)
    )
}

/// 1234567 → "1,234,567".
pub fn thousands(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn batches_are_json_arrays_the_decoder_reads() {
        let p = payload(&[(1_700_000_000_000, 61.23456), (1_700_000_001_000, -0.5)]);
        let v: serde_json::Value = serde_json::from_slice(&p).unwrap();
        assert_eq!(v[0]["t"], 1_700_000_000_000i64);
        assert_eq!(v[0]["v"], 61.2346);
        assert_eq!(v[1]["v"], -0.5);
    }

    #[test]
    fn the_written_configuration_is_valid_and_watches_every_loop() {
        let defs = super::super::plant::loops();
        let text = config_text(&defs, 18_830);
        let cfg = Config::parse(&text, Path::new("heronreach.toml")).expect("valid");
        assert_eq!(cfg.loops.len(), defs.len());
        assert!(cfg.loops.values().all(|l| l.is_watched()));
        assert_eq!(cfg.mqtt.as_ref().map(|m| m.port), Some(18_830));
    }

    #[test]
    fn numbers_get_thousands_separators() {
        assert_eq!(thousands(0), "0");
        assert_eq!(thousands(999), "999");
        assert_eq!(thousands(1_000), "1,000");
        assert_eq!(thousands(1_234_567), "1,234,567");
    }
}
