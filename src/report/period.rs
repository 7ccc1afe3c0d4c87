//! The period a summary covers: an ISO 8601 week (Monday 00:00 to the next Monday 00:00 in a
//! time zone, so a week with a daylight-saving change is 167 or 169 hours long), or a free
//! range. Calendar arithmetic is jiff's; nothing here counts days by hand.

use jiff::civil::{Date, ISOWeekDate, Weekday};
use jiff::tz::TimeZone;
use jiff::{Timestamp, ToSpan, Zoned};

/// Why a period could not be made.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum PeriodError {
    #[error(
        "cannot read the week {given:?}: write an ISO 8601 week such as 2026-W48 (year, W, \
         week number 01 to 52 or 53)"
    )]
    Week { given: String },
    #[error(
        "cannot read the time {given:?}: write RFC 3339 (2026-11-23T08:00:00Z) or a date \
         (2026-11-23, midnight in the report's time zone)"
    )]
    Time { given: String },
    #[error("the period must end after it starts ({from} is not before {to})")]
    Empty { from: String, to: String },
    #[error("the date {0} cannot be placed in the time zone")]
    OutOfRange(String),
}

/// A half-open period `[from, to)` in a time zone.
#[derive(Debug, Clone, PartialEq)]
pub struct Period {
    /// `2026-W48` for a week, `2026-11-23 to 2026-11-30` for a free range.
    pub label: String,
    pub from: Zoned,
    pub to: Zoned,
    /// The Monday of the ISO week, when the period is one.
    pub week: Option<ISOWeekDate>,
}

impl Period {
    /// How the period's start and end read at the ends of a run of periods: the week itself for
    /// an ISO week (`2026-W41`), else its start and end times.
    pub fn ends(&self) -> (String, String) {
        match self.week {
            Some(_) => (self.label.clone(), self.label.clone()),
            None => (short(&self.from), short(&self.to)),
        }
    }

    /// The ISO week `year`-W`week` in `tz`.
    pub fn iso_week(year: i16, week: i8, tz: &TimeZone) -> Result<Period, PeriodError> {
        let given = format!("{year:04}-W{week:02}");
        let monday = ISOWeekDate::new(year, week, Weekday::Monday)
            .map_err(|_| PeriodError::Week { given })?;
        Period::week_of(monday.date(), tz)
    }

    /// Parses `2026-W48` (or `2026W48`) as an ISO week in `tz`.
    pub fn parse_week(s: &str, tz: &TimeZone) -> Result<Period, PeriodError> {
        let err = || PeriodError::Week {
            given: s.to_string(),
        };
        // jiff reads full week dates (`2026-W48-1`); a week is its Monday.
        let t = s.trim();
        let with_day = if t.contains('-') {
            format!("{t}-1")
        } else {
            format!("{t}1")
        };
        let monday: ISOWeekDate = with_day.parse().map_err(|_| err())?;
        Period::week_of(monday.date(), tz)
    }

    /// The ISO week that contains the instant `t`, in `tz`.
    pub fn week_containing(t: Timestamp, tz: &TimeZone) -> Result<Period, PeriodError> {
        Period::week_of(t.to_zoned(tz.clone()).date(), tz)
    }

    /// The ISO week containing `date`.
    fn week_of(date: Date, tz: &TimeZone) -> Result<Period, PeriodError> {
        let iso = date.iso_week_date();
        let monday = ISOWeekDate::new(iso.year(), iso.week(), Weekday::Monday)
            .map_err(|_| PeriodError::OutOfRange(date.to_string()))?;
        let start = monday.date();
        let next = start
            .checked_add(7.days())
            .map_err(|_| PeriodError::OutOfRange(date.to_string()))?;
        let at_midnight = |d: Date| {
            d.to_zoned(tz.clone())
                .map_err(|_| PeriodError::OutOfRange(d.to_string()))
        };
        Ok(Period {
            label: format!("{:04}-W{:02}", monday.year(), monday.week()),
            from: at_midnight(start)?,
            to: at_midnight(next)?,
            week: Some(monday),
        })
    }

    /// A free range; each end is RFC 3339 or a date (midnight in `tz`).
    pub fn range(from: &str, to: &str, tz: &TimeZone) -> Result<Period, PeriodError> {
        let from = parse_instant(from, tz)?;
        let to = parse_instant(to, tz)?;
        if from >= to {
            return Err(PeriodError::Empty {
                from: from.to_string(),
                to: to.to_string(),
            });
        }
        Ok(Period {
            label: format!("{} to {}", short(&from), short(&to)),
            from,
            to,
            week: None,
        })
    }

