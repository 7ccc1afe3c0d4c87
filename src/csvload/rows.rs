//! Applying the policy row by row, then putting the rows kept in time order (resolving
//! repeated times) and finishing them into a [`Series`].

use std::cmp::Ordering;

use super::cells::{Cells, ModeCell, ValueProblem, is_blank, read_mode, read_value};
use super::error::CsvError;
use super::header::Layout;
use super::report::{IntervalStats, LoadReport, ModeSummary, OTHER_MANUAL_TEXTS, Tally};
use super::times::{TimeReader, TimeValue, cmp_time, seconds_since};
use super::{CsvOptions, Loaded, MIN_ROWS};
use crate::analysis::{AutoValues, Series};

/// What the loader knows before the first data row.
pub(super) struct Start {
    pub(super) bom_stripped: bool,
    pub(super) delimiter: u8,
    /// About how many rows to expect; only sizes the columns.
    pub(super) rows_hint: usize,
}

/// Applies the module's policy to one data row at a time, then orders and checks the rows kept.
pub(super) struct Loader {
    layout: Layout,
    /// Which mode values mean automatic.
    auto_values: AutoValues,
    report: LoadReport,
    /// Reads the time column, holding the file's time format.
    times: TimeReader,
    /// Whether numbers may be written with a decimal comma.
    comma: bool,
    /// Distinct texts read as manual, in the order first met.
    manual_texts: Vec<String>,
    kept: Kept,
}

impl Loader {
    pub(super) fn new<C: Cells + ?Sized>(
        header: &C,
        row: u64,
        start: Start,
        opts: &CsvOptions,
    ) -> Result<Loader, CsvError> {
        let layout = Layout::from_header(header, row, &opts.columns)?;
        let auto_values = opts.auto_values.clone();
        let report = LoadReport::empty(
            layout.row,
            layout.column_names(),
            char::from(start.delimiter),
            start.bom_stripped,
        );
        let kept = Kept::with_capacity(start.rows_hint, layout.mode.is_some());
        let comma = opts.decimal_comma || start.delimiter != b',';
        Ok(Loader {
            layout,
            auto_values,
            report,
            times: TimeReader::new(opts, comma),
            comma,
            manual_texts: Vec::new(),
            kept,
        })
    }

    /// Handles one data row: skips, drops or keeps it, counting what it did.
    pub(super) fn take<C: Cells + ?Sized>(&mut self, record: &C, row: u64) -> Result<(), CsvError> {
        self.report.data_rows += 1;
        if !self.fits(record, row) {
            return Ok(());
        }
        let Some(time) = self.time_of(record, row)? else {
            return Ok(());
        };
        // Every value and the mode are read before deciding, so each unusable one is counted.
        let mut comma = self.times.take_comma();
        let values = self.values_of(record, row, &mut comma)?;
        if comma {
            self.report.decimal_commas.add(row);
        }
        let mode = self.mode_of(record, row)?;
        match (values, mode) {
            (Some(values), Some(mode)) => self.kept.push(row, time, values, mode),
            _ => self.report.dropped.total += 1,
        }
        Ok(())
    }

    /// Whether the row's shape lets it be read. An all-blank row is skipped and a row with
    /// values beyond the header's columns dropped; a short row, or one with only blank cells
    /// beyond the header, is read and counted.
    fn fits<C: Cells + ?Sized>(&mut self, record: &C, row: u64) -> bool {
        let report = &mut self.report;
        if record.cells().all(is_blank) {
            report.empty_rows.add(row);
            return false;
        }
        let width = self.layout.names.len();
        let len = record.cell_count();
        if len < width {
            report.short_rows.add(row);
        } else if len > width {
            if record.cells().skip(width).all(is_blank) {
                report.trailing_empty_cells.add(row);
            } else {
                report.dropped.too_many_cells.add(row);
                report.dropped.total += 1;
                return false;
            }
        }
        true
    }

    /// The row's time, or `None` for a row that repeats the header (counted); fixes the file's
    /// time format at the first time.
    fn time_of<C: Cells + ?Sized>(
        &mut self,
        record: &C,
        row: u64,
    ) -> Result<Option<TimeValue>, CsvError> {
        let layout = &self.layout;
        // A plain decimal fits a file whose times are numbers in its unit; everything else,
        // and any problem, takes the general route.
        let number = record.plain_number_at(layout.time);
        if let Some(time) = number.and_then(|v| self.times.plain_number(v, row)) {
            return Ok(Some(time));
        }
        let text = layout.cell(record, layout.time, row)?;
        let column = &layout.names[layout.time];
        match self.times.read(text, row, column, &mut self.report) {
            Ok(time) => Ok(Some(time)),
            // Checked only here, where the time failed, to keep the common path cheap.
            Err(_) if layout.is_header_again(record) => {
                self.report.repeated_headers.add(row);
                Ok(None)
            }
            Err(e) => Err(e),
        }
    }

