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
use super::quantity;
use super::{kind, shape, table};
use crate::error::{Error, Result};
use crate::spectrum::{self, Grid};
use rayon::prelude::*;
use std::io::Read;
use std::sync::Arc;

mod wide_row;
use wide_row::parse_wide_row;

pub use super::quantity::Quantity;

/// Which layout the file turned out to have.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Layout {
    /// One row per spectrum.
    Wide,
    /// One row per point.
    Long,
    /// Wavelengths down the first column, one column per sample.
    WavelengthDown,
    /// One spectrum: a wavelength column and a value column.
    Single,
    /// JCAMP-DX labelled data records (one spectrum per block).
    Jcamp,
}

impl Layout {
    /// The layout's name in messages and outputs.
    pub fn name(self) -> &'static str {
        match self {
            Layout::Wide => "wide",
            Layout::Long => "long",
            Layout::WavelengthDown => "wavelength-down",
            Layout::Single => "single-spectrum",
            Layout::Jcamp => "JCAMP-DX",
        }
    }
}

/// Options for reading spectra.
#[derive(Debug, Clone, Default)]
pub struct ReadOptions {
    /// What the numbers measure, when the user said (`--quantity`); `None`
    /// lets the file say (a heading, a metadata line, `##YUNITS`), else
    /// absorbance.
    pub quantity: Option<Quantity>,
    /// Read overflow markers (`>4`, `inf` and the user's words, see
    /// [`fields::OverflowMarkers`]) as saturated points, `f64::INFINITY`,
    /// instead of failing the row. Only for callers that mask such points
    /// (plate batches); `fit` leaves it off.
    pub overflow_as_saturated: bool,
    /// The user's overflow words (`--overflow-marker`).
    pub overflow_markers: fields::OverflowMarkers,
    /// The name of a single-spectrum file's sample when no metadata line
    /// names it (the file stem).
    pub fallback_name: Option<String>,
}

impl ReadOptions {
    /// The quantity to read a file that says nothing with.
    pub fn quantity_or_default(&self) -> Quantity {
        self.quantity.unwrap_or_default()
    }
}

/// One part of a file read as a unit (the whole text, a worksheet, a
/// JCAMP-DX block): what it was and what it said about itself.
#[derive(Debug, Clone, PartialEq)]
pub struct Section {
    /// The part's name when a file has several (`sheet 'Run 1'`, `block 2`).
    pub name: Option<String>,
    /// The layout found.
    pub layout: Layout,
    /// Metadata lines above the table, `(key, value)` (free text has an
    /// empty key).
    pub metadata: Vec<(String, String)>,
    /// The quantity the values were read as.
    pub quantity: Quantity,
    /// Where that came from (`--quantity`, `heading '%T'`, `assumed`).
    pub quantity_from: String,
    /// Positions of the part's samples in the input's order of samples.
    pub positions: std::ops::Range<usize>,
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
    /// The parts read (one for a plain text file), with their metadata.
    pub sections: Vec<Section>,
    /// Things the user should know (quantity overridden or doubtful,
    /// readings left out, lines not read).
    pub warnings: Vec<String>,
}

impl SpectraFile {
    /// Add the samples of another file (the next sheet, block or input)
    /// after this one's: positions shift by this file's sample count.
    pub fn append(&mut self, mut other: SpectraFile) {
        let shift = self.n_samples;
        for b in &mut other.blocks {
            b.positions.iter_mut().for_each(|p| *p += shift);
        }
        for f in &mut other.failures {
            f.position += shift;
        }
        for s in &mut other.sections {
            s.positions = s.positions.start + shift..s.positions.end + shift;
        }
        self.blocks.append(&mut other.blocks);
        self.failures.append(&mut other.failures);
        self.sections.append(&mut other.sections);
        self.warnings.append(&mut other.warnings);
        self.n_samples += other.n_samples;
    }
}

