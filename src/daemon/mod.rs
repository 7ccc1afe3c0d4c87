//! The daemon (`headroom run`): the one place that wires the tasks together.
//!
//! ```text
//!  MQTT task ────────Ingest──┐
//!  Modbus task per device ───┴──> writer task ──> store (SQLite)
//!     ^                             │  └──> live trackers (pure analysis core) ──> episodes,
//!     └─────Outbound (to MQTT)──────┘       models, alerts, gaps
//!  weekly summary task (with `[report]`) ──> reads the store, writes the report folder
//! ```
//!
//! Shutdown: `stop` turns true → the MQTT task stops forwarding messages and the Modbus tasks
//! stop polling; each drops its ingest sender → the writer commits what it holds, hands over the
//! last acknowledgements and ends → the MQTT task sends them, disconnects and ends → the store
//! is closed. Messages that arrived after the stop are not acknowledged, so the broker
//! redelivers them to the next run.

pub mod shutdown;
pub mod writer;

use crate::analysis::LoopSetup;
use crate::config::Config;
use crate::modbus::source as modbus;
use crate::mqtt::source as mqtt;
use crate::sample::Signal;
use crate::store::{LoopRow, Store};
use crate::units::ms_to_s;
use anyhow::Context;
use std::collections::HashMap;
use std::future::Future;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::AtomicU64;
use tokio::sync::{mpsc, watch};

pub use crate::source::{Clock, system_clock};

/// Messages queued from the sources to the writer. When full, the sources wait: the MQTT task
/// stops reading, and the broker holds the rest (QoS 1). Nothing is dropped.
const INGEST_CAPACITY: usize = 1_024;
/// Acknowledgements and publishes queued from the writer to the MQTT task. When full, the
/// writer waits.
const OUTBOUND_CAPACITY: usize = 8_192;

/// A daemon ready to run: the store is open and everything is resolved from the configuration.
pub struct Daemon {
    store: Store,
    mqtt: Option<mqtt::MqttParams>,
    devices: Vec<modbus::DeviceParams>,
    loops: HashMap<Arc<str>, writer::LoopRuntime>,
    settings: writer::WriterSettings,
    committed: Arc<AtomicU64>,
    /// The weekly summary's schedule, with the configuration it reads loop specs from.
    report: Option<(Config, crate::report::schedule::Schedule)>,
}

impl Daemon {
    /// Opens the store and resolves the configuration; fails with a message naming what is wrong.
    pub async fn build(config: &Config, config_path: &Path) -> anyhow::Result<Daemon> {
        let store_path: PathBuf = config.store_path(config_path);
        let store = Store::open(&store_path)
            .await
            .with_context(|| format!("cannot open the store at {}", store_path.display()))?;
        let mqtt = match &config.mqtt {
            Some(m) => Some(resolve_mqtt(config, m)?),
            None => None,
        };
        let devices = modbus_devices(config, &system_clock())?;
        let mut loops = HashMap::new();
        let stored = store.loops_overview().await?;
        for (tag, l) in config.loops.iter().filter(|(_, l)| l.is_watched()) {
            let setup: LoopSetup = l
                .setup(tag)
                .map_err(|e| anyhow::anyhow!("loop {tag}: {e}"))?;
            let expected: Vec<Signal> = l.sources().map(|(s, _)| s).collect();
            // Validation requires it of a watched loop; there is no default to fall back on.
            let period = l
                .expected_period_s
                .with_context(|| format!("loop {tag}: a watched loop needs expected_period_s"))?;
            let stale_after = l.stale_after().unwrap_or(std::time::Duration::MAX);
            let mut rt = writer::LoopRuntime::new(setup, expected, period, stale_after);
            let overview = stored.iter().find(|r| r.loop_tag == *tag);
            resume(&store, overview, &mut rt)
                .await
                .with_context(|| format!("cannot resume loop {tag} from the store"))?;
            loops.insert(Arc::from(tag.as_str()), rt);
        }
        // Outages in progress when the daemon stopped end when their data flows again.
        for alert in store
            .ongoing_alerts(crate::alerts::AlertKind::StaleTag.as_str())
            .await?
        {
            if let Some(rt) = loops.get_mut(alert.loop_tag.as_str()) {
                rt.resume_outage(&alert);
            }
        }
        let settings = writer::WriterSettings {
            alert_topic: config.mqtt.as_ref().map(|m| m.alert_topic.clone()),
            status_topic: config.mqtt.as_ref().and_then(|m| m.status_topic.clone()),
            raw_retention_ms: Some(i64::from(config.store.raw_retention_days) * 86_400_000),
        };
        let report = match &config.report {
            Some(r) => Some((
                config.clone(),
                crate::report::schedule::Schedule::from_settings(r, config_path)
                    .map_err(|e| anyhow::anyhow!("[report]: {e}"))?,
            )),
            None => None,
        };
        Ok(Daemon {
            store,
            mqtt,
            devices,
            loops,
            settings,
            committed: Arc::new(AtomicU64::new(0)),
            report,
        })
    }

