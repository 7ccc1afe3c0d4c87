//! The words of a verdict's trust that an episode result carries: its confidence and, for a
//! marginal one, the experiment that would decide it. The rules that fill them live in
//! [`super::confidence`].

use serde::{Deserialize, Serialize};

/// How sure a conclusive verdict is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Confidence {
    Clear,
    Marginal,
}

impl Confidence {
    /// The confidence as people read it (and as JSON spells it).
    pub fn label(self) -> &'static str {
        match self {
            Confidence::Clear => "clear",
            Confidence::Marginal => "marginal",
        }
    }
}

/// The setpoint step that would decide a marginal verdict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Experiment {
    /// Where the loop should start: the PV and the OP at rest.
    pub from_pv: f64,
    pub from_op: f64,
    /// The setpoint step (PV units, signed) and the setpoint it goes to.
    pub step: f64,
    pub to_sp: f64,
    /// How long to hold the new setpoint before judging (s).
    pub hold_s: f64,
    /// The test in one paragraph, for the engineer who plans it.
    pub plan: String,
}
