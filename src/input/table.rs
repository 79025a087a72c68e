//! Input stage: a delimited text of spectra read whole, in any layout.
//!
//! In: the bytes of a text file (or of a worksheet written as text) and the
//! [`ReadOptions`]. Out: a [`SpectraFile`] with one [`Section`] saying which
//! layout was found ([`super::shape`]), the metadata block above the table,
//! and which quantity the values were read as and why
//! ([`super::quantity::decide`]).
//!
//! A cell that is empty or `n/a` is a missing reading, left out of its
//! sample ([`super::samples`]); an overflow marker is a saturated point when
//! the caller masks them; any other text fails its sample with the line and
//! column.

use super::fields::{self, Delimiter};
use super::quantity::{self, Quantity, QuantitySource};
use super::samples::{self, RawSample};
use super::shape::{self, Found, Row, Shape};
use super::spectra::{Layout, ReadOptions, Section, SpectraFile};
use crate::error::{Error, Result};
use std::collections::HashMap;

/// Keys of a metadata line that name the sample of a single-spectrum file
/// (compared lowercased, `_`/`-` as spaces).
const NAME_KEYS: &[&str] = &[
    "name",
    "sample",
    "sample name",
    "sample id",
    "sampleid",
    "id",
    "title",
];

/// Where a part of the input starts, for [`read`].
#[derive(Debug, Clone, Default)]
pub struct Part {
    /// The part's name (`sheet 'Run 1'`), `None` for a whole text file.
    pub name: Option<String>,
    /// Position of the part's first sample in the input's order of samples.
    pub first_position: usize,
}

/// Read a whole text in whichever layout its table has.
pub fn read(bytes: &[u8], options: &ReadOptions, part: &Part) -> Result<SpectraFile> {
    let text = fields::strip_bom(bytes);
    let lines: Vec<(usize, &[u8])> = fields::lines(text).collect();
    if lines.iter().all(|(_, l)| fields::trim(l).is_empty()) {
        return Err(Error::Empty);
    }
    let (delimiter, rows, found) = locate(&lines)?;
    let decimal_comma = delimiter.allows_decimal_comma();
    let header_line = rows[found.header].line_no;
    let metadata = metadata(&lines, header_line, delimiter.byte());
    let table = &rows[found.header..=found.header + found.n_rows];
    let said = heading_said(&found.shape, &table[0]).or_else(|| quantity_in(&metadata));
    let decided = quantity::decide(options.quantity, said);
    let cells = CellRules {
        decimal_comma,
        options,
        noun: decided.quantity.noun(),
    };
    let raw = read_shape(&found.shape, table, &metadata, options, &cells);
    let mut warnings: Vec<String> = decided.warning.iter().cloned().collect();
    let values = raw.iter().flat_map(|s| s.points.iter().map(|p| p.1));
    warnings.extend(quantity::plausibility_warning(&decided, values));
    let n_samples = raw.len();
    let assembled = samples::assemble(raw, decided.quantity, part.first_position);
    warnings.extend(assembled.warnings);
    if let Some(after) = rows.get(found.header + found.n_rows + 1) {
        warnings.push(format!(
            "lines from {} on do not fit the {} table above them and were not read",
            after.line_no,
            shape::shape_name(&found.shape)
        ));
    }
    let layout = layout_of(&found.shape);
    Ok(SpectraFile {
        layout,
        delimiter,
        blocks: assembled.blocks,
        failures: assembled.failures,
        n_samples,
        sections: vec![Section {
            name: part.name.clone(),
            layout,
            metadata,
            quantity: decided.quantity,
            quantity_from: match decided.source {
                QuantitySource::Option => "--quantity".into(),
                QuantitySource::File(what) => what,
                QuantitySource::Assumed => "assumed (nothing in the file says)".into(),
            },
            positions: part.first_position..part.first_position + n_samples,
        }],
        warnings,
    })
}

fn layout_of(shape: &Shape) -> Layout {
    match shape {
        Shape::Wide(_) => Layout::Wide,
        Shape::Long => Layout::Long,
        Shape::Down(2) | Shape::Headerless => Layout::Single,
        Shape::Down(_) => Layout::WavelengthDown,
    }
}

