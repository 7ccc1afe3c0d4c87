//! One task per Modbus TCP device: connect, poll the device's plan every period, stamp the values
//! with the poll time and hand them to the writer, like the MQTT task does with messages.
//!
//! - **Read only.** Requests come from [`crate::modbus::plan`] and go out through
//!   [`crate::modbus::poll::poll_once`], whose API can only express reads.
//! - **Never a guess.** A poll that fails yields no samples at all (not the last good values);
//!   the silence becomes a recorded gap and a `stale_tag` alert in the writer.
//! - **Failures** are counted by reason (`modbus_timeout`, `modbus_exception`,
//!   `modbus_connection`, `modbus_reply`) for the device, and logged at most once per
//!   [`LOG_EVERY`] per device with the number held back. An exception names the request and the
//!   signals it serves.
//! - **Reconnects** after a timeout, a broken connection or a reply that does not fit, with a
//!   back-off that doubles from [`BACKOFF_FIRST`] to [`BACKOFF_MAX`] and starts over once a
//!   connection has polled well for [`STABLE_AFTER`]. Every connect is bounded by the device's
//!   timeout.
//! - A poll that runs late skips the ticks it missed rather than bursting to catch up.

use crate::analysis::AutoValues;
use crate::config::{Config, ModbusDevice};
use crate::modbus::plan::Plan;
use crate::modbus::poll::{PollOutcome, poll_once};
use crate::modbus::registers;
use crate::sample::{Sample, Signal};
use crate::source::{Clock, Ingest, RateLimitedLog};
use std::sync::Arc;
use std::time::{Duration, Instant};
use tokio::sync::{mpsc, watch};
use tokio_modbus::client::Context;

const BACKOFF_FIRST: Duration = Duration::from_millis(250);
const BACKOFF_MAX: Duration = Duration::from_secs(30);
const STABLE_AFTER: Duration = Duration::from_secs(10);
const LOG_EVERY: Duration = Duration::from_secs(30);

/// One signal the device serves, in the plan's source order.
#[derive(Debug, Clone)]
pub struct PolledSignal {
    pub loop_tag: Arc<str>,
    pub signal: Signal,
    pub register: registers::Source,
    /// For a mode signal: which values mean automatic.
    pub auto_values: Option<AutoValues>,
}

impl PolledSignal {
    fn sample(&self, ts_ms: i64, words: &[u16]) -> Option<Sample> {
        let raw = self.register.value(words);
        let value = match &self.auto_values {
            Some(auto) => f64::from(u8::from(auto.is_auto_number(raw))),
            None => raw,
        };
        // A register can hold a NaN or an infinity (f32/f64); that is not a measurement.
        value.is_finite().then(|| Sample {
            loop_tag: self.loop_tag.clone(),
            signal: self.signal,
            ts_ms,
            value,
        })
    }
}

/// Everything one device's task needs.
pub struct DeviceParams {
    pub name: String,
    pub device: ModbusDevice,
    pub plan: Plan,
    pub signals: Vec<PolledSignal>,
    pub clock: Clock,
}

