//! Splitting an input file into plates as it streams in (input stage).
//!
//! In: a reader over one input file in any of the three layouts: the
//! plate-grid layout ([`super::plate`]), or the wide and long spectra
//! layouts ([`super::spectra`]) with sample identifiers that are wells
//! (`A1`) or plate-qualified wells (`plate1:A1`). Out: one [`RawPlate`] at a
//! time, which a worker turns into [`PlateSpectra`] with [`RawPlate::parse`].
//!
//! The plate-grid and wide layouts are streamed: only the plate being
//! gathered is held in memory, so a file of a thousand plates costs no more
//! memory than one plate. That needs the text of one plate to be together:
//!
//! - plate-grid: a heading with a new `plate=` name starts a new plate; a
//!   heading without a name continues the current plate, unless its
//!   wavelength is already in it, which starts the next (unnamed) plate.
//! - wide: a row whose identifier names another plate (`P2:A1` after
//!   `P1:H12`) starts a new plate; with bare well identifiers, a well that
//!   repeats starts the next plate.
//!
//! A named plate whose text reappears after another plate is reported as an
//! error (its second part is skipped). Unnamed plates are named after the
//! file: `run`, `run-2`, `run-3`, …
//!
//! The long layout lets a sample's rows sit anywhere in the file, so a long
//! file is read whole and then split by plate.

use super::fields::{self, Delimiter};
use super::plate::{self, PlateFormat, PlateSpectra, Well, WellFailure};
use super::spectra::{self, Layout};
use crate::error::{Error, Location, Result};
use std::collections::{HashMap, HashSet, VecDeque};
use std::io::Read;
use std::sync::Arc;

/// Bytes read from the input at a time.
const CHUNK_BYTES: usize = 1 << 20;

/// The layout of an input file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum InputLayout {
    /// One grid per wavelength (unblend's plate-grid layout).
    PlateGrid,
    /// One row per well (`sample,<nm>,<nm>,...`).
    Wide,
    /// One row per point (`sample,wavelength_nm,absorbance`).
    Long,
}

impl InputLayout {
    /// Name used in outputs.
    pub fn name(self) -> &'static str {
        match self {
            InputLayout::PlateGrid => "plate-grid",
            InputLayout::Wide => "wide",
            InputLayout::Long => "long",
        }
    }
}

/// The text of one plate, not parsed yet.
#[derive(Debug)]
pub struct RawPlate {
    /// Plate name.
    pub name: String,
    /// 1-based line of the plate's first line in its file.
    pub first_line: usize,
    kind: RawKind,
}

#[derive(Debug)]
enum RawKind {
    Grid(Vec<u8>),
    Wide { header: Arc<Vec<u8>>, rows: Vec<u8> },
    Parsed(Box<PlateSpectra>),
    Failed(Error),
}

impl RawPlate {
    /// A plate that cannot be read, with the reason.
    pub fn failed(name: String, first_line: usize, error: Error) -> Self {
        RawPlate {
            name,
            first_line,
            kind: RawKind::Failed(error),
        }
    }

    /// Parse the plate. An error means no well of the plate can be used.
    pub fn parse(self, reading: &plate::Reading) -> Result<PlateSpectra> {
        match self.kind {
            RawKind::Grid(text) => plate::parse_grid(&text, self.first_line, &self.name, reading),
            RawKind::Wide { header, rows } => {
                let mut text = Vec::with_capacity(header.len() + rows.len() + 1);
                text.extend_from_slice(&header);
                text.push(b'\n');
                text.extend_from_slice(&rows);
                // Rows start on line 2 of `text`; shift messages to the file.
                let shift = self.first_line.saturating_sub(2);
                let file = spectra::read(&text, reading.read_options())
                    .map_err(|e| shift_lines(e, shift))?;
                from_spectra(&self.name, file, shift)
                    .pop()
                    .ok_or_else(|| Error::structure(self.first_line, "no rows for this plate"))
            }
            RawKind::Parsed(p) => Ok(*p),
            RawKind::Failed(e) => Err(e),
        }
    }
}