    /// The row's SP, PV and OP, or `None` when any of them is unusable; each unusable one is
    /// counted by column and reason.
    /// Sets `comma` when any of them was written with a decimal comma.
    fn values_of<C: Cells + ?Sized>(
        &mut self,
        record: &C,
        row: u64,
        comma: &mut bool,
    ) -> Result<Option<[f64; 3]>, CsvError> {
        let layout = &self.layout;
        let dropped = &mut self.report.dropped;
        let mut usable = true;
        let mut values = [0.0; 3];
        let columns = [
            (layout.sp, &mut dropped.sp),
            (layout.pv, &mut dropped.pv),
            (layout.op, &mut dropped.op),
        ];
        for (value, (col, drops)) in values.iter_mut().zip(columns) {
            if let Some(v) = record.plain_number_at(col) {
                *value = v;
                continue;
            }
            let text = layout.cell(record, col, row)?;
            match read_value(text, self.comma) {
                Ok(v) => {
                    *value = v.value;
                    *comma |= v.comma;
                }
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
        Ok(usable.then_some(values))
    }

    /// The row's mode: `Some(None)` without a mode column, `None` when the cell is blank
    /// (counted), since carrying the last mode forward would be a guess.
    fn mode_of<C: Cells + ?Sized>(
        &mut self,
        record: &C,
        row: u64,
    ) -> Result<Option<Option<ModeCell>>, CsvError> {
        let Some(col) = self.layout.mode else {
            return Ok(Some(None));
        };
        let text = self.layout.cell(record, col, row)?;
        if text.is_empty() {
            self.report.dropped.mode_blank.add(row);
            return Ok(None);
        }
        let mode = read_mode(text, &self.auto_values, &mut self.manual_texts);
        Ok(Some(Some(mode)))
    }

    /// Orders the rows kept by time, resolves repeated times and builds the series.
    pub(super) fn finish(self) -> Result<Loaded, CsvError> {
        let Loader {
            layout,
            mut report,
            manual_texts,
            kept,
            times,
            ..
        } = self;
        times.fill_report(&mut report);
        let kept = kept.in_time_order(&mut report);
        if layout.mode.is_some() {
            report.mode = Some(mode_summary(&kept.mode, &manual_texts));
        }
        let Kept {
            row: rows,
            time,
            sp,
            pv,
            op,
            mode,
        } = kept;
        let time_s = time.into_seconds(&mut report.time_origin);
        check_times_apart(&time_s, &rows)?;
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

/// How the mode column was read over the rows kept, with `manual_texts` the distinct texts
/// read as manual that the modes point into.
fn mode_summary(modes: &[ModeCell], manual_texts: &[String]) -> ModeSummary {
    let mut summary = ModeSummary::default();
    for mode in modes {
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
    summary
}

/// Refuses two distinct timestamps that came out as the same seconds: nanoseconds apart, they
/// can round to the same f64 far from the origin.
fn check_times_apart(time_s: &[f64], rows: &[u64]) -> Result<(), CsvError> {
    match time_s.windows(2).position(|w| w[1] <= w[0]) {
        Some(i) => Err(CsvError::TimesTooClose {
            first: rows[i].min(rows[i + 1]),
            second: rows[i].max(rows[i + 1]),
        }),
        None => Ok(()),
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

    /// The series' time column. RFC 3339 times become seconds since the earliest, which is put
    /// in `origin`; seconds are kept as they are.
    fn into_seconds(self, origin: &mut Option<jiff::Timestamp>) -> Vec<f64> {
        match self {
            Times::Seconds(seconds) => seconds,
            Times::Any(times) => {
                let first = match times.first() {
                    Some(TimeValue::Instant(ts)) => Some(*ts),
                    _ => None,
                };
                *origin = first;
                times
                    .iter()
                    .map(|t| match *t {
                        TimeValue::Seconds(s) => s,
                        TimeValue::Instant(ts) => seconds_since(first.unwrap_or(ts), ts),
                    })
                    .collect()
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::csvload::test_support::*;

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

    mod properties {
        use super::*;
        use proptest::prelude::*;

        proptest! {
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
