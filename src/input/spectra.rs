//! Spectrum CSV parser: wide and long layouts, detected from the header.
//!
//! Wide: `sample,<wavelength>,<wavelength>,...`, one row per spectrum.
//! Long: `sample,wavelength_nm,absorbance`, one row per point.
//! Delimiter comma, semicolon or tab (detected from the header); a decimal
//! comma is read when the delimiter is a semicolon or tab; UTF-8 BOM, CRLF,
//! blank lines, `#` comment lines and trailing empty cells are tolerated.
//! Wavelengths may run ascending or descending (reversed on input).
//!
//! A bad row does not stop the file: it becomes a [`RowFailure`] and the other
//! rows are still read. Problems with the header are fatal.

use super::fields::{self, Delimiter};
use crate::error::{Error, Result};
use crate::spectrum::{self, Grid};
use rayon::prelude::*;
use std::collections::HashMap;
use std::io::Read;
use std::sync::Arc;

/// What the numbers in the file measure; converted to decadic absorbance on
/// input.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Quantity {
    /// Decadic absorbance A = −log10(T), AU.
    #[default]
    Absorbance,
    /// Napierian absorbance (attenuance) −ln(T); divided by ln 10.
    AbsorbanceNatural,
    /// Transmittance as a fraction 0–1.
    Transmittance,
    /// Transmittance in percent 0–100.
    TransmittancePercent,
}

impl Quantity {
    /// Convert a value read from the file to decadic absorbance, or say what
    /// was expected.
    pub fn to_absorbance(self, v: f64) -> std::result::Result<f64, &'static str> {
        match self {
            Quantity::Absorbance => Ok(v),
            Quantity::AbsorbanceNatural => Ok(v / std::f64::consts::LN_10),
            Quantity::Transmittance => {
                if v > 0.0 {
                    Ok(-v.log10())
                } else {
                    Err("a transmittance fraction above 0")
                }
            }
            Quantity::TransmittancePercent => {
                if v > 0.0 {
                    Ok(2.0 - v.log10())
                } else {
                    Err("a transmittance percentage above 0")
                }
            }
        }
    }

    fn noun(self) -> &'static str {
        match self {
            Quantity::Absorbance | Quantity::AbsorbanceNatural => "an absorbance (a number)",
            Quantity::Transmittance => "a transmittance fraction (a number)",
            Quantity::TransmittancePercent => "a transmittance percentage (a number)",
        }
    }
}

/// Which layout the file turned out to have.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Layout {
    /// One row per spectrum.
    Wide,
    /// One row per point.
    Long,
}

/// Options for reading spectra.
#[derive(Debug, Clone, Copy, Default)]
pub struct ReadOptions {
    /// What the numbers measure.
    pub quantity: Quantity,
    /// Read instrument overflow markers (`OVER`, `>4`, …; see
    /// [`fields::is_overflow_marker`]) as saturated points, `f64::INFINITY`,
    /// instead of failing the row. Only for callers that mask such points
    /// (plate batches); `fit` leaves it off.
    pub overflow_as_saturated: bool,
}

/// Spectra that share one wavelength grid, stored row-major.
#[derive(Debug, Clone)]
pub struct Block {
    /// The shared grid (ascending).
    pub grid: Arc<Grid>,
    /// Sample identifiers.
    pub ids: Vec<String>,
    /// Position of each spectrum in the input's order of samples.
    pub positions: Vec<usize>,
    /// Absorbances in AU: `ids.len()` rows of `grid.len()` values.
    pub absorbance_au: Vec<f64>,
}

impl Block {
    /// The absorbances of spectrum `i`.
    pub fn row(&self, i: usize) -> &[f64] {
        let n = self.grid.len();
        &self.absorbance_au[i * n..(i + 1) * n]
    }

    /// Number of spectra.
    pub fn len(&self) -> usize {
        self.ids.len()
    }

    /// Whether there are no spectra.
    pub fn is_empty(&self) -> bool {
        self.ids.is_empty()
    }
}

/// A sample whose row(s) could not be read.
#[derive(Debug)]
pub struct RowFailure {
    /// Position in the input's order of samples.
    pub position: usize,
    /// The sample identifier, as far as it could be read.
    pub sample: String,
    /// What went wrong, with line and column.
    pub error: Error,
}

/// Everything read from one spectra file.
#[derive(Debug)]
pub struct SpectraFile {
    /// The detected layout.
    pub layout: Layout,
    /// The detected delimiter.
    pub delimiter: Delimiter,
    /// Spectra grouped by wavelength grid.
    pub blocks: Vec<Block>,
    /// Samples that could not be read.
    pub failures: Vec<RowFailure>,
    /// Number of samples (read or failed).
    pub n_samples: usize,
}

