//! What the analysis needs to know about a loop besides its data — the spec, the OP range and the
//! analysis options — with their defaults and their validation, defined once. The config file,
//! the command line and the demo build a [`LoopSetup`] and check it here; each edge names a
//! refused [`Setting`] in its own spelling (a TOML key, a command-line flag).

use super::controller::ControllerSetup;
use super::identify;
pub use super::problem::{Problem, Setting};
pub use crate::units::Units;
use serde::{Deserialize, Serialize};

/// A loop's design spec for setpoint changes. The config file's `spec = { ... }` is read into it
/// directly (unknown keys refused, the band defaulted), then checked by [`Spec::problems`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Spec {
    /// Half-width of the settling band as a percentage of |Δ| (2 % by default).
    #[serde(default = "default_settle_band_pct")]
    pub settle_band_pct: f64,
    /// Half-width of the settling band in PV units (e.g. ±0.5 °C); when given it replaces
    /// `settle_band_pct`.
    #[serde(default)]
    pub settle_band: Option<f64>,
    /// The PV must be inside the band for good within this many seconds of the change.
    pub settle_within_s: f64,
    /// Largest allowed overshoot as a percentage of |Δ|; `None` when the spec sets none.
    pub max_overshoot_pct: Option<f64>,
    /// While the setpoint is held, the PV counts as away from it beyond max(4σ of its noise,
    /// this many PV units); `None` leaves the noise alone to set the band.
    #[serde(default)]
    pub hold_band: Option<f64>,
    /// While the setpoint is held, a load disturbance must be recovered from within this many
    /// seconds; `None` when the spec sets no such time.
    #[serde(default)]
    pub recover_within_s: Option<f64>,
}

impl Spec {
    /// The settling band when the spec gives none: ±2 % of the change (common practice).
    pub const DEFAULT_SETTLE_BAND_PCT: f64 = 2.0;

    /// A spec with the default band and no overshoot limit.
    pub fn within(settle_within_s: f64) -> Spec {
        Spec {
            settle_band_pct: Spec::DEFAULT_SETTLE_BAND_PCT,
            settle_band: None,
            settle_within_s,
            max_overshoot_pct: None,
            hold_band: None,
            recover_within_s: None,
        }
    }

    /// The band's half-width in PV units for a change of `delta`: `settle_band` when the spec
    /// gives one, else `settle_band_pct` of |Δ|.
    pub fn band_abs(&self, delta: f64) -> f64 {
        self.settle_band
            .unwrap_or_else(|| crate::units::pct_to_fraction(self.settle_band_pct) * delta.abs())
    }

    /// The band for a change of `delta` as a fraction of |Δ| (0.02 for 2 %); at least 1 when an
    /// absolute band is wider than the change (the change is then settled from the start).
    pub fn band_fraction(&self, delta: f64) -> f64 {
        match self.settle_band {
            Some(b) if delta != 0.0 => b / delta.abs(),
            Some(_) => 1.0,
            None => crate::units::pct_to_fraction(self.settle_band_pct),
        }
    }

    /// The band as the spec states it, for people: `±0.5 °C` or `±2 % of the change`.
    pub fn band_words(&self, pv_unit: &str) -> String {
        match self.settle_band {
            Some(b) => format!("±{}", crate::units::quantity(b, pv_unit)),
            None => format!(
                "±{} of the change",
                crate::units::quantity(self.settle_band_pct, "%")
            ),
        }
    }

    /// What the spec asks while the SP is held, for people: `held SP: away beyond 4σ of the PV
    /// noise or ±0.3 °C, whichever is wider; recover within 20.0 min`.
    pub fn hold_words(&self, pv_unit: &str) -> String {
        let band = match self.hold_band {
            Some(b) => format!(
                "away beyond 4σ of the PV noise or ±{}, whichever is wider",
                crate::units::quantity(b, pv_unit)
            ),
            None => "away beyond 4σ of the PV noise".to_owned(),
        };
        let recover = self
            .recover_within_s
            .map_or("no recovery time set".to_owned(), |r| {
                format!("recover within {}", crate::units::human_duration(r))
            });
        format!("held SP: {band}; {recover}")
    }

