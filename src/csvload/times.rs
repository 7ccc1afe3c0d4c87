//! Reading the time column: numbers of seconds or milliseconds, RFC 3339 timestamps, local
//! times in a given zone (a daylight-saving repeat resolved by the order of the rows), and times
//! written to a given pattern. The rules are the module's policy; see [`super`].

use std::cmp::Ordering;

use jiff::Timestamp;
use jiff::civil::DateTime;
use jiff::fmt::strtime;
use jiff::tz::{AmbiguousOffset, TimeZone};
use serde::Serialize;

use super::cells::finite_number;
use super::error::CsvError;

use super::pattern::TimePattern;
use super::report::{LoadReport, TimeFormat};
use super::text::excerpt;

/// The unit of times written as plain numbers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TimeUnit {
    Seconds,
    Milliseconds,
}

/// Numbers at least this large are read as epoch milliseconds when no unit is given: as seconds
/// since 1970 they would be after the year 5138 (1e11 s / 31,556,952 s per year = 3,169 years),
/// as milliseconds they are 1973-03-03 or later (1e11 ms = 1e8 s = 3.17 years).
pub const MILLISECONDS_FROM: f64 = 1e11;

/// Numbers at least this large are refused when no unit is given: as milliseconds they too would
/// be after the year 5138, so they are more likely microseconds (now about 1.8e15) or
/// nanoseconds since 1970.
pub const MILLISECONDS_UNTIL: f64 = 1e14;

#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum TimeValue {
    Seconds(f64),
    Instant(Timestamp),
}

pub(super) fn cmp_time(a: &TimeValue, b: &TimeValue) -> Ordering {
    match (a, b) {
        (TimeValue::Seconds(x), TimeValue::Seconds(y)) => x.total_cmp(y),
        (TimeValue::Instant(x), TimeValue::Instant(y)) => x.cmp(y),
        // A file never mixes the two (that is an error); any fixed order keeps sorting total.
        (TimeValue::Seconds(_), TimeValue::Instant(_)) => Ordering::Less,
        (TimeValue::Instant(_), TimeValue::Seconds(_)) => Ordering::Greater,
    }
}

pub(super) fn seconds_since(origin: Timestamp, ts: Timestamp) -> f64 {
    let ns = ts.as_nanosecond() - origin.as_nanosecond();
    // Split so whole seconds and the fraction are each converted exactly where possible.
    (ns / 1_000_000_000) as f64 + (ns % 1_000_000_000) as f64 / 1e9
}

/// The local time read last, to resolve a time that a daylight-saving change repeats.
#[derive(Debug, Clone, Copy)]
struct LastLocal {
    at: Timestamp,
    /// Whether it was read as the second occurrence of a repeated time.
    second: bool,
}

/// Reads the time cells of one file, fixing its time format at the first one.
pub(super) struct TimeReader {
    zone: Option<TimeZone>,
    pattern: Option<TimePattern>,
    unit: Option<TimeUnit>,
    /// Whether numbers may be written with a decimal comma.
    comma: bool,
    /// The file's time format and the row that fixed it.
    kind: Option<(TimeFormat, u64)>,
    last_local: Option<LastLocal>,
    /// Whether the last time read was written with a decimal comma.
    comma_read: bool,
}

/// Why one time cell could not be read; made a [`CsvError`] with its row, column and text.
enum Problem {
    Blank,
    NoOffset,
    Unreadable,
    NoMatch,
    Skipped(String),
    TooLarge,
}

impl TimeReader {
    pub(super) fn new(opts: &super::CsvOptions, comma: bool) -> TimeReader {
        TimeReader {
            zone: opts.time_zone.clone(),
            pattern: opts.time_pattern.clone(),
            unit: opts.time_unit,
            comma,
            kind: None,
            last_local: None,
            comma_read: false,
        }
    }

    /// The format the times were read in, its row, and the zone name if local times were read.
    pub(super) fn fill_report(&self, report: &mut LoadReport) {
        let time = &mut report.time;
        time.format = self.kind.map(|(format, _)| format);
        time.pattern = self.pattern.as_ref().map(|p| p.0.clone());
        time.unit_given = self.unit.is_some();
        time.milliseconds_detected =
            self.unit.is_none() && time.format == Some(TimeFormat::Milliseconds);
        if self.last_local.is_some() {
            time.zone = self.zone.as_ref().map(|z| zone_name(z).to_owned());
        }
    }

