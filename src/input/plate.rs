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

mod cells;
use cells::{Cell, cell, fast_row, plain_decimal, split_row};

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
    let mut blocks: Vec<GridBlock> = Vec::new();
    let mut lines = fields::lines(text)
        .map(|(n, l)| (n + first_line - 1, l))
        .peekable();
    let mut wells = WellCells::new();
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
        let (col_line_no, col_line) = column_line(&mut lines, line_no, wavelength_nm)?;
        let delimiter = Delimiter::detect(col_line);
        let reader = BlockReader {
            columns: column_numbers(col_line, delimiter.byte(), col_line_no, line_no)?,
            delim: delimiter.byte(),
            decimal_comma: delimiter.allows_decimal_comma(),
            reading,
            block_index: blocks.len(),
            heading_line: line_no,
            wavelength_nm,
        };
        let block = reader.read_rows(&mut lines, &mut wells)?;
        if block.row_lines.iter().all(|&l| l == 0) {
            return Err(Error::structure(
                col_line_no,
                format!(
                    "the block for {wavelength_nm} nm has no rows: expected lines starting with a row letter A–P after the column numbers"
                ),
            ));
        }
        blocks.push(block);
    }
    assemble(blocks, wells.per_slot, &wells.read, name, first_line)
}

/// The cells read so far, by well.
struct WellCells {
    /// Wells with a reading (a value, a saturated reading or a bad cell) in
    /// any block.
    read: [bool; MAX_ROWS * MAX_COLUMNS],
    /// Each well's cells, one per block so far (block order).
    per_slot: Vec<Vec<f64>>,
}

impl WellCells {
    fn new() -> Self {
        Self {
            read: [false; MAX_ROWS * MAX_COLUMNS],
            per_slot: vec![Vec::new(); MAX_ROWS * MAX_COLUMNS],
        }
    }

    /// Store by well as we go (no transpose later): pad the blocks this
    /// well had no cell in, then add this one.
    fn push(&mut self, slot: usize, block_index: usize, value: f64) {
        let v = &mut self.per_slot[slot];
        v.resize(block_index, NO_CELL);
        v.push(value);
    }
}

/// The column line of a block: the next line with content after the
/// heading on line `heading_line`.
fn column_line<'a>(
    lines: &mut impl Iterator<Item = (usize, &'a [u8])>,
    heading_line: usize,
    wavelength_nm: f64,
) -> Result<(usize, &'a [u8])> {
    lines
        .find(|(_, l)| !fields::is_skippable(l, b','))
        .ok_or_else(|| {
            Error::structure(
                heading_line,
                format!(
                    "the block for {wavelength_nm} nm ends after its heading: expected a line of column numbers (1–24) and rows A–P"
                ),
            )
        })
}

/// The 0-based column of each field of the column line (line `line_no`,
/// after the heading on line `heading_line`).
fn column_numbers(
    col_line: &[u8],
    delim: u8,
    line_no: usize,
    heading_line: usize,
) -> Result<Vec<usize>> {
    let mut scratch: Vec<&[u8]> = Vec::new();
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
                    line_no,
                    i + 1,
                    f,
                    "each column number once in the line of column numbers",
                ));
            }
            None => {
                return Err(Error::parse(
                    line_no,
                    i + 1,
                    f,
                    format!(
                        "a column number 1–24 (the line after the heading on line {heading_line} lists the columns)"
                    ),
                ));
            }
        }
    }
    if columns.is_empty() {
        return Err(Error::structure(
            line_no,
            "no column numbers after the heading: expected a line such as `,1,2,3,...,12`",
        ));
    }
    Ok(columns)
}

/// What reading the rows of one block needs.
struct BlockReader<'r> {
    columns: Vec<usize>,
    delim: u8,
    decimal_comma: bool,
    reading: &'r Reading,
    block_index: usize,
    heading_line: usize,
    wavelength_nm: f64,
}