/// Move the line numbers of a message by `by` lines.
pub fn shift_lines(e: Error, by: usize) -> Error {
    match e {
        Error::Parse {
            at,
            value,
            expected,
        } => Error::Parse {
            at: Location {
                line: at.line + by,
                column: at.column,
            },
            value,
            expected,
        },
        Error::Structure { at, message } => Error::Structure {
            at: Location {
                line: at.line + by,
                column: at.column,
            },
            message,
        },
        other => other,
    }
}

/// Split a sample identifier into plate and well parts: `P1:A1` →
/// (`Some("P1")`, `"A1"`); `A1` → (`None`, `"A1"`).
pub fn split_id(id: &str) -> (Option<&str>, &str) {
    match id.rsplit_once(':') {
        Some((p, w)) if !p.trim().is_empty() => (Some(p.trim()), w.trim()),
        Some((_, w)) => (None, w.trim()),
        None => (None, id.trim()),
    }
}

/// Turn read spectra into plates: samples are grouped by the plate part of
/// their identifier (or all belong to `default_name`), in order of first
/// appearance. `shift` moves line numbers in messages.
fn from_spectra(default_name: &str, file: spectra::SpectraFile, shift: usize) -> Vec<PlateSpectra> {
    let mut groups = PlateGroups {
        default_name,
        order: Vec::new(),
        by_plate: HashMap::new(),
    };
    for (b, block) in file.blocks.iter().enumerate() {
        for (i, id) in block.ids.iter().enumerate() {
            groups.add(id, block.positions[i], Ok((b, i)));
        }
    }
    for f in file.failures {
        groups.add(&f.sample, f.position, Err(shift_lines(f.error, shift)));
    }
    let PlateGroups {
        order,
        mut by_plate,
        ..
    } = groups;
    order
        .into_iter()
        .map(|name| {
            let entries = by_plate.remove(&name).unwrap_or_default();
            plate_of(name, entries, &file.blocks)
        })
        .collect()
}

/// One sample of a read spectra file, on its way into a plate.
struct Entry {
    position: usize,
    well: std::result::Result<Well, Error>,
    label: String,
    /// Block and row, or the read error.
    source: std::result::Result<(usize, usize), Error>,
}

/// Samples grouped by plate, plates in order of first appearance.
struct PlateGroups<'d> {
    default_name: &'d str,
    order: Vec<String>,
    by_plate: HashMap<String, Vec<Entry>>,
}

impl PlateGroups<'_> {
    fn add(
        &mut self,
        id: &str,
        position: usize,
        source: std::result::Result<(usize, usize), Error>,
    ) {
        let (plate, well_text) = split_id(id);
        let plate = plate.unwrap_or(self.default_name).to_string();
        let well = Well::parse(well_text).ok_or_else(|| {
            Error::Invalid(format!(
                "sample '{}': expected a well such as A1 or P24, or plate and well such as plate1:B12, as the sample identifier",
                crate::error::shorten(id.as_bytes())
            ))
        });
        if !self.by_plate.contains_key(&plate) {
            self.order.push(plate.clone());
        }
        self.by_plate.entry(plate).or_default().push(Entry {
            position,
            well,
            label: well_text.to_string(),
            source,
        });
    }
}

/// The block holding most of a plate's wells: the plate's grid.
fn main_block(entries: &[Entry]) -> Option<usize> {
    let mut count: HashMap<usize, usize> = HashMap::new();
    for e in entries {
        if let Ok((b, _)) = e.source {
            *count.entry(b).or_default() += 1;
        }
    }
    count
        .iter()
        .max_by_key(|(b, c)| (**c, std::cmp::Reverse(**b)))
        .map(|(b, _)| *b)
}

