//! One measured value of one signal of one loop: the unit that flows from the sources (MQTT,
//! Modbus) through the writer into the store and the live trackers.

use serde::{Deserialize, Serialize};
use std::sync::Arc;

/// Which of a loop's signals a sample belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Signal {
    /// Setpoint.
    Sp,
    /// Process variable.
    Pv,
    /// Controller output.
    Op,
    /// Loop mode: 1.0 automatic (or cascade), 0.0 anything else.
    Mode,
}

impl Signal {
    pub const ALL: [Signal; 4] = [Signal::Sp, Signal::Pv, Signal::Op, Signal::Mode];

    pub fn as_str(self) -> &'static str {
        match self {
            Signal::Sp => "sp",
            Signal::Pv => "pv",
            Signal::Op => "op",
            Signal::Mode => "mode",
        }
    }

    pub fn parse(s: &str) -> Option<Signal> {
        Signal::ALL.into_iter().find(|x| x.as_str() == s)
    }
}

impl std::fmt::Display for Signal {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A sample: loop tag, signal, time (milliseconds since the Unix epoch, UTC) and a finite value.
///
/// Time is stored in whole milliseconds: two samples of one signal in the same millisecond are
/// the same sample (which is what makes redelivered messages harmless).
#[derive(Debug, Clone, PartialEq)]
pub struct Sample {
    pub loop_tag: Arc<str>,
    pub signal: Signal,
    pub ts_ms: i64,
    pub value: f64,
}
