//! The load report: what the loader did to each row, and the notes that say it in words.

use std::cmp::Ordering;
use std::collections::BTreeMap;
use std::fmt;

use serde::Serialize;

use super::text::{excerpt, plural};

/// How many distinct texts the report lists as read-as-manual; the rest are lumped together so a
/// column full of free text cannot bloat the report.
pub(super) const MAX_MANUAL_TEXTS: usize = 16;

/// The key under which read-as-manual texts beyond [`MAX_MANUAL_TEXTS`] are counted.
pub(super) const OTHER_MANUAL_TEXTS: &str = "(other texts)";

/// How often one handling was applied, and where first.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct Tally {
    pub rows: usize,
    /// The earliest row (line number in the file) it was applied to.
    pub first_row: Option<u64>,
    /// The offending text at `first_row`, shortened, where showing it helps.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub example: Option<String>,
}

impl Tally {
    pub(super) fn add(&mut self, row: u64) {
        self.add_inner(row, None);
    }

    pub(super) fn add_with_example(&mut self, row: u64, text: &str) {
        self.add_inner(row, Some(text));
    }

    fn add_inner(&mut self, row: u64, text: Option<&str>) {
        self.rows += 1;
        if self.first_row.is_none_or(|first| row < first) {
            self.first_row = Some(row);
            self.example = text.map(excerpt);
        }
    }

    /// " (first at row N)", for the notes.
    fn at(&self) -> String {
        self.first_row
            .map(|r| format!(" (first at row {r})"))
            .unwrap_or_default()
    }

    /// The note on the rows this tally counts, or `None` when it counts none: `say` is given
    /// how many, such as "2 rows" (with `noun` for row), and where the first one is.
    fn note(&self, noun: &str, say: impl FnOnce(String, String) -> String) -> Option<String> {
        (self.rows > 0).then(|| say(plural(self.rows, noun), self.at()))
    }
}

/// Rows dropped because one value column was unusable, by reason.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct CellDrops {
    pub blank: Tally,
    /// Text that is not a number, such as a historian's quality string.
    pub not_a_number: Tally,
    /// NaN or infinity.
    pub not_finite: Tally,
}

impl CellDrops {
    pub(super) fn cells(&self) -> usize {
        self.blank.rows + self.not_a_number.rows + self.not_finite.rows
    }
}

/// Rows dropped before sorting. A row with several unusable cells is counted under each of
/// them but only once in `total`.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct DroppedRows {
    pub total: usize,
    pub sp: CellDrops,
    pub pv: CellDrops,
    pub op: CellDrops,
    pub mode_blank: Tally,
    /// Rows with non-blank cells beyond the header's last column.
    pub too_many_cells: Tally,
}

/// How the mode column was read, over the rows kept.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct ModeSummary {
    pub auto_rows: usize,
    pub manual_rows: usize,
    /// Each distinct text read as manual and how many kept rows had it, so a mode spelling that
    /// should have meant automatic is visible rather than silently taken as manual.
    pub read_as_manual: BTreeMap<String, usize>,
}

/// Minimum, median and maximum time between consecutive kept samples, in seconds.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct IntervalStats {
    pub min: f64,
    pub median: f64,
    pub max: f64,
}

impl IntervalStats {
    pub(super) fn of(time_s: &[f64]) -> Option<IntervalStats> {
        let intervals = || time_s.windows(2).map(|w| w[1] - w[0]);
        let min = intervals().min_by(f64::total_cmp)?;
        let max = intervals().max_by(f64::total_cmp)?;
        let n = time_s.len() - 1;
        // The two middle intervals in sorted order (one and the same for an odd count), found
        // without sorting; with regular sampling every interval is the minimum.
        let (lower_middle, upper_middle) = if min.total_cmp(&max) == Ordering::Equal {
            (min, min)
        } else {
            let mut d: Vec<f64> = intervals().collect();
            let (lower, &mut upper, _) = d.select_nth_unstable_by(n / 2, f64::total_cmp);
            let lower = lower.iter().copied().max_by(f64::total_cmp);
            (lower.unwrap_or(upper), upper)
        };
        let median = if n % 2 == 1 {
            upper_middle
        } else {
            (lower_middle + upper_middle) / 2.0
        };
        Some(IntervalStats { min, median, max })
    }