/// Plate `name` from its samples: wells on the main grid are read, the
/// others become failures that say why.
fn plate_of(name: String, mut entries: Vec<Entry>, blocks: &[spectra::Block]) -> PlateSpectra {
    entries.sort_by_key(|e| e.position);
    let main = main_block(&entries);
    let mut wells = Vec::new();
    let mut values = Vec::new();
    let mut failures = Vec::new();
    let mut seen: HashSet<Well> = HashSet::new();
    for e in entries {
        let failure = |error: Error| WellFailure {
            well: e.well.as_ref().ok().copied(),
            label: e.label.clone(),
            error,
        };
        let (w, b, i) = match (&e.well, e.source) {
            (_, Err(error)) => {
                failures.push(failure(error));
                continue;
            }
            (Err(error), _) => {
                failures.push(failure(Error::Invalid(error.to_string())));
                continue;
            }
            (Ok(w), Ok((b, i))) => (*w, b, i),
        };
        if Some(b) != main {
            let g = &blocks[b].grid;
            failures.push(failure(Error::Invalid(format!(
                "well {w}: its wavelengths ({} points, {}–{} nm) differ from the rest of plate '{name}': every well of a plate must share one grid",
                g.len(),
                g.min_nm(),
                g.max_nm()
            ))));
            continue;
        }
        if !seen.insert(w) {
            failures.push(failure(Error::Invalid(format!(
                "well {w} appears twice in plate '{name}': the second is not used"
            ))));
            continue;
        }
        values.extend_from_slice(blocks[b].row(i));
        wells.push(w);
    }
    let mut all = wells.clone();
    all.extend(failures.iter().filter_map(|f| f.well));
    PlateSpectra {
        name,
        format: PlateFormat::holding(&all),
        grid: main.map(|b| blocks[b].grid.clone()),
        wells,
        absorbance_au: values,
        failures,
    }
}

#[derive(Debug)]
struct Current {
    name: String,
    named: bool,
    first_line: usize,
    text: Vec<u8>,
    /// Grid: wavelengths of the headings (as bits). Wide: wells seen.
    seen: HashSet<u64>,
    failed: Option<Error>,
}

/// Reads one input and hands out its plates one at a time.
pub struct PlateStream<R: Read> {
    reader: R,
    chunk_bytes: usize,
    layout: InputLayout,
    stem: String,
    buf: Vec<u8>,
    /// Bytes of `buf` already routed.
    buf_start: usize,
    /// 1-based line number of `buf[buf_start]`.
    buf_line: usize,
    eof: bool,
    header: Option<Arc<Vec<u8>>>,
    delimiter: Delimiter,
    current: Option<Current>,
    names: HashSet<String>,
    unnamed: usize,
    ready: VecDeque<RawPlate>,
    last_plate_bytes: usize,
}

impl<R: Read> PlateStream<R> {
    /// Start reading: detects the layout from the first part of the input.
    /// `stem` names unnamed plates (usually the file name without extension).
    /// An error here means the file cannot be read at all.
    pub fn open(reader: R, stem: &str, reading: &plate::Reading) -> Result<Self> {
        Self::open_with(reader, stem, reading, CHUNK_BYTES)
    }

    fn open_with(
        reader: R,
        stem: &str,
        reading: &plate::Reading,
        chunk_bytes: usize,
    ) -> Result<Self> {
        let mut s = PlateStream {
            chunk_bytes,
            reader,
            layout: InputLayout::Wide,
            stem: stem.to_string(),
            buf: Vec::with_capacity(CHUNK_BYTES * 2),
            buf_start: 0,
            buf_line: 1,
            eof: false,
            header: None,
            delimiter: Delimiter::Comma,
            current: None,
            names: HashSet::new(),
            unnamed: 0,
            ready: VecDeque::new(),
            last_plate_bytes: 0,
        };
        if s.probe_is_grid()? {
            s.layout = InputLayout::PlateGrid;
            return Ok(s);
        }
        let header_line = s.take_header(reading)?;
        if s.layout == InputLayout::Long {
            s.read_long(reading, header_line)?;
        }
        Ok(s)
    }

    /// Read the first chunk (BOM dropped) and say whether it holds a
    /// plate-grid heading.
    fn probe_is_grid(&mut self) -> Result<bool> {
        self.fill()?;
        if self.buf.starts_with(b"\xEF\xBB\xBF") {
            self.buf.drain(..3);
        }
        if self.buf.iter().all(|b| b.is_ascii_whitespace()) && self.eof {
            return Err(Error::Empty);
        }
        while !self.eof && self.buf.len() < CHUNK_BYTES {
            self.fill()?;
        }
        let probe_end = self.buf.len().min(CHUNK_BYTES);
        Ok(fields::lines(&self.buf[..probe_end]).any(|(_, l)| plate::heading(l).is_some()))
    }

