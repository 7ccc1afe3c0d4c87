//! PID settings in the forms and units real controllers take, converted from and to one
//! canonical form, defined once.
//!
//! The canonical form is the ideal (also called standard) PID acting on e = SP − PV:
//!
//! ```text
//!   u = u0 + Kc·(e + (1/Ti)·∫e dt + Td·de/dt)
//! ```
//!
//! with Kc in OP units per PV unit, signed like the process gain (negative for a negative-gain
//! process). Controllers take the same law in other forms (Åström & Hägglund, *Advanced PID
//! Control*, ISA 2006, ch. 3 — from memory):
//! - parallel: u = Kp·e + Ki·∫e dt + Kd·de/dt, with Kp = Kc, Ki = Kc/Ti, Kd = Kc·Td;
//! - series (interacting): Kc′·(1 + 1/(Ti′·s))·(1 + Td′·s), which is the ideal form with
//!   Kc = Kc′·(1 + Td′/Ti′), Ti = Ti′ + Td′, Td = Ti′·Td′/(Ti′ + Td′). The way back exists only
//!   when Ti ≥ 4·Td (solving the quadratic: Ti′, Td′ = Ti/2·(1 ± √(1 − 4·Td/Ti)),
//!   Kc′ = Kc·Ti′/Ti); for a PI (Td = 0) the three forms agree.
//!
//! and in other units (common practice): the gain as OP units per PV unit, as % of OP span per %
//! of PV span, or as a proportional band PB = 100 / Kc[%/%] in %; the integral as a time in
//! seconds or minutes per repeat, or as a rate in repeats per minute (1 / Ti[min]); the
//! derivative as a time. A controller's gain is a magnitude: its sign is given by the action —
//! with e = SP − PV a positive-gain process needs reverse action (the OP rises when the PV falls
//! below the setpoint), a negative-gain process direct action.

use super::problem::{Problem, Setting};
use crate::units::Units;
use crate::units::{DISPLAY_DIGITS, sig};
use serde::{Deserialize, Serialize};

/// The canonical settings: ideal form, Kc in OP units per PV unit (signed like the process
/// gain), Ti and Td in seconds (Td = 0 for a PI; Ti = ∞ for no integral action).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Ideal {
    pub gain: f64,
    pub integral_time_s: f64,
    pub derivative_time_s: f64,
}

/// The algorithm's form.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Form {
    #[default]
    Ideal,
    Parallel,
    Series,
}

/// How the controller takes its gain.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum GainUnit {
    /// OP units per PV unit.
    #[default]
    OutputPerPv,
    /// % of OP span per % of PV span (dimensionless).
    PercentPerPercent,
    /// Proportional band, % of PV span for 100 % of OP span.
    ProportionalBand,
}

/// How the controller takes its integral action.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum IntegralUnit {
    #[default]
    Seconds,
    Minutes,
    RepeatsPerMinute,
}

/// How the controller takes its derivative action.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DerivativeUnit {
    #[default]
    Seconds,
    Minutes,
}

/// The controller's action, from the process gain's sign (e = SP − PV).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Action {
    /// The OP rises when the PV rises: for a negative-gain process.
    Direct,
    /// The OP rises when the PV falls: for a positive-gain process.
    Reverse,
}

impl Action {
    /// The action a process of gain `process_gain` needs.
    pub fn for_process_gain(process_gain: f64) -> Action {
        if process_gain < 0.0 {
            Action::Direct
        } else {
            Action::Reverse
        }
    }

    pub fn as_str(self) -> &'static str {
        match self {
            Action::Direct => "direct",
            Action::Reverse => "reverse",
        }
    }
}

/// The ranges that give % of span its meaning: PV and OP spans in their units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Spans {
    pub pv_span: f64,
    pub op_span: f64,
}

/// How one controller takes its settings.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Convention {
    pub form: Form,
    pub gain: GainUnit,
    pub integral: IntegralUnit,
    pub derivative: DerivativeUnit,
}

impl Convention {
    /// Ideal form, OP units per PV unit, seconds.
    pub const CANONICAL: Convention = Convention {
        form: Form::Ideal,
        gain: GainUnit::OutputPerPv,
        integral: IntegralUnit::Seconds,
        derivative: DerivativeUnit::Seconds,
    };
}

