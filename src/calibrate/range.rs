//! Steps 3–5 of a calibration: one wavelength grid and window for all
//! standards, the blank correction, and the usable concentration range at the
//! band maximum (readings above the ceiling and bending top levels left out).

use super::readings::{Reading, band_maximum, bends, levels};
use super::{CalibrationOptions, RECOMMENDED_LEVELS};
use crate::error::{Error, Result, quoted_list};
use crate::input::concentrations::{Role, Standard};
use crate::input::spectra::{Block, SpectraFile};
use crate::reference::component::ExcludedStandard;

/// The block all used spectra share and the window's index range in it.
pub(super) struct Window<'a> {
    /// The spectra block.
    pub block: &'a Block,
    /// First index of the window.
    pub start: usize,
    /// One past the last index of the window.
    pub end: usize,
}

impl<'a> Window<'a> {
    /// The window's wavelengths, nm.
    pub fn wavelengths_nm(&self) -> &'a [f64] {
        &self.block.grid.wavelengths_nm()[self.start..self.end]
    }

    /// Row `r` of the block over the window, AU.
    pub fn row(&self, r: usize) -> &'a [f64] {
        &self.block.row(r)[self.start..self.end]
    }
}

/// The mean blank and where the blanks stay below the ceiling.
pub(super) struct Blanks {
    /// Mean blank over the window, AU (zeros without blanks).
    pub mean_au: Vec<f64>,
    /// Whether every blank reads at or below the ceiling, per wavelength.
    pub ok: Vec<bool>,
    /// Number of blanks.
    pub count: usize,
}

/// The standards used for the lines.
pub(super) struct UsableRange {
    /// Whether each reading is used.
    pub active: Vec<bool>,
    /// Concentration levels of the used readings.
    pub levels: Vec<Vec<usize>>,
    /// Index of the band maximum in the window.
    pub band: usize,
}

/// One wavelength grid for all used spectra, cut to the window.
pub(super) fn window<'a>(
    file: &'a SpectraFile,
    used: &[(&Standard, usize, usize)],
    options: &CalibrationOptions,
) -> Result<Window<'a>> {
    let Some(&(first, block_index, _)) = used.first() else {
        return Err(Error::Invalid(
            "no readable standard is left to calibrate with".into(),
        ));
    };
    if let Some((other, b, _)) = used.iter().find(|(_, b, _)| *b != block_index) {
        let g0 = &file.blocks[block_index].grid;
        let g1 = &file.blocks[*b].grid;
        return Err(Error::Invalid(format!(
            "'{}' ({}–{} nm, {} points) and '{}' ({}–{} nm, {} points) were read at different wavelengths: calibration needs every standard and blank on the same wavelengths",
            first.sample,
            g0.min_nm(),
            g0.max_nm(),
            g0.len(),
            other.sample,
            g1.min_nm(),
            g1.max_nm(),
            g1.len()
        )));
    }
    let block = &file.blocks[block_index];
    let w_all = block.grid.wavelengths_nm();
    let (start, end) = match options.window_nm {
        None => (0, w_all.len()),
        Some((lo, hi)) => (
            w_all.partition_point(|&x| x < lo),
            w_all.partition_point(|&x| x <= hi),
        ),
    };
    if end <= start + 1 {
        return Err(Error::NoOverlap(format!(
            "{} wavelength(s) of the spectra ({}–{} nm) lie in --range-nm: expected at least 2",
            end.saturating_sub(start),
            block.grid.min_nm(),
            block.grid.max_nm()
        )));
    }
    Ok(Window { block, start, end })
}

/// The blanks, averaged (to be subtracted), and where they stay below the
/// ceiling; no blank adds a warning.
pub(super) fn blanks(
    used: &[(&Standard, usize, usize)],
    window: &Window,
    ceiling_au: f64,
    warnings: &mut Vec<String>,
) -> Blanks {
    let nw = window.end - window.start;
    let rows: Vec<&[f64]> = used
        .iter()
        .filter(|(s, _, _)| s.role == Role::Blank)
        .map(|(_, _, r)| window.row(*r))
        .collect();
    let mut mean_au = vec![0.0; nw];
    let mut max_au = vec![f64::NEG_INFINITY; nw];
    for b in &rows {
        for j in 0..nw {
            mean_au[j] += b[j] / rows.len() as f64;
            max_au[j] = max_au[j].max(b[j]);
        }
    }
    if rows.is_empty() {
        warnings.push(
            "no blank (concentration 0 or role `blank`): nothing was subtracted, so the intercept carries the solvent and cell absorbance and cannot reveal a bad blank".into(),
        );
    }
    Blanks {
        mean_au,
        ok: max_au.iter().map(|&b| b <= ceiling_au).collect(),
        count: rows.len(),
    }
}

