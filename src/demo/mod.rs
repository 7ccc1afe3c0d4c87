//! `headroom demo`: the whole product on an invented plant, with nothing installed beforehand.
//!
//! ```text
//!  plant (simulated, accelerated) ──JSON batches──> embedded MQTT broker ──┐
//!        └──registers──> simulated Modbus device <── polls ────────────────┤
//!                                                                          ▼
//!                                 the daemon (`headroom run`'s code) ──> SQLite, episodes, alerts
//!  progress line <── store (read-only) ──> summary table at the end
//! ```
//!
//! Time: the plant's clock starts at now − duration and runs `speed` times faster than the wall
//! clock, so it ends just before now. Sample time stamps are the plant's (the daemon takes time
//! from the data), and every stamp lies in the past, as the daemon requires of live data.
//!
//! Pacing: every tick (`MODBUS_PERIOD_S` of plant time, 2.5 ms at 6000×) the plant advances by
//! `speed` × the wall time since the last tick and writes its Modbus loops' values into the
//! simulated device, which the daemon polls at the same rate. Its MQTT loops' samples are
//! published in batches (one JSON array per signal every `PUBLISH_EVERY`, at most
//! `MAX_BATCH` samples), so the message rate stays modest whatever the speed. When the daemon
//! falls behind by more than `MAX_LAG_SAMPLES`, the plant waits: simulated time is not wall time,
//! and letting a backlog pile up in the broker would only make the end slower.
//!
//! Shutdown: when the plant reaches the end (or on Ctrl-C) it publishes what it holds, waits for
//! the daemon to commit everything it was sent, stops the daemon through its normal shutdown
//! path, and prints the summary from the store. The broker (rumqttd) cannot be stopped; it ends
//! with the process.

#[cfg(feature = "demo-broker")]
pub mod broker;
pub mod plant;
pub mod registers;
pub mod summary;

use std::path::PathBuf;
use std::time::Duration;

/// The default acceleration: a simulated week in under two minutes.
pub const DEFAULT_SPEED: f64 = 6_000.0;
/// The Modbus loops' sample period in plant time: the demo polls their controller, and the plant
/// advances, once per this much plant time.
pub const MODBUS_PERIOD_S: f64 = 15.0;
/// Buffered samples are published this often (wall time).
pub const PUBLISH_EVERY: Duration = Duration::from_millis(50);
/// At most this many samples per MQTT message (a few kilobytes of JSON, far below the daemon's
/// 64 KiB payload limit).
pub const MAX_BATCH: usize = 400;
/// The plant waits while more samples than this are published but not yet committed: about
/// 25 minutes of the plant's data, a quarter of a second of the daemon's work at 6000×. It
/// keeps the daemon's view of every loop close to the plant's clock, which its stale-tag check
/// relies on (see `STALE_AFTER_S`).
pub const MAX_LAG_SAMPLES: u64 = 10_000;
/// The plant advances at most this much wall time's worth per tick, so a stalled tick (a busy
/// machine) does not turn into one huge jump.
pub const MAX_TICK_WALL: Duration = Duration::from_millis(100);
/// A signal silent for this long (simulated) is stale. Samples reach the daemon's staleness check
/// up to a few tenths of a second of wall time after their data time (batched publishing, commits
/// every 100 ms, a check every second): at 6000× that is up to half an hour of plant time. Two
/// hours keeps that latency from looking like a dead transmitter; LT-150's eight-hour dropout
/// is far beyond it.
pub const STALE_AFTER_S: f64 = 2.0 * 3_600.0;
/// Shortest and longest simulated run (s): an hour to 60 days.
pub const DURATION_S: std::ops::RangeInclusive<f64> = 3_600.0..=60.0 * 86_400.0;
/// Slowest and fastest run: real time to 100,000×.
pub const SPEED: std::ops::RangeInclusive<f64> = 1.0..=100_000.0;

/// The demo's files, inside `--out`.
pub const CONFIG_FILE: &str = "heronreach.toml";
pub const STORE_FILE: &str = "heronreach.db";
pub const LOG_FILE: &str = "demo.log";

/// What the demo runs: the checked values of `headroom demo`'s flags.
#[derive(Debug, Clone, PartialEq)]
pub struct DemoOptions {
    /// Simulated seconds to run, within [`DURATION_S`].
    pub duration_s: f64,
    /// Simulated seconds per wall-clock second, within [`SPEED`].
    pub speed: f64,
    /// Folder for the demo's files (configuration, store, log); created when missing.
    pub out: PathBuf,
    /// After the summary, keep everything running in real time until Ctrl-C.
    pub keep_running: bool,
    /// Port of the embedded MQTT broker on 127.0.0.1 (0: any free port).
    pub mqtt_port: u16,
    /// Port of the simulated Modbus device on 127.0.0.1 (0: any free port).
    pub modbus_port: u16,
}

/// Why the demo could not run.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum DemoError {
    #[cfg(feature = "demo-broker")]
    #[error("{0}")]
    Broker(#[from] broker::BrokerError),
    #[error(
        "cannot start the simulated Modbus device on 127.0.0.1:{port}: {source}; choose another \
         port with --modbus-port, or 0 for any free port"
    )]
    ModbusPort { port: u16, source: std::io::Error },
    #[error(
        "this build has no embedded MQTT broker: build with the default features \
         (cargo run --release -- demo) to run the demo"
    )]
    NoBroker,
    /// A failure while the demo ran, with the context of each step.
    #[error("{0:#}")]
    Run(#[from] anyhow::Error),
}

impl DemoError {
    /// Whether the user can fix it before running again: a port in use, a build without the
    /// broker.
    pub fn is_setup(&self) -> bool {
        match self {
            #[cfg(feature = "demo-broker")]
            DemoError::Broker(e) => matches!(e, broker::BrokerError::PortInUse { .. }),
            DemoError::ModbusPort { .. } | DemoError::NoBroker => true,
            DemoError::Run(_) => false,
        }
    }
}

#[cfg(feature = "demo-broker")]
mod progress;
mod run;
#[cfg(feature = "demo-broker")]
pub use run::run;

/// Without the embedded broker the demo cannot run; say how to get it.
#[cfg(not(feature = "demo-broker"))]
pub async fn run(_options: &DemoOptions, _out: &mut dyn std::io::Write) -> Result<(), DemoError> {
    Err(DemoError::NoBroker)
}