/// Read a whole spectra file from its bytes (both layouts).
pub fn read(bytes: &[u8], options: ReadOptions) -> Result<SpectraFile> {
    match open(bytes, options)? {
        Opened::Long(file) => Ok(file),
        Opened::Wide(mut stream) => {
            let grid = stream.grid().clone();
            let delimiter = stream.header.delimiter;
            let mut block = Block {
                grid,
                ids: Vec::new(),
                positions: Vec::new(),
                absorbance_au: Vec::new(),
            };
            let mut failures = Vec::new();
            while let Some(chunk) = stream.next_chunk()? {
                block.ids.extend(chunk.block.ids);
                block.positions.extend(chunk.block.positions);
                block
                    .absorbance_au
                    .extend_from_slice(&chunk.block.absorbance_au);
                failures.extend(chunk.failures);
            }
            let n_samples = stream.rows_read();
            Ok(SpectraFile {
                layout: Layout::Wide,
                delimiter,
                blocks: if block.is_empty() {
                    Vec::new()
                } else {
                    vec![block]
                },
                failures,
                n_samples,
            })
        }
    }
}

/// A spectra file opened for reading: a wide file streams in chunks; a
/// long file (whose samples may be spread over the file) is read whole.
pub enum Opened<R: Read> {
    /// Wide layout, read chunk by chunk.
    Wide(WideStream<R>),
    /// Long layout, read completely.
    Long(SpectraFile),
}

/// Lines per chunk of a wide stream. Fixed (not tied to byte counts or
/// threads), so chunking never depends on the machine.
pub const LINES_PER_CHUNK: usize = 2048;

/// What the header of a wide file says.
#[derive(Debug, Clone)]
pub struct WideHeader {
    /// The wavelength grid (ascending).
    pub grid: Arc<Grid>,
    /// Whether the file's wavelengths run descending (values are reversed).
    pub reversed: bool,
    /// Fields per row: the sample name and one per wavelength.
    pub n_fields: usize,
    /// The delimiter.
    pub delimiter: Delimiter,
    /// The header's line number.
    pub header_line: usize,
}

/// One chunk of a wide stream.
#[derive(Debug)]
pub struct Chunk {
    /// The spectra read (positions count from the start of the file).
    pub block: Block,
    /// Rows that could not be read.
    pub failures: Vec<RowFailure>,
}

/// One data line of a [`RawChunk`].
#[derive(Debug, Clone, Copy)]
pub struct RawLine {
    /// Line number in the file (1-based).
    pub line_no: usize,
    /// Byte range of the line in [`RawChunk::text`] (without the line end).
    pub start: usize,
    /// End of the byte range.
    pub end: usize,
}

/// A chunk of a wide file's data lines, not yet parsed.
#[derive(Debug)]
pub struct RawChunk {
    /// The bytes the lines point into.
    pub text: Vec<u8>,
    /// The data lines (blank and comment lines left out), in file order.
    pub lines: Vec<RawLine>,
    /// Position (row index from the start of the file) of the first line.
    pub first_position: usize,
}

impl RawChunk {
    /// The bytes of line `i`.
    pub fn line(&self, i: usize) -> &[u8] {
        let l = self.lines[i];
        &self.text[l.start..l.end]
    }
}

impl WideHeader {
    /// Parse one data line of this file into `dst` (one absorbance per
    /// wavelength of [`WideHeader::grid`], ascending). Returns the sample
    /// name, or the sample name (or `(line N)`) and what is wrong.
    pub fn parse_row<'a>(
        &self,
        line: &'a [u8],
        line_no: usize,
        options: ReadOptions,
        dst: &mut [f64],
        scratch: &mut Vec<&'a [u8]>,
    ) -> std::result::Result<String, (String, Error)> {
        parse_wide_row(line, line_no, self, options, dst, scratch)
    }
}

/// A wide-layout file read in chunks of [`LINES_PER_CHUNK`] lines, so memory
/// stays bounded however long the file is. Rows are parsed in parallel.
pub struct WideStream<R: Read> {
    reader: R,
    /// The header.
    pub header: WideHeader,
    options: ReadOptions,
    buf: Vec<u8>,
    start: usize,
    eof: bool,
    next_line: usize,
    rows: usize,
    spare: Vec<f64>,
}

