//! `[loops.<tag>]`: one control loop — its units, OP range, spec and analysis settings (the
//! core's [`Spec`] and [`LoopSetup`], checked by the core's own `problems()`), its sample period
//! and stale limit, and its four signals' [`Source`]s (checked in `source`); and the rule for
//! loop tags.

use super::error::Checker;
use super::raw::{AnalysisConfig, RawLoop, RawSource};
use super::source::{Context, ModeSource, Source};
use crate::analysis::controller::ControllerSetup;
use crate::analysis::{
    self, ActuatorRating, AnalysisOptions, LoopSetup, OpRange, Setting, Spec, Units,
};
use crate::sample::Signal;
use std::time::Duration;

/// One loop.
#[derive(Debug, Clone, PartialEq)]
pub struct LoopConfig {
    /// Free text for people: what the loop controls and with what.
    pub description: String,
    /// Engineering unit of the PV, for display (e.g. "°C").
    pub pv_unit: String,
    /// Engineering unit of the OP, for display (usually "%").
    pub op_unit: String,
    pub op_min: f64,
    pub op_max: f64,
    /// The spec as the core reads it (`spec = { ... }` deserializes into it directly).
    pub spec: Spec,
    pub analysis: AnalysisConfig,
    /// How often each signal should arrive (s). Required for a watched loop; also the analysis's
    /// sample period for its default hold and gap limits.
    pub expected_period_s: Option<f64>,
    /// A signal with no sample for this many expected periods is stale.
    pub stale_after_periods: f64,
    pub sp: Option<Source>,
    pub pv: Option<Source>,
    pub op: Option<Source>,
    pub mode: Option<ModeSource>,
    /// The controller's form, units and today's settings, when described.
    pub controller: Option<ControllerSetup>,
    /// The actuator's rating at its full OP range, when given.
    pub actuator: Option<ActuatorRating>,
}

impl LoopConfig {
    /// A signal is stale after this many expected periods without a sample, unless the loop's
    /// `stale_after_periods` says otherwise.
    pub const DEFAULT_STALE_AFTER_PERIODS: f64 = 10.0;

    /// The source of one signal.
    pub fn source(&self, signal: Signal) -> Option<&Source> {
        match signal {
            Signal::Sp => self.sp.as_ref(),
            Signal::Pv => self.pv.as_ref(),
            Signal::Op => self.op.as_ref(),
            Signal::Mode => self.mode.as_ref().map(|m| &m.source),
        }
    }

    /// The signals that have a source, in the order sp, pv, op, mode.
    pub fn sources(&self) -> impl Iterator<Item = (Signal, &Source)> {
        Signal::ALL
            .into_iter()
            .filter_map(|s| self.source(s).map(|src| (s, src)))
    }

    /// Whether the daemon watches this loop (validation makes that mean: sp, pv and op sources).
    pub fn is_watched(&self) -> bool {
        self.sources().next().is_some()
    }

    /// How long a signal may go without a sample before it is stale, when the loop has an
    /// expected period.
    pub fn stale_after(&self) -> Option<Duration> {
        self.expected_period_s
            .map(|p| Duration::from_secs_f64(p * self.stale_after_periods))
    }

    /// Turns the loop's section into an analysis setup, checking the spec's values.
    pub fn setup(&self, tag: &str) -> Result<LoopSetup, analysis::Problem> {
        let setup = self.setup_as_written(tag);
        setup.validate()?;
        Ok(setup)
    }
}

impl LoopConfig {
    /// The loop's analysis setup as written, before the core's validation.
    fn setup_as_written(&self, tag: &str) -> LoopSetup {
        let a = &self.analysis;
        let mut options = AnalysisOptions {
            sp_deadband: a.sp_deadband,
            sp_hold_s: a.sp_hold_s,
            max_gap_s: a.max_gap_s,
            expected_period_s: self.expected_period_s,
            ..AnalysisOptions::default()
        };
        if let Some(r) = a.upgrade_ratio_limit {
            options.upgrade_ratio_limit = r;
        }
        LoopSetup {
            tag: tag.to_owned(),
            op: OpRange {
                min: self.op_min,
                max: self.op_max,
            },
            spec: self.spec,
            options,
            units: Units {
                pv: self.pv_unit.clone(),
                op: self.op_unit.clone(),
            },
            controller: self.controller,
            actuator: self.actuator.clone(),
        }
    }
}

