//! The analysis core: pure, synchronous computation over slices. No I/O, no clock, no async —
//! the daemon, the offline `analyze` command, the demo and the reports all call [`analyze_loop`]
//! (or the pieces it is made of), so live and offline answers cannot drift apart.
//!
//! Data flow inside: [`segment`] finds setpoint changes and cuts episode windows → [`metrics`]
//! scores each response model-free → [`identify`] fits one FOPDT model to the loop's episodes →
//! [`feasibility`] computes the fastest response the actuator allows → [`assess`] gives each
//! episode its verdict and the loop its recommendation ([`tuning`] supplies PI settings).

pub mod assess;
pub mod feasibility;
pub mod identify;
pub mod live;
pub mod metrics;
pub mod segment;
mod series;
pub mod sim;
pub mod tuning;

pub use assess::{EpisodeResult, LoopReport, Recommendation, Verdict, analyze_loop};
pub use identify::{Fopdt, Model, Refusal};
pub use metrics::OpRange;
pub use series::{Series, SeriesError};

use serde::Serialize;

/// A loop's design spec for setpoint changes.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Spec {
    /// Half-width of the settling band as a percentage of |Δ| (2 % by default).
    pub settle_band_pct: f64,
    /// The PV must be inside the band for good within this many seconds of the change.
    pub settle_within_s: f64,
    /// Largest allowed overshoot as a percentage of |Δ|; `None` when the spec sets none.
    pub max_overshoot_pct: Option<f64>,
}

/// Tuning knobs of the analysis; every `None` is derived from the data.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AnalysisOptions {
    /// SP moves no larger than this (SP units) are jitter. Default: 0.1 % of the largest |SP|.
    pub sp_deadband: Option<f64>,
    /// How long the SP must hold still to end a move (s). Default: 3 sample periods.
    pub sp_hold_s: Option<f64>,
    /// Silence between samples that counts as a data gap (s). Default: 10 sample periods.
    pub max_gap_s: Option<f64>,
    /// How often samples are expected (s); the default hold and gap limits are multiples of it.
    /// Without it, the median sample interval of the data is used.
    pub expected_period_s: Option<f64>,
    /// Episode windows are cut at this multiple of the spec time after the change.
    pub horizon_factor: f64,
    /// OP within this percentage of the OP span from a limit counts as saturated.
    pub saturation_margin_pct: f64,
    /// An actuator-limited loop is advised an upgrade when the capacity needed is at most this
    /// multiple of today's; beyond it, renegotiating the spec is advised.
    pub upgrade_ratio_limit: f64,
    pub identify: identify::IdentifySettings,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        AnalysisOptions {
            sp_deadband: None,
            sp_hold_s: None,
            max_gap_s: None,
            expected_period_s: None,
            horizon_factor: 10.0,
            saturation_margin_pct: 0.5,
            upgrade_ratio_limit: 2.0,
            identify: identify::IdentifySettings::default(),
        }
    }
}

impl AnalysisOptions {
    /// The silence that counts as a data gap (s), for a loop sampled every `period_s`.
    pub fn max_gap_for(&self, period_s: f64) -> f64 {
        self.max_gap_s.unwrap_or(10.0 * period_s)
    }
}

/// Everything the analysis needs to know about a loop besides its data.
#[derive(Debug, Clone, PartialEq)]
pub struct LoopSetup {
    /// The loop's tag, e.g. `TIC-101`.
    pub tag: String,
    pub op: OpRange,
    pub spec: Spec,
    pub options: AnalysisOptions,
}

/// The caution every recommendation carries.
pub const CAUTION: &str = "Advisory only: retuning, changing a spec and upgrading a utility are \
decisions for qualified engineers under the site's procedures, management of change and local \
codes. headroom only reads plant data; it is not a safety system.";
