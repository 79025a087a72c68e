//! Emission references from standards (diagnostics for standards): the
//! absorbance calibration run on emission intensities.
//!
//! In: the standards' emission spectra at one excitation, their
//! concentrations, options and provenance. Out: an [`EmissionCurve`] (the
//! slope of intensity against concentration at each used wavelength, ≥ 0)
//! with the [`CalibrationResult`] it came from.
//!
//! The model per emission wavelength is the calibration line of
//! [`crate::calibrate`] with the pathlength set to one,
//!
//! ```text
//! Fᵢ(λ) − F̄_blank(λ) = S(λ)·cᵢ + b(λ) + noise
//! ```
//!
//! linear at low absorbance (Lakowicz, *Principles of Fluorescence
//! Spectroscopy*, 3rd ed., ch. 1–2). Standards whose emission falls short of
//! the line through the lower ones (inner filter, self-quenching) are left
//! out and named by the same linearity test, so the curve describes the
//! dilute range only. The absorbance ceiling does not apply to intensities.
//! The calibration's numbers named in AU (residual SD, intercept) are in the
//! input's intensity units here.

use crate::calibrate::{self, CalibrationOptions, CalibrationResult, Provenance};
use crate::error::Result;
use crate::input::concentrations::Standard;
use crate::input::spectra::SpectraFile;
use crate::reference::EmissionCurve;

/// Calibrate an emission curve at `excitation_nm`. `options.pathlength_cm`
/// and `options.absorbance_ceiling_au` are replaced (1 cm, no ceiling).
pub fn emission_curve(
    file: &SpectraFile,
    standards: &[Standard],
    options: &CalibrationOptions,
    provenance: &Provenance,
    excitation_nm: f64,
) -> Result<(EmissionCurve, CalibrationResult)> {
    let options = CalibrationOptions {
        pathlength_cm: 1.0,
        absorbance_ceiling_au: f64::MAX,
        ..*options
    };
    let result = calibrate::calibrate(file, standards, &options, provenance)?;
    let used: Vec<_> = result
        .wavelengths
        .iter()
        .filter(|w| w.excluded.is_none())
        .collect();
    let mut curve = EmissionCurve::new(
        excitation_nm,
        used.iter().map(|w| w.wavelength_nm).collect(),
        used.iter()
            .map(|w| w.epsilon_l_per_mol_cm.max(0.0))
            .collect(),
    )?;
    curve.source_file = Some(provenance.standards_file.clone());
    Ok((curve, result))
}
