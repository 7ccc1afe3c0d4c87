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
//!   be a guess. A value in [`CsvOptions::auto_values`] (any case) or a non-zero number means
//!   automatic; anything else means manual, and the report lists the texts it read as manual.
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

use crate::analysis::{Series, SeriesError};

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
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CsvOptions {
    pub columns: CsvColumns,
    /// Mode texts meaning automatic (or cascade), matched ignoring case and surrounding
    /// whitespace. Any finite non-zero number also means automatic.
    pub auto_values: Vec<String>,
}

impl Default for CsvOptions {
    fn default() -> Self {
        CsvOptions {
            columns: CsvColumns::default(),
            auto_values: ["auto", "cas", "1", "true", "on"]
                .into_iter()
                .map(str::to_owned)
                .collect(),
        }
    }
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
        let mut d: Vec<f64> = time_s.windows(2).map(|w| w[1] - w[0]).collect();
        if d.is_empty() {
            return None;
        }
        d.sort_by(f64::total_cmp);
        let n = d.len();
        let median = if n % 2 == 1 {
            d[n / 2]
        } else {
            (d[n / 2 - 1] + d[n / 2]) / 2.0
        };
        Some(IntervalStats {
            min: d[0],
            median,
            max: d[n - 1],
        })
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
    let delimiter = detect_delimiter(text.first_line());
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .delimiter(delimiter)
        .from_reader(&text.bytes[..]);

    let mut record = csv::ByteRecord::new();
    if !next_record(&mut rdr, &mut record, &text)? {
        return Err(CsvError::Empty);
    }
    let layout = Layout::from_header(&record, text.row_of(&record), &opts.columns)?;
    let auto_values: Vec<String> = opts
        .auto_values
        .iter()
        .map(|v| v.trim().to_lowercase())
        .collect();

    let mut report = LoadReport {
        header_row: layout.row,
        columns: layout.column_names(),
        delimiter: char::from(delimiter),
        bom_stripped: text.bom_stripped,
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
    };
    let mut time_kind: Option<(TimeFormat, u64)> = None;
    let mut manual_texts: Vec<String> = Vec::new();
    let mut rows: Vec<Row> = Vec::new();

    while next_record(&mut rdr, &mut record, &text)? {
        let row = text.row_of(&record);
        report.data_rows += 1;

        if record.iter().all(is_blank) {
            report.empty_rows.add(row);
            continue;
        }
        let width = layout.names.len();
        if record.len() < width {
            report.short_rows.add(row);
        } else if record.len() > width {
            if record.iter().skip(width).all(is_blank) {
                report.trailing_empty_cells.add(row);
            } else {
                report.dropped.too_many_cells.add(row);
                report.dropped.total += 1;
                continue;
            }
        }

        let time_text = layout.cell(&record, layout.time, row)?;
        let time = match read_time(time_text, &mut time_kind, row, &layout.names[layout.time]) {
            Ok(time) => time,
            // Checked only here, where the time failed, to keep the common path cheap.
            Err(_) if layout.is_header_again(&record) => {
                report.repeated_headers.add(row);
                continue;
            }
            Err(e) => return Err(e),
        };

        let mut usable = true;
        let values = [
            (layout.sp, &mut report.dropped.sp),
            (layout.pv, &mut report.dropped.pv),
            (layout.op, &mut report.dropped.op),
        ]
        .map(|(col, drops)| -> Result<f64, CsvError> {
            let text = layout.cell(&record, col, row)?;
            Ok(match read_value(text) {
                Ok(v) => v,
                Err(reason) => {
                    usable = false;
                    match reason {
                        ValueProblem::Blank => drops.blank.add(row),
                        ValueProblem::NotANumber => drops.not_a_number.add_with_example(row, text),
                        ValueProblem::NotFinite => drops.not_finite.add_with_example(row, text),
                    }
                    f64::NAN
                }
            })
        });
        let [sp, pv, op] = values;
        let (sp, pv, op) = (sp?, pv?, op?);

        let mode = match layout.mode {
            None => None,
            Some(col) => {
                let text = layout.cell(&record, col, row)?;
                if text.is_empty() {
                    report.dropped.mode_blank.add(row);
                    usable = false;
                    None
                } else {
                    Some(read_mode(text, &auto_values, &mut manual_texts))
                }
            }
        };

        if !usable {
            report.dropped.total += 1;
            continue;
        }
        rows.push(Row {
            row,
            time,
            sp,
            pv,
            op,
            mode,
        });
    }