    /// Stamps polled samples with `clock` instead of the system clock.
    pub fn with_clock(mut self, clock: Clock) -> Daemon {
        for d in &mut self.devices {
            d.clock = clock.clone();
        }
        self
    }

    pub fn store(&self) -> &Store {
        &self.store
    }

    /// Samples committed so far by this run (new rows, not duplicates); for progress displays
    /// and measurements that must not query the store while it is being written.
    pub fn committed(&self) -> Arc<AtomicU64> {
        self.committed.clone()
    }

    /// Runs until `shutdown` completes, then stops gracefully (see the module docs).
    pub async fn run(self, shutdown: impl Future<Output = ()>) -> anyhow::Result<()> {
        let (stop_tx, stop_rx) = watch::channel(false);
        let (ingest_tx, ingest_rx) = mpsc::channel(INGEST_CAPACITY);
        let (out_tx, out_rx) = mpsc::channel(OUTBOUND_CAPACITY);
        let store = self.store.clone();
        let writer = writer::Writer::new(
            self.store,
            self.loops,
            out_tx,
            self.settings,
            self.committed,
        );
        let writer = tokio::spawn(writer.run(ingest_rx));
        let report = self.report.map(|(config, schedule)| {
            let run =
                crate::report::schedule::run(store.clone(), config, schedule, stop_rx.clone());
            tokio::spawn(run)
        });
        let pollers: Vec<_> = self
            .devices
            .into_iter()
            .map(|d| tokio::spawn(modbus::run(d, ingest_tx.clone(), stop_rx.clone())))
            .collect();
        // Each source holds a sender; the writer ends once they all have stopped.
        let source = self
            .mqtt
            .map(|params| tokio::spawn(mqtt::run(params, ingest_tx, out_rx, stop_rx)));
        tracing::info!(store = %store.path().display(), "headroom is running");
        let mut writer = writer;
        let early = tokio::select! {
            _ = shutdown => None,
            res = &mut writer => Some(res),
        };
        let outcome = match early {
            None => {
                tracing::info!("stopping: committing what has arrived");
                let _ = stop_tx.send(true);
                writer.await.context("the writer task failed")?
            }
            Some(res) => {
                // The writer ended on its own: the store cannot be written. Stop the sources.
                let _ = stop_tx.send(true);
                res.context("the writer task failed")?
            }
        };
        if let Some(s) = source {
            s.await.context("the MQTT task failed")?;
        }
        for p in pollers {
            p.await.context("a Modbus poll task failed")?;
        }
        if let Some(r) = report {
            r.await.context("the weekly summary task failed")?;
        }
        store.close().await;
        let counters = outcome.with_context(|| {
            format!("the store at {} cannot be written", store.path().display())
        })?;
        tracing::info!(
            samples = counters.samples_committed,
            acknowledged = counters.messages_acknowledged,
            "stopped"
        );
        Ok(())
    }
}