    /// Whether the time read last was written with a decimal comma; asking forgets it.
    pub(super) fn take_comma(&mut self) -> bool {
        std::mem::take(&mut self.comma_read)
    }

    /// The time of a cell that is a plain decimal, when the file's times are numbers and this one
    /// fits them; `None` sends the cell the general way, which also reports any problem.
    pub(super) fn plain_number(&mut self, v: f64, row: u64) -> Option<TimeValue> {
        if self.pattern.is_some() {
            return None;
        }
        let format = self.number_format(v).ok()?;
        match self.kind {
            None => self.kind = Some((format, row)),
            Some((expected, _)) if expected == format => {}
            Some(_) => return None,
        }
        Some(TimeValue::Seconds(self.in_seconds(format, v)))
    }

    /// Reads one time cell (trimmed), or says why it cannot be read, naming row and column.
    pub(super) fn read(
        &mut self,
        text: &str,
        row: u64,
        column: &str,
        report: &mut LoadReport,
    ) -> Result<TimeValue, CsvError> {
        let (value, format) = self.parse(text, row, report).map_err(|problem| {
            let column = column.to_owned();
            let value = excerpt(text);
            match problem {
                Problem::Blank => CsvError::BlankTime { row, column },
                Problem::NoOffset => CsvError::TimeWithoutOffset { row, column, value },
                Problem::Unreadable => CsvError::BadTime { row, column, value },
                Problem::NoMatch => CsvError::TimeNotInPattern {
                    row,
                    column,
                    value,
                    pattern: self.pattern.as_ref().map_or(String::new(), |p| p.0.clone()),
                },
                Problem::Skipped(zone) => CsvError::LocalTimeSkipped {
                    row,
                    column,
                    value,
                    zone,
                },
                Problem::TooLarge => CsvError::TimeNumberTooLarge { row, column, value },
            }
        })?;
        match self.kind {
            None => {
                self.kind = Some((format, row));
                Ok(value)
            }
            Some((expected, _)) if expected == format => Ok(value),
            Some((expected, first_row)) => Err(CsvError::MixedTimeFormats {
                row,
                column: column.to_owned(),
                value: excerpt(text),
                first_row,
                expected,
                found: format,
            }),
        }
    }

    fn parse(
        &mut self,
        text: &str,
        row: u64,
        report: &mut LoadReport,
    ) -> Result<(TimeValue, TimeFormat), Problem> {
        if text.is_empty() {
            return Err(Problem::Blank);
        }
        if self.pattern.is_some() {
            return self.by_pattern(text, row, report);
        }
        if let Some(number) = finite_number(text, self.comma) {
            let number = number.map_err(|()| Problem::Unreadable)?;
            self.comma_read = number.comma;
            let v = number.value;
            let format = self.number_format(v)?;
            return Ok((TimeValue::Seconds(self.in_seconds(format, v)), format));
        }
        if let Ok(ts) = text.parse::<Timestamp>() {
            return Ok((TimeValue::Instant(ts), TimeFormat::Rfc3339));
        }
        if let Ok(dt) = text.parse::<DateTime>() {
            let ts = self.local(dt, row, report)?;
            return Ok((TimeValue::Instant(ts), TimeFormat::Local));
        }
        Err(Problem::Unreadable)
    }

    /// A time read with the given pattern: an instant if the pattern has an offset or the epoch
    /// (`%z`, `%s`), otherwise a local time.
    fn by_pattern(
        &mut self,
        text: &str,
        row: u64,
        report: &mut LoadReport,
    ) -> Result<(TimeValue, TimeFormat), Problem> {
        let pattern = self.pattern.as_ref().map_or("", |p| p.as_str());
        let tm = strtime::parse(pattern, text).map_err(|_| Problem::NoMatch)?;
        let ts = match (tm.timestamp(), tm.offset()) {
            (Some(ts), _) => ts,
            (None, Some(offset)) => tm
                .to_datetime()
                .and_then(|dt| offset.to_timestamp(dt))
                .map_err(|_| Problem::NoMatch)?,
            (None, None) => {
                let dt = tm.to_datetime().map_err(|_| Problem::NoMatch)?;
                self.local(dt, row, report)?
            }
        };
        Ok((TimeValue::Instant(ts), TimeFormat::Pattern))
    }

