//! The demo's live status line on the terminal (or a line per tenth of the run in a log).

use super::summary::thousands;
use crate::store::Store;
use std::io::{IsTerminal, Write};
use std::sync::Arc;
use std::sync::atomic::{AtomicI64, AtomicU64, Ordering};
use std::time::Duration;
use tokio::sync::oneshot;

/// Counters shared between the plant, the progress line and the end of the run.
#[derive(Default)]
pub(super) struct Shared {
    /// The plant's clock, epoch ms.
    pub(super) clock_ms: AtomicI64,
    /// Samples handed to the MQTT publisher.
    pub(super) published: AtomicU64,
}

impl Shared {
    /// Plant time since the run's start (s).
    pub(super) fn plant_time_s(&self, start_ms: i64) -> f64 {
        crate::units::ms_to_s(self.clock_ms.load(Ordering::Relaxed) - start_ms)
    }
}

/// The live status line: a bar, simulated time, samples stored, episodes scored, alerts raised.
/// On a terminal it redraws one line; otherwise it prints a line at every tenth of the run.
pub(super) struct Progress {
    stop: oneshot::Sender<()>,
    task: tokio::task::JoinHandle<()>,
}

impl Progress {
    pub(super) fn start(
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
            let mut counts = (0u64, 0u64);
            loop {
                let last = tokio::select! {
                    _ = tick.tick() => false,
                    _ = &mut stopped => true,
                };
                if let Ok(c) = store.progress_counts().await {
                    counts = c;
                }
                let sim_s = shared.plant_time_s(start_ms);
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

    pub(super) async fn stop(self) {
        let _ = self.stop.send(());
        let _ = self.task.await;
    }
}

/// `[██████████░░░░░░░░░░]  52 %  plant time 2026-11-19 14:05  samples 1,234,567  episodes 123  alerts 9`
fn status_line(frac: f64, clock_ms: i64, samples: u64, episodes: u64, alerts: u64) -> String {
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
