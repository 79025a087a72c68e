//! Microplate readings (input stage): well identifiers, plate formats, and the
//! parser of unblend's *plate-grid* layout.
//!
//! In: the text of one plate in the plate-grid layout. Out: a
//! [`PlateSpectra`], the absorbance spectrum of every well that was read, on
//! one wavelength grid, plus per-well failures.
//!
//! The plate-grid layout holds one block per wavelength:
//!
//! ```text
//! Exported 2026-12-01 by the reader        <- lines before the first heading: skipped
//! plate=P1 wavelength_nm=450               <- heading: `wavelength_nm=` or a plain `450 nm`, `Wavelength: 450 nm`, `λ = 450 nm`; `plate=` (optional)
//! ,1,2,3,4,5,6,7,8,9,10,11,12              <- column numbers 1–12 (or 1–24) across
//! A,0.112,0.134,0.120,...                  <- row letter A–H (or A–P), then one cell per column
//! B,0.101,>4,0.099,...                     <- an overflow marker: a saturated reading
//! ...
//!                                          <- blank lines and other text between blocks: skipped
//! plate=P1 wavelength_nm=451
//! ...
//! ```
//!
//! A heading is any line holding `wavelength_nm=<nm>`; its other `key=value`
//! pairs (`plate=`, or anything else such as `read=2`) may be separated by
//! spaces, commas, semicolons or tabs. The next non-blank line lists the
//! column numbers (its first cell may be empty or a label); each following
//! line that starts with a row letter holds that row, until a blank line or
//! a line that is not a row. Cells are separated by commas, semicolons or
//! tabs (detected from the column line; with semicolons or tabs a decimal
//! comma is read too). Empty cells past the last column are ignored.
//!
//! Cells: a number is a reading; an empty cell is no reading; `>` with a
//! number (`>4`), `inf`, or a word the user names (`--overflow-marker`, see
//! [`Reading`]) is a *saturated* reading, kept as `f64::INFINITY` so that the
//! batch stage can leave that point out of the fit and flag the well (the
//! solver never sees it). `NaN` and other text fail the well, with the line
//! and column.

use super::fields::{self, Delimiter};
use super::spectra::Quantity;
use crate::error::{Error, Result};
use crate::spectrum::Grid;
use std::sync::Arc;

/// Largest number of rows (A–P) of a supported plate.
pub const MAX_ROWS: usize = 16;
/// Largest number of columns (1–24) of a supported plate.
pub const MAX_COLUMNS: usize = 24;

/// A well position: row A–P, column 1–24 (stored 0-based).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Well {
    /// Row index, 0 = A.
    pub row: u8,
    /// Column index, 0 = column 1.
    pub col: u8,
}

impl Well {
    /// Read a well identifier such as `A1`, `b12` or `P024`.
    pub fn parse(text: &str) -> Option<Well> {
        let t = text.trim();
        let mut chars = t.chars();
        let letter = chars.next()?.to_ascii_uppercase();
        if !letter.is_ascii_uppercase() {
            return None;
        }
        let row = letter as u8 - b'A';
        let digits = chars.as_str();
        if digits.is_empty() || digits.len() > 3 || !digits.bytes().all(|b| b.is_ascii_digit()) {
            return None;
        }
        let col: usize = digits.parse().ok()?;
        if (row as usize) < MAX_ROWS && (1..=MAX_COLUMNS).contains(&col) {
            Some(Well {
                row,
                col: (col - 1) as u8,
            })
        } else {
            None
        }
    }

    /// Position in row-major order on a 16 × 24 plate (for sorting, tables).
    pub fn index(self) -> usize {
        self.row as usize * MAX_COLUMNS + self.col as usize
    }

    /// The well at a row-major index of a 16 × 24 plate.
    pub fn from_index(i: usize) -> Well {
        Well {
            row: (i / MAX_COLUMNS) as u8,
            col: (i % MAX_COLUMNS) as u8,
        }
    }
}

impl std::fmt::Display for Well {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}{}", (b'A' + self.row) as char, self.col + 1)
    }
}

/// The plate formats unblend reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PlateFormat {
    /// 8 rows (A–H) × 12 columns.
    Wells96,
    /// 16 rows (A–P) × 24 columns.
    Wells384,
}

