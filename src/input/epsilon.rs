//! Parser for molar absorptivity tables: CSV with the header
//! `wavelength_nm,epsilon` (ε in L·mol⁻¹·cm⁻¹), as given to `library add`.
//!
//! In: bytes. Out: ascending wavelengths and ε values, validated.

use super::fields;
use crate::error::{Error, Result};
use crate::spectrum::{self, Grid};

/// A molar absorptivity curve as read from a table.
#[derive(Debug, Clone)]
pub struct EpsilonTable {
    /// Validated ascending wavelengths, nm.
    pub grid: Grid,
    /// ε at each wavelength, L·mol⁻¹·cm⁻¹.
    pub epsilon_l_per_mol_cm: Vec<f64>,
}

/// Read a `wavelength_nm,epsilon` table. An optional third column
/// `epsilon_std_error` is not read here (calibration writes it directly).
pub fn read(bytes: &[u8]) -> Result<EpsilonTable> {
    let bytes = fields::strip_bom(bytes);
    let mut lines = fields::lines(bytes);
    let Some((header_line, header_bytes, delimiter)) = fields::first_content_line(&mut lines)
    else {
        return Err(Error::Empty);
    };
    let names = fields::header_names(header_bytes, delimiter.byte());
    let ok_w = matches!(
        names.first().map(String::as_str),
        Some("wavelength_nm" | "wavelength")
    );
    let ok_e = matches!(
        names.get(1).map(String::as_str),
        Some("epsilon" | "epsilon_l_per_mol_cm")
    );
    if names.len() != 2 || !ok_w || !ok_e {
        return Err(Error::structure(
            header_line,
            format!(
                "header '{}': expected `wavelength_nm,epsilon` (ε in L/(mol·cm))",
                crate::error::shorten(header_bytes)
            ),
        ));
    }
    let dc = delimiter.allows_decimal_comma();
    let mut w = Vec::new();
    let mut e = Vec::new();
    let mut scratch = Vec::new();
    for (n, line) in lines {
        if fields::is_skippable(line, delimiter.byte()) {
            continue;
        }
        fields::split(line, delimiter.byte(), &mut scratch);
        fields::trim_trailing_empty(&mut scratch);
        if scratch.len() != 2 {
            return Err(Error::structure(
                n,
                format!("{} fields: expected 2 (wavelength in nm, ε)", scratch.len()),
            ));
        }
        let wl = fields::number(scratch[0], dc)
            .map_err(|x| Error::parse(n, 1, scratch[0], x.expected("a wavelength in nm")))?;
        let eps = fields::number(scratch[1], dc).map_err(|x| {
            Error::parse(
                n,
                2,
                scratch[1],
                x.expected("a molar absorptivity in L/(mol·cm)"),
            )
        })?;
        if eps < 0.0 {
            return Err(Error::parse(
                n,
                2,
                scratch[1],
                "a molar absorptivity of 0 or more (negative ε is not physical)",
            ));
        }
        w.push(wl);
        e.push(eps);
    }
    if w.len() < 2 {
        return Err(Error::structure(
            header_line,
            format!("{} data rows: expected at least 2 wavelengths", w.len()),
        ));
    }
    let (w, reversed) = spectrum::ascending(w);
    if reversed {
        e.reverse();
    }
    let grid = Grid::new(w)?;
    if e.iter().all(|&x| x <= 0.0) {
        return Err(Error::Invalid(
            "every ε value is zero: a reference must absorb somewhere".into(),
        ));
    }
    Ok(EpsilonTable {
        grid,
        epsilon_l_per_mol_cm: e,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_is_read() {
        let t = read(b"wavelength_nm,epsilon\n400,100\n500,200.5\n").unwrap();
        assert_eq!(t.grid.wavelengths_nm(), &[400.0, 500.0]);
        assert_eq!(t.epsilon_l_per_mol_cm, vec![100.0, 200.5]);
    }

    #[test]
    fn wrong_header_is_named() {
        let e = read(b"nm,eps\n400,1\n").unwrap_err();
        assert!(
            e.to_string().contains("expected `wavelength_nm,epsilon`"),
            "{e}"
        );
    }

    #[test]
    fn negative_epsilon_is_rejected() {
        let e = read(b"wavelength_nm,epsilon\n400,1\n500,-2\n").unwrap_err();
        assert!(e.to_string().starts_with("line 3, column 2"), "{e}");
    }

    #[test]
    fn all_zero_reference_is_rejected() {
        assert!(read(b"wavelength_nm,epsilon\n400,0\n500,0\n").is_err());
    }
}
