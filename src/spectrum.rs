//! Spectra model (stage 2): validated wavelength grids and absorbance spectra.
//!
//! In: wavelengths and values from a parser. Out: [`Grid`] and [`Spectrum`]
//! values that later stages can rely on: wavelengths finite, strictly
//! ascending and unique; absorbances finite and as many as wavelengths.

use crate::error::{Error, Result};
use std::sync::Arc;

/// A strictly ascending, finite, duplicate-free list of wavelengths in nm.
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    wavelengths_nm: Vec<f64>,
}

impl Grid {
    /// Validate a wavelength list. It must hold at least one value, every
    /// one inside the plausible range ([`crate::ranges::WAVELENGTH_NM`]), and
    /// be strictly ascending.
    pub fn new(wavelengths_nm: Vec<f64>) -> Result<Self> {
        if wavelengths_nm.is_empty() {
            return Err(Error::Invalid("no wavelengths given".into()));
        }
        for (i, &w) in wavelengths_nm.iter().enumerate() {
            if !w.is_finite() || w <= 0.0 {
                return Err(Error::BadWavelength {
                    position: i + 1,
                    value: w,
                });
            }
            crate::ranges::WAVELENGTH_NM.check(w)?;
        }
        for (i, pair) in wavelengths_nm.windows(2).enumerate() {
            if pair[1] <= pair[0] {
                return Err(Error::WavelengthOrder {
                    position: i + 2,
                    value_nm: pair[1],
                    previous_nm: pair[0],
                    repeated: (pair[1] - pair[0]).abs() < f64::EPSILON * pair[0].abs(),
                });
            }
        }
        Ok(Grid { wavelengths_nm })
    }

    /// The wavelengths in nm, strictly ascending.
    pub fn wavelengths_nm(&self) -> &[f64] {
        &self.wavelengths_nm
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.wavelengths_nm.len()
    }

    /// Always false: a grid has at least one point.
    pub fn is_empty(&self) -> bool {
        false
    }

    /// Lowest wavelength in nm.
    pub fn min_nm(&self) -> f64 {
        self.wavelengths_nm[0]
    }

    /// Highest wavelength in nm.
    pub fn max_nm(&self) -> f64 {
        self.wavelengths_nm[self.wavelengths_nm.len() - 1]
    }
}

/// Put a monotonic wavelength list into ascending order.
///
/// Instruments often export from long to short wavelength; a strictly
/// descending list is accepted and reversed. Returns the ascending list and
/// whether it was reversed (so values can be reversed the same way). Lists
/// that are neither ascending nor descending are left for [`Grid::new`] to
/// reject with a message naming the first offending value.
pub fn ascending(mut wavelengths_nm: Vec<f64>) -> (Vec<f64>, bool) {
    let descending = wavelengths_nm.len() > 1 && wavelengths_nm.windows(2).all(|p| p[1] < p[0]);
    if descending {
        wavelengths_nm.reverse();
    }
    (wavelengths_nm, descending)
}

/// One measured absorbance spectrum of one sample.
#[derive(Debug, Clone)]
pub struct Spectrum {
    id: String,
    grid: Arc<Grid>,
    absorbance_au: Vec<f64>,
}

impl Spectrum {
    /// Validate a spectrum: as many absorbances as grid points, all finite.
    pub fn new(id: impl Into<String>, grid: Arc<Grid>, absorbance_au: Vec<f64>) -> Result<Self> {
        let id = id.into();
        if absorbance_au.len() != grid.len() {
            return Err(Error::LengthMismatch {
                sample: id,
                values: absorbance_au.len(),
                wavelengths: grid.len(),
            });
        }
        if let Some(i) = absorbance_au.iter().position(|a| !a.is_finite()) {
            return Err(Error::NotFinite {
                sample: id,
                wavelength_nm: grid.wavelengths_nm()[i],
            });
        }
        Ok(Spectrum {
            id,
            grid,
            absorbance_au,
        })
    }

    /// The sample identifier.
    pub fn id(&self) -> &str {
        &self.id
    }

    /// The wavelength grid.
    pub fn grid(&self) -> &Arc<Grid> {
        &self.grid
    }

    /// Absorbance values in AU, one per grid point.
    pub fn absorbance_au(&self) -> &[f64] {
        &self.absorbance_au
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn duplicate_wavelength_is_rejected() {
        let e = Grid::new(vec![400.0, 401.0, 401.0]).unwrap_err();
        assert!(e.to_string().contains("appears twice"), "{e}");
    }

    #[test]
    fn unordered_wavelength_is_rejected() {
        let e = Grid::new(vec![400.0, 402.0, 401.0]).unwrap_err();
        assert!(e.to_string().contains("out of order"), "{e}");
    }

    #[test]
    fn descending_list_is_reversed() {
        let (w, rev) = ascending(vec![700.0, 600.0, 500.0]);
        assert!(rev);
        assert_eq!(w, vec![500.0, 600.0, 700.0]);
        let (_, rev) = ascending(vec![500.0, 700.0, 600.0]);
        assert!(!rev);
    }

    #[test]
    fn non_finite_absorbance_is_rejected() {
        let g = Arc::new(Grid::new(vec![400.0, 500.0]).unwrap());
        assert!(Spectrum::new("s", g.clone(), vec![0.1, f64::NAN]).is_err());
        assert!(Spectrum::new("s", g.clone(), vec![0.1]).is_err());
        assert!(Spectrum::new("s", g, vec![0.1, 0.2]).is_ok());
    }

    #[test]
    fn wavelengths_outside_the_plausible_range_are_rejected() {
        // 1e308 nm was accepted before the range check (issue 19).
        let e = Grid::new(vec![400.0, 1e308]).unwrap_err().to_string();
        assert!(
            e.starts_with("wavelength 1e308 nm: expected 100 to 25,000 nm"),
            "{e}"
        );
        assert!(Grid::new(vec![50.0, 400.0]).is_err());
        assert!(Grid::new(vec![100.0, 25_000.0]).is_ok());
    }
}