    /// The instant of a local time in the given zone. A time the zone skips (clocks going
    /// forward) is an error. A time the zone repeats (clocks going back) is its first occurrence,
    /// unless the previous local time in the file was the second occurrence, or lies about one
    /// repeat after the first occurrence (between half and one and a half times its length: the
    /// times went back with the clocks); then it is the second.
    fn local(
        &mut self,
        dt: DateTime,
        row: u64,
        report: &mut LoadReport,
    ) -> Result<Timestamp, Problem> {
        let zone = self.zone.as_ref().ok_or(Problem::NoOffset)?;
        let (at, second) = match zone.to_ambiguous_timestamp(dt).offset() {
            AmbiguousOffset::Unambiguous { offset } => (
                offset.to_timestamp(dt).map_err(|_| Problem::Unreadable)?,
                false,
            ),
            AmbiguousOffset::Gap { .. } => {
                return Err(Problem::Skipped(zone_name(zone).to_owned()));
            }
            AmbiguousOffset::Fold { before, after } => {
                let first = before.to_timestamp(dt).map_err(|_| Problem::Unreadable)?;
                let later = after.to_timestamp(dt).map_err(|_| Problem::Unreadable)?;
                let repeat = later.as_nanosecond() - first.as_nanosecond();
                let second = self.last_local.is_some_and(|last| {
                    let back = last.at.as_nanosecond() - first.as_nanosecond();
                    last.second || (2 * back >= repeat && 2 * back <= 3 * repeat)
                });
                report.time.repeated_local_times.add(row);
                if second {
                    report.time.second_occurrences.add(row);
                }
                (if second { later } else { first }, second)
            }
        };
        self.last_local = Some(LastLocal { at, second });
        Ok(at)
    }

    /// Which unit a number is in: the one given, or else by its size.
    fn number_format(&self, v: f64) -> Result<TimeFormat, Problem> {
        Ok(match self.unit {
            Some(TimeUnit::Seconds) => TimeFormat::Seconds,
            Some(TimeUnit::Milliseconds) => TimeFormat::Milliseconds,
            None if v.abs() >= MILLISECONDS_UNTIL => return Err(Problem::TooLarge),
            None if v.abs() >= MILLISECONDS_FROM => TimeFormat::Milliseconds,
            None => TimeFormat::Seconds,
        })
    }

    fn in_seconds(&self, format: TimeFormat, v: f64) -> f64 {
        if format == TimeFormat::Milliseconds {
            v / crate::units::MS_PER_S
        } else {
            v
        }
    }
}