/// Find the table under each delimiter (tab, semicolon, comma) and keep the
/// one that reads the most numbers.
fn locate<'a>(lines: &'a [(usize, &'a [u8])]) -> Result<(Delimiter, Vec<Row<'a>>, Found)> {
    let mut best: Option<(Delimiter, Vec<Row>, Found)> = None;
    let mut miss = None;
    let mut bad_header = None;
    for delimiter in [Delimiter::Tab, Delimiter::Semicolon, Delimiter::Comma] {
        let rows = shape::rows(lines, delimiter.byte());
        if bad_header.is_none()
            && let Some(first) = rows.first()
            && let Some((column, raw, expected)) =
                shape::bad_header_cell(first, delimiter.allows_decimal_comma())
        {
            bad_header = Some(Error::parse(first.line_no, column, raw, expected));
        }
        match shape::find(&rows, delimiter.allows_decimal_comma()) {
            Ok(f) if best.as_ref().is_none_or(|b| f.score > b.2.score) => {
                best = Some((delimiter, rows, f));
            }
            Ok(_) => {}
            Err(m) => miss = miss.or(m),
        }
    }
    if let Some(e) = bad_header.filter(|_| best.is_none()) {
        return Err(e);
    }
    best.ok_or_else(|| match miss {
        Some(m) => Error::structure(
            m.line,
            format!("this line reads as a table header, but {}", m.why),
        ),
        None => Error::structure(
            lines.first().map_or(1, |l| l.0),
            "no table of spectra found: tried the wide layout (`sample,<wavelength>,...`), the long layout (`sample,wavelength_nm,absorbance`), wavelengths down the first column (`wavelength_nm,<sample>,...`) and two columns of numbers (one spectrum), separated by commas, semicolons or tabs",
        ),
    })
}

/// The metadata block: every non-blank line above the header, as
/// `(key, value)` (`key: value`, `key = value`, `key<delimiter>value`; free
/// text has an empty key).
fn metadata(lines: &[(usize, &[u8])], header_line: usize, delim: u8) -> Vec<(String, String)> {
    lines
        .iter()
        .take_while(|(n, _)| *n < header_line)
        .filter(|(_, l)| !fields::is_skippable(l, delim) || l.starts_with(b"#"))
        .map(|(_, l)| key_value(&String::from_utf8_lossy(l), delim as char))
        .collect()
}

/// Split a metadata line into key and value.
pub fn key_value(line: &str, delim: char) -> (String, String) {
    let line = line.trim().trim_start_matches('#').trim();
    let cut = [':', '=', delim]
        .iter()
        .filter_map(|c| line.find(*c).map(|i| (i, c.len_utf8())))
        .min();
    match cut {
        Some((i, len)) => {
            let value = line[i + len..].trim().trim_matches(delim).trim();
            (line[..i].trim().to_string(), value.to_string())
        }
        None => (String::new(), line.to_string()),
    }
}

/// The quantity a metadata line names, with what said it.
pub fn quantity_in(metadata: &[(String, String)]) -> Option<(Quantity, String)> {
    metadata.iter().find_map(|(k, v)| {
        Quantity::from_metadata(k, v).map(|q| (q, format!("metadata line '{k}: {v}'")))
    })
}

/// The sample name a metadata line gives.
fn name_in(metadata: &[(String, String)]) -> Option<String> {
    metadata.iter().find_map(|(k, v)| {
        let k = k.to_lowercase().replace(['_', '-'], " ");
        (NAME_KEYS.contains(&k.trim()) && !v.is_empty()).then(|| v.clone())
    })
}

/// How the cells of a table are read.
struct CellRules<'a> {
    decimal_comma: bool,
    options: &'a ReadOptions,
    noun: &'static str,
}

impl CellRules<'_> {
    /// Read one value cell into `s`: a number, a missing reading, an
    /// overflow marker (saturated, when the caller masks them) or an error.
    fn read(&self, s: &mut RawSample, nm: f64, raw: &[u8], at: (usize, usize)) {
        match fields::number(raw, self.decimal_comma) {
            Ok(v) => s.push(nm, v, at),
            Err(_) if fields::is_missing_reading(raw) => s.missing.push(at),
            Err(_)
                if self.options.overflow_as_saturated
                    && self
                        .options
                        .overflow_markers
                        .matches(raw, self.decimal_comma) =>
            {
                s.push(nm, f64::INFINITY, at);
            }
            Err(e) => {
                let noun = e.expected(self.noun);
                let expected =
                    fields::reading_expected(&noun, self.options.overflow_as_saturated, raw);
                s.fail(Error::parse(at.0, at.1, raw, expected));
            }
        }
    }
}

/// The quantity a table's value heading names, with what said it.
fn heading_said(shape: &Shape, header: &Row) -> Option<(Quantity, String)> {
    match shape {
        Shape::Long => heading_quantity(header.cells[2]),
        Shape::Down(n) => header.cells[1..*n].iter().find_map(|h| heading_quantity(h)),
        Shape::Wide(_) | Shape::Headerless => None,
    }
}

/// The samples of a table.
fn read_shape(
    shape: &Shape,
    table: &[Row],
    metadata: &[(String, String)],
    options: &ReadOptions,
    cells: &CellRules,
) -> Vec<RawSample> {
    let header = &table[0];
    match shape {
        Shape::Wide(w) => read_wide(w, &table[1..], cells),
        Shape::Long => read_long(&table[1..], cells),
        Shape::Headerless => read_down(&[single_name(metadata, options)], table, cells),
        Shape::Down(n) => {
            let headings = &header.cells[1..*n];
            let unnamed =
                heading_said(shape, header).is_some() || fields::trim(headings[0]).is_empty();
            let names: Vec<String> = if *n == 2 && unnamed {
                vec![single_name(metadata, options)]
            } else {
                headings
                    .iter()
                    .enumerate()
                    .map(|(k, h)| match fields::text(h).trim() {
                        "" => format!("column {}", k + 2),
                        t => t.to_string(),
                    })
                    .collect()
            };
            read_down(&names, &table[1..], cells)
        }
    }
}