    /// Whether the intervals differ by more than rounding in the export would explain.
    pub fn is_irregular(&self) -> bool {
        self.max - self.min > 1e-6 * self.max.abs()
    }
}

/// The time formats a file may use; one file uses one.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TimeFormat {
    /// A plain number of seconds on any origin.
    Seconds,
    /// A plain number of milliseconds on any origin (given, or recognised by its size).
    Milliseconds,
    /// An RFC 3339 timestamp with `Z` or a numeric offset.
    Rfc3339,
    /// A date and time without an offset, read in the time zone given.
    Local,
    /// A time written to the pattern given.
    Pattern,
}

impl TimeFormat {
    /// Whether times in this format are plain numbers.
    pub fn is_number(self) -> bool {
        matches!(self, TimeFormat::Seconds | TimeFormat::Milliseconds)
    }
}

impl fmt::Display for TimeFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            TimeFormat::Seconds => "a number of seconds",
            TimeFormat::Milliseconds => "a number of milliseconds",
            TimeFormat::Rfc3339 => "an RFC 3339 timestamp",
            TimeFormat::Local => "a local time without offset",
            TimeFormat::Pattern => "a time in the given --time-format",
        })
    }
}

/// How the time column was read.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct TimeColumn {
    /// The format of the file's times; `None` only when no time was read.
    pub format: Option<TimeFormat>,
    /// The pattern the times were read with, when one was given.
    pub pattern: Option<String>,
    /// The zone local times (written without an offset) were read in, when there were any.
    pub zone: Option<String>,
    /// Whether the unit of numeric times was given rather than taken by the default rule.
    pub unit_given: bool,
    /// Whether numbers were read as milliseconds because of their size (1e11 or more), with no
    /// unit given.
    pub milliseconds_detected: bool,
    /// Rows with a local time that the zone has twice, in the hour repeated when clocks go back.
    pub repeated_local_times: Tally,
    /// Of those, the rows read as the second occurrence, because the times before them had gone
    /// back by about that hour.
    pub second_occurrences: Tally,
}

/// The columns used, spelled as in the file's header.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct ColumnNames {
    pub time: String,
    pub sp: String,
    pub pv: String,
    pub op: String,
    pub mode: Option<String>,
}

/// Everything the loader did to turn the file into a series. Counts are in rows of the file.
///
/// Each data row ends up in exactly one of: `empty_rows`, `repeated_headers`, `dropped.total`,
/// `exact_duplicates`, `conflicting_duplicates`, or the `rows_kept`. The other tallies
/// (`short_rows`, `trailing_empty_cells`, `out_of_order`) describe rows that may still be kept.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoadReport {
    /// Row of the header line (1 unless blank lines come first).
    pub header_row: u64,
    pub columns: ColumnNames,
    /// The cell delimiter used: ',', ';' or '\t'.
    pub delimiter: char,
    pub bom_stripped: bool,
    /// Records after the header (lines that are completely empty are not records).
    pub data_rows: usize,
    /// Rows in the series.
    pub rows_kept: usize,
    /// For RFC 3339 time, the earliest timestamp, which is time 0 s of the series. `None` when the
    /// file gives time in seconds, which are kept as they are.
    #[serde(serialize_with = "serialize_origin")]
    pub time_origin: Option<jiff::Timestamp>,
    /// How the time column was read.
    pub time: TimeColumn,
    /// Rows with at least one SP, PV, OP or time written with a decimal comma (`12,5`) and read
    /// as such.
    pub decimal_commas: Tally,
    /// Rows whose cells are all blank (such as a line of delimiters), skipped.
    pub empty_rows: Tally,
    /// Rows that repeat the header line (as in concatenated exports), skipped.
    pub repeated_headers: Tally,
    /// Rows with fewer cells than the header; the missing cells were read as blank.
    pub short_rows: Tally,
    /// Rows with only blank cells beyond the header's last column; those cells were ignored.
    pub trailing_empty_cells: Tally,
    pub dropped: DroppedRows,
    /// Rows with a time earlier than some row above them; all rows were sorted by time.
    pub out_of_order: Tally,
    /// Rows removed because another row has the same time and the same values.
    pub exact_duplicates: Tally,
    /// Rows removed because a later row in the file has the same time but different values.
    pub conflicting_duplicates: Tally,
    /// How the mode column was read; `None` without a mode column.
    pub mode: Option<ModeSummary>,
    /// Sample intervals of the series; always present in a successful load (which has at least
    /// [`MIN_ROWS`](super::MIN_ROWS) rows), `None` only in a
    /// [`CsvError::TooFewRows`](super::CsvError::TooFewRows) report with under two rows.
    pub sample_interval_s: Option<IntervalStats>,
}

