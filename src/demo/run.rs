//! The demo's orchestration: broker, configuration, daemon, plant, progress, summary (see the
//! module docs of `demo`).

use super::plant::{Link, LoopDef, Plant, Reading};
use super::progress::{Progress, Shared};
use super::registers::{self, Register};
use super::{
    CONFIG_FILE, DemoError, DemoOptions, LOG_FILE, MAX_BATCH, MAX_LAG_SAMPLES, MAX_TICK_WALL,
    MODBUS_PERIOD_S, PUBLISH_EVERY, STALE_AFTER_S, STORE_FILE, broker, summary,
};
use crate::config::Config;
use crate::daemon::{Clock, Daemon};
use crate::modbus::sim::device::{RegisterMap, SimDevice};
use crate::store::Store;
use anyhow::Context;
use rumqttc::{AsyncClient, EventLoop, MqttOptions, QoS};
use std::fmt::Write as _;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};
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

    /// The paths for the summary; the reports are added once written.
    fn paths(&self) -> summary::FilePaths {
        summary::FilePaths {
            config: self.config.clone(),
            store: self.store.clone(),
            log: self.log.clone(),
            reports: Vec::new(),
        }
    }
}

/// The MQTT topic of one loop signal.
fn topic(def: &LoopDef, signal: &str) -> String {
    format!("{TOPIC_ROOT}/{}/{}/{signal}", def.area, def.tag)
}

/// The daemon's configuration for the plant, as a TOML file a user can read and reuse. `speed`
/// sets the Modbus poll period: once per `MODBUS_PERIOD_S` of plant time.
pub fn config_text(defs: &[LoopDef], mqtt_port: u16, modbus_port: u16, speed: f64) -> String {
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
         status_topic = \"headroom/heronreach/status\"\n\n\
         [modbus.{device}]\n\
         # The cook area's controller, simulated by the demo: TIC-120 and TIC-130.\n\
         address = \"127.0.0.1:{modbus_port}\"\n\
         unit_id = 1\n\
         # Once per {MODBUS_PERIOD_S} s of plant time, which runs {speed}× as fast as the wall clock.\n\
         poll_period_s = {poll:?}\n\
         timeout_s = 1.0",
        device = registers::DEVICE,
        poll = MODBUS_PERIOD_S / speed,
    );
    for d in defs {
        let _ = writeln!(
            t,
            "\n[loops.{tag}]\ndescription = \"{desc}\"\npv_unit = \"{unit}\"\n\
             op_min = {op_min:?}\nop_max = {op_max:?}\nexpected_period_s = {period:?}\n\
             # {STALE_AFTER_S} s of plant time: see `demo::STALE_AFTER_S`.\n\
             stale_after_periods = {stale:?}",
            tag = d.tag,
            desc = d.description,
            unit = d.pv_unit,
            op_min = d.op_min(),
            op_max = d.op_max(),
            period = d.sample_period_s,
            stale = (STALE_AFTER_S / d.sample_period_s).ceil(),
        );
        let layout = registers::layout(d.tag).filter(|_| d.link == Link::Modbus);
        if let Some(layout) = &layout {
            let _ = writeln!(
                t,
                "{}\n\
                 # A poll that runs late by a few wall-clock milliseconds is minutes of plant time;\n\
                 # a gap only counts when it is longer than 40 periods.\n\
                 analysis = {{ max_gap_s = 600.0 }}",
                layout_sources(layout),
            );
        } else {
            for s in ["sp", "pv", "op"] {
                let _ = writeln!(
                    t,
                    "{s} = {{ topic = \"{}\", format = \"json\", value_field = \"v\", time_field = \"t\" }}",
                    topic(d, s)
                );
            }
        }
        let _ = write!(
            t,
            "\n[loops.{}.spec]\nsettle_band_pct = {:?}\nsettle_within_s = {:?}\n",
            d.tag, d.settle_band_pct, d.settle_within_s
        );
        if let Some(o) = d.max_overshoot_pct {
            let _ = writeln!(t, "max_overshoot_pct = {o:?}");
        }
        t.push_str(&controller_toml(d));
    }
    t
}