    // Out of order: earlier than the latest time seen above it in the file.
    let mut latest: Option<TimeValue> = None;
    for r in &rows {
        match latest {
            Some(l) if cmp_time(&r.time, &l) == Ordering::Less => report.out_of_order.add(r.row),
            _ => latest = Some(r.time),
        }
    }
    // Stable, so rows sharing a time stay in file order and "last" below means last in the file.
    rows.sort_by(|a, b| cmp_time(&a.time, &b.time));
    let rows = dedup(rows, &mut report);

    if layout.mode.is_some() {
        let mut summary = ModeSummary::default();
        for r in &rows {
            match r.mode {
                Some(ModeCell::Auto) => summary.auto_rows += 1,
                Some(ModeCell::Manual(text)) => {
                    summary.manual_rows += 1;
                    let key = text.map_or(OTHER_MANUAL_TEXTS, |i| manual_texts[i].as_str());
                    *summary.read_as_manual.entry(key.to_owned()).or_default() += 1;
                }
                None => {}
            }
        }
        report.mode = Some(summary);
    }

    let origin = match rows.first().map(|r| r.time) {
        Some(TimeValue::Instant(ts)) => Some(ts),
        _ => None,
    };
    report.time_origin = origin;
    let time_s: Vec<f64> = rows
        .iter()
        .map(|r| match r.time {
            TimeValue::Seconds(s) => s,
            TimeValue::Instant(ts) => seconds_since(origin.unwrap_or(ts), ts),
        })
        .collect();
    // Two distinct timestamps nanoseconds apart can round to the same f64 far from the origin.
    if let Some(i) = time_s.windows(2).position(|w| w[1] <= w[0]) {
        return Err(CsvError::TimesTooClose {
            first: rows[i].row.min(rows[i + 1].row),
            second: rows[i].row.max(rows[i + 1].row),
        });
    }
    report.rows_kept = rows.len();
    report.sample_interval_s = IntervalStats::of(&time_s);

    if rows.len() < MIN_ROWS {
        return Err(CsvError::TooFewRows {
            usable: rows.len(),
            needed: MIN_ROWS,
            report: Box::new(report),
        });
    }

    let auto = layout.mode.map(|_| {
        rows.iter()
            .map(|r| matches!(r.mode, Some(ModeCell::Auto)))
            .collect()
    });
    let series = Series::new(
        time_s,
        rows.iter().map(|r| r.sp).collect(),
        rows.iter().map(|r| r.pv).collect(),
        rows.iter().map(|r| r.op).collect(),
        auto,
    )?;
    Ok(Loaded { series, report })
}

/// The whole file in memory, with what is needed to name rows by their line in the file.
///
/// The CSV reader's own line count drifts when blank lines come before a record, so rows are
/// numbered here from byte offsets instead. Holding the file costs little: the series needs all
/// rows in memory anyway.
struct Text {
    /// The file's bytes, without a leading byte-order mark.
    bytes: Vec<u8>,
    bom_stripped: bool,
    /// Offset where each line starts; lines end at "\n", "\r\n" or a lone "\r".
    line_starts: Vec<usize>,
}

impl Text {
    fn read<R: Read>(mut reader: R) -> Result<Text, CsvError> {
        let mut bytes = Vec::new();
        if let Err(source) = reader.read_to_end(&mut bytes) {
            // What was read before the failure is in `bytes`, so the row can still be named.
            let row = line_starts(&bytes).len() as u64;
            return Err(CsvError::Io { row, source });
        }
        let bom_stripped = bytes.starts_with(UTF8_BOM);
        if bom_stripped {
            bytes.drain(..UTF8_BOM.len());
        }
        let line_starts = line_starts(&bytes);
        Ok(Text {
            bytes,
            bom_stripped,
            line_starts,
        })
    }

    /// The 1-based line holding byte `offset`.
    fn row_at(&self, offset: usize) -> u64 {
        self.line_starts.partition_point(|&s| s <= offset) as u64
    }

