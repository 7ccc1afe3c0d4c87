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
//! - **Shape of a row.** A row whose cells are all blank, or that repeats the header, is skipped.
//!   A short row has its missing cells read as blank. A row with extra cells beyond the header is
//!   kept if the extras are blank (trailing delimiters) and dropped otherwise, since its values
//!   may have shifted.
//! - **Time.** Either every time is a number of seconds (any origin, kept as it is) or every time
//!   is an RFC 3339 timestamp (with `Z` or a numeric offset; a space may stand for the `T`); the
//!   first row decides. A blank, unreadable or other-format time is an error: time is what every
//!   other value hangs on, so a row without one cannot be placed. Timestamps become seconds since
//!   the earliest one, which is kept as [`LoadReport::time_origin`].
//! - **Values.** A blank, non-numeric (quality text such as `Bad Input`) or non-finite SP, PV or
//!   OP drops the row, counted per column and reason. Surrounding whitespace is fine.
//! - **Mode** (optional column). Blank drops the row, because carrying the last mode forward would
//!   be a guess. Whether a value means automatic is the product's one rule,
//!   [`AutoValues`](crate::analysis::AutoValues) (the same as for a live mode signal); anything
//!   else means manual, and the report lists the texts it read as manual.
//! - **Order.** Rows are sorted stably by time, counting those that were out of order. Rows that
//!   repeat a time with identical values are removed; rows that repeat a time with different
//!   values lose to the last such row in the file. Both are counted.
//! - **Sampling.** Irregular intervals are allowed; the report gives their minimum, median and
//!   maximum.
//! - Fewer than [`MIN_ROWS`] usable rows is an error that carries the full report.

use std::cmp::Ordering;
use std::collections::BTreeMap;
use std::fmt;
use std::io::{self, Read};

use serde::Serialize;
use thiserror::Error;

use crate::analysis::{AutoValues, Series, SeriesError};

/// The fewest usable rows a load may produce: with fewer there is no response to analyse.
pub const MIN_ROWS: usize = 3;

/// How many distinct texts the report lists as read-as-manual; the rest are lumped together so a
/// column full of free text cannot bloat the report.
const MAX_MANUAL_TEXTS: usize = 16;

/// The key under which read-as-manual texts beyond [`MAX_MANUAL_TEXTS`] are counted.
const OTHER_MANUAL_TEXTS: &str = "(other texts)";

/// Longest excerpt of a cell quoted back in an error or note; cells can be arbitrarily long.
const EXCERPT_CHARS: usize = 40;

const UTF8_BOM: &[u8] = b"\xEF\xBB\xBF";

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

/// What to read and how to interpret the mode column.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CsvOptions {
    pub columns: CsvColumns,
    /// Which mode values mean automatic (or cascade).
    pub auto_values: AutoValues,
}

/// A successful load: the series for the analysis and the account of how it was obtained.
#[derive(Debug, Clone)]
pub struct Loaded {
    pub series: Series,
    pub report: LoadReport,
}

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
    fn add(&mut self, row: u64) {
        self.add_inner(row, None);
    }

    fn add_with_example(&mut self, row: u64, text: &str) {
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
    fn cells(&self) -> usize {
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
    fn of(time_s: &[f64]) -> Option<IntervalStats> {
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
    /// [`MIN_ROWS`] rows), `None` only in a [`CsvError::TooFewRows`] report with under two rows.
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
    fn empty(layout: &Layout, delimiter: char, bom_stripped: bool) -> LoadReport {
        LoadReport {
            header_row: layout.row,
            columns: layout.column_names(),
            delimiter,
            bom_stripped,
            data_rows: 0,
            rows_kept: 0,
            time_origin: None,
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
        if let Some(origin) = self.time_origin {
            notes.push(format!(
                "time is given as RFC 3339 timestamps; they were turned into seconds since the \
                 earliest, {origin}"
            ));
        }
        let t = &self.empty_rows;
        if t.rows > 0 {
            notes.push(format!("skipped {}{}", plural(t.rows, "empty row"), t.at()));
        }
        let t = &self.repeated_headers;
        if t.rows > 0 {
            notes.push(format!(
                "skipped {} repeating the header{}",
                plural(t.rows, "row"),
                t.at()
            ));
        }
        let t = &self.short_rows;
        if t.rows > 0 {
            notes.push(format!(
                "{} had fewer cells than the header; the missing cells were read as blank{}",
                plural(t.rows, "row"),
                t.at()
            ));
        }
        let t = &self.trailing_empty_cells;
        if t.rows > 0 {
            notes.push(format!(
                "{} had empty cells beyond the header's last column; those cells were ignored{}",
                plural(t.rows, "row"),
                t.at()
            ));
        }
        let d = &self.dropped;
        let t = &d.too_many_cells;
        if t.rows > 0 {
            notes.push(format!(
                "dropped {} with more values than the header has columns{}",
                plural(t.rows, "row"),
                t.at()
            ));
        }
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
                if t.rows > 0 {
                    let example = t
                        .example
                        .as_ref()
                        .map(|e| format!(", such as {e:?}"))
                        .unwrap_or_default();
                    notes.push(format!(
                        "dropped {} where {label} {what}{example}{}",
                        plural(t.rows, "row"),
                        t.at()
                    ));
                }
            }
        }
        let t = &d.mode_blank;
        if t.rows > 0 {
            let label = column_label("mode", self.columns.mode.as_deref().unwrap_or("mode"));
            notes.push(format!(
                "dropped {} where {label} is blank, rather than guess the mode{}",
                plural(t.rows, "row"),
                t.at()
            ));
        }
        let kinds =
            d.too_many_cells.rows + d.sp.cells() + d.pv.cells() + d.op.cells() + d.mode_blank.rows;
        if kinds > d.total {
            notes.push(format!(
                "{} dropped in all; some had more than one unusable value",
                plural(d.total, "row")
            ));
        }
        let t = &self.out_of_order;
        if t.rows > 0 {
            notes.push(format!(
                "{} out of time order{}; sorted all rows by time",
                plural(t.rows, "row"),
                t.at()
            ));
        }
        let t = &self.exact_duplicates;
        if t.rows > 0 {
            notes.push(format!(
                "removed {} repeating another row's time and values exactly{}",
                plural(t.rows, "row"),
                t.at()
            ));
        }
        let t = &self.conflicting_duplicates;
        if t.rows > 0 {
            notes.push(format!(
                "removed {} whose time appears again later in the file with different values \
                 (conflicting duplicates, kept the last){}",
                plural(t.rows, "row"),
                t.at()
            ));
        }
        if let Some(mode) = &self.mode
            && mode.manual_rows > 0
        {
            let texts: Vec<String> = mode
                .read_as_manual
                .iter()
                .map(|(text, n)| format!("{text:?} ×{n}"))
                .collect();
            notes.push(format!(
                "mode: {} automatic, {} manual; read as manual: {}",
                plural(mode.auto_rows, "row"),
                mode.manual_rows,
                texts.join(", ")
            ));
        }
        if let Some(iv) = &self.sample_interval_s
            && iv.is_irregular()
        {
            notes.push(format!(
                "sampling is irregular: interval min {} s, median {} s, max {} s",
                round_sig(iv.min),
                round_sig(iv.median),
                round_sig(iv.max)
            ));
        }
        notes
    }
}

/// The two time formats a file may use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TimeFormat {
    /// A plain number of seconds on any origin.
    Seconds,
    /// An RFC 3339 timestamp with `Z` or a numeric offset.
    Rfc3339,
}

