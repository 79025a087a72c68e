//! Input stage: finding the table of spectra in delimited text.
//!
//! In: the non-blank lines of a text (or a worksheet written as text), split
//! by one delimiter. Out: where the table's header is, which [`Shape`] it
//! has, how many of the following rows belong to it, and a score (numbers
//! read) to choose between delimiters and between candidate headers. Lines
//! above the table are a metadata block; the table is found by its shape,
//! not by its position.
//!
//! Shapes (common practice of spectrometer and plate-reader exports, no
//! single source):
//!
//! ```text
//! wide             sample,400,410,...      one row per spectrum
//! long             sample,wavelength_nm,A  one row per point
//! wavelength-down  wavelength_nm,s1,s2,... one column per sample
//! single-spectrum  nm,Abs  (or no header)  one spectrum in two columns
//! ```

use super::fields;
use super::quantity::Quantity;

/// One non-blank line split into fields (trailing empty fields dropped).
#[derive(Debug)]
pub struct Row<'a> {
    /// Line number in the file (1-based).
    pub line_no: usize,
    /// The raw fields.
    pub cells: Vec<&'a [u8]>,
}

/// The shape a header line announces.
#[derive(Debug, Clone, PartialEq)]
pub enum Shape {
    /// `sample,<wavelength>,...`: the wavelengths in nm, in header order.
    Wide(Vec<f64>),
    /// `sample,wavelength_nm,<value heading>`.
    Long,
    /// `wavelength_nm,<sample>,...`: the number of columns.
    Down(usize),
    /// Two columns of numbers with no header line.
    Headerless,
}

/// A table found in the rows.
#[derive(Debug, Clone, PartialEq)]
pub struct Found {
    /// Index in the rows of the header (of the first data row when
    /// [`Shape::Headerless`]).
    pub header: usize,
    /// The shape.
    pub shape: Shape,
    /// Data rows (after the header) that belong to the table.
    pub n_rows: usize,
    /// Numbers read in the data rows: how much of the text the table
    /// explains.
    pub score: usize,
}

/// Why no table was found: the candidate header that came closest.
#[derive(Debug, Clone, PartialEq)]
pub struct Miss {
    /// Line of the header tried.
    pub line: usize,
    /// What the header looked like and why the next line does not fit.
    pub why: String,
}

/// Headings of a wavelength column (compared lowercased, trimmed).
pub const WAVELENGTH_NAMES: &[&str] = &[
    "wavelength_nm",
    "wavelength",
    "wavelength (nm)",
    "wavelength [nm]",
    "wavelength/nm",
    "nm",
    "lambda_nm",
    "lambda",
    "λ",
    "λ (nm)",
    "wl",
];

/// Headings of the value column of a long file besides the quantity names
/// ([`Quantity::from_heading`]).
const VALUE_NAMES: &[&str] = &["value", "reading", "y"];

/// Whether a heading names the wavelength column.
pub fn is_wavelength_heading(cell: &[u8]) -> bool {
    let t = fields::text(cell).to_lowercase();
    WAVELENGTH_NAMES.contains(&t.trim())
}

/// Whether a heading names the value column (a quantity or a generic name).
pub fn is_value_heading(cell: &[u8]) -> bool {
    let t = fields::text(cell);
    Quantity::from_heading(&t).is_some() || VALUE_NAMES.contains(&t.trim().to_lowercase().as_str())
}

/// A wavelength in a wide header: a number, optionally followed by `nm`.
pub fn header_wavelength(cell: &[u8], decimal_comma: bool) -> Option<f64> {
    let t = fields::text(cell);
    let t = t.trim();
    let t = t
        .strip_suffix("nm")
        .or_else(|| t.strip_suffix("NM"))
        .unwrap_or(t)
        .trim();
    fields::number(t.as_bytes(), decimal_comma)
        .ok()
        .filter(|w| *w > 0.0)
}

fn is_number(cell: &[u8], decimal_comma: bool) -> bool {
    fields::number(cell, decimal_comma).is_ok()
}