    /// Every problem with the spec's numbers, in the order of its fields.
    pub fn problems(&self) -> Vec<Problem> {
        let mut out = Vec::new();
        if !(self.settle_band_pct > 0.0 && self.settle_band_pct < 100.0) {
            out.push(Problem::new(
                Setting::SettleBandPct,
                "must be above 0 and below 100 %",
                self.settle_band_pct,
            ));
        }
        if let Some(b) = self.settle_band
            && !(b.is_finite() && b > 0.0)
        {
            out.push(Problem::new(
                Setting::SettleBand,
                "must be a positive number of PV units",
                b,
            ));
        }
        if !(self.settle_within_s.is_finite() && self.settle_within_s > 0.0) {
            out.push(Problem::new(
                Setting::SettleWithinS,
                "must be a positive number of seconds",
                self.settle_within_s,
            ));
        }
        if let Some(o) = self.max_overshoot_pct
            && !(o.is_finite() && o >= 0.0)
        {
            out.push(Problem::new(
                Setting::MaxOvershootPct,
                "must be 0 % or more",
                o,
            ));
        }
        if let Some(b) = self.hold_band
            && !(b.is_finite() && b > 0.0)
        {
            out.push(Problem::new(
                Setting::HoldBand,
                "must be a positive number of PV units",
                b,
            ));
        }
        if let Some(r) = self.recover_within_s
            && !(r.is_finite() && r > 0.0)
        {
            out.push(Problem::new(
                Setting::RecoverWithinS,
                "must be a positive number of seconds",
                r,
            ));
        }
        out
    }
}

fn default_settle_band_pct() -> f64 {
    Spec::DEFAULT_SETTLE_BAND_PCT
}

/// The actuator range of a loop, in OP units.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct OpRange {
    pub min: f64,
    pub max: f64,
}

impl OpRange {
    /// The OP range when none is given: 0 to 100 (% of output, common practice).
    pub const DEFAULT: OpRange = OpRange {
        min: 0.0,
        max: 100.0,
    };

    pub fn span(&self) -> f64 {
        self.max - self.min
    }

    /// Whether `op` is at a limit: within `margin` (a fraction of the span) of either end.
    pub fn is_at_limit(&self, op: f64, margin: f64) -> bool {
        let m = margin * self.span().abs();
        op >= self.max - m || op <= self.min + m
    }

    /// [`OpRange::is_at_limit`] with the default margin,
    /// [`AnalysisOptions::DEFAULT_SATURATION_MARGIN_PCT`] of the span.
    pub fn is_saturated(&self, op: f64) -> bool {
        self.is_at_limit(
            op,
            crate::units::pct_to_fraction(AnalysisOptions::DEFAULT_SATURATION_MARGIN_PCT),
        )
    }

    /// The range's problem, if any: both ends finite and the lower one below the upper.
    pub fn problems(&self) -> Vec<Problem> {
        let mut out = Vec::new();
        for (setting, v) in [(Setting::OpMin, self.min), (Setting::OpMax, self.max)] {
            if !v.is_finite() {
                out.push(Problem::new(setting, "must be a finite number", v));
            }
        }
        if out.is_empty() && self.min >= self.max {
            out.push(Problem {
                setting: Setting::OpMin,
                requirement: "must be below the upper OP limit",
                got: Some(self.min),
                other: Some((Setting::OpMax, self.max)),
            });
        }
        out
    }
}

impl Default for OpRange {
    fn default() -> Self {
        OpRange::DEFAULT
    }
}

/// Tuning knobs of the analysis; every `None` is derived from the data.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct AnalysisOptions {
    /// SP moves no larger than this (SP units) are jitter. Default: 0.1 % of the largest |SP|.
    pub sp_deadband: Option<f64>,
    /// How long the SP must hold still to end a move (s). Default: 3 sample periods.
    pub sp_hold_s: Option<f64>,
    /// Silence between samples that counts as a data gap (s). Default:
    /// [`AnalysisOptions::GAP_PERIODS`] sample periods.
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

impl AnalysisOptions {
    /// A silence longer than this many sample periods is a data gap, unless `max_gap_s` says.
    pub const GAP_PERIODS: f64 = 10.0;
    /// The SP must hold still this many sample periods to end a move, unless `sp_hold_s` says.
    pub const HOLD_PERIODS: f64 = 3.0;
    /// Episode windows end this many spec times after the change.
    pub const DEFAULT_HORIZON_FACTOR: f64 = 10.0;
    /// OP within this % of its span from a limit counts as saturated (DESIGN: 0.5 %).
    pub const DEFAULT_SATURATION_MARGIN_PCT: f64 = 0.5;
    /// Upgrades up to this multiple of today's capacity are advised; beyond, renegotiation.
    pub const DEFAULT_UPGRADE_RATIO_LIMIT: f64 = 2.0;

