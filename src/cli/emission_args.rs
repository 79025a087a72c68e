//! Flags of emission (fluorescence) fits, shared by `fit` (and meant for
//! `batch`): which signal, the excitation, where the absorbance for the
//! inner-filter correction comes from, the cell geometry, the Raman term.

use super::Failure;
use super::common::parse_positive;
use crate::emission::fit::{AbsorbanceSource, EmissionOptions, MeasuredAbsorbance};
use crate::emission::{Column, Cuvette, Geometry};
use crate::input::spectra::{self, ReadOptions};
use clap::ValueEnum;
use std::path::PathBuf;

/// Emission fit flags.
#[derive(Debug, Clone, clap::Args)]
pub struct EmissionArgs {
    /// What INPUT holds: absorbance spectra, or emission spectra (intensities) at one --excitation-nm.
    #[arg(long, value_enum, default_value_t = Signal::Absorbance)]
    pub signal: Signal,
    /// Excitation wavelength of the emission spectra, nm (picks each component's emission curve).
    #[arg(long, value_parser = parse_positive, value_name = "NM")]
    pub excitation_nm: Option<f64>,
    /// Absorbance of the same samples for the inner-filter correction: a spectra CSV (matched by sample name), or `model` (predicted from the components' absorptivity curves and the fitted concentrations, iterated to agreement).
    #[arg(long, value_name = "FILE|model")]
    pub absorbance: Option<String>,
    /// Pathlength of the --absorbance FILE readings, cm.
    #[arg(long, default_value = "1", value_parser = parse_positive, value_name = "CM")]
    pub absorbance_pathlength_cm: f64,
    /// Cell and reading geometry of the emission measurement (inner-filter correction).
    #[arg(long, value_enum, default_value_t = GeometryArg::Cuvette)]
    pub geometry: GeometryArg,
    /// Cuvette side, cm (--geometry cuvette).
    #[arg(long, default_value = "1", value_parser = parse_positive, value_name = "CM")]
    pub cell_cm: f64,
    /// Width of the observed window, centred in the cuvette, along both beams, cm; 0 = the centre only, the published form (--geometry cuvette).
    #[arg(long, default_value = "0", value_name = "CM")]
    pub window_cm: f64,
    /// Height of the liquid in the well, cm (--geometry plate-top or plate-bottom).
    #[arg(long, value_parser = parse_positive, value_name = "CM")]
    pub fill_depth_cm: Option<f64>,
    /// Fit the water Raman band (3,400 cm⁻¹ below the excitation) as a free non-negative term and report its height.
    #[arg(long)]
    pub raman: bool,
}

/// `--signal` values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Signal {
    /// Absorbance spectra (the default).
    Absorbance,
    /// Emission spectra at one excitation wavelength.
    Emission,
}

/// `--geometry` values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum GeometryArg {
    /// Square cuvette read at right angles (centred window).
    Cuvette,
    /// Plate well read from the top (needs --fill-depth-cm).
    PlateTop,
    /// Plate well read from the bottom (needs --fill-depth-cm).
    PlateBottom,
    /// No correction: the absorbance is used only for the inner-filter-high flag.
    None,
}

impl EmissionArgs {
    /// Whether the run fits emission spectra.
    pub fn is_emission(&self) -> bool {
        self.signal == Signal::Emission
    }

    /// The cell geometry.
    pub fn geometry(&self) -> Result<Geometry, Failure> {
        let depth = || {
            self.fill_depth_cm.ok_or_else(|| {
                Failure::new("--geometry plate-top/plate-bottom needs --fill-depth-cm CM (the height of the liquid in the well)")
            })
        };
        Ok(match self.geometry {
            GeometryArg::None => Geometry::None,
            GeometryArg::Cuvette => Geometry::Cuvette(Cuvette::new(self.cell_cm, self.window_cm)?),
            GeometryArg::PlateTop => Geometry::PlateTop(Column::new(depth()?)?),
            GeometryArg::PlateBottom => Geometry::PlateBottom(Column::new(depth()?)?),
        })
    }

    /// The engine's options (the absorbance file, if any, is read here).
    pub fn options(&self) -> Result<EmissionOptions, Failure> {
        let excitation_nm = self.excitation_nm.ok_or_else(|| {
            Failure::new("--signal emission needs --excitation-nm NM (the excitation the spectra were measured at)")
        })?;
        let source = match self.absorbance.as_deref() {
            None => AbsorbanceSource::None,
            Some("model") => AbsorbanceSource::Model,
            Some(path) => {
                let bytes = std::fs::read(PathBuf::from(path))
                    .map_err(|e| Failure::new(format!("--absorbance {path}: {e}")))?;
                let ctx = |e: crate::Error| Failure::new(format!("--absorbance {path}: {e}"));
                let file = spectra::read(&bytes, ReadOptions::default()).map_err(ctx)?;
                for f in &file.failures {
                    eprintln!(
                        "unblend: warning: --absorbance {path}: {}: {}",
                        f.sample, f.error
                    );
                }
                AbsorbanceSource::Measured(
                    MeasuredAbsorbance::from_file(&file, self.absorbance_pathlength_cm)
                        .map_err(ctx)?,
                )
            }
        };
        Ok(EmissionOptions::new(excitation_nm, self.geometry()?, source)?.with_raman(self.raman))
    }
}
