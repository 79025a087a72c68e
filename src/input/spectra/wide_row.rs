//! Parsing one row of the wide layout: the plain-decimal fast path and the
//! general, per-field path.

use super::fields;
use super::{Quantity, ReadOptions, WideHeader};
use crate::error::Error;

/// Powers of ten exactly representable as f64.
pub(super) const POW10: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// Fast path for a plain decimal (`-12.345`) starting at `pos` and ending at
/// the delimiter or the end of the line. Returns the value and the index
/// after it, or `None` for anything else (exponent, spaces, quotes, many
/// digits), which the general path then reads. The result is exact: an
/// integer below 2⁵³ divided by an exact power of ten is correctly rounded
/// (Clinger, PLDI 1990).
#[inline(always)]
pub(super) fn fast_decimal<const DECIMAL_COMMA: bool>(
    line: &[u8],
    i: usize,
    delim: u8,
) -> Option<(f64, usize)> {
    let bytes = line.get(i..)?;
    let len = bytes.len();
    // The common shape first: one integer digit, the decimal mark, then
    // fewer than eight decimals ("0.06491", "-1.2"), read with one SWAR step.
    let sign = usize::from(matches!(bytes.first(), Some(b'-' | b'+')));
    if let Some(w) = bytes.get(sign..sign + 10) {
        let d0 = w[0].wrapping_sub(b'0');
        if d0 <= 9 && (w[1] == b'.' || (DECIMAL_COMMA && w[1] == b',')) {
            let (count, value) = eight_digits(&w[2..10]);
            if count < 8 {
                let mant = u64::from(d0) * POW10_U64[count] + value;
                let neg = bytes[0] == b'-';
                return finish(
                    mant,
                    1 + count,
                    count,
                    neg,
                    bytes,
                    sign + 2 + count,
                    delim,
                    i,
                );
            }
        }
    }
    let neg = bytes.first() == Some(&b'-');
    let int_start = sign;
    let (mut k, mut mant) = digit_run(bytes, sign, 0);
    let mut digits = k - int_start;
    let mut frac = 0;
    if k < len && (bytes[k] == b'.' || (DECIMAL_COMMA && bytes[k] == b',')) {
        k += 1;
        let frac_start = k;
        // Up to eight decimals at once when eight bytes are there to read.
        if let Some(chunk) = bytes.get(k..k + 8) {
            let (count, value) = eight_digits(chunk);
            mant = mant.wrapping_mul(POW10_U64[count]).wrapping_add(value);
            k += count;
            if count < 8 {
                frac = k - frac_start;
                digits += frac;
                return finish(mant, digits, frac, neg, bytes, k, delim, i);
            }
        }
        (k, mant) = digit_run(bytes, k, mant);
        frac = k - frac_start;
        digits += frac;
    }
    finish(mant, digits, frac, neg, bytes, k, delim, i)
}

/// Decimal digits from `k` on, appended to `mant` (wrapping: `finish`
/// rejects more than 18 digits); returns the end and the new mantissa.
#[inline(always)]
pub(super) fn digit_run(bytes: &[u8], mut k: usize, mut mant: u64) -> (usize, u64) {
    while let Some(d) = bytes
        .get(k)
        .map(|b| b.wrapping_sub(b'0'))
        .filter(|d| *d <= 9)
    {
        mant = mant.wrapping_mul(10).wrapping_add(u64::from(d));
        k += 1;
    }
    (k, mant)
}

/// Every integer up to 2⁵³ converts to f64 exactly; above it, not every one.
pub(super) const MAX_EXACT: u64 = 1 << 53;

/// Powers of ten as integers, for shifting the mantissa by a digit count.
pub(super) const POW10_U64: [u64; 9] = [
    1,
    10,
    100,
    1_000,
    10_000,
    100_000,
    1_000_000,
    10_000_000,
    100_000_000,
];

/// The leading decimal digits of eight bytes (at most eight) and their
/// value, with SWAR arithmetic (Lemire, "Parsing floats at a gigabyte per
/// second", Softw. Pract. Exp. 51:1700, 2021).
#[inline(always)]
pub(super) fn eight_digits(chunk: &[u8]) -> (usize, u64) {
    let mut b = [0u8; 8];
    b.copy_from_slice(&chunk[..8]);
    let v = u64::from_le_bytes(b);
    let d = v.wrapping_sub(0x3030_3030_3030_3030);
    // High bit set in each byte that is not '0'..='9'.
    let bad = (d.wrapping_add(0x7676_7676_7676_7676) | d) & 0x8080_8080_8080_8080;
    let count = if bad == 0 {
        8
    } else {
        (bad.trailing_zeros() / 8) as usize
    };
    if count == 0 {
        return (0, 0);
    }
    // Keep the `count` leading digits, as the high bytes (zeros in front).
    let x = d << (8 * (8 - count));
    let x = (x & 0x0F0F_0F0F_0F0F_0F0F).wrapping_mul(2561) >> 8;
    let x = (x & 0x00FF_00FF_00FF_00FF).wrapping_mul(6_553_601) >> 16;
    let x = (x & 0x0000_FFFF_0000_FFFF).wrapping_mul(42_949_672_960_001) >> 32;
    (count, x)
}

