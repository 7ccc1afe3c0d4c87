//! The header: where the wanted columns are, and reading one of their cells.

use super::CsvColumns;
use super::cells::Cells;
use super::error::CsvError;
use super::report::ColumnNames;

/// Where the wanted columns are in the header.
pub(super) struct Layout {
    pub(super) row: u64,
    pub(super) names: Vec<String>,
    pub(super) lower: Vec<String>,
    pub(super) time: usize,
    pub(super) sp: usize,
    pub(super) pv: usize,
    pub(super) op: usize,
    pub(super) mode: Option<usize>,
}

impl Layout {
    pub(super) fn from_header<C: Cells + ?Sized>(
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

    pub(super) fn column_names(&self) -> ColumnNames {
        ColumnNames {
            time: self.names[self.time].clone(),
            sp: self.names[self.sp].clone(),
            pv: self.names[self.pv].clone(),
            op: self.names[self.op].clone(),
            mode: self.mode.map(|i| self.names[i].clone()),
        }
    }

    pub(super) fn is_header_again<C: Cells + ?Sized>(&self, record: &C) -> bool {
        record.cell_count() == self.lower.len()
            && record
                .cells()
                .zip(&self.lower)
                .all(|(c, name)| String::from_utf8_lossy(c).trim().to_lowercase() == *name)
    }

    /// The trimmed text of one cell; a cell missing from a short row reads as blank.
    pub(super) fn cell<'r, C: Cells + ?Sized>(
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::csvload::test_support::*;
    use crate::csvload::*;

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
    fn a_missing_column_in_a_header_that_is_not_utf8_hints_at_the_encoding() {
        let bytes = b"time,sp,pv \xB0C,op\n0,1,2,3\n";
        let err = load_csv(&bytes[..], &CsvOptions::default()).unwrap_err();
        assert!(err.to_string().contains("not valid UTF-8"), "{err}");
    }
}
