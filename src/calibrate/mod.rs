//! Calibration (stage 4–5 for standards, beside the fit): a molar
//! absorptivity curve from a blank and a series of standards.
//!
//! In: a [`SpectraFile`] holding the standards' and blanks' spectra, their
//! concentrations as [`Standard`]s (mol/L) and [`CalibrationOptions`]. Out: a
//! [`CalibrationResult`]: ε(λ) with its standard error on the usable
//! wavelengths, the fit statistics, what was left out and why, and the
//! [`Calibration`] table that goes into the component file.
//!
//! Model, per wavelength λ, for standard i of concentration cᵢ read in a cell
//! of pathlength l, after the mean blank spectrum is subtracted:
//!
//! ```text
//! Aᵢ(λ) − Ā_blank(λ) = ε(λ)·(l·cᵢ) + b(λ) + noise
//! ```
//!
//! fitted by ordinary least squares as a straight line with intercept (the
//! calibration line of e.g. Miller & Miller, *Statistics and Chemometrics for
//! Analytical Chemistry*, ch. 5; recalled from memory). The slope is ε(λ)
//! and its standard error s/√Sxx; the intercept b(λ) is tested against zero
//! with Student's t, since a non-zero intercept points at a bad blank or an
//! offset between cells. Because the mean blank was subtracted, the
//! intercept measures the line's distance from that mean, whose own scatter
//! (taken as large as the standards') enters its standard error:
//! s·√(1/n + x̄²/Sxx + 1/n_blanks). With replicates (rows that share a concentration)
//! and three or more concentrations, the residual splits into pure error and
//! lack of fit, tested with F (Draper & Smith, *Applied Regression
//! Analysis*, ch. 2; recalled from memory).
//!
//! The usable range, at the band maximum (the wavelength of the largest ε):
//! 1. a standard reading above [`ABSORBANCE_CEILING_AU`] is left out (stray
//!    light biases such readings low; common practice);
//! 2. from the top down, a concentration level is left out when the mean of
//!    its replicates lies off the line through the lower levels by more than
//!    the linearity tolerance (default [`LINEARITY_TOLERANCE`], 5 %) *and*
//!    outside the 99 % prediction bound of that line (so noise alone does
//!    not exclude it); testing stops at the first level that passes.
//!
//! Then, per wavelength, with the standards kept: a wavelength is left out
//! where the blank or a standard reads above the ceiling (solvent or cell
//! cut-off), or where the top level bends away from the line by the same
//! two criteria while carrying at least [`LINEARITY_MIN_SIGNAL_FRACTION`] of
//! its band-maximum signal (band shape changing with concentration, as in
//! aggregation). The highest concentration and blank-subtracted absorbance
//! actually used become the calibrated range.

mod line;
mod lines;
mod range;
mod readings;
mod rows;
#[cfg(test)]
mod tests;

pub use line::LineFit;

use crate::error::{Error, Result};
use crate::input::concentrations::Standard;
use crate::input::spectra::SpectraFile;
use crate::reference::component::{Calibration, Component, Conditions, Source};
use crate::spectrum::Grid;
use lines::LineInputs;
use range::{RangeInputs, UsableRange, Window};
use readings::Reading;
use serde::{Deserialize, Serialize};

/// Readings above this absorbance (AU) are not used: stray light and too
/// little light at the detector bias them low (common practice, no single
/// source; instrument dependent, so configurable).
pub const ABSORBANCE_CEILING_AU: f64 = 2.0;

/// Default relative deviation from the line of the lower standards beyond
/// which a standard or wavelength counts as non-linear (5 %, common
/// practice for a calibration's linear range, no source).
pub const LINEARITY_TOLERANCE: f64 = 0.05;

/// Two-sided significance level of the prediction bound a non-linear point
/// must also leave (99 %), so that noise alone does not exclude a standard.
pub const LINEARITY_ALPHA: f64 = 0.01;

/// Significance level of the intercept and lack-of-fit tests (5 %).
pub const TEST_ALPHA: f64 = 0.05;

