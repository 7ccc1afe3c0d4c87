//! A refused setting of a loop: which [`Setting`], what it must be and what was given. Every
//! check of a loop's settings (the spec, the OP range, the options, the controller's description)
//! reports one, and each edge names the setting in its own spelling.

/// A setting of a loop that a [`Problem`] can name. Each edge spells it its own way: the config
/// file by [`Setting::key`], the command line by its flag.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Setting {
    SettleBandPct,
    SettleBand,
    SettleWithinS,
    MaxOvershootPct,
    HoldBand,
    RecoverWithinS,
    OpMin,
    OpMax,
    SpDeadband,
    SpHoldS,
    MaxGapS,
    ExpectedPeriodS,
    UpgradeRatioLimit,
    PvRange,
    ControllerGain,
    ControllerIntegral,
    ControllerDerivative,
    ActuatorRating,
}

impl Setting {
    /// The setting's name in the config file (and in JSON).
    pub fn key(self) -> &'static str {
        match self {
            Setting::SettleBandPct => "settle_band_pct",
            Setting::SettleBand => "settle_band",
            Setting::SettleWithinS => "settle_within_s",
            Setting::MaxOvershootPct => "max_overshoot_pct",
            Setting::HoldBand => "hold_band",
            Setting::RecoverWithinS => "recover_within_s",
            Setting::OpMin => "op_min",
            Setting::OpMax => "op_max",
            Setting::SpDeadband => "sp_deadband",
            Setting::SpHoldS => "sp_hold_s",
            Setting::MaxGapS => "max_gap_s",
            Setting::ExpectedPeriodS => "expected_period_s",
            Setting::UpgradeRatioLimit => "upgrade_ratio_limit",
            Setting::PvRange => "pv_range",
            Setting::ControllerGain => "gain",
            Setting::ControllerIntegral => "integral",
            Setting::ControllerDerivative => "derivative",
            Setting::ActuatorRating => "rating",
        }
    }
}

/// A refused setting: which one, what it must be, and the value given (and, for a pair such as
/// the OP range, the other end). [`Problem::message`] words it with the edge's spelling.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{}", self.message(|s| s.key()))]
pub struct Problem {
    pub setting: Setting,
    pub requirement: &'static str,
    /// The value given; `None` when the setting is missing.
    pub got: Option<f64>,
    pub other: Option<(Setting, f64)>,
}

impl Problem {
    pub(crate) fn new(setting: Setting, requirement: &'static str, got: f64) -> Problem {
        Problem {
            setting,
            requirement,
            got: Some(got),
            other: None,
        }
    }

    /// A setting that is needed but not given.
    pub(crate) fn missing(setting: Setting, requirement: &'static str) -> Problem {
        Problem {
            setting,
            requirement,
            got: None,
            other: None,
        }
    }

    /// The problem in words, each setting spelled by `name`: e.g. with flags,
    /// `--settle-band-pct must be above 0 and below 100 % (got 0)`.
    pub fn message(&self, name: impl Fn(Setting) -> &'static str) -> String {
        match self.other {
            Some((other, value)) => format!(
                "{} ({}) must be below {} ({})",
                name(self.setting),
                self.got.unwrap_or(f64::NAN),
                name(other),
                value
            ),
            None => match self.got {
                Some(got) => format!("{} {} (got {got})", name(self.setting), self.requirement),
                None => format!("{} {}", name(self.setting), self.requirement),
            },
        }
    }
}