impl fmt::Display for TimeFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            TimeFormat::Seconds => "a number of seconds",
            TimeFormat::Rfc3339 => "an RFC 3339 timestamp",
        })
    }
}

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
         RFC 3339 timestamp such as 2024-05-01T08:00:00Z"
    )]
    BadTime {
        row: u64,
        column: String,
        value: String,
    },
    #[error(
        "row {row}, column {column:?}: {value:?} has no UTC offset, so the instant it names is \
         unknown; add Z (for UTC) or an offset such as +02:00"
    )]
    TimeWithoutOffset {
        row: u64,
        column: String,
        value: String,
    },
    #[error(
        "row {row}, column {column:?}: {value:?} is {found}, but the first time (row {first_row}) \
         is {expected}; one file must use one time format"
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
fn load_plain(
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
fn load_quoted(
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

/// About how many rows the file has, to size the columns once: its count of line feeds.
fn rows_hint(bytes: &[u8]) -> usize {
    count_byte(bytes, b'\n') + 1
}

/// How many times `byte` occurs in `bytes`.
fn count_byte(bytes: &[u8], byte: u8) -> usize {
    // Counted in blocks small enough for a byte-wide count, which the compiler vectorises well.
    let in_block = |block: &[u8]| block.iter().map(|&b| u8::from(b == byte)).sum::<u8>();
    bytes
        .chunks(255)
        .map(|block| usize::from(in_block(block)))
        .sum()
}

/// The whole file in memory.
///
/// Holding the file costs little: the series needs all rows in memory anyway.
struct Text {
    /// The file's bytes, including a leading byte-order mark if it has one.
    bytes: Vec<u8>,
    bom_stripped: bool,
}

impl Text {
    fn read<R: Read>(mut reader: R) -> Result<Text, CsvError> {
        let mut bytes = Vec::new();
        if let Err(source) = reader.read_to_end(&mut bytes) {
            // What was read before the failure is in `bytes`, so the row can still be named.
            let row = 1 + count_line_breaks(&bytes, 0, bytes.len());
            return Err(CsvError::Io { row, source });
        }
        let bom_stripped = bytes.starts_with(UTF8_BOM);
        Ok(Text {
            bytes,
            bom_stripped,
        })
    }

    /// The file without a leading byte-order mark.
    fn body(&self) -> &[u8] {
        let skip = if self.bom_stripped { UTF8_BOM.len() } else { 0 };
        &self.bytes[skip..]
    }
}

/// How many lines end in `bytes[from..to]`; lines end at "\n", "\r\n" or a lone "\r". A "\r" at
/// `to - 1` is looked at together with the byte after it.
fn count_line_breaks(bytes: &[u8], from: usize, to: usize) -> u64 {
    let to = to.min(bytes.len());
    let from = from.min(to);
    let span = &bytes[from..to];
    let line_feeds = count_byte(span, b'\n');
    let returns = count_byte(span, b'\r');
    if returns == 0 {
        return line_feeds as u64;
    }
    // A "\r" right before a "\n" is part of the same line break.
    let next = &bytes[from + 1..(to + 1).min(bytes.len())];
    let pairs: usize = span
        .chunks(255)
        .zip(next.chunks(255))
        .map(|(a, b)| {
            let in_block = a
                .iter()
                .zip(b)
                .map(|(&a, &b)| u8::from(a == b'\r' && b == b'\n'));
            usize::from(in_block.sum::<u8>())
        })
        .sum();
    (line_feeds + returns - pairs) as u64
}

/// The first line with any content, without its line break: the header.
fn first_line(bytes: &[u8]) -> &[u8] {
    let is_break = |b: &u8| matches!(b, b'\r' | b'\n');
    let start = bytes
        .iter()
        .position(|b| !is_break(b))
        .unwrap_or(bytes.len());
    let rest = &bytes[start..];
    let end = rest.iter().position(is_break).unwrap_or(rest.len());
    &rest[..end]
}

/// Comma, unless the header has none but has semicolons or tabs.
fn detect_delimiter(header: &[u8]) -> u8 {
    if header.contains(&b',') {
        return b',';
    }
    let semicolons = header.iter().filter(|&&b| b == b';').count();
    let tabs = header.iter().filter(|&&b| b == b'\t').count();
    match (semicolons, tabs) {
        (0, 0) => b',',
        (s, t) if t > s => b'\t',
        _ => b';',
    }
}

/// The records of a file without quotes: each non-empty line is one record, split at the
/// delimiter. Rows are counted as the lines go by, and each cell that is a plain decimal is read
/// on the way.
struct PlainRecords<'a> {
    bytes: &'a [u8],
    pos: usize,
    /// The line `pos` is on.
    line: u64,
    delimiter: u8,
}

/// One cell of a file without quotes.
#[derive(Debug, Clone, Copy)]
struct PlainCell<'a> {
    text: &'a [u8],
    /// The cell's value if it is a plain decimal, as [`plain_decimal`] reads it.
    number: Option<f64>,
}

impl<'a> PlainRecords<'a> {
    /// Puts the next record's cells in `cells` and returns its row, or `None` at the end.
    fn next_into(&mut self, cells: &mut Vec<PlainCell<'a>>) -> Option<u64> {
        let bytes = self.bytes;
        let mut pos = self.pos;
        // Empty lines are not records; step over them, counting each line break once.
        while let Some(&b) = bytes.get(pos) {
            match b {
                b'\n' => self.line += 1,
                b'\r' if bytes.get(pos + 1) != Some(&b'\n') => self.line += 1,
                b'\r' => {}
                _ => break,
            }
            pos += 1;
        }
        if pos >= bytes.len() {
            self.pos = pos;
            return None;
        }
        cells.clear();
        loop {
            let start = pos;
            let (mut number, used) = decimal_prefix(&bytes[pos..]);
            pos += used;
            // Anything after the decimal makes the cell text of another kind.
            while let Some(&b) = bytes.get(pos) {
                if b == self.delimiter || b == b'\n' || b == b'\r' {
                    break;
                }
                number = None;
                pos += 1;
            }
            cells.push(PlainCell {
                text: &bytes[start..pos],
                number,
            });
            if bytes.get(pos) != Some(&self.delimiter) {
                break;
            }
            pos += 1;
        }
        self.pos = pos;
        Some(self.line)
    }
}

/// Names records read by the CSV reader by their line in the file.
///
/// The CSV reader's own line count drifts when blank lines come before a record, so rows are
/// counted here from byte offsets instead. Records come in file order, so the count only moves
/// forward.
struct LineCounter<'a> {
    bytes: &'a [u8],
    /// Offset up to which line breaks have been counted.
    at: usize,
    breaks: u64,
}

impl LineCounter<'_> {
    /// The 1-based line holding byte `offset`.
    fn row_at(&mut self, offset: usize) -> u64 {
        if offset < self.at {
            self.at = 0;
            self.breaks = 0;
        }
        self.breaks += count_line_breaks(self.bytes, self.at, offset);
        self.at = offset;
        1 + self.breaks
    }

    /// The row a record starts on. Its recorded offset may sit before line breaks the reader
    /// skipped (blank lines), so those are stepped over first.
    fn row_of(&mut self, record: &csv::ByteRecord) -> u64 {
        let mut at = record.position().map_or(0, |p| p.byte() as usize);
        while self
            .bytes
            .get(at)
            .is_some_and(|b| matches!(b, b'\r' | b'\n'))
        {
            at += 1;
        }
        self.row_at(at)
    }
}

fn next_record(
    rdr: &mut csv::Reader<&[u8]>,
    record: &mut csv::ByteRecord,
    lines: &mut LineCounter,
) -> Result<bool, CsvError> {
    rdr.read_byte_record(record).map_err(|e| {
        let at = e.position().unwrap_or(rdr.position()).byte();
        let row = lines.row_at(at as usize);
        match e.into_kind() {
            csv::ErrorKind::Io(source) => CsvError::Io { row, source },
            other => CsvError::Malformed {
                row,
                message: format!("{other:?}"),
            },
        }
    })
}