const READ_SIZE: usize = 1 << 20;

/// Read more bytes into `buf` (appending, without zero-filling first);
/// returns false at end of input.
fn fill<R: Read>(reader: &mut R, buf: &mut Vec<u8>) -> Result<bool> {
    buf.reserve(READ_SIZE);
    loop {
        match reader.by_ref().take(READ_SIZE as u64).read_to_end(buf) {
            Ok(n) => return Ok(n > 0),
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(Error::io("input", e)),
        }
    }
}

/// Open a spectra file: read up to its header, detect delimiter and layout.
pub fn open<R: Read>(mut reader: R, options: ReadOptions) -> Result<Opened<R>> {
    let mut buf = Vec::new();
    let mut eof = false;
    let mut pos = 0usize; // start of the line being examined
    let mut line_no = 0usize;
    let mut bom_checked = false;
    let (header_line, header_end, body_start, delimiter) = loop {
        if !bom_checked && (buf.len() >= 3 || eof) {
            if buf.starts_with(b"\xEF\xBB\xBF") {
                pos = 3;
            }
            bom_checked = true;
        }
        if bom_checked {
            if let Some(i) = memchr::memchr(b'\n', &buf[pos..]) {
                line_no += 1;
                let line = &buf[pos..pos + i];
                let line = line.strip_suffix(b"\r").unwrap_or(line);
                let d = Delimiter::detect(line);
                if !fields::is_skippable(line, d.byte()) {
                    break (line_no, pos + line.len(), pos + i + 1, d);
                }
                pos += i + 1;
                continue;
            }
            if eof {
                let line = &buf[pos..];
                let line = line.strip_suffix(b"\r").unwrap_or(line);
                let d = Delimiter::detect(line);
                if line.is_empty() || fields::is_skippable(line, d.byte()) {
                    return Err(Error::Empty);
                }
                line_no += 1;
                break (line_no, pos + line.len(), buf.len(), d);
            }
        }
        if !fill(&mut reader, &mut buf)? {
            eof = true;
        }
    };
    let header_bytes = &buf[pos..header_end];
    let mut raw = Vec::new();
    fields::split(header_bytes, delimiter.byte(), &mut raw);
    fields::trim_trailing_empty(&mut raw);
    let names: Vec<String> = raw.iter().map(|f| fields::text(f).into_owned()).collect();
    match classify_header(&names, header_line, delimiter)? {
        HeaderKind::Wide(wavelengths) => {
            let (ascending, reversed) = spectrum::ascending(wavelengths);
            let grid = Arc::new(
                Grid::new(ascending)
                    .map_err(|e| Error::structure(header_line, format!("header: {e}")))?,
            );
            let mut stream = WideStream {
                reader,
                header: WideHeader {
                    grid,
                    reversed,
                    n_fields: names.len(),
                    delimiter,
                    header_line,
                },
                options,
                buf,
                start: body_start,
                eof,
                next_line: header_line + 1,
                rows: 0,
                spare: Vec::new(),
            };
            if !stream.has_rows()? {
                return Err(Error::structure(
                    header_line,
                    "the header is the only line: expected at least one spectrum row after it",
                ));
            }
            Ok(Opened::Wide(stream))
        }
        HeaderKind::Long => {
            let mut rest = buf.split_off(body_start);
            if !eof {
                reader
                    .read_to_end(&mut rest)
                    .map_err(|e| Error::io("input", e))?;
            }
            Ok(Opened::Long(read_long(
                &rest,
                header_line,
                delimiter,
                options,
            )?))
        }
    }
}

impl<R: Read> WideStream<R> {
    /// The wavelength grid every row shares.
    pub fn grid(&self) -> &Arc<Grid> {
        &self.header.grid
    }

    /// Number of data rows read so far (good and failed).
    pub fn rows_read(&self) -> usize {
        self.rows
    }

    /// The reading options the stream was opened with.
    pub fn options(&self) -> ReadOptions {
        self.options
    }

    /// Hand back a block's storage for reuse by the next chunk.
    pub fn recycle(&mut self, block: Block) {
        self.spare = block.absorbance_au;
    }

    /// Whether any data line follows (reads ahead as needed).
    fn has_rows(&mut self) -> Result<bool> {
        loop {
            let delim = self.header.delimiter.byte();
            let rest = &self.buf[self.start..];
            let mut offset = 0;
            for i in memchr::memchr_iter(b'\n', rest) {
                if !fields::is_skippable(&rest[offset..i], delim) {
                    return Ok(true);
                }
                offset = i + 1;
            }
            if self.eof {
                return Ok(!fields::is_skippable(&rest[offset..], delim));
            }
            if !fill(&mut self.reader, &mut self.buf)? {
                self.eof = true;
            }
        }
    }

