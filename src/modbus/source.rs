//! One task per Modbus TCP device: connect, poll the device's plan every period, stamp the values
//! with the poll time and hand them to the writer, like the MQTT task does with messages.
//!
//! - **Read only.** Requests come from [`crate::modbus::plan`] and go out through
//!   [`crate::modbus::poll::poll_once`], whose API can only express reads.
//! - **Never a guess.** A poll that fails yields no samples at all (not the last good values);
//!   the silence becomes a recorded gap and a `stale_tag` alert in the writer.
//! - **Failures** are counted by reason (`modbus_timeout`, `modbus_exception`,
//!   `modbus_connection`, `modbus_reply`) for the device, and logged at most once per
//!   `LOG_EVERY` per device with the number held back. An exception names the request and the
//!   signals it serves.
//! - **Reconnects** after a timeout, a broken connection or a reply that does not fit, with a
//!   back-off that doubles from `BACKOFF_FIRST` to `BACKOFF_MAX` and starts over once a
//!   connection has polled well for `STABLE_AFTER`. Every connect is bounded by the device's
//!   timeout.
//! - A poll that runs late skips the ticks it missed rather than bursting to catch up.

use crate::analysis::AutoValues;
use crate::modbus::plan::{Limits, Plan, PlanError};
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

/// One Modbus TCP device to poll: where it is and how it is read (the config's
/// `[modbus.<name>]`, checked).
#[derive(Debug, Clone, PartialEq)]
pub struct ModbusDevice {
    /// `host:port` as written (a port is always present after validation).
    pub address: String,
    pub unit_id: u8,
    pub poll_period: Duration,
    /// Longest wait for one request's answer (and for the connection to open).
    pub timeout: Duration,
    /// Request size limits and the gap that may be bridged.
    pub limits: Limits,
}

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

/// A device whose sources cannot be read with the requests Modbus allows.
#[derive(Debug, thiserror::Error)]
#[error("Modbus device {device}: {problem}")]
pub struct DeviceError {
    pub device: String,
    pub problem: PlanError,
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
    tracing::info!(
        device = %p.name,
        address = %p.device.address,
        requests = p.plan.requests.len(),
        signals = p.signals.len(),
        "polling Modbus device"
    );
    let mut poller = Poller {
        p,
        ingest,
        log: RateLimitedLog::new(LOG_EVERY),
        backoff: BACKOFF_FIRST,
        was_connected: false,
    };
    while !*stop.borrow() {
        let connected = tokio::select! {
            c = connect(&poller.p.device) => c,
            _ = stop.changed() => break,
        };
        let next = match connected {
            Ok(ctx) => poller.poll_until_broken(ctx, &mut stop).await,
            Err(e) => poller.not_connected(&e, &mut stop).await,
        };
        if next == Next::Stop {
            break;
        }
    }
    tracing::info!(device = %poller.p.name, "stopped polling the Modbus device");
}

/// What the poll task does after a connection ended or failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Next {
    Reconnect,
    Stop,
}

/// One device's poll task between events.
struct Poller {
    p: DeviceParams,
    ingest: mpsc::Sender<Ingest>,
    log: RateLimitedLog,
    backoff: Duration,
    was_connected: bool,
}

impl Poller {
    /// Counts and logs a failed connection attempt, then waits the back-off.
    async fn not_connected(
        &mut self,
        e: &std::io::Error,
        stop: &mut watch::Receiver<bool>,
    ) -> Next {
        if !fail(&self.ingest, &self.p.name, "modbus_connection").await {
            return Next::Stop;
        }
        if let Some(suppressed) = self.log.allow() {
            tracing::warn!(device = %self.p.name, address = %self.p.device.address, suppressed,
                retry_in = ?self.backoff, "cannot connect to the Modbus device: {e}");
        }
        self.pause(stop).await
    }