/// The cells of one record, whichever way the file was split.
trait Cells {
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

/// Blank as [`Layout::cell`] would read it: nothing but whitespace.
fn is_blank(cell: &[u8]) -> bool {
    // A visible ASCII character is neither whitespace nor part of a multi-byte character, so
    // the usual first byte of a number settles it without decoding the cell.
    if cell.first().is_some_and(u8::is_ascii_graphic) {
        return false;
    }
    std::str::from_utf8(cell).is_ok_and(|s| s.trim().is_empty())
}

/// Where the wanted columns are in the header.
struct Layout {
    row: u64,
    names: Vec<String>,
    lower: Vec<String>,
    time: usize,
    sp: usize,
    pv: usize,
    op: usize,
    mode: Option<usize>,
}

impl Layout {
    fn from_header<C: Cells + ?Sized>(
        record: &C,
        row: u64,
        wanted: &CsvColumns,
    ) -> Result<Layout, CsvError> {
        let header_not_utf8 = record.cells().any(|c| std::str::from_utf8(c).is_err());
        let names: Vec<String> = record
            .cells()
            .map(|c| String::from_utf8_lossy(c).trim().to_owned())
            .collect();
        let lower: Vec<String> = names.iter().map(|n| n.to_lowercase()).collect();
        let find = |role: &'static str, name: &str| -> Result<usize, CsvError> {
            let want = name.trim().to_lowercase();
            let positions: Vec<usize> = (0..lower.len()).filter(|&i| lower[i] == want).collect();
            match positions.as_slice() {
                [one] => Ok(*one),
                [] => Err(CsvError::MissingColumn {
                    row,
                    role,
                    wanted: name.to_owned(),
                    found: names.clone(),
                    header_not_utf8,
                }),
                _ => Err(CsvError::AmbiguousColumn {
                    row,
                    role,
                    wanted: name.to_owned(),
                    positions: positions.iter().map(|p| p + 1).collect(),
                }),
            }
        };
        let time = find("time", &wanted.time)?;
        let sp = find("setpoint (sp)", &wanted.sp)?;
        let pv = find("process variable (pv)", &wanted.pv)?;
        let op = find("controller output (op)", &wanted.op)?;
        let mode = match &wanted.mode {
            Some(m) => Some(find("mode", m)?),
            None => None,
        };
        Ok(Layout {
            row,
            names,
            lower,
            time,
            sp,
            pv,
            op,
            mode,
        })
    }

    fn column_names(&self) -> ColumnNames {
        ColumnNames {
            time: self.names[self.time].clone(),
            sp: self.names[self.sp].clone(),
            pv: self.names[self.pv].clone(),
            op: self.names[self.op].clone(),
            mode: self.mode.map(|i| self.names[i].clone()),
        }
    }

    fn is_header_again<C: Cells + ?Sized>(&self, record: &C) -> bool {
        record.cell_count() == self.lower.len()
            && record
                .cells()
                .zip(&self.lower)
                .all(|(c, name)| String::from_utf8_lossy(c).trim().to_lowercase() == *name)
    }

    /// The trimmed text of one cell; a cell missing from a short row reads as blank.
    fn cell<'r, C: Cells + ?Sized>(
        &self,
        record: &'r C,
        col: usize,
        row: u64,
    ) -> Result<&'r str, CsvError> {
        match record.cell_at(col) {
            None => Ok(""),
            Some(bytes) => {
                std::str::from_utf8(bytes)
                    .map(str::trim)
                    .map_err(|_| CsvError::InvalidUtf8 {
                        row,
                        column: self.names[col].clone(),
                    })
            }
        }
    }
}

/// What the loader knows before the first data row.
struct Start {
    bom_stripped: bool,
    delimiter: u8,
    /// About how many rows to expect; only sizes the columns.
    rows_hint: usize,
}

/// Applies the module's policy to one data row at a time, then orders and checks the rows kept.
struct Loader {
    layout: Layout,
    /// Which mode values mean automatic.
    auto_values: AutoValues,
    report: LoadReport,
    /// The file's time format and the row that fixed it.
    time_kind: Option<(TimeFormat, u64)>,
    /// Distinct texts read as manual, in the order first met.
    manual_texts: Vec<String>,
    kept: Kept,
}

impl Loader {
    fn new<C: Cells + ?Sized>(
        header: &C,
        row: u64,
        start: Start,
        opts: &CsvOptions,
    ) -> Result<Loader, CsvError> {
        let layout = Layout::from_header(header, row, &opts.columns)?;
        let auto_values = opts.auto_values.clone();
        let report = LoadReport::empty(&layout, char::from(start.delimiter), start.bom_stripped);
        let kept = Kept::with_capacity(start.rows_hint, layout.mode.is_some());
        Ok(Loader {
            layout,
            auto_values,
            report,
            time_kind: None,
            manual_texts: Vec::new(),
            kept,
        })
    }

    /// Handles one data row: skips, drops or keeps it, counting what it did.
    fn take<C: Cells + ?Sized>(&mut self, record: &C, row: u64) -> Result<(), CsvError> {
        let Loader {
            layout,
            auto_values,
            report,
            time_kind,
            manual_texts,
            kept,
        } = self;
        report.data_rows += 1;

        if record.cells().all(is_blank) {
            report.empty_rows.add(row);
            return Ok(());
        }
        let width = layout.names.len();
        let len = record.cell_count();
        if len < width {
            report.short_rows.add(row);
        } else if len > width {
            if record.cells().skip(width).all(is_blank) {
                report.trailing_empty_cells.add(row);
            } else {
                report.dropped.too_many_cells.add(row);
                report.dropped.total += 1;
                return Ok(());
            }
        }

        // A plain decimal is a number of seconds, which fits any file but one whose time format
        // is already fixed as RFC 3339; everything else takes the general route.
        let seconds = match time_kind {
            Some((TimeFormat::Rfc3339, _)) => None,
            _ => record.plain_number_at(layout.time),
        };
        let time = match seconds {
            Some(s) => {
                time_kind.get_or_insert((TimeFormat::Seconds, row));
                TimeValue::Seconds(s)
            }
            None => {
                let text = layout.cell(record, layout.time, row)?;
                match read_time(text, time_kind, row, &layout.names[layout.time]) {
                    Ok(time) => time,
                    // Checked only here, where the time failed, to keep the common path cheap.
                    Err(_) if layout.is_header_again(record) => {
                        report.repeated_headers.add(row);
                        return Ok(());
                    }
                    Err(e) => return Err(e),
                }
            }
        };

        let mut usable = true;
        let mut values = [0.0; 3];
        let columns = [
            (layout.sp, &mut report.dropped.sp),
            (layout.pv, &mut report.dropped.pv),
            (layout.op, &mut report.dropped.op),
        ];
        for (value, (col, drops)) in values.iter_mut().zip(columns) {
            if let Some(v) = record.plain_number_at(col) {
                *value = v;
                continue;
            }
            let text = layout.cell(record, col, row)?;
            match read_value(text) {
                Ok(v) => *value = v,
                Err(reason) => {
                    usable = false;
                    match reason {
                        ValueProblem::Blank => drops.blank.add(row),
                        ValueProblem::NotANumber => drops.not_a_number.add_with_example(row, text),
                        ValueProblem::NotFinite => drops.not_finite.add_with_example(row, text),
                    }
                }
            }
        }

        let mode = match layout.mode {
            None => None,
            Some(col) => {
                let text = layout.cell(record, col, row)?;
                if text.is_empty() {
                    report.dropped.mode_blank.add(row);
                    usable = false;
                    None
                } else {
                    Some(read_mode(text, auto_values, manual_texts))
                }
            }
        };

        if !usable {
            report.dropped.total += 1;
            return Ok(());
        }
        kept.push(row, time, values, mode);
        Ok(())
    }

    /// Orders the rows kept by time, resolves repeated times and builds the series.
    fn finish(self) -> Result<Loaded, CsvError> {
        let Loader {
            layout,
            mut report,
            manual_texts,
            kept,
            ..
        } = self;
        let kept = kept.in_time_order(&mut report);

        if layout.mode.is_some() {
            let mut summary = ModeSummary::default();
            for mode in &kept.mode {
                match *mode {
                    ModeCell::Auto => summary.auto_rows += 1,
                    ModeCell::Manual(text) => {
                        summary.manual_rows += 1;
                        let key = text
                            .and_then(|i| manual_texts.get(i))
                            .map_or(OTHER_MANUAL_TEXTS, String::as_str);
                        *summary.read_as_manual.entry(key.to_owned()).or_default() += 1;
                    }
                }
            }
            report.mode = Some(summary);
        }

        let Kept {
            row: rows,
            time,
            sp,
            pv,
            op,
            mode,
        } = kept;
        let time_s: Vec<f64> = match time {
            Times::Seconds(seconds) => seconds,
            Times::Any(times) => {
                let origin = match times.first() {
                    Some(TimeValue::Instant(ts)) => Some(*ts),
                    _ => None,
                };
                report.time_origin = origin;
                times
                    .iter()
                    .map(|t| match *t {
                        TimeValue::Seconds(s) => s,
                        TimeValue::Instant(ts) => seconds_since(origin.unwrap_or(ts), ts),
                    })
                    .collect()
            }
        };
        // Two distinct timestamps nanoseconds apart can round to the same f64 far from the origin.
        if let Some(i) = time_s.windows(2).position(|w| w[1] <= w[0]) {
            return Err(CsvError::TimesTooClose {
                first: rows[i].min(rows[i + 1]),
                second: rows[i].max(rows[i + 1]),
            });
        }
        report.rows_kept = time_s.len();
        report.sample_interval_s = IntervalStats::of(&time_s);

        if time_s.len() < MIN_ROWS {
            return Err(CsvError::TooFewRows {
                usable: time_s.len(),
                needed: MIN_ROWS,
                report: Box::new(report),
            });
        }

        let auto = layout
            .mode
            .map(|_| mode.iter().map(|m| *m == ModeCell::Auto).collect());
        let series = Series::new(time_s, sp, pv, op, auto)?;
        Ok(Loaded { series, report })
    }
}

