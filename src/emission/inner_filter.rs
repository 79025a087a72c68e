//! Inner-filter correction (preprocessing for emission fits).
//!
//! In: the sample's decadic absorbance per cm at the excitation wavelength
//! (a_ex) and at each emission wavelength (a_em), and a cell [`Geometry`].
//! Out: the factor that turns the observed emission into the emission the
//! same molecules would give without the inner filter, F_corr = F_obs·factor.
//!
//! The sample absorbs the excitation beam on its way to the observed volume
//! and the emitted light on its way out. With Beer–Lambert along each path,
//! the light reaching depth x is I₀·10^(−a_ex·x), and light emitted at depth
//! y leaves with a fraction 10^(−a_em·y). For a dilute solution the emission
//! from an element is proportional to the local excitation intensity, so the
//! observed signal is the integral of the product over the observed volume,
//! and the factor is that volume over the integral:
//!
//! ```text
//! cuvette, right angle, square cell of side L, centred window of width w
//! along both beams ([x₁, x₂] = L/2 ∓ w/2):
//!   factor = g(a_ex)·g(a_em),
//!   g(a) = a·ln10·(x₂ − x₁) / (10^(−a·x₁) − 10^(−a·x₂))   (w > 0)
//!   g(a) = 10^(a·L/2)                                     (w = 0)
//!
//! L = 1 cm, w = 0:  F_corr = F_obs·10^((A_ex + A_em)/2)
//! ```
//!
//! The last line is the published correction for a centred 1 cm cuvette
//! (Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., 2006,
//! section 2.10, eq. 2.7, F_corr = F_obs·antilog[(OD_ex + OD_em)/2]; section
//! and equation number recalled from memory, check them against the book).
//! The window form is the exact integral of the same model; it tends to the
//! centred form as w → 0 (tests check both against a direct numerical
//! integration).
//!
//! Plate reads (top or bottom): excitation and emission both travel along
//! the well's depth, over a liquid column of height h read from one side:
//!
//! ```text
//!   factor = s·h·ln10 / (1 − 10^(−s·h)),   s = a_ex + a_em
//! ```
//!
//! Assumptions (both geometries): vertical (or perpendicular) parallel
//! beams; every element of the observed volume seen with equal efficiency
//! (a plate reader's focal height and aperture are ignored, so a top and a
//! bottom read give the same factor); no scattering, re-absorption of
//! emission by the same fluorophore re-emitting (secondary emission),
//! reflection at the walls or meniscus; absorbance measured on the same
//! solution. Under them the factor is exact; in practice the errors of the
//! assumptions grow with absorbance, and the correction is taken as
//! reliable up to [`CORRECTED_LIMIT_AU`] at the excitation wavelength
//! (common practice, value recalled from memory). Without a correction
//! calibration lines already bend from about [`UNCORRECTED_LIMIT_AU`]
//! (common practice, value recalled from memory).

use crate::error::{Error, Result};
use std::f64::consts::LN_10;

/// Absorbance at the excitation wavelength (over the excitation path) above
/// which even the corrected emission is not trusted: flag
/// [`FLAG_INNER_FILTER_HIGH`] and advise dilution (common practice, value
/// recalled from memory).
pub const CORRECTED_LIMIT_AU: f64 = 0.3;

/// Absorbance at the excitation wavelength above which uncorrected emission
/// is biased by more than a few per cent (10^(0.05/2) = 1.059 for a centred
/// 1 cm cuvette; FIELD: calibration lines bend from about 0.05).
pub const UNCORRECTED_LIMIT_AU: f64 = 0.05;

/// Flag: the sample absorbs too much at the excitation wavelength for the
/// (applied or absent) inner-filter correction; dilute and re-measure.
pub const FLAG_INNER_FILTER_HIGH: &str = "inner-filter-high";

/// The cell and how it is read.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Geometry {
    /// No correction (absorbance only used for the flag).
    None,
    /// Right-angle reading of a square cuvette.
    Cuvette(Cuvette),
    /// A plate well read from the top.
    PlateTop(Column),
    /// A plate well read from the bottom.
    PlateBottom(Column),
}

/// A square cuvette read at right angles through a centred window.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cuvette {
    cell_cm: f64,
    window_cm: f64,
}

/// The liquid column of a plate well.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Column {
    depth_cm: f64,
}

