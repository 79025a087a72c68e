//! Parser for emission reference tables: CSV with the header
//! `wavelength_nm,intensity_per_mol_per_l` (emission per unit concentration
//! at one excitation wavelength, in the instrument's intensity units per
//! mol/L), as given to `library add --emission`.
//!
//! In: bytes and the excitation wavelength from the command line, if any.
//! Out: [`EmissionTable`] (ascending wavelengths, intensities ≥ 0, the
//! excitation). The excitation may also be written in the file, on a
//! comment line before the header: `# excitation_nm = 350`. A file with
//! neither is refused, and so is one whose line disagrees with the flag.
//!
//! Intensities a little below zero are the noise of a measured curve around
//! its baseline and are set to 0; one below −[`NEGATIVE_TOLERANCE`] of the
//! curve's maximum is an error naming its line and value.

use super::fields::{self, Delimiter};
use crate::error::{Error, Result};
use crate::spectrum::{self, Grid};

/// Largest negative intensity, as a fraction of the curve's maximum, taken
/// as noise around zero (common practice, no source: a few per cent is the
/// scatter of a dilute reference's baseline).
pub const NEGATIVE_TOLERANCE: f64 = 0.02;

/// Two excitation wavelengths closer than this are the same setting, nm
/// (a monochromator's reading; common practice, no source).
pub const EXCITATION_TOLERANCE_NM: f64 = 0.5;

/// An emission curve as read from a table.
#[derive(Debug, Clone)]
pub struct EmissionTable {
    /// Excitation wavelength, nm.
    pub excitation_nm: f64,
    /// Validated ascending emission wavelengths, nm.
    pub grid: Grid,
    /// Intensity per mol/L at each wavelength (≥ 0).
    pub intensity_per_mol_per_l: Vec<f64>,
    /// Small negative readings set to 0.
    pub n_zeroed: usize,
}

struct Row {
    line: usize,
    wavelength_nm: f64,
    intensity: f64,
    raw: String,
}

/// Read a `wavelength_nm,intensity_per_mol_per_l` table.
pub fn read(bytes: &[u8], excitation_flag_nm: Option<f64>) -> Result<EmissionTable> {
    let bytes = fields::strip_bom(bytes);
    let mut lines = fields::lines(bytes);
    let mut in_file = None;
    let mut header = None;
    for (n, line) in lines.by_ref() {
        let d = Delimiter::detect(line);
        if fields::is_skippable(line, d.byte()) {
            if let Some(x) = excitation_comment(n, line)? {
                in_file = Some((n, x));
            }
            continue;
        }
        header = Some((n, line, d));
        break;
    }
    let Some((header_line, header_bytes, delimiter)) = header else {
        return Err(Error::Empty);
    };
    check_header(header_line, header_bytes, delimiter)?;
    let excitation_nm = excitation(in_file, excitation_flag_nm)?;
    let rows = data_rows(lines, delimiter)?;
    if rows.len() < 2 {
        return Err(Error::structure(
            header_line,
            format!("{} data rows: expected at least 2 wavelengths", rows.len()),
        ));
    }
    let (intensity, n_zeroed) = clamp_noise(&rows)?;
    let (w, reversed) = spectrum::ascending(rows.iter().map(|r| r.wavelength_nm).collect());
    let mut intensity = intensity;
    if reversed {
        intensity.reverse();
    }
    Ok(EmissionTable {
        excitation_nm,
        grid: Grid::new(w)?,
        intensity_per_mol_per_l: intensity,
        n_zeroed,
    })
}

/// `# excitation_nm = X` (or `:`) on a comment line.
fn excitation_comment(n: usize, line: &[u8]) -> Result<Option<f64>> {
    let text = fields::text(line);
    let body = text.trim_start().trim_start_matches('#').trim();
    let Some(rest) = body.strip_prefix("excitation_nm") else {
        return Ok(None);
    };
    let value = rest.trim_start().trim_start_matches(['=', ':']).trim();
    match value.parse::<f64>() {
        Ok(x) if x.is_finite() && x > 0.0 => Ok(Some(x)),
        _ => Err(Error::parse(
            n,
            1,
            value.as_bytes(),
            "an excitation wavelength in nm after `excitation_nm =`",
        )),
    }
}

fn excitation(in_file: Option<(usize, f64)>, flag: Option<f64>) -> Result<f64> {
    match (in_file, flag) {
        (Some((n, x)), Some(f)) if (x - f).abs() > EXCITATION_TOLERANCE_NM => Err(Error::parse(
            n,
            1,
            x.to_string().as_bytes(),
            format!("the excitation given with --excitation-nm ({f} nm)"),
        )),
        (_, Some(f)) => Ok(f),
        (Some((_, x)), None) => Ok(x),
        (None, None) => Err(Error::Invalid(
            "no excitation wavelength: expected a `# excitation_nm = X` line before the header or --excitation-nm X".into(),
        )),
    }
}