    /// Polls on every tick of the device's period until stopped or until a failure needs a new
    /// connection.
    async fn poll_until_broken(
        &mut self,
        mut ctx: Context,
        stop: &mut watch::Receiver<bool>,
    ) -> Next {
        if self.was_connected {
            tracing::info!(device = %self.p.name, "reconnected to the Modbus device");
        }
        self.was_connected = true;
        let since = Instant::now();
        let mut ticker = tokio::time::interval(self.p.device.poll_period);
        ticker.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
        loop {
            tokio::select! {
                _ = ticker.tick() => {}
                _ = stop.changed() => return Next::Stop,
            }
            if since.elapsed() >= STABLE_AFTER {
                self.backoff = BACKOFF_FIRST;
            }
            let ts_ms = (self.p.clock)();
            let outcome = tokio::select! {
                o = poll_once(&mut ctx, &self.p.plan.requests, self.p.device.timeout) => o,
                _ = stop.changed() => return Next::Stop,
            };
            let failure = match outcome {
                PollOutcome::Ok(responses) => {
                    if !self.deliver(ts_ms, &responses, stop).await {
                        return Next::Stop;
                    }
                    continue;
                }
                failure => failure,
            };
            if !self.poll_failed(&failure).await {
                return Next::Stop;
            }
            if failure.needs_reconnect() {
                drop(ctx);
                return self.pause(stop).await;
            }
        }
    }

    /// Hands one poll's samples to the writer; false when stopped or the writer is gone.
    async fn deliver(
        &self,
        ts_ms: i64,
        responses: &[Vec<u16>],
        stop: &mut watch::Receiver<bool>,
    ) -> bool {
        let p = &self.p;
        let samples: Vec<Sample> = p
            .signals
            .iter()
            .enumerate()
            .filter_map(|(i, s)| s.sample(ts_ms, p.plan.slice(i, responses)))
            .collect();
        tokio::select! {
            r = self.ingest.send(Ingest::Samples { samples, ack: None }) => r.is_ok(),
            _ = stop.changed() => false,
        }
    }

    /// Counts and logs a failed poll; false when the writer is gone.
    async fn poll_failed(&mut self, failure: &PollOutcome) -> bool {
        let (reason, index) = match failure {
            PollOutcome::Timeout { index, .. } => ("modbus_timeout", *index),
            PollOutcome::Exception { index, .. } => ("modbus_exception", *index),
            PollOutcome::Io { index, .. } => ("modbus_connection", *index),
            PollOutcome::WrongLength { index, .. } => ("modbus_reply", *index),
            PollOutcome::Ok(_) => unreachable!("only failures come here"),
        };
        if !fail(&self.ingest, &self.p.name, reason).await {
            return false;
        }
        if let Some(suppressed) = self.log.allow() {
            tracing::warn!(device = %self.p.name, suppressed, signals = %self.p.served_by(index),
                "Modbus poll failed, no samples this time: {failure}");
        }
        true
    }

    /// Waits the back-off (then doubles it).
    async fn pause(&mut self, stop: &mut watch::Receiver<bool>) -> Next {
        let wait = self.backoff;
        self.backoff = (self.backoff * 2).min(BACKOFF_MAX);
        tokio::select! {
            _ = tokio::time::sleep(wait) => if *stop.borrow() { Next::Stop } else { Next::Reconnect },
            _ = stop.changed() => Next::Stop,
        }
    }
}

/// Opens the connection, bounded by the device's timeout.
async fn connect(d: &ModbusDevice) -> std::io::Result<Context> {
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
        Ok(r) => r,
        Err(_) => Err(std::io::Error::new(
            std::io::ErrorKind::TimedOut,
            format!("no connection within {:?}", d.timeout),
        )),
    }
}

/// Counts a failure at the writer; false when the writer is gone.
async fn fail(ingest: &mpsc::Sender<Ingest>, device: &str, reason: &'static str) -> bool {
    let failure = Ingest::Failure {
        reason,
        source: device.to_owned(),
    };
    ingest.send(failure).await.is_ok()
}