    /// Read the next chunk of up to [`LINES_PER_CHUNK`] lines; `None` at the
    /// end of the file.
    pub fn next_chunk(&mut self) -> Result<Option<Chunk>> {
        self.next_chunk_parsed()
    }

    /// Read the next chunk of up to [`LINES_PER_CHUNK`] lines without parsing
    /// them: the caller parses each row with [`WideHeader::parse_row`] where
    /// it uses it (`fit::fit_stream` parses and fits a row in one go, while
    /// it is in cache). `spare` is a buffer to reuse for the text (a
    /// previous chunk's, handed back). `None` at the end of the file.
    pub fn next_raw_chunk(&mut self, spare: Option<Vec<u8>>) -> Result<Option<RawChunk>> {
        let Some((end, first_line)) = self.gather()? else {
            return Ok(None);
        };
        let delim = self.header.delimiter.byte();
        let mut lines: Vec<RawLine> = Vec::with_capacity(LINES_PER_CHUNK);
        let mut count = 0;
        let base = self.buf.as_ptr() as usize;
        for (n, line) in fields::lines(&self.buf[..end]) {
            count = n;
            if !fields::is_skippable(line, delim) {
                let start = line.as_ptr() as usize - base;
                lines.push(RawLine {
                    line_no: first_line + n - 1,
                    start,
                    end: start + line.len(),
                });
            }
        }
        self.next_line += count;
        let first_position = self.rows;
        self.rows += lines.len();
        // The chunk takes the buffer; the rest of the input moves to the spare.
        let mut rest = spare.unwrap_or_default();
        rest.clear();
        rest.extend_from_slice(&self.buf[end..]);
        let text = std::mem::replace(&mut self.buf, rest);
        self.start = 0;
        if lines.is_empty() && self.eof && self.buf.is_empty() {
            return Ok(None);
        }
        Ok(Some(RawChunk {
            text,
            lines,
            first_position,
        }))
    }

    /// Drop consumed bytes and read until the next chunk's lines are
    /// complete: the chunk's end in `buf` and its first line number, or
    /// `None` when nothing is left.
    fn gather(&mut self) -> Result<Option<(usize, usize)>> {
        if self.start > 0 {
            self.buf.drain(..self.start);
            self.start = 0;
        }
        let mut newlines = memchr::memchr_iter(b'\n', &self.buf).count();
        while newlines < LINES_PER_CHUNK && !self.eof {
            let old = self.buf.len();
            if fill(&mut self.reader, &mut self.buf)? {
                newlines += memchr::memchr_iter(b'\n', &self.buf[old..]).count();
            } else {
                self.eof = true;
            }
        }
        if self.buf.is_empty() {
            return Ok(None);
        }
        let end = if newlines >= LINES_PER_CHUNK {
            memchr::memchr_iter(b'\n', &self.buf)
                .nth(LINES_PER_CHUNK - 1)
                .map_or(self.buf.len(), |i| i + 1)
        } else {
            self.buf.len()
        };
        Ok(Some((end, self.next_line)))
    }

    fn next_chunk_parsed(&mut self) -> Result<Option<Chunk>> {
        let Some((end, first_line)) = self.gather()? else {
            return Ok(None);
        };
        let delim = self.header.delimiter.byte();
        let mut lines: Vec<(usize, &[u8])> = Vec::with_capacity(LINES_PER_CHUNK);
        let mut count = 0;
        for (n, line) in fields::lines(&self.buf[..end]) {
            count = n;
            if !fields::is_skippable(line, delim) {
                lines.push((first_line + n - 1, line));
            }
        }
        self.next_line += count;
        self.start = end;
        let n = self.header.grid.len();
        // Every slot is overwritten by the parser (failed rows are compacted
        // out), so a recycled buffer need not be cleared first.
        let mut values = std::mem::take(&mut self.spare);
        values.resize(lines.len() * n, 0.0);
        values.truncate(lines.len() * n);
        let header = &self.header;
        let options = self.options;
        let parsed: Vec<std::result::Result<String, (String, Error)>> = values
            .par_chunks_mut(n)
            .zip(lines.par_iter())
            .with_min_len(64)
            .map_init(Vec::new, |scratch, (dst, &(line_no, line))| {
                parse_wide_row(line, line_no, header, options, dst, scratch)
            })
            .collect();
        let base = self.rows;
        self.rows += parsed.len();
        let mut ids = Vec::with_capacity(parsed.len());
        let mut positions = Vec::with_capacity(parsed.len());
        let mut failures = Vec::new();
        let mut kept = 0;
        for (i, row) in parsed.into_iter().enumerate() {
            match row {
                Ok(id) => {
                    if kept != i {
                        values.copy_within(i * n..(i + 1) * n, kept * n);
                    }
                    kept += 1;
                    ids.push(id);
                    positions.push(base + i);
                }
                Err((sample, error)) => failures.push(RowFailure {
                    position: base + i,
                    sample,
                    error,
                }),
            }
        }
        values.truncate(kept * n);
        if lines.is_empty() && self.eof && self.start >= self.buf.len() {
            self.buf.clear();
            self.start = 0;
            return Ok(None);
        }
        Ok(Some(Chunk {
            block: Block {
                grid: self.header.grid.clone(),
                ids,
                positions,
                absorbance_au: values,
            },
            failures,
        }))
    }
}