fn check_header(line: usize, bytes: &[u8], delimiter: Delimiter) -> Result<()> {
    let names = fields::header_names(bytes, delimiter.byte());
    let ok_w = matches!(
        names.first().map(String::as_str),
        Some("wavelength_nm" | "wavelength")
    );
    let ok_i = names.get(1).map(String::as_str) == Some("intensity_per_mol_per_l");
    if names.len() == 2 && ok_w && ok_i {
        return Ok(());
    }
    Err(Error::structure(
        line,
        format!(
            "header '{}': expected `wavelength_nm,intensity_per_mol_per_l` (emission per mol/L at one excitation)",
            crate::error::shorten(bytes)
        ),
    ))
}

fn data_rows<'a>(
    lines: impl Iterator<Item = (usize, &'a [u8])>,
    delimiter: Delimiter,
) -> Result<Vec<Row>> {
    let dc = delimiter.allows_decimal_comma();
    let mut rows = Vec::new();
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
                format!(
                    "{} fields: expected 2 (wavelength in nm, intensity per mol/L)",
                    scratch.len()
                ),
            ));
        }
        let wavelength_nm = fields::number(scratch[0], dc)
            .map_err(|x| Error::parse(n, 1, scratch[0], x.expected("a wavelength in nm")))?;
        let intensity = fields::number(scratch[1], dc)
            .map_err(|x| Error::parse(n, 2, scratch[1], x.expected("an intensity per mol/L")))?;
        rows.push(Row {
            line: n,
            wavelength_nm,
            intensity,
            raw: fields::text(scratch[1]).trim().to_string(),
        });
    }
    Ok(rows)
}

/// Set small negatives to 0; refuse the first one beyond the noise.
fn clamp_noise(rows: &[Row]) -> Result<(Vec<f64>, usize)> {
    let top = rows.iter().fold(0.0f64, |m, r| m.max(r.intensity));
    if top <= 0.0 {
        return Err(Error::Invalid(
            "every intensity is zero or negative: an emission reference must emit somewhere".into(),
        ));
    }
    let floor = -NEGATIVE_TOLERANCE * top;
    let mut n_zeroed = 0;
    let mut out = Vec::with_capacity(rows.len());
    for r in rows {
        if r.intensity < floor {
            return Err(Error::parse(
                r.line,
                2,
                r.raw.as_bytes(),
                format!(
                    "an intensity of 0 or more (a negative reading beyond the noise, below {floor:.4} = −{NEGATIVE_TOLERANCE}·maximum)"
                ),
            ));
        }
        if r.intensity < 0.0 {
            n_zeroed += 1;
        }
        out.push(r.intensity.max(0.0));
    }
    Ok((out, n_zeroed))
}

#[cfg(test)]
mod tests {
    use super::*;

    const TABLE: &[u8] = b"wavelength_nm,intensity_per_mol_per_l\n400,1e9\n450,3e9\n500,-1e7\n";

    #[test]
    fn table_with_flag_is_read_and_small_negatives_zeroed() {
        let t = read(TABLE, Some(350.0)).unwrap();
        assert_eq!(t.grid.wavelengths_nm(), &[400.0, 450.0, 500.0]);
        assert_eq!(t.intensity_per_mol_per_l, vec![1e9, 3e9, 0.0]);
        assert_eq!(t.n_zeroed, 1);
        assert!((t.excitation_nm - 350.0).abs() < 1e-12);
    }

    #[test]
    fn excitation_can_come_from_the_file() {
        let text = [b"# excitation_nm = 280\n".as_slice(), TABLE].concat();
        let t = read(&text, None).unwrap();
        assert!((t.excitation_nm - 280.0).abs() < 1e-12);
    }

    #[test]
    fn missing_excitation_is_refused() {
        let e = read(TABLE, None).unwrap_err();
        assert!(e.to_string().contains("no excitation wavelength"), "{e}");
    }

    #[test]
    fn file_and_flag_disagreeing_is_refused_with_the_line() {
        let text = [b"# excitation_nm: 280\n".as_slice(), TABLE].concat();
        let e = read(&text, Some(350.0)).unwrap_err();
        assert!(e.to_string().starts_with("line 1, column 1 ('280')"), "{e}");
    }

    #[test]
    fn negative_beyond_the_noise_names_line_and_value() {
        let text = b"wavelength_nm,intensity_per_mol_per_l\n400,1e9\n450,-2e8\n";
        let e = read(text, Some(350.0)).unwrap_err();
        assert!(
            e.to_string().starts_with("line 3, column 2 ('-2e8')"),
            "{e}"
        );
    }

    #[test]
    fn wrong_header_is_named() {
        let e = read(b"wavelength_nm,epsilon\n400,1\n", Some(350.0)).unwrap_err();
        assert!(e.to_string().contains("intensity_per_mol_per_l"), "{e}");
    }
}
