//! Steps 6–8 of a calibration: which wavelengths cannot be used and why, the
//! final line at every wavelength, and the checks on the used wavelengths and
//! at the band maximum.

use super::readings::{Reading, bends, lack_of_fit, line_at};
use super::{
    CalibrationOptions, LINEARITY_MIN_SIGNAL_FRACTION, MIN_R_SQUARED, TEST_ALPHA, WavelengthResult,
};
use crate::error::{Error, Result};
use crate::reference::component::{ExcludedWavelengths, LackOfFit};
use crate::stats;

/// Why a wavelength cannot be used.
#[derive(Clone, Copy, PartialEq)]
pub(super) enum Cut {
    /// The blank reads above the ceiling.
    Blank,
    /// A used standard reads above the ceiling.
    Standard,
    /// The top level bends away from the line (relative deviation).
    Bends(f64),
}

/// What the per-wavelength steps read.
pub(super) struct LineInputs<'a, 'r> {
    /// The standards' readings.
    pub readings: &'r [Reading<'a>],
    /// Whether each reading is used.
    pub active: &'r [bool],
    /// Concentration levels of the used readings.
    pub levels: &'r [Vec<usize>],
    /// Where the blanks stay below the ceiling.
    pub blank_ok: &'r [bool],
    /// The window's wavelengths, nm.
    pub wavelengths_nm: &'r [f64],
    /// The calibration's options.
    pub options: &'r CalibrationOptions,
}

impl LineInputs<'_, '_> {
    /// Indices of the used readings.
    pub fn members(&self) -> Vec<usize> {
        (0..self.readings.len())
            .filter(|&i| self.active[i])
            .collect()
    }

    /// Mean blank-subtracted absorbance of the top level at wavelength j, AU.
    fn top_signal(&self, j: usize) -> f64 {
        let top = &self.levels[self.levels.len() - 1];
        top.iter().map(|&i| self.readings[i].y[j]).sum::<f64>() / top.len() as f64
    }
}

/// Per wavelength: what, if anything, keeps it from being used.
pub(super) fn cuts(inputs: &LineInputs, band: usize) -> Vec<Option<Cut>> {
    let ceiling = inputs.options.absorbance_ceiling_au;
    let top_signal_band = inputs.top_signal(band);
    (0..inputs.wavelengths_nm.len())
        .map(|j| {
            if !inputs.blank_ok[j] {
                return Some(Cut::Blank);
            }
            if (0..inputs.readings.len())
                .any(|i| inputs.active[i] && inputs.readings[i].raw[j] > ceiling)
            {
                return Some(Cut::Standard);
            }
            if inputs.levels.len() >= 3
                && inputs.top_signal(j) >= LINEARITY_MIN_SIGNAL_FRACTION * top_signal_band
                && let Some(r) = bends(
                    inputs.readings,
                    inputs.levels,
                    j,
                    inputs.options.linearity_tolerance,
                )
            {
                return Some(Cut::Bends(r));
            }
            None
        })
        .collect()
}

/// Runs of wavelengths cut for the same reason, with that reason in words.
pub(super) fn cut_ranges(
    cuts: &[Option<Cut>],
    wavelengths_nm: &[f64],
    options: &CalibrationOptions,
) -> Vec<ExcludedWavelengths> {
    let ceiling = options.absorbance_ceiling_au;
    let nw = cuts.len();
    let mut out = Vec::new();
    let mut j = 0;
    while j < nw {
        let Some(kind) = cuts[j] else {
            j += 1;
            continue;
        };
        let same = |c: Option<Cut>| match (c, kind) {
            (Some(Cut::Bends(_)), Cut::Bends(_)) => true,
            (Some(a), b) => a == b,
            (None, _) => false,
        };
        let mut k = j;
        let mut worst = 0.0f64;
        while k < nw && same(cuts[k]) {
            if let Some(Cut::Bends(r)) = cuts[k]
                && r.abs() > worst.abs()
            {
                worst = r;
            }
            k += 1;
        }
        let reason = match kind {
            Cut::Blank => {
                format!("the blank reads above the {ceiling} AU ceiling (solvent or cell cut-off)")
            }
            Cut::Standard => format!("a standard reads above the {ceiling} AU ceiling"),
            Cut::Bends(_) => format!(
                "the top standard bends away from the line of the lower ones (up to {:+.1} %, tolerance ±{:.1} %)",
                100.0 * worst,
                100.0 * options.linearity_tolerance
            ),
        };
        out.push(ExcludedWavelengths {
            range_nm: [wavelengths_nm[j], wavelengths_nm[k - 1]],
            reason,
        });
        j = k;
    }
    out
}