impl PlateFormat {
    /// The smallest format holding every well given.
    pub fn holding(wells: &[Well]) -> PlateFormat {
        if wells.iter().all(|w| w.row < 8 && w.col < 12) {
            PlateFormat::Wells96
        } else {
            PlateFormat::Wells384
        }
    }

    /// Name used in outputs.
    pub fn name(self) -> &'static str {
        match self {
            PlateFormat::Wells96 => "96-well",
            PlateFormat::Wells384 => "384-well",
        }
    }
}

/// A well that was read but cannot be used.
#[derive(Debug)]
pub struct WellFailure {
    /// The well, when its identifier could be read.
    pub well: Option<Well>,
    /// The identifier as found in the input.
    pub label: String,
    /// What is wrong, with line and column.
    pub error: Error,
}

/// The spectra of one plate.
#[derive(Debug)]
pub struct PlateSpectra {
    /// Plate name (from the input, or made from the file name).
    pub name: String,
    /// 96- or 384-well.
    pub format: PlateFormat,
    /// The wavelength grid every well shares (ascending); `None` only when
    /// no well could be read.
    pub grid: Option<Arc<Grid>>,
    /// Wells read, in input order.
    pub wells: Vec<Well>,
    /// Absorbance, AU: one row of `grid.len()` values per well. A saturated
    /// reading is `f64::INFINITY`; every other value is finite.
    pub absorbance_au: Vec<f64>,
    /// Wells that could not be read.
    pub failures: Vec<WellFailure>,
}

impl PlateSpectra {
    /// Number of wavelengths per well.
    pub fn n_points(&self) -> usize {
        self.grid.as_ref().map_or(0, |g| g.len())
    }

    /// The absorbances of well `i` (index into [`Self::wells`]).
    pub fn row(&self, i: usize) -> &[f64] {
        let n = self.n_points();
        &self.absorbance_au[i * n..(i + 1) * n]
    }
}

/// A block heading: the wavelength and the other `key=value` pairs.
#[derive(Debug, Clone, PartialEq)]
pub struct Heading {
    /// The `wavelength_nm` value, or the raw text when it is not a number.
    pub wavelength_nm: std::result::Result<f64, String>,
    /// The `plate` value, when given.
    pub plate: Option<String>,
}

/// Find the `key=value` pairs of a line. Keys are letters, digits and `_`
/// (lowercased); spaces around `=` are allowed; a value runs to the next
/// space, comma, semicolon or tab, or is quoted.
pub fn key_values(line: &[u8]) -> Vec<(String, String)> {
    pairs(line)
        .map(|(k, v)| {
            (
                String::from_utf8_lossy(k).to_ascii_lowercase(),
                String::from_utf8_lossy(v).trim().to_string(),
            )
        })
        .collect()
}

/// The `key=value` pairs of a line as byte slices (see [`key_values`]).
fn pairs(line: &[u8]) -> impl Iterator<Item = (&[u8], &[u8])> {
    let is_key = |b: u8| b.is_ascii_alphanumeric() || b == b'_';
    let is_stop = |b: u8| matches!(b, b' ' | b',' | b';' | b'\t' | b'"');
    memchr::memchr_iter(b'=', line).filter_map(move |eq| {
        let mut k_end = eq;
        while k_end > 0 && line[k_end - 1] == b' ' {
            k_end -= 1;
        }
        let mut k_start = k_end;
        while k_start > 0 && is_key(line[k_start - 1]) {
            k_start -= 1;
        }
        if k_start == k_end {
            return None;
        }
        let mut v_start = eq + 1;
        while v_start < line.len() && line[v_start] == b' ' {
            v_start += 1;
        }
        let value = if line.get(v_start) == Some(&b'"') {
            let rest = &line[v_start + 1..];
            let end = memchr::memchr(b'"', rest).unwrap_or(rest.len());
            &rest[..end]
        } else {
            let rest = &line[v_start..];
            let end = rest.iter().position(|&b| is_stop(b)).unwrap_or(rest.len());
            &rest[..end]
        };
        Some((&line[k_start..k_end], fields::trim(value)))
    })
}