impl Cuvette {
    /// A cell of side `cell_cm` observed through a centred window
    /// `window_cm` wide along both beams (0: the centre only, as in the
    /// published form).
    pub fn new(cell_cm: f64, window_cm: f64) -> Result<Self> {
        if !(cell_cm.is_finite() && cell_cm > 0.0) {
            return Err(Error::Invalid(format!(
                "cuvette cell {cell_cm} cm: expected a positive number of cm"
            )));
        }
        if !(window_cm.is_finite() && (0.0..=cell_cm).contains(&window_cm)) {
            return Err(Error::Invalid(format!(
                "observed window {window_cm} cm: expected 0 to the cell size ({cell_cm} cm)"
            )));
        }
        Ok(Cuvette { cell_cm, window_cm })
    }

    /// The centred 1 cm cuvette of the published correction.
    pub fn standard() -> Self {
        Cuvette {
            cell_cm: 1.0,
            window_cm: 0.0,
        }
    }

    /// Cell side, cm.
    pub fn cell_cm(&self) -> f64 {
        self.cell_cm
    }

    /// The window along one beam, cm from the entrance face.
    fn window(&self) -> (f64, f64) {
        let mid = self.cell_cm / 2.0;
        (mid - self.window_cm / 2.0, mid + self.window_cm / 2.0)
    }
}

impl Column {
    /// A liquid column `depth_cm` high.
    pub fn new(depth_cm: f64) -> Result<Self> {
        if !(depth_cm.is_finite() && depth_cm > 0.0) {
            return Err(Error::Invalid(format!(
                "fill depth {depth_cm} cm: expected a positive number of cm"
            )));
        }
        Ok(Column { depth_cm })
    }

    /// Height of the liquid, cm.
    pub fn depth_cm(&self) -> f64 {
        self.depth_cm
    }
}

impl Geometry {
    /// F_corr/F_obs for decadic absorbances per cm `a_ex` (excitation) and
    /// `a_em` (at the emission wavelength). Negative absorbances (noise
    /// around a blank) count as zero.
    pub fn factor(&self, a_ex_per_cm: f64, a_em_per_cm: f64) -> f64 {
        let (a_ex, a_em) = (a_ex_per_cm.max(0.0), a_em_per_cm.max(0.0));
        match self {
            Geometry::None => 1.0,
            Geometry::Cuvette(c) => {
                let (x1, x2) = c.window();
                slab(a_ex, x1, x2) * slab(a_em, x1, x2)
            }
            Geometry::PlateTop(col) | Geometry::PlateBottom(col) => {
                slab(a_ex + a_em, 0.0, col.depth_cm)
            }
        }
    }

    /// The absorbance at the excitation wavelength over the excitation
    /// path (cell side or fill depth; 1 cm when uncorrected), AU: the value
    /// compared with [`Geometry::limit_au`].
    pub fn excitation_absorbance_au(&self, a_ex_per_cm: f64) -> f64 {
        match self {
            Geometry::None => a_ex_per_cm,
            Geometry::Cuvette(c) => a_ex_per_cm * c.cell_cm,
            Geometry::PlateTop(col) | Geometry::PlateBottom(col) => a_ex_per_cm * col.depth_cm,
        }
    }

    /// The excitation absorbance above which a sample is flagged.
    pub fn limit_au(&self) -> f64 {
        match self {
            Geometry::None => UNCORRECTED_LIMIT_AU,
            _ => CORRECTED_LIMIT_AU,
        }
    }

    /// Short name for reports.
    pub fn name(&self) -> &'static str {
        match self {
            Geometry::None => "none",
            Geometry::Cuvette(_) => "cuvette",
            Geometry::PlateTop(_) => "plate-top",
            Geometry::PlateBottom(_) => "plate-bottom",
        }
    }
}