/// Where a refused setting sits in a loop's section: its key, under `spec` or `analysis` when
/// it is written there. An inverted range is reported at `op_max`, the end usually mistyped.
fn setting_keys<'a>(tag: &'a str, p: &analysis::Problem) -> Vec<&'a str> {
    let section = match p.setting {
        Setting::SettleBandPct
        | Setting::SettleBand
        | Setting::SettleWithinS
        | Setting::MaxOvershootPct
        | Setting::HoldBand
        | Setting::RecoverWithinS => Some("spec"),
        Setting::PvRange
        | Setting::ControllerGain
        | Setting::ControllerIntegral
        | Setting::ControllerDerivative => Some("controller"),
        Setting::ActuatorRating => Some("actuator"),
        Setting::SpDeadband | Setting::SpHoldS | Setting::MaxGapS | Setting::UpgradeRatioLimit => {
            Some("analysis")
        }
        Setting::OpMin | Setting::OpMax | Setting::ExpectedPeriodS => None,
    };
    let key = match p.other {
        Some((other, _)) => other.key(),
        None => p.setting.key(),
    };
    ["loops", tag]
        .into_iter()
        .chain(section)
        .chain([key])
        .collect()
}

/// A loop's four sources as checked.
struct Signals {
    sp: Option<Source>,
    pv: Option<Source>,
    op: Option<Source>,
    mode: Option<ModeSource>,
}

impl Checker<'_> {
    pub(super) fn a_loop(&mut self, tag: &str, raw: RawLoop, cx: Context<'_>) -> LoopConfig {
        if let Some(m) = tag_problem(tag) {
            self.problem(&["loops", tag], m);
        }
        let stale_after_periods = raw
            .stale_after_periods
            .unwrap_or(LoopConfig::DEFAULT_STALE_AFTER_PERIODS);
        self.within(
            &["loops", tag, "stale_after_periods"],
            stale_after_periods,
            1.0..=f64::MAX,
            "must be a number of periods, 1 or more",
        );
        let mut source =
            |signal: Signal, raw: Option<RawSource>| raw.map(|r| self.source(tag, signal, r, cx));
        let signals = Signals {
            sp: source(Signal::Sp, raw.sp).map(|(s, _)| s),
            pv: source(Signal::Pv, raw.pv).map(|(s, _)| s),
            op: source(Signal::Op, raw.op).map(|(s, _)| s),
            mode: source(Signal::Mode, raw.mode).map(|(source, auto_values)| ModeSource {
                source,
                auto_values: auto_values.unwrap_or_default(),
            }),
        };
        self.watched_loop(tag, &signals, raw.expected_period_s);
        let l = LoopConfig {
            description: raw.description,
            pv_unit: raw.pv_unit,
            op_unit: raw.op_unit,
            op_min: raw.op_min,
            op_max: raw.op_max,
            spec: raw.spec,
            analysis: raw.analysis,
            expected_period_s: raw.expected_period_s,
            stale_after_periods,
            sp: signals.sp,
            pv: signals.pv,
            op: signals.op,
            mode: signals.mode,
            controller: raw.controller,
            actuator: raw.actuator,
        };
        for p in l.setup_as_written(tag).problems() {
            self.problem(&setting_keys(tag, &p), p.to_string());
        }
        l
    }

    /// A loop with any source is watched, and then needs all of sp, pv and op, and a period.
    fn watched_loop(&mut self, tag: &str, s: &Signals, expected_period_s: Option<f64>) {
        let present: Vec<&str> = [
            ("sp", s.sp.is_some()),
            ("pv", s.pv.is_some()),
            ("op", s.op.is_some()),
            ("mode", s.mode.is_some()),
        ]
        .into_iter()
        .filter_map(|(k, p)| p.then_some(k))
        .collect();
        if present.is_empty() {
            return;
        }
        for (key, missing) in [
            ("sp", s.sp.is_none()),
            ("pv", s.pv.is_none()),
            ("op", s.op.is_none()),
        ] {
            if missing {
                self.problem(
                    &["loops", tag, key],
                    format!(
                        "the loop has a source for {} but none for {key}: a watched loop needs \
                         sp, pv and op",
                        present.join(", ")
                    ),
                );
            }
        }
        if expected_period_s.is_none() {
            self.problem(
                &["loops", tag, "expected_period_s"],
                "a watched loop needs expected_period_s: how often each signal should arrive, in \
                 seconds",
            );
        }
    }
}

