//! Emission (fluorescence) fits: preprocessing and diagnostics for
//! mixtures measured by their emission at one excitation wavelength.
//!
//! In: emission spectra (a [`SpectraFile`](crate::input::spectra::SpectraFile)
//! whose numbers are intensities), a [`ReferenceSet`](crate::reference::ReferenceSet)
//! whose components carry emission curves at that excitation, and
//! [`EmissionOptions`]. Out: an [`EmissionReport`]: per sample the
//! concentrations (mol/L) of
//!
//! ```text
//! F_obs(λ)·f(λ) = Σ Sᵢ(λ)·cᵢ + r·R(λ) + b₀ + b₁·(λ − λ_mid),   cᵢ ≥ 0, r ≥ 0
//! ```
//!
//! where Sᵢ is component i's emission per mol/L at the excitation (see
//! [`crate::reference::emission`]), R the unit-height water Raman band
//! ([`raman`]) and f(λ) the inner-filter factor of the cell geometry
//! ([`inner_filter`]) computed from the sample's absorbance, measured or
//! predicted from the fitted concentrations. At low absorbance emission is
//! linear in concentration and emissions add (Lakowicz, *Principles of
//! Fluorescence Spectroscopy*, 3rd ed., ch. 1–2), so the solve is the same
//! NNLS as for absorbance ([`crate::fit::Model`]) with emission curves in
//! place of ε and a pathlength of one; residuals are in the input's
//! intensity units.

pub mod calibrate;
pub mod fit;
pub mod inner_filter;
pub mod limits;
pub mod raman;

pub use fit::{
    AbsorbanceSource, EmissionOptions, EmissionOutcome, EmissionReport, EmissionSample,
    InnerFilterResult, RamanResult, fit_emission,
};
pub use inner_filter::{Column, Cuvette, FLAG_INNER_FILTER_HIGH, Geometry};
