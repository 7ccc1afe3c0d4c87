//! The analysis core: pure, synchronous computation over slices. No I/O, no clock, no async —
//! the daemon, the offline `analyze` command, the demo and the reports all call [`analyze_loop`]
//! (or the pieces it is made of), so live and offline answers cannot drift apart.
//!
//! Data flow inside: [`segment`] finds setpoint changes and cuts episode windows → [`metrics`]
//! scores each response model-free → [`identify`] fits the process model to the loop's episodes
//! (and again to episodes drawn with replacement, for its plausible variants) → [`bound`] reads
//! where the plant was at each change and computes the fastest response the actuator allows from
//! there ([`feasibility`]) for the model and each variant → [`quality`] says what in the data
//! makes a change doubtful or unjudgeable → [`verdict`] decides each episode's verdict from those
//! facts → [`confidence`] says whether it is clear or marginal, and which step would decide a
//! marginal one → [`advice`] gives the loop its recommendation from the clear verdicts
//! ([`tuning`] supplies PI settings). [`assess`] runs these steps in order.

pub mod advice;
pub mod assess;
pub mod bound;
pub mod confidence;
pub mod controller;
pub mod feasibility;
pub mod identify;
mod linalg;
pub mod live;
pub mod metrics;
pub mod mode;
pub mod optimal;
pub mod problem;
pub mod quality;
pub mod regulation;
pub mod segment;
mod series;
pub mod setup;
pub mod sim;
mod stats;
pub mod trust;
pub mod tuning;
pub mod verdict;

pub use assess::{EpisodeResult, LoopReport, Recommendation, Verdict, analyze_loop};
pub use identify::{Fopdt, Model, Refusal};
pub use mode::AutoValues;
pub use series::{Series, SeriesError};
pub use setup::{
    ActuatorRating, AnalysisOptions, LoopSetup, OpRange, Problem, Setting, Spec, Units,
};

/// The caution every recommendation carries.
pub const CAUTION: &str = "Advisory only: retuning, changing a spec and upgrading a utility are \
decisions for qualified engineers under the site's procedures, management of change and local \
codes. headroom only reads plant data; it is not a safety system.";
