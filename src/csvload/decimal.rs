//! Plain decimals (`-?digits[.digits]`), read exactly without the general number parse: the
//! fast path for the numbers exports nearly always write.

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
