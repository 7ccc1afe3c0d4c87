//! Why a load stopped ([`CsvError`]).

use std::io;

use thiserror::Error;

use super::report::{LoadReport, TimeFormat};
use super::text::plural;
use crate::analysis::SeriesError;

/// Why a file could not be loaded. Rows are line numbers in the file (the header is normally
/// row 1); columns are named as in the header.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum CsvError {
    #[error("could not read the file at row {row}: {source}")]
    Io {
        row: u64,
        #[source]
        source: io::Error,
    },
    #[error("the file is empty: it needs a header row naming the columns, such as time,sp,pv,op")]
    Empty,
    #[error("row {row} could not be split into cells: {message}")]
    Malformed { row: u64, message: String },
    #[error(
        "row {row}, column {column:?}: the text is not valid UTF-8; save the export with UTF-8 \
         encoding (often offered as \"CSV UTF-8\")"
    )]
    InvalidUtf8 { row: u64, column: String },
    #[error(
        "the header on row {row} has no column named {wanted:?} for the {role}; its columns are: \
         {}{}",
        quoted_list(.found),
        utf8_hint(.header_not_utf8)
    )]
    MissingColumn {
        row: u64,
        role: &'static str,
        wanted: String,
        /// The header's names, trimmed (invalid UTF-8 shown as U+FFFD).
        found: Vec<String>,
        header_not_utf8: bool,
    },
    #[error(
        "the header on row {row} names {} columns {wanted:?} (columns {}), so the {role} is \
         ambiguous; rename all but one",
        .positions.len(),
        number_list(.positions)
    )]
    AmbiguousColumn {
        row: u64,
        role: &'static str,
        wanted: String,
        /// 1-based positions of the matching columns.
        positions: Vec<usize>,
    },
    #[error("row {row}, column {column:?}: the time is blank; every row needs a time")]
    BlankTime { row: u64, column: String },
    #[error(
        "row {row}, column {column:?}: {value:?} is neither a finite number of seconds nor an \
         RFC 3339 timestamp such as 2024-05-01T08:00:00Z; for times written another way, such \
         as 23.11.2026 08:00:00, give the pattern with --time-format \"%d.%m.%Y %H:%M:%S\""
    )]
    BadTime {
        row: u64,
        column: String,
        value: String,
    },
    #[error(
        "row {row}, column {column:?}: {value:?} has no UTC offset, so the instant it names is \
         unknown; give the zone the times are in with --time-zone (such as --time-zone \
         Europe/Berlin), or add Z (for UTC) or an offset such as +02:00"
    )]
    TimeWithoutOffset {
        row: u64,
        column: String,
        value: String,
    },
    #[error(
        "row {row}, column {column:?}: {value:?} does not match the time pattern {pattern:?} \
         given with --time-format"
    )]
    TimeNotInPattern {
        row: u64,
        column: String,
        value: String,
        pattern: String,
    },
    #[error(
        "row {row}, column {column:?}: {value:?} does not exist in {zone}: the clocks skipped \
         that hour when daylight saving time began, so the times are not local times of that \
         zone; if the export keeps standard time all year, give a fixed-offset zone with \
         --time-zone (Etc/GMT-1 is UTC+01:00 all year)"
    )]
    LocalTimeSkipped {
        row: u64,
        column: String,
        value: String,
        zone: String,
    },
    #[error(
        "row {row}, column {column:?}: {value} is too large to be seconds or milliseconds since \
         1970 (1e14 or more would be after the year 5138 either way); convert microseconds or \
         nanoseconds to seconds, or give --time-unit s or --time-unit ms to read it anyway"
    )]
    TimeNumberTooLarge {
        row: u64,
        column: String,
        value: String,
    },
    #[error(
        "row {row}, column {column:?}: {value:?} is {found}, but the first time (row {first_row}) \
         is {expected}; {}",
        mixed_advice(*.expected, *.found)
    )]
    MixedTimeFormats {
        row: u64,
        column: String,
        value: String,
        first_row: u64,
        expected: TimeFormat,
        found: TimeFormat,
    },
    #[error(
        "rows {first} and {second} have timestamps too close together to tell apart in seconds \
         over a file this long; remove one of them"
    )]
    TimesTooClose { first: u64, second: u64 },
    #[error(
        "only {} out of {} (at least {needed} are needed){}",
        plural(*.usable, "usable row"),
        plural(.report.data_rows, "data row"),
        reasons(.report)
    )]
    TooFewRows {
        usable: usize,
        needed: usize,
        /// The full account of what happened to the other rows.
        report: Box<LoadReport>,
    },
    /// Should not happen: the loader establishes the series' invariants itself.
    #[error("the loaded columns were refused: {0}")]
    Series(#[from] SeriesError),
}

/// What to do about a file with times in two formats. Numbers in two units can only come from
/// the size rule, which a unit given settles.
fn mixed_advice(expected: TimeFormat, found: TimeFormat) -> &'static str {
    if expected.is_number() && found.is_number() {
        "numbers from 1e11 on can only be epoch milliseconds and smaller ones are taken as \
         seconds, so the unit is unclear: give --time-unit s or --time-unit ms"
    } else {
        "one file must use one time format"
    }
}

fn quoted_list(names: &[String]) -> String {
    let quoted: Vec<String> = names.iter().map(|n| format!("{n:?}")).collect();
    quoted.join(", ")
}

fn number_list(numbers: &[usize]) -> String {
    let s: Vec<String> = numbers.iter().map(usize::to_string).collect();
    s.join(", ")
}

fn utf8_hint(not_utf8: &bool) -> &'static str {
    if *not_utf8 {
        " (the header is not valid UTF-8; save the export with UTF-8 encoding)"
    } else {
        ""
    }
}

fn reasons(report: &LoadReport) -> String {
    let notes = report.notes();
    if notes.is_empty() {
        String::new()
    } else {
        format!(": {}", notes.join("; "))
    }
}

#[cfg(test)]
mod tests {
    use crate::csvload::test_support::*;

    #[test]
    fn long_cells_are_shortened_when_quoted_back() {
        let long = "x".repeat(500);
        let err = load(&format!("time,sp,pv,op\n{long},1,2,3\n")).unwrap_err();
        let msg = err.to_string();
        assert!(msg.len() < 300, "{msg}");
        assert!(msg.contains('…'));
    }
}
