//! Input stage: spreadsheet workbooks (.xlsx, .ods, .xls, .xlsb).
//!
//! In: the bytes of a workbook. Out: a [`SpectraFile`] from every sheet that
//! holds a table of spectra (any layout [`super::table`] reads), each sheet
//! one [`Section`](super::spectra::Section) named after it. Cells are read
//! with the calamine crate and written as comma-separated text (numbers in
//! Rust's shortest round-trip form, so no digit is lost); line numbers in
//! messages are the sheet's row numbers, columns count from the sheet's
//! first used column.

use super::spectra::{ReadOptions, SpectraFile};
use super::table;
use crate::error::{Error, Result};
use calamine::{Data, Reader, Sheets};
use std::io::Cursor;

/// The sheets of a workbook as comma-separated text, `(sheet name, text)`,
/// in workbook order.
pub fn sheets_as_text(bytes: &[u8]) -> Result<Vec<(String, Vec<u8>)>> {
    let mut book: Sheets<Cursor<&[u8]>> = calamine::open_workbook_auto_from_rs(Cursor::new(bytes))
        .map_err(|e| {
            Error::structure(
                1,
                format!(
                    "this is a ZIP or Office file but not a workbook that can be read ({e}): expected an .xlsx, .ods or .xls workbook, or export the spectra as CSV"
                ),
            )
        })?;
    let mut out = Vec::new();
    for name in book.sheet_names() {
        let range = book
            .worksheet_range(&name)
            .map_err(|e| Error::structure(1, format!("sheet '{name}' could not be read: {e}")))?;
        let first_row = range.start().map_or(0, |(r, _)| r as usize);
        let mut text = "\n".repeat(first_row).into_bytes();
        for row in range.rows() {
            for (j, cell) in row.iter().enumerate() {
                if j > 0 {
                    text.push(b',');
                }
                write_cell(&mut text, cell);
            }
            text.push(b'\n');
        }
        out.push((name, text));
    }
    Ok(out)
}

/// One cell as CSV text (quoted when it holds a delimiter, quote or line end).
fn write_cell(out: &mut Vec<u8>, cell: &Data) {
    let text = match cell {
        Data::Empty => return,
        Data::Int(i) => i.to_string(),
        Data::Float(f) => f.to_string(),
        Data::Bool(b) => b.to_string(),
        Data::String(s) | Data::DateTimeIso(s) | Data::DurationIso(s) => s.clone(),
        Data::DateTime(d) => d.as_f64().to_string(),
        Data::Error(e) => format!("#{e:?}"),
    };
    if text.contains([',', '"', '\n', '\r', ';', '\t']) {
        out.push(b'"');
        out.extend_from_slice(text.replace('"', "\"\"").as_bytes());
        out.push(b'"');
    } else {
        out.extend_from_slice(text.as_bytes());
    }
}

/// Read every sheet that holds a table of spectra. Sheets without one are
/// passed over with a warning; none at all is an error naming each sheet
/// and why.
pub fn read(bytes: &[u8], options: &ReadOptions) -> Result<SpectraFile> {
    let mut file: Option<SpectraFile> = None;
    let mut passed = Vec::new();
    for (name, text) in sheets_as_text(bytes)? {
        let part = table::Part {
            name: Some(format!("sheet '{name}'")),
            first_position: 0,
        };
        match table::read(&text, options, &part) {
            Ok(sheet) => match file.as_mut() {
                Some(f) => f.append(sheet),
                None => file = Some(sheet),
            },
            Err(e) => passed.push(format!("sheet '{name}': {e}")),
        }
    }
    match file {
        Some(mut f) => {
            f.warnings
                .extend(passed.into_iter().map(|p| format!("{p} (passed over)")));
            Ok(f)
        }
        None => Err(Error::structure(
            1,
            format!(
                "a workbook with no sheet holding a table of spectra: {}",
                if passed.is_empty() {
                    "it has no sheets".to_string()
                } else {
                    passed.join("; ")
                }
            ),
        )),
    }
}
