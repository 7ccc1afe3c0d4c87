//! Reading the text: the whole file, its byte-order mark, the delimiter, the records of a file
//! without quotes (split directly) or with quotes (through the CSV reader), and file rows.

use std::io::Read;

use super::decimal::decimal_prefix;
use super::error::CsvError;

pub(super) const UTF8_BOM: &[u8] = b"\xEF\xBB\xBF";

/// About how many rows the file has, to size the columns once: its count of line feeds.
pub(super) fn rows_hint(bytes: &[u8]) -> usize {
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
pub(super) struct Text {
    /// The file's bytes, including a leading byte-order mark if it has one.
    pub(super) bytes: Vec<u8>,
    pub(super) bom_stripped: bool,
}

impl Text {
    pub(super) fn read<R: Read>(mut reader: R) -> Result<Text, CsvError> {
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
    pub(super) fn body(&self) -> &[u8] {
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
pub(super) fn first_line(bytes: &[u8]) -> &[u8] {
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
pub(super) fn detect_delimiter(header: &[u8]) -> u8 {
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
pub(super) struct PlainRecords<'a> {
    pub(super) bytes: &'a [u8],
    pub(super) pos: usize,
    /// The line `pos` is on.
    pub(super) line: u64,
    pub(super) delimiter: u8,
}

/// One cell of a file without quotes.
#[derive(Debug, Clone, Copy)]
pub(super) struct PlainCell<'a> {
    pub(super) text: &'a [u8],
    /// The cell's value if it is a plain decimal, as [`plain_decimal`](super::decimal::plain_decimal) reads it.
    pub(super) number: Option<f64>,
}

impl<'a> PlainRecords<'a> {
    /// Puts the next record's cells in `cells` and returns its row, or `None` at the end.
    pub(super) fn next_into(&mut self, cells: &mut Vec<PlainCell<'a>>) -> Option<u64> {
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
pub(super) struct LineCounter<'a> {
    pub(super) bytes: &'a [u8],
    /// Offset up to which line breaks have been counted.
    pub(super) at: usize,
    pub(super) breaks: u64,
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
    pub(super) fn row_of(&mut self, record: &csv::ByteRecord) -> u64 {
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

pub(super) fn next_record(
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

#[cfg(test)]
mod tests {
    use std::io;

    use super::*;
    use crate::csvload::test_support::*;
    use crate::csvload::*;

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
    fn an_empty_file_is_an_error() {
        assert!(matches!(load(""), Err(CsvError::Empty)));
        assert!(matches!(load("\n\r\n"), Err(CsvError::Empty)));
        assert!(matches!(load("\u{feff}"), Err(CsvError::Empty)));
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

    mod properties {
        use super::*;
        use proptest::prelude::*;

        proptest! {
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
        }
    }
}