enum HeaderKind {
    Wide(Vec<f64>),
    Long,
}

const WAVELENGTH_NAMES: &[&str] = &[
    "wavelength_nm",
    "wavelength",
    "wavelength (nm)",
    "nm",
    "lambda_nm",
];
const VALUE_NAMES: &[&str] = &[
    "absorbance",
    "absorbance_au",
    "a",
    "transmittance",
    "transmittance_percent",
    "t",
    "%t",
    "value",
];

fn classify_header(names: &[String], line: usize, delimiter: Delimiter) -> Result<HeaderKind> {
    if names.len() < 2 {
        return Err(Error::structure(
            line,
            "header has one column: expected `sample,<wavelength>,<wavelength>,...` (wide) or `sample,wavelength_nm,absorbance` (long), separated by commas, semicolons or tabs",
        ));
    }
    let second = names[1].trim().to_ascii_lowercase();
    if WAVELENGTH_NAMES.contains(&second.as_str()) {
        let third = names.get(2).map(|s| s.trim().to_ascii_lowercase());
        return match third {
            Some(t) if VALUE_NAMES.contains(&t.as_str()) => Ok(HeaderKind::Long),
            Some(t) => Err(Error::Parse {
                at: crate::error::Location {
                    line,
                    column: Some(3),
                },
                value: t,
                expected:
                    "'absorbance' or 'transmittance' as the third column of a long-layout file"
                        .into(),
            }),
            None => Err(Error::structure(
                line,
                "long-layout header has two columns: expected `sample,wavelength_nm,absorbance`",
            )),
        };
    }
    let mut wavelengths = Vec::with_capacity(names.len() - 1);
    for (i, name) in names.iter().enumerate().skip(1) {
        let t = name.trim();
        let t = t
            .strip_suffix("nm")
            .or_else(|| t.strip_suffix("NM"))
            .unwrap_or(t)
            .trim();
        match fields::number(t.as_bytes(), delimiter.allows_decimal_comma()) {
            Ok(w) => wavelengths.push(w),
            Err(e) => {
                return Err(Error::parse(
                    line,
                    i + 1,
                    name.as_bytes(),
                    e.expected("a wavelength in nm in the header of a wide-layout file (or `sample,wavelength_nm,absorbance` for the long layout)"),
                ));
            }
        }
    }
    Ok(HeaderKind::Wide(wavelengths))
}