    /// Drop the lines without content before the header.
    fn skip_to_header(&mut self) -> Result<()> {
        loop {
            if let Some(end) = memchr::memchr(b'\n', &self.buf) {
                let line = &self.buf[..end];
                let line = line.strip_suffix(b"\r").unwrap_or(line);
                let d = Delimiter::detect(line);
                if fields::is_skippable(line, d.byte()) {
                    self.buf.drain(..=end);
                    self.buf_line += 1;
                    continue;
                }
                return Ok(());
            }
            if self.eof {
                return Ok(());
            }
            self.fill()?;
        }
    }

    /// Wide or long: the first line with content is the header. Classify
    /// it with the spectra parser on the header and the next line, keep
    /// it, and return its line number.
    fn take_header(&mut self, reading: &plate::Reading) -> Result<usize> {
        self.skip_to_header()?;
        let end = memchr::memchr(b'\n', &self.buf).unwrap_or(self.buf.len());
        let header = self.buf[..end]
            .strip_suffix(b"\r")
            .unwrap_or(&self.buf[..end])
            .to_vec();
        let header_line = self.buf_line;
        let probe_len = memchr::memchr(b'\n', &self.buf[(end + 1).min(self.buf.len())..])
            .map(|i| end + 1 + i)
            .unwrap_or(self.buf.len());
        let layout = match spectra::read(&self.buf[..probe_len], reading.read_options()) {
            Ok(f) => f.layout,
            Err(e) => {
                let e = shift_lines(e, header_line - 1);
                if e.to_string().contains("only line") {
                    return Err(Error::structure(
                        header_line,
                        "the header is the only line: expected well spectra after it, or plate-grid blocks with `wavelength_nm=` headings",
                    ));
                }
                return Err(Error::Invalid(format!(
                    "{e} (or, for the plate-grid layout, blocks headed by a line with `wavelength_nm=<nm>`)"
                )));
            }
        };
        self.delimiter = Delimiter::detect(&header);
        self.buf.drain(..(end + 1).min(self.buf.len()));
        self.buf_line += 1;
        self.header = Some(Arc::new(header));
        self.layout = match layout {
            Layout::Wide => InputLayout::Wide,
            _ => InputLayout::Long,
        };
        Ok(header_line)
    }

    /// The long layout is read whole (a sample's rows may be anywhere) and
    /// its plates queued.
    fn read_long(&mut self, reading: &plate::Reading, header_line: usize) -> Result<()> {
        while !self.eof {
            self.fill()?;
        }
        let mut text = Vec::with_capacity(self.buf.len() + 1024);
        text.extend(std::iter::repeat_n(b'\n', header_line - 1));
        text.extend_from_slice(self.header.as_deref().map_or(&[][..], |h| h.as_slice()));
        text.push(b'\n');
        text.append(&mut self.buf);
        let file = spectra::read(&text, reading.read_options())?;
        drop(text);
        for p in from_spectra(&self.stem, file, 0) {
            self.ready.push_back(RawPlate {
                name: p.name.clone(),
                first_line: header_line,
                kind: RawKind::Parsed(Box::new(p)),
            });
        }
        Ok(())
    }

    /// The reader, given back (to finish a checksum, say).
    pub fn into_inner(self) -> R {
        self.reader
    }

    /// The detected layout.
    pub fn layout(&self) -> InputLayout {
        self.layout
    }

    fn fill(&mut self) -> Result<()> {
        if self.eof {
            return Ok(());
        }
        let start = self.buf.len();
        let want = self.chunk_bytes;
        self.buf.resize(start + want, 0);
        let mut got = 0;
        while got < want {
            match self.reader.read(&mut self.buf[start + got..]) {
                Ok(0) => {
                    self.eof = true;
                    break;
                }
                Ok(k) => got += k,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => {
                    self.buf.truncate(start + got);
                    return Err(Error::io("input", e));
                }
            }
        }
        self.buf.truncate(start + got);
        Ok(())
    }

