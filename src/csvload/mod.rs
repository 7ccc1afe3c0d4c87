//! Loading one loop's CSV export into a validated [`Series`].
//!
//! Historian and spreadsheet exports are messy, and the analysis is only as honest as its input,
//! so this module follows one rule: every oddity in the file either gets a handling that is
//! counted in the [`LoadReport`] (and described by [`LoadReport::notes`]), or stops the load with
//! a [`CsvError`] that names the row and column. It never guesses silently and never panics, on
//! any input bytes.
//!
//! "Row" always means the line number in the file, with line 1 being the first line (normally
//! the header), so a plant engineer can find the place in a text editor or spreadsheet.
//!
//! The policy, in the order the loader applies it:
//!
//! - **Header.** A UTF-8 byte-order mark and blank lines before the header are skipped. Names are
//!   trimmed and matched case-insensitively. A wanted column that is missing, or named twice, is
//!   an error. The delimiter is a comma, unless the header line has no comma but does have
//!   semicolons or tabs (the more frequent of the two wins).
//! - **Decimal commas.** In a file whose delimiter is not a comma (or with
//!   [`CsvOptions::decimal_comma`]), a number written `-?digits,digits` (`12,5`) is read with the
//!   comma as its decimal mark, exactly as `12.5` would be, and the rows with one are counted.
//!   Such a cell could mean nothing else there: without this it would not be a number at all.
//!   Digit grouping (`1.234,5`) is not read; such a cell is not a number.
//! - **Shape of a row.** A row whose cells are all blank, or that repeats the header, is skipped.
//!   A short row has its missing cells read as blank. A row with extra cells beyond the header is
//!   kept if the extras are blank (trailing delimiters) and dropped otherwise, since its values
//!   may have shifted.
//! - **Time.** One file uses one time format, and the first row decides which:
//!   - a number of seconds, on any origin, kept as it is; or of milliseconds, turned into
//!     seconds on the same origin, when [`CsvOptions::time_unit`] says so, or without a unit
//!     given when the number is 1e11 or more: as seconds since 1970 that would be after the year
//!     5138, as milliseconds it is 1973 or later. From 1e14 on (after 5138 as milliseconds too:
//!     microseconds or nanoseconds, most likely) a number is an error without a unit given, and
//!     so is a file whose numbers fall on both sides of 1e11 (the unit is unclear);
//!   - an RFC 3339 timestamp (with `Z` or a numeric offset; a space may stand for the `T`);
//!   - a date and time without an offset (`2026-11-23 00:00:10`), read as a local time in
//!     [`CsvOptions::time_zone`]; without a zone it is an error. A local time the zone skips
//!     (clocks going forward) is an error, since such a time cannot come from a clock in that
//!     zone. A local time the zone has twice (clocks going back) is its first occurrence, unless
//!     the local time on the row before was read as the second occurrence or lies about an hour
//!     later than this first occurrence (from half to one and a half times the repeat: the times
//!     went back with the clocks); then it is the second. So a repeated hour written in the order
//!     it happened is read as it happened. Rows with such times, and those read as the second
//!     occurrence, are counted. With samples more than half an hour apart, or in a file that
//!     begins inside the second occurrence, there is nothing to tell the occurrences by: such
//!     times are read as the first occurrence (and may then count as duplicates);
//!   - with [`CsvOptions::time_pattern`], every time is read with that pattern instead (as an
//!     instant if it has an offset, otherwise as a local time as above).
//!
//!   A blank, unreadable or other-format time is an error: time is what every other value hangs
//!   on, so a row without one cannot be placed. Timestamps and local times become seconds since
//!   the earliest one, which is kept as [`LoadReport::time_origin`].
//! - **Values.** A blank, non-numeric (quality text such as `Bad Input`) or non-finite SP, PV or
//!   OP drops the row, counted per column and reason. Surrounding whitespace is fine.
//! - **Mode** (optional column). Blank drops the row, because carrying the last mode forward would
//!   be a guess. Whether a value means automatic is the product's one rule,
//!   [`AutoValues`] (the same as for a live mode signal); anything
//!   else means manual, and the report lists the texts it read as manual.
//! - **Order.** Rows are sorted stably by time, counting those that were out of order. Rows that
//!   repeat a time with identical values are removed; rows that repeat a time with different
//!   values lose to the last such row in the file. Both are counted.
//! - **Sampling.** Irregular intervals are allowed; the report gives their minimum, median and
//!   maximum.
//! - Fewer than [`MIN_ROWS`] usable rows is an error that carries the full report.