/// Why a loop tag (or a device name) is unusable. Tags name loops in the store, in alerts and
/// in messages, and may become levels of topics headroom publishes, so they stay short and free
/// of spaces and MQTT's `/ + #`.
pub(super) fn tag_problem(tag: &str) -> Option<String> {
    const MAX_TAG_CHARS: usize = 64;
    if tag.is_empty() {
        Some("a loop tag cannot be empty".into())
    } else if tag.chars().count() > MAX_TAG_CHARS {
        Some(format!(
            "a loop tag can be at most {MAX_TAG_CHARS} characters"
        ))
    } else if tag
        .chars()
        .any(|c| c.is_whitespace() || c.is_control() || matches!(c, '/' | '+' | '#'))
    {
        Some("a loop tag cannot contain spaces, control characters, or any of / + #".into())
    } else {
        None
    }
}

#[cfg(test)]
mod tests {
    use crate::analysis::AutoValues;
    use crate::config::fixture::{GOOD, PLANT, problems, refusal_in};

    #[test]
    fn an_inverted_op_range_is_refused_with_the_loop_tag() {
        let bad = GOOD.replace("op_max = 100.0", "op_max = -5.0");
        let err = refusal_in(&bad, "p.toml");
        assert!(err.contains("TIC-101") && err.contains("op_min"), "{err}");
        assert!(err.starts_with("p.toml:5:"), "{err}");
    }

    #[test]
    fn a_spec_time_of_zero_is_refused() {
        let bad = GOOD.replace("settle_within_s = 900", "settle_within_s = 0");
        let err = refusal_in(&bad, "p.toml");
        assert!(err.contains("settle_within_s"), "{err}");
        assert!(err.starts_with("p.toml:7:"), "{err}");
    }

    #[test]
    fn the_regulation_spec_is_read_and_checked_in_the_spec_table() {
        let with = |extra: &str| {
            GOOD.replace(
                "settle_within_s = 900",
                &format!("settle_within_s = 900\n{extra}"),
            )
        };
        let text = with("hold_band = 0.3\nrecover_within_s = 1200");
        let cfg = crate::config::Config::parse(&text, "p.toml".as_ref()).expect("valid");
        let spec = cfg.loops["TIC-101"].spec;
        assert_eq!(
            (spec.hold_band, spec.recover_within_s),
            (Some(0.3), Some(1200.0))
        );
        let err = refusal_in(&with("hold_band = -0.3"), "p.toml");
        assert!(err.contains("spec.hold_band"), "{err}");
        let err = refusal_in(&with("recover_within_s = 0"), "p.toml");
        assert!(err.contains("spec.recover_within_s"), "{err}");
    }

    const DESCRIBED: &str = r#"
[loops.TIC-101.controller]
form = "series"
gain_unit = "proportional_band"
integral_unit = "minutes"
pv_range = [0.0, 150.0]
action = "reverse"
gain = 80.0
integral = 4.0
[loops.TIC-101.actuator]
rating = 12.0
unit = "kW"
"#;

    #[test]
    fn the_controller_and_the_actuator_are_read_into_the_setup() {
        use crate::analysis::controller::{Form, GainUnit, IntegralUnit};
        let cfg = crate::config::Config::parse(&format!("{GOOD}{DESCRIBED}"), "p.toml".as_ref())
            .expect("valid");
        let setup = cfg.loops["TIC-101"].setup("TIC-101").unwrap();
        let c = setup.controller.expect("described");
        assert_eq!(
            (c.form, c.gain_unit, c.integral_unit, c.gain, c.integral),
            (
                Form::Series,
                GainUnit::ProportionalBand,
                IntegralUnit::Minutes,
                Some(80.0),
                Some(4.0)
            )
        );
        let a = setup.actuator.expect("rated");
        assert_eq!((a.rating, a.unit.as_str()), (12.0, "kW"));
        assert_eq!(setup.units.op, "%");
    }