    fn auto_name(&mut self) -> String {
        self.unnamed += 1;
        if self.unnamed == 1 {
            self.stem.clone()
        } else {
            format!("{}-{}", self.stem, self.unnamed)
        }
    }

    fn finish(&mut self) {
        if let Some(c) = self.current.take() {
            self.last_plate_bytes = c.text.len();
            let kind = match c.failed {
                Some(e) => RawKind::Failed(e),
                None => match self.layout {
                    InputLayout::PlateGrid => RawKind::Grid(c.text),
                    _ => RawKind::Wide {
                        header: self.header.clone().unwrap_or_default(),
                        rows: c.text,
                    },
                },
            };
            self.ready.push_back(RawPlate {
                name: c.name,
                first_line: c.first_line,
                kind,
            });
        }
    }

    fn start(&mut self, name: String, named: bool, line: usize) {
        self.finish();
        let failed = (!self.names.insert(name.clone())).then(|| {
            Error::structure(
                line,
                format!(
                    "plate '{name}' appears again after other plates: keep the text of one plate together (this part is skipped)"
                ),
            )
        });
        // Plates of one file are about the same size: reserve for one.
        let hint = self.last_plate_bytes + self.last_plate_bytes / 8;
        self.current = Some(Current {
            name,
            named,
            first_line: line,
            text: Vec::with_capacity(hint),
            seen: HashSet::new(),
            failed,
        });
    }

    /// Route one complete line (without its end) to the plate it belongs to.
    fn line(&mut self, line: &[u8], line_no: usize) {
        match self.layout {
            InputLayout::PlateGrid => self.grid_line(line, line_no),
            _ => self.wide_line(line, line_no),
        }
    }

    fn grid_line(&mut self, line: &[u8], line_no: usize) {
        if let Some(h) = plate::heading(line) {
            let bits = h.wavelength_nm.as_ref().ok().map(|w| w.to_bits());
            let new_plate = match (&self.current, &h.plate) {
                (None, _) => true,
                (Some(c), Some(name)) => !(c.named && &c.name == name),
                (Some(c), None) => bits.is_some_and(|b| c.seen.contains(&b)),
            };
            if new_plate {
                let (name, named) = match h.plate {
                    Some(n) => (n, true),
                    None => (self.auto_name(), false),
                };
                self.start(name, named, line_no);
            }
            if let (Some(c), Some(b)) = (&mut self.current, bits) {
                c.seen.insert(b);
            }
        }
        if let Some(c) = &mut self.current
            && c.failed.is_none()
        {
            c.text.extend_from_slice(line);
            c.text.push(b'\n');
        }
    }

    /// Route the complete lines of `buf` (plate-grid layout) in bulk: only
    /// lines holding `=` are looked at; the text between headings is copied
    /// to the current plate as it is. Returns the bytes consumed and the
    /// next line number.
    fn route_grid(&mut self, buf: &[u8], mut line_no: usize) -> (usize, usize) {
        let Some(last) = memchr::memrchr(b'\n', buf) else {
            return (0, line_no);
        };
        let end = last + 1;
        let mut pos = 0;
        let mut search = 0;
        while let Some(i) = memchr::memchr(b'=', &buf[search..end]) {
            let eq = search + i;
            let start = memchr::memrchr(b'\n', &buf[pos..eq]).map_or(pos, |j| pos + j + 1);
            let stop = eq + memchr::memchr(b'\n', &buf[eq..end]).unwrap_or(end - 1 - eq);
            search = stop + 1;
            let line = &buf[start..stop];
            let line = line.strip_suffix(b"\r").unwrap_or(line);
            if plate::heading(line).is_none() {
                continue;
            }
            self.append(&buf[pos..start]);
            line_no += memchr::memchr_iter(b'\n', &buf[pos..start]).count();
            self.grid_line(line, line_no);
            line_no += 1;
            pos = stop + 1;
            if !self.ready.is_empty() && pos > self.chunk_bytes / 4 {
                return (pos, line_no);
            }
        }
        self.append(&buf[pos..end]);
        line_no += memchr::memchr_iter(b'\n', &buf[pos..end]).count();
        (end, line_no)
    }

