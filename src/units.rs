//! Unit conversions used across the product, defined once: epoch milliseconds ↔ seconds,
//! RFC 3339 text of a time, percent ↔ fraction, and numbers, quantities and durations for
//! people. Pure, no clock.

/// Milliseconds in one second.
pub const MS_PER_S: f64 = 1000.0;

/// Seconds (a duration or a time since the epoch) as whole milliseconds, rounded to nearest.
pub fn s_to_ms(seconds: f64) -> i64 {
    (seconds * MS_PER_S).round() as i64
}

/// Milliseconds (a duration or a time since the epoch) as seconds.
pub fn ms_to_s(ms: i64) -> f64 {
    ms as f64 / MS_PER_S
}

/// A time in milliseconds since the Unix epoch as RFC 3339 text in UTC, e.g.
/// `2026-11-23T00:00:10Z`; a time outside the representable range is written as
/// `<n> ms since the epoch` rather than dropped.
pub fn rfc3339(ms: i64) -> String {
    jiff::Timestamp::from_millisecond(ms)
        .map_or_else(|_| format!("{ms} ms since the epoch"), |t| t.to_string())
}

/// A time zone that could not be loaded.
#[derive(Debug, thiserror::Error)]
#[error(
    "unknown time zone {name:?} ({source}); use an IANA name such as Europe/Berlin, and install \
     the tzdata package if /usr/share/zoneinfo is missing"
)]
pub struct UnknownTimeZone {
    pub name: String,
    source: jiff::Error,
}

/// Loads a time zone by its IANA name from the system's database (/usr/share/zoneinfo); `UTC`
/// in any case needs no database.
pub fn time_zone(name: &str) -> Result<jiff::tz::TimeZone, UnknownTimeZone> {
    if name.eq_ignore_ascii_case("UTC") {
        return Ok(jiff::tz::TimeZone::UTC);
    }
    jiff::tz::TimeZone::get(name).map_err(|source| UnknownTimeZone {
        name: name.to_owned(),
        source,
    })
}

/// A percentage as a fraction: 2 % → 0.02.
pub fn pct_to_fraction(pct: f64) -> f64 {
    pct / 100.0
}

/// A fraction as a percentage: 0.02 → 2 %.
pub fn fraction_to_pct(fraction: f64) -> f64 {
    fraction * 100.0
}

/// A count with its noun in the right number: `count(1, "change", "changes")` is `1 change`,
/// `count(3, "change", "changes")` is `3 changes`.
pub fn count(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// A duration for people: seconds below two minutes, minutes below two hours, hours below two
/// days, then days, each to one decimal: `45.0 s`, `12.5 min`, `4.0 h`, `3.0 days`.
pub fn human_duration(seconds: f64) -> String {
    if !seconds.is_finite() {
        "not defined".to_owned()
    } else if seconds >= 2.0 * 86_400.0 {
        format!("{:.1} days", seconds / 86_400.0)
    } else if seconds >= 2.0 * 3600.0 {
        format!("{:.1} h", seconds / 3600.0)
    } else if seconds >= 120.0 {
        format!("{:.1} min", seconds / 60.0)
    } else {
        format!("{seconds:.1} s")
    }
}

/// Significant figures a person reads by default: enough to tell a setting or a reading apart,
/// few enough not to pretend a precision the analysis does not have (common practice).
pub const DISPLAY_DIGITS: usize = 3;

/// A number for people to `digits` significant figures, in plain decimal notation (never an
/// exponent), with trailing zeros after the point kept to show the precision: `sig(106.49, 3)`
/// is `106`, `sig(0.012345, 3)` is `0.0123`, `sig(9.0, 3)` is `9.00`. A number that is not
/// finite reads `not defined`, so no `NaN` or `inf` reaches a person.
pub fn sig(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return "not defined".to_owned();
    }
    if x == 0.0 {
        return "0".to_owned();
    }
    let magnitude = x.abs().log10().floor() as i64;
    let decimals = (digits as i64 - 1 - magnitude).max(0) as usize;
    let text = format!("{x:.decimals$}");
    // Rounding may carry into a new digit (9.996 → 10.00): one decimal fewer then.
    let rounded: f64 = text.parse().unwrap_or(x);
    if decimals > 0 && rounded.abs().log10().floor() as i64 > magnitude {
        return format!("{x:.*}", decimals - 1);
    }
    text
}

/// A quantity for people: the number to [`DISPLAY_DIGITS`] significant figures, a space, its
/// unit (a space before every unit, `%` included, as SI writes them); no unit when the unit is
/// empty: `quantity(75.04, "°C")` is `75.0 °C`.
pub fn quantity(x: f64, unit: &str) -> String {
    with_unit(sig(x, DISPLAY_DIGITS), unit)
}

/// A change for people, with its sign: `signed_quantity(9.0, "°C")` is `+9.00 °C`.
pub fn signed_quantity(x: f64, unit: &str) -> String {
    let text = sig(x, DISPLAY_DIGITS);
    if x.is_finite() && x > 0.0 {
        with_unit(format!("+{text}"), unit)
    } else {
        with_unit(text, unit)
    }
}