/// The rows kept so far, column by column, with what is needed to put them in time order.
struct Kept {
    /// Row (line in the file) of each kept row.
    row: Vec<u64>,
    time: Times,
    sp: Vec<f64>,
    pv: Vec<f64>,
    op: Vec<f64>,
    /// Empty without a mode column; otherwise one per kept row.
    mode: Vec<ModeCell>,
}

/// The kept rows' times. Seconds are stored as they are, to become the series' time column
/// directly; RFC 3339 times are held as read until the origin is known.
enum Times {
    Seconds(Vec<f64>),
    Any(Vec<TimeValue>),
}

impl Times {
    fn at(&self, i: usize) -> TimeValue {
        match self {
            Times::Seconds(s) => TimeValue::Seconds(s[i]),
            Times::Any(t) => t[i],
        }
    }

    /// Adds a time. A file has one time format (another is an error), so the first RFC 3339
    /// time is the only one that can find seconds here and switch the column over.
    fn push(&mut self, time: TimeValue) {
        match (&mut *self, time) {
            (Times::Seconds(s), TimeValue::Seconds(v)) => s.push(v),
            (Times::Any(t), time) => t.push(time),
            (Times::Seconds(s), time) => {
                let mut any = Vec::with_capacity(s.capacity().max(s.len() + 1));
                any.extend(s.iter().map(|&v| TimeValue::Seconds(v)));
                any.push(time);
                *self = Times::Any(any);
            }
        }
    }

    fn select(&self, order: &[usize]) -> Times {
        match self {
            Times::Seconds(s) => Times::Seconds(select(s, order)),
            Times::Any(t) => Times::Any(select(t, order)),
        }
    }
}

/// The elements of `values` at `order`, in that order (positions past the end are skipped).
fn select<T: Copy>(values: &[T], order: &[usize]) -> Vec<T> {
    order
        .iter()
        .filter_map(|&i| values.get(i).copied())
        .collect()
}

impl Kept {
    fn with_capacity(n: usize, has_mode: bool) -> Kept {
        Kept {
            row: Vec::with_capacity(n),
            time: Times::Seconds(Vec::with_capacity(n)),
            sp: Vec::with_capacity(n),
            pv: Vec::with_capacity(n),
            op: Vec::with_capacity(n),
            mode: if has_mode {
                Vec::with_capacity(n)
            } else {
                Vec::new()
            },
        }
    }

    fn push(&mut self, row: u64, time: TimeValue, [sp, pv, op]: [f64; 3], mode: Option<ModeCell>) {
        self.row.push(row);
        self.time.push(time);
        self.sp.push(sp);
        self.pv.push(pv);
        self.op.push(op);
        if let Some(mode) = mode {
            self.mode.push(mode);
        }
    }

    /// Whether rows `a` and `b` carry the same values (their times being equal).
    fn same_values(&self, a: usize, b: usize) -> bool {
        let auto = |i: usize| self.mode.get(i).map(|m| *m == ModeCell::Auto);
        self.sp[a] == self.sp[b]
            && self.pv[a] == self.pv[b]
            && self.op[a] == self.op[b]
            && auto(a) == auto(b)
    }

    /// The rows sorted stably by time, so rows sharing a time stay in file order, with only the
    /// last row of each run of equal times kept (the last in the file). The others count as
    /// exact duplicates when their values match it, conflicting when not.
    fn in_time_order(self, report: &mut LoadReport) -> Kept {
        let increasing = match &self.time {
            Times::Seconds(s) => {
                count_out_of_order(s, f64::total_cmp, &self.row, &mut report.out_of_order)
            }
            Times::Any(t) => count_out_of_order(t, cmp_time, &self.row, &mut report.out_of_order),
        };
        if increasing {
            return self;
        }
        let mut order: Vec<usize> = (0..self.row.len()).collect();
        order.sort_by(|&a, &b| cmp_time(&self.time.at(a), &self.time.at(b)));

        let mut keep: Vec<usize> = Vec::with_capacity(order.len());
        let mut run_start = 0;
        while run_start < order.len() {
            let time = self.time.at(order[run_start]);
            let run_end = order[run_start..]
                .iter()
                .position(|&i| cmp_time(&self.time.at(i), &time) != Ordering::Equal)
                .map_or(order.len(), |n| run_start + n);
            let last = order[run_end - 1];
            for &i in &order[run_start..run_end - 1] {
                if self.same_values(i, last) {
                    report.exact_duplicates.add(self.row[i]);
                } else {
                    report.conflicting_duplicates.add(self.row[i]);
                }
            }
            keep.push(last);
            run_start = run_end;
        }

        Kept {
            row: select(&self.row, &keep),
            time: self.time.select(&keep),
            sp: select(&self.sp, &keep),
            pv: select(&self.pv, &keep),
            op: select(&self.op, &keep),
            mode: select(&self.mode, &keep),
        }
    }
}