/// Settings as a controller of one [`Convention`] takes them: three numbers (each in the unit
/// the convention names, `None` where the term is off) and the action. The gain is a magnitude.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Written {
    pub convention: Convention,
    pub gain: f64,
    /// Ti (time), or Ki for the parallel form; `None` without integral action.
    pub integral: Option<f64>,
    /// Td (time), or Kd for the parallel form; `None` without derivative action.
    pub derivative: Option<f64>,
    pub action: Action,
}

/// A loop's controller as described in its config (`[loops.<tag>.controller]`) or by the
/// `analyze` flags: how it takes its settings, the PV range that gives % of span its meaning,
/// and, when known, the settings it runs with today, in its own units. Each field defaults to
/// the canonical convention (ideal form, OP units per PV unit, seconds).
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ControllerSetup {
    #[serde(default)]
    pub form: Form,
    #[serde(default)]
    pub gain_unit: GainUnit,
    #[serde(default)]
    pub integral_unit: IntegralUnit,
    #[serde(default)]
    pub derivative_unit: DerivativeUnit,
    /// The PV's measuring range [low, high] in PV units, needed for % of span and for a
    /// proportional band (the OP span is the loop's OP range).
    pub pv_range: Option<[f64; 2]>,
    /// Today's action, if the controller's configuration is known; checked against the action
    /// the identified process needs.
    pub action: Option<Action>,
    /// Today's gain in `gain_unit` (a magnitude).
    pub gain: Option<f64>,
    /// Today's integral setting in `integral_unit`; absent for no integral action.
    pub integral: Option<f64>,
    /// Today's derivative setting in `derivative_unit`; absent for no derivative action.
    pub derivative: Option<f64>,
}

impl ControllerSetup {
    pub fn convention(&self) -> Convention {
        Convention {
            form: self.form,
            gain: self.gain_unit,
            integral: self.integral_unit,
            derivative: self.derivative_unit,
        }
    }

    /// The spans % of span is read against, when the PV range is given; `op_span` is the
    /// loop's OP range (upper − lower limit).
    pub fn spans(&self, op_span: f64) -> Option<Spans> {
        self.pv_range.map(|[lo, hi]| Spans {
            pv_span: hi - lo,
            op_span,
        })
    }

    /// Today's settings in the canonical form, when they are given; without a configured action
    /// they are read with the action a process of gain `process_gain` needs.
    pub fn current(
        &self,
        op_span: f64,
        process_gain: f64,
    ) -> Option<Result<Ideal, ConversionError>> {
        let gain = self.gain?;
        let written = Written {
            convention: self.convention(),
            gain,
            integral: self.integral,
            derivative: self.derivative.filter(|d| *d > 0.0),
            action: self
                .action
                .unwrap_or_else(|| Action::for_process_gain(process_gain)),
        };
        Some(read(&written, self.spans(op_span)))
    }

    /// Every problem with the description's numbers.
    pub fn problems(&self) -> Vec<Problem> {
        let mut out = Vec::new();
        match self.pv_range {
            Some([lo, hi]) if !(lo.is_finite() && hi.is_finite() && lo < hi) => {
                out.push(Problem::new(
                    Setting::PvRange,
                    "must be [low, high] with low below high",
                    hi - lo,
                ))
            }
            None if self.gain_unit != GainUnit::OutputPerPv => out.push(Problem::missing(
                Setting::PvRange,
                "is needed for a gain in % of span or a proportional band",
            )),
            _ => {}
        }
        if let Some(g) = self.gain
            && !(g.is_finite() && g > 0.0)
        {
            out.push(Problem::new(
                Setting::ControllerGain,
                "must be a positive number (the action gives the sign)",
                g,
            ));
        }
        if let Some(i) = self.integral
            && !(i.is_finite() && i > 0.0)
        {
            out.push(Problem::new(
                Setting::ControllerIntegral,
                "must be a positive number (leave it out for no integral action)",
                i,
            ));
        }
        if let Some(d) = self.derivative
            && !(d.is_finite() && d >= 0.0)
        {
            out.push(Problem::new(
                Setting::ControllerDerivative,
                "must be 0 or more",
                d,
            ));
        }
        if self.gain.is_none() && (self.integral.is_some() || self.derivative.is_some()) {
            out.push(Problem::missing(
                Setting::ControllerGain,
                "is needed with today's integral or derivative setting",
            ));
        }
        out
    }
}

impl Form {
    /// The form as the config and the JSON spell it.
    pub fn as_str(self) -> &'static str {
        match self {
            Form::Ideal => "ideal",
            Form::Parallel => "parallel",
            Form::Series => "series",
        }
    }
}

