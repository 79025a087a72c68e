//! Input stage: what kind of file the bytes are, and the reader for it.
//!
//! In: the first bytes of an input (sniffed by content, not by name), then
//! the whole input. Out: a [`Kind`], and for [`read_whole`] a
//! [`SpectraFile`] from the reader of that kind: delimited text
//! ([`super::table`]), JCAMP-DX ([`super::jcamp`]) or a spreadsheet
//! workbook ([`super::workbook`]). A kind that is not read gets an error
//! that names it and says what to export instead.

use super::spectra::{ReadOptions, SpectraFile};
use super::{jcamp, table, workbook};
use crate::error::{Error, Result};

/// What kind of file an input is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// Delimited text (CSV, semicolon- or tab-separated).
    Text,
    /// JCAMP-DX labelled data records (`##TITLE=` ...).
    Jcamp,
    /// A ZIP container: an Office Open XML (.xlsx) or OpenDocument (.ods)
    /// workbook, or another ZIP file.
    Zip,
    /// A legacy binary Office file (OLE compound document: .xls).
    Ole,
    /// Other binary content (NUL bytes or a known signature).
    Binary(&'static str),
}

/// Sniff the kind from the first bytes (signatures from the ZIP, OLE2,
/// PDF and PNG specifications; JCAMP-DX from its first `##` label).
pub fn sniff(head: &[u8]) -> Kind {
    if head.starts_with(b"PK\x03\x04") {
        return Kind::Zip;
    }
    if head.starts_with(&[0xD0, 0xCF, 0x11, 0xE0, 0xA1, 0xB1, 0x1A, 0xE1]) {
        return Kind::Ole;
    }
    if head.starts_with(b"%PDF") {
        return Kind::Binary("a PDF document");
    }
    if head.starts_with(b"\x89PNG") {
        return Kind::Binary("a PNG image");
    }
    let probe = &head[..head.len().min(4096)];
    if probe.contains(&0) && !is_utf16(probe) {
        return Kind::Binary("binary data, not text");
    }
    let text = super::fields::strip_bom(probe);
    let first = text
        .split(|&b| b == b'\n')
        .map(super::fields::trim)
        .find(|l| !l.is_empty() && l != b"\r");
    match first {
        Some(l) if l.starts_with(b"##") => Kind::Jcamp,
        _ => Kind::Text,
    }
}

fn is_utf16(probe: &[u8]) -> bool {
    probe.starts_with(&[0xFF, 0xFE]) || probe.starts_with(&[0xFE, 0xFF])
}

/// Read a whole input with the reader of its kind.
pub fn read_whole(bytes: &[u8], options: &ReadOptions) -> Result<SpectraFile> {
    match sniff(bytes) {
        Kind::Text => table::read(bytes, options, &table::Part::default()),
        Kind::Jcamp => jcamp::read(bytes, options),
        Kind::Zip | Kind::Ole => workbook::read(bytes, options),
        Kind::Binary(_) if is_utf16(bytes) => Err(not_read("UTF-16 text")),
        Kind::Binary(what) => Err(not_read(what)),
    }
}

fn not_read(named: &str) -> Error {
    Error::structure(
        1,
        format!(
            "this is {named}, which is not read: export the spectra as CSV (comma, semicolon or tab separated, UTF-8), as JCAMP-DX, or as an .xlsx or .ods workbook"
        ),
    )
}
