//! Plain decimals (`-?digits[.digits]`), read exactly without the general number parse: the
//! fast path for the numbers exports nearly always write; and decimals written with a comma
//! (`-?digits,digits`), read exactly the same way.

/// Powers of ten that are exact in an f64.
const EXACT_POWERS_OF_TEN: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// The value of a cell written as a plain decimal (`-?digits[.digits]`, nothing around it), as
/// [`finite_number`] would read it, or `None` for any other text.
pub(super) fn plain_decimal(bytes: &[u8]) -> Option<f64> {
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
pub(super) fn decimal_prefix(bytes: &[u8]) -> (Option<f64>, usize) {
    decimal_prefix_with(bytes, b'.')
}

/// A cell written as a decimal with a comma for its decimal mark (`-?digits,digits`, nothing
/// around it, as spreadsheets in much of Europe write `12,5`), or `None` for any other text.
///
/// It is read exactly as the same number written with a point would be: by [`decimal_prefix`]'s
/// exact route where that applies, otherwise by the general parse of the text with the comma
/// made a point (which rounds correctly too).
pub(super) fn comma_decimal(bytes: &[u8]) -> Option<f64> {
    if !bytes.contains(&b',') || !bytes.last().is_some_and(u8::is_ascii_digit) {
        return None;
    }
    let (value, used) = decimal_prefix_with(bytes, b',');
    if used != bytes.len() {
        return None;
    }
    value.or_else(|| {
        let pointed = std::str::from_utf8(bytes).ok()?.replace(',', ".");
        let v: f64 = pointed.parse().ok()?;
        Some(if v == 0.0 { 0.0 } else { v })
    })
}

/// [`decimal_prefix`] with `point` as the decimal mark.
fn decimal_prefix_with(bytes: &[u8], point: u8) -> (Option<f64>, usize) {
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
    if bytes.get(i) == Some(&point) {
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

#[cfg(test)]
mod tests {
    use super::*;

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

    #[test]
    fn decimal_commas_are_read_only_in_their_plain_form() {
        let cases: [(&str, Option<f64>); 11] = [
            ("12,5", Some(12.5)),
            ("-0,125", Some(-0.125)),
            ("-0,0", Some(0.0)),
            ("0,1", Some(0.1)),
            ("12345678901234567,25", Some(12345678901234567.25)),
            ("12", None),
            ("12,", None),
            (",5", None),
            ("1,234,5", None),
            ("1.234,5", None),
            ("12.5", None),
        ];
        for (text, value) in cases {
            assert_eq!(comma_decimal(text.as_bytes()), value, "{text:?}");
        }
    }

    mod properties {
        use super::*;
        use proptest::prelude::*;

        proptest! {
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
            fn decimal_commas_read_exactly_as_the_same_number_with_a_point(
                text in "-?[0-9]{1,21},[0-9]{1,23}",
            ) {
                let general = text.replace(',', ".").parse::<f64>().unwrap();
                let general = if general == 0.0 { 0.0 } else { general };
                let read = comma_decimal(text.as_bytes()).unwrap();
                prop_assert_eq!(read.to_bits(), general.to_bits());
            }
        }
    }
}
