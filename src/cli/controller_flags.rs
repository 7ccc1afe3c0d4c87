//! The `analyze` flags that describe the loop beyond its spec's times: its units, its absolute
//! bands, its controller (form, units, today's settings) and its actuator's rating. Each flag takes the config file's
//! spelling, and wins over the loop's section in `--config`.

use crate::analysis::controller::{
    Action, ControllerSetup, DerivativeUnit, Form, GainUnit, IntegralUnit,
};
use crate::analysis::{ActuatorRating, LoopSetup};
use clap::Args;
use serde::de::{DeserializeOwned, IntoDeserializer, value::Error as WordError};

#[derive(Debug, Default, Args)]
pub struct LoopFlags {
    /// Unit of the PV for display, e.g. °C (default: the config's pv_unit, else none).
    #[arg(long, value_name = "UNIT")]
    pub pv_unit: Option<String>,
    /// Unit of the OP for display (default %).
    #[arg(long, value_name = "UNIT")]
    pub op_unit: Option<String>,
    /// Spec: settling band as ± this many PV units (replaces --settle-band-pct).
    #[arg(long, value_name = "PV")]
    pub settle_band: Option<f64>,
    /// Spec between changes: the PV counts as away from a held SP beyond max(4σ of its noise,
    /// this many PV units).
    #[arg(long, value_name = "PV")]
    pub hold_band: Option<f64>,
    /// Spec between changes: a load disturbance must be recovered from within this many
    /// seconds.
    #[arg(long, value_name = "SECONDS")]
    pub recover_within_s: Option<f64>,

    /// The controller's form: ideal, parallel or series.
    #[arg(long, value_name = "FORM", value_parser = word::<Form>)]
    pub form: Option<Form>,
    /// How the controller takes its gain: output_per_pv, percent_per_percent or
    /// proportional_band.
    #[arg(long, value_name = "UNIT", value_parser = word::<GainUnit>)]
    pub gain_unit: Option<GainUnit>,
    /// How it takes its integral action: seconds, minutes or repeats_per_minute.
    #[arg(long, value_name = "UNIT", value_parser = word::<IntegralUnit>)]
    pub integral_unit: Option<IntegralUnit>,
    /// How it takes its derivative action: seconds or minutes.
    #[arg(long, value_name = "UNIT", value_parser = word::<DerivativeUnit>)]
    pub derivative_unit: Option<DerivativeUnit>,
    /// The PV's measuring range LOW,HIGH, e.g. 0,150 (needed for % of span and a proportional
    /// band).
    #[arg(long, value_name = "LOW,HIGH", value_parser = range, allow_hyphen_values = true)]
    pub pv_range: Option<[f64; 2]>,
    /// Today's action: direct or reverse.
    #[arg(long, value_name = "ACTION", value_parser = word::<Action>)]
    pub current_action: Option<Action>,
    /// Today's gain, in --gain-unit.
    #[arg(long, value_name = "GAIN")]
    pub current_gain: Option<f64>,
    /// Today's integral setting, in --integral-unit (leave out for no integral action).
    #[arg(long, value_name = "VALUE")]
    pub current_integral: Option<f64>,
    /// Today's derivative setting, in --derivative-unit.
    #[arg(long, value_name = "VALUE")]
    pub current_derivative: Option<f64>,

    /// The actuator's rating over its full OP range, e.g. 12 (with --actuator-unit kW).
    #[arg(long, value_name = "RATING", requires = "actuator_unit")]
    pub actuator_rating: Option<f64>,
    /// The unit of --actuator-rating, e.g. kW, Cv, m3/h.
    #[arg(long, value_name = "UNIT", requires = "actuator_rating")]
    pub actuator_unit: Option<String>,
}

/// A range that is not two numbers separated by a comma.
#[derive(Debug, thiserror::Error)]
#[error("give two numbers LOW,HIGH, e.g. 0,150")]
struct BadRange;

/// `LOW,HIGH` as two numbers (whether low is below high is the setup's check).
fn range(text: &str) -> Result<[f64; 2], BadRange> {
    let (lo, hi) = text.split_once(',').ok_or(BadRange)?;
    let number = |s: &str| s.trim().parse::<f64>().map_err(|_| BadRange);
    Ok([number(lo)?, number(hi)?])
}

