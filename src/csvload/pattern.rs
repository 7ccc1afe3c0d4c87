//! The pattern a time column is written in, when it is not one of the forms read without one:
//! a `strftime`-style pattern as jiff's `strtime` reads it, checked once when it is given.

use jiff::Zoned;
use jiff::fmt::strtime;
use jiff::tz::TimeZone;
use thiserror::Error;

/// A `strftime`-style pattern for the time column, such as `%d.%m.%Y %H:%M:%S`, checked to give
/// the date and the time of day to the minute (see [`TimePattern::new`]).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TimePattern(pub(super) String);

/// Why a time pattern was refused.
#[derive(Debug, Error)]
pub enum BadTimePattern {
    #[error(
        "{pattern:?} is not a usable time pattern ({source}); write one such as \"%d.%m.%Y %H:%M:%S\""
    )]
    Invalid {
        pattern: String,
        #[source]
        source: jiff::Error,
    },
    #[error(
        "{pattern:?} does not give the date and the time of day to the minute (it needs a year, \
         month, day, hour and minute, with %p beside a 12-hour %I); write one such as \
         \"%d.%m.%Y %H:%M:%S\""
    )]
    Incomplete { pattern: String },
}

impl TimePattern {
    /// Checks a pattern by writing a known time with it and reading the text back: it must give
    /// back the same date, hour and minute. That refuses patterns missing a part of the date,
    /// a 12-hour clock without AM/PM, and directives jiff cannot read.
    pub fn new(pattern: &str) -> Result<TimePattern, BadTimePattern> {
        let invalid = |source| BadTimePattern::Invalid {
            pattern: pattern.to_owned(),
            source,
        };
        let incomplete = || BadTimePattern::Incomplete {
            pattern: pattern.to_owned(),
        };
        let sample: Zoned = jiff::civil::date(2026, 11, 23)
            .at(13, 45, 56, 0)
            .to_zoned(TimeZone::UTC)
            .map_err(invalid)?;
        let written = strtime::format(pattern, &sample).map_err(invalid)?;
        let tm = strtime::parse(pattern, &written).map_err(invalid)?;
        let back = match tm.timestamp() {
            // `%s`, seconds since the epoch, gives the instant: here in UTC, as written.
            Some(ts) => ts.to_zoned(TimeZone::UTC).datetime(),
            None => tm.to_datetime().map_err(|_| incomplete())?,
        };
        let wanted = sample.datetime();
        if back.date() != wanted.date() || (back.hour(), back.minute()) != (13, 45) {
            return Err(incomplete());
        }
        Ok(TimePattern(pattern.to_owned()))
    }

    pub fn as_str(&self) -> &str {
        &self.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn patterns_must_give_the_date_and_the_time_to_the_minute() {
        for good in [
            "%d.%m.%Y %H:%M:%S",
            "%d/%m/%Y %H:%M",
            "%m/%d/%y %I:%M:%S %p",
            "%Y-%m-%dT%H:%M:%S%.f%:z",
            "%s",
        ] {
            assert!(TimePattern::new(good).is_ok(), "{good}");
        }
        for incomplete in ["%d.%m %H:%M", "%d.%m.%Y", "%d.%m.%Y %I:%M", "%d.%m.%Y %H"] {
            let err = TimePattern::new(incomplete).unwrap_err();
            assert!(
                matches!(err, BadTimePattern::Incomplete { .. }),
                "{incomplete}: {err}"
            );
        }
        for invalid in ["day.month.year", "%d.%m.%Y %H:%M:%!", ""] {
            let err = TimePattern::new(invalid).unwrap_err();
            assert!(err.to_string().contains("%d.%m.%Y %H:%M:%S"), "{err}");
        }
    }
}