/// Feeds a loop's tracker what the store holds from before a restart: the rows of the last
/// evaluation horizon and a quarter (what any open episode can need), the newest final episode
/// and the newest model.
async fn resume(
    store: &Store,
    overview: Option<&LoopRow>,
    rt: &mut writer::LoopRuntime,
) -> anyhow::Result<()> {
    let look_back_ms = writer::horizon_ms(rt.tracker.setup(), 1.25);
    let Some(overview) = overview else {
        return Ok(());
    };
    let tag = overview.loop_tag.as_str();
    for (&signal, &ts) in &overview.last_sample_ms {
        rt.resumed_from(signal, ts);
    }
    let Some(&newest) = overview.last_sample_ms.get(&Signal::Pv) else {
        return Ok(());
    };
    let from = newest - look_back_ms;
    let (rows, _) = store.loop_rows(tag, from, newest).await?;
    let final_until = store
        .episodes(Some(tag), None)
        .await?
        .iter()
        .filter(|e| e.is_final)
        .map(|e| ms_to_s(e.start_ms))
        .fold(None, |m: Option<f64>, t| Some(m.map_or(t, |m| m.max(t))));
    let model = overview.latest_model.as_ref().map(|m| m.model());
    tracing::info!(loop_tag = tag, rows = rows.len(), "resumed from the store");
    rt.tracker.resume(&rows, final_until, model);
    Ok(())
}

/// The poll tasks' parameters for every device of the configuration (watched loops only).
fn modbus_devices(
    config: &Config,
    clock: &Clock,
) -> Result<Vec<modbus::DeviceParams>, modbus::DeviceError> {
    let mut out = Vec::new();
    for (name, device) in &config.modbus {
        let signals: Vec<modbus::PolledSignal> =
            crate::config::modbus::device_sources(&config.loops, name)
                .into_iter()
                .map(|(tag, signal, register)| modbus::PolledSignal {
                    loop_tag: Arc::from(tag),
                    signal,
                    register: *register,
                    auto_values: (signal == Signal::Mode).then(|| {
                        config.loops[tag]
                            .mode
                            .as_ref()
                            .map(|m| m.auto_values.clone())
                            .unwrap_or_default()
                    }),
                })
                .collect();
        let plan =
            crate::config::modbus::device_plan(&config.loops, name, device).map_err(|problem| {
                modbus::DeviceError {
                    device: name.clone(),
                    problem,
                }
            })?;
        out.push(modbus::DeviceParams {
            name: name.clone(),
            device: device.clone(),
            plan,
            signals,
            clock: clock.clone(),
        });
    }
    Ok(out)
}

/// Turns the MQTT section into connection parameters (reads the password, builds TLS).
fn resolve_mqtt(
    config: &Config,
    m: &crate::config::MqttSettings,
) -> anyhow::Result<mqtt::MqttParams> {
    let tls = if m.tls {
        Some(Arc::new(tls_config(m.ca_file.as_deref())?))
    } else {
        None
    };
    let password = m
        .password()
        .context("cannot read the MQTT password")?
        .map(|s| s.expose().to_string());
    let settings = m.clone();
    let password_reader: mqtt::PasswordReader =
        Arc::new(move || Ok(settings.password()?.map(|s| s.expose().to_string())));
    Ok(mqtt::MqttParams {
        password_reader: Some(password_reader),
        host: m.host.clone(),
        port: m.port,
        tls,
        client_id: m.client_id.clone(),
        username: m.username.clone(),
        password,
        keep_alive: m.keep_alive(),
        subscriptions: config.subscriptions(),
        limits: m.limits(),
        topics: Arc::new(crate::mqtt::TopicMap::new(config.mqtt_routes())),
    })
}

/// TLS with the given CA file, or the system's root certificates.
fn tls_config(ca_file: Option<&Path>) -> anyhow::Result<rustls::ClientConfig> {
    use rustls::pki_types::CertificateDer;
    use rustls::pki_types::pem::PemObject;
    let _ = rustls::crypto::ring::default_provider().install_default();
    let mut roots = rustls::RootCertStore::empty();
    match ca_file {
        Some(path) => {
            for cert in CertificateDer::pem_file_iter(path)
                .with_context(|| format!("cannot read the CA file {}", path.display()))?
            {
                let cert =
                    cert.with_context(|| format!("bad certificate in {}", path.display()))?;
                roots
                    .add(cert)
                    .with_context(|| format!("unusable certificate in {}", path.display()))?;
            }
        }
        None => {
            let found = rustls_native_certs::load_native_certs();
            for cert in found.certs {
                let _ = roots.add(cert);
            }
        }
    }
    Ok(rustls::ClientConfig::builder()
        .with_root_certificates(roots)
        .with_no_client_auth())
}
