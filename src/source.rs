//! What every source shares with the writer: the message that carries samples (or a refusal) to
//! it, the clock polled samples are stamped with, and a log that holds back repeats.

use crate::sample::Sample;
use std::sync::Arc;
use std::time::{Duration, Instant};

/// The time polled samples are stamped with, in milliseconds since the Unix epoch. The system
/// clock in operation; a simulated clock in the demo.
pub type Clock = Arc<dyn Fn() -> i64 + Send + Sync>;

/// The system clock.
pub fn system_clock() -> Clock {
    Arc::new(|| jiff::Timestamp::now().as_millisecond())
}

/// Messages from the sources to the writer.
#[derive(Debug)]
pub enum Ingest {
    /// Decoded samples, and the MQTT message to acknowledge once they are committed.
    Samples {
        samples: Vec<Sample>,
        ack: Option<rumqttc::Publish>,
    },
    /// Input that was refused, for the counters and the log.
    Rejected {
        reason: &'static str,
        source: String,
        detail: String,
    },
    /// A source failed to deliver (a device that did not answer, answered with an exception, or
    /// could not be reached), for the counters only: the source logs it itself.
    Failure {
        reason: &'static str,
        source: String,
    },
}

/// Logs at most once per `every`, counting what it held back in between.
#[derive(Debug)]
pub struct RateLimitedLog {
    every: Duration,
    last: Option<Instant>,
    suppressed: u64,
}

impl RateLimitedLog {
    pub fn new(every: Duration) -> RateLimitedLog {
        RateLimitedLog {
            every,
            last: None,
            suppressed: 0,
        }
    }

    /// `Some(number held back since the last line)` when a line may be logged now.
    pub fn allow(&mut self) -> Option<u64> {
        if self.last.is_none_or(|l| l.elapsed() >= self.every) {
            self.last = Some(Instant::now());
            Some(std::mem::take(&mut self.suppressed))
        } else {
            self.suppressed += 1;
            None
        }
    }
}