    /// SP moves no larger than this are jitter, unless `sp_deadband` says: 0.1 % of the largest
    /// |SP| seen.
    pub fn sp_deadband_for(&self, max_abs_sp: f64) -> f64 {
        self.sp_deadband.unwrap_or((1e-3 * max_abs_sp).max(1e-9))
    }

    /// How long the SP must hold still to end a move (s), for a loop sampled every `period_s`.
    pub fn sp_hold_for(&self, period_s: f64) -> f64 {
        self.sp_hold_s
            .unwrap_or(AnalysisOptions::HOLD_PERIODS * period_s)
    }

    /// The silence that counts as a data gap (s), for a loop sampled every `period_s`.
    pub fn max_gap_for(&self, period_s: f64) -> f64 {
        self.max_gap_s
            .unwrap_or(AnalysisOptions::GAP_PERIODS * period_s)
    }

    /// Every problem with the options' numbers.
    pub fn problems(&self) -> Vec<Problem> {
        let mut out = Vec::new();
        let zero_or_more = "must be a number 0 or more";
        let above_zero = "must be a number above 0";
        for (setting, value, zero_ok) in [
            (Setting::SpDeadband, self.sp_deadband, true),
            (Setting::SpHoldS, self.sp_hold_s, false),
            (Setting::MaxGapS, self.max_gap_s, false),
            (Setting::ExpectedPeriodS, self.expected_period_s, false),
        ] {
            if let Some(v) = value
                && !(v.is_finite() && (v > 0.0 || (zero_ok && v == 0.0)))
            {
                let want = if zero_ok { zero_or_more } else { above_zero };
                out.push(Problem::new(setting, want, v));
            }
        }
        if !(self.upgrade_ratio_limit.is_finite() && self.upgrade_ratio_limit > 0.0) {
            out.push(Problem::new(
                Setting::UpgradeRatioLimit,
                above_zero,
                self.upgrade_ratio_limit,
            ));
        }
        out
    }
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        AnalysisOptions {
            sp_deadband: None,
            sp_hold_s: None,
            max_gap_s: None,
            expected_period_s: None,
            horizon_factor: AnalysisOptions::DEFAULT_HORIZON_FACTOR,
            saturation_margin_pct: AnalysisOptions::DEFAULT_SATURATION_MARGIN_PCT,
            upgrade_ratio_limit: AnalysisOptions::DEFAULT_UPGRADE_RATIO_LIMIT,
            identify: identify::IdentifySettings::default(),
        }
    }
}

/// The actuator's rating at the full OP range (from the lower to the upper OP limit), in a
/// physical unit of its own: a heater's kW, a valve's Cv, a pump's flow. Capacity advice is
/// then also given in that unit, assuming the actuator's effect is linear in its OP.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ActuatorRating {
    pub rating: f64,
    pub unit: String,
}

impl ActuatorRating {
    fn problems(&self) -> Vec<Problem> {
        if self.rating.is_finite() && self.rating > 0.0 {
            Vec::new()
        } else {
            vec![Problem::new(
                Setting::ActuatorRating,
                "must be a positive number",
                self.rating,
            )]
        }
    }
}

/// Everything the analysis needs to know about a loop besides its data.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoopSetup {
    /// The loop's tag, e.g. `TIC-101`.
    pub tag: String,
    pub op: OpRange,
    pub spec: Spec,
    pub options: AnalysisOptions,
    pub units: Units,
    /// The controller, when described: its form, units and today's settings.
    pub controller: Option<ControllerSetup>,
    pub actuator: Option<ActuatorRating>,
}

impl LoopSetup {
    /// A setup with the default OP range, options and units, and no controller described.
    pub fn new(tag: impl Into<String>, spec: Spec) -> LoopSetup {
        LoopSetup {
            tag: tag.into(),
            op: OpRange::DEFAULT,
            spec,
            options: AnalysisOptions::default(),
            units: Units::default(),
            controller: None,
            actuator: None,
        }
    }

    /// The evaluation horizon (s): episode windows end this long after their change.
    pub fn horizon_s(&self) -> f64 {
        self.options.horizon_factor * self.spec.settle_within_s
    }

