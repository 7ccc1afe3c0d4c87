//! What identification returns: a [`Model`] of one [`Family`], with the first-order equivalent
//! the rest of the product reads, and the held-out scores of the families that were tried.

use super::super::setup::Units;
use crate::units::{DISPLAY_DIGITS, human_duration, quantity, sig};
use serde::{Deserialize, Serialize, Serializer};

use super::super::optimal::Plant;

/// A first-order-plus-dead-time model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Fopdt {
    /// Steady-state gain K, PV units per OP unit (negative for a negative-gain process, e.g. cooling).
    pub gain: f64,
    /// Time constant τ, seconds.
    pub time_constant_s: f64,
    /// Dead time θ, seconds.
    pub dead_time_s: f64,
}

/// An identified model with its fit quality.
///
/// `gain`, `time_constant_s` and `dead_time_s` are the FIRST-ORDER EQUIVALENT that stores,
/// trends, plots and SIMC tuning read:
/// - `first_order`: the model itself;
/// - `two_direction`: the rising direction (the falling one is in [`Family::TwoDirection`]);
/// - `second_order`: SIMC's half rule (Skogestad 2003): τ = τ1 + τ2/2, θ = θ + τ2/2;
/// - `op_dependent_gain`: the local gain at the middle of the OP range, with τ and θ;
/// - `integrating` (k, θ, lag τl): K = k·T and τ = T with T = [`INTEGRATING_HORIZON`] × the
///   longest episode, θ + τl/2 (half rule). As τ → ∞ with K/τ = k fixed, the first-order
///   t* = θ + τ·ln(R/(R − (1−b)|Δ|)) tends to θ + (1−b)|Δ|/(k·h), the integrator's own bound, and
///   SIMC's first-order rule tends to its integrating rule; T is long enough for both to be
///   within about 1 % of their limits over any change the episodes show.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Model {
    pub gain: f64,
    pub time_constant_s: f64,
    pub dead_time_s: f64,
    /// Share of the PV variation (about each episode's mean) that the model explains.
    pub fit_r2: f64,
    pub episodes_used: usize,
    pub points_used: usize,
    /// The family and its own parameters (JSON: `family` plus the family's fields).
    #[serde(flatten)]
    pub family: Family,
    /// What each family tried scored on held-out episodes (empty when too few episodes to hold
    /// any out).
    pub held_out: HeldOut,
}

/// How many times the longest episode the first-order equivalent of an integrating process
/// uses as its time constant (see [`Model`]).
pub const INTEGRATING_HORIZON: f64 = 100.0;

/// A model family with its own parameters (units in the names).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "family", rename_all = "snake_case")]
pub enum Family {
    /// K·e^(−θs)/(τs + 1): the first-order fields of [`Model`] are the model.
    FirstOrder,
    /// ẏ = k·(u(t − θ) − u_bal), optionally through a first-order lag on the input.
    Integrating {
        /// k: PV units per second per OP unit.
        gain_per_s: f64,
        lag_s: Option<f64>,
        process_dead_time_s: f64,
    },
    /// Separate first-order models for a rising PV (the [`Model`] fields) and a falling one.
    TwoDirection {
        falling_gain: f64,
        falling_time_constant_s: f64,
        falling_dead_time_s: f64,
        rising_episodes: usize,
        falling_episodes: usize,
    },
    /// K·e^(−θs)/((τ1·s + 1)(τ2·s + 1)), τ1 ≥ τ2.
    SecondOrder {
        first_time_constant_s: f64,
        second_time_constant_s: f64,
        process_dead_time_s: f64,
    },
    /// First order plus dead time after a static map of the OP, v = f(u) ([`OpMap`]): the gain
    /// from v is `mapped_gain`, the local gain from u varies over the OP range.
    OpDependentGain {
        valve_shape: f64,
        mapped_gain: f64,
        op_min: f64,
        op_max: f64,
        gain_at_op_min: f64,
        gain_at_op_max: f64,
    },
}

