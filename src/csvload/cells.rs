//! Reading one cell: the cells of a record whichever way it was split, plain decimals read
//! without the general parse, times (seconds or RFC 3339), values and the mode.

use std::cmp::Ordering;

use super::decimal::plain_decimal;
use super::error::{CsvError, TimeFormat};
use super::records::PlainCell;
use super::report::MAX_MANUAL_TEXTS;
use super::text::{EXCERPT_CHARS, excerpt};
use crate::analysis::AutoValues;

/// The cells of one record, whichever way the file was split.
pub(super) trait Cells {
    fn cell_count(&self) -> usize;
    fn cell_at(&self, i: usize) -> Option<&[u8]>;
    fn cells(&self) -> impl Iterator<Item = &[u8]>;

    /// The value of cell `i` if it is a plain decimal; see [`plain_decimal`].
    fn plain_number_at(&self, i: usize) -> Option<f64> {
        self.cell_at(i).and_then(plain_decimal)
    }
}

impl Cells for csv::ByteRecord {
    fn cell_count(&self) -> usize {
        self.len()
    }

    fn cell_at(&self, i: usize) -> Option<&[u8]> {
        self.get(i)
    }

    fn cells(&self) -> impl Iterator<Item = &[u8]> {
        self.iter()
    }
}

impl Cells for [PlainCell<'_>] {
    fn cell_count(&self) -> usize {
        self.len()
    }

    fn cell_at(&self, i: usize) -> Option<&[u8]> {
        self.get(i).map(|c| c.text)
    }

    fn cells(&self) -> impl Iterator<Item = &[u8]> {
        self.iter().map(|c| c.text)
    }

    fn plain_number_at(&self, i: usize) -> Option<f64> {
        self.get(i).and_then(|c| c.number)
    }
}