/// A word in the config file's spelling (`proportional_band`), as a flag's value.
fn word<T: DeserializeOwned>(text: &str) -> Result<T, WordError> {
    T::deserialize(text.into_deserializer())
}

impl LoopFlags {
    /// Applies the flags that were given to `setup`.
    pub fn apply(&self, setup: &mut LoopSetup) {
        if let Some(u) = &self.pv_unit {
            setup.units.pv = u.clone();
        }
        if let Some(u) = &self.op_unit {
            setup.units.op = u.clone();
        }
        if let Some(b) = self.settle_band {
            setup.spec.settle_band = Some(b);
        }
        if let Some(b) = self.hold_band {
            setup.spec.hold_band = Some(b);
        }
        if let Some(r) = self.recover_within_s {
            setup.spec.recover_within_s = Some(r);
        }
        if let (Some(rating), Some(unit)) = (self.actuator_rating, &self.actuator_unit) {
            setup.actuator = Some(ActuatorRating {
                rating,
                unit: unit.clone(),
            });
        }
        if !self.describes_controller() {
            return;
        }
        let c = setup
            .controller
            .get_or_insert_with(ControllerSetup::default);
        set(&mut c.form, self.form);
        set(&mut c.gain_unit, self.gain_unit);
        set(&mut c.integral_unit, self.integral_unit);
        set(&mut c.derivative_unit, self.derivative_unit);
        if self.pv_range.is_some() {
            c.pv_range = self.pv_range;
        }
        c.action = self.current_action.or(c.action);
        c.gain = self.current_gain.or(c.gain);
        c.integral = self.current_integral.or(c.integral);
        c.derivative = self.current_derivative.or(c.derivative);
    }

    fn describes_controller(&self) -> bool {
        self.form.is_some()
            || self.gain_unit.is_some()
            || self.integral_unit.is_some()
            || self.derivative_unit.is_some()
            || self.pv_range.is_some()
            || self.current_action.is_some()
            || self.current_gain.is_some()
            || self.current_integral.is_some()
            || self.current_derivative.is_some()
    }
}

fn set<T>(field: &mut T, flag: Option<T>) {
    if let Some(v) = flag {
        *field = v;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::Spec;

    #[test]
    fn words_take_the_config_spelling_and_name_the_choices() {
        assert_eq!(word::<Form>("series").unwrap(), Form::Series);
        assert_eq!(
            word::<GainUnit>("proportional_band").unwrap(),
            GainUnit::ProportionalBand
        );
        let e = word::<IntegralUnit>("hours").unwrap_err().to_string();
        assert!(e.contains("repeats_per_minute"), "{e}");
    }

    #[test]
    fn a_range_is_two_numbers_with_a_comma() {
        assert_eq!(range("0,150").unwrap(), [0.0, 150.0]);
        assert_eq!(range("-20, 80.5").unwrap(), [-20.0, 80.5]);
        for bad in ["150", "0;150", "a,b", ""] {
            assert!(range(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn flags_describe_the_controller_over_the_config() {
        let mut setup = LoopSetup::new("TIC-1", Spec::within(60.0));
        setup.controller = Some(ControllerSetup {
            form: Form::Parallel,
            gain: Some(1.0),
            ..ControllerSetup::default()
        });
        let flags = LoopFlags {
            gain_unit: Some(GainUnit::ProportionalBand),
            pv_range: Some([0.0, 150.0]),
            current_gain: Some(80.0),
            pv_unit: Some("°C".into()),
            ..LoopFlags::default()
        };
        flags.apply(&mut setup);
        let c = setup.controller.unwrap();
        assert_eq!(
            (c.form, c.gain_unit, c.pv_range, c.gain),
            (
                Form::Parallel,
                GainUnit::ProportionalBand,
                Some([0.0, 150.0]),
                Some(80.0)
            )
        );
        assert_eq!(setup.units.pv, "°C");
        let mut plain = LoopSetup::new("TIC-1", Spec::within(60.0));
        LoopFlags::default().apply(&mut plain);
        assert_eq!(plain.controller, None);
    }
}