/// The families, without parameters.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum FamilyKind {
    FirstOrder,
    Integrating,
    TwoDirection,
    SecondOrder,
    OpDependentGain,
}

impl FamilyKind {
    /// Every family, in the order selection tries them (the default first).
    pub const ALL: [FamilyKind; 5] = [
        FamilyKind::FirstOrder,
        FamilyKind::Integrating,
        FamilyKind::SecondOrder,
        FamilyKind::OpDependentGain,
        FamilyKind::TwoDirection,
    ];

    /// The family as people read it.
    pub fn label(self) -> &'static str {
        match self {
            FamilyKind::FirstOrder => "first order + dead time",
            FamilyKind::Integrating => "integrating + dead time",
            FamilyKind::TwoDirection => "first order + dead time, rising and falling apart",
            FamilyKind::SecondOrder => "second order + dead time",
            FamilyKind::OpDependentGain => "first order + dead time, gain varying with OP",
        }
    }

    pub fn as_str(self) -> &'static str {
        match self {
            FamilyKind::FirstOrder => "first_order",
            FamilyKind::Integrating => "integrating",
            FamilyKind::TwoDirection => "two_direction",
            FamilyKind::SecondOrder => "second_order",
            FamilyKind::OpDependentGain => "op_dependent_gain",
        }
    }
}

/// What one family scored on held-out episodes.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct FamilyScore {
    pub family: FamilyKind,
    /// Root-mean-square error on held-out episodes, PV units.
    pub rms_error: f64,
    /// Parameters of the family (gains, time constants, dead times, shape).
    pub parameters: usize,
}

/// The held-out scores of the families tried (a small fixed list, serialised as an array).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct HeldOut([Option<FamilyScore>; 5]);

impl HeldOut {
    pub fn push(&mut self, s: FamilyScore) {
        if let Some(slot) = self.0.iter_mut().find(|x| x.is_none()) {
            *slot = Some(s);
        }
    }

    pub fn iter(&self) -> impl Iterator<Item = &FamilyScore> {
        self.0.iter().flatten()
    }

    pub fn get(&self, kind: FamilyKind) -> Option<&FamilyScore> {
        self.iter().find(|s| s.family == kind)
    }

    pub fn is_empty(&self) -> bool {
        self.0[0].is_none()
    }
}

impl Serialize for HeldOut {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(self.iter())
    }
}

impl Model {
    /// A first-order model (what a store keeps, or a test builds).
    pub fn first_order(f: Fopdt, fit_r2: f64, episodes_used: usize, points_used: usize) -> Model {
        Model {
            gain: f.gain,
            time_constant_s: f.time_constant_s,
            dead_time_s: f.dead_time_s,
            fit_r2,
            episodes_used,
            points_used,
            family: Family::FirstOrder,
            held_out: HeldOut::default(),
        }
    }

    /// The first-order equivalent (see [`Model`]).
    pub fn fopdt(&self) -> Fopdt {
        Fopdt {
            gain: self.gain,
            time_constant_s: self.time_constant_s,
            dead_time_s: self.dead_time_s,
        }
    }

    pub fn kind(&self) -> FamilyKind {
        match self.family {
            Family::FirstOrder => FamilyKind::FirstOrder,
            Family::Integrating { .. } => FamilyKind::Integrating,
            Family::TwoDirection { .. } => FamilyKind::TwoDirection,
            Family::SecondOrder { .. } => FamilyKind::SecondOrder,
            Family::OpDependentGain { .. } => FamilyKind::OpDependentGain,
        }
    }