impl GainUnit {
    /// The convention as the config and the JSON spell it.
    pub fn as_str(self) -> &'static str {
        match self {
            GainUnit::OutputPerPv => "output_per_pv",
            GainUnit::PercentPerPercent => "percent_per_percent",
            GainUnit::ProportionalBand => "proportional_band",
        }
    }
}

impl IntegralUnit {
    /// The convention as the config and the JSON spell it.
    pub fn as_str(self) -> &'static str {
        match self {
            IntegralUnit::Seconds => "seconds",
            IntegralUnit::Minutes => "minutes",
            IntegralUnit::RepeatsPerMinute => "repeats_per_minute",
        }
    }
}

impl Written {
    /// The settings as people type them into the controller, each with its name and unit:
    /// `series form, reverse action: PB 62.5 %, Ti 3.20 min, no derivative action`. Gains in OP
    /// units per PV unit are written with the loop's `units`.
    pub fn words(&self, units: &Units) -> String {
        let c = self.convention;
        let parallel = c.form == Form::Parallel;
        let per = match c.gain {
            GainUnit::OutputPerPv => units.controller_gain(),
            GainUnit::PercentPerPercent | GainUnit::ProportionalBand => "%/%".to_owned(),
        };
        let n = |x: f64| sig(x, DISPLAY_DIGITS);
        let gain = match (c.gain, parallel) {
            (GainUnit::ProportionalBand, _) => format!("PB {} %", n(self.gain)),
            (_, true) => format!("Kp {} {per}", n(self.gain)),
            (_, false) => format!("Kc {} {per}", n(self.gain)),
        };
        let time = |unit: IntegralUnit| match unit {
            IntegralUnit::Seconds => "s",
            _ => "min",
        };
        let integral = match (self.integral, parallel, c.integral) {
            (None, ..) => "no integral action".to_owned(),
            (Some(ki), true, u) => format!("Ki {} {per} per {}", n(ki), time(u)),
            (Some(r), false, IntegralUnit::RepeatsPerMinute) => {
                format!("reset {} repeats/min", n(r))
            }
            (Some(ti), false, u) => format!("Ti {} {}", n(ti), time(u)),
        };
        let d_unit = match c.derivative {
            DerivativeUnit::Seconds => "s",
            DerivativeUnit::Minutes => "min",
        };
        let derivative = match (self.derivative, parallel) {
            (None, _) => "no derivative action".to_owned(),
            (Some(kd), true) => format!("Kd {} {per}·{d_unit}", n(kd)),
            (Some(td), false) => format!("Td {} {d_unit}", n(td)),
        };
        format!(
            "{} form, {} action: {gain}, {integral}, {derivative}",
            c.form.as_str(),
            self.action.as_str()
        )
    }
}

/// Why settings cannot be written in a convention.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ConversionError {
    #[error(
        "a series (interacting) controller cannot take a derivative time above a quarter of the \
         integral time (Ti {integral_time_s:.1} s, Td {derivative_time_s:.1} s)"
    )]
    NoSeriesEquivalent {
        integral_time_s: f64,
        derivative_time_s: f64,
    },
    #[error("% of span needs the PV and OP ranges")]
    NoSpans,
    #[error("the gain is zero or not a number")]
    BadGain,
}

/// The ideal settings as a controller of `convention` takes them.
pub fn write(
    ideal: Ideal,
    convention: Convention,
    spans: Option<Spans>,
) -> Result<Written, ConversionError> {
    if !(ideal.gain.is_finite() && ideal.gain != 0.0) {
        return Err(ConversionError::BadGain);
    }
    let action = Action::for_process_gain(ideal.gain);
    let kc = ideal.gain.abs();
    let (ti, td) = (ideal.integral_time_s, ideal.derivative_time_s);
    let has_i = ti.is_finite();
    let has_d = td > 0.0;
    // The form's own three numbers, with times in seconds and the gain in OP per PV.
    let (k, i, d) = match convention.form {
        Form::Ideal => (kc, has_i.then_some(ti), has_d.then_some(td)),
        Form::Parallel => (kc, has_i.then(|| kc / ti), has_d.then_some(kc * td)),
        Form::Series => {
            if !has_d {
                (kc, has_i.then_some(ti), None)
            } else {
                let root = 1.0 - 4.0 * td / ti;
                if !has_i || root < 0.0 {
                    return Err(ConversionError::NoSeriesEquivalent {
                        integral_time_s: ti,
                        derivative_time_s: td,
                    });
                }
                let ti_s = 0.5 * ti * (1.0 + root.sqrt());
                let td_s = 0.5 * ti * (1.0 - root.sqrt());
                (kc * ti_s / ti, Some(ti_s), Some(td_s))
            }
        }
    };
    let gain = gain_to(k, convention.gain, spans)?;
    let parallel = convention.form == Form::Parallel;
    // The parallel form's Ki and Kd are gains too, on the proportional gain's scale.
    let scale = if parallel {
        span_scale(convention.gain, spans)?
    } else {
        1.0
    };
    Ok(Written {
        convention,
        gain,
        integral: i.map(|v| integral_to(v * scale, convention.integral, parallel)),
        derivative: d.map(|v| derivative_to(v * scale, convention.derivative)),
        action,
    })
}

