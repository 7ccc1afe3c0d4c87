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

use crate::cli::UsageError;
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
/// Shortest and longest simulated run.
const MIN_DURATION_S: f64 = 3_600.0;
const MAX_DURATION_S: f64 = 60.0 * 86_400.0;
const MAX_SPEED: f64 = 100_000.0;

/// The demo's files, inside `--out`.
pub const CONFIG_FILE: &str = "heronreach.toml";
pub const STORE_FILE: &str = "heronreach.db";
pub const LOG_FILE: &str = "demo.log";

/// `headroom demo`'s flags.
#[derive(Debug, Clone, clap::Args)]
pub struct DemoArgs {
    /// Simulated time to run, e.g. 7d, 36h, 90m.
    #[arg(long, default_value = "7d", value_name = "SPAN")]
    pub duration: String,
    /// Simulated seconds per wall-clock second.
    #[arg(long, default_value_t = DEFAULT_SPEED, value_name = "FACTOR")]
    pub speed: f64,
    /// Folder for the demo's files (configuration, SQLite store, log); created when missing.
    /// The demo's own files in it are replaced.
    #[arg(long, default_value = "headroom-demo", value_name = "DIR")]
    pub out: PathBuf,
    /// After the summary, keep the broker, the simulated device, the plant (now in real time)
    /// and the daemon running until Ctrl-C, to watch with any MQTT client.
    #[arg(long)]
    pub keep_running: bool,
    /// Port of the embedded MQTT broker on 127.0.0.1 (0: any free port).
    #[arg(long, default_value_t = 0, value_name = "PORT")]
    pub mqtt_port: u16,
    /// Port of the simulated Modbus device on 127.0.0.1 (0: any free port).
    #[arg(long, default_value_t = 0, value_name = "PORT")]
    pub modbus_port: u16,
}

impl DemoArgs {
    /// The simulated duration in seconds, checked.
    pub fn duration_s(&self) -> Result<f64, UsageError> {
        let s = parse_span(&self.duration).ok_or_else(|| {
            UsageError(format!(
                "cannot read --duration {:?}: give a span such as 7d, 36h, 90m or 3600s",
                self.duration
            ))
        })?;
        if !(MIN_DURATION_S..=MAX_DURATION_S).contains(&s) {
            return Err(UsageError(format!(
                "--duration must be between 1h and 60d (got {})",
                self.duration
            )));
        }
        Ok(s)
    }

    /// The speed, checked.
    pub fn checked_speed(&self) -> Result<f64, UsageError> {
        if self.speed.is_finite() && (1.0..=MAX_SPEED).contains(&self.speed) {
            Ok(self.speed)
        } else {
            Err(UsageError(format!(
                "--speed must be between 1 (real time) and {MAX_SPEED} (got {})",
                self.speed
            )))
        }
    }
}

/// Reads `7d`, `36h`, `90m`, `3600s` or a plain number of seconds.
pub fn parse_span(s: &str) -> Option<f64> {
    let s = s.trim();
    let (num, factor) = match s.char_indices().last()? {
        (i, 'd') => (&s[..i], 86_400.0),
        (i, 'h') => (&s[..i], 3_600.0),
        (i, 'm') => (&s[..i], 60.0),
        (i, 's') => (&s[..i], 1.0),
        _ => (s, 1.0),
    };
    let n: f64 = num.trim().parse().ok()?;
    (n.is_finite() && n >= 0.0).then_some(n * factor)
}

#[cfg(feature = "demo-broker")]
mod run;
#[cfg(feature = "demo-broker")]
pub use run::run;

/// Without the embedded broker the demo cannot run; say how to get it.
#[cfg(not(feature = "demo-broker"))]
pub async fn run(_args: &DemoArgs, _out: &mut dyn std::io::Write) -> anyhow::Result<()> {
    Err(UsageError(
        "this build has no embedded MQTT broker: build with the default features \
         (cargo run --release -- demo) to run the demo"
            .into(),
    )
    .into())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spans_read_with_their_units() {
        assert_eq!(parse_span("7d"), Some(604_800.0));
        assert_eq!(parse_span("36h"), Some(129_600.0));
        assert_eq!(parse_span("90m"), Some(5_400.0));
        assert_eq!(parse_span("3600s"), Some(3_600.0));
        assert_eq!(parse_span("1.5d"), Some(129_600.0));
        assert_eq!(parse_span("600"), Some(600.0));
        assert_eq!(parse_span("week"), None);
        assert_eq!(parse_span("-1d"), None);
        assert_eq!(parse_span(""), None);
    }
}