    /// The model's own parameters in words, with units: gains in PV units per OP unit, times as
    /// s, min or h as fits.
    pub fn describe(&self, units: &Units) -> String {
        let (k, tau, theta) = (self.gain, self.time_constant_s, self.dead_time_s);
        let per = units.process_gain();
        let g = |x: f64| format!("{} {per}", sig(x, DISPLAY_DIGITS));
        let t = human_duration;
        match self.family {
            Family::FirstOrder => format!(
                "gain {}, time constant {}, dead time {}",
                g(k),
                t(tau),
                t(theta)
            ),
            Family::Integrating {
                gain_per_s,
                lag_s,
                process_dead_time_s,
            } => format!(
                "rate {} {per} per minute, dead time {}{}",
                sig(gain_per_s * 60.0, DISPLAY_DIGITS),
                t(process_dead_time_s),
                lag_s.map_or(String::new(), |l| format!(", lag {}", t(l)))
            ),
            Family::TwoDirection {
                falling_gain,
                falling_time_constant_s,
                falling_dead_time_s,
                ..
            } => format!(
                "rising: gain {}, time constant {}, dead time {}; falling: gain {}, time \
                 constant {}, dead time {}",
                g(k),
                t(tau),
                t(theta),
                g(falling_gain),
                t(falling_time_constant_s),
                t(falling_dead_time_s)
            ),
            Family::SecondOrder {
                first_time_constant_s,
                second_time_constant_s,
                process_dead_time_s,
            } => format!(
                "gain {}, time constants {} and {}, dead time {}",
                g(k),
                t(first_time_constant_s),
                t(second_time_constant_s),
                t(process_dead_time_s)
            ),
            Family::OpDependentGain {
                gain_at_op_min,
                gain_at_op_max,
                op_min,
                op_max,
                ..
            } => format!(
                "gain {} at OP {} rising to {} at OP {}, time constant {}, dead time {}",
                g(gain_at_op_min),
                quantity(op_min, &units.op),
                g(gain_at_op_max),
                quantity(op_max, &units.op),
                t(tau),
                t(theta)
            ),
        }
    }

    /// The exact first-order model for a change in this direction, when the family is first
    /// order in it (`first_order`, and `two_direction` per direction); `None` otherwise, where
    /// the fastest settling needs the search of [`super::super::optimal`].
    pub fn closed_form(&self, pv_rising: bool) -> Option<Fopdt> {
        match self.family {
            Family::FirstOrder => Some(self.fopdt()),
            Family::TwoDirection { .. } if pv_rising => Some(self.fopdt()),
            Family::TwoDirection {
                falling_gain,
                falling_time_constant_s,
                falling_dead_time_s,
                ..
            } => Some(Fopdt {
                gain: falling_gain,
                time_constant_s: falling_time_constant_s,
                dead_time_s: falling_dead_time_s,
            }),
            _ => None,
        }
    }

    /// The linear plant for the fastest-settling search, for a change in this direction. For
    /// `op_dependent_gain` its input is the mapped OP v = [`Model::op_map`]`(u)`.
    pub fn plant(&self, pv_rising: bool) -> Plant {
        match self.family {
            Family::Integrating {
                gain_per_s,
                lag_s,
                process_dead_time_s,
            } => Plant::integrating(gain_per_s, lag_s, process_dead_time_s),
            Family::SecondOrder {
                first_time_constant_s,
                second_time_constant_s,
                process_dead_time_s,
            } => Plant::second_order(
                self.gain,
                first_time_constant_s,
                second_time_constant_s,
                process_dead_time_s,
            ),
            Family::OpDependentGain { mapped_gain, .. } => {
                Plant::first_order(mapped_gain, self.time_constant_s, self.dead_time_s)
            }
            Family::FirstOrder | Family::TwoDirection { .. } => {
                let f = self.closed_form(pv_rising).unwrap_or(self.fopdt());
                Plant::first_order(f.gain, f.time_constant_s, f.dead_time_s)
            }
        }
    }

    /// The static map of the OP the plant's input goes through (identity except for
    /// `op_dependent_gain`).
    pub fn op_map(&self) -> OpMap {
        match self.family {
            Family::OpDependentGain {
                valve_shape,
                op_min,
                op_max,
                ..
            } => OpMap::new(valve_shape, op_min, op_max),
            _ => OpMap::IDENTITY,
        }
    }
}