    /// Every problem with the setup's numbers: OP range, spec, options.
    pub fn problems(&self) -> Vec<Problem> {
        let mut out = self.op.problems();
        out.extend(self.spec.problems());
        out.extend(self.options.problems());
        if let Some(c) = &self.controller {
            out.extend(c.problems());
        }
        if let Some(a) = &self.actuator {
            out.extend(a.problems());
        }
        out
    }

    /// The first problem, if any; the analysis may only be given a setup that passes.
    pub fn validate(&self) -> Result<(), Problem> {
        match self.problems().into_iter().next() {
            Some(p) => Err(p),
            None => Ok(()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn setup() -> LoopSetup {
        LoopSetup::new("TIC-1", Spec::within(120.0))
    }

    #[test]
    fn a_default_setup_passes() {
        assert_eq!(setup().validate(), Ok(()));
        assert_eq!(setup().spec.band_fraction(5.0), 0.02);
        assert_eq!(setup().spec.band_abs(-5.0), 0.1);
    }

    #[test]
    fn each_bad_number_is_named_by_its_setting() {
        type Spoil = fn(&mut LoopSetup);
        let cases: [(Spoil, Setting); 12] = [
            (|s| s.spec.settle_band = Some(0.0), Setting::SettleBand),
            (|s| s.spec.settle_band_pct = 0.0, Setting::SettleBandPct),
            (|s| s.spec.settle_band_pct = 100.0, Setting::SettleBandPct),
            (
                |s| s.spec.settle_band_pct = f64::NAN,
                Setting::SettleBandPct,
            ),
            (|s| s.spec.settle_within_s = -1.0, Setting::SettleWithinS),
            (
                |s| s.spec.max_overshoot_pct = Some(-0.5),
                Setting::MaxOvershootPct,
            ),
            (|s| s.options.max_gap_s = Some(-5.0), Setting::MaxGapS),
            (|s| s.options.sp_deadband = Some(-1.0), Setting::SpDeadband),
            (|s| s.options.sp_hold_s = Some(f64::NAN), Setting::SpHoldS),
            (|s| s.op.max = f64::INFINITY, Setting::OpMax),
            (|s| s.spec.hold_band = Some(-0.1), Setting::HoldBand),
            (
                |s| s.spec.recover_within_s = Some(f64::INFINITY),
                Setting::RecoverWithinS,
            ),
        ];
        for (spoil, setting) in cases {
            let mut s = setup();
            spoil(&mut s);
            let problem = s.validate().expect_err("refused");
            assert_eq!(problem.setting, setting, "{problem}");
        }
    }

    #[test]
    fn an_absolute_band_replaces_the_percentage() {
        let mut spec = Spec::within(60.0);
        spec.settle_band = Some(0.5);
        assert_eq!(spec.band_abs(10.0), 0.5);
        assert_eq!(spec.band_abs(-2.0), 0.5);
        assert_eq!(spec.band_fraction(-2.0), 0.25);
        assert_eq!(spec.band_fraction(0.0), 1.0);
        assert_eq!(spec.band_words("°C"), "±0.500 °C");
        assert_eq!(Spec::within(60.0).band_words("°C"), "±2.00 % of the change");
    }

    #[test]
    fn a_zero_deadband_is_allowed_but_a_zero_gap_is_not() {
        let mut s = setup();
        s.options.sp_deadband = Some(0.0);
        assert_eq!(s.validate(), Ok(()));
        s.options.max_gap_s = Some(0.0);
        assert_eq!(s.validate().unwrap_err().setting, Setting::MaxGapS);
    }

    #[test]
    fn an_inverted_op_range_names_both_ends_in_the_edge_spelling() {
        let mut s = setup();
        s.op = OpRange {
            min: 100.0,
            max: 0.0,
        };
        let p = s.validate().unwrap_err();
        assert_eq!(p.to_string(), "op_min (100) must be below op_max (0)");
        let flag = |s: Setting| match s {
            Setting::OpMin => "--op-min",
            Setting::OpMax => "--op-max",
            _ => "other",
        };
        assert_eq!(p.message(flag), "--op-min (100) must be below --op-max (0)");
    }

    #[test]
    fn the_default_gap_rule_is_ten_sample_periods() {
        let mut o = AnalysisOptions::default();
        assert_eq!(o.max_gap_for(2.0), 20.0);
        o.max_gap_s = Some(7.0);
        assert_eq!(o.max_gap_for(2.0), 7.0);
    }
}