fn zone_name(zone: &TimeZone) -> &str {
    zone.iana_name().unwrap_or("the time zone given")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::csvload::test_support::*;
    use crate::csvload::*;

    #[test]
    fn rfc3339_times_become_seconds_since_the_earliest_and_keep_the_origin() {
        let text = "time,sp,pv,op\n\
                    2024-05-01T08:00:10Z,1,2,3\n\
                    2024-05-01 10:00:20+02:00,1,2,3\n\
                    2024-05-01T08:00:00.5z,1,2,3\n\
                    2024-05-01T09:00:30+0100,1,2,3\n";
        let l = load_ok(text);
        assert_eq!(l.series.time_s(), &[0.0, 9.5, 19.5, 29.5]);
        let origin: jiff::Timestamp = "2024-05-01T08:00:00.5Z".parse().unwrap();
        assert_eq!(l.report.time_origin, Some(origin));
        assert_eq!(l.report.out_of_order.rows, 1);
        let json = serde_json::to_value(&l.report).unwrap();
        assert_eq!(json["time_origin"], "2024-05-01T08:00:00.5Z");
        assert!(has_note(&l.report, "2024-05-01T08:00:00.5Z"));
    }

    #[test]
    fn a_timestamp_without_offset_is_an_error_naming_row_and_column() {
        let err = load("time,sp,pv,op\n2024-05-01 08:00:00,1,2,3\n").unwrap_err();
        match &err {
            CsvError::TimeWithoutOffset { row, column, .. } => {
                assert_eq!((*row, column.as_str()), (2, "time"));
            }
            other => panic!("unexpected error: {other}"),
        }
        assert!(err.to_string().contains("+02:00"));
    }

    #[test]
    fn a_time_in_the_other_format_is_an_error_naming_both_rows() {
        let err =
            load("time,sp,pv,op\n0,1,2,3\n1,1,2,3\n2024-05-01T08:00:00Z,1,2,3\n").unwrap_err();
        match err {
            CsvError::MixedTimeFormats {
                row,
                first_row,
                expected,
                found,
                ..
            } => {
                assert_eq!((row, first_row), (4, 2));
                assert_eq!(
                    (expected, found),
                    (TimeFormat::Seconds, TimeFormat::Rfc3339)
                );
            }
            other => panic!("unexpected error: {other}"),
        }
        let err = load("time,sp,pv,op\n2024-05-01T08:00:00Z,1,2,3\n5,1,2,3\n").unwrap_err();
        assert!(
            matches!(err, CsvError::MixedTimeFormats { row: 3, .. }),
            "{err}"
        );
    }

    #[test]
    fn an_unreadable_time_is_an_error_naming_row_and_column() {
        let mut opts = CsvOptions::default();
        opts.columns.time = "t".into();
        let text = "t,sp,pv,op\n0,1,2,3\nEnd of data,,,\n";
        match load_csv(text.as_bytes(), &opts).unwrap_err() {
            CsvError::BadTime { row, column, value } => {
                assert_eq!(
                    (row, column.as_str(), value.as_str()),
                    (3, "t", "End of data")
                );
            }
            other => panic!("unexpected error: {other}"),
        }
    }

    #[test]
    fn a_non_finite_time_is_an_error() {
        let err = load("time,sp,pv,op\n0,1,2,3\nNaN,1,2,3\n").unwrap_err();
        assert!(matches!(err, CsvError::BadTime { row: 3, .. }), "{err}");
        let err = load("time,sp,pv,op\ninf,1,2,3\n").unwrap_err();
        assert!(matches!(err, CsvError::BadTime { row: 2, .. }), "{err}");
    }

    #[test]
    fn a_blank_time_is_an_error_naming_row_and_column() {
        let err = load("time,sp,pv,op\n0,1,2,3\n  ,1,2,3\n").unwrap_err();
        match &err {
            CsvError::BlankTime { row, column } => assert_eq!((*row, column.as_str()), (3, "time")),
            other => panic!("unexpected error: {other}"),
        }
        assert!(err.to_string().contains("row 3"));
    }

    fn berlin() -> CsvOptions {
        CsvOptions {
            time_zone: Some(crate::units::time_zone("Europe/Berlin").unwrap()),
            ..CsvOptions::default()
        }
    }

    fn utc(text: &str) -> jiff::Timestamp {
        text.parse().unwrap()
    }

    #[test]
    fn without_a_zone_a_local_time_names_the_option_to_give() {
        let err = load("time,sp,pv,op\n2026-11-23 00:00:10,1,2,3\n").unwrap_err();
        assert!(err.to_string().contains("--time-zone"), "{err}");
    }

    #[test]
    fn local_times_are_read_in_the_zone_given() {
        let text = "time,sp,pv,op\n\
                    2026-11-23 00:00:10,1,2,3\n\
                    2026-11-23 00:00:20,1,2,3\n\
                    2026-11-23T00:00:30.5,1,2,3\n";
        let l = load_csv(text.as_bytes(), &berlin()).unwrap();
        // Berlin keeps UTC+01:00 in November (EU Directive 2000/84/EC: summer time ends on the
        // last Sunday of October).
        assert_eq!(l.report.time_origin, Some(utc("2026-11-22T23:00:10Z")));
        assert_eq!(l.series.time_s(), &[0.0, 10.0, 20.5]);
        assert_eq!(l.report.time.format, Some(TimeFormat::Local));
        assert_eq!(l.report.time.zone.as_deref(), Some("Europe/Berlin"));
        assert_note(&l.report, "local times in Europe/Berlin without an offset");
        assert_eq!(l.report.time.repeated_local_times.rows, 0);
    }

    /// The hour Berlin repeats on 2026-10-25: clocks go back from 03:00 CEST to 02:00 CET at
    /// 01:00 UTC (EU Directive 2000/84/EC: the last Sunday of October, and 2026-10-25 is one).
    #[test]
    fn a_repeated_hour_in_file_order_is_read_as_it_happened() {
        let text = "time,sp,pv,op\n\
                    2026-10-25 01:40:00,1,2,3\n\
                    2026-10-25 02:00:00,1,2,3\n\
                    2026-10-25 02:20:00,1,2,3\n\
                    2026-10-25 02:40:00,1,2,3\n\
                    2026-10-25 02:00:00,1,2,3\n\
                    2026-10-25 02:20:00,1,2,3\n\
                    2026-10-25 02:40:00,1,2,3\n\
                    2026-10-25 03:00:00,1,2,3\n";
        let l = load_csv(text.as_bytes(), &berlin()).unwrap();
        assert_eq!(l.report.time_origin, Some(utc("2026-10-24T23:40:00Z")));
        let every_20_min: Vec<f64> = (0..8).map(|i| f64::from(i) * 1200.0).collect();
        assert_eq!(l.series.time_s(), &every_20_min[..]);
        let time = &l.report.time;
        assert_eq!(
            (
                time.repeated_local_times.rows,
                time.repeated_local_times.first_row
            ),
            (6, Some(3))
        );
        assert_eq!(
            (
                time.second_occurrences.rows,
                time.second_occurrences.first_row
            ),
            (3, Some(6))
        );
        assert_eq!(l.report.out_of_order.rows, 0);
        assert_note(
            &l.report,
            "3 of them were read as the second occurrence (first at row 6)",
        );
    }

    #[test]
    fn a_repeated_hour_never_gone_back_is_the_first_occurrence_and_small_disorder_stays_in_it() {
        let text = "time,sp,pv,op\n\
                    2026-10-25 01:59:50,1,2,3\n\
                    2026-10-25 02:00:10,1,2,3\n\
                    2026-10-25 02:00:00,1,2,3\n\
                    2026-10-25 02:00:20,1,2,3\n";
        let l = load_csv(text.as_bytes(), &berlin()).unwrap();
        assert_eq!(l.series.time_s(), &[0.0, 10.0, 20.0, 30.0]);
        assert_eq!(l.report.time.second_occurrences.rows, 0);
        assert_eq!(l.report.out_of_order.rows, 1);
        assert!(has_note(&l.report, "all were read as the first occurrence"));
    }

    #[test]
    fn a_local_time_the_zone_skips_is_an_error_naming_row_zone_and_option() {
        // Berlin's clocks go from 02:00 to 03:00 on 2026-03-29 (the last Sunday of March).
        let text = "time,sp,pv,op\n2026-03-29 01:59:50,1,2,3\n2026-03-29 02:00:00,1,2,3\n";
        let err = load_csv(text.as_bytes(), &berlin()).unwrap_err();
        match &err {
            CsvError::LocalTimeSkipped { row, zone, .. } => {
                assert_eq!((*row, zone.as_str()), (3, "Europe/Berlin"));
            }
            other => panic!("unexpected error: {other}"),
        }
        let msg = err.to_string();
        assert!(
            msg.contains("--time-zone") && msg.contains("Etc/GMT-1"),
            "{msg}"
        );
    }

    #[test]
    fn with_a_zone_timestamps_with_offsets_keep_them_but_may_not_mix_with_local_times() {
        let text = "time,sp,pv,op\n2026-11-23T00:00:00Z,1,2,3\n2026-11-23 01:00:10,1,2,3\n";
        let err = load_csv(text.as_bytes(), &berlin()).unwrap_err();
        assert!(
            matches!(
                err,
                CsvError::MixedTimeFormats {
                    row: 3,
                    found: TimeFormat::Local,
                    ..
                }
            ),
            "{err}"
        );
    }

    fn with_pattern(pattern: &str) -> CsvOptions {
        CsvOptions {
            time_pattern: Some(TimePattern::new(pattern).unwrap()),
            ..berlin()
        }
    }

    #[test]
    fn day_first_dates_are_read_with_a_pattern() {
        for (pattern, text) in [
            (
                "%d.%m.%Y %H:%M:%S",
                "23.11.2026 00:00:10\n23.11.2026 00:00:20\n23.11.2026 00:00:30",
            ),
            (
                "%d/%m/%Y %H:%M:%S%.f",
                "23/11/2026 00:00:10\n23/11/2026 00:00:20.5\n23/11/2026 00:00:30",
            ),
        ] {
            let rows: Vec<String> = text.lines().map(|t| format!("{t};1;2;3")).collect();
            let file = format!("time;sp;pv;op\n{}\n", rows.join("\n"));
            let l = load_csv(file.as_bytes(), &with_pattern(pattern)).unwrap();
            assert_eq!(l.report.time_origin, Some(utc("2026-11-22T23:00:10Z")));
            assert_eq!(l.series.time_s()[2], 20.0, "{pattern}");
            assert_eq!(l.report.time.format, Some(TimeFormat::Pattern));
            assert_note(&l.report, &format!("pattern {pattern:?} as local times"));
        }
    }

    #[test]
    fn without_a_pattern_a_day_first_date_names_the_option_to_give() {
        let err = load("time,sp,pv,op\n23.11.2026 00:00:10,1,2,3\n").unwrap_err();
        assert!(matches!(err, CsvError::BadTime { row: 2, .. }), "{err}");
        assert!(err.to_string().contains("--time-format"), "{err}");
    }

    #[test]
    fn a_time_that_does_not_match_the_pattern_is_an_error_naming_row_column_and_option() {
        let text = "time,sp,pv,op\n23.11.2026 00:00:10,1,2,3\n2026-11-23 00:00:20,1,2,3\n";
        let err = load_csv(text.as_bytes(), &with_pattern("%d.%m.%Y %H:%M:%S")).unwrap_err();
        match &err {
            CsvError::TimeNotInPattern {
                row,
                column,
                pattern,
                ..
            } => assert_eq!(
                (*row, column.as_str(), pattern.as_str()),
                (3, "time", "%d.%m.%Y %H:%M:%S")
            ),
            other => panic!("unexpected error: {other}"),
        }
        assert!(err.to_string().contains("--time-format"), "{err}");
    }

    #[test]
    fn a_pattern_with_an_offset_needs_no_zone_and_one_without_needs_it() {
        let text = "time,sp,pv,op\n23.11.2026 00:00:10 +0100,1,2,3\n\
                    23.11.2026 00:00:20 +0100,1,2,3\n23.11.2026 00:00:30 +0100,1,2,3\n";
        let opts = CsvOptions {
            time_pattern: Some(TimePattern::new("%d.%m.%Y %H:%M:%S %z").unwrap()),
            ..CsvOptions::default()
        };
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        assert_eq!(l.report.time_origin, Some(utc("2026-11-22T23:00:10Z")));
        assert_eq!(l.report.time.zone, None);
        let opts = CsvOptions {
            time_pattern: Some(TimePattern::new("%d.%m.%Y %H:%M:%S").unwrap()),
            ..CsvOptions::default()
        };
        let text = "time,sp,pv,op\n23.11.2026 00:00:10,1,2,3\n";
        let err = load_csv(text.as_bytes(), &opts).unwrap_err();
        assert!(
            matches!(err, CsvError::TimeWithoutOffset { row: 2, .. }),
            "{err}"
        );
    }

    #[test]
    fn numbers_of_1e11_or_more_are_epoch_milliseconds_and_said_so() {
        // A day of 10 s samples written in epoch milliseconds.
        let text = "time,sp,pv,op\n1795392000000,1,2,3\n1795392010000,1,2,3\n\
                    1795392020000,1,2,3\n1795392030123,1,2,3\n";
        let l = load_ok(text);
        assert_eq!(
            l.series.time_s(),
            &[
                1_795_392_000.0,
                1_795_392_010.0,
                1_795_392_020.0,
                1_795_392_030.123
            ]
        );
        assert_eq!(l.report.time.format, Some(TimeFormat::Milliseconds));
        assert!(l.report.time.milliseconds_detected);
        assert_eq!(l.report.sample_interval_s.unwrap().median, 10.0);
        assert_note(&l.report, "after the year 5138");
        // The arithmetic of the rule, checked by jiff's calendar: 1e11 ms is 1973-03-03, 1e11 s
        // (and so 1e14 ms) is in the year 5138.
        let from = jiff::Timestamp::from_millisecond(MILLISECONDS_FROM as i64).unwrap();
        assert_eq!(from, utc("1973-03-03T09:46:40Z"));
        let year = |ts: jiff::Timestamp| ts.to_zoned(jiff::tz::TimeZone::UTC).year();
        let as_seconds = jiff::Timestamp::from_second(MILLISECONDS_FROM as i64).unwrap();
        assert_eq!(year(as_seconds), 5138);
        let until = jiff::Timestamp::from_millisecond(MILLISECONDS_UNTIL as i64).unwrap();
        assert_eq!(year(until), 5138);
    }

    #[test]
    fn a_given_unit_reads_every_number_in_it() {
        let mut opts = CsvOptions {
            time_unit: Some(TimeUnit::Milliseconds),
            ..CsvOptions::default()
        };
        let text = "time,sp,pv,op\n0,1,2,3\n10000,1,2,3\n20000,1,2,3\n";
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        assert_eq!(l.series.time_s(), &[0.0, 10.0, 20.0]);
        assert!(!l.report.time.milliseconds_detected);
        assert!(has_note(&l.report, "given in milliseconds"));
        opts.time_unit = Some(TimeUnit::Seconds);
        let text = "time,sp,pv,op\n1795392010000,1,2,3\n1795392020000,1,2,3\n1e15,1,2,3\n";
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        assert_eq!(l.series.time_s()[0], 1_795_392_010_000.0);
        assert_no_note(&l.report, "milliseconds");
    }

    #[test]
    fn relative_milliseconds_read_as_seconds_get_a_hint() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n10000,1,2,3\n20000,1,2,3\n");
        assert_eq!(l.series.time_s(), &[0.0, 10000.0, 20000.0]);
        assert_note(&l.report, "give --time-unit ms");
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n3600,1,2,3\n7200,1,2,3\n");
        assert_no_note(&l.report, "--time-unit");
    }

    #[test]
    fn an_unclear_or_impossible_time_unit_is_an_error_naming_the_option() {
        let err = load("time,sp,pv,op\n1795392010000,1,2,3\n5000,1,2,3\n").unwrap_err();
        match &err {
            CsvError::MixedTimeFormats {
                row,
                first_row,
                expected,
                found,
                ..
            } => assert_eq!(
                (*row, *first_row, *expected, *found),
                (3, 2, TimeFormat::Milliseconds, TimeFormat::Seconds)
            ),
            other => panic!("unexpected error: {other}"),
        }
        assert!(err.to_string().contains("--time-unit"), "{err}");
        let err = load("time,sp,pv,op\n0,1,2,3\n1795392010000,1,2,3\n").unwrap_err();
        assert!(
            matches!(err, CsvError::MixedTimeFormats { row: 3, .. }),
            "{err}"
        );
        // Epoch microseconds of 2026.
        let err = load("time,sp,pv,op\n1795392010000000,1,2,3\n").unwrap_err();
        assert!(
            matches!(err, CsvError::TimeNumberTooLarge { row: 2, .. }),
            "{err}"
        );
        assert!(err.to_string().contains("--time-unit"), "{err}");
    }

    mod properties {
        use super::*;
        use proptest::prelude::*;

        proptest! {
            /// Local times written as a clock in Berlin shows them, in the order they happened,
            /// across either daylight-saving change of 2026, load as the instants they were:
            /// jiff's own UTC-to-local conversion writes the file, the loader reads it back.
            /// The file starts before the change (one starting inside the repeated hour's second
            /// occurrence has nothing to tell it by).
            #[test]
            fn local_times_in_file_order_load_as_the_instants_they_were(
                autumn in any::<bool>(),
                start_min in 1i64..120,
                step_s in 1i64..1700,
                n in 3usize..60,
            ) {
                let change = if autumn { "2026-10-25T01:00:00Z" } else { "2026-03-29T01:00:00Z" };
                let zone = crate::units::time_zone("Europe/Berlin").unwrap();
                let first = utc(change) - jiff::SignedDuration::from_mins(start_min);
                let mut text = String::from("time,sp,pv,op\n");
                let mut expected = Vec::new();
                for i in 0..n as i64 {
                    let at = first + jiff::SignedDuration::from_secs(i * step_s);
                    let local = at.to_zoned(zone.clone()).datetime();
                    text.push_str(&format!("{local},1,2,3\n"));
                    expected.push((i * step_s) as f64);
                }
                let l = load_csv(text.as_bytes(), &berlin()).unwrap();
                prop_assert_eq!(l.series.time_s(), &expected[..]);
                prop_assert_eq!(l.report.time_origin, Some(first));
                prop_assert_eq!(l.report.out_of_order.rows, 0);
            }
        }
    }
}
