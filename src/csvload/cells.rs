//! Reading one cell: the cells of a record whichever way it was split, plain decimals read
//! without the general parse, numbers (with a decimal point or comma), values and the mode.
//! Times are read in [`super::times`].

use super::decimal::{comma_decimal, plain_decimal};
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

/// A number read from a cell, and whether it was written with a decimal comma.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Number {
    pub(super) value: f64,
    pub(super) comma: bool,
}

/// A finite number, with -0 made +0 so that equal times compare equal when sorted; `Err` for
/// NaN or infinity, `None` for text that is not a number. With `comma`, a decimal comma
/// (`12,5`) is read too, exactly as the same number with a point.
pub(super) fn finite_number(text: &str, comma: bool) -> Option<Result<Number, ()>> {
    let point = |value| {
        Some(Ok(Number {
            value,
            comma: false,
        }))
    };
    if let Some(v) = plain_decimal(text.as_bytes()) {
        return point(v);
    }
    if comma && let Some(value) = comma_decimal(text.as_bytes()) {
        return Some(Ok(Number { value, comma: true }));
    }
    let v = text.parse::<f64>().ok()?;
    if v.is_finite() {
        point(if v == 0.0 { 0.0 } else { v })
    } else {
        Some(Err(()))
    }
}

pub(super) enum ValueProblem {
    Blank,
    NotANumber,
    NotFinite,
}

/// Reads one value cell (trimmed); with `comma`, decimal commas are read too.
pub(super) fn read_value(text: &str, comma: bool) -> Result<Number, ValueProblem> {
    if text.is_empty() {
        return Err(ValueProblem::Blank);
    }
    match finite_number(text, comma) {
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
    fn decimal_commas_in_a_semicolon_file_are_read_exactly_and_counted() {
        let commas = "time;sp;pv;op\n0;50;49,9746;30,125\n0,5;50;50,0001;-12,5\n\
                      1;50,5;Bad;1\n1,5;55;51;40\n";
        let l = load_ok(commas);
        let points = load_ok(&commas.replace(',', "."));
        assert_eq!(l.series.time_s(), points.series.time_s());
        assert_eq!(l.series.pv(), points.series.pv());
        assert_eq!(l.series.op(), &[30.125, -12.5, 40.0]);
        assert_eq!(l.series.pv(), &[49.9746, 50.0001, 51.0]);
        assert_eq!(
            (
                l.report.decimal_commas.rows,
                l.report.decimal_commas.first_row
            ),
            (4, Some(2))
        );
        assert_eq!(l.report.dropped.pv.not_a_number.rows, 1);
        assert_note(
            &l.report,
            "read decimal commas (such as 12,5 for 12.5) in 4 rows",
        );
        assert_eq!(points.report.decimal_commas.rows, 0);
        let tabs = load_ok(&commas.replace(';', "\t"));
        assert_eq!(tabs.series.pv(), l.series.pv());
    }

    #[test]
    fn in_a_comma_separated_file_decimal_commas_are_read_only_when_asked() {
        let text = "time,sp,pv,op\n0,1,\"2,5\",3\n1,1,\"2,75\",3\n2,1,2,3\n3,1,2,3\n4,1,2,3\n";
        let l = load_ok(text);
        assert_eq!(l.report.dropped.pv.not_a_number.rows, 2);
        assert_eq!(l.report.decimal_commas.rows, 0);
        let opts = CsvOptions {
            decimal_comma: true,
            ..CsvOptions::default()
        };
        let l = load_csv(text.as_bytes(), &opts).unwrap();
        assert_eq!(l.series.pv(), &[2.5, 2.75, 2.0, 2.0, 2.0]);
        assert_eq!(l.report.decimal_commas.rows, 2);
    }

    #[test]
    fn digit_grouping_is_not_read_as_a_decimal_comma() {
        let l = load_ok("time;sp;pv;op\n0;1;1.234,5;3\n1;1;2;3\n2;1;2;3\n3;1;2;3\n");
        assert_eq!(l.report.dropped.pv.not_a_number.rows, 1);
        assert_eq!(
            l.report.dropped.pv.not_a_number.example.as_deref(),
            Some("1.234,5")
        );
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