/// A wavelength is tested for linearity only where its top standard reads
/// at least this fraction of its band-maximum signal: far from the band a 5 %
/// deviation is smaller than the noise and means nothing.
pub const LINEARITY_MIN_SIGNAL_FRACTION: f64 = 0.1;

/// Concentrations within this relative difference count as replicates.
pub const REPLICATE_TOLERANCE: f64 = 1e-9;

/// Below this R² at the band maximum the calibration gets a warning
/// (common practice asks for 0.995 or better, no source).
pub const MIN_R_SQUARED: f64 = 0.995;

/// Fewer concentration levels than this get a warning (five or more is
/// common practice, no source).
pub const RECOMMENDED_LEVELS: usize = 5;

/// Options of a calibration.
#[derive(Debug, Clone, Copy)]
pub struct CalibrationOptions {
    /// Optical pathlength of the standards, cm.
    pub pathlength_cm: f64,
    /// Wavelength window, nm (default: every wavelength in the file).
    pub window_nm: Option<(f64, f64)>,
    /// Relative deviation that counts as non-linear.
    pub linearity_tolerance: f64,
    /// Readings above this absorbance (AU) are not used.
    pub absorbance_ceiling_au: f64,
}

impl CalibrationOptions {
    /// Options with every value checked: pathlength (cm), linearity
    /// tolerance (a fraction) and absorbance ceiling (AU) must be positive.
    pub fn new(
        pathlength_cm: f64,
        window_nm: Option<(f64, f64)>,
        linearity_tolerance: f64,
        absorbance_ceiling_au: f64,
    ) -> Result<Self> {
        let options = CalibrationOptions {
            pathlength_cm,
            window_nm,
            linearity_tolerance,
            absorbance_ceiling_au,
        };
        options.check()?;
        Ok(options)
    }

    /// Check the values (the fields are public, so [`calibrate`] checks
    /// again what [`CalibrationOptions::new`] checked).
    fn check(&self) -> Result<()> {
        let positive = |option, value: f64, unit, expected| {
            if value.is_finite() && value > 0.0 {
                Ok(())
            } else {
                Err(Error::OutOfRange {
                    option,
                    value,
                    unit,
                    expected,
                })
            }
        };
        positive(
            "pathlength",
            self.pathlength_cm,
            " cm",
            "a positive number of cm",
        )?;
        positive(
            "linearity tolerance",
            self.linearity_tolerance,
            "",
            "a positive fraction such as 0.05",
        )?;
        positive(
            "absorbance ceiling",
            self.absorbance_ceiling_au,
            " AU",
            "a positive number of AU",
        )
    }
}

impl Default for CalibrationOptions {
    fn default() -> Self {
        CalibrationOptions {
            pathlength_cm: 1.0,
            window_nm: None,
            linearity_tolerance: LINEARITY_TOLERANCE,
            absorbance_ceiling_au: ABSORBANCE_CEILING_AU,
        }
    }
}

/// Where the inputs came from, recorded in the calibration table.
#[derive(Debug, Clone, Default)]
pub struct Provenance {
    /// The spectra file, as given.
    pub standards_file: String,
    /// Its SHA-256, hex.
    pub standards_sha256: String,
    /// The concentration file, as given.
    pub concentrations_file: String,
    /// Its SHA-256, hex.
    pub concentrations_sha256: String,
    /// The unit the concentrations were given in.
    pub concentration_unit: String,
    /// Date of the calibration (YYYY-MM-DD).
    pub date: String,
}