mod cells;
mod decimal;
mod error;
mod header;
mod pattern;
mod records;
mod report;
mod rows;
mod text;
mod times;

use std::io::Read;

use crate::analysis::{AutoValues, Series};

pub use error::CsvError;
pub use pattern::{BadTimePattern, TimePattern};
pub use report::{
    CellDrops, ColumnNames, DroppedRows, IntervalStats, LoadReport, ModeSummary, Tally, TimeColumn,
    TimeFormat,
};
pub use times::{MILLISECONDS_FROM, MILLISECONDS_UNTIL, TimeUnit};

use records::{
    LineCounter, PlainCell, PlainRecords, Text, UTF8_BOM, detect_delimiter, first_line,
    next_record, rows_hint,
};
use rows::{Loader, Start};
/// The fewest usable rows a load may produce: with fewer there is no response to analyse.
pub const MIN_ROWS: usize = 3;

/// Header names of the columns to read. Matching ignores case and surrounding whitespace.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CsvColumns {
    pub time: String,
    pub sp: String,
    pub pv: String,
    pub op: String,
    /// The loop's mode (automatic/manual). Without it the loop counts as automatic throughout.
    pub mode: Option<String>,
}

impl Default for CsvColumns {
    fn default() -> Self {
        CsvColumns {
            time: "time".to_owned(),
            sp: "sp".to_owned(),
            pv: "pv".to_owned(),
            op: "op".to_owned(),
            mode: None,
        }
    }
}

/// What to read, how the time and numbers are written, and how to interpret the mode column.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CsvOptions {
    pub columns: CsvColumns,
    /// Which mode values mean automatic (or cascade).
    pub auto_values: AutoValues,
    /// The zone of times written without an offset; without it such a time is an error.
    pub time_zone: Option<jiff::tz::TimeZone>,
    /// How every time is written, when not in one of the forms read without it.
    pub time_pattern: Option<TimePattern>,
    /// The unit of numeric times; without it, see the module's rule.
    pub time_unit: Option<TimeUnit>,
    /// Read decimal commas in a comma-separated file too (where they can only be in quoted
    /// cells); in a file separated otherwise they are read anyway.
    pub decimal_comma: bool,
}

/// A successful load: the series for the analysis and the account of how it was obtained.
#[derive(Debug, Clone)]
pub struct Loaded {
    pub series: Series,
    pub report: LoadReport,
}

/// Reads a loop's CSV export and checks it into a [`Series`], following the module's policy.
///
/// The whole file is read into memory first (the series needs every row anyway).
pub fn load_csv<R: Read>(reader: R, opts: &CsvOptions) -> Result<Loaded, CsvError> {
    let text = Text::read(reader)?;
    let bytes = text.body();
    let delimiter = detect_delimiter(first_line(bytes));
    // Without a quote anywhere in the file, each non-empty line is one record and its cells are
    // the text between delimiters, exactly as the CSV reader would split it; splitting directly
    // is much faster. A quoted cell may hold delimiters or line breaks, so files with quotes go
    // through the CSV reader.
    if bytes.contains(&b'"') {
        load_quoted(bytes, text.bom_stripped, delimiter, opts)
    } else {
        load_plain(bytes, text.bom_stripped, delimiter, opts)
    }
}