fn serialize_origin<S: serde::Serializer>(
    origin: &Option<jiff::Timestamp>,
    s: S,
) -> Result<S::Ok, S::Error> {
    match origin {
        Some(ts) => s.collect_str(ts),
        None => s.serialize_none(),
    }
}

impl LoadReport {
    /// The report before any data row is read.
    pub(super) fn empty(
        header_row: u64,
        columns: ColumnNames,
        delimiter: char,
        bom_stripped: bool,
    ) -> LoadReport {
        LoadReport {
            header_row,
            columns,
            delimiter,
            bom_stripped,
            data_rows: 0,
            rows_kept: 0,
            time_origin: None,
            time: TimeColumn::default(),
            decimal_commas: Tally::default(),
            empty_rows: Tally::default(),
            repeated_headers: Tally::default(),
            short_rows: Tally::default(),
            trailing_empty_cells: Tally::default(),
            dropped: DroppedRows::default(),
            out_of_order: Tally::default(),
            exact_duplicates: Tally::default(),
            conflicting_duplicates: Tally::default(),
            mode: None,
            sample_interval_s: None,
        }
    }

    /// One plain-English line per handling that was applied, for people to read. A clean file
    /// with time in seconds and regular sampling gives no lines.
    pub fn notes(&self) -> Vec<String> {
        let mut notes = Vec::new();
        self.file_notes(&mut notes);
        self.row_shape_notes(&mut notes);
        self.dropped_notes(&mut notes);
        self.order_notes(&mut notes);
        notes.extend(self.mode_note());
        notes.extend(self.sampling_note());
        notes
    }

    /// How the file is laid out: lines before the header, byte-order mark, delimiter, time.
    fn file_notes(&self, notes: &mut Vec<String>) {
        if self.header_row > 1 {
            notes.push(format!(
                "skipped {} before the header on row {}",
                plural(self.header_row as usize - 1, "blank line"),
                self.header_row
            ));
        }
        if self.bom_stripped {
            notes.push("ignored the byte-order mark at the start of the file".to_owned());
        }
        match self.delimiter {
            ',' => {}
            ';' => notes.push("cells are separated by semicolons (the header has no comma)".into()),
            '\t' => notes.push("cells are separated by tabs (the header has no comma)".into()),
            other => notes.push(format!("cells are separated by {other:?}")),
        }
        notes.extend(self.decimal_commas.note("row", |n, at| {
            format!("read decimal commas (such as 12,5 for 12.5) in {n}{at}")
        }));
        self.time_notes(notes);
    }