fn heading_quantity(cell: &[u8]) -> Option<(Quantity, String)> {
    let t = fields::text(cell);
    Quantity::from_heading(&t).map(|q| (q, format!("column heading '{}'", t.trim())))
}

fn single_name(metadata: &[(String, String)], options: &ReadOptions) -> String {
    name_in(metadata)
        .or_else(|| options.fallback_name.clone())
        .unwrap_or_else(|| "spectrum".into())
}

fn read_wide(wavelengths: &[f64], rows: &[Row], cells: &CellRules) -> Vec<RawSample> {
    rows.iter()
        .map(|row| {
            let id = fields::text(row.cells[0]).trim().to_string();
            let mut s = RawSample::new(id, row.line_no);
            if s.id.is_empty() {
                s.id = format!("(line {})", row.line_no);
                s.fail(Error::parse(
                    row.line_no,
                    1,
                    b"",
                    "a sample name in the first column",
                ));
            }
            if row.cells.len() > wavelengths.len() + 1 {
                s.fail(Error::structure(
                    row.line_no,
                    format!(
                        "{} fields but the header has {}: expected a sample name and {} values",
                        row.cells.len(),
                        wavelengths.len() + 1,
                        wavelengths.len()
                    ),
                ));
            }
            for (j, &nm) in wavelengths.iter().enumerate() {
                let raw = row.cells.get(j + 1).copied().unwrap_or(b"");
                cells.read(&mut s, nm, raw, (row.line_no, j + 2));
            }
            s
        })
        .collect()
}

fn read_long(rows: &[Row], cells: &CellRules) -> Vec<RawSample> {
    let mut order: Vec<RawSample> = Vec::new();
    let mut index: HashMap<String, usize> = HashMap::new();
    for row in rows {
        let id = fields::text(row.cells[0]).trim().to_string();
        let slot = *index.entry(id.clone()).or_insert_with(|| {
            order.push(RawSample::new(id.clone(), row.line_no));
            order.len() - 1
        });
        let s = &mut order[slot];
        if id.is_empty() {
            s.fail(Error::parse(
                row.line_no,
                1,
                b"",
                "a sample name in the first column",
            ));
            continue;
        }
        match fields::number(row.cells[1], cells.decimal_comma) {
            Ok(nm) => cells.read(s, nm, row.cells[2], (row.line_no, 3)),
            Err(e) => s.fail(Error::parse(
                row.line_no,
                2,
                row.cells[1],
                e.expected("a wavelength in nm"),
            )),
        }
    }
    // A sample's rows may come in any order (README): sort them by
    // wavelength; a wavelength given twice stays an error (Grid::new).
    for s in order.iter_mut() {
        let mut pairs: Vec<((f64, f64), (usize, usize))> =
            s.points.drain(..).zip(s.cells.drain(..)).collect();
        pairs.sort_by(|x, y| x.0.0.total_cmp(&y.0.0));
        (s.points, s.cells) = pairs.into_iter().unzip();
    }
    order
}

fn read_down(names: &[String], rows: &[Row], cells: &CellRules) -> Vec<RawSample> {
    let first_line = rows.first().map_or(1, |r| r.line_no);
    let mut out: Vec<RawSample> = names
        .iter()
        .map(|n| RawSample::new(n.clone(), first_line))
        .collect();
    for row in rows {
        let nm = match fields::number(row.cells[0], cells.decimal_comma) {
            Ok(nm) => nm,
            Err(e) => {
                let expected = e.expected("a wavelength in nm");
                for s in out.iter_mut() {
                    s.fail(Error::parse(row.line_no, 1, row.cells[0], expected.clone()));
                }
                continue;
            }
        };
        for (k, s) in out.iter_mut().enumerate() {
            let raw = row.cells.get(k + 1).copied().unwrap_or(b"");
            cells.read(s, nm, raw, (row.line_no, k + 2));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn metadata_lines_split_into_key_and_value() {
        assert_eq!(
            key_value("Operator: K. Lund", ','),
            ("Operator".into(), "K. Lund".into())
        );
        assert_eq!(
            key_value("# Units = %T", ','),
            ("Units".into(), "%T".into())
        );
        assert_eq!(
            key_value("Sample;Lot 7;;", ';'),
            ("Sample".into(), "Lot 7".into())
        );
        assert_eq!(
            key_value("free text", ','),
            (String::new(), "free text".into())
        );
    }
}
