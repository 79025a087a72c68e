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

/// Read a spectra file from its bytes.
pub fn read(bytes: &[u8], options: ReadOptions) -> Result<SpectraFile> {
    let bytes = fields::strip_bom(bytes);
    let mut header = None;
    for (number, line) in fields::lines(bytes) {
        let delim = Delimiter::detect(line);
        if !fields::is_skippable(line, delim.byte()) {
            header = Some((number, line, delim));
            break;
        }
    }
    let Some((header_line, header_bytes, delimiter)) = header else {
        return Err(Error::Empty);
    };
    // The body starts after the newline that ends the header line.
    let offset = header_bytes.as_ptr() as usize - bytes.as_ptr() as usize + header_bytes.len();
    let body = match memchr::memchr(b'\n', &bytes[offset..]) {
        Some(i) => &bytes[offset + i + 1..],
        None => &bytes[bytes.len()..],
    };
    let mut raw = Vec::new();
    fields::split(header_bytes, delimiter.byte(), &mut raw);
    fields::trim_trailing_empty(&mut raw);
    let names: Vec<String> = raw.iter().map(|f| fields::text(f).into_owned()).collect();
    match classify_header(&names, header_line, delimiter)? {
        HeaderKind::Wide(wavelengths) => read_wide(
            body,
            header_line,
            delimiter,
            wavelengths,
            names.len(),
            options,
        ),
        HeaderKind::Long => read_long(body, header_line, delimiter, options),
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

fn read_wide(
    body: &[u8],
    header_line: usize,
    delimiter: Delimiter,
    wavelengths: Vec<f64>,
    n_fields: usize,
    options: ReadOptions,
) -> Result<SpectraFile> {
    let (ascending, reversed) = spectrum::ascending(wavelengths);
    let grid = Arc::new(
        Grid::new(ascending).map_err(|e| Error::structure(header_line, format!("header: {e}")))?,
    );
    // Collect the data lines with their numbers, then parse them in parallel.
    let delim = delimiter.byte();
    let rows: Vec<(usize, &[u8])> = fields::lines(body)
        .map(|(n, l)| (n + header_line, l))
        .filter(|(_, l)| !fields::is_skippable(l, delim))
        .collect();
    if rows.is_empty() {
        return Err(Error::structure(
            header_line,
            "the header is the only line: expected at least one spectrum row after it",
        ));
    }
    let n = grid.len();
    let parsed: Vec<RowResult> = rows
        .par_iter()
        .with_min_len(256)
        .map_init(Vec::new, |scratch, &(line_no, line)| {
            parse_wide_row(
                line,
                line_no,
                delim,
                delimiter.allows_decimal_comma(),
                n,
                n_fields,
                reversed,
                options,
                scratch,
            )
        })
        .collect();
    let mut ids = Vec::with_capacity(parsed.len());
    let mut positions = Vec::with_capacity(parsed.len());
    let mut values = Vec::with_capacity(parsed.len() * n);
    let mut failures = Vec::new();
    let total = parsed.len();
    for (position, row) in parsed.into_iter().enumerate() {
        match row {
            Ok((id, v)) => {
                ids.push(id);
                positions.push(position);
                values.extend_from_slice(&v);
            }
            Err((sample, error)) => failures.push(RowFailure {
                position,
                sample,
                error,
            }),
        }
    }
    let blocks = if ids.is_empty() {
        Vec::new()
    } else {
        vec![Block {
            grid,
            ids,
            positions,
            absorbance_au: values,
        }]
    };
    Ok(SpectraFile {
        layout: Layout::Wide,
        delimiter,
        blocks,
        failures,
        n_samples: total,
    })
}

/// A parsed wide row: the sample and its values, or the sample and why not.
type RowResult = std::result::Result<(String, Vec<f64>), (String, Error)>;

#[allow(clippy::too_many_arguments)]
fn parse_wide_row<'a>(
    line: &'a [u8],
    line_no: usize,
    delim: u8,
    decimal_comma: bool,
    n: usize,
    n_fields: usize,
    reversed: bool,
    options: ReadOptions,
    scratch: &mut Vec<&'a [u8]>,
) -> RowResult {
    fields::split(line, delim, scratch);
    fields::trim_trailing_empty(scratch);
    let id = fields::text(scratch[0]).into_owned();
    let id_or_line = if id.is_empty() {
        format!("(line {line_no})")
    } else {
        id.clone()
    };
    if id.is_empty() {
        return Err((
            id_or_line,
            Error::parse(line_no, 1, b"", "a sample name in the first column"),
        ));
    }
    if scratch.len() != n_fields {
        return Err((
            id_or_line,
            Error::structure(
                line_no,
                format!(
                    "{} fields but the header has {n_fields}: expected a sample name and {n} values",
                    scratch.len()
                ),
            ),
        ));
    }
    let mut values = Vec::with_capacity(n);
    for (col, field) in scratch[1..].iter().enumerate() {
        let v = fields::number(field, decimal_comma)
            .map_err(|e| e.expected(options.quantity.noun()))
            .and_then(|v| options.quantity.to_absorbance(v).map_err(str::to_string))
            .map_err(|expected| (id.clone(), Error::parse(line_no, col + 2, field, expected)))?;
        values.push(v);
    }
    if reversed {
        values.reverse();
    }
    Ok((id, values))
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
        let (w, a): (Vec<f64>, Vec<f64>) = p.points.into_iter().unzip();
        let (w, reversed) = spectrum::ascending(w);
        let mut a = a;
        if reversed {
            a.reverse();
        }
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
        };
        let f = read("sample,400\ns,10\n".as_bytes(), opts).unwrap();
        assert!((f.blocks[0].row(0)[0] - 1.0).abs() < 1e-12);
        let f = read("sample,400\ns,0\n".as_bytes(), opts).unwrap();
        assert!(f.failures[0].error.to_string().contains("above 0"));
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
