//! Reading the cells of a grid row: the plain-decimal fast path, one cell
//! in general, and the row splitter.

use super::{MAX_COLUMNS, Reading};
use crate::input::fields;
use crate::input::spectra::Quantity;

/// What a grid cell holds.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum Cell {
    Value(f64),
    Saturated,
    Missing,
}

/// Parse a plain decimal such as `0.1234` or `-12.5` (no exponent, no
/// spaces, at most 15 digits) quickly and exactly: with m < 2^53 and k ≤ 15
/// both m and 10^k are exact doubles and one IEEE division rounds once, so
/// m / 10^k is the correctly rounded value (Clinger, PLDI 1990, "fast
/// path"). Anything else returns `None` for the general parser.
#[inline]
pub(super) fn plain_decimal(raw: &[u8]) -> Option<f64> {
    const POW10: [f64; 16] = [
        1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
    ];
    let (negative, digits) = match raw.first()? {
        b'-' => (true, &raw[1..]),
        _ => (false, raw),
    };
    let mut m: u64 = 0;
    let mut n_digits = 0usize;
    let mut n_frac = 0usize;
    let mut dot = false;
    for &b in digits {
        match b {
            b'0'..=b'9' => {
                m = m * 10 + u64::from(b - b'0');
                n_digits += 1;
                n_frac += usize::from(dot);
                if n_digits > 15 {
                    return None;
                }
            }
            b'.' if !dot => dot = true,
            _ => return None,
        }
    }
    if n_digits == 0 {
        return None;
    }
    let v = m as f64 / POW10[n_frac];
    Some(if negative { -v } else { v })
}

/// Read one cell: a number, an overflow marker, empty, or an error message.
pub(super) fn cell(
    raw: &[u8],
    decimal_comma: bool,
    reading: &Reading,
) -> std::result::Result<Cell, String> {
    let quantity = reading.quantity;
    if quantity == Quantity::Absorbance
        && let Some(v) = plain_decimal(raw)
    {
        return Ok(Cell::Value(v));
    }
    let expected = || {
        let noun = match quantity {
            Quantity::Transmittance => "a transmittance fraction",
            Quantity::TransmittancePercent => "a transmittance percentage",
            _ => "an absorbance",
        };
        fields::reading_expected(noun, true, raw)
    };
    match fields::number(raw, decimal_comma) {
        Ok(v) => quantity
            .to_absorbance(v)
            .map(Cell::Value)
            .map_err(str::to_string),
        Err(fields::NumberError::Empty) => Ok(Cell::Missing),
        Err(_) => {
            let t = fields::text(raw);
            if t.trim().eq_ignore_ascii_case("nan") {
                return Err(format!("{} (NaN is not a reading)", expected()));
            }
            if reading.overflow_markers.matches(raw, decimal_comma) {
                Ok(Cell::Saturated)
            } else {
                Err(expected())
            }
        }
    }
}

/// Read a grid row of plain decimals in one pass: `A,0.123,-0.004,...`
/// (a row letter, then cells that [`plain_decimal`] reads; trailing empty
/// cells allowed). Fills `out` with the cells after the letter and returns
/// the letter and the number of cells, or `None` when anything else is in
/// the row (spaces, quotes, empty or overflow cells, decimal commas): the
/// general path then reads it.
#[inline]
pub(super) fn fast_row(
    line: &[u8],
    delim: u8,
    out: &mut [f64; MAX_COLUMNS + 1],
) -> Option<(u8, usize)> {
    const POW10: [f64; 16] = [
        1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
    ];
    let letter = *line.first()?;
    if !letter.is_ascii_alphabetic() || line.get(1) != Some(&delim) {
        return None;
    }
    let n = line.len();
    let mut i = 2;
    let mut k = 0;
    loop {
        let negative = i < n && line[i] == b'-';
        i += usize::from(negative);
        let (mut m, mut n_digits, mut n_frac, mut dot) = (0u64, 0usize, 0usize, false);
        while i < n {
            let b = line[i];
            let d = b.wrapping_sub(b'0');
            if d < 10 {
                if n_digits == 15 {
                    return None; // too long for the exact fast path
                }
                m = m * 10 + u64::from(d);
                n_digits += 1;
                n_frac += usize::from(dot);
            } else if b == b'.' && !dot {
                dot = true;
            } else {
                break;
            }
            i += 1;
        }
        if n_digits == 0 {
            // Only trailing empty cells may follow.
            let rest_empty = !negative && !dot && line[i..].iter().all(|&b| b == delim);
            return (rest_empty && k > 0).then_some((letter, k));
        }
        if k == out.len() {
            return None;
        }
        let v = m as f64 / POW10[n_frac];
        out[k] = if negative { -v } else { v };
        k += 1;
        if i == n {
            return Some((letter, k));
        }
        if line[i] != delim {
            return None;
        }
        i += 1;
    }
}

/// Split a grid row into fields. Rows are short and have many fields, so a
/// plain byte loop beats a vectorised search per field; a row with quotes
/// goes to the quote-aware splitter.
#[inline]
pub(super) fn split_row<'a>(line: &'a [u8], delim: u8, out: &mut Vec<&'a [u8]>) {
    if line.contains(&b'"') {
        fields::split(line, delim, out);
        return;
    }
    out.clear();
    let mut start = 0;
    for (i, &b) in line.iter().enumerate() {
        if b == delim {
            out.push(&line[start..i]);
            start = i + 1;
        }
    }
    out.push(&line[start..]);
}