/// Read a heading line: `Some` when the line holds `wavelength_nm=`, or
/// names only a wavelength in a plain form (`450 nm`, `450nm`,
/// `Wavelength: 450 nm`, `λ = 450 nm`; see [`plain_heading`]).
pub fn heading(line: &[u8]) -> Option<Heading> {
    if let Some(w) = plain_heading(line) {
        return Some(Heading {
            wavelength_nm: Ok(w),
            plate: None,
        });
    }
    memchr::memchr(b'=', line)?;
    let mut wavelength = None;
    let mut plate = None;
    for (k, v) in pairs(line) {
        if wavelength.is_none() && k.eq_ignore_ascii_case(b"wavelength_nm") {
            wavelength = Some(v);
        } else if plate.is_none() && k.eq_ignore_ascii_case(b"plate") && !v.is_empty() {
            plate = Some(String::from_utf8_lossy(v).into_owned());
        }
    }
    let raw = wavelength?;
    let wavelength_nm =
        match plain_decimal(raw).map_or_else(|| fields::number(raw, true).ok(), Some) {
            Some(w) if w > 0.0 => Ok(w),
            _ => Err(String::from_utf8_lossy(raw).into_owned()),
        };
    Some(Heading {
        wavelength_nm,
        plate,
    })
}

/// Words that may stand before the wavelength of a plain heading
/// (compared lowercased).
const WAVELENGTH_WORDS: &[&str] = &["wavelength (nm)", "wavelength", "λ", "lambda"];

/// A heading that names only a wavelength, in nm: `450 nm`, `450nm`,
/// `Wavelength: 450 nm`, `Wavelength = 450`, `λ = 450 nm` (trailing empty
/// cells allowed). Without a wavelength word the `nm` is required, so a
/// number alone is never a heading.
pub fn plain_heading(line: &[u8]) -> Option<f64> {
    let text = std::str::from_utf8(line).ok()?;
    let text = text.trim_end_matches([',', ';', '\t', ' ', '\r']).trim();
    let lower = text.to_lowercase();
    let (worded, rest) = match WAVELENGTH_WORDS.iter().find(|w| lower.starts_with(**w)) {
        Some(w) => (true, &lower[w.len()..]),
        None => (false, lower.as_str()),
    };
    let rest = rest.trim_start_matches([':', '=', ' ', ',', ';', '\t']);
    let (number, unit) = match rest.strip_suffix("nm") {
        Some(n) => (n.trim(), true),
        None => (rest.trim(), false),
    };
    if !(worded || unit) || number.is_empty() {
        return None;
    }
    fields::number(number.as_bytes(), true)
        .ok()
        .filter(|w| *w > 0.0)
}

/// What a grid cell holds.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Cell {
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
fn plain_decimal(raw: &[u8]) -> Option<f64> {
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

/// How plate readings are read: what the numbers measure and which words
/// mark a reading above the instrument's range.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Reading {
    /// What the numbers measure.
    pub quantity: Quantity,
    /// The user's overflow words besides `>N` and `inf`.
    pub overflow_markers: fields::OverflowMarkers,
}

impl From<Quantity> for Reading {
    fn from(quantity: Quantity) -> Self {
        Reading {
            quantity,
            overflow_markers: fields::OverflowMarkers::default(),
        }
    }
}

impl Reading {
    /// The options to read spectra of wells with (overflow markers as
    /// saturated points).
    pub fn read_options(&self) -> super::spectra::ReadOptions {
        super::spectra::ReadOptions {
            quantity: Some(self.quantity),
            overflow_as_saturated: true,
            overflow_markers: self.overflow_markers.clone(),
            fallback_name: None,
        }
    }
}