    /// Add text to the current plate (dropped before the first heading).
    fn append(&mut self, text: &[u8]) {
        if let Some(c) = &mut self.current
            && c.failed.is_none()
        {
            c.text.extend_from_slice(text);
        }
    }

    fn wide_line(&mut self, line: &[u8], line_no: usize) {
        let delim = self.delimiter.byte();
        if fields::is_skippable(line, delim) {
            if let Some(c) = &mut self.current
                && c.failed.is_none()
            {
                c.text.push(b'\n');
            }
            return;
        }
        let first = match memchr::memchr(b'"', line) {
            None => &line[..memchr::memchr(delim, line).unwrap_or(line.len())],
            Some(_) => {
                let mut f = Vec::new();
                fields::split(line, delim, &mut f);
                f[0]
            }
        };
        let id = fields::text(first);
        let (plate_name, well_text) = split_id(&id);
        let key = Well::parse(well_text).map_or_else(
            || {
                // Not a well: keep it distinct (it fails when parsed).
                use std::hash::{Hash, Hasher};
                let mut h = std::collections::hash_map::DefaultHasher::new();
                well_text.hash(&mut h);
                h.finish() | (1 << 63)
            },
            |w| w.index() as u64,
        );
        let new_plate = match (&self.current, plate_name) {
            (None, _) => true,
            (Some(c), Some(p)) => !(c.named && c.name == p),
            (Some(c), None) => c.named || c.seen.contains(&key),
        };
        if new_plate {
            let (name, named) = match plate_name {
                Some(p) => (p.to_string(), true),
                None => (self.auto_name(), false),
            };
            self.start(name, named, line_no);
        }
        if let Some(c) = &mut self.current {
            c.seen.insert(key);
            if c.failed.is_none() {
                c.text.extend_from_slice(line);
                c.text.push(b'\n');
            }
        }
    }

    /// The next plate, or `None` at the end of the input. An error is an
    /// I/O failure: the rest of the input cannot be read.
    pub fn next_plate(&mut self) -> Result<Option<RawPlate>> {
        loop {
            if let Some(p) = self.ready.pop_front() {
                return Ok(Some(p));
            }
            if self.layout == InputLayout::Long {
                return Ok(None);
            }
            // Route every complete line in the buffer, from `buf_start`.
            let mut consumed = self.buf_start;
            let mut line_no = self.buf_line;
            let buf = std::mem::take(&mut self.buf);
            if self.layout == InputLayout::PlateGrid {
                let (k, l) = self.route_grid(&buf[consumed..], line_no);
                consumed += k;
                line_no = l;
            }
            while self.layout != InputLayout::PlateGrid
                && let Some(i) = memchr::memchr(b'\n', &buf[consumed..])
            {
                let line = &buf[consumed..consumed + i];
                let line = line.strip_suffix(b"\r").unwrap_or(line);
                self.line(line, line_no);
                line_no += 1;
                consumed += i + 1;
                if !self.ready.is_empty() && consumed > self.chunk_bytes / 4 {
                    break;
                }
            }
            self.buf = buf;
            self.buf_start = consumed;
            self.buf_line = line_no;
            if !self.ready.is_empty() {
                continue;
            }
            // Everything before `buf_start` is used: drop it before reading on.
            self.buf.drain(..self.buf_start);
            self.buf_start = 0;
            if self.eof {
                if !self.buf.is_empty() {
                    let rest = std::mem::take(&mut self.buf);
                    let line = rest.strip_suffix(b"\r").unwrap_or(&rest);
                    self.line(line, line_no);
                    self.buf_line += 1;
                }
                self.finish();
                if self.ready.is_empty() {
                    return Ok(None);
                }
                continue;
            }
            self.fill()?;
        }
    }
}

#[cfg(test)]
mod tests;