/// Mean attenuation over a slab [x₁, x₂] (cm) of a medium with decadic
/// absorbance `a` per cm, inverted: (x₂ − x₁) / ∫ 10^(−a·x) dx. Its limit
/// for a thin slab (or a → 0) is 10^(a·(x₁ + x₂)/2).
fn slab(a: f64, x1: f64, x2: f64) -> f64 {
    let k = a * LN_10 * (x2 - x1);
    if k < 1e-6 {
        // Thin slab: the integral is the midpoint value to O(k²).
        return 10f64.powf(a * (x1 + x2) / 2.0);
    }
    k / (10f64.powf(-a * x1) * -(-k).exp_m1())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Midpoint-rule integral of f over [lo, hi] with n steps.
    fn integrate(f: impl Fn(f64) -> f64, lo: f64, hi: f64, n: usize) -> f64 {
        let h = (hi - lo) / n as f64;
        (0..n).map(|i| f(lo + (i as f64 + 0.5) * h)).sum::<f64>() * h
    }

    /// Midpoint rule with 20,000 steps: relative error below 1e-8 for these
    /// smooth exponentials.
    const QUADRATURE_TOL: f64 = 1e-7;

    #[test]
    fn centred_cuvette_is_the_published_form() {
        // Lakowicz, 3rd ed., eq. 2.7: F_corr = F_obs·10^((OD_ex + OD_em)/2).
        let g = Geometry::Cuvette(Cuvette::standard());
        for (ex, em) in [(0.0, 0.0), (0.1, 0.02), (0.3, 0.15), (1.0, 0.5)] {
            let want = 10f64.powf((ex + em) / 2.0);
            assert!((g.factor(ex, em) / want - 1.0).abs() < 1e-14, "{ex} {em}");
        }
    }

    #[test]
    fn cuvette_window_matches_numerical_beer_lambert_integration() {
        // Direct integration of I₀·10^(−a_ex·x)·10^(−a_em·y) over the
        // observed square [x₁, x₂]², divided into its area.
        let c = Cuvette::new(1.0, 0.4).unwrap();
        let g = Geometry::Cuvette(c);
        for (ex, em) in [(0.05, 0.01), (0.2, 0.1), (0.3, 0.3), (2.0, 0.7)] {
            let (x1, x2) = (0.3, 0.7);
            let along = |a: f64| integrate(|x| 10f64.powf(-a * x), x1, x2, 20_000);
            let want = (x2 - x1) * (x2 - x1) / (along(ex) * along(em));
            assert!((g.factor(ex, em) / want - 1.0).abs() < QUADRATURE_TOL);
        }
    }

    #[test]
    fn thin_window_tends_to_the_centred_form() {
        let thin = Geometry::Cuvette(Cuvette::new(1.0, 1e-4).unwrap());
        let point = Geometry::Cuvette(Cuvette::standard());
        assert!((thin.factor(0.3, 0.1) / point.factor(0.3, 0.1) - 1.0).abs() < 1e-8);
    }

    #[test]
    fn plate_column_matches_numerical_integration() {
        // Both beams along the depth z ∈ [0, h]: signal ∝ ∫ 10^(−(a_ex+a_em)·z) dz.
        let h = 0.6;
        let g = Geometry::PlateTop(Column::new(h).unwrap());
        for (ex, em) in [(0.01, 0.0), (0.2, 0.05), (0.5, 0.5)] {
            let want = h / integrate(|z| 10f64.powf(-(ex + em) * z), 0.0, h, 20_000);
            assert!((g.factor(ex, em) / want - 1.0).abs() < QUADRATURE_TOL);
        }
        let bottom = Geometry::PlateBottom(Column::new(h).unwrap());
        assert!((bottom.factor(0.2, 0.05) - g.factor(0.2, 0.05)).abs() < 1e-15);
    }

    #[test]
    fn no_absorbance_means_no_correction() {
        for g in [
            Geometry::None,
            Geometry::Cuvette(Cuvette::new(0.5, 0.2).unwrap()),
            Geometry::PlateTop(Column::new(0.3).unwrap()),
        ] {
            assert!((g.factor(0.0, 0.0) - 1.0).abs() < 1e-15);
            assert!((g.factor(-0.01, -0.02) - 1.0).abs() < 1e-15);
        }
    }

    #[test]
    fn bad_cells_are_rejected() {
        assert!(Cuvette::new(0.0, 0.0).is_err());
        assert!(Cuvette::new(1.0, 1.5).is_err());
        assert!(Column::new(f64::NAN).is_err());
    }

    #[test]
    fn limits_depend_on_whether_a_correction_is_applied() {
        assert!(Geometry::None.limit_au() < Geometry::Cuvette(Cuvette::standard()).limit_au());
        let plate = Geometry::PlateTop(Column::new(0.5).unwrap());
        assert!((plate.excitation_absorbance_au(0.4) - 0.2).abs() < 1e-15);
    }
}