#[inline(always)]
#[allow(clippy::too_many_arguments)]
pub(super) fn finish(
    mant: u64,
    digits: usize,
    frac: usize,
    neg: bool,
    bytes: &[u8],
    k: usize,
    delim: u8,
    i: usize,
) -> Option<(f64, usize)> {
    // More than 18 digits may have wrapped, and > 22 decimals has no exact
    // power of ten: the general parser handles those.
    // A mantissa above 2⁵³ would be rounded by the conversion and again by
    // the division; the general parser rounds it once, correctly.
    if digits == 0 || digits > 18 || mant > MAX_EXACT || (k < bytes.len() && bytes[k] != delim) {
        return None;
    }
    // mant ≤ 2⁵³ < 2⁶³: the signed conversion is exact and one instruction.
    let v = (mant as i64) as f64 / POW10[frac];
    Some((if neg { -v } else { v }, i + k))
}

/// Read a row's values with the fast path; `None` if any field needs the
/// general parser. Returns the end of the sample-name field.
pub(super) fn fast_row(
    line: &[u8],
    delim: u8,
    decimal_comma: bool,
    dst: &mut [f64],
) -> Option<usize> {
    if decimal_comma {
        fast_row_with::<true>(line, delim, dst)
    } else {
        fast_row_with::<false>(line, delim, dst)
    }
}

pub(super) fn fast_row_with<const DECIMAL_COMMA: bool>(
    line: &[u8],
    delim: u8,
    dst: &mut [f64],
) -> Option<usize> {
    let id_end = memchr::memchr(delim, line)?;
    if line[..id_end].contains(&b'"') {
        return None;
    }
    let n = dst.len();
    let mut pos = id_end + 1;
    for (k, slot) in dst.iter_mut().enumerate() {
        let (v, next) = fast_decimal::<DECIMAL_COMMA>(line, pos, delim)?;
        *slot = v;
        if k + 1 < n {
            if next >= line.len() {
                return None;
            }
            pos = next + 1;
        } else if next < line.len()
            && !line[next..]
                .iter()
                .all(|&b| b == delim || b == b' ' || b == b'\t')
        {
            return None;
        }
    }
    Some(id_end)
}

/// Parse one wide row into `dst` (one value per wavelength, ascending).
/// Returns the sample name, or the sample name and what is wrong.
pub(super) fn parse_wide_row<'a>(
    line: &'a [u8],
    line_no: usize,
    header: &WideHeader,
    options: &ReadOptions,
    dst: &mut [f64],
    scratch: &mut Vec<&'a [u8]>,
) -> std::result::Result<String, (String, Error)> {
    let delim = header.delimiter.byte();
    let decimal_comma = header.delimiter.allows_decimal_comma();
    let n = dst.len();
    let n_fields = header.n_fields;
    let quantity = options.quantity_or_default();
    let id = match fast_row(line, delim, decimal_comma, dst) {
        Some(id_end) => {
            let id = fields::text(&line[..id_end]).into_owned();
            if id.is_empty() {
                return Err((
                    format!("(line {line_no})"),
                    Error::parse(line_no, 1, b"", "a sample name in the first column"),
                ));
            }
            if !matches!(quantity, Quantity::Absorbance) {
                for (k, v) in dst.iter_mut().enumerate() {
                    match quantity.to_absorbance(*v) {
                        Ok(a) => *v = a,
                        Err(expected) => {
                            // Find the field again for the message.
                            fields::split(line, delim, scratch);
                            let raw = scratch.get(k + 1).copied().unwrap_or(b"");
                            return Err((id, Error::parse(line_no, k + 2, raw, expected)));
                        }
                    }
                }
            }
            id
        }
        None => {
            fields::split(line, delim, scratch);
            fields::trim_trailing_empty(scratch);
            let id = fields::text(scratch[0]).into_owned();
            if id.is_empty() {
                return Err((
                    format!("(line {line_no})"),
                    Error::parse(line_no, 1, b"", "a sample name in the first column"),
                ));
            }
            if scratch.len() != n_fields {
                return Err((
                    id,
                    Error::structure(
                        line_no,
                        format!(
                            "{} fields but the header has {n_fields}: expected a sample name and {n} values",
                            scratch.len()
                        ),
                    ),
                ));
            }
            for (col, field) in scratch[1..].iter().enumerate() {
                if options.overflow_as_saturated
                    && fields::number(field, decimal_comma).is_err()
                    && options.overflow_markers.matches(field, decimal_comma)
                {
                    dst[col] = f64::INFINITY;
                    continue;
                }
                let v = fields::number(field, decimal_comma)
                    .map_err(|e| {
                        let noun = e.expected(quantity.noun());
                        fields::reading_expected(&noun, options.overflow_as_saturated, field)
                    })
                    .and_then(|v| quantity.to_absorbance(v).map_err(str::to_string))
                    .map_err(|expected| {
                        (id.clone(), Error::parse(line_no, col + 2, field, expected))
                    })?;
                dst[col] = v;
            }
            id
        }
    };
    if header.reversed {
        dst.reverse();
    }
    Ok(id)
}
