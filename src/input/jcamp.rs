//! Input stage: JCAMP-DX spectra (versions 4.24 and 5.x).
//!
//! In: the bytes of a JCAMP-DX file. Out: a [`SpectraFile`] with one sample
//! per block that holds data; the outer block of a linked file (`##BLOCKS=`)
//! holds none and is skipped. Read as the published specification describes
//! it (McDonald & Wilks, "JCAMP-DX: A Standard Form for Exchange of Infrared
//! Spectra in Computer Readable Form", Appl. Spectrosc. 42:151–162, 1988;
//! written from memory of that paper and of the later IUPAC recommendations,
//! not from a copy at hand):
//!
//! - labelled data records `##LABEL=value`; labels compared without spaces,
//!   `-`, `/` and `_`, in any case; `$$` starts a comment;
//! - `##XYDATA=(X++(Y..Y))`: each line an abscissa then ordinates at
//!   successive points; x = FIRSTX + i·(LASTX − FIRSTX)/(NPOINTS − 1),
//!   y = YFACTOR·Y; numbers in AFFN (`123 -4.5E2`), PAC (`+12-3`), or the
//!   ASDF compressed forms: SQZ (`@`=0, `A`–`I` = 1–9, `a`–`i` = −1…−9 as
//!   the first digit of an absolute value), DIF (`%`=0, `J`–`R` = 1–9,
//!   `j`–`r` = −1…−9, a difference from the previous ordinate), DUP
//!   (`S`–`Z` = 1–8, `s` = 9: the previous value or difference occurs this
//!   many times in all); `?` is a missing ordinate;
//! - the Y-check: when a line ends in DIF form, the next line starts with
//!   the last ordinate again, which is compared and dropped;
//! - `##XYPOINTS=(XY..XY)`: `x, y` pairs, XFACTOR and YFACTOR applied;
//! - `##XUNITS`: NANOMETERS, MICROMETERS (× 1000) or 1/CM (10⁷/ν̃ nm);
//!   `##YUNITS` names the quantity (absorbance or transmittance).

use super::quantity::{self, Quantity};
use super::samples::{self, RawSample};
use super::spectra::{Layout, ReadOptions, Section, SpectraFile};
use crate::error::{Error, Result};
use std::collections::HashMap;

/// One block's labelled records and data lines.
#[derive(Debug, Default)]
struct BlockText {
    first_line: usize,
    labels: HashMap<String, String>,
    order: Vec<(String, String)>,
    /// `XYDATA` or `XYPOINTS`, and its lines.
    data: Option<(String, Vec<(usize, String)>)>,
}

/// Read a JCAMP-DX file: one sample per block with data.
pub fn read(bytes: &[u8], options: &ReadOptions) -> Result<SpectraFile> {
    let text = String::from_utf8_lossy(super::fields::strip_bom(bytes));
    let blocks = split_blocks(&text);
    let mut file = SpectraFile {
        layout: Layout::Jcamp,
        delimiter: super::fields::Delimiter::Comma,
        blocks: Vec::new(),
        failures: Vec::new(),
        n_samples: 0,
        sections: Vec::new(),
        warnings: Vec::new(),
    };
    let with_data: Vec<&BlockText> = blocks.iter().filter(|b| b.data.is_some()).collect();
    if with_data.is_empty() {
        return Err(Error::structure(
            blocks.first().map_or(1, |b| b.first_line),
            "a JCAMP-DX file without ##XYDATA=(X++(Y..Y)) or ##XYPOINTS=(XY..XY): expected one spectrum per block (##NTUPLES and peak tables are not read)",
        ));
    }
    for (k, block) in with_data.into_iter().enumerate() {
        add_block(&mut file, block, k, options);
    }
    Ok(file)
}