/// The calibration line at one wavelength.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct WavelengthResult {
    /// Wavelength, nm.
    pub wavelength_nm: f64,
    /// ε (the slope), L·mol⁻¹·cm⁻¹; negative values are kept here and set
    /// to 0 in the component.
    pub epsilon_l_per_mol_cm: f64,
    /// Standard error of ε, L·mol⁻¹·cm⁻¹.
    pub epsilon_std_error_l_per_mol_cm: f64,
    /// Intercept, AU.
    pub intercept_au: f64,
    /// Its standard error as a distance from the mean blank, AU.
    pub intercept_std_error_au: f64,
    /// Two-sided p-value of intercept = 0.
    pub intercept_p_value: f64,
    /// R² of the line (absent when the readings do not vary).
    pub r_squared: Option<f64>,
    /// Residual standard deviation, AU.
    pub residual_sd_au: f64,
    /// Lack-of-fit p-value (with replicates and three or more levels).
    pub lack_of_fit_p_value: Option<f64>,
    /// Why this wavelength was left out; `None` when used.
    pub excluded: Option<String>,
}

/// A standard whose spectrum could not be read.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct UnreadableStandard {
    /// Sample identifier.
    pub sample: String,
    /// The read error, with line and column.
    pub error: String,
}

/// Everything a calibration produced.
#[derive(Debug, Clone)]
pub struct CalibrationResult {
    /// The summary and provenance for the component file.
    pub calibration: Calibration,
    /// The line at every wavelength of the window, used or not.
    pub wavelengths: Vec<WavelengthResult>,
    /// Standards whose spectra could not be read (left out).
    pub unreadable: Vec<UnreadableStandard>,
    /// Things the analyst should look at.
    pub warnings: Vec<String>,
}

impl CalibrationResult {
    /// The component: ε ≥ 0 with its standard error on the used wavelengths,
    /// with the calibration table attached.
    pub fn component(
        &self,
        name: &str,
        molar_mass_g_per_mol: Option<f64>,
        note: Option<String>,
        conditions: Conditions,
    ) -> Result<Component> {
        crate::reference::component::validate_name(name)?;
        let used: Vec<&WavelengthResult> = self
            .wavelengths
            .iter()
            .filter(|w| w.excluded.is_none())
            .collect();
        let grid = Grid::new(used.iter().map(|w| w.wavelength_nm).collect())?;
        let mut c = Component {
            name: name.to_string(),
            molar_mass_g_per_mol,
            note,
            created: self.calibration.date.clone(),
            conditions,
            source: Source {
                kind: "calibration".into(),
                file: Some(self.calibration.standards_file.clone()),
                sha256: Some(self.calibration.standards_sha256.clone()),
            },
            grid,
            epsilon_l_per_mol_cm: used
                .iter()
                .map(|w| w.epsilon_l_per_mol_cm.max(0.0))
                .collect(),
            epsilon_std_error_l_per_mol_cm: Some(
                used.iter()
                    .map(|w| w.epsilon_std_error_l_per_mol_cm)
                    .collect(),
            ),
            extra: toml::Table::new(),
        };
        c.set_calibration(&self.calibration)?;
        Ok(c)
    }
}

/// Calibrate one component from its standards.
///
/// The steps: match spectra and concentration rows ([`rows`]), one window
/// and the blank correction, the usable range at the band maximum
/// ([`range`]), then the line at every wavelength and the checks on it
/// ([`lines`]).
pub fn calibrate(
    file: &SpectraFile,
    standards: &[Standard],
    options: &CalibrationOptions,
    provenance: &Provenance,
) -> Result<CalibrationResult> {
    options.check()?;
    let mut warnings = Vec::new();
    let located = rows::locate(file, standards)?;
    let sorted = rows::sort(standards, &located, &mut warnings)?;
    let mut excluded_standards = sorted.excluded;
    let window = range::window(file, &sorted.used, options)?;
    let wavelengths_nm = window.wavelengths_nm();
    let ceiling = options.absorbance_ceiling_au;
    let blanks = range::blanks(&sorted.used, &window, ceiling, &mut warnings);
    let readings = range::readings(
        &sorted.used,
        &window,
        &blanks.mean_au,
        options.pathlength_cm,
    )?;
    let range_inputs = RangeInputs {
        readings: &readings,
        blank_ok: &blanks.ok,
        wavelengths_nm,
        options,
    };
    let usable = range::usable_range(&range_inputs, &mut excluded_standards, &mut warnings)?;
    let inputs = LineInputs {
        readings: &readings,
        active: &usable.active,
        levels: &usable.levels,
        blank_ok: &blanks.ok,
        wavelengths_nm,
        options,
    };
    let cuts = lines::cuts(&inputs, usable.band);
    let excluded_wavelengths = lines::cut_ranges(&cuts, wavelengths_nm, options);
    let wavelengths = lines::final_lines(&inputs, &cuts, &excluded_wavelengths, blanks.count)?;
    let members = inputs.members();
    let used = lines::used_wavelengths(&cuts, &wavelengths, members.len(), ceiling, &mut warnings)?;
    let band_line = &wavelengths[usable.band];
    let lack_of_fit = lines::check_band(&inputs, usable.band, band_line, &mut warnings)?;
    let calibration = Calibration {
        lack_of_fit,
        excluded_standards,
        excluded_wavelengths,
        ..summary(&Summarised {
            readings: &readings,
            members: &members,
            used: &used,
            usable: &usable,
            window: &window,
            band_line,
            n_blanks: blanks.count,
            options,
            provenance,
        })
    };
    Ok(CalibrationResult {
        calibration,
        wavelengths,
        unreadable: sorted.unreadable,
        warnings,
    })
}