/// Settings written in a convention, back in the canonical ideal form.
pub fn read(w: &Written, spans: Option<Spans>) -> Result<Ideal, ConversionError> {
    let parallel = w.convention.form == Form::Parallel;
    let k = gain_from(w.gain, w.convention.gain, spans)?;
    let scale = if parallel {
        span_scale(w.convention.gain, spans)?
    } else {
        1.0
    };
    let i = w
        .integral
        .map(|v| integral_from(v, w.convention.integral, parallel) / scale);
    let d = w
        .derivative
        .map(|v| derivative_from(v, w.convention.derivative) / scale);
    let (kc, ti, td) = match w.convention.form {
        Form::Ideal => (k, i.unwrap_or(f64::INFINITY), d.unwrap_or(0.0)),
        Form::Parallel => (
            k,
            i.map_or(f64::INFINITY, |ki| k / ki),
            d.map_or(0.0, |kd| kd / k),
        ),
        Form::Series => {
            let ti_s = i.unwrap_or(f64::INFINITY);
            let td_s = d.unwrap_or(0.0);
            if ti_s.is_finite() && td_s > 0.0 {
                (
                    k * (1.0 + td_s / ti_s),
                    ti_s + td_s,
                    ti_s * td_s / (ti_s + td_s),
                )
            } else {
                (k, ti_s, td_s)
            }
        }
    };
    let sign = match w.action {
        Action::Reverse => 1.0,
        Action::Direct => -1.0,
    };
    Ok(Ideal {
        gain: sign * kc,
        integral_time_s: ti,
        derivative_time_s: td,
    })
}

/// The factor from OP units per PV unit to the unit's scale: 1, or PV span / OP span for % of
/// span (and the proportional band built on it).
fn span_scale(unit: GainUnit, spans: Option<Spans>) -> Result<f64, ConversionError> {
    match unit {
        GainUnit::OutputPerPv => Ok(1.0),
        GainUnit::PercentPerPercent | GainUnit::ProportionalBand => spans
            .map(|s| s.pv_span / s.op_span)
            .ok_or(ConversionError::NoSpans),
    }
}

/// A gain magnitude in OP units per PV unit, in `unit`.
fn gain_to(k: f64, unit: GainUnit, spans: Option<Spans>) -> Result<f64, ConversionError> {
    let g = k * span_scale(unit, spans)?;
    Ok(match unit {
        GainUnit::ProportionalBand => 100.0 / g,
        _ => g,
    })
}

fn gain_from(v: f64, unit: GainUnit, spans: Option<Spans>) -> Result<f64, ConversionError> {
    let g = match unit {
        GainUnit::ProportionalBand => 100.0 / v,
        _ => v,
    };
    Ok(g / span_scale(unit, spans)?)
}

/// Ti in seconds (or the parallel Ki per second) in `unit`.
fn integral_to(v: f64, unit: IntegralUnit, parallel: bool) -> f64 {
    match (parallel, unit) {
        // Ki per second → per minute; "repeats per minute" of a parallel Ki is per minute too.
        (true, IntegralUnit::Seconds) => v,
        (true, _) => v * 60.0,
        (false, IntegralUnit::Seconds) => v,
        (false, IntegralUnit::Minutes) => v / 60.0,
        (false, IntegralUnit::RepeatsPerMinute) => 60.0 / v,
    }
}