/// A demo loop's controller as its config describes it, with today's settings: the temperature
/// loops' controllers take a proportional band and minutes in the series form, read on a
/// 0–150 °C transmitter range (a choice of this invented plant); the others take the canonical
/// convention. The kettle's heater is rated 12 kW.
fn controller_toml(d: &LoopDef) -> String {
    use crate::analysis::controller::{self, Convention, Form, GainUnit, Ideal, IntegralUnit};
    let pi = &d.sim.controller;
    let temperature = d.pv_unit == "°C";
    let pv_range = [0.0, 150.0];
    let convention = if temperature {
        Convention {
            form: Form::Series,
            gain: GainUnit::ProportionalBand,
            integral: IntegralUnit::Minutes,
            ..Convention::CANONICAL
        }
    } else {
        Convention::CANONICAL
    };
    let ideal = Ideal {
        gain: pi.gain,
        integral_time_s: pi.integral_time_s,
        derivative_time_s: 0.0,
    };
    let spans = controller::Spans {
        pv_span: pv_range[1] - pv_range[0],
        op_span: pi.op_max - pi.op_min,
    };
    let Ok(w) = controller::write(ideal, convention, Some(spans)) else {
        return String::new();
    };
    let mut t = format!(
        "\n[loops.{}.controller]\nform = {:?}\ngain_unit = {:?}\nintegral_unit = {:?}\n\
         action = {:?}\ngain = {:?}\n",
        d.tag,
        convention.form.as_str(),
        convention.gain.as_str(),
        convention.integral.as_str(),
        w.action.as_str(),
        w.gain
    );
    if let Some(i) = w.integral {
        let _ = writeln!(t, "integral = {i:?}");
    }
    if temperature {
        let _ = writeln!(t, "pv_range = [{:?}, {:?}]", pv_range[0], pv_range[1]);
    }
    if d.tag == "TIC-120" {
        let _ = write!(
            t,
            "\n[loops.{}.actuator]\nrating = 12.0\nunit = \"kW\"\n",
            d.tag
        );
    }
    t
}