    /// How the times were read, when not as plain seconds.
    fn time_notes(&self, notes: &mut Vec<String>) {
        let time = &self.time;
        if time.milliseconds_detected {
            notes.push(
                "time is given as numbers of 1e11 or more, which as seconds since 1970 would be \
                 after the year 5138, so they were read as milliseconds (from 1973 on) and \
                 turned into seconds"
                    .to_owned(),
            );
        } else if time.format == Some(TimeFormat::Milliseconds) {
            notes.push("time is given in milliseconds; turned into seconds".to_owned());
        }
        if let Some(origin) = self.time_origin {
            let how = match (&time.pattern, &time.zone) {
                (Some(p), Some(z)) => format!("read with the pattern {p:?} as local times in {z}"),
                (Some(p), None) => format!("read with the pattern {p:?}"),
                (None, Some(z)) => format!("given as local times in {z} without an offset"),
                (None, None) => "given as RFC 3339 timestamps".to_owned(),
            };
            notes.push(format!(
                "time is {how}; they were turned into seconds since the earliest, {origin}"
            ));
        }
        let zone = time.zone.as_deref().unwrap_or("the zone");
        notes.extend(time.repeated_local_times.note("row", |n, at| {
            let seconds = match time.second_occurrences.rows {
                0 => "all were read as the first occurrence, as the times never went back by \
                      that hour"
                    .to_owned(),
                m => format!(
                    "{m} of them were read as the second occurrence{}, because the times before \
                     them had gone back by about that hour",
                    time.second_occurrences.at()
                ),
            };
            format!(
                "{n} had a local time that occurs twice in {zone}, in the hour repeated when the \
                 clocks go back{at}; {seconds}"
            )
        }));
        let interval = self.sample_interval_s.map_or(0.0, |iv| iv.median);
        // Relative milliseconds look like seconds; at 1 s sampling or slower they are whole
        // thousands apart, which as seconds would be unusual for a control loop.
        let whole_thousands = interval >= 1000.0 && interval % 1000.0 == 0.0;
        if time.format == Some(TimeFormat::Seconds) && !time.unit_given && whole_thousands {
            notes.push(format!(
                "samples are {} s apart (median); if the times are milliseconds, give \
                 --time-unit ms",
                round_sig(interval)
            ));
        }
    }

    /// Rows skipped or read differently for their shape, and rows dropped for extra values.
    fn row_shape_notes(&self, notes: &mut Vec<String>) {
        let shapes = [
            self.empty_rows
                .note("empty row", |n, at| format!("skipped {n}{at}")),
            self.repeated_headers.note("row", |n, at| {
                format!("skipped {n} repeating the header{at}")
            }),
            self.short_rows.note("row", |n, at| {
                format!(
                    "{n} had fewer cells than the header; the missing cells were read as blank{at}"
                )
            }),
            self.trailing_empty_cells.note("row", |n, at| {
                format!(
                    "{n} had empty cells beyond the header's last column; those cells were \
                     ignored{at}"
                )
            }),
            self.dropped.too_many_cells.note("row", |n, at| {
                format!("dropped {n} with more values than the header has columns{at}")
            }),
        ];
        notes.extend(shapes.into_iter().flatten());
    }

    /// Rows dropped for an unusable value, per column and reason, and their total.
    fn dropped_notes(&self, notes: &mut Vec<String>) {
        let d = &self.dropped;
        let columns = [
            ("sp", &self.columns.sp, &d.sp),
            ("pv", &self.columns.pv, &d.pv),
            ("op", &self.columns.op, &d.op),
        ];
        for (role, name, drops) in columns {
            let label = column_label(role, name);
            let kinds = [
                (&drops.blank, "is blank"),
                (&drops.not_a_number, "is not a number"),
                (&drops.not_finite, "is not finite (NaN or infinite)"),
            ];
            for (t, what) in kinds {
                notes.extend(t.note("row", |n, at| {
                    let example = t
                        .example
                        .as_ref()
                        .map(|e| format!(", such as {e:?}"))
                        .unwrap_or_default();
                    format!("dropped {n} where {label} {what}{example}{at}")
                }));
            }
        }
        let label = column_label("mode", self.columns.mode.as_deref().unwrap_or("mode"));
        notes.extend(d.mode_blank.note("row", |n, at| {
            format!("dropped {n} where {label} is blank, rather than guess the mode{at}")
        }));
        let kinds =
            d.too_many_cells.rows + d.sp.cells() + d.pv.cells() + d.op.cells() + d.mode_blank.rows;
        if kinds > d.total {
            notes.push(format!(
                "{} dropped in all; some had more than one unusable value",
                plural(d.total, "row")
            ));
        }
    }