impl DeviceParams {
    /// The poll tasks' parameters for every device of the configuration (watched loops only).
    pub fn from_config(config: &Config, clock: &Clock) -> anyhow::Result<Vec<DeviceParams>> {
        let mut out = Vec::new();
        for (name, device) in &config.modbus {
            let signals: Vec<PolledSignal> =
                crate::config::modbus::device_sources(&config.loops, name)
                    .into_iter()
                    .map(|(tag, signal, register)| PolledSignal {
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
            let plan = crate::config::modbus::device_plan(&config.loops, name, device)
                .map_err(|e| anyhow::anyhow!("Modbus device {name}: {e}"))?;
            out.push(DeviceParams {
                name: name.clone(),
                device: device.clone(),
                plan,
                signals,
                clock: clock.clone(),
            });
        }
        Ok(out)
    }

    /// The signals a request serves, for messages: "LIC-301 pv, LIC-301 op".
    fn served_by(&self, request: usize) -> String {
        self.plan
            .placements
            .iter()
            .zip(&self.signals)
            .filter(|(p, _)| p.request == request)
            .map(|(_, s)| format!("{} {}", s.loop_tag, s.signal))
            .collect::<Vec<_>>()
            .join(", ")
    }
}

/// Polls one device until `stop` turns true.
pub async fn run(p: DeviceParams, ingest: mpsc::Sender<Ingest>, mut stop: watch::Receiver<bool>) {
    let mut log = RateLimitedLog::new(LOG_EVERY);
    let mut backoff = BACKOFF_FIRST;
    let mut was_connected = false;
    tracing::info!(
        device = %p.name,
        address = %p.device.address,
        requests = p.plan.requests.len(),
        signals = p.signals.len(),
        "polling Modbus device"
    );
    'connect: while !*stop.borrow() {
        let connected = tokio::select! {
            c = connect(&p.device) => c,
            _ = stop.changed() => break,
        };
        let mut ctx = match connected {
            Ok(ctx) => ctx,
            Err(e) => {
                if fail(&ingest, &p.name, "modbus_connection").await.is_err() {
                    break;
                }
                if let Some(suppressed) = log.allow() {
                    tracing::warn!(device = %p.name, address = %p.device.address, suppressed,
                        retry_in = ?backoff, "cannot connect to the Modbus device: {e}");
                }
                if !pause(&mut stop, &mut backoff).await {
                    break;
                }
                continue;
            }
        };
        if was_connected {
            tracing::info!(device = %p.name, "reconnected to the Modbus device");
        }
        was_connected = true;
        let since = Instant::now();
        let mut ticker = tokio::time::interval(p.device.poll_period);
        ticker.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
        loop {
            tokio::select! {
                _ = ticker.tick() => {}
                _ = stop.changed() => break 'connect,
            }
            if since.elapsed() >= STABLE_AFTER {
                backoff = BACKOFF_FIRST;
            }
            let ts_ms = (p.clock)();
            let outcome = tokio::select! {
                o = poll_once(&mut ctx, &p.plan.requests, p.device.timeout) => o,
                _ = stop.changed() => break 'connect,
            };
            let failure = match outcome {
                PollOutcome::Ok(responses) => {
                    let samples: Vec<Sample> = p
                        .signals
                        .iter()
                        .enumerate()
                        .filter_map(|(i, s)| s.sample(ts_ms, p.plan.slice(i, &responses)))
                        .collect();
                    let sent = tokio::select! {
                        r = ingest.send(Ingest::Samples { samples, ack: None }) => r.is_ok(),
                        _ = stop.changed() => false,
                    };
                    if !sent {
                        break 'connect;
                    }
                    continue;
                }
                failure => failure,
            };
            let (reason, index) = match &failure {
                PollOutcome::Timeout { index, .. } => ("modbus_timeout", *index),
                PollOutcome::Exception { index, .. } => ("modbus_exception", *index),
                PollOutcome::Io { index, .. } => ("modbus_connection", *index),
                PollOutcome::WrongLength { index, .. } => ("modbus_reply", *index),
                PollOutcome::Ok(_) => unreachable!("handled above"),
            };
            if fail(&ingest, &p.name, reason).await.is_err() {
                break 'connect;
            }
            if let Some(suppressed) = log.allow() {
                tracing::warn!(device = %p.name, suppressed, signals = %p.served_by(index),
                    "Modbus poll failed, no samples this time: {failure}");
            }
            if failure.needs_reconnect() {
                drop(ctx);
                if !pause(&mut stop, &mut backoff).await {
                    break 'connect;
                }
                continue 'connect;
            }
        }
    }
    tracing::info!(device = %p.name, "stopped polling the Modbus device");
}

/// Opens the connection, bounded by the device's timeout.
async fn connect(d: &ModbusDevice) -> anyhow::Result<Context> {
    let slave = tokio_modbus::Slave(d.unit_id);
    let attempt = async {
        let addr = tokio::net::lookup_host(&d.address)
            .await?
            .next()
            .ok_or_else(|| std::io::Error::other("the host name has no address"))?;
        let stream = tokio::net::TcpStream::connect(addr).await?;
        stream.set_nodelay(true)?;
        std::io::Result::Ok(tokio_modbus::client::tcp::attach_slave(stream, slave))
    };
    match tokio::time::timeout(d.timeout, attempt).await {
        Ok(r) => Ok(r?),
        Err(_) => anyhow::bail!("no connection within {:?}", d.timeout),
    }
}

/// Counts a failure at the writer; `Err` when the writer is gone.
async fn fail(ingest: &mpsc::Sender<Ingest>, device: &str, reason: &'static str) -> Result<(), ()> {
    ingest
        .send(Ingest::Failure {
            reason,
            source: device.to_owned(),
        })
        .await
        .map_err(|_| ())
}

/// Waits the back-off (then doubles it); false when stopped meanwhile.
async fn pause(stop: &mut watch::Receiver<bool>, backoff: &mut Duration) -> bool {
    let wait = *backoff;
    *backoff = (*backoff * 2).min(BACKOFF_MAX);
    tokio::select! {
        _ = tokio::time::sleep(wait) => !*stop.borrow(),
        _ = stop.changed() => false,
    }
}