/// Blank as [`Layout::cell`](super::header::Layout::cell) would read it: nothing but whitespace.
pub(super) fn is_blank(cell: &[u8]) -> bool {
    // A visible ASCII character is neither whitespace nor part of a multi-byte character, so
    // the usual first byte of a number settles it without decoding the cell.
    if cell.first().is_some_and(u8::is_ascii_graphic) {
        return false;
    }
    std::str::from_utf8(cell).is_ok_and(|s| s.trim().is_empty())
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum TimeValue {
    Seconds(f64),
    Instant(jiff::Timestamp),
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

pub(super) fn seconds_since(origin: jiff::Timestamp, ts: jiff::Timestamp) -> f64 {
    let ns = ts.as_nanosecond() - origin.as_nanosecond();
    // Split so whole seconds and the fraction are each converted exactly where possible.
    (ns / 1_000_000_000) as f64 + (ns % 1_000_000_000) as f64 / 1e9
}

/// A finite number, with -0 made +0 so that equal times compare equal when sorted.
fn finite_number(text: &str) -> Option<Result<f64, ()>> {
    if let Some(v) = plain_decimal(text.as_bytes()) {
        return Some(Ok(v));
    }
    let v = text.parse::<f64>().ok()?;
    Some(if v.is_finite() {
        Ok(if v == 0.0 { 0.0 } else { v })
    } else {
        Err(())
    })
}

/// Reads one time cell, fixing the file's time format at the first one.
pub(super) fn read_time(
    text: &str,
    kind: &mut Option<(TimeFormat, u64)>,
    row: u64,
    column: &str,
) -> Result<TimeValue, CsvError> {
    let (value, format) = match parse_time(text) {
        Ok(parsed) => parsed,
        Err(problem) => {
            let column = column.to_owned();
            let value = excerpt(text);
            return Err(match problem {
                TimeProblem::Blank => CsvError::BlankTime { row, column },
                TimeProblem::NoOffset => CsvError::TimeWithoutOffset { row, column, value },
                TimeProblem::Unreadable => CsvError::BadTime { row, column, value },
            });
        }
    };
    match *kind {
        None => {
            *kind = Some((format, row));
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

enum TimeProblem {
    Blank,
    NoOffset,
    Unreadable,
}

fn parse_time(text: &str) -> Result<(TimeValue, TimeFormat), TimeProblem> {
    if text.is_empty() {
        return Err(TimeProblem::Blank);
    }
    if let Some(number) = finite_number(text) {
        return match number {
            Ok(v) => Ok((TimeValue::Seconds(v), TimeFormat::Seconds)),
            Err(()) => Err(TimeProblem::Unreadable),
        };
    }
    if let Ok(ts) = text.parse::<jiff::Timestamp>() {
        return Ok((TimeValue::Instant(ts), TimeFormat::Rfc3339));
    }
    if text.parse::<jiff::civil::DateTime>().is_ok() {
        return Err(TimeProblem::NoOffset);
    }
    Err(TimeProblem::Unreadable)
}

pub(super) enum ValueProblem {
    Blank,
    NotANumber,
    NotFinite,
}

pub(super) fn read_value(text: &str) -> Result<f64, ValueProblem> {
    if text.is_empty() {
        return Err(ValueProblem::Blank);
    }
    match finite_number(text) {
        Some(Ok(v)) => Ok(v),
        Some(Err(())) => Err(ValueProblem::NotFinite),
        None => Err(ValueProblem::NotANumber),
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum ModeCell {
    Auto,
    /// Index into the distinct texts read as manual; `None` once there are too many to list.
    Manual(Option<usize>),
}

pub(super) fn read_mode(
    text: &str,
    auto_values: &AutoValues,
    manual_texts: &mut Vec<String>,
) -> ModeCell {
    if auto_values.is_auto_text(text) {
        return ModeCell::Auto;
    }
    // Texts up to EXCERPT_CHARS bytes are their own excerpt, so only longer ones are shortened.
    let found = if text.len() <= EXCERPT_CHARS {
        manual_texts.iter().position(|t| t == text)
    } else {
        let key = excerpt(text);
        manual_texts.iter().position(|t| *t == key)
    };
    let index = match found {
        Some(i) => Some(i),
        None if manual_texts.len() < MAX_MANUAL_TEXTS => {
            manual_texts.push(excerpt(text));
            Some(manual_texts.len() - 1)
        }
        None => None,
    };
    ModeCell::Manual(index)
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

    #[test]
    fn unusable_values_drop_the_row_counted_per_column_and_reason() {
        let text = "time,sp,pv,op\n\
                    0, 1 ,2,3\n\
                    1,1,,3\n\
                    2,1,Bad Input,3\n\
                    3,1,2,#N/A\n\
                    4,NaN,2,3\n\
                    5,1,2,-inf\n\
                    6,1,  ,3\n\
                    7,1,2,3\n\
                    8,1,2.5e0,3\n";
        let l = load_ok(text);
        let d = &l.report.dropped;
        assert_eq!(d.total, 6);
        assert_eq!((d.pv.blank.rows, d.pv.blank.first_row), (2, Some(3)));
        assert_eq!(d.pv.not_a_number.rows, 1);
        assert_eq!(d.pv.not_a_number.example.as_deref(), Some("Bad Input"));
        assert_eq!(d.op.not_a_number.first_row, Some(5));
        assert_eq!(d.sp.not_finite.first_row, Some(6));
        assert_eq!(d.op.not_finite.example.as_deref(), Some("-inf"));
        assert_eq!(l.series.time_s(), &[0.0, 7.0, 8.0]);
        assert_eq!(l.series.sp(), &[1.0, 1.0, 1.0]);
        assert_eq!(l.series.pv(), &[2.0, 2.0, 2.5]);
        let notes = l.report.notes();
        assert!(
            notes.contains(&"dropped 2 rows where pv is blank (first at row 3)".to_owned()),
            "{notes:?}"
        );
        assert!(has_note(
            &l.report,
            "where pv is not a number, such as \"Bad Input\" (first at row 4)"
        ));
        assert!(has_note(&l.report, "where sp is not finite"));
        assert!(!has_note(&l.report, "in all"));
    }

    #[test]
    fn the_mode_column_reads_auto_values_ignoring_case_and_nonzero_numbers_as_automatic() {
        let text = "time,sp,pv,op,mode\n\
                    0,1,2,3,AUTO\n1,1,2,3, Cas \n2,1,2,3,MAN\n3,1,2,3,0\n\
                    4,1,2,3,2\n5,1,2,3,true\n6,1,2,3,Bad Input\n7,1,2,3,MAN\n8,1,2,3,-1\n";
        let l = load_csv(text.as_bytes(), &with_mode("Mode")).unwrap();
        let auto: Vec<bool> = (0..l.series.len()).map(|i| l.series.is_auto(i)).collect();
        assert_eq!(
            auto,
            [true, true, false, false, true, true, false, false, true]
        );
        let mode = l.report.mode.as_ref().unwrap();
        assert_eq!((mode.auto_rows, mode.manual_rows), (5, 4));
        assert_eq!(mode.read_as_manual.get("MAN"), Some(&2));
        assert_eq!(mode.read_as_manual.get("0"), Some(&1));
        assert_eq!(mode.read_as_manual.get("Bad Input"), Some(&1));
        assert!(has_note(&l.report, "\"MAN\" ×2"), "{:?}", l.report.notes());
    }

    #[test]
    fn custom_auto_values_replace_the_defaults() {
        let mut opts = with_mode("mode");
        opts.auto_values = AutoValues::new(&["Automatic"]);
        let text = "time,sp,pv,op,mode\n0,1,2,3,automatic\n1,1,2,3,auto\n2,1,2,3,5\n";
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        assert_eq!(
            (
                l.series.is_auto(0),
                l.series.is_auto(1),
                l.series.is_auto(2)
            ),
            (true, false, true)
        );
    }

    #[test]
    fn a_list_with_numbers_makes_only_those_numbers_automatic() {
        // A controller enumeration: 0 manual, 1 auto, 2 cascade, 3 tracking.
        let mut opts = with_mode("mode");
        opts.auto_values = AutoValues::new(&["1", "2"]);
        let text = "time,sp,pv,op,mode\n0,1,2,3,0\n1,1,2,3,1\n2,1,2,3,2\n3,1,2,3,3\n\
                    4,1,2,3, 2.0 \n5,1,2,3,AUTO\n";
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        let auto: Vec<bool> = (0..l.series.len()).map(|i| l.series.is_auto(i)).collect();
        assert_eq!(auto, [false, true, true, false, true, false]);
        let mode = l.report.mode.unwrap();
        assert_eq!((mode.auto_rows, mode.manual_rows), (3, 3));
        assert_eq!(mode.read_as_manual.get("3"), Some(&1));
    }

    #[test]
    fn a_blank_mode_drops_the_row_rather_than_carrying_the_last_mode_forward() {
        let text = "time,sp,pv,op,mode\n0,1,2,3,auto\n1,1,2,3,\n2,1,2,3,man\n3,1,2,3,auto\n";
        let l = load_csv(text.as_bytes(), &with_mode("mode")).unwrap();
        assert_eq!(l.report.dropped.mode_blank.rows, 1);
        assert_eq!(l.report.dropped.mode_blank.first_row, Some(3));
        assert_eq!(l.series.time_s(), &[0.0, 2.0, 3.0]);
        assert!(has_note(&l.report, "rather than guess the mode"));
    }

    #[test]
    fn invalid_utf8_in_a_used_cell_is_an_error_naming_row_and_column() {
        let bytes = b"time,sp,pv,op\n0,1,2,3\n1,1,\xFF\xFE,3\n";
        let err = load_csv(&bytes[..], &CsvOptions::default()).unwrap_err();
        match &err {
            CsvError::InvalidUtf8 { row, column } => assert_eq!((*row, column.as_str()), (3, "pv")),
            other => panic!("unexpected error: {other}"),
        }
        assert!(err.to_string().contains("UTF-8"));
    }

    #[test]
    fn invalid_utf8_in_an_unused_column_is_ignored() {
        let bytes = b"time,sp,pv,op,Temp \xB0C\n0,1,2,3,\xB0\n1,1,2,3,x\n2,1,2,3,y\n";
        let l = load_csv(&bytes[..], &CsvOptions::default()).unwrap();
        assert_eq!(l.series.len(), 3);
    }
}