    /// The period just before this one: the previous ISO week, or a range of the same length.
    pub fn previous(&self) -> Result<Period, PeriodError> {
        match self.week {
            Some(monday) => {
                let before = monday
                    .date()
                    .checked_sub(1.day())
                    .map_err(|_| PeriodError::OutOfRange(monday.to_string()))?;
                Period::week_of(before, &self.from.time_zone().clone())
            }
            None => {
                let len = self.to.timestamp().duration_since(self.from.timestamp());
                let from = self
                    .from
                    .checked_sub(len)
                    .map_err(|_| PeriodError::OutOfRange(self.from.to_string()))?;
                Ok(Period {
                    label: format!("{} to {}", short(&from), short(&self.from)),
                    to: self.from.clone(),
                    from,
                    week: None,
                })
            }
        }
    }

    /// This period and the `n - 1` before it, oldest first.
    pub fn with_earlier(&self, n: usize) -> Result<Vec<Period>, PeriodError> {
        let mut out = vec![self.clone()];
        while out.len() < n {
            let p = out[out.len() - 1].previous()?;
            out.push(p);
        }
        out.reverse();
        Ok(out)
    }

    pub fn from_ms(&self) -> i64 {
        self.from.timestamp().as_millisecond()
    }

    pub fn to_ms(&self) -> i64 {
        self.to.timestamp().as_millisecond()
    }

    /// Length in hours (167, 168 or 169 for a week).
    pub fn hours(&self) -> f64 {
        (self.to_ms() - self.from_ms()) as f64 / 3_600_000.0
    }

    /// The time zone's name, such as `Europe/Berlin` (or `UTC`).
    pub fn time_zone_name(&self) -> String {
        self.from
            .time_zone()
            .iana_name()
            .unwrap_or("UTC")
            .to_string()
    }

    /// "Mon 23 Nov 2026 – Sun 29 Nov 2026" style dates of the period, for people.
    pub fn dates_for_people(&self) -> String {
        let last = self
            .to
            .checked_sub(1.millisecond())
            .unwrap_or_else(|_| self.to.clone());
        format!(
            "{} – {}",
            self.from.strftime("%a %-d %b %Y %H:%M"),
            last.strftime("%a %-d %b %Y %H:%M")
        )
    }
}

/// RFC 3339, or a date at midnight in `tz`.
pub fn parse_instant(s: &str, tz: &TimeZone) -> Result<Zoned, PeriodError> {
    let err = || PeriodError::Time {
        given: s.to_string(),
    };
    if let Ok(t) = s.parse::<Timestamp>() {
        return Ok(t.to_zoned(tz.clone()));
    }
    let d: Date = s.parse().map_err(|_| err())?;
    d.to_zoned(tz.clone()).map_err(|_| err())
}

fn short(z: &Zoned) -> String {
    if z.time() == jiff::civil::Time::midnight() {
        z.date().to_string()
    } else {
        z.strftime("%Y-%m-%d %H:%M").to_string()
    }
}

/// A time in milliseconds since the epoch as RFC 3339 in the report's zone, to the second, e.g.
/// `2026-11-23T08:00:00+01:00`; a time outside the representable range as its number.
pub fn local(ms: i64, tz: &TimeZone) -> String {
    match Timestamp::from_millisecond(ms) {
        Ok(t) => rfc3339_zoned(&t.to_zoned(tz.clone())),
        Err(_) => ms.to_string(),
    }
}

/// A zoned time as RFC 3339 with its offset, to the second (unlike [`crate::units::rfc3339`],
/// which writes UTC with the milliseconds).
pub fn rfc3339_zoned(z: &Zoned) -> String {
    z.strftime("%Y-%m-%dT%H:%M:%S%:z").to_string()
}

#[cfg(test)]
mod tests {
    //! Expected dates and lengths were checked with Python's `datetime.date.fromisocalendar`
    //! and `zoneinfo` (a calendar implementation we did not write).
    use super::*;

    fn tz(name: &str) -> TimeZone {
        crate::units::time_zone(name)
            .expect("the tests need the tzdata package (/usr/share/zoneinfo)")
    }

    #[test]
    fn week_48_of_2026_runs_monday_to_monday() {
        let p = Period::parse_week("2026-W48", &TimeZone::UTC).unwrap();
        assert_eq!(p.label, "2026-W48");
        assert_eq!(p.from.to_string(), "2026-11-23T00:00:00+00:00[UTC]");
        assert_eq!(p.to.to_string(), "2026-11-30T00:00:00+00:00[UTC]");
        assert_eq!(p.hours(), 168.0);
        assert_eq!(Period::parse_week("2026W48", &TimeZone::UTC).unwrap(), p);
    }