/// The standards' readings, blank subtracted; at least 3 readings at 2 or
/// more concentrations.
pub(super) fn readings<'a>(
    used: &[(&'a Standard, usize, usize)],
    window: &Window<'a>,
    blank_mean_au: &[f64],
    pathlength_cm: f64,
) -> Result<Vec<Reading<'a>>> {
    let readings: Vec<Reading> = used
        .iter()
        .filter(|(s, _, _)| s.role == Role::Standard)
        .map(|(s, _, r)| {
            let raw = window.row(*r);
            Reading {
                sample: &s.sample,
                concentration_mol_per_l: s.concentration_mol_per_l,
                x: pathlength_cm * s.concentration_mol_per_l,
                raw,
                y: raw.iter().zip(blank_mean_au).map(|(a, b)| a - b).collect(),
            }
        })
        .collect();
    if levels(&readings, &vec![true; readings.len()]).len() < 2 {
        let what = match readings.first() {
            Some(r) => format!(
                "{} standard(s), all at {} mol/L",
                readings.len(),
                r.concentration_mol_per_l
            ),
            None => "no readable standard".into(),
        };
        return Err(Error::Invalid(format!(
            "{what}: a calibration needs standards at 2 or more different concentrations (5 or more is usual)"
        )));
    }
    if readings.len() < 3 {
        return Err(Error::Invalid(format!(
            "{} standards: a calibration line with standard errors needs at least 3 (5 or more concentrations is usual)",
            readings.len()
        )));
    }
    Ok(readings)
}

/// What the usable-range step reads.
pub(super) struct RangeInputs<'a, 'r> {
    /// The standards' readings.
    pub readings: &'r [Reading<'a>],
    /// Where the blanks stay below the ceiling.
    pub blank_ok: &'r [bool],
    /// The window's wavelengths, nm.
    pub wavelengths_nm: &'r [f64],
    /// The calibration's options.
    pub options: &'r CalibrationOptions,
}

/// The usable range at the band maximum: standards above the ceiling there
/// are left out, then the top level while it bends away from the line.
pub(super) fn usable_range(
    inputs: &RangeInputs,
    excluded: &mut Vec<ExcludedStandard>,
    warnings: &mut Vec<String>,
) -> Result<UsableRange> {
    let RangeInputs {
        readings,
        blank_ok,
        wavelengths_nm,
        options,
    } = *inputs;
    let ceiling = options.absorbance_ceiling_au;
    let mut active = vec![true; readings.len()];
    let band = band_maximum(readings, &active, blank_ok, wavelengths_nm)?;
    let band_nm = wavelengths_nm[band];
    for (i, r) in readings.iter().enumerate() {
        if r.raw[band] > ceiling {
            active[i] = false;
            excluded.push(ExcludedStandard {
                sample: r.sample.to_string(),
                concentration_mol_per_l: r.concentration_mol_per_l,
                reason: format!(
                    "reads {:.3} AU at {band_nm} nm, above the {ceiling} AU ceiling where stray light biases readings low: dilute it",
                    r.raw[band]
                ),
            });
        }
    }
    drop_bending_levels(inputs, band, &mut active, excluded);
    let lv = levels(readings, &active);
    check_levels(&lv, &active, excluded, warnings)?;
    let band = band_maximum(readings, &active, blank_ok, wavelengths_nm)?;
    Ok(UsableRange {
        active,
        levels: lv,
        band,
    })
}

/// Leave out the top concentration while it bends away from the line of the
/// lower ones at the band maximum.
fn drop_bending_levels(
    inputs: &RangeInputs,
    band: usize,
    active: &mut [bool],
    excluded: &mut Vec<ExcludedStandard>,
) {
    let (readings, options) = (inputs.readings, inputs.options);
    let band_nm = inputs.wavelengths_nm[band];
    loop {
        let lv = levels(readings, active);
        if lv.len() < 3 {
            break;
        }
        let Some(relative) = bends(readings, &lv, band, options.linearity_tolerance) else {
            break;
        };
        for &i in &lv[lv.len() - 1] {
            active[i] = false;
            excluded.push(ExcludedStandard {
                sample: readings[i].sample.to_string(),
                concentration_mol_per_l: readings[i].concentration_mol_per_l,
                reason: format!(
                    "the mean of this concentration reads {:+.1} % off the line of the lower standards at {band_nm} nm (tolerance ±{:.1} %): outside the linear range",
                    100.0 * relative,
                    100.0 * options.linearity_tolerance
                ),
            });
        }
    }
}

/// At least 3 standards at 2 or more concentrations must remain; fewer than
/// the usual number of levels adds a warning.
fn check_levels(
    lv: &[Vec<usize>],
    active: &[bool],
    excluded: &[ExcludedStandard],
    warnings: &mut Vec<String>,
) -> Result<()> {
    let n_active = active.iter().filter(|a| **a).count();
    if lv.len() < 2 || n_active < 3 {
        return Err(Error::Invalid(format!(
            "after leaving out the standards outside the usable range ({}), {n_active} standard(s) at {} concentration(s) remain: expected at least 3 at 2 or more concentrations; dilute the top standards or add lower ones",
            quoted_list(
                &excluded
                    .iter()
                    .map(|e| e.sample.clone())
                    .collect::<Vec<_>>()
            ),
            lv.len()
        )));
    }
    if lv.len() < 3 {
        warnings.push(format!(
            "{} concentrations: linearity could not be tested (it needs 3 or more)",
            lv.len()
        ));
    } else if lv.len() < RECOMMENDED_LEVELS {
        warnings.push(format!(
            "{} concentrations: {RECOMMENDED_LEVELS} or more are usual for a calibration (common practice)",
            lv.len()
        ));
    }
    Ok(())
}