    /// Rows out of time order, and rows removed for repeating a time.
    fn order_notes(&self, notes: &mut Vec<String>) {
        let order = [
            self.out_of_order.note("row", |n, at| {
                format!("{n} out of time order{at}; sorted all rows by time")
            }),
            self.exact_duplicates.note("row", |n, at| {
                format!("removed {n} repeating another row's time and values exactly{at}")
            }),
            self.conflicting_duplicates.note("row", |n, at| {
                format!(
                    "removed {n} whose time appears again later in the file with different \
                     values (conflicting duplicates, kept the last){at}"
                )
            }),
        ];
        notes.extend(order.into_iter().flatten());
    }

    /// How the mode column was read, when any kept row was read as manual.
    fn mode_note(&self) -> Option<String> {
        let mode = self.mode.as_ref().filter(|m| m.manual_rows > 0)?;
        let texts: Vec<String> = mode
            .read_as_manual
            .iter()
            .map(|(text, n)| format!("{text:?} ×{n}"))
            .collect();
        Some(format!(
            "mode: {} automatic, {} manual; read as manual: {}",
            plural(mode.auto_rows, "row"),
            mode.manual_rows,
            texts.join(", ")
        ))
    }

    /// The sample intervals, when they are irregular.
    fn sampling_note(&self) -> Option<String> {
        let iv = self.sample_interval_s.filter(IntervalStats::is_irregular)?;
        Some(format!(
            "sampling is irregular: interval min {} s, median {} s, max {} s",
            round_sig(iv.min),
            round_sig(iv.median),
            round_sig(iv.max)
        ))
    }
}

/// "pv", or `pv ("TIC-101.PV")` when the header calls it something else.
fn column_label(role: &str, name: &str) -> String {
    if name.eq_ignore_ascii_case(role) {
        role.to_owned()
    } else {
        format!("{role} ({name:?})")
    }
}

/// Six significant digits, so notes do not show binary rounding noise.
fn round_sig(v: f64) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return v;
    }
    let scale = 10f64.powi(5 - v.abs().log10().floor() as i32);
    if scale.is_finite() && (v * scale).is_finite() {
        (v * scale).round() / scale
    } else {
        v
    }
}

#[cfg(test)]
mod tests {
    use crate::csvload::test_support::*;
    use crate::csvload::*;

    #[test]
    fn the_report_serializes_to_json_with_null_origin_for_seconds() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,1,2,3\n2,1,2,3\n");
        let json = serde_json::to_value(&l.report).unwrap();
        assert!(json["time_origin"].is_null());
        assert_eq!(json["delimiter"], ",");
        assert_eq!(json["rows_kept"], 3);
        assert_eq!(json["sample_interval_s"]["median"], 1.0);
    }

    #[test]
    fn notes_name_a_renamed_column_as_spelled_in_the_header() {
        let mut opts = CsvOptions::default();
        opts.columns.pv = "TI-101".into();
        let text = "time,sp,TI-101,op\n0,1,2,3\n1,1,,3\n2,1,2,3\n3,1,2,3\n";
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        assert!(
            has_note(&l.report, "where pv (\"TI-101\") is blank"),
            "{:?}",
            l.report.notes()
        );
    }

    #[test]
    fn irregular_sampling_is_allowed_and_reported() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,1,2,3\n2,1,2,3\n12,1,2,3\n12.5,1,2,3\n");
        let iv = l.report.sample_interval_s.unwrap();
        assert_eq!((iv.min, iv.median, iv.max), (0.5, 1.0, 10.0));
        assert!(has_note(
            &l.report,
            "irregular: interval min 0.5 s, median 1 s, max 10 s"
        ));
    }

    #[test]
    fn the_median_interval_of_an_even_count_is_the_mean_of_the_middle_two() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,1,2,3\n3,1,2,3\n7,1,2,3\n15,1,2,3\n");
        assert_eq!(l.report.sample_interval_s.unwrap().median, 3.0);
    }

    #[test]
    fn regular_sampling_with_decimal_rounding_is_not_called_irregular() {
        let l = load_ok("time,sp,pv,op\n0.1,1,2,3\n0.2,1,2,3\n0.3,1,2,3\n0.4,1,2,3\n");
        assert!(!l.report.sample_interval_s.unwrap().is_irregular());
    }
}