/// Loads a file without quotes, splitting lines and cells directly.
pub(super) fn load_plain(
    bytes: &[u8],
    bom_stripped: bool,
    delimiter: u8,
    opts: &CsvOptions,
) -> Result<Loaded, CsvError> {
    // The CSV reader skips a byte-order mark at the very start of what it is given (which is
    // after the one `Text` strips, if the file has two), so this does too.
    let second_bom = bytes.starts_with(UTF8_BOM);
    let mut records = PlainRecords {
        bytes,
        pos: if second_bom { UTF8_BOM.len() } else { 0 },
        line: 1,
        delimiter,
    };
    let mut cells: Vec<PlainCell> = Vec::new();
    let Some(row) = records.next_into(&mut cells) else {
        return Err(CsvError::Empty);
    };
    // The CSV reader then places the header where the mark is, on row 1, even when blank lines
    // follow the mark; the header row is given the same way here so that both routes agree.
    let row = if second_bom { 1 } else { row };
    let start = Start {
        bom_stripped,
        delimiter,
        rows_hint: rows_hint(bytes),
    };
    let mut loader = Loader::new(&cells[..], row, start, opts)?;
    while let Some(row) = records.next_into(&mut cells) {
        loader.take(&cells[..], row)?;
    }
    loader.finish()
}

/// Loads a file with quotes through the CSV reader.
pub(super) fn load_quoted(
    bytes: &[u8],
    bom_stripped: bool,
    delimiter: u8,
    opts: &CsvOptions,
) -> Result<Loaded, CsvError> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .delimiter(delimiter)
        .from_reader(bytes);
    let mut lines = LineCounter {
        bytes,
        at: 0,
        breaks: 0,
    };
    let mut record = csv::ByteRecord::new();
    if !next_record(&mut rdr, &mut record, &mut lines)? {
        return Err(CsvError::Empty);
    }
    let start = Start {
        bom_stripped,
        delimiter,
        rows_hint: rows_hint(bytes),
    };
    let row = lines.row_of(&record);
    let mut loader = Loader::new(&record, row, start, opts)?;
    while next_record(&mut rdr, &mut record, &mut lines)? {
        let row = lines.row_of(&record);
        loader.take(&record, row)?;
    }
    loader.finish()
}

#[cfg(test)]
mod test_support {
    use super::*;
    use proptest::prelude::*;

    pub(super) fn load(text: &str) -> Result<Loaded, CsvError> {
        load_csv(text.as_bytes(), &CsvOptions::default())
    }

    pub(super) fn load_ok(text: &str) -> Loaded {
        match load(text) {
            Ok(loaded) => loaded,
            Err(e) => panic!("expected the file to load, got: {e}"),
        }
    }

    pub(super) fn with_mode(column: &str) -> CsvOptions {
        let mut opts = CsvOptions::default();
        opts.columns.mode = Some(column.to_owned());
        opts
    }

    /// Each of the options for how times and numbers are written, one at a time.
    pub(super) fn historian_options() -> Vec<CsvOptions> {
        let zone = crate::units::time_zone("Europe/Berlin").ok();
        let pattern = TimePattern::new("%d.%m.%Y %H:%M:%S").ok();
        vec![
            CsvOptions {
                time_zone: zone.clone(),
                ..CsvOptions::default()
            },
            CsvOptions {
                time_zone: zone,
                time_pattern: pattern.clone(),
                ..CsvOptions::default()
            },
            CsvOptions {
                time_pattern: pattern,
                ..CsvOptions::default()
            },
            CsvOptions {
                time_unit: Some(TimeUnit::Milliseconds),
                ..CsvOptions::default()
            },
            CsvOptions {
                time_unit: Some(TimeUnit::Seconds),
                decimal_comma: true,
                ..CsvOptions::default()
            },
        ]
    }

    pub(super) fn has_note(report: &LoadReport, needle: &str) -> bool {
        report.notes().iter().any(|n| n.contains(needle))
    }

    pub(super) fn assert_note(report: &LoadReport, needle: &str) {
        assert!(
            has_note(report, needle),
            "{needle:?} in {:?}",
            report.notes()
        );
    }

    pub(super) fn assert_no_note(report: &LoadReport, needle: &str) {
        assert!(
            !has_note(report, needle),
            "{needle:?} in {:?}",
            report.notes()
        );
    }

    /// Everything a load produced, to compare two loads of the same file.
    pub(super) fn outcome(result: Result<Loaded, CsvError>) -> String {
        match result {
            Ok(l) => format!("{:?}\n{:?}\n{:?}", l.series, l.report, l.report.notes()),
            Err(e) => format!("{e}\n{e:?}"),
        }
    }