/// Read one cell: a number, an overflow marker, empty, or an error message.
fn cell(raw: &[u8], decimal_comma: bool, reading: &Reading) -> std::result::Result<Cell, String> {
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
fn fast_row(line: &[u8], delim: u8, out: &mut [f64; MAX_COLUMNS + 1]) -> Option<(u8, usize)> {
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
fn split_row<'a>(line: &'a [u8], delim: u8, out: &mut Vec<&'a [u8]>) {
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

/// Encoding of a block's cells: a finite value is a reading, `+inf` a
/// saturated reading; these two mark "no cell" and "empty cell".
const NO_CELL: f64 = f64::NAN;
const EMPTY_CELL: f64 = f64::NEG_INFINITY;

fn is_empty_cell(v: f64) -> bool {
    v.is_infinite() && v.is_sign_negative()
}

/// Whether a value read from a plate is a saturated reading (`+inf`).
pub fn is_saturated(v: f64) -> bool {
    v.is_infinite() && v.is_sign_positive()
}

/// One wavelength block as read.
struct GridBlock {
    wavelength_nm: f64,
    heading_line: usize,
    /// Line of each row, 0 when the row is absent.
    row_lines: [usize; MAX_ROWS],
    /// 0-based field of each column in a row line, 0 when absent.
    col_fields: [usize; MAX_COLUMNS],
    /// Bad cells: slot, line, column, raw text, what was expected.
    bad: Vec<(usize, usize, usize, String, String)>,
}

/// Parse the plate-grid text of one plate. `first_line` is the 1-based line
/// number of the first line of `text` in its file (for messages).
pub fn parse_grid(
    text: &[u8],
    first_line: usize,
    name: &str,
    reading: &Reading,
) -> Result<PlateSpectra> {
    let quantity = reading.quantity;
    let mut blocks: Vec<GridBlock> = Vec::new();
    let mut lines = fields::lines(text)
        .map(|(n, l)| (n + first_line - 1, l))
        .peekable();
    let mut scratch: Vec<&[u8]> = Vec::new();
    // Wells with a reading (a value, a saturated reading or a bad cell) in
    // any block.
    let mut read = [false; MAX_ROWS * MAX_COLUMNS];
    // Each well's cells, one per block so far (block order).
    let mut per_slot: Vec<Vec<f64>> = vec![Vec::new(); MAX_ROWS * MAX_COLUMNS];
    let mut fast = [0.0f64; MAX_COLUMNS + 1];
    while let Some((line_no, line)) = lines.next() {
        let Some(h) = heading(line) else {
            continue; // metadata or text between blocks
        };
        let wavelength_nm = h.wavelength_nm.map_err(|raw| Error::Parse {
            at: crate::error::Location {
                line: line_no,
                column: None,
            },
            value: crate::error::shorten(raw.as_bytes()),
            expected: "a positive wavelength in nm after `wavelength_nm=`".into(),
        })?;
        // The column line: the next line with content.
        let mut columns_line = None;
        for (n, l) in lines.by_ref() {
            if !fields::is_skippable(l, b',') {
                columns_line = Some((n, l));
                break;
            }
        }
        let Some((col_line_no, col_line)) = columns_line else {
            return Err(Error::structure(
                line_no,
                format!(
                    "the block for {wavelength_nm} nm ends after its heading: expected a line of column numbers (1–24) and rows A–P"
                ),
            ));
        };
        let delimiter = Delimiter::detect(col_line);
        let delim = delimiter.byte();
        let decimal_comma = delimiter.allows_decimal_comma();
        fields::split(col_line, delim, &mut scratch);
        fields::trim_trailing_empty(&mut scratch);
        let first_is_number = fields::number(scratch[0], false).is_ok();
        let skip = usize::from(!first_is_number);
        let mut columns: Vec<usize> = Vec::with_capacity(scratch.len());
        for (i, f) in scratch.iter().enumerate().skip(skip) {
            let c = fields::number(f, false)
                .ok()
                .filter(|c| c.fract().abs() < 1e-9 && (1.0..=MAX_COLUMNS as f64).contains(c))
                .map(|c| c as usize - 1);
            match c {
                Some(c) if !columns.contains(&c) => columns.push(c),
                Some(_) => {
                    return Err(Error::parse(
                        col_line_no,
                        i + 1,
                        f,
                        "each column number once in the line of column numbers",
                    ));
                }
                None => {
                    return Err(Error::parse(
                        col_line_no,
                        i + 1,
                        f,
                        format!(
                            "a column number 1–24 (the line after the heading on line {line_no} lists the columns)"
                        ),
                    ));
                }
            }
        }
        if columns.is_empty() {
            return Err(Error::structure(
                col_line_no,
                "no column numbers after the heading: expected a line such as `,1,2,3,...,12`",
            ));
        }
        let block_index = blocks.len();
        let mut block = GridBlock {
            wavelength_nm,
            heading_line: line_no,
            row_lines: [0; MAX_ROWS],
            col_fields: [0; MAX_COLUMNS],
            bad: Vec::new(),
        };
        for (k, &c) in columns.iter().enumerate() {
            block.col_fields[c] = k + 1;
        }
        let mut rows_seen = [false; MAX_ROWS];
        let mut any_row = false;
        while let Some(&(row_no, row_line)) = lines.peek() {
            if fields::is_skippable(row_line, delim) {
                break;
            }
            // Fast path: a row letter and plain decimals (the usual export).
            if quantity == Quantity::Absorbance
                && let Some((letter, k)) = fast_row(row_line, delim, &mut fast)
            {
                let row = (letter.to_ascii_uppercase() - b'A') as usize;
                if row < MAX_ROWS && !rows_seen[row] {
                    rows_seen[row] = true;
                    block.row_lines[row] = row_no;
                    any_row = true;
                    lines.next();
                    for (j, &c) in columns.iter().enumerate().take(k) {
                        let slot = row * MAX_COLUMNS + c;
                        read[slot] = true;
                        let v = &mut per_slot[slot];
                        v.resize(block_index, NO_CELL);
                        v.push(fast[j]);
                    }
                    continue;
                }
                // A bad or repeated row letter: the general path says so.
            }
            split_row(row_line, delim, &mut scratch);
            let label = fields::text(scratch[0]);
            let label = label.trim();
            let row = match label.as_bytes() {
                [b] if b.is_ascii_alphabetic() => (b.to_ascii_uppercase() - b'A') as usize,
                _ => break, // not a row: the block has ended
            };
            if row >= MAX_ROWS {
                return Err(Error::parse(
                    row_no,
                    1,
                    label.as_bytes(),
                    "a row letter A–P",
                ));
            }
            if rows_seen[row] {
                return Err(Error::structure(
                    row_no,
                    format!(
                        "row {label} appears twice in the block for {wavelength_nm} nm (heading on line {line_no})"
                    ),
                ));
            }
            rows_seen[row] = true;
            block.row_lines[row] = row_no;
            any_row = true;
            lines.next();
            for (k, &c) in columns.iter().enumerate() {
                let field_index = k + 1;
                let Some(raw) = scratch.get(field_index) else {
                    break; // short row: the remaining wells have no reading
                };
                let slot = row * MAX_COLUMNS + c;
                let value = match cell(raw, decimal_comma, reading) {
                    Ok(Cell::Value(v)) => {
                        read[slot] = true;
                        v
                    }
                    Ok(Cell::Saturated) => {
                        read[slot] = true;
                        f64::INFINITY
                    }
                    Ok(Cell::Missing) => EMPTY_CELL,
                    Err(expected) => {
                        read[slot] = true;
                        block.bad.push((
                            slot,
                            row_no,
                            field_index + 1,
                            crate::error::shorten(raw),
                            expected,
                        ));
                        EMPTY_CELL
                    }
                };
                // Store by well as we go (no transpose later): pad the
                // blocks this well had no cell in, then add this one.
                let v = &mut per_slot[slot];
                v.resize(block_index, NO_CELL);
                v.push(value);
            }
        }
        if !any_row {
            return Err(Error::structure(
                col_line_no,
                format!(
                    "the block for {wavelength_nm} nm has no rows: expected lines starting with a row letter A–P after the column numbers"
                ),
            ));
        }
        blocks.push(block);
    }
    assemble(blocks, per_slot, &read, name, first_line)
}

/// Why well `slot` has no usable reading in block `b`.
fn cell_error(b: &GridBlock, slot: usize, value: f64) -> Error {
    let well = Well::from_index(slot);
    if let Some((_, line, column, raw, expected)) = b.bad.iter().find(|x| x.0 == slot) {
        return Error::Parse {
            at: crate::error::Location {
                line: *line,
                column: Some(*column),
            },
            value: raw.clone(),
            expected: expected.clone(),
        };
    }
    if is_empty_cell(value) {
        return Error::Parse {
            at: crate::error::Location {
                line: b.row_lines[well.row as usize],
                column: Some(b.col_fields[well.col as usize] + 1),
            },
            value: String::new(),
            expected: format!(
                "a reading for well {well} at {} nm (the cell is empty)",
                b.wavelength_nm
            ),
        };
    }
    Error::structure(
        b.heading_line,
        format!(
            "well {well} has no cell in the block for {} nm: every block of a plate must cover the same wells",
            b.wavelength_nm
        ),
    )
}

fn assemble(
    blocks: Vec<GridBlock>,
    mut per_slot: Vec<Vec<f64>>,
    read: &[bool; MAX_ROWS * MAX_COLUMNS],
    name: &str,
    first_line: usize,
) -> Result<PlateSpectra> {
    if blocks.is_empty() {
        return Err(Error::structure(
            first_line,
            format!(
                "plate '{name}' has no blocks: expected a heading line with `wavelength_nm=<nm>` followed by a grid"
            ),
        ));
    }
    let mut order: Vec<usize> = (0..blocks.len()).collect();
    order.sort_by(|&a, &b| blocks[a].wavelength_nm.total_cmp(&blocks[b].wavelength_nm));
    for pair in order.windows(2) {
        let (x, y) = (&blocks[pair[0]], &blocks[pair[1]]);
        if (y.wavelength_nm - x.wavelength_nm).abs() <= 1e-9 * x.wavelength_nm.abs() {
            let (a, b) = (
                x.heading_line.min(y.heading_line),
                x.heading_line.max(y.heading_line),
            );
            return Err(Error::structure(
                b,
                format!(
                    "plate '{name}': wavelength {} nm appears twice (headings on lines {a} and {b}): each wavelength once per plate",
                    x.wavelength_nm
                ),
            ));
        }
    }
    let wavelengths: Vec<f64> = order.iter().map(|&i| blocks[i].wavelength_nm).collect();
    let grid =
        Arc::new(Grid::new(wavelengths).map_err(|e| Error::structure(first_line, e.to_string()))?);
    let n = grid.len();
    let in_order = order.iter().enumerate().all(|(k, &i)| k == i);
    let mut wells = Vec::new();
    let mut failures = Vec::new();
    let mut values = Vec::new();
    for slot in (0..MAX_ROWS * MAX_COLUMNS).filter(|&s| read[s]) {
        let well = Well::from_index(slot);
        let cells = &mut per_slot[slot];
        cells.resize(n, NO_CELL);
        let bad = order
            .iter()
            .find(|&&i| !(cells[i].is_finite() || is_saturated(cells[i])));
        match bad {
            Some(&i) => failures.push(WellFailure {
                well: Some(well),
                label: well.to_string(),
                error: cell_error(&blocks[i], slot, cells[i]),
            }),
            None => {
                wells.push(well);
                if in_order {
                    values.extend_from_slice(cells);
                } else {
                    values.extend(order.iter().map(|&i| cells[i]));
                }
            }
        }
    }
    let mut all: Vec<Well> = wells.clone();
    all.extend(failures.iter().filter_map(|f| f.well));
    Ok(PlateSpectra {
        name: name.to_string(),
        format: PlateFormat::holding(&all),
        grid: Some(grid),
        wells,
        absorbance_au: values,
        failures,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<PlateSpectra> {
        parse_grid(text.as_bytes(), 1, "p", &Reading::default())
    }

    #[test]
    fn plain_headings_name_the_wavelength_in_each_form() {
        for line in [
            "450 nm",
            "450nm,,,",
            "Wavelength: 450 nm",
            "wavelength = 450",
            "λ = 450 nm",
            "Lambda 450",
        ] {
            assert_eq!(plain_heading(line.as_bytes()), Some(450.0), "{line}");
            assert!(heading(line.as_bytes()).is_some(), "{line}");
        }
        for line in [
            "450",
            ",1,2,3",
            "A,0.1,0.2",
            "Slit: 2 nm",
            "sample,450 nm,460 nm",
        ] {
            assert_eq!(plain_heading(line.as_bytes()), None, "{line}");
        }
        let text = "Wavelength: 400 nm\n,1,2\nA,0.1,0.2\n\n410nm\n,1,2\nA,0.3,0.4\n";
        let p = parse(text).unwrap();
        assert_eq!(p.grid.as_ref().unwrap().wavelengths_nm(), [400.0, 410.0]);
        assert_eq!(p.row(1), &[0.2, 0.4]);
    }

    #[test]
    fn well_ids_are_read_and_printed() {
        assert_eq!(Well::parse("A1"), Some(Well { row: 0, col: 0 }));
        assert_eq!(Well::parse(" b012 "), Some(Well { row: 1, col: 11 }));
        assert_eq!(Well::parse("P24").unwrap().to_string(), "P24");
        assert_eq!(Well::parse("Q1"), None);
        assert_eq!(Well::parse("A25"), None);
        assert_eq!(Well::parse("A0"), None);
        assert_eq!(Well::parse("lot-1"), None);
        assert_eq!(Well::parse(""), None);
    }

    #[test]
    fn headings_are_found_with_spaces_commas_and_quotes() {
        let h = heading(b"plate=P1 wavelength_nm=450").unwrap();
        assert_eq!(h.plate.as_deref(), Some("P1"));
        assert!((h.wavelength_nm.unwrap() - 450.0).abs() < 1e-12);
        let h = heading(b"plate = \"run 7\",wavelength_nm = 450.5,,,").unwrap();
        assert_eq!(h.plate.as_deref(), Some("run 7"));
        assert!((h.wavelength_nm.unwrap() - 450.5).abs() < 1e-12);
        assert!(heading(b"Gain=100").is_none());
        assert!(heading(b"A,0.1,0.2").is_none());
        assert_eq!(
            heading(b"wavelength_nm=abc").unwrap().wavelength_nm,
            Err("abc".to_string())
        );
    }

    #[test]
    fn two_blocks_make_a_plate_with_metadata_and_trailing_cells_skipped() {
        let text = "Reader export\nOperator: X\n\nwavelength_nm=500,,,\n,1,2,,\nA,0.5,0.6,,\nB,0.7,0.8\n\nTemperature: 25 C\nwavelength_nm=400\n,1,2\nA,0.1,0.2\nB,0.3,0.4\nend of read\n";
        let p = parse(text).unwrap();
        assert_eq!(p.grid.as_ref().unwrap().wavelengths_nm(), &[400.0, 500.0]);
        assert_eq!(p.wells.len(), 4);
        assert_eq!(p.wells[1].to_string(), "A2");
        assert_eq!(p.row(1), &[0.2, 0.6]);
        assert_eq!(p.row(3), &[0.4, 0.8]);
        assert_eq!(p.format, PlateFormat::Wells96);
        assert!(p.failures.is_empty());
    }

    #[test]
    fn generic_and_user_named_overflow_markers_become_saturated_points() {
        let text = "wavelength_nm=400\n,1,2,3,4\nA,Too High,>4,inf,0.5\nwavelength_nm=410\n,1,2,3,4\nA,1,1,1,1\n";
        let reading = Reading {
            quantity: Quantity::Absorbance,
            overflow_markers: fields::OverflowMarkers::new(&["too high"]),
        };
        let p = parse_grid(text.as_bytes(), 1, "p", &reading).unwrap();
        assert_eq!(p.wells.len(), 4);
        for i in 0..3 {
            assert!(p.row(i)[0].is_infinite(), "well {i}");
            assert!((p.row(i)[1] - 1.0).abs() < 1e-12);
        }
        // Without the user's word it is an error naming the cell and the option.
        let p = parse(text).unwrap();
        let e = p.failures[0].error.to_string();
        assert!(
            e.starts_with("line 3, column 2 ('Too High')") && e.contains("--overflow-marker"),
            "{e}"
        );
    }

    #[test]
    fn nan_and_garbled_cells_fail_only_their_well() {
        let text = "wavelength_nm=400\n,1,2,3\nA,NaN,0.1a,0.2\n";
        let p = parse(text).unwrap();
        assert_eq!(p.wells.len(), 1);
        assert_eq!(p.failures.len(), 2);
        let e = p.failures[1].error.to_string();
        assert!(e.starts_with("line 3, column 3 ('0.1a')"), "{e}");
        assert!(e.contains("overflow marker"), "{e}");
    }

    #[test]
    fn semicolon_grid_with_decimal_comma_is_read() {
        let text = "wavelength_nm=400\n;1;2\nA;0,25;0,5\n";
        let p = parse(text).unwrap();
        assert_eq!(p.row(0), &[0.25]);
        assert_eq!(p.row(1), &[0.5]);
    }

    #[test]
    fn a_well_missing_from_one_block_fails_with_the_line() {
        let text = "wavelength_nm=400\n,1,2\nA,0.1,0.2\nwavelength_nm=410\n,1,2\nA,0.1\n";
        let p = parse(text).unwrap();
        assert_eq!(p.wells.len(), 1);
        assert_eq!(p.failures[0].label, "A2");
        assert!(
            p.failures[0].error.to_string().contains("line 4"),
            "{}",
            p.failures[0].error
        );
    }

    #[test]
    fn duplicate_wavelength_and_bad_column_numbers_are_errors() {
        let e = parse("wavelength_nm=400\n,1\nA,1\nwavelength_nm=400\n,1\nA,1\n").unwrap_err();
        assert!(e.to_string().contains("appears twice"), "{e}");
        let e = parse("wavelength_nm=400\n,1,x\nA,1,2\n").unwrap_err();
        assert_eq!(
            e.to_string(),
            "line 2, column 3 ('x'): expected a column number 1–24 (the line after the heading on line 1 lists the columns)"
        );
        let e = parse("wavelength_nm=4OO\n,1\nA,1\n").unwrap_err();
        assert!(e.to_string().starts_with("line 1 ('4OO')"), "{e}");
    }

    #[test]
    fn plain_decimals_parse_exactly_as_the_standard_library_does() {
        // Rust's str::parse::<f64> is correctly rounded: the reference.
        let mut x: u64 = 12345;
        for _ in 0..20_000 {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let int = (x >> 40) % 100_000;
            let frac_digits = ((x >> 20) % 9) as usize;
            let frac = (x >> 8) % 10u64.pow(frac_digits as u32).max(1);
            let text = if frac_digits == 0 {
                format!("{int}")
            } else {
                format!("{int}.{frac:0frac_digits$}")
            };
            for t in [text.clone(), format!("-{text}")] {
                let want: f64 = t.parse().unwrap();
                assert_eq!(
                    plain_decimal(t.as_bytes()).map(f64::to_bits),
                    Some(want.to_bits()),
                    "{t}"
                );
            }
        }
        for t in [
            "",
            "-",
            ".",
            "1e3",
            "1.2.3",
            " 1",
            "0,5",
            "1234567890123456",
        ] {
            assert_eq!(plain_decimal(t.as_bytes()), None, "{t}");
        }
    }

    #[test]
    fn fast_rows_match_the_general_path_or_step_aside() {
        let mut out = [0.0; MAX_COLUMNS + 1];
        assert_eq!(
            fast_row(b"B,0.5,-0.25,3,,", b',', &mut out),
            Some((b'B', 3))
        );
        assert_eq!(&out[..3], &[0.5, -0.25, 3.0]);
        for line in [
            &b"B,0.5,OVER"[..],
            b"B, 0.5",
            b"B,0.5,,0.7",
            b"B,\"0.5\"",
            b"AB,0.5",
            b"B;0,5",
            b"B,",
            b"B,1e-3",
            b"B,1234567890123456789012345",
        ] {
            assert_eq!(
                fast_row(line, b',', &mut out),
                None,
                "{}",
                String::from_utf8_lossy(line)
            );
        }
        // Same plate either way: a file the fast path reads and one it does not.
        let fast = parse("wavelength_nm=400\n,1,2\nA,0.1,0.2\nB,0.3,0.4\n").unwrap();
        let slow = parse("wavelength_nm=400\n,1,2\nA, 0.1,0.2\nB,0.3 ,0.4\n").unwrap();
        assert_eq!(fast.absorbance_au, slow.absorbance_au);
        assert_eq!(fast.wells, slow.wells);
    }

    #[test]
    fn a_384_well_grid_is_recognised() {
        let mut text = String::from("wavelength_nm=400\n");
        text.push_str(&(1..=24).map(|c| format!(",{c}")).collect::<String>());
        text.push('\n');
        for r in 0..16u8 {
            text.push((b'A' + r) as char);
            for _ in 0..24 {
                text.push_str(",0.1");
            }
            text.push('\n');
        }
        let p = parse(&text).unwrap();
        assert_eq!(p.wells.len(), 384);
        assert_eq!(p.format, PlateFormat::Wells384);
        assert_eq!(p.wells[383].to_string(), "P24");
    }
}