impl BlockReader<'_> {
    /// Read the rows of the block up to its first line that is not a row.
    fn read_rows<'a, I>(
        &self,
        lines: &mut std::iter::Peekable<I>,
        wells: &mut WellCells,
    ) -> Result<GridBlock>
    where
        I: Iterator<Item = (usize, &'a [u8])>,
    {
        let mut block = GridBlock {
            wavelength_nm: self.wavelength_nm,
            heading_line: self.heading_line,
            row_lines: [0; MAX_ROWS],
            col_fields: [0; MAX_COLUMNS],
            bad: Vec::new(),
        };
        for (k, &c) in self.columns.iter().enumerate() {
            block.col_fields[c] = k + 1;
        }
        let mut scratch: Vec<&[u8]> = Vec::new();
        let mut fast = [0.0f64; MAX_COLUMNS + 1];
        while let Some(&(row_no, row_line)) = lines.peek() {
            if fields::is_skippable(row_line, self.delim) {
                break;
            }
            // Fast path: a row letter and plain decimals (the usual export).
            if self.reading.quantity == Quantity::Absorbance
                && let Some((letter, k)) = fast_row(row_line, self.delim, &mut fast)
            {
                let row = (letter.to_ascii_uppercase() - b'A') as usize;
                if row < MAX_ROWS && block.row_lines[row] == 0 {
                    block.row_lines[row] = row_no;
                    lines.next();
                    for (j, &c) in self.columns.iter().enumerate().take(k) {
                        let slot = row * MAX_COLUMNS + c;
                        wells.read[slot] = true;
                        wells.push(slot, self.block_index, fast[j]);
                    }
                    continue;
                }
                // A bad or repeated row letter: the general path says so.
            }
            split_row(row_line, self.delim, &mut scratch);
            let Some(row) = self.row_index(&scratch, row_no, &block)? else {
                break; // not a row: the block has ended
            };
            block.row_lines[row] = row_no;
            lines.next();
            self.read_cells(&scratch, (row, row_no), &mut block, wells);
        }
        Ok(block)
    }

    /// The row of a split row line; `None` when the line is not a row.
    fn row_index(
        &self,
        fields_: &[&[u8]],
        row_no: usize,
        block: &GridBlock,
    ) -> Result<Option<usize>> {
        let label = fields::text(fields_[0]);
        let label = label.trim();
        let row = match label.as_bytes() {
            [b] if b.is_ascii_alphabetic() => (b.to_ascii_uppercase() - b'A') as usize,
            _ => return Ok(None),
        };
        if row >= MAX_ROWS {
            return Err(Error::parse(
                row_no,
                1,
                label.as_bytes(),
                "a row letter A–P",
            ));
        }
        if block.row_lines[row] != 0 {
            return Err(Error::structure(
                row_no,
                format!(
                    "row {label} appears twice in the block for {} nm (heading on line {})",
                    self.wavelength_nm, self.heading_line
                ),
            ));
        }
        Ok(Some(row))
    }

    /// Read the cells of row `row` (line `row_no`); bad cells are kept in
    /// the block for a per-well error later.
    fn read_cells(
        &self,
        fields_: &[&[u8]],
        (row, row_no): (usize, usize),
        block: &mut GridBlock,
        wells: &mut WellCells,
    ) {
        for (k, &c) in self.columns.iter().enumerate() {
            let field_index = k + 1;
            let Some(raw) = fields_.get(field_index) else {
                break; // short row: the remaining wells have no reading
            };
            let slot = row * MAX_COLUMNS + c;
            let value = match cell(raw, self.decimal_comma, self.reading) {
                Ok(Cell::Value(v)) => {
                    wells.read[slot] = true;
                    v
                }
                Ok(Cell::Saturated) => {
                    wells.read[slot] = true;
                    f64::INFINITY
                }
                Ok(Cell::Missing) => EMPTY_CELL,
                Err(expected) => {
                    wells.read[slot] = true;
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
            wells.push(slot, self.block_index, value);
        }
    }
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
mod tests;