    #[test]
    fn a_band_in_percent_of_span_without_the_pv_range_is_refused_at_its_key() {
        let bad = format!("{GOOD}{DESCRIBED}").replace("pv_range = [0.0, 150.0]\n", "");
        let err = refusal_in(&bad, "p.toml");
        assert!(
            err.contains("loops.TIC-101.controller.pv_range: pv_range is needed"),
            "{err}"
        );
        let bad = format!("{GOOD}{DESCRIBED}").replace("gain = 80.0", "gain = -80.0");
        let err = refusal_in(&bad, "p.toml");
        assert!(
            err.contains("controller.gain: gain must be a positive"),
            "{err}"
        );
        let bad = format!("{GOOD}{DESCRIBED}").replace("form = \"series\"", "form = \"serial\"");
        let err = refusal_in(&bad, "p.toml");
        assert!(
            err.contains("unknown variant") && err.contains("series"),
            "{err}"
        );
    }

    #[test]
    fn a_loop_with_pv_but_no_op_is_refused() {
        let text = PLANT.replace(
            "op = { topic = \"plant/feed/FIC-201/op\", format = \"number\" }\n",
            "",
        );
        let err = problems(&text);
        assert!(err.contains("loops.FIC-201.op:"), "{err}");
        assert!(err.contains("sp, pv but none for op"), "{err}");
        // Located at the loop, since the key itself is missing.
        assert!(err.starts_with("plant.toml:24:"), "{err}");
    }

    #[test]
    fn periods_must_be_positive_and_given_for_watched_loops() {
        for p in ["0", "-1.0", "nan"] {
            let text = PLANT.replace(
                "expected_period_s = 0.5",
                &format!("expected_period_s = {p}"),
            );
            let err = problems(&text);
            assert!(
                err.contains("loops.FIC-201.expected_period_s"),
                "{p}: {err}"
            );
        }
        let err = problems(&PLANT.replace("expected_period_s = 0.5\n", ""));
        assert!(
            err.contains("loops.FIC-201.expected_period_s") && err.contains("needs"),
            "{err}"
        );
        let text = PLANT.replace(
            "expected_period_s = 0.5",
            "expected_period_s = 0.5\nstale_after_periods = 0.5",
        );
        let err = problems(&text);
        assert!(err.contains("stale_after_periods"), "{err}");
    }

    #[test]
    fn loop_tags_with_spaces_or_topic_characters_are_refused() {
        let err = problems(
            &GOOD
                .replace("[loops.TIC-101]", "[loops.\"TIC 101\"]")
                .replace("[loops.TIC-101.spec]", "[loops.\"TIC 101\".spec]"),
        );
        assert!(err.contains("loops.\"TIC 101\""), "{err}");
        assert!(err.starts_with("plant.toml:2:"), "{err}");
    }

    #[test]
    fn auto_values_match_words_ignoring_case_and_numbers_by_the_list() {
        let words = AutoValues::new(&["Auto", "CAS"]);
        assert!(words.is_auto_text("AUTO") && words.is_auto_text(" cas "));
        assert!(!words.is_auto_text("MAN"));
        // Only words listed: any non-zero number is automatic.
        assert!(words.is_auto_number(2.0) && words.is_auto_text("1"));
        assert!(!words.is_auto_number(0.0) && !words.is_auto_text("0"));
        // Numbers listed: exactly those.
        let enumeration = AutoValues::new(&["1", "2"]);
        assert!(enumeration.is_auto_number(2.0) && enumeration.is_auto_text("1.0"));
        assert!(!enumeration.is_auto_number(3.0));
        assert_eq!(
            words.describe(),
            "Auto, CAS (any case) or any non-zero number"
        );
        assert_eq!(enumeration.describe(), "one of 1, 2");
        let default = AutoValues::default();
        assert!(default.is_auto_text("auto") && default.is_auto_text("True"));
        assert!(default.is_auto_number(1.0) && !default.is_auto_text("manual"));
    }
}