/// The shape a header row announces, if any.
pub fn classify(row: &Row, decimal_comma: bool) -> Option<Shape> {
    let c = &row.cells;
    if c.len() < 2 {
        return None;
    }
    if c.len() == 3 && is_wavelength_heading(c[1]) && is_value_heading(c[2]) {
        return Some(Shape::Long);
    }
    if is_wavelength_heading(c[0]) {
        return Some(Shape::Down(c.len()));
    }
    if c.len() == 2 && is_number(c[0], decimal_comma) && is_number(c[1], decimal_comma) {
        return Some(Shape::Headerless);
    }
    if is_number(c[0], decimal_comma) {
        return None;
    }
    let wavelengths: Option<Vec<f64>> = c[1..]
        .iter()
        .map(|cell| header_wavelength(cell, decimal_comma))
        .collect();
    wavelengths.map(Shape::Wide)
}

/// Whether a data row belongs to a table of this shape: `Ok(numbers read)`,
/// or why it does not.
pub fn fits(shape: &Shape, row: &Row, decimal_comma: bool) -> Result<usize, String> {
    let c = &row.cells;
    let numbers = |cells: &[&[u8]]| cells.iter().filter(|x| is_number(x, decimal_comma)).count();
    let line = row.line_no;
    match shape {
        // A row with too many fields still belongs to the table (the reader
        // fails it); a row without numbers ends it.
        Shape::Wide(w) => match numbers(&c[1..]) {
            0 if c.len() > w.len() + 1 => Err(format!(
                "line {line}: {} fields, but the header has {}: expected a sample name and one value per wavelength",
                c.len(),
                w.len() + 1
            )),
            0 => Err(format!("line {line}: no number after the sample name")),
            n => Ok(n),
        },
        Shape::Long if c.len() != 3 => Err(format!(
            "line {line}: {} fields: expected 3 (sample, wavelength in nm, value)",
            c.len()
        )),
        Shape::Long if !is_number(c[1], decimal_comma) => {
            Err(format!("line {line}: no wavelength in nm in column 2"))
        }
        Shape::Long => Ok(numbers(&c[1..])),
        Shape::Down(n) if c.len() > *n => Err(format!(
            "line {line}: {} fields, but the header has {n}: expected a wavelength and one column per sample",
            c.len()
        )),
        Shape::Down(_) | Shape::Headerless if !is_number(c[0], decimal_comma) => {
            Err(format!("line {line}: no wavelength in nm in column 1"))
        }
        Shape::Down(_) => Ok(numbers(c)),
        Shape::Headerless if c.len() != 2 => Err(format!(
            "line {line}: {} fields: expected 2 (wavelength in nm, value)",
            c.len()
        )),
        Shape::Headerless => Ok(numbers(c)),
    }
}

/// The layout's name for a shape.
pub fn shape_name(shape: &Shape) -> &'static str {
    match shape {
        Shape::Wide(_) => "wide",
        Shape::Long => "long",
        Shape::Down(2) | Shape::Headerless => "single-spectrum",
        Shape::Down(_) => "wavelength-down",
    }
}

/// When a row looks like a header but one cell does not fit: that cell's
/// column, text and what was expected there. A long header
/// (`sample,wavelength_nm,...`) whose third heading names no value; a wide
/// header (a name, then mostly wavelengths) with a cell that is not one.
pub fn bad_header_cell<'a>(
    row: &Row<'a>,
    decimal_comma: bool,
) -> Option<(usize, &'a [u8], &'static str)> {
    let c = &row.cells;
    if c.len() == 3 && is_wavelength_heading(c[1]) && !is_value_heading(c[2]) {
        return Some((
            3,
            c[2],
            "'absorbance' or 'transmittance' (or abs, A, T, %T, value) as the third column of a long-layout file",
        ));
    }
    if c.len() < 3 || is_number(c[0], decimal_comma) {
        return None;
    }
    let bad: Vec<usize> = (1..c.len())
        .filter(|&i| header_wavelength(c[i], decimal_comma).is_none())
        .collect();
    (!bad.is_empty() && bad.len() * 2 < c.len()).then(|| {
        (bad[0] + 1, c[bad[0]], "a wavelength in nm in the header of a wide-layout file (or `sample,wavelength_nm,absorbance` for the long layout)")
    })
}

