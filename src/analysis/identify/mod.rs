//! Identifying a process model from the OP → PV data of a loop's episodes, in one of five
//! families chosen by the data: `first_order` K·e^(−θs)/(τs + 1), `integrating` k·e^(−θs)/s
//! (optionally with a first-order lag on the input), `two_direction` (a first-order model for a
//! rising PV and one for a falling PV), `second_order` K·e^(−θs)/((τ1 s + 1)(τ2 s + 1)) and
//! `op_dependent_gain` (first order after a static equal-percentage map of the OP, [`OpMap`]).
//!
//! Method: output-error least squares. Each episode is put on a uniform grid (PV averaged in
//! blocks centred on the grid points, OP averaged over each hold interval, so long episodes are
//! also thinned to a bounded number of points). For candidate values of a family's nonlinear
//! parameters the measured OP is run through the exact zero-order-hold discretisation of the
//! unit-gain model with a fractional dead time, giving a simulated response s. The PV is then
//! fitted as one shared gain times s plus, per episode, an offset and free initial transients
//! (and, for `integrating`, a drift: the episode's unknown balance OP), which is linear and
//! solved in closed form ([`response`]). The sum of squared errors is minimised over the
//! nonlinear parameters: for first order an ARX regression with a dead-time scan seeds the
//! search, a few probes guard against a poor seed, and Nelder–Mead polishes the best, on a
//! thinned copy of the data and then on the full data; the other families start from the
//! first-order result (SIMC's half rule for second order) and are searched on the thinned data.
//!
//! Why output error rather than an ARX regression: with measurement noise on the PV the ARX
//! regressor y[k] is noisy and biases τ low; simulating from the OP alone keeps the noise out of
//! the regressors. The recorded OP is what the actuator received (clamped to its range), so
//! saturated stretches are simply strong excitation. Reverse-acting processes give K < 0.
//!
//! Choice of family ([`identify`]): each family is fitted on the thinned data and judged on
//! held-out episodes — [`select::FOLDS`] folds over the episodes (largest PV moves spread over
//! the folds); each fold's episodes are scored by the family refitted on the others, with only
//! their own offsets and initial transients refitted — as the RMS error in PV units. A family
//! must also be accepted on all the data (R² at least `min_r2`, its time constants inside the
//! search). First order is the default; the families are then tried in the order integrating,
//! second order, OP-dependent gain, two-direction, and each replaces the current choice only
//! when its held-out RMS error is at least 12 % ([`select::CLEAR_IMPROVEMENT`]) below the
//! current choice's: the extra parameters must buy a clearly better prediction of episodes they
//! were not fitted to. With fewer than [`select::MIN_EPISODES_FOR_SELECTION`] excited episodes
//! nothing can be held out: first order is fitted, and integrating when the first-order time
//! constant is longer than the episodes can show. When no family is accepted the answer is a
//! [`Refusal`] saying why.

mod data;
mod families;
mod first_order;
mod model;
mod response;
pub mod select;

pub use data::{IdSegment, build_segment};
pub use model::{
    Family, FamilyKind, FamilyScore, Fopdt, HeldOut, INTEGRATING_HORIZON, Model, OpMap,
};
pub use select::{fit_family, identify, replicates};

/// Why no usable model could be identified. Each message says what would help.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum Refusal {
    #[error("no setpoint change with enough samples to identify the process")]
    NoEpisodes,
    #[error(
        "the data do not excite the process: the OP moved at most {op_move:.3} and the PV at most \
         {pv_move:.3} over the episodes (noise ≈ {noise:.3}); larger setpoint changes are needed"
    )]
    NoExcitation {
        op_move: f64,
        pv_move: f64,
        noise: f64,
    },
    #[error(
        "the best first-order-plus-dead-time model explains only {:.0} % of the PV variation \
         (at least {:.0} % needed); the process may not be first order, or disturbances dominate",
        r2 * 100.0,
        min_r2 * 100.0
    )]
    PoorFit { r2: f64, min_r2: f64 },
    #[error(
        "the time constant is longer than the episodes can show (over {}); the process may be \
         integrating, or the episodes are too short",
        crate::units::human_duration(*limit_s)
    )]
    TimeConstantUndetermined { limit_s: f64 },
    #[error(
        "the time constant is longer than the episodes can show (over {}), and an integrating \
         model explains only {:.0} % of the PV variation (at least {:.0} % needed); longer \
         episodes or larger setpoint changes are needed",
        crate::units::human_duration(*limit_s),
        r2 * 100.0,
        min_r2 * 100.0
    )]
    IntegratingPoorFit { limit_s: f64, r2: f64, min_r2: f64 },
    #[error(
        "a {family} model needs at least {needed} episodes in each direction; the data have \
         {rising} with a rising PV and {falling} with a falling one"
    )]
    TooFewEpisodes {
        family: &'static str,
        rising: usize,
        falling: usize,
        needed: usize,
    },
}

/// Settings of the identification.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct IdentifySettings {
    /// Episodes longer than this many grid points are thinned.
    pub max_points_per_episode: usize,
    /// At most this many episodes are pooled (the largest changes are kept).
    pub max_episodes: usize,
    /// Fits explaining less than this share of the PV variation are refused.
    pub min_r2: f64,
}

impl Default for IdentifySettings {
    fn default() -> Self {
        IdentifySettings {
            max_points_per_episode: 200,
            max_episodes: 60,
            min_r2: 0.6,
        }
    }
}

#[cfg(test)]
mod simulate;
#[cfg(test)]
mod tests;