    #[test]
    fn iso_weeks_across_the_year_end_follow_the_first_thursday_rule() {
        let utc = TimeZone::UTC;
        // 2026 starts on a Thursday, so it has 53 weeks; W01 began in 2025.
        let w1 = Period::iso_week(2026, 1, &utc).unwrap();
        assert_eq!(w1.from.date().to_string(), "2025-12-29");
        let w53 = Period::iso_week(2026, 53, &utc).unwrap();
        assert_eq!(w53.from.date().to_string(), "2026-12-28");
        assert_eq!(w53.to.date().to_string(), "2027-01-04");
        // 1 January 2027 and 3 January 2027 still belong to 2026-W53.
        let jan3 = "2027-01-03T12:00:00Z".parse::<Timestamp>().unwrap();
        assert_eq!(
            Period::week_containing(jan3, &utc).unwrap().label,
            "2026-W53"
        );
        let jan4 = "2027-01-04T00:00:00Z".parse::<Timestamp>().unwrap();
        assert_eq!(
            Period::week_containing(jan4, &utc).unwrap().label,
            "2027-W01"
        );
        // The week before 2027-W01 is 2026-W53, and 2027 has no W53.
        let w = Period::iso_week(2027, 1, &utc).unwrap();
        assert_eq!(w.previous().unwrap().label, "2026-W53");
        assert!(Period::iso_week(2027, 53, &utc).is_err());
        assert!(Period::parse_week("2027-W53", &utc).is_err());
    }

    #[test]
    fn a_week_with_a_daylight_saving_change_is_an_hour_short_or_long() {
        let berlin = tz("Europe/Berlin");
        let spring = Period::iso_week(2026, 13, &berlin).unwrap();
        assert_eq!(
            spring.from.to_string(),
            "2026-03-23T00:00:00+01:00[Europe/Berlin]"
        );
        assert_eq!(
            spring.to.to_string(),
            "2026-03-30T00:00:00+02:00[Europe/Berlin]"
        );
        assert_eq!(spring.hours(), 167.0);
        let autumn = Period::iso_week(2026, 43, &berlin).unwrap();
        assert_eq!(autumn.hours(), 169.0);

        let new_york = tz("America/New_York");
        let w44 = Period::iso_week(2026, 44, &new_york).unwrap();
        assert_eq!(
            w44.from.to_string(),
            "2026-10-26T00:00:00-04:00[America/New_York]"
        );
        assert_eq!(
            w44.to.to_string(),
            "2026-11-02T00:00:00-05:00[America/New_York]"
        );
        assert_eq!(w44.hours(), 169.0);
        // Consecutive weeks share their boundary instant exactly.
        let w45 = Period::iso_week(2026, 45, &new_york).unwrap();
        assert_eq!(w45.previous().unwrap(), w44);
        assert_eq!(w44.to_ms(), w45.from_ms());
    }

    #[test]
    fn eight_weeks_back_are_contiguous_and_oldest_first() {
        let p = Period::parse_week("2026-W02", &TimeZone::UTC).unwrap();
        let weeks = p.with_earlier(8).unwrap();
        let labels: Vec<&str> = weeks.iter().map(|w| w.label.as_str()).collect();
        assert_eq!(
            labels,
            [
                "2025-W47", "2025-W48", "2025-W49", "2025-W50", "2025-W51", "2025-W52", "2026-W01",
                "2026-W02"
            ]
        );
        for pair in weeks.windows(2) {
            assert_eq!(pair[0].to_ms(), pair[1].from_ms());
        }
    }

    #[test]
    fn a_free_range_takes_rfc_3339_or_dates_and_must_not_be_empty() {
        let utc = TimeZone::UTC;
        let p = Period::range("2026-11-23", "2026-11-25T12:00:00Z", &utc).unwrap();
        assert_eq!(p.label, "2026-11-23 to 2026-11-25 12:00");
        assert_eq!(p.hours(), 60.0);
        assert_eq!(p.previous().unwrap().hours(), 60.0);
        assert!(matches!(
            Period::range("2026-11-25", "2026-11-23", &utc),
            Err(PeriodError::Empty { .. })
        ));
        let e = Period::range("yesterday", "2026-11-23", &utc).unwrap_err();
        assert!(e.to_string().contains("RFC 3339"), "{e}");
        let e = Period::parse_week("2026-48", &utc).unwrap_err();
        assert!(e.to_string().contains("2026-W48"), "{e}");
    }
}