fn layout_sources(layout: &[Register; 3]) -> String {
    ["sp", "pv", "op"]
        .iter()
        .zip(layout)
        .map(|(s, r)| format!("{s} = {}", registers::toml(r)))
        .collect::<Vec<_>>()
        .join("\n")
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

/// A running daemon and how to stop it.
struct RunningDaemon {
    config: Config,
    committed: Arc<AtomicU64>,
    stop: oneshot::Sender<()>,
    task: tokio::task::JoinHandle<anyhow::Result<()>>,
}

impl RunningDaemon {
    /// Writes the configuration for `speed`, builds the daemon (which resumes each loop from the
    /// store, as after any restart) and runs it with the plant's clock for polled samples.
    async fn start(
        files: &Files,
        defs: &[LoopDef],
        ports: (u16, u16),
        speed: f64,
        clock: Clock,
    ) -> anyhow::Result<RunningDaemon> {
        std::fs::write(&files.config, config_text(defs, ports.0, ports.1, speed))
            .with_context(|| format!("cannot write {}", files.config.display()))?;
        let config = Config::load(&files.config)
            .with_context(|| format!("the demo's configuration {}", files.config.display()))?;
        let daemon = Daemon::build(&config, &files.config)
            .await?
            .with_clock(clock);
        let committed = daemon.committed();
        let (stop, stopped) = oneshot::channel::<()>();
        let task = tokio::spawn(daemon.run(async {
            let _ = stopped.await;
        }));
        Ok(RunningDaemon {
            config,
            committed,
            stop,
            task,
        })
    }

    /// Stops it through its own shutdown path: it commits what has arrived and closes the store.
    async fn stop(self) -> anyhow::Result<()> {
        let _ = self.stop.send(());
        match self.task.await {
            Ok(r) => r.context("the daemon failed"),
            Err(e) => Err(anyhow::anyhow!("the daemon task failed: {e}")),
        }
    }
}

/// The plant and where its values go.
struct PlantSide {
    plant: Plant,
    defs: Vec<LoopDef>,
    outbox: Outbox,
    device: SimDevice,
    /// Register layouts of the Modbus loops, by loop index.
    layouts: Vec<Option<[Register; 3]>>,
    shared: Arc<Shared>,
    start_ms: i64,
    publish_tx: mpsc::Sender<(String, Vec<u8>)>,
}

impl PlantSide {
    fn new(
        plant: Plant,
        device: SimDevice,
        shared: Arc<Shared>,
        start_ms: i64,
        publish_tx: mpsc::Sender<(String, Vec<u8>)>,
    ) -> PlantSide {
        let defs = plant.defs().to_vec();
        PlantSide {
            layouts: defs
                .iter()
                .map(|d| registers::layout(d.tag).filter(|_| d.link == Link::Modbus))
                .collect(),
            outbox: Outbox::new(defs.len(), start_ms),
            plant,
            defs,
            device,
            shared,
            start_ms,
            publish_tx,
        }
    }

    /// Advances the plant to `t_s`, queues the MQTT loops' samples, and writes the Modbus loops'
    /// current values into the device together with the clock, under the device's lock. A poll
    /// then sees values and a clock of the same moment — or, when the plant moves on between
    /// the poller reading the clock and reading the registers, values one tick newer than their
    /// stamp, as a real poller's jitter would give.
    fn advance(&mut self, t_s: f64) {
        let outbox = &mut self.outbox;
        let defs = &self.defs;
        self.plant.advance_to(t_s, &mut |i, r| {
            if defs[i].link == Link::Mqtt {
                outbox.push(i, r);
            }
        });
        let now_ms = self.start_ms + (self.plant.time_s() * 1000.0) as i64;
        let plant = &self.plant;
        let layouts = &self.layouts;
        let shared = &self.shared;
        self.device.with_map(|map| {
            for (i, layout) in layouts.iter().enumerate() {
                let Some(layout) = layout else { continue };
                let r = plant.current(i);
                for (reg, v) in layout.iter().zip([Some(r.sp), r.pv, Some(r.op)]) {
                    if let Some(v) = v {
                        map.put(reg, v);
                    }
                }
            }
            shared.clock_ms.store(now_ms, Ordering::Relaxed);
        });
    }

    /// Publishes everything queued, counting the samples.
    async fn publish(&mut self) -> anyhow::Result<()> {
        for (topic, payload, n) in self.outbox.drain(&self.defs) {
            self.publish_tx
                .send((topic, payload))
                .await
                .context("the demo's MQTT publisher stopped")?;
            self.shared.published.fetch_add(n, Ordering::Relaxed);
        }
        Ok(())
    }
}

/// `headroom demo`: starts the broker and the simulated device, then runs the plant and the
/// daemon (see the module docs of `demo`).
pub async fn run(options: &DemoOptions, out: &mut dyn Write) -> Result<(), DemoError> {
    let files = Files::new(&options.out);
    files.prepare()?;
    let broker = broker::start(options.mqtt_port)?;
    let device = SimDevice::start(options.modbus_port, RegisterMap::new(registers::MAP_LEN))
        .await
        .map_err(|source| DemoError::ModbusPort {
            port: options.modbus_port,
            source,
        })?;
    Ok(simulate(options, &files, broker, device, out).await?)
}

/// The plant's clock, starting `duration_s` before now on a whole second (so sample stamps are
/// round), the counters shared with the progress line, and the clock as the daemon reads it.
fn plant_clock(duration_s: f64) -> (i64, Arc<Shared>, Clock) {
    let now_ms = jiff::Timestamp::now().as_millisecond();
    let start_ms = (now_ms - (duration_s * 1000.0) as i64).div_euclid(1000) * 1000;
    let shared = Arc::new(Shared::default());
    shared.clock_ms.store(start_ms, Ordering::Relaxed);
    let clock: Clock = {
        let shared = shared.clone();
        Arc::new(move || shared.clock_ms.load(Ordering::Relaxed))
    };
    (start_ms, shared, clock)
}

/// Ctrl-C or SIGTERM, shared by every phase of the run.
type Interrupt = std::pin::Pin<Box<dyn std::future::Future<Output = ()> + Send>>;

/// The accelerated run, its summary, and the real-time run after it with `keep_running`.
async fn simulate(
    options: &DemoOptions,
    files: &Files,
    broker: broker::EmbeddedBroker,
    device: SimDevice,
    out: &mut dyn Write,
) -> anyhow::Result<()> {
    let (duration_s, speed) = (options.duration_s, options.speed);
    let ports = (broker.addr.port(), device.addr().port());

    // Schedules run on past the demo's end when it keeps running, so the plant stays lively.
    let horizon_s = if options.keep_running {
        duration_s + 30.0 * super::plant::DAY_S
    } else {
        duration_s
    };
    let plant = Plant::new(horizon_s);
    let defs: Vec<LoopDef> = plant.defs().to_vec();
    let (start_ms, shared, clock) = plant_clock(duration_s);
    let mut daemon = RunningDaemon::start(files, &defs, ports, speed, clock.clone()).await?;
    let reader = Store::open_read_only(&files.store)
        .await
        .context("cannot open the demo's store for reading")?;
    let (publish_tx, stop_publisher) = start_publisher(ports.0);
    let mut side = PlantSide::new(plant, device, shared.clone(), start_ms, publish_tx);
    announce(out, options, files, &broker, &side)?;
    let wall_start = Instant::now();
    let progress = Progress::start(
        shared.clone(),
        daemon.committed.clone(),
        reader.clone(),
        start_ms,
        duration_s,
    );
    let mut interrupt: Interrupt = Box::pin(crate::daemon::shutdown::shutdown_signal());
    let mut interrupted =
        send_first_samples(&mut side, &daemon, &broker, files, &mut interrupt).await?;
    if !interrupted {
        match accelerated(&mut side, &mut daemon, options, &mut interrupt).await {
            Ok(i) => interrupted = i,
            Err(e) => {
                progress.stop().await;
                return Err(e);
            }
        }
    }
    side.publish().await?;
    let caught_up = wait_for_commits(&shared, &daemon.committed).await;
    let run_wall = wall_start.elapsed();
    progress.stop().await;
    if !caught_up {
        tracing::warn!("the daemon had not committed everything it was sent when the demo ended");
    }
    let config = daemon.config.clone();
    // The daemon closes the store last, so SQLite folds its write-ahead log back into the file.
    reader.close().await;
    daemon.stop().await?;
    let facts = summary::RunFacts {
        simulated_s: shared.plant_time_s(start_ms),
        wall: run_wall,
        speed,
        interrupted,
        files: files.paths(),
    };
    summarise(files, &config, &defs, &shared, start_ms, facts, out).await?;

    if options.keep_running && !interrupted {
        // A new daemon for real time (Modbus polled every 15 s now), resuming from the store.
        let daemon = RunningDaemon::start(files, &defs, ports, 1.0, clock).await?;
        real_time(&mut side, daemon, &broker, &mut interrupt, out).await?;
    }
    drop(side);
    stop_publisher.send_replace(true);
    Ok(())
}

/// What runs where, printed before the run starts.
fn announce(
    out: &mut dyn Write,
    options: &DemoOptions,
    files: &Files,
    broker: &broker::EmbeddedBroker,
    side: &PlantSide,
) -> anyhow::Result<()> {
    let via = |link: Link| {
        side.defs
            .iter()
            .filter(|d| d.link == link)
            .map(|d| d.tag)
            .collect::<Vec<_>>()
            .join(", ")
    };
    writeln!(
        out,
        "Heron Reach pilot plant, simulated: {} loops, {:.1} days of plant time at {:.0}× real time.\n\
         MQTT broker (embedded):    mqtt://{}  {} publish on {TOPIC_ROOT}/#, headroom on headroom/#\n\
         Modbus device (simulated): {}  {} in its registers\n\
         headroom's store: {}   log: {}",
        side.defs.len(),
        options.duration_s / 86_400.0,
        options.speed,
        broker.addr,
        via(Link::Mqtt),
        side.device.addr(),
        via(Link::Modbus),
        files.store.display(),
        files.log.display()
    )?;
    out.flush()?;
    Ok(())
}

/// Sends the first samples until the daemon has stored them: messages published before its
/// subscription is in place are dropped by the broker, and inserts are idempotent, so sending
/// the same samples again is harmless. Returns whether the run was interrupted meanwhile.
async fn send_first_samples(
    side: &mut PlantSide,
    daemon: &RunningDaemon,
    broker: &broker::EmbeddedBroker,
    files: &Files,
    interrupt: &mut Interrupt,
) -> anyhow::Result<bool> {
    side.advance(0.0);
    let first = side.outbox.drain(&side.defs);
    let first_count: u64 = first.iter().map(|m| m.2).sum();
    let deadline = Instant::now() + FIRST_SAMPLES_TIMEOUT;
    let mut interrupted = false;
    while daemon.committed.load(Ordering::Relaxed) < first_count {
        for (t, p, _) in &first {
            side.publish_tx
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
            _ = &mut *interrupt => { interrupted = true; break; }
        }
    }
    side.shared
        .published
        .fetch_add(first_count, Ordering::Relaxed);
    Ok(interrupted)
}

/// The accelerated run. One tick is one Modbus sample period of plant time (at least 1 ms,
/// tokio's timer resolution), so each poll finds new values. Plant time waits while the daemon
/// lags too far behind. Returns whether the run was interrupted.
async fn accelerated(
    side: &mut PlantSide,
    daemon: &mut RunningDaemon,
    options: &DemoOptions,
    interrupt: &mut Interrupt,
) -> anyhow::Result<bool> {
    let (duration_s, speed) = (options.duration_s, options.speed);
    let mut sim_s = 0.0f64;
    let tick_wall = Duration::from_secs_f64((MODBUS_PERIOD_S / speed).clamp(0.001, 0.05));
    let max_step = MAX_TICK_WALL.max(2 * tick_wall);
    let mut last = Instant::now();
    let mut last_publish = Instant::now();
    let mut tick = tokio::time::interval(tick_wall);
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    while side.plant.time_s() < duration_s {
        tokio::select! {
            _ = tick.tick() => {}
            _ = &mut *interrupt => return Ok(true),
            res = &mut daemon.task => return Err(daemon_ended(res)),
        }
        let dt = last.elapsed().min(max_step);
        last = Instant::now();
        let lag = side
            .shared
            .published
            .load(Ordering::Relaxed)
            .saturating_sub(daemon.committed.load(Ordering::Relaxed));
        if lag < MAX_LAG_SAMPLES {
            sim_s = (sim_s + speed * dt.as_secs_f64()).min(duration_s);
        }
        side.advance(sim_s.floor());
        if last_publish.elapsed() >= PUBLISH_EVERY || side.plant.time_s() >= duration_s {
            last_publish = Instant::now();
            side.publish().await?;
        }
    }
    Ok(false)
}

/// The summary of the run, read back from the store, and its loop-health report.
async fn summarise(
    files: &Files,
    config: &Config,
    defs: &[LoopDef],
    shared: &Shared,
    start_ms: i64,
    mut facts: summary::RunFacts,
    out: &mut dyn Write,
) -> anyhow::Result<()> {
    let reader = Store::open_read_only(&files.store)
        .await
        .context("cannot open the demo's store for reading")?;
    let mut summaries = summary::gather(&reader, config, &files.config, defs).await?;
    let (reports, report) =
        write_report(&reader, config, files, start_ms, plant_end_ms(shared)).await?;
    facts.files.reports = reports;
    summary::add_regulation(&mut summaries, &report);
    summary::render(&summaries, &facts, out)?;
    reader.close().await;
    Ok(())
}

/// After the accelerated run: the plant in real time against a new daemon, until Ctrl-C.
async fn real_time(
    side: &mut PlantSide,
    mut daemon: RunningDaemon,
    broker: &broker::EmbeddedBroker,
    interrupt: &mut Interrupt,
    out: &mut dyn Write,
) -> anyhow::Result<()> {
    writeln!(
        out,
        "\nStill running, now in real time: the plant, the broker at mqtt://{addr}, the Modbus \
         device at {dev} and the daemon. Watch with any MQTT client, e.g.\n  \
         mosquitto_sub -h 127.0.0.1 -p {port} -t '{TOPIC_ROOT}/#' -t 'headroom/#' -v\n\
         Ctrl-C stops.",
        addr = broker.addr,
        dev = side.device.addr(),
        port = broker.addr.port(),
    )?;
    out.flush()?;
    // Plant time carries on from where the accelerated run left the plant.
    let mut sim_s = side.plant.time_s();
    let mut tick = tokio::time::interval(Duration::from_millis(250));
    let mut last = Instant::now();
    loop {
        tokio::select! {
            _ = tick.tick() => {}
            _ = &mut *interrupt => break,
            res = &mut daemon.task => return Err(daemon_ended(res)),
        }
        sim_s += last.elapsed().as_secs_f64();
        last = Instant::now();
        side.advance(sim_s.floor());
        side.publish().await?;
    }
    daemon.stop().await
}

fn plant_end_ms(shared: &Shared) -> i64 {
    shared.clock_ms.load(Ordering::Relaxed)
}

/// The loop-health summary of the whole run (the weekly report over the simulated span), in
/// every format, beside the store: the files written, and the report.
async fn write_report(
    store: &Store,
    config: &crate::config::Config,
    files: &Files,
    from_ms: i64,
    to_ms: i64,
) -> anyhow::Result<(Vec<PathBuf>, crate::report::WeeklyReport)> {
    use crate::report::{Format, Period};
    let tz = jiff::tz::TimeZone::UTC;
    let at = |ms: i64| {
        jiff::Timestamp::from_millisecond(ms)
            .map(|t| t.to_string())
            .context("the plant's clock left the calendar")
    };
    let period = Period::range(&at(from_ms)?, &at(to_ms)?, &tz)?;
    let report = crate::report::gather(
        store,
        Some(config),
        Some(&files.config),
        &period,
        jiff::Timestamp::now(),
    )
    .await?;
    let dir = files.store.parent().unwrap_or(Path::new("."));
    let written = crate::report::write_files(&report, &period, &Format::ALL, dir)?;
    Ok((written.into_iter().map(|(p, _)| p).collect(), report))
}

fn daemon_ended(res: Result<anyhow::Result<()>, tokio::task::JoinError>) -> anyhow::Error {
    match res {
        Ok(Ok(())) => anyhow::anyhow!("the daemon stopped before the demo ended"),
        Ok(Err(e)) => e.context("the daemon stopped"),
        Err(e) => anyhow::anyhow!("the daemon task failed: {e}"),
    }
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
        let text = config_text(&defs, 18_830, 15_020, 6_000.0);
        let cfg = Config::parse(&text, Path::new("heronreach.toml")).expect("valid");
        assert_eq!(cfg.loops.len(), defs.len());
        assert!(cfg.loops.values().all(|l| l.is_watched()));
        assert_eq!(cfg.mqtt.as_ref().map(|m| m.port), Some(18_830));
    }
}