fn with_unit(number: String, unit: &str) -> String {
    if unit.is_empty() || number == "not defined" {
        number
    } else {
        format!("{number} {unit}")
    }
}

/// The engineering units people read a loop's numbers in (display only: the analysis works in
/// whatever units the data comes in).
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct Units {
    /// The PV's unit, e.g. `°C`; empty when not known.
    pub pv: String,
    /// The OP's unit, `%` unless the loop says otherwise.
    pub op: String,
}

impl Default for Units {
    fn default() -> Self {
        Units {
            pv: String::new(),
            op: Units::DEFAULT_OP.to_owned(),
        }
    }
}

impl Units {
    /// The OP's unit when none is given: % of output (common practice).
    pub const DEFAULT_OP: &'static str = "%";

    /// The unit of a process gain, PV units per OP unit: `°C/%`.
    pub fn process_gain(&self) -> String {
        ratio(&self.pv, &self.op)
    }

    /// The unit of a controller gain, OP units per PV unit: `%/°C`.
    pub fn controller_gain(&self) -> String {
        ratio(&self.op, &self.pv)
    }
}

/// `a/b` for a gain's unit; a missing unit reads "per b" or "a per unit" rather than vanishing.
fn ratio(a: &str, b: &str) -> String {
    match (a.is_empty(), b.is_empty()) {
        (false, false) => format!("{a}/{b}"),
        (true, false) => format!("per {b}"),
        (false, true) => format!("{a} per unit"),
        (true, true) => String::new(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_count_takes_the_noun_in_its_number() {
        assert_eq!(count(0, "change", "changes"), "0 changes");
        assert_eq!(count(1, "change", "changes"), "1 change");
        assert_eq!(count(2, "series id", "series ids"), "2 series ids");
    }

    #[test]
    fn milliseconds_and_seconds_round_trip() {
        assert_eq!(s_to_ms(1.2345), 1235);
        assert_eq!(s_to_ms(-0.0004), 0);
        assert_eq!(ms_to_s(1500), 1.5);
        assert_eq!(s_to_ms(ms_to_s(1_764_000_000_123)), 1_764_000_000_123);
    }

    #[test]
    fn times_are_written_in_rfc3339_utc() {
        // 1 764 115 210 000 ms = 2025-11-26T00:00:10Z (check: 20418 days × 86 400 s + 10 s).
        assert_eq!(rfc3339(1_764_115_210_000), "2025-11-26T00:00:10Z");
        assert_eq!(rfc3339(1_500), "1970-01-01T00:00:01.5Z");
        assert_eq!(
            rfc3339(i64::MAX),
            format!("{} ms since the epoch", i64::MAX)
        );
    }

    #[test]
    fn an_unknown_time_zone_is_named_with_a_hint() {
        assert_eq!(time_zone("utc").unwrap(), jiff::tz::TimeZone::UTC);
        let e = time_zone("Mars/Olympus").unwrap_err().to_string();
        assert!(
            e.contains("\"Mars/Olympus\"") && e.contains("tzdata"),
            "{e}"
        );
    }

    #[test]
    fn durations_read_in_the_unit_that_fits() {
        assert_eq!(human_duration(45.0), "45.0 s");
        assert_eq!(human_duration(750.0), "12.5 min");
        assert_eq!(human_duration(14_400.0), "4.0 h");
        assert_eq!(human_duration(3.0 * 86_400.0), "3.0 days");
        assert_eq!(human_duration(f64::INFINITY), "not defined");
    }

    #[test]
    fn percent_and_fraction() {
        assert_eq!(pct_to_fraction(2.0), 0.02);
        assert_eq!(fraction_to_pct(0.5), 50.0);
    }

    #[test]
    fn numbers_read_to_significant_figures_without_nan() {
        assert_eq!(sig(106.49, 3), "106");
        assert_eq!(sig(0.012345, 3), "0.0123");
        assert_eq!(sig(9.0, 3), "9.00");
        assert_eq!(sig(-2.345, 2), "-2.3");
        assert_eq!(sig(9.996, 3), "10.0");
        assert_eq!(sig(99_960.0, 3), "99960");
        assert_eq!(sig(0.0, 3), "0");
        assert_eq!(sig(f64::NAN, 3), "not defined");
        assert_eq!(sig(f64::INFINITY, 3), "not defined");
        assert_eq!(quantity(75.04, "°C"), "75.0 °C");
        assert_eq!(quantity(12.5, "%"), "12.5 %");
        assert_eq!(quantity(3.0, ""), "3.00");
        assert_eq!(signed_quantity(9.0, "°C"), "+9.00 °C");
        assert_eq!(signed_quantity(-0.5, "bar"), "-0.500 bar");
        assert_eq!(quantity(f64::NEG_INFINITY, "%"), "not defined");
    }

    #[test]
    fn gain_units_read_as_ratios_and_never_vanish_half() {
        let u = Units {
            pv: "°C".into(),
            op: "%".into(),
        };
        assert_eq!(
            (u.process_gain(), u.controller_gain()),
            ("°C/%".into(), "%/°C".into())
        );
        let bare = Units::default();
        assert_eq!(bare.process_gain(), "per %");
        assert_eq!(bare.controller_gain(), "% per unit");
    }
}