/// Read one block into the file: its sample, section and warnings.
fn add_block(file: &mut SpectraFile, block: &BlockText, k: usize, options: &ReadOptions) {
    let position = file.n_samples;
    let title = block.labels.get("TITLE").filter(|t| !t.is_empty());
    let id = title
        .cloned()
        .or_else(|| options.fallback_name.clone())
        .unwrap_or_else(|| format!("block {}", k + 1));
    let id = if k > 0 && title.is_none() {
        format!("{id} {}", k + 1)
    } else {
        id
    };
    let said = block
        .labels
        .get("YUNITS")
        .and_then(|u| Quantity::from_metadata("YUNITS", u).map(|q| (q, format!("##YUNITS={u}"))));
    let decided = quantity::decide(options.quantity, said);
    let mut sample = RawSample::new(id, block.first_line);
    if let Err(e) = points(block, &mut sample) {
        sample.fail(e);
    }
    file.warnings.extend(decided.warning.clone());
    let values = sample.points.iter().map(|p| p.1);
    file.warnings
        .extend(quantity::plausibility_warning(&decided, values));
    let assembled = samples::assemble(vec![sample], decided.quantity, position);
    file.blocks.extend(assembled.blocks);
    file.failures.extend(assembled.failures);
    file.warnings.extend(assembled.warnings);
    file.n_samples += 1;
    file.sections.push(Section {
        name: Some(format!("block {}", k + 1)),
        layout: Layout::Jcamp,
        metadata: block.order.clone(),
        quantity: decided.quantity,
        quantity_from: match decided.source {
            quantity::QuantitySource::Option => "--quantity".into(),
            quantity::QuantitySource::File(what) => what,
            quantity::QuantitySource::Assumed => "assumed (no ##YUNITS)".into(),
        },
        positions: position..position + 1,
    });
}

/// A label without spaces, `-`, `/`, `_`, uppercased.
fn label(raw: &str) -> String {
    raw.chars()
        .filter(|c| !matches!(c, ' ' | '-' | '/' | '_'))
        .flat_map(char::to_uppercase)
        .collect()
}

/// Cut the text into blocks at `##TITLE=` and `##END=`.
fn split_blocks(text: &str) -> Vec<BlockText> {
    let mut blocks = Vec::new();
    let mut current: Option<BlockText> = None;
    for (i, raw_line) in text.lines().enumerate() {
        let line_no = i + 1;
        let line = raw_line.split("$$").next().unwrap_or("").trim();
        if let Some(rest) = line.strip_prefix("##") {
            let (name, value) = rest.split_once('=').unwrap_or((rest, ""));
            let (name, value) = (label(name), value.trim().to_string());
            if name == "TITLE" {
                blocks.extend(current.take());
                current = Some(BlockText {
                    first_line: line_no,
                    ..Default::default()
                });
            }
            if name == "END" {
                blocks.extend(current.take());
                continue;
            }
            let b = current.get_or_insert_with(|| BlockText {
                first_line: line_no,
                ..Default::default()
            });
            if name == "XYDATA" || name == "XYPOINTS" {
                b.data = Some((format!("{name}={value}"), Vec::new()));
            } else if b.data.is_some() && !b.labels.contains_key("DATAEND") {
                b.labels.insert("DATAEND".into(), String::new());
            }
            b.order.push((name.clone(), value.clone()));
            b.labels.insert(name, value);
        } else if let Some(b) = current.as_mut()
            && let Some((_, lines)) = b.data.as_mut()
            && !b.labels.contains_key("DATAEND")
            && !line.is_empty()
        {
            lines.push((line_no, line.to_string()));
        }
    }
    blocks.extend(current);
    blocks
}

/// A numeric label of a block, or an error naming it.
fn number(block: &BlockText, name: &str) -> Result<Option<f64>> {
    match block.labels.get(name) {
        None => Ok(None),
        Some(v) => v.trim().parse::<f64>().map(Some).map_err(|_| Error::Parse {
            at: crate::error::Location {
                line: block.first_line,
                column: None,
            },
            value: v.clone(),
            expected: format!("a number for ##{name}"),
        }),
    }
}

/// The factor that turns the block's x unit into nm, or the reciprocal
/// conversion for wavenumbers.
#[derive(Debug, Clone, Copy)]
enum XUnit {
    Scale(f64),
    Wavenumber,
}

fn x_unit(block: &BlockText) -> Result<XUnit> {
    let raw = block
        .labels
        .get("XUNITS")
        .map_or("NANOMETERS", |s| s.as_str());
    match label(raw).as_str() {
        "NANOMETERS" | "NM" => Ok(XUnit::Scale(1.0)),
        "MICROMETERS" | "UM" | "MICRONS" => Ok(XUnit::Scale(1000.0)),
        "1CM" | "CM1" | "CM-1" => Ok(XUnit::Wavenumber),
        _ => Err(Error::structure(
            block.first_line,
            format!("##XUNITS={raw}: expected NANOMETERS, MICROMETERS or 1/CM"),
        )),
    }
}

fn to_nm(unit: XUnit, x: f64) -> Option<f64> {
    let nm = match unit {
        XUnit::Scale(f) => x * f,
        XUnit::Wavenumber => 1e7 / x,
    };
    (nm.is_finite() && nm > 0.0).then_some(nm)
}