/// A monotone map of the OP, f(u) = lo + span·(e^(α·x) − 1)/(e^α − 1) with x = (u − lo)/span:
/// the installed characteristic of an equal-percentage valve for α > 0 (α = ln of the
/// rangeability for the inherent one, common practice), linear for α = 0. It maps [lo, hi] onto
/// itself, so OP limits map to themselves; bang–bang in u is bang–bang in v.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OpMap {
    pub shape: f64,
    pub lo: f64,
    pub hi: f64,
}

impl OpMap {
    pub const IDENTITY: OpMap = OpMap {
        shape: 0.0,
        lo: 0.0,
        hi: 1.0,
    };

    pub fn new(shape: f64, lo: f64, hi: f64) -> OpMap {
        OpMap { shape, lo, hi }
    }

    fn linear(&self) -> bool {
        self.shape.abs() < 1e-9 || self.hi <= self.lo
    }

    pub fn apply(&self, u: f64) -> f64 {
        if self.linear() {
            return u;
        }
        let span = self.hi - self.lo;
        let x = (u - self.lo) / span;
        self.lo + span * (self.shape * x).exp_m1() / self.shape.exp_m1()
    }

    pub fn inverse(&self, v: f64) -> f64 {
        if self.linear() {
            return v;
        }
        let span = self.hi - self.lo;
        let z = (v - self.lo) / span * self.shape.exp_m1();
        self.lo + span * z.ln_1p() / self.shape
    }

    /// df/du at `u`.
    pub fn slope(&self, u: f64) -> f64 {
        if self.linear() {
            return 1.0;
        }
        let x = (u - self.lo) / (self.hi - self.lo);
        self.shape * (self.shape * x).exp() / self.shape.exp_m1()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_op_map_keeps_its_ends_inverts_and_is_linear_at_zero_shape() {
        let m = OpMap::new(3.0, 10.0, 90.0);
        assert!((m.apply(10.0) - 10.0).abs() < 1e-12);
        assert!((m.apply(90.0) - 90.0).abs() < 1e-9);
        for u in [12.0, 40.0, 77.0] {
            assert!((m.inverse(m.apply(u)) - u).abs() < 1e-9);
            // The slope against a central difference.
            let d = (m.apply(u + 1e-4) - m.apply(u - 1e-4)) / 2e-4;
            assert!((m.slope(u) - d).abs() < 1e-6);
        }
        // Equal percentage: equal OP steps multiply the flow's increment by the same factor.
        let r1 = m.slope(50.0) / m.slope(30.0);
        let r2 = m.slope(70.0) / m.slope(50.0);
        assert!((r1 - r2).abs() < 1e-9 && (r1 - (3.0f64 * 0.25).exp()).abs() < 1e-9);
        assert_eq!(OpMap::new(0.0, 0.0, 100.0).apply(37.0), 37.0);
    }

    #[test]
    fn the_family_is_flattened_into_the_model_json() {
        let mut m = Model::first_order(
            Fopdt {
                gain: 2.0,
                time_constant_s: 10.0,
                dead_time_s: 3.0,
            },
            0.99,
            4,
            400,
        );
        m.held_out.push(FamilyScore {
            family: FamilyKind::FirstOrder,
            rms_error: 0.1,
            parameters: 3,
        });
        let v = serde_json::to_value(m).unwrap();
        assert_eq!(v["family"], "first_order");
        assert_eq!(v["gain"], 2.0);
        assert_eq!(v["held_out"][0]["family"], "first_order");
        m.family = Family::Integrating {
            gain_per_s: 0.01,
            lag_s: None,
            process_dead_time_s: 2.0,
        };
        let v = serde_json::to_value(m).unwrap();
        assert_eq!(v["family"], "integrating");
        assert_eq!(v["gain_per_s"], 0.01);
        assert!(v["lag_s"].is_null());
    }
}