/// Read a whole spectra file from its bytes, in any layout and kind
/// ([`open`]). A plain wide file whose rows could not all be read is read
/// again by the general reader ([`table`]), which leaves missing readings
/// out instead of failing their rows.
pub fn read(bytes: &[u8], options: ReadOptions) -> Result<SpectraFile> {
    match open(bytes, options.clone())? {
        Opened::Whole(file) => Ok(file),
        Opened::Wide(stream) => {
            let file = collect(stream)?;
            if file
                .failures
                .iter()
                .any(|f| fails_on_missing_reading(&f.error))
            {
                table::read(bytes, &options, &table::Part::default())
            } else {
                Ok(file)
            }
        }
    }
}

/// Whether a row of a streamed wide file failed on a missing reading
/// (empty, `n/a`), which [`read`] (the general reader) leaves out instead.
pub fn fails_on_missing_reading(error: &Error) -> bool {
    matches!(error, Error::Parse { value, .. } if fields::is_missing_reading(value.as_bytes()))
}

/// Read every chunk of a wide stream into one block (its warnings kept).
pub fn collect<R: Read>(mut stream: WideStream<R>) -> Result<SpectraFile> {
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
    let quantity = stream.options.quantity_or_default();
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
        sections: vec![Section {
            name: None,
            layout: Layout::Wide,
            metadata: Vec::new(),
            quantity,
            quantity_from: stream.quantity_from(),
            positions: 0..n_samples,
        }],
        warnings: stream.warnings,
    })
}

