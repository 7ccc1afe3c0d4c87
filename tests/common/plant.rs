//! Simulated loop data for the daemon tests, published as a controller gateway would: one JSON
//! message `{"value": v, "time": epoch_ms}` per signal and sample, on the loop's sp/pv/op
//! topics. Time is accelerated: an hour of data goes out in seconds, stamped in the recent past,
//! and the daemon takes every time from the data.

use super::clients::Message;
use super::daemon::{LoopTopics, SampleKey};
use headroom::analysis::sim::{LoopSim, LoopSimConfig, SimSample};
use headroom::sample::Signal;

/// The simulator's jacketed vessel (`LoopSimConfig::jacketed_vessel`), its steam valve
/// saturating at `op_max`.
pub fn vessel(op_max: f64, seed: u64) -> LoopSim {
    LoopSim::new(LoopSimConfig::jacketed_vessel(op_max, seed))
}

/// Whole epoch milliseconds, `ago_s` seconds before now, rounded down to a whole second.
pub fn recent_past_ms(ago_s: i64) -> i64 {
    let now = jiff::Timestamp::now().as_millisecond();
    (now - ago_s * 1000).div_euclid(1000) * 1000
}

/// One JSON sample message.
pub fn json_sample(value: f64, time_ms: i64) -> Vec<u8> {
    serde_json::json!({ "value": value, "time": time_ms })
        .to_string()
        .into_bytes()
}

/// The data time of a simulated sample: `t0_ms` plus its simulated time, in whole ms.
pub fn data_ms(t0_ms: i64, s: &SimSample) -> i64 {
    t0_ms + (s.time_s * 1000.0).round() as i64
}

/// Messages for simulated samples, time step by time step (sp, pv, op at each), as a gateway
/// publishing each signal on its own topic would send them, with the store keys they must
/// become.
pub fn messages(
    tag: &str,
    topics: &LoopTopics,
    t0_ms: i64,
    samples: &[SimSample],
) -> (Vec<Message>, Vec<SampleKey>) {
    let mut msgs = Vec::with_capacity(3 * samples.len());
    let mut keys = Vec::with_capacity(3 * samples.len());
    for s in samples {
        let t = data_ms(t0_ms, s);
        for (signal, value) in [(Signal::Sp, s.sp), (Signal::Pv, s.pv), (Signal::Op, s.op)] {
            msgs.push((topics.of(signal).to_string(), json_sample(value, t)));
            keys.push((tag.to_string(), signal, t));
        }
    }
    (msgs, keys)
}

/// A small seeded generator (SplitMix64) for random test choices that replay exactly.
pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Rng {
        Rng(seed)
    }

    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in `[lo, hi)`.
    pub fn range_f64(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform in `0..n`.
    pub fn below(&mut self, n: usize) -> usize {
        (self.next_u64() % n as u64) as usize
    }
}

/// The seed for a randomised test: `HEADROOM_TEST_SEED` when set (to replay a failure), else
/// `default`. It is printed.
pub fn seed(default: u64) -> u64 {
    let seed = std::env::var("HEADROOM_TEST_SEED")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(default);
    eprintln!("seed {seed} (set HEADROOM_TEST_SEED to replay)");
    seed
}