/// Powers of ten exactly representable as f64.
const POW10: [f64; 23] = [
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
fn fast_decimal<const DECIMAL_COMMA: bool>(
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
fn digit_run(bytes: &[u8], mut k: usize, mut mant: u64) -> (usize, u64) {
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
const MAX_EXACT: u64 = 1 << 53;

/// Powers of ten as integers, for shifting the mantissa by a digit count.
const POW10_U64: [u64; 9] = [
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
fn eight_digits(chunk: &[u8]) -> (usize, u64) {
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
fn finish(
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
fn fast_row(line: &[u8], delim: u8, decimal_comma: bool, dst: &mut [f64]) -> Option<usize> {
    if decimal_comma {
        fast_row_with::<true>(line, delim, dst)
    } else {
        fast_row_with::<false>(line, delim, dst)
    }
}

fn fast_row_with<const DECIMAL_COMMA: bool>(
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
fn parse_wide_row<'a>(
    line: &'a [u8],
    line_no: usize,
    header: &WideHeader,
    options: ReadOptions,
    dst: &mut [f64],
    scratch: &mut Vec<&'a [u8]>,
) -> std::result::Result<String, (String, Error)> {
    let delim = header.delimiter.byte();
    let decimal_comma = header.delimiter.allows_decimal_comma();
    let n = dst.len();
    let n_fields = header.n_fields;
    let id = match fast_row(line, delim, decimal_comma, dst) {
        Some(id_end) => {
            let id = fields::text(&line[..id_end]).into_owned();
            if id.is_empty() {
                return Err((
                    format!("(line {line_no})"),
                    Error::parse(line_no, 1, b"", "a sample name in the first column"),
                ));
            }
            if !matches!(options.quantity, Quantity::Absorbance) {
                for (k, v) in dst.iter_mut().enumerate() {
                    match options.quantity.to_absorbance(*v) {
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
                    && fields::is_overflow_marker(field, decimal_comma)
                {
                    dst[col] = f64::INFINITY;
                    continue;
                }
                let v = fields::number(field, decimal_comma)
                    .map_err(|e| e.expected(options.quantity.noun()))
                    .and_then(|v| options.quantity.to_absorbance(v).map_err(str::to_string))
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

fn read_long(
    body: &[u8],
    header_line: usize,
    delimiter: Delimiter,
    options: ReadOptions,
) -> Result<SpectraFile> {
    struct Pending {
        id: String,
        first_line: usize,
        points: Vec<(f64, f64)>,
        error: Option<Error>,
    }
    let delim = delimiter.byte();
    let decimal_comma = delimiter.allows_decimal_comma();
    let mut order: Vec<Pending> = Vec::new();
    let mut index: HashMap<String, usize> = HashMap::new();
    let mut scratch = Vec::new();
    let mut any = false;
    for (n, line) in fields::lines(body) {
        let line_no = n + header_line;
        if fields::is_skippable(line, delim) {
            continue;
        }
        any = true;
        fields::split(line, delim, &mut scratch);
        fields::trim_trailing_empty(&mut scratch);
        let id = fields::text(scratch[0]).into_owned();
        let slot = *index.entry(id.clone()).or_insert_with(|| {
            order.push(Pending {
                id: id.clone(),
                first_line: line_no,
                points: Vec::new(),
                error: None,
            });
            order.len() - 1
        });
        let pending = &mut order[slot];
        if pending.error.is_some() {
            continue;
        }
        let row = (|| -> Result<(f64, f64)> {
            if id.is_empty() {
                return Err(Error::parse(
                    line_no,
                    1,
                    b"",
                    "a sample name in the first column",
                ));
            }
            if scratch.len() != 3 {
                return Err(Error::structure(
                    line_no,
                    format!(
                        "{} fields: expected 3 (sample, wavelength in nm, value)",
                        scratch.len()
                    ),
                ));
            }
            let w = fields::number(scratch[1], decimal_comma).map_err(|e| {
                Error::parse(line_no, 2, scratch[1], e.expected("a wavelength in nm"))
            })?;
            if options.overflow_as_saturated
                && fields::number(scratch[2], decimal_comma).is_err()
                && fields::is_overflow_marker(scratch[2], decimal_comma)
            {
                return Ok((w, f64::INFINITY));
            }
            let v = fields::number(scratch[2], decimal_comma)
                .map_err(|e| e.expected(options.quantity.noun()))
                .and_then(|v| options.quantity.to_absorbance(v).map_err(str::to_string))
                .map_err(|expected| Error::parse(line_no, 3, scratch[2], expected))?;
            Ok((w, v))
        })();
        match row {
            Ok(p) => pending.points.push(p),
            Err(e) => pending.error = Some(e),
        }
    }
    if !any {
        return Err(Error::structure(
            header_line,
            "the header is the only line: expected rows of `sample,wavelength_nm,absorbance` after it",
        ));
    }
    let total = order.len();
    let mut failures = Vec::new();
    let mut groups: HashMap<Vec<u64>, usize> = HashMap::new();
    let mut blocks: Vec<Block> = Vec::new();
    for (position, p) in order.into_iter().enumerate() {
        if let Some(error) = p.error {
            failures.push(RowFailure {
                position,
                sample: p.id,
                error,
            });
            continue;
        }
        // A sample's rows may come in any order (README): sort them by
        // wavelength; a wavelength given twice stays an error (Grid::new).
        let mut points = p.points;
        points.sort_by(|x, y| x.0.total_cmp(&y.0));
        let (w, a): (Vec<f64>, Vec<f64>) = points.into_iter().unzip();
        let grid = match Grid::new(w) {
            Ok(g) => g,
            Err(e) => {
                let error = Error::structure(p.first_line, format!("sample '{}': {e}", p.id));
                failures.push(RowFailure {
                    position,
                    sample: p.id,
                    error,
                });
                continue;
            }
        };
        let key: Vec<u64> = grid.wavelengths_nm().iter().map(|w| w.to_bits()).collect();
        let b = *groups.entry(key).or_insert_with(|| {
            blocks.push(Block {
                grid: Arc::new(grid),
                ids: Vec::new(),
                positions: Vec::new(),
                absorbance_au: Vec::new(),
            });
            blocks.len() - 1
        });
        let block = &mut blocks[b];
        block.ids.push(p.id);
        block.positions.push(position);
        block.absorbance_au.extend_from_slice(&a);
    }
    Ok(SpectraFile {
        layout: Layout::Long,
        delimiter,
        blocks,
        failures,
        n_samples: total,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read_str(s: &str) -> Result<SpectraFile> {
        read(s.as_bytes(), ReadOptions::default())
    }

    #[test]
    fn wide_layout_is_detected_and_read() {
        let f = read_str("sample,400,500,600\ns1,0.1,0.2,0.3\ns2,0.4,0.5,0.6\n").unwrap();
        assert_eq!(f.layout, Layout::Wide);
        assert_eq!(f.blocks.len(), 1);
        assert_eq!(f.blocks[0].ids, vec!["s1", "s2"]);
        assert_eq!(f.blocks[0].row(1), &[0.4, 0.5, 0.6]);
    }

    #[test]
    fn long_layout_is_detected_and_grouped() {
        let f = read_str(
            "sample,wavelength_nm,absorbance\ns1,400,0.1\ns1,500,0.2\ns2,400,0.3\ns2,500,0.4\n",
        )
        .unwrap();
        assert_eq!(f.layout, Layout::Long);
        assert_eq!(f.blocks.len(), 1);
        assert_eq!(f.blocks[0].row(1), &[0.3, 0.4]);
    }

    #[test]
    fn semicolon_decimal_comma_bom_crlf_are_read() {
        let f = read_str("\u{feff}sample;400;500\r\ns1;0,1;0,25\r\n").unwrap();
        assert_eq!(f.delimiter, Delimiter::Semicolon);
        assert_eq!(f.blocks[0].row(0), &[0.1, 0.25]);
    }

    #[test]
    fn descending_wavelengths_are_reversed_with_their_values() {
        let f = read_str("sample,600,500,400\ns1,0.3,0.2,0.1\n").unwrap();
        assert_eq!(f.blocks[0].grid.wavelengths_nm(), &[400.0, 500.0, 600.0]);
        assert_eq!(f.blocks[0].row(0), &[0.1, 0.2, 0.3]);
    }

    #[test]
    fn bad_cell_fails_only_its_row() {
        let f = read_str("sample,400,500\ns1,0.1,abc\ns2,0.1,0.2\n").unwrap();
        assert_eq!(f.failures.len(), 1);
        assert_eq!(f.failures[0].sample, "s1");
        assert_eq!(
            f.failures[0].error.to_string(),
            "line 2, column 3 ('abc'): expected an absorbance (a number)"
        );
        assert_eq!(f.blocks[0].ids, vec!["s2"]);
    }

    #[test]
    fn short_row_is_reported() {
        let f = read_str("sample,400,500\ns1,0.1\n").unwrap();
        assert!(
            f.failures[0]
                .error
                .to_string()
                .contains("2 fields but the header has 3")
        );
    }

    #[test]
    fn empty_and_header_only_are_errors() {
        assert!(matches!(read_str(""), Err(Error::Empty)));
        assert!(matches!(read_str("\n\n"), Err(Error::Empty)));
        let e = read_str("sample,400,500\n").unwrap_err();
        assert!(e.to_string().contains("only line"), "{e}");
    }

    #[test]
    fn duplicate_header_wavelength_is_rejected() {
        let e = read_str("sample,400,400\ns,1,2\n").unwrap_err();
        assert!(e.to_string().contains("appears twice"), "{e}");
    }

    #[test]
    fn transmittance_is_converted_to_absorbance() {
        let opts = ReadOptions {
            quantity: Quantity::TransmittancePercent,
            ..Default::default()
        };
        let f = read("sample,400\ns,10\n".as_bytes(), opts).unwrap();
        assert!((f.blocks[0].row(0)[0] - 1.0).abs() < 1e-12);
        let f = read("sample,400\ns,0\n".as_bytes(), opts).unwrap();
        assert!(f.failures[0].error.to_string().contains("above 0"));
    }

    #[test]
    fn eight_digit_swar_matches_scalar() {
        for text in [
            "12345678", "1234,x  ", "0000000a", "9;......", "x1234567", "00012345", "98765432",
        ] {
            let (count, value) = eight_digits(text.as_bytes());
            let digits: String = text
                .chars()
                .take_while(|c| c.is_ascii_digit())
                .take(8)
                .collect();
            assert_eq!(count, digits.len(), "{text}");
            assert_eq!(value, digits.parse::<u64>().unwrap_or(0), "{text}");
        }
    }

    #[test]
    fn fast_path_is_correctly_rounded_for_many_decimals() {
        // Compared bit for bit with the standard library's correctly rounded
        // parser, over digit counts 1–20 on both sides of the point.
        let mut state: u64 = 7;
        let mut header = String::from("sample");
        let mut row = String::from("s");
        let mut texts = Vec::new();
        for k in 0..400 {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let int_digits = (state >> 60) as usize % 4;
            let frac_digits = (state >> 50) as usize % 21;
            let mut t = String::new();
            if state & 1 == 1 {
                t.push('-');
            }
            for d in 0..int_digits.max(1) {
                t.push(char::from(b'0' + ((state >> (d * 3)) % 10) as u8));
            }
            if frac_digits > 0 {
                t.push('.');
                for d in 0..frac_digits {
                    t.push(char::from(b'0' + ((state >> ((d * 5) % 60)) % 10) as u8));
                }
            }
            header.push_str(&format!(",{}", 300 + k));
            row.push_str(&format!(",{t}"));
            texts.push(t);
        }
        let f = read_str(&format!("{header}\n{row}\n")).unwrap();
        for (v, t) in f.blocks[0].row(0).iter().zip(&texts) {
            assert_eq!(v.to_bits(), t.parse::<f64>().unwrap().to_bits(), "{t}");
        }
    }

    #[test]
    fn seventeen_digit_numbers_are_rounded_once() {
        // 17 significant digits (as a shortest round-trip printer may write)
        // exceed 2⁵³: converting the digits to f64 and then dividing rounds
        // twice, off by one ulp for these (found by comparing the two in
        // Python); they must take the correctly rounded general path.
        let texts = [
            "0.92030920993190389",
            "0.78057710105581731",
            "-0.64708321257442331",
        ];
        let f = read_str(&format!("sample,400,500,600\ns,{}\n", texts.join(","))).unwrap();
        for (v, t) in f.blocks[0].row(0).iter().zip(texts) {
            assert_eq!(v.to_bits(), t.parse::<f64>().unwrap().to_bits(), "{t}");
        }
    }

    #[test]
    fn fast_and_general_number_paths_agree() {
        // Plain decimals take the fast path; the others fall back to the
        // general parser (fast-float2); both must give the same values.
        let f = read_str(
            "sample,400,500,600,700\ns1,0.125,-0.5,+.25,3.\ns2,1e-3, 0.5 ,\"0.75\",-2E-1\n",
        )
        .unwrap();
        assert_eq!(f.blocks[0].row(0), &[0.125, -0.5, 0.25, 3.0]);
        assert_eq!(f.blocks[0].row(1), &[1e-3, 0.5, 0.75, -0.2]);
        let digits = "0.1234567890123456789";
        let g = read_str(&format!("sample,400\ns,{digits}\n")).unwrap();
        assert_eq!(
            g.blocks[0].row(0)[0].to_bits(),
            digits.parse::<f64>().unwrap().to_bits()
        );
    }

    #[test]
    fn trailing_delimiters_and_extra_fields_are_told_apart() {
        let f = read_str("sample,400,500,,\ns1,0.1,0.2,,\ns2,0.1,0.2,0.3\n").unwrap();
        assert_eq!(f.blocks[0].ids, vec!["s1"]);
        assert!(
            f.failures[0]
                .error
                .to_string()
                .contains("4 fields but the header has 3")
        );
    }

    #[test]
    fn long_layout_duplicate_wavelength_fails_the_sample() {
        let f = read_str("sample,wavelength_nm,absorbance\ns1,400,0.1\ns1,400,0.2\ns2,400,0.3\n")
            .unwrap();
        assert_eq!(f.failures.len(), 1);
        assert_eq!(f.failures[0].sample, "s1");
        assert_eq!(f.blocks[0].ids, vec!["s2"]);
    }
}