/// A spectra file opened for reading: a plain wide text file (its header on
/// the first line) streams in chunks; everything else (other layouts, a
/// metadata block, workbooks, JCAMP-DX) is read whole.
pub enum Opened<R: Read> {
    /// Wide layout, read chunk by chunk.
    Wide(WideStream<R>),
    /// Any other shape, read completely.
    Whole(SpectraFile),
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
        options: &ReadOptions,
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
    warnings: Vec<String>,
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

/// Where the first line with data is in the bytes read so far.
struct FirstLine {
    line_no: usize,
    start: usize,
    end: usize,
    body_start: usize,
    delimiter: Delimiter,
}

/// Read until the first line that carries data (BOM, blank and comment lines
/// skipped); `None` when the input has none.
fn first_line<R: Read>(
    reader: &mut R,
    buf: &mut Vec<u8>,
    eof: &mut bool,
) -> Result<Option<FirstLine>> {
    while buf.len() < 3 && !*eof {
        *eof = !fill(reader, buf)?;
    }
    let mut pos = if buf.starts_with(b"\xEF\xBB\xBF") {
        3
    } else {
        0
    };
    let mut line_no = 0usize;
    loop {
        let found = memchr::memchr(b'\n', &buf[pos..]);
        if found.is_none() && !*eof {
            *eof = !fill(reader, buf)?;
            continue;
        }
        let next = found.map_or(buf.len(), |i| pos + i + 1);
        let line = &buf[pos..found.map_or(buf.len(), |i| pos + i)];
        let line = line.strip_suffix(b"\r").unwrap_or(line);
        line_no += 1;
        let delimiter = Delimiter::detect(line);
        if !fields::is_skippable(line, delimiter.byte()) {
            return Ok(Some(FirstLine {
                line_no,
                start: pos,
                end: pos + line.len(),
                body_start: next,
                delimiter,
            }));
        }
        if found.is_none() {
            return Ok(None);
        }
        pos = next;
    }
}

/// Open a spectra file: look at what kind of file it is and where its
/// table starts. A plain wide text file (the header on its first line with
/// data) streams; anything else is read whole ([`kind`], [`table`]).
pub fn open<R: Read>(mut reader: R, options: ReadOptions) -> Result<Opened<R>> {
    let mut buf = Vec::new();
    let mut eof = false;
    let first = first_line(&mut reader, &mut buf, &mut eof)?;
    let kind = kind::sniff(&buf);
    let first = match first {
        Some(first) if kind == kind::Kind::Text => first,
        _ if buf.is_empty() || (kind == kind::Kind::Text && eof) => return Err(Error::Empty),
        _ => return read_rest(reader, buf, eof, &options).map(Opened::Whole),
    };
    let mut raw = Vec::new();
    fields::split(
        &buf[first.start..first.end],
        first.delimiter.byte(),
        &mut raw,
    );
    fields::trim_trailing_empty(&mut raw);
    let names: Vec<String> = raw.iter().map(|f| fields::text(f).into_owned()).collect();
    let Some(wavelengths) = plain_wide_header(&names, first.delimiter) else {
        return read_rest(reader, buf, eof, &options).map(Opened::Whole);
    };
    let (ascending, reversed) = spectrum::ascending(wavelengths);
    let grid = Grid::new(ascending)
        .map_err(|e| Error::structure(first.line_no, format!("header: {e}")))?;
    let mut stream = WideStream {
        reader,
        header: WideHeader {
            grid: Arc::new(grid),
            reversed,
            n_fields: names.len(),
            delimiter: first.delimiter,
            header_line: first.line_no,
        },
        options,
        buf,
        start: first.body_start,
        eof,
        next_line: first.line_no + 1,
        rows: 0,
        spare: Vec::new(),
        warnings: Vec::new(),
    };
    if !stream.first_row_fits()? {
        let WideStream {
            reader,
            buf,
            eof,
            options,
            ..
        } = stream;
        return read_rest(reader, buf, eof, &options).map(Opened::Whole);
    }
    Ok(Opened::Wide(stream))
}

/// Read the rest of the input and hand the whole to the reader of its kind.
fn read_rest<R: Read>(
    mut reader: R,
    mut buf: Vec<u8>,
    eof: bool,
    options: &ReadOptions,
) -> Result<SpectraFile> {
    if !eof {
        reader
            .read_to_end(&mut buf)
            .map_err(|e| Error::io("input", e))?;
    }
    kind::read_whole(&buf, options)
}

/// The wavelengths of a plain wide header (`sample,400,410,...`, two
/// wavelengths or more, the first cell not a number), else `None`.
fn plain_wide_header(names: &[String], delimiter: Delimiter) -> Option<Vec<f64>> {
    let decimal_comma = delimiter.allows_decimal_comma();
    if names.len() < 3 || fields::number(names[0].as_bytes(), decimal_comma).is_ok() {
        return None;
    }
    names[1..]
        .iter()
        .map(|n| shape::header_wavelength(n.as_bytes(), decimal_comma))
        .collect()
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
    pub fn options(&self) -> &ReadOptions {
        &self.options
    }

    /// Hand back a block's storage for reuse by the next chunk.
    pub fn recycle(&mut self, block: Block) {
        self.spare = block.absorbance_au;
    }

    /// Whether the first data line has the header's number of fields
    /// (reads ahead as needed); when its values look like another quantity
    /// than absorbance and the user said none, a warning is kept.
    fn first_row_fits(&mut self) -> Result<bool> {
        loop {
            let delim = self.header.delimiter.byte();
            let rest = &self.buf[self.start..];
            let mut offset = 0;
            let ends = memchr::memchr_iter(b'\n', rest).chain(self.eof.then_some(rest.len()));
            for i in ends {
                let line = rest[offset..i]
                    .strip_suffix(b"\r")
                    .unwrap_or(&rest[offset..i]);
                if !fields::is_skippable(line, delim) {
                    let line = line.to_vec();
                    return Ok(self.check_first_row(&line));
                }
                offset = i + 1;
            }
            if self.eof {
                return Ok(false);
            }
            if !fill(&mut self.reader, &mut self.buf)? {
                self.eof = true;
            }
        }
    }

    fn check_first_row(&mut self, line: &[u8]) -> bool {
        let mut cells = Vec::new();
        fields::split(line, self.header.delimiter.byte(), &mut cells);
        fields::trim_trailing_empty(&mut cells);
        if cells.len() != self.header.n_fields {
            return false;
        }
        let decimal_comma = self.header.delimiter.allows_decimal_comma();
        let values = cells[1..]
            .iter()
            .filter_map(|c| fields::number(c, decimal_comma).ok());
        let decided = quantity::decide(self.options.quantity, None);
        self.warnings
            .extend(quantity::plausibility_warning(&decided, values));
        true
    }

    /// Where the quantity the rows are read as came from.
    fn quantity_from(&self) -> String {
        match self.options.quantity {
            Some(_) => "--quantity".into(),
            None => "assumed (nothing in the file says)".into(),
        }
    }

    /// Warnings about the input (values that look like another quantity).
    pub fn warnings(&self) -> &[String] {
        &self.warnings
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
        let options = &self.options;
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

#[cfg(test)]
mod tests;