/// The line through the used standards at every wavelength of the window.
pub(super) fn final_lines(
    inputs: &LineInputs,
    cuts: &[Option<Cut>],
    excluded: &[ExcludedWavelengths],
    n_blanks: usize,
) -> Result<Vec<WavelengthResult>> {
    let members = inputs.members();
    let w = inputs.wavelengths_nm;
    let mut out = Vec::with_capacity(w.len());
    for j in 0..w.len() {
        let fit = line_at(inputs.readings, members.iter().copied(), j).ok_or_else(|| {
            Error::Invalid("calibration line: fewer than 2 concentrations".into())
        })?;
        let lof = lack_of_fit(inputs.readings, inputs.levels, &fit, j);
        let reason = cuts[j].map(|_| {
            excluded
                .iter()
                .find(|e| e.range_nm[0] <= w[j] && w[j] <= e.range_nm[1])
                .map(|e| e.reason.clone())
                .unwrap_or_default()
        });
        out.push(WavelengthResult {
            wavelength_nm: w[j],
            epsilon_l_per_mol_cm: fit.slope,
            epsilon_std_error_l_per_mol_cm: fit.slope_std_error().unwrap_or(0.0),
            intercept_au: fit.intercept,
            intercept_std_error_au: fit
                .intercept_std_error_against_blank(n_blanks)
                .unwrap_or(0.0),
            intercept_p_value: fit.intercept_p_value_against_blank(n_blanks).unwrap_or(1.0),
            r_squared: fit.r_squared(),
            residual_sd_au: fit.residual_sd().unwrap_or(0.0),
            lack_of_fit_p_value: lof.as_ref().map(|l| l.p_value),
            excluded: reason,
        });
    }
    Ok(out)
}

/// The used wavelengths (at least 2); gaps inside the curve and ε
/// significantly below zero add warnings.
pub(super) fn used_wavelengths(
    cuts: &[Option<Cut>],
    lines: &[WavelengthResult],
    n_members: usize,
    ceiling_au: f64,
    warnings: &mut Vec<String>,
) -> Result<Vec<usize>> {
    let used: Vec<usize> = (0..cuts.len()).filter(|&j| cuts[j].is_none()).collect();
    if used.len() < 2 {
        return Err(Error::Invalid(format!(
            "{} usable wavelength(s) left after leaving out readings above {ceiling_au} AU and non-linear ones: expected at least 2; dilute the standards or use a cell with a shorter pathlength",
            used.len()
        )));
    }
    for pair in used.windows(2) {
        if pair[1] > pair[0] + 1 {
            warnings.push(format!(
                "wavelengths {}–{} nm inside the curve were left out: ε is interpolated across them when fitting; check the spectra there",
                lines[pair[0] + 1].wavelength_nm,
                lines[pair[1] - 1].wavelength_nm
            ));
        }
    }
    // One-sided 5 % over all used wavelengths together (Bonferroni), so
    // noise at hundreds of non-absorbing wavelengths does not raise it.
    let t_negative =
        stats::t_two_sided_critical(2.0 * TEST_ALPHA / used.len() as f64, (n_members - 2) as f64);
    let negative: Vec<f64> = used
        .iter()
        .map(|&j| &lines[j])
        .filter(|w| w.epsilon_l_per_mol_cm < -t_negative * w.epsilon_std_error_l_per_mol_cm)
        .map(|w| w.wavelength_nm)
        .collect();
    if let (Some(first), Some(last)) = (negative.first(), negative.last()) {
        warnings.push(format!(
            "ε is significantly below zero at {} wavelength(s) between {first} and {last} nm (set to 0 in the component): the blank absorbs more than the standards there; check that blank and standards share solvent and cell",
            negative.len()
        ));
    }
    Ok(used)
}

/// The tests at the band maximum: intercept, lack of fit and R²; each
/// failure adds a warning. Returns the lack-of-fit test there.
pub(super) fn check_band(
    inputs: &LineInputs,
    band: usize,
    line: &WavelengthResult,
    warnings: &mut Vec<String>,
) -> Result<Option<LackOfFit>> {
    let band_fit = line_at(inputs.readings, inputs.members().into_iter(), band)
        .ok_or_else(|| Error::Invalid("calibration line: fewer than 2 concentrations".into()))?;
    let lof = lack_of_fit(inputs.readings, inputs.levels, &band_fit, band);
    let band_nm = inputs.wavelengths_nm[band];
    if line.intercept_p_value < TEST_ALPHA {
        warnings.push(format!(
            "the intercept at {band_nm} nm is {:.5} ± {:.5} AU, significantly different from zero (t test, p = {:.3}): a sign of a bad blank or an offset between cells; check the blank and read blank and standards in the same cell",
            line.intercept_au, line.intercept_std_error_au, line.intercept_p_value
        ));
    }
    if let Some(l) = &lof
        && l.p_value < TEST_ALPHA
    {
        warnings.push(format!(
            "lack of fit at {band_nm} nm (F = {:.2}, p = {:.3}): the replicate means do not lie on a straight line; look for a curved response or a bad standard",
            l.f_statistic, l.p_value
        ));
    }
    let r2 = line.r_squared.unwrap_or(0.0);
    if r2 < MIN_R_SQUARED {
        warnings.push(format!(
            "R² at {band_nm} nm is {r2:.4}, below the {MIN_R_SQUARED} usually asked of a calibration line (common practice)"
        ));
    }
    Ok(lof)
}