fn integral_from(v: f64, unit: IntegralUnit, parallel: bool) -> f64 {
    match (parallel, unit) {
        (true, IntegralUnit::Seconds) => v,
        (true, _) => v / 60.0,
        (false, IntegralUnit::Seconds) => v,
        (false, IntegralUnit::Minutes) => v * 60.0,
        (false, IntegralUnit::RepeatsPerMinute) => 60.0 / v,
    }
}

/// Td in seconds (or the parallel Kd, gain × seconds) in `unit`.
fn derivative_to(v: f64, unit: DerivativeUnit) -> f64 {
    match unit {
        DerivativeUnit::Seconds => v,
        DerivativeUnit::Minutes => v / 60.0,
    }
}

fn derivative_from(v: f64, unit: DerivativeUnit) -> f64 {
    match unit {
        DerivativeUnit::Seconds => v,
        DerivativeUnit::Minutes => v * 60.0,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const SPANS: Spans = Spans {
        pv_span: 150.0,
        op_span: 100.0,
    };

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-9 * a.abs().max(b.abs()).max(1.0)
    }

    fn conventions() -> Vec<Convention> {
        let mut out = Vec::new();
        for form in [Form::Ideal, Form::Parallel, Form::Series] {
            for gain in [
                GainUnit::OutputPerPv,
                GainUnit::PercentPerPercent,
                GainUnit::ProportionalBand,
            ] {
                for integral in [
                    IntegralUnit::Seconds,
                    IntegralUnit::Minutes,
                    IntegralUnit::RepeatsPerMinute,
                ] {
                    for derivative in [DerivativeUnit::Seconds, DerivativeUnit::Minutes] {
                        out.push(Convention {
                            form,
                            gain,
                            integral,
                            derivative,
                        });
                    }
                }
            }
        }
        out
    }

    #[test]
    fn every_convention_round_trips_to_the_ideal_form() {
        for ideal in [
            Ideal {
                gain: 1.25,
                integral_time_s: 10.0,
                derivative_time_s: 0.0,
            },
            Ideal {
                gain: -0.8,
                integral_time_s: 480.0,
                derivative_time_s: 60.0,
            },
        ] {
            for c in conventions() {
                let w = write(ideal, c, Some(SPANS)).unwrap();
                assert!(w.gain > 0.0, "{c:?}: the written gain is a magnitude");
                let back = read(&w, Some(SPANS)).unwrap();
                assert!(
                    close(back.gain, ideal.gain)
                        && close(back.integral_time_s, ideal.integral_time_s)
                        && close(back.derivative_time_s, ideal.derivative_time_s),
                    "{c:?}: {ideal:?} → {w:?} → {back:?}"
                );
            }
        }
    }

    #[test]
    fn the_forms_follow_the_published_relations() {
        // Parallel: Kp = Kc, Ki = Kc/Ti, Kd = Kc·Td; series from ideal by the inverse of
        // Kc = Kc′(1 + Td′/Ti′), Ti = Ti′ + Td′, Td = Ti′Td′/(Ti′ + Td′) (Åström & Hägglund 2006,
        // ch. 3 — from memory).
        let ideal = Ideal {
            gain: 2.0,
            integral_time_s: 100.0,
            derivative_time_s: 16.0,
        };
        let c = |form| Convention {
            form,
            ..Convention::CANONICAL
        };
        let p = write(ideal, c(Form::Parallel), None).unwrap();
        assert!(close(p.gain, 2.0) && close(p.integral.unwrap(), 0.02));
        assert!(close(p.derivative.unwrap(), 32.0));
        let s = write(ideal, c(Form::Series), None).unwrap();
        // Ti′, Td′ = 50·(1 ± √(1 − 0.64)) = 80, 20; Kc′ = 2·80/100 = 1.6. Check the forward
        // relations by hand: 1.6·(1 + 20/80) = 2, 80 + 20 = 100, 80·20/100 = 16.
        assert!(close(s.integral.unwrap(), 80.0) && close(s.derivative.unwrap(), 20.0));
        assert!(close(s.gain, 1.6));
    }

    #[test]
    fn units_of_span_band_and_repeats() {
        // Kc = 1.2 °C⁻¹·% with a 0–150 °C PV and 0–100 % OP: 1.2·150/100 = 1.8 %/%, PB = 55.6 %;
        // Ti = 240 s = 4 min = 0.25 repeats/min (common practice).
        let ideal = Ideal {
            gain: 1.2,
            integral_time_s: 240.0,
            derivative_time_s: 0.0,
        };
        let with = |gain, integral| Convention {
            form: Form::Ideal,
            gain,
            integral,
            derivative: DerivativeUnit::Seconds,
        };
        let w = write(
            ideal,
            with(GainUnit::PercentPerPercent, IntegralUnit::Minutes),
            Some(SPANS),
        )
        .unwrap();
        assert!(close(w.gain, 1.8) && close(w.integral.unwrap(), 4.0));
        let w = write(
            ideal,
            with(GainUnit::ProportionalBand, IntegralUnit::RepeatsPerMinute),
            Some(SPANS),
        )
        .unwrap();
        assert!(close(w.gain, 100.0 / 1.8) && close(w.integral.unwrap(), 0.25));
        assert_eq!(
            write(
                ideal,
                with(GainUnit::ProportionalBand, IntegralUnit::Seconds),
                None
            ),
            Err(ConversionError::NoSpans)
        );
    }

    #[test]
    fn the_action_follows_the_process_gain_and_the_gain_is_never_negative() {
        let cooling = Ideal {
            gain: -3.0,
            integral_time_s: 60.0,
            derivative_time_s: 0.0,
        };
        let w = write(cooling, Convention::CANONICAL, None).unwrap();
        assert_eq!((w.action, w.gain), (Action::Direct, 3.0));
        let heating = Ideal {
            gain: 3.0,
            ..cooling
        };
        assert_eq!(
            write(heating, Convention::CANONICAL, None).unwrap().action,
            Action::Reverse
        );
    }

    #[test]
    fn a_derivative_above_a_quarter_of_the_integral_has_no_series_form() {
        let ideal = Ideal {
            gain: 1.0,
            integral_time_s: 100.0,
            derivative_time_s: 26.0,
        };
        let series = Convention {
            form: Form::Series,
            ..Convention::CANONICAL
        };
        assert!(matches!(
            write(ideal, series, None),
            Err(ConversionError::NoSeriesEquivalent { .. })
        ));
    }

    #[test]
    fn settings_read_with_their_names_and_units() {
        let units = Units {
            pv: "°C".into(),
            op: "%".into(),
        };
        let ideal = Ideal {
            gain: -2.0,
            integral_time_s: 120.0,
            derivative_time_s: 0.0,
        };
        let c = |form, gain, integral| Convention {
            form,
            gain,
            integral,
            derivative: DerivativeUnit::Seconds,
        };
        let words = |conv| write(ideal, conv, Some(SPANS)).unwrap().words(&units);
        // 2 %/°C on spans 150 °C / 100 % is 3 %/%, a band of 33.3 %; Ti 2 min is 0.5 repeats/min.
        assert_eq!(
            words(c(Form::Ideal, GainUnit::OutputPerPv, IntegralUnit::Seconds)),
            "ideal form, direct action: Kc 2.00 %/°C, Ti 120 s, no derivative action"
        );
        assert_eq!(
            words(c(
                Form::Series,
                GainUnit::ProportionalBand,
                IntegralUnit::RepeatsPerMinute
            )),
            "series form, direct action: PB 33.3 %, reset 0.500 repeats/min, no derivative action"
        );
        assert_eq!(
            words(c(
                Form::Parallel,
                GainUnit::PercentPerPercent,
                IntegralUnit::Minutes
            )),
            "parallel form, direct action: Kp 3.00 %/%, Ki 1.50 %/% per min, no derivative action"
        );
    }

    #[test]
    fn the_written_spellings_are_the_configs() {
        let serde = |v: serde_json::Value| v.as_str().unwrap().to_owned();
        for f in [Form::Ideal, Form::Parallel, Form::Series] {
            assert_eq!(serde(serde_json::to_value(f).unwrap()), f.as_str());
        }
        for g in [
            GainUnit::OutputPerPv,
            GainUnit::PercentPerPercent,
            GainUnit::ProportionalBand,
        ] {
            assert_eq!(serde(serde_json::to_value(g).unwrap()), g.as_str());
        }
        for i in [
            IntegralUnit::Seconds,
            IntegralUnit::Minutes,
            IntegralUnit::RepeatsPerMinute,
        ] {
            assert_eq!(serde(serde_json::to_value(i).unwrap()), i.as_str());
        }
        for a in [Action::Direct, Action::Reverse] {
            assert_eq!(serde(serde_json::to_value(a).unwrap()), a.as_str());
        }
    }
}