    /// The row a record starts on. Its recorded offset may sit before line breaks the reader
    /// skipped (blank lines), so those are stepped over first.
    fn row_of(&self, record: &csv::ByteRecord) -> u64 {
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

    /// The first line with any content, without its line break: the header.
    fn first_line(&self) -> &[u8] {
        let ends = self.line_starts.iter().skip(1).copied();
        self.line_starts
            .iter()
            .zip(ends.chain(std::iter::once(self.bytes.len())))
            .map(|(&a, b)| trim_line_end(&self.bytes[a..b]))
            .find(|line| !line.is_empty())
            .unwrap_or_default()
    }
}

fn line_starts(bytes: &[u8]) -> Vec<usize> {
    let mut starts = vec![0];
    for (i, &b) in bytes.iter().enumerate() {
        let lone_cr = b == b'\r' && bytes.get(i + 1) != Some(&b'\n');
        if b == b'\n' || lone_cr {
            starts.push(i + 1);
        }
    }
    starts
}

fn trim_line_end(line: &[u8]) -> &[u8] {
    let end = line
        .iter()
        .rposition(|&b| b != b'\n' && b != b'\r')
        .map_or(0, |i| i + 1);
    &line[..end]
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

fn next_record(
    rdr: &mut csv::Reader<&[u8]>,
    record: &mut csv::ByteRecord,
    text: &Text,
) -> Result<bool, CsvError> {
    rdr.read_byte_record(record).map_err(|e| {
        let at = e.position().unwrap_or(rdr.position()).byte();
        let row = text.row_at(at as usize);
        match e.into_kind() {
            csv::ErrorKind::Io(source) => CsvError::Io { row, source },
            other => CsvError::Malformed {
                row,
                message: format!("{other:?}"),
            },
        }
    })
}

/// Blank as [`Layout::cell`] would read it: nothing but whitespace.
fn is_blank(cell: &[u8]) -> bool {
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
    fn from_header(
        record: &csv::ByteRecord,
        row: u64,
        wanted: &CsvColumns,
    ) -> Result<Layout, CsvError> {
        let header_not_utf8 = record.iter().any(|c| std::str::from_utf8(c).is_err());
        let names: Vec<String> = record
            .iter()
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

    fn is_header_again(&self, record: &csv::ByteRecord) -> bool {
        record.len() == self.lower.len()
            && record
                .iter()
                .zip(&self.lower)
                .all(|(c, name)| String::from_utf8_lossy(c).trim().to_lowercase() == *name)
    }

    /// The trimmed text of one cell; a cell missing from a short row reads as blank.
    fn cell<'r>(
        &self,
        record: &'r csv::ByteRecord,
        col: usize,
        row: u64,
    ) -> Result<&'r str, CsvError> {
        match record.get(col) {
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

/// A finite number, with -0 made +0 so that equal times compare equal when sorted.
fn finite_number(text: &str) -> Option<Result<f64, ()>> {
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

fn read_mode(text: &str, auto_values: &[String], manual_texts: &mut Vec<String>) -> ModeCell {
    let lower = text.to_lowercase();
    let numeric_auto = matches!(finite_number(text), Some(Ok(v)) if v != 0.0);
    if numeric_auto || auto_values.contains(&lower) {
        return ModeCell::Auto;
    }
    let key = excerpt(text);
    let index = match manual_texts.iter().position(|t| *t == key) {
        Some(i) => Some(i),
        None if manual_texts.len() < MAX_MANUAL_TEXTS => {
            manual_texts.push(key);
            Some(manual_texts.len() - 1)
        }
        None => None,
    };
    ModeCell::Manual(index)
}

struct Row {
    row: u64,
    time: TimeValue,
    sp: f64,
    pv: f64,
    op: f64,
    mode: Option<ModeCell>,
}

impl Row {
    fn same_values(&self, other: &Row) -> bool {
        let auto = |m: Option<ModeCell>| m.map(|m| m == ModeCell::Auto);
        self.sp == other.sp
            && self.pv == other.pv
            && self.op == other.op
            && auto(self.mode) == auto(other.mode)
    }
}

/// Keeps the last row of each run of equal times (rows are sorted stably, so the last in the
/// file); the others count as exact duplicates when their values match it, conflicting when not.
fn dedup(rows: Vec<Row>, report: &mut LoadReport) -> Vec<Row> {
    let mut kept: Vec<Row> = Vec::with_capacity(rows.len());
    let mut run: Vec<Row> = Vec::new();
    let mut flush = |run: &mut Vec<Row>, kept: &mut Vec<Row>| {
        if let Some(last) = run.pop() {
            for r in run.drain(..) {
                if r.same_values(&last) {
                    report.exact_duplicates.add(r.row);
                } else {
                    report.conflicting_duplicates.add(r.row);
                }
            }
            kept.push(last);
        }
    };
    for r in rows {
        if run
            .last()
            .is_some_and(|prev| cmp_time(&prev.time, &r.time) != Ordering::Equal)
        {
            flush(&mut run, &mut kept);
        }
        run.push(r);
    }
    flush(&mut run, &mut kept);
    kept
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
        opts.auto_values = vec!["Automatic".into()];
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