/// Counts in `tally` the rows with a time earlier than the latest time above them in the file,
/// and tells whether every time is later than the one before it (then the rows are in order
/// already and no time repeats).
fn count_out_of_order<T>(
    times: &[T],
    cmp: impl Fn(&T, &T) -> Ordering,
    rows: &[u64],
    tally: &mut Tally,
) -> bool {
    let mut increasing = true;
    let mut latest: Option<&T> = None;
    for (time, &row) in times.iter().zip(rows) {
        match latest.map(|l| cmp(time, l)) {
            Some(Ordering::Less) => {
                increasing = false;
                tally.add(row);
            }
            Some(Ordering::Equal) => increasing = false,
            _ => latest = Some(time),
        }
    }
    increasing
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum TimeValue {
    Seconds(f64),
    Instant(jiff::Timestamp),
}

fn cmp_time(a: &TimeValue, b: &TimeValue) -> Ordering {
    match (a, b) {
        (TimeValue::Seconds(x), TimeValue::Seconds(y)) => x.total_cmp(y),
        (TimeValue::Instant(x), TimeValue::Instant(y)) => x.cmp(y),
        // A file never mixes the two (that is an error); any fixed order keeps sorting total.
        (TimeValue::Seconds(_), TimeValue::Instant(_)) => Ordering::Less,
        (TimeValue::Instant(_), TimeValue::Seconds(_)) => Ordering::Greater,
    }
}

fn seconds_since(origin: jiff::Timestamp, ts: jiff::Timestamp) -> f64 {
    let ns = ts.as_nanosecond() - origin.as_nanosecond();
    // Split so whole seconds and the fraction are each converted exactly where possible.
    (ns / 1_000_000_000) as f64 + (ns % 1_000_000_000) as f64 / 1e9
}

/// Powers of ten that are exact in an f64.
const EXACT_POWERS_OF_TEN: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// The value of a cell written as a plain decimal (`-?digits[.digits]`, nothing around it), as
/// [`finite_number`] would read it, or `None` for any other text.
fn plain_decimal(bytes: &[u8]) -> Option<f64> {
    let (value, used) = decimal_prefix(bytes);
    if used == bytes.len() { value } else { None }
}

/// Reads the plain decimal `-?digits[.digits]` at the start of `bytes`, returning its value and
/// how many bytes it takes up. The value is `None` when there is no digit before a point, or
/// when the number is too long to convert here; the general parse then reads the cell.
///
/// With at most 2^53 as its digits and at most 22 of them after the point, the decimal is an
/// exact integer divided by an exact power of ten, and one division rounds that quotient
/// correctly, which is what `str::parse::<f64>` returns too. Exports nearly always write numbers
/// this way, so this skips decoding and trimming the cell and the general parse's work for them.
fn decimal_prefix(bytes: &[u8]) -> (Option<f64>, usize) {
    let negative = bytes.first() == Some(&b'-');
    let mut i = usize::from(negative);
    let mut mantissa: u64 = 0;
    let mut take_digits = |i: &mut usize| {
        let start = *i;
        while let Some(&b) = bytes.get(*i)
            && b.is_ascii_digit()
        {
            // Wraps only past 19 digits, which are refused below.
            mantissa = mantissa.wrapping_mul(10).wrapping_add(u64::from(b - b'0'));
            *i += 1;
        }
        *i - start
    };
    let whole = take_digits(&mut i);
    if whole == 0 {
        return (None, i);
    }
    let mut decimals = 0;
    if bytes.get(i) == Some(&b'.') {
        i += 1;
        decimals = take_digits(&mut i);
    }
    if whole + decimals > 19 || mantissa > 1 << 53 {
        return (None, i);
    }
    let Some(&scale) = EXACT_POWERS_OF_TEN.get(decimals) else {
        return (None, i);
    };
    let v = mantissa as f64 / scale;
    // As in `finite_number`, -0 becomes +0.
    (Some(if negative && v != 0.0 { -v } else { v }), i)
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
fn read_time(
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

enum ValueProblem {
    Blank,
    NotANumber,
    NotFinite,
}

fn read_value(text: &str) -> Result<f64, ValueProblem> {
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
enum ModeCell {
    Auto,
    /// Index into the distinct texts read as manual; `None` once there are too many to list.
    Manual(Option<usize>),
}

fn read_mode(text: &str, auto_values: &AutoValues, manual_texts: &mut Vec<String>) -> ModeCell {
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

/// A cell's text shortened for quoting back to the user.
fn excerpt(text: &str) -> String {
    if text.chars().count() <= EXCERPT_CHARS {
        text.to_owned()
    } else {
        let mut s: String = text.chars().take(EXCERPT_CHARS).collect();
        s.push('…');
        s
    }
}

fn plural(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("1 {noun}")
    } else {
        format!("{n} {noun}s")
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
    use super::*;

    fn load(text: &str) -> Result<Loaded, CsvError> {
        load_csv(text.as_bytes(), &CsvOptions::default())
    }

    fn load_ok(text: &str) -> Loaded {
        match load(text) {
            Ok(loaded) => loaded,
            Err(e) => panic!("expected the file to load, got: {e}"),
        }
    }

    fn with_mode(column: &str) -> CsvOptions {
        let mut opts = CsvOptions::default();
        opts.columns.mode = Some(column.to_owned());
        opts
    }

    fn has_note(report: &LoadReport, needle: &str) -> bool {
        report.notes().iter().any(|n| n.contains(needle))
    }

    #[test]
    fn a_clean_file_with_seconds_loads_unchanged_and_has_no_notes() {
        let l = load_ok("time,sp,pv,op\n0,50,49.5,30\n1.5,50,49.8,31\n3,55,50.1,40\n");
        assert_eq!(l.series.time_s(), &[0.0, 1.5, 3.0]);
        assert_eq!(l.series.sp(), &[50.0, 50.0, 55.0]);
        assert_eq!(l.series.pv(), &[49.5, 49.8, 50.1]);
        assert_eq!(l.series.op(), &[30.0, 31.0, 40.0]);
        assert!(!l.series.has_mode());
        assert_eq!(l.report.data_rows, 3);
        assert_eq!(l.report.rows_kept, 3);
        assert_eq!(l.report.time_origin, None);
        assert_eq!(l.report.delimiter, ',');
        assert_eq!(l.report.header_row, 1);
        assert!(l.report.notes().is_empty(), "{:?}", l.report.notes());
    }

    #[test]
    fn seconds_keep_their_origin() {
        let l = load_ok("time,sp,pv,op\n1000,1,1,1\n1010,1,1,1\n1020,1,1,1\n");
        assert_eq!(l.series.time_s(), &[1000.0, 1010.0, 1020.0]);
    }

    #[test]
    fn a_byte_order_mark_is_stripped_and_names_match_ignoring_case_and_spaces() {
        let l = load_ok("\u{feff} Time , SP,Pv ,oP\n0,1,2,3\n1,1,2,3\n2,1,2,3\n");
        assert!(l.report.bom_stripped);
        assert_eq!(l.report.columns.time, "Time");
        assert_eq!(l.report.columns.pv, "Pv");
        assert_eq!(l.series.op(), &[3.0, 3.0, 3.0]);
        assert!(has_note(&l.report, "byte-order mark"));
    }

    #[test]
    fn columns_can_be_renamed_and_unused_columns_are_ignored() {
        let opts = CsvOptions {
            columns: CsvColumns {
                time: "Timestamp".into(),
                sp: "TIC-101.SP".into(),
                pv: "TIC-101.PV".into(),
                op: "TIC-101.OUT".into(),
                mode: None,
            },
            ..CsvOptions::default()
        };
        let text = "note,timestamp,tic-101.out,tic-101.pv,tic-101.sp\n\
                    \"a, b\",0,10,20,30\nx,1,11,21,31\n,2,12,22,32\n";
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        assert_eq!(l.series.sp(), &[30.0, 31.0, 32.0]);
        assert_eq!(l.series.pv(), &[20.0, 21.0, 22.0]);
        assert_eq!(l.series.op(), &[10.0, 11.0, 12.0]);
        assert_eq!(l.report.columns.op, "tic-101.out");
    }

    #[test]
    fn a_missing_column_is_an_error_listing_the_header() {
        let err = load("time,sp,PV value,op\n0,1,2,3\n").unwrap_err();
        match &err {
            CsvError::MissingColumn {
                row, wanted, found, ..
            } => {
                assert_eq!(*row, 1);
                assert_eq!(wanted, "pv");
                assert_eq!(found, &["time", "sp", "PV value", "op"]);
            }
            other => panic!("unexpected error: {other}"),
        }
        let msg = err.to_string();
        assert!(msg.contains("\"PV value\""), "{msg}");
        assert!(msg.contains("process variable"), "{msg}");
    }

    #[test]
    fn a_configured_mode_column_that_is_missing_is_an_error() {
        let err = load_csv("time,sp,pv,op\n0,1,2,3\n".as_bytes(), &with_mode("mode")).unwrap_err();
        assert!(
            matches!(err, CsvError::MissingColumn { role: "mode", .. }),
            "{err}"
        );
    }

    #[test]
    fn a_column_named_twice_is_ambiguous() {
        let err = load("time,sp,pv,op,PV\n0,1,2,3,4\n").unwrap_err();
        match err {
            CsvError::AmbiguousColumn { positions, .. } => assert_eq!(positions, [3, 5]),
            other => panic!("unexpected error: {other}"),
        }
    }

    #[test]
    fn a_header_without_commas_but_with_semicolons_sets_the_delimiter() {
        let l = load_ok("time;sp;pv;op\n0;1;2;3\n1;1;2;4\n2;1;2;5\n");
        assert_eq!(l.report.delimiter, ';');
        assert_eq!(l.series.op(), &[3.0, 4.0, 5.0]);
        assert!(has_note(&l.report, "semicolons"));
    }

    #[test]
    fn a_header_without_commas_but_with_tabs_sets_the_delimiter() {
        let l = load_ok("time\tsp\tpv\top\n0\t1\t2\t3\n1\t1\t2\t4\n2\t1\t2\t5\n");
        assert_eq!(l.report.delimiter, '\t');
        assert_eq!(l.series.op(), &[3.0, 4.0, 5.0]);
        assert!(has_note(&l.report, "tabs"));
    }

    #[test]
    fn a_header_with_a_comma_keeps_the_comma_delimiter() {
        let l = load_ok("time,sp,pv,op,remark;x\n0,1,2,3,a;b\n1,1,2,3,\n2,1,2,3,\n");
        assert_eq!(l.report.delimiter, ',');
    }

    #[test]
    fn crlf_line_endings_and_blank_lines_before_the_header_keep_file_row_numbers() {
        let text = "\r\n\r\ntime,sp,pv,op\r\n0,1,2,3\r\n1,1,,3\r\n2,1,2,3\r\n3,1,2,3\r\n";
        let l = load_ok(text);
        assert_eq!(l.report.header_row, 3);
        assert_eq!(l.report.dropped.pv.blank.first_row, Some(5));
        assert!(has_note(
            &l.report,
            "skipped 2 blank lines before the header on row 3"
        ));
    }

    #[test]
    fn rows_are_named_by_file_line_across_blank_lines_quoted_line_breaks_and_lone_cr() {
        let cases = [
            ("time,sp,pv,op\n0,1,2,3\n\n\n1,1,,3\n2,1,2,3\n3,1,2,3\n", 5),
            (
                "time,sp,pv,op,note\n0,1,2,3,\"a\nb\"\n1,1,,3,x\n2,1,2,3,\n3,1,2,3,\n",
                4,
            ),
            ("time,sp,pv,op\r0,1,2,3\r1,1,,3\r2,1,2,3\r3,1,2,3", 3),
            (
                "\u{feff}\n\ntime,sp,pv,op\r\n\r\n0,1,2,3\r\n1,1,,3\r\n2,1,2,3\r\n3,1,2,3",
                6,
            ),
        ];
        for (text, row) in cases {
            let l = load_ok(text);
            assert_eq!(l.report.dropped.pv.blank.first_row, Some(row), "{text:?}");
        }
    }

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
    fn the_report_serializes_to_json_with_null_origin_for_seconds() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,1,2,3\n2,1,2,3\n");
        let json = serde_json::to_value(&l.report).unwrap();
        assert!(json["time_origin"].is_null());
        assert_eq!(json["delimiter"], ",");
        assert_eq!(json["rows_kept"], 3);
        assert_eq!(json["sample_interval_s"]["median"], 1.0);
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
    fn a_row_with_several_unusable_cells_counts_once_in_the_total() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,,,\n2,1,2,3\n3,1,2,3\n");
        let d = &l.report.dropped;
        assert_eq!(d.total, 1);
        assert_eq!(
            (d.sp.blank.rows, d.pv.blank.rows, d.op.blank.rows),
            (1, 1, 1)
        );
        assert!(has_note(&l.report, "1 row dropped in all"));
    }

    #[test]
    fn a_short_row_reads_its_missing_cells_as_blank() {
        let l = load_ok("time,sp,pv,op,remark\n0,1,2,3,a\n1,1,2\n2,1,2,3,x\n3,1,2,3\n");
        assert_eq!(l.report.short_rows.rows, 2);
        assert_eq!(l.report.short_rows.first_row, Some(3));
        assert_eq!(l.report.dropped.op.blank.first_row, Some(3));
        assert_eq!(l.series.time_s(), &[0.0, 2.0, 3.0]);
        assert!(has_note(&l.report, "fewer cells than the header"));
    }

    #[test]
    fn extra_blank_cells_are_ignored_but_extra_values_drop_the_row() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3,,\n1,1,2,3\n2,1,2,3,4\n3,1,2,3\n4,1,2,3, \n");
        assert_eq!(l.report.trailing_empty_cells.rows, 2);
        assert_eq!(l.report.dropped.too_many_cells.rows, 1);
        assert_eq!(l.report.dropped.too_many_cells.first_row, Some(4));
        assert_eq!(l.series.time_s(), &[0.0, 1.0, 3.0, 4.0]);
        assert!(has_note(
            &l.report,
            "more values than the header has columns"
        ));
    }

    #[test]
    fn rows_of_only_delimiters_are_skipped_and_counted() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n,,,\n1,1,2,3\n2,1,2,3\n , , ,\n");
        assert_eq!(l.report.empty_rows.rows, 2);
        assert_eq!(l.report.empty_rows.first_row, Some(3));
        assert_eq!(l.report.rows_kept, 3);
        assert!(has_note(&l.report, "skipped 2 empty rows (first at row 3)"));
    }

    #[test]
    fn a_repeated_header_is_skipped_and_counted() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,1,2,3\nTIME,SP,PV,OP\n2,1,2,3\n");
        assert_eq!(l.report.repeated_headers.rows, 1);
        assert_eq!(l.report.repeated_headers.first_row, Some(4));
        assert_eq!(l.series.len(), 3);
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
    fn a_blank_mode_drops_the_row_rather_than_carrying_the_last_mode_forward() {
        let text = "time,sp,pv,op,mode\n0,1,2,3,auto\n1,1,2,3,\n2,1,2,3,man\n3,1,2,3,auto\n";
        let l = load_csv(text.as_bytes(), &with_mode("mode")).unwrap();
        assert_eq!(l.report.dropped.mode_blank.rows, 1);
        assert_eq!(l.report.dropped.mode_blank.first_row, Some(3));
        assert_eq!(l.series.time_s(), &[0.0, 2.0, 3.0]);
        assert!(has_note(&l.report, "rather than guess the mode"));
    }

    #[test]
    fn unsorted_rows_are_sorted_stably_and_counted() {
        let l = load_ok("time,sp,pv,op\n2,1,2,30\n0,1,2,10\n3,1,2,40\n1,1,2,20\n");
        assert_eq!(l.series.time_s(), &[0.0, 1.0, 2.0, 3.0]);
        assert_eq!(l.series.op(), &[10.0, 20.0, 30.0, 40.0]);
        assert_eq!(l.report.out_of_order.rows, 2);
        assert_eq!(l.report.out_of_order.first_row, Some(3));
        assert!(has_note(
            &l.report,
            "2 rows out of time order (first at row 3)"
        ));
    }

    #[test]
    fn exact_duplicate_rows_keep_one_and_are_counted() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,1,2,3\n1,1,2,3\n1, 1.0 ,2,3\n2,1,2,3\n");
        assert_eq!(l.series.time_s(), &[0.0, 1.0, 2.0]);
        assert_eq!(l.report.exact_duplicates.rows, 2);
        assert_eq!(l.report.exact_duplicates.first_row, Some(3));
        assert_eq!(l.report.conflicting_duplicates.rows, 0);
    }

    #[test]
    fn conflicting_duplicates_keep_the_last_row_in_file_order() {
        let l = load_ok("time,sp,pv,op\n0,1,2,3\n1,1,2,10\n2,1,2,3\n1,1,2,20\n3,1,2,3\n");
        assert_eq!(l.series.time_s(), &[0.0, 1.0, 2.0, 3.0]);
        assert_eq!(l.series.op(), &[3.0, 20.0, 3.0, 3.0]);
        assert_eq!(l.report.conflicting_duplicates.rows, 1);
        assert_eq!(l.report.conflicting_duplicates.first_row, Some(3));
        assert_eq!(l.report.exact_duplicates.rows, 0);
        assert!(has_note(&l.report, "conflicting duplicates, kept the last"));
    }

    #[test]
    fn one_instant_written_with_different_offsets_is_a_duplicate() {
        let text = "time,sp,pv,op\n\
                    2024-05-01T08:00:00Z,1,2,3\n\
                    2024-05-01T10:00:00+02:00,1,2,3\n\
                    2024-05-01T08:00:01Z,1,2,3\n\
                    2024-05-01T08:00:02Z,1,2,3\n";
        let l = load_ok(text);
        assert_eq!(l.report.exact_duplicates.rows, 1);
        assert_eq!(l.series.time_s(), &[0.0, 1.0, 2.0]);
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

    #[test]
    fn too_few_usable_rows_is_an_error_carrying_the_reasons() {
        let err = load("time,sp,pv,op\n0,1,2,3\n1,1,Bad,3\n2,1,,3\n3,1,2,3\n").unwrap_err();
        let msg = err.to_string();
        match err {
            CsvError::TooFewRows {
                usable,
                needed,
                report,
            } => {
                assert_eq!((usable, needed), (2, MIN_ROWS));
                assert_eq!(report.data_rows, 4);
                assert_eq!(report.dropped.total, 2);
                assert_eq!(report.sample_interval_s.unwrap().min, 3.0);
            }
            other => panic!("unexpected error: {other}"),
        }
        assert!(
            msg.contains("only 2 usable rows out of 4 data rows"),
            "{msg}"
        );
        assert!(msg.contains("pv is not a number"), "{msg}");
    }

    #[test]
    fn a_header_without_data_is_too_few_rows() {
        let err = load("time,sp,pv,op\n").unwrap_err();
        assert!(
            matches!(err, CsvError::TooFewRows { usable: 0, .. }),
            "{err}"
        );
    }

    #[test]
    fn an_empty_file_is_an_error() {
        assert!(matches!(load(""), Err(CsvError::Empty)));
        assert!(matches!(load("\n\r\n"), Err(CsvError::Empty)));
        assert!(matches!(load("\u{feff}"), Err(CsvError::Empty)));
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

    #[test]
    fn a_missing_column_in_a_header_that_is_not_utf8_hints_at_the_encoding() {
        let bytes = b"time,sp,pv \xB0C,op\n0,1,2,3\n";
        let err = load_csv(&bytes[..], &CsvOptions::default()).unwrap_err();
        assert!(err.to_string().contains("not valid UTF-8"), "{err}");
    }

    #[test]
    fn timestamps_too_close_to_tell_apart_in_seconds_are_an_error() {
        let text = "time,sp,pv,op\n\
                    2023-05-01T00:00:00Z,1,2,3\n\
                    2024-05-01T00:00:00.000000001Z,1,2,3\n\
                    2024-05-01T00:00:00Z,1,2,3\n";
        let err = load(text).unwrap_err();
        assert!(
            matches!(
                err,
                CsvError::TimesTooClose {
                    first: 3,
                    second: 4
                }
            ),
            "{err}"
        );
    }

    #[test]
    fn a_read_failure_is_an_io_error_with_the_row() {
        struct Failing(&'static [u8]);
        impl Read for Failing {
            fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
                if self.0.is_empty() {
                    return Err(io::Error::other("disk gone"));
                }
                let n = self.0.len().min(buf.len());
                buf[..n].copy_from_slice(&self.0[..n]);
                self.0 = &self.0[n..];
                Ok(n)
            }
        }
        let err = load_csv(
            Failing(b"time,sp,pv,op\n0,1,2,3\n1,1,2,3\n"),
            &CsvOptions::default(),
        )
        .unwrap_err();
        match err {
            CsvError::Io { row, source } => {
                assert_eq!(row, 4);
                assert_eq!(source.to_string(), "disk gone");
            }
            other => panic!("unexpected error: {other}"),
        }
    }

    #[test]
    fn long_cells_are_shortened_when_quoted_back() {
        let long = "x".repeat(500);
        let err = load(&format!("time,sp,pv,op\n{long},1,2,3\n")).unwrap_err();
        let msg = err.to_string();
        assert!(msg.len() < 300, "{msg}");
        assert!(msg.contains('…'));
    }

    /// Everything a load produced, to compare two loads of the same file.
    fn outcome(result: Result<Loaded, CsvError>) -> String {
        match result {
            Ok(l) => format!("{:?}\n{:?}\n{:?}", l.series, l.report, l.report.notes()),
            Err(e) => format!("{e}\n{e:?}"),
        }
    }

    /// Files without quotes that exercise every handling, for checking that they load the same
    /// through the CSV reader.
    fn messy_files() -> Vec<(Vec<u8>, CsvOptions)> {
        let manual_texts: String = (0..20)
            .map(|i| format!("{i},1,2,3,man{}\n", i % 18))
            .fold(String::from("time,sp,pv,op,mode\n"), |text, row| {
                text + &row
            });
        let texts: Vec<(&[u8], bool)> = vec![
            (
                b"time,sp,pv,op\n0,1,2,3\n1,1,2,3\n2,1,2,3\n3,1,2,3\n",
                false,
            ),
            (
                b"\xEF\xBB\xBF\n\nTime;SP;PV;OP\r\n2;1;2;30\r\n\r\n0;1;2;10\r\n3;1,5;2;40\r\
                  1;1;2;20\r1;1;2;20\r4;;2;1\r5;1;x;1\r6;1;2;inf\r7;1;2;3;;\r8;1;2;3;9\r\
                  9;1;2\r10;1;2;3\r;;;\rtime;sp;pv;op\r10;1;2;4\r11; 1 ;2;3",
                false,
            ),
            (
                b"time,sp,pv,op,mode\n0,1,2,3,auto\n1,1,2,3,MAN\n2,1,2,3,\n3,1,2,3,0\n\
                  4,1,2,3,Cas\n5,1,2,3,MAN\n3,1,2,3,0\n6,1,2,3,2\n",
                true,
            ),
            (manual_texts.as_bytes(), true),
            (
                b"time,sp,pv,op\n2024-05-01T08:00:10Z,1,2,3\n2024-05-01 10:00:20+02:00,1,2,3\n\
                  2024-05-01T08:00:00.5z,1,2,3\n2024-05-01T08:00:10Z,1,2,3\n\
                  2024-05-01T08:00:30Z,1,2,3\n",
                false,
            ),
            (
                b"time,sp,pv,op\n0,1,2,3\n1,1,2,3\n2024-05-01T08:00:00Z,1,2,3\n3,1,2,3\n",
                false,
            ),
            (
                b"time,sp,pv,op\n2024-05-01T08:00:00Z,1,2,3\n\n1,1,2,3\n2,1,\xFF,3\n",
                false,
            ),
            (
                b"time,sp,pv,op\n0,1,2,3\n1,1,Bad,3\n2,1,2,3\nnoon,1,2,3\n4,1,2,3\nx,1,2,3\n",
                false,
            ),
            (
                b"time,sp,pv,op\n0,1,2,3\n1,\xFF,2,3\n2,1,2,3\n3,1,\xFF,3\n",
                false,
            ),
            (b"time,sp,pv,op\n0,1,2,3\n1,1,,3\n\n2,1,2,3\n", false),
            (b"time,sp,pv\n0,1,2\n", false),
        ];
        let mut files: Vec<(Vec<u8>, CsvOptions)> = texts
            .into_iter()
            .map(|(text, mode)| {
                let opts = if mode {
                    with_mode("mode")
                } else {
                    CsvOptions::default()
                };
                (text.to_vec(), opts)
            })
            .collect();
        // A manual text that only the second half brings in, with the first half full of others.
        let mut late_texts = String::from("time,sp,pv,op,mode\n");
        for i in 0..40 {
            late_texts.push_str(&format!("{i},1,2,3,m{}\n", if i < 20 { i % 15 } else { i }));
        }
        files.push((late_texts.into_bytes(), with_mode("mode")));
        files
    }

    /// `text` with the header's first cell in quotes, which sends it through the CSV reader.
    fn with_quoted_header_cell(text: &[u8]) -> Vec<u8> {
        let bom = if text.starts_with(UTF8_BOM) {
            UTF8_BOM.len()
        } else {
            0
        };
        let header = first_line(&text[bom..]);
        let delimiter = detect_delimiter(header);
        let start = bom
            + text[bom..]
                .iter()
                .position(|b| !matches!(b, b'\r' | b'\n'))
                .unwrap_or(0);
        let cell = header.split(|&b| b == delimiter).next().unwrap_or_default();
        let end = start + cell.len();
        [
            &text[..start],
            b"\"",
            &text[start..end],
            b"\"",
            &text[end..],
        ]
        .concat()
    }

    #[test]
    fn files_with_and_without_quotes_give_the_same_load() {
        for (text, opts) in messy_files() {
            let quoted = with_quoted_header_cell(&text);
            assert!(quoted.contains(&b'"') && !text.contains(&b'"'));
            assert_eq!(
                outcome(load_csv(&text[..], &opts)),
                outcome(load_csv(&quoted[..], &opts)),
                "{:?}",
                String::from_utf8_lossy(&text)
            );
        }
    }

    #[test]
    fn a_second_byte_order_mark_is_skipped_with_or_without_quotes() {
        let plain = "\u{feff}\u{feff}time,sp,pv,op\n0,1,2,3\n1,1,2,3\n2,1,2,3\n";
        let quoted = "\u{feff}\u{feff}time,\"sp\",pv,op\n0,1,2,3\n1,1,2,3\n2,1,2,3\n";
        let l = load_ok(plain);
        assert_eq!(l.report.columns.time, "time");
        assert_eq!(outcome(Ok(l)), outcome(load(quoted)));
    }

    /// A week-like file: `rows` rows every half second, with decimals as exports write them.
    fn large_file(rows: usize) -> (String, [Vec<f64>; 4]) {
        let mut text = String::from("time,sp,pv,op\n");
        let mut columns: [Vec<f64>; 4] = Default::default();
        for i in 0..rows {
            let cells = [
                format!("{}", i as f64 * 0.5 + 1000.0),
                format!("{}", 50 + (i / 5000) as i32 * 5),
                format!("{:.4}", 50.0 + (i as f64 * 0.01).sin() * 3.0),
                format!("{:.3}", -12.5 + (i as f64 * 0.003).cos() * 40.0),
            ];
            text.push_str(&cells.join(","));
            text.push('\n');
            for (column, cell) in columns.iter_mut().zip(&cells) {
                let v: f64 = cell.parse().unwrap();
                column.push(if v == 0.0 { 0.0 } else { v });
            }
        }
        (text, columns)
    }

    #[test]
    fn a_large_clean_file_loads_exactly_the_values_written() {
        let (text, [time, sp, pv, op]) = large_file(60_000);
        let l = load_ok(&text);
        assert_eq!(l.series.time_s(), &time[..]);
        assert_eq!(l.series.sp(), &sp[..]);
        assert_eq!(l.series.pv(), &pv[..]);
        assert_eq!(l.series.op(), &op[..]);
        assert_eq!((l.report.data_rows, l.report.rows_kept), (60_000, 60_000));
        assert!(l.report.notes().is_empty(), "{:?}", l.report.notes());
        let iv = l.report.sample_interval_s.unwrap();
        assert_eq!((iv.min, iv.median, iv.max), (0.5, 0.5, 0.5));
        // The same file through the CSV reader, as a file with quotes would go.
        let quoted = text.replacen("sp", "\"sp\"", 1);
        assert_eq!(outcome(load(&quoted)), outcome(Ok(l)));
    }

    #[test]
    fn a_large_file_with_disorder_and_repeats_is_sorted_and_counted() {
        let (text, [time, _, _, op]) = large_file(60_000);
        let mut lines: Vec<&str> = text.lines().collect();
        // Swap two rows far apart, and repeat one row exactly and another with a new value.
        lines.swap(10, 50_000);
        let repeat = lines[30_000].to_owned();
        let conflicting = format!("{},1,2,3", lines[40_000].split(',').next().unwrap());
        lines.insert(45_000, &conflicting);
        lines.push(&repeat);
        let text = lines.join("\n");
        let l = load_ok(&text);
        assert_eq!(l.series.time_s(), &time[..]);
        let mut expected_op = op.clone();
        expected_op[39_999] = 3.0;
        assert_eq!(l.series.op(), &expected_op[..]);
        // Rows 10 to 49,998 and 9 come after 49,999; the two added rows come late too.
        assert_eq!(l.report.out_of_order.rows, 49_990 + 2);
        assert_eq!(l.report.exact_duplicates.rows, 1);
        assert_eq!(l.report.conflicting_duplicates.rows, 1);
        assert_eq!(l.report.conflicting_duplicates.first_row, Some(40_001));
        assert_rows_accounted(&l.report);
    }

    #[test]
    fn plain_decimals_are_read_without_the_general_parse_only_when_exact() {
        let cases: [(&str, Option<f64>, usize); 12] = [
            ("12", Some(12.0), 2),
            ("-0.125", Some(-0.125), 6),
            ("-0", Some(0.0), 2),
            ("5.", Some(5.0), 2),
            ("49.9746,", Some(49.9746), 7),
            (".5", None, 0),
            ("-", None, 1),
            ("1.2.3", Some(1.2), 3),
            ("9007199254740993", None, 16),
            ("12345678901234567890", None, 20),
            ("0.00000000000000000001", None, 22),
            ("1e5", Some(1.0), 1),
        ];
        for (text, value, used) in cases {
            assert_eq!(decimal_prefix(text.as_bytes()), (value, used), "{text:?}");
        }
        assert_eq!(plain_decimal(b"1e5"), None);
        assert_eq!(plain_decimal(b" 1"), None);
        assert_eq!(plain_decimal(b"9007199254740992"), Some(9007199254740992.0));
    }

    /// Every data row ends up in exactly one place; see [`LoadReport`].
    fn assert_rows_accounted(r: &LoadReport) {
        let placed = r.empty_rows.rows
            + r.repeated_headers.rows
            + r.dropped.total
            + r.exact_duplicates.rows
            + r.conflicting_duplicates.rows
            + r.rows_kept;
        assert_eq!(placed, r.data_rows, "{r:#?}");
    }

    mod properties {
        use super::*;
        use proptest::prelude::*;

        fn cell() -> impl Strategy<Value = String> {
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
                    "\u{feff}",
                    "é",
                    "\r",
                ])
                .prop_map(str::to_owned),
            ]
        }

        fn csvish() -> impl Strategy<Value = String> {
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
            }

            #[test]
            fn loading_never_panics_on_csv_like_text(text in csvish()) {
                check_outcome(load_csv(text.as_bytes(), &CsvOptions::default()));
                check_outcome(load_csv(text.as_bytes(), &with_mode("mode")));
            }

            #[test]
            fn loading_never_panics_on_text_from_a_csv_alphabet(
                text in "[0-9a-zA-Z ,;\t\r\n\".:+eE-]{0,400}"
            ) {
                check_outcome(load(&format!("time,sp,pv,op\n{text}")));
                check_outcome(load(&text));
            }

            #[test]
            fn files_without_quotes_split_as_the_csv_reader_splits_them(
                text in csvish(),
                bytes in prop::collection::vec(any::<u8>(), 0..300),
            ) {
                let mut prefixed = b"time,sp,pv,op,mode\n".to_vec();
                prefixed.extend(bytes.into_iter().filter(|&b| b != b'"'));
                for file in [text.replace('"', "").into_bytes(), prefixed] {
                    let opts = with_mode("mode");
                    let delimiter = detect_delimiter(first_line(&file));
                    prop_assert_eq!(
                        outcome(load_plain(&file, false, delimiter, &opts)),
                        outcome(load_quoted(&file, false, delimiter, &opts))
                    );
                }
            }

            #[test]
            fn plain_decimals_read_as_the_general_parse_reads_them(
                text in "-?[0-9]{1,21}(\\.[0-9]{0,23})?",
            ) {
                let general = text.parse::<f64>().unwrap();
                let general = if general == 0.0 { 0.0 } else { general };
                match plain_decimal(text.as_bytes()) {
                    Some(v) => prop_assert_eq!(v.to_bits(), general.to_bits()),
                    // Only numbers with more digits than an f64 holds exactly (2^53 has 16) go
                    // to the general parse.
                    None => prop_assert!(text.bytes().filter(u8::is_ascii_digit).count() >= 16),
                }
            }

            #[test]
            fn clean_rows_in_any_order_load_as_their_sorted_values(
                steps in prop::collection::vec(
                    (0.001f64..100.0, -1e3f64..1e3, -1e3f64..1e3, 0.0f64..100.0),
                    MIN_ROWS..40,
                ),
                start in -1e6f64..1e6,
                order in Just((0..40usize).collect::<Vec<_>>()).prop_shuffle(),
            ) {
                let mut t = start;
                let rows: Vec<(f64, f64, f64, f64)> = steps
                    .iter()
                    .map(|&(dt, sp, pv, op)| {
                        t += dt;
                        (t, sp, pv, op)
                    })
                    .collect();
                // Shuffle with the generated permutation restricted to this many rows.
                let perm: Vec<usize> = order.into_iter().filter(|&i| i < rows.len()).collect();
                let mut text = String::from("time,sp,pv,op\n");
                for &i in &perm {
                    let (t, sp, pv, op) = rows[i];
                    text.push_str(&format!("{t},{sp},{pv},{op}\n"));
                }
                let l = load(&text).unwrap();
                let times: Vec<f64> = rows.iter().map(|r| r.0).collect();
                let sps: Vec<f64> = rows.iter().map(|r| r.1).collect();
                let pvs: Vec<f64> = rows.iter().map(|r| r.2).collect();
                let ops: Vec<f64> = rows.iter().map(|r| r.3).collect();
                prop_assert_eq!(l.series.time_s(), &times[..]);
                prop_assert_eq!(l.series.sp(), &sps[..]);
                prop_assert_eq!(l.series.pv(), &pvs[..]);
                prop_assert_eq!(l.series.op(), &ops[..]);
                let sorted = perm.windows(2).all(|w| w[0] < w[1]);
                prop_assert_eq!(l.report.out_of_order.rows == 0, sorted);
                prop_assert_eq!(l.report.rows_kept, rows.len());
            }
        }
    }
}