    pub(super) fn cell() -> impl Strategy<Value = String> {
        prop_oneof![
            (-1e4f64..1e4).prop_map(|v| v.to_string()),
            (0u32..20).prop_map(|v| v.to_string()),
            prop::sample::select(vec![
                "",
                " ",
                "NaN",
                "inf",
                "-0",
                "Bad Input",
                "#N/A",
                "auto",
                "MAN",
                "time",
                "sp",
                "\"1,5\"",
                "\"",
                "\"a\"\"b\"",
                "2024-05-01T08:00:00Z",
                "2024-05-01 08:00:01+02:00",
                "2024-05-01 08:00:00",
                "1e308",
                "12,5",
                "-0,25",
                "1795392010000",
                "1e15",
                "23.11.2026 00:00:10",
                "23/11/2026 00:00:10",
                "2026-10-25 02:30:00",
                "2026-03-29 02:30:00",
                "\u{feff}",
                "é",
                "\r",
            ])
            .prop_map(str::to_owned),
        ]
    }

    pub(super) fn csvish() -> impl Strategy<Value = String> {
        let header = prop::sample::select(vec![
            "time,sp,pv,op",
            "time,sp,pv,op,mode",
            "\u{feff}Time;SP;PV;OP",
            "time\tsp\tpv\top",
            "time,sp,pv",
            "",
        ]);
        let rows = prop::collection::vec(prop::collection::vec(cell(), 0..7), 0..25);
        let delim = prop::sample::select(vec![",", ";", "\t"]);
        let eol = prop::sample::select(vec!["\n", "\r\n"]);
        (header, rows, delim, eol).prop_map(|(header, rows, delim, eol)| {
            let mut text = format!("{header}{eol}");
            for row in rows {
                text.push_str(&row.join(delim));
                text.push_str(eol);
            }
            text
        })
    }

    /// Every data row ends up in exactly one place; see [`LoadReport`].
    pub(super) fn assert_rows_accounted(r: &LoadReport) {
        let placed = r.empty_rows.rows
            + r.repeated_headers.rows
            + r.dropped.total
            + r.exact_duplicates.rows
            + r.conflicting_duplicates.rows
            + r.rows_kept;
        assert_eq!(placed, r.data_rows, "{r:#?}");
    }
}

#[cfg(test)]
mod tests {
    use super::test_support::*;
    use super::*;

    mod properties {
        use super::*;
        use proptest::prelude::*;

        fn check_outcome(result: Result<Loaded, CsvError>) {
            match result {
                Ok(l) => {
                    assert!(l.series.len() >= MIN_ROWS);
                    assert_eq!(l.series.len(), l.report.rows_kept);
                    assert_rows_accounted(&l.report);
                    assert!(l.report.sample_interval_s.is_some());
                    let _ = l.report.notes();
                }
                Err(CsvError::TooFewRows { report, .. }) => assert_rows_accounted(&report),
                Err(e) => {
                    let _ = e.to_string();
                }
            }
        }

        proptest! {
            #[test]
            fn loading_never_panics_on_arbitrary_bytes(
                bytes in prop::collection::vec(any::<u8>(), 0..600)
            ) {
                check_outcome(load_csv(&bytes[..], &with_mode("mode")));
                let mut prefixed = b"time,sp,pv,op\n".to_vec();
                prefixed.extend_from_slice(&bytes);
                check_outcome(load_csv(&prefixed[..], &CsvOptions::default()));
                for opts in historian_options() {
                    check_outcome(load_csv(&prefixed[..], &opts));
                }
            }

            #[test]
            fn loading_never_panics_on_csv_like_text(text in csvish()) {
                check_outcome(load_csv(text.as_bytes(), &CsvOptions::default()));
                check_outcome(load_csv(text.as_bytes(), &with_mode("mode")));
                for opts in historian_options() {
                    check_outcome(load_csv(text.as_bytes(), &opts));
                }
            }

            #[test]
            fn loading_never_panics_on_text_from_a_csv_alphabet(
                text in "[0-9a-zA-Z ,;\t\r\n\".:+eE/-]{0,400}"
            ) {
                check_outcome(load(&format!("time,sp,pv,op\n{text}")));
                check_outcome(load(&text));
                for opts in historian_options() {
                    check_outcome(load_csv(format!("time;sp;pv;op\n{text}").as_bytes(), &opts));
                }
            }
        }
    }
}