/// Find the table that reads the most numbers: every row is tried as a
/// header, and the rows after it that fit its shape form its table (a row
/// that does not fit ends it). Earlier headers win ties. `Err` holds the
/// closest miss (a header with no row fitting it), if any.
pub fn find(rows: &[Row], decimal_comma: bool) -> Result<Found, Option<Miss>> {
    let mut best: Option<Found> = None;
    let mut miss: Option<Miss> = None;
    let mut h = 0;
    while h < rows.len() {
        let Some(shape) = classify(&rows[h], decimal_comma) else {
            h += 1;
            continue;
        };
        let first = if shape == Shape::Headerless { h } else { h + 1 };
        let (n_rows, score, why) = extend(&shape, &rows[first..], decimal_comma);
        if n_rows == 0 {
            if miss.is_none() {
                miss = Some(Miss {
                    line: rows[h].line_no,
                    why: why.unwrap_or_else(|| {
                        "the header is the only line: expected rows of spectra after it".into()
                    }),
                });
            }
            h += 1;
            continue;
        }
        let end = first + n_rows;
        let n_rows = if shape == Shape::Headerless {
            n_rows - 1
        } else {
            n_rows
        };
        if best.as_ref().is_none_or(|b| score > b.score) {
            best = Some(Found {
                header: h,
                shape,
                n_rows,
                score,
            });
        }
        h = end;
    }
    best.ok_or(miss)
}

/// Count the rows that fit `shape` from the start of `rows`: rows, numbers,
/// and why the first row that does not fit does not.
fn extend(shape: &Shape, rows: &[Row], decimal_comma: bool) -> (usize, usize, Option<String>) {
    let mut score = 0;
    for (i, row) in rows.iter().enumerate() {
        match fits(shape, row, decimal_comma) {
            Ok(n) => score += n,
            Err(why) => return (i, score, Some(why)),
        }
    }
    (rows.len(), score, None)
}

/// Split the lines of a text by `delim` into rows, leaving out blank and
/// `#` comment lines.
pub fn rows<'a>(lines: &[(usize, &'a [u8])], delim: u8) -> Vec<Row<'a>> {
    let mut out = Vec::with_capacity(lines.len());
    for &(line_no, line) in lines {
        if fields::is_skippable(line, delim) {
            continue;
        }
        let mut cells = Vec::new();
        fields::split(line, delim, &mut cells);
        fields::trim_trailing_empty(&mut cells);
        out.push(Row { line_no, cells });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn found(text: &str, delim: u8) -> Result<Found, Option<Miss>> {
        let lines: Vec<(usize, &[u8])> = fields::lines(text.as_bytes()).collect();
        find(&rows(&lines, delim), delim != b',')
    }

    #[test]
    fn each_shape_is_recognised_under_a_metadata_block() {
        let meta = "Instrument: bench photometer\nOperator,K. Lund\n\n";
        let cases = [
            (
                "sample,400,410 nm\ns1,0.1,0.2\ns2,0.3,0.4\n",
                Shape::Wide(vec![400.0, 410.0]),
            ),
            (
                "sample,wavelength_nm,Abs\ns1,400,0.1\ns1,410,0.2\n",
                Shape::Long,
            ),
            (
                "Wavelength (nm),s1,s2\n400,0.1,0.2\n410,0.3,0.4\n",
                Shape::Down(3),
            ),
            ("nm,Abs\n400,0.1\n410,0.2\n", Shape::Down(2)),
            ("400,0.1\n410,0.2\n420,0.3\n", Shape::Headerless),
        ];
        for (table, shape) in cases {
            let f = found(&format!("{meta}{table}"), b',').unwrap();
            assert_eq!(f.shape, shape, "{table}");
            assert_eq!(f.header, 2, "{table}: the two metadata rows come first");
        }
    }

    #[test]
    fn a_header_without_fitting_rows_says_why() {
        let miss = found("nm,s1,s2\n400,0.1,0.2,0.3\n", b',')
            .unwrap_err()
            .unwrap();
        assert_eq!(miss.line, 1);
        assert!(
            miss.why.contains("line 2: 4 fields, but the header has 3"),
            "{}",
            miss.why
        );
    }

    #[test]
    fn the_table_with_the_most_numbers_wins_over_key_value_lines() {
        let f = found(
            "Gain,100\nTemp,25\nnm,Abs\n400,0.1\n410,0.2\n420,0.3\n",
            b',',
        )
        .unwrap();
        assert_eq!((f.header, f.n_rows), (2, 3));
    }
}