/// Fill a sample from a block's data lines.
fn points(block: &BlockText, sample: &mut RawSample) -> Result<()> {
    let Some((form, lines)) = &block.data else {
        return Ok(());
    };
    let unit = x_unit(block)?;
    let x_factor = number(block, "XFACTOR")?.unwrap_or(1.0);
    let y_factor = number(block, "YFACTOR")?.unwrap_or(1.0);
    let mut xy: Vec<(usize, f64, Option<f64>)> = Vec::new();
    if form.starts_with("XYPOINTS") {
        for (line_no, line) in lines {
            xy.extend(
                pairs(*line_no, line)?
                    .into_iter()
                    .map(|(x, y)| (*line_no, x * x_factor, y)),
            );
        }
    } else {
        let ys = super::asdf::ordinates(lines)?;
        let x = abscissae(block, ys.len())?;
        xy = ys.into_iter().zip(x).map(|((l, y), x)| (l, x, y)).collect();
    }
    for (line_no, x, y) in xy {
        let nm = to_nm(unit, x).ok_or_else(|| {
            Error::structure(
                line_no,
                format!("abscissa {x}: expected a positive wavelength"),
            )
        })?;
        match y {
            Some(y) => sample.push(nm, y * y_factor, (line_no, 1)),
            None => sample.missing.push((line_no, 1)),
        }
    }
    Ok(())
}

/// The abscissae of an `(X++(Y..Y))` table: FIRSTX + i·ΔX, ΔX from LASTX
/// and NPOINTS; NPOINTS must match the ordinates read.
fn abscissae(block: &BlockText, n: usize) -> Result<Vec<f64>> {
    let missing = |what: &str| {
        Error::structure(
            block.first_line,
            format!("##XYDATA without ##{what}: expected FIRSTX, LASTX and NPOINTS"),
        )
    };
    let first = number(block, "FIRSTX")?.ok_or_else(|| missing("FIRSTX"))?;
    let last = number(block, "LASTX")?.ok_or_else(|| missing("LASTX"))?;
    let npoints = number(block, "NPOINTS")?.ok_or_else(|| missing("NPOINTS"))?;
    if (npoints - n as f64).abs() > 0.5 {
        return Err(Error::structure(
            block.first_line,
            format!("##NPOINTS={npoints}, but the data lines hold {n} ordinates"),
        ));
    }
    let step = if n > 1 {
        (last - first) / (n - 1) as f64
    } else {
        0.0
    };
    Ok((0..n).map(|i| first + step * i as f64).collect())
}

/// `x, y` pairs of an `(XY..XY)` line: numbers separated by commas,
/// semicolons or spaces, taken two at a time; `?` is a missing ordinate.
fn pairs(line_no: usize, line: &str) -> Result<Vec<(f64, Option<f64>)>> {
    let cells: Vec<&str> = line
        .split([',', ';', ' ', '\t'])
        .filter(|c| !c.is_empty())
        .collect();
    if cells.len() % 2 == 1 {
        return Err(Error::structure(
            line_no,
            format!("{} numbers: expected `x, y` pairs", cells.len()),
        ));
    }
    let mut out = Vec::with_capacity(cells.len() / 2);
    for (k, pair) in cells.chunks(2).enumerate() {
        let x: f64 = pair[0].parse().map_err(|_| {
            Error::parse(
                line_no,
                2 * k + 1,
                pair[0].as_bytes(),
                "an abscissa (a number)",
            )
        })?;
        let y = match pair[1] {
            "?" => None,
            y => Some(y.parse::<f64>().map_err(|_| {
                Error::parse(
                    line_no,
                    2 * k + 2,
                    y.as_bytes(),
                    "an ordinate (a number or ?)",
                )
            })?),
        };
        out.push((x, y));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_ignore_spaces_dashes_slashes_and_case() {
        assert_eq!(label("x units"), "XUNITS");
        assert_eq!(label("JCAMP-DX"), "JCAMPDX");
        assert_eq!(label("Data_Type"), "DATATYPE");
    }

    #[test]
    fn wavenumbers_become_nanometres() {
        // 10⁷ / 20000 cm⁻¹ = 500 nm (definition of the wavenumber).
        assert!((to_nm(XUnit::Wavenumber, 20_000.0).unwrap() - 500.0).abs() < 1e-12);
        assert!(to_nm(XUnit::Wavenumber, 0.0).is_none());
    }
}