/// What the summary of a calibration is made from.
struct Summarised<'a, 'r> {
    readings: &'r [Reading<'a>],
    members: &'r [usize],
    used: &'r [usize],
    usable: &'r UsableRange,
    window: &'r Window<'a>,
    band_line: &'r WavelengthResult,
    n_blanks: usize,
    options: &'r CalibrationOptions,
    provenance: &'r Provenance,
}

/// The calibration's summary and provenance (the lists of what was left out
/// and the lack-of-fit test are filled in by the caller).
fn summary(s: &Summarised) -> Calibration {
    let (readings, members, used) = (s.readings, s.members, s.used);
    let concentrations = || members.iter().map(|&i| readings[i].concentration_mol_per_l);
    let max_absorbance = members
        .iter()
        .flat_map(|&i| used.iter().map(move |&j| (i, j)))
        .map(|(i, j)| readings[i].y[j])
        .fold(f64::NEG_INFINITY, f64::max);
    let wavelengths_nm = s.window.wavelengths_nm();
    let (p, bw) = (s.provenance, s.band_line);
    Calibration {
        date: p.date.clone(),
        standards_file: p.standards_file.clone(),
        standards_sha256: p.standards_sha256.clone(),
        concentrations_file: p.concentrations_file.clone(),
        concentrations_sha256: p.concentrations_sha256.clone(),
        concentration_unit: p.concentration_unit.clone(),
        pathlength_cm: s.options.pathlength_cm,
        n_standards: members.len(),
        n_levels: s.usable.levels.len(),
        n_blanks: s.n_blanks,
        concentration_min_mol_per_l: concentrations().fold(f64::INFINITY, f64::min),
        concentration_max_mol_per_l: concentrations().fold(0.0, f64::max),
        max_absorbance_au: max_absorbance,
        band_max_nm: wavelengths_nm[s.usable.band],
        epsilon_at_band_max_l_per_mol_cm: bw.epsilon_l_per_mol_cm,
        epsilon_std_error_at_band_max_l_per_mol_cm: bw.epsilon_std_error_l_per_mol_cm,
        r_squared_at_band_max: bw.r_squared.unwrap_or(0.0),
        residual_sd_at_band_max_au: bw.residual_sd_au,
        intercept_at_band_max_au: bw.intercept_au,
        intercept_std_error_at_band_max_au: bw.intercept_std_error_au,
        intercept_p_value: bw.intercept_p_value,
        linearity_tolerance: s.options.linearity_tolerance,
        absorbance_ceiling_au: s.options.absorbance_ceiling_au,
        range_nm: [
            wavelengths_nm[used[0]],
            wavelengths_nm[used[used.len() - 1]],
        ],
        lack_of_fit: None,
        excluded_standards: Vec::new(),
        excluded_wavelengths: Vec::new(),
    }
}
