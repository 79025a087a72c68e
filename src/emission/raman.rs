//! The water Raman band (background for emission fits).
//!
//! In: the excitation wavelength and the emission grid. Out: the band's
//! position and a unit-height shape to fit as a free non-negative term.
//!
//! Raman scattering by the solvent appears at a fixed wavenumber shift Δν̃
//! below the excitation, so its wavelength follows the excitation:
//!
//! ```text
//! λ_R = 1 / (1/λ_ex − Δν̃)        (λ in cm, Δν̃ in cm⁻¹)
//! ```
//!
//! For water the O–H stretch gives Δν̃ ≈ 3,400 cm⁻¹ (common practice, value
//! recalled from memory). The band is modelled as a Gaussian in wavenumber
//! of full width at half maximum [`WATER_RAMAN_FWHM_PER_CM`]; its fitted
//! amplitude is the band's height in the input's intensity units.

/// Wavenumber shift of the water Raman band (O–H stretch), cm⁻¹ (common
/// practice, value recalled from memory).
pub const WATER_RAMAN_SHIFT_PER_CM: f64 = 3400.0;

/// Full width at half maximum of the modelled band, cm⁻¹ (the O–H stretch
/// band of liquid water is a few hundred cm⁻¹ wide; value recalled from
/// memory, a shape for fitting, not a certified width).
pub const WATER_RAMAN_FWHM_PER_CM: f64 = 400.0;

/// Name of the Raman term in results.
pub const RAMAN_NAME: &str = "water-raman";

/// Wavelength of the Raman band, nm, for excitation at `excitation_nm`;
/// `None` when the shift reaches past zero wavenumber.
pub fn band_nm(excitation_nm: f64, shift_per_cm: f64) -> Option<f64> {
    let excitation_per_cm = 1e7 / excitation_nm;
    let band_per_cm = excitation_per_cm - shift_per_cm;
    (band_per_cm > 0.0).then(|| 1e7 / band_per_cm)
}

/// The band's unit-height shape on `wavelengths_nm`: a Gaussian in
/// wavenumber centred on the shifted line. `None` as for [`band_nm`].
pub fn shape(wavelengths_nm: &[f64], excitation_nm: f64) -> Option<Vec<f64>> {
    let centre_per_cm = 1e7 / band_nm(excitation_nm, WATER_RAMAN_SHIFT_PER_CM)?;
    let sigma_per_cm = WATER_RAMAN_FWHM_PER_CM / (8.0 * std::f64::consts::LN_2).sqrt();
    Some(
        wavelengths_nm
            .iter()
            .map(|&w| {
                let z = (1e7 / w - centre_per_cm) / sigma_per_cm;
                (-0.5 * z * z).exp()
            })
            .collect(),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_sits_at_the_fixed_shift_for_two_excitations() {
        // 350 nm: 28,571.4 − 3,400 = 25,171.4 cm⁻¹ → 397.3 nm; 280 nm:
        // 35,714.3 − 3,400 = 32,314.3 cm⁻¹ → 309.5 nm (hand arithmetic).
        let at350 = band_nm(350.0, WATER_RAMAN_SHIFT_PER_CM).unwrap();
        let at280 = band_nm(280.0, WATER_RAMAN_SHIFT_PER_CM).unwrap();
        assert!((at350 - 397.28).abs() < 0.01, "{at350}");
        assert!((at280 - 309.46).abs() < 0.01, "{at280}");
        for (ex, band) in [(350.0, at350), (280.0, at280)] {
            let shift = 1e7 / ex - 1e7 / band;
            assert!((shift - WATER_RAMAN_SHIFT_PER_CM).abs() < 1e-9);
        }
    }

    #[test]
    fn shape_peaks_at_the_band_with_unit_height() {
        let w: Vec<f64> = (3600..4400).map(|i| i as f64 / 10.0).collect();
        let s = shape(&w, 350.0).unwrap();
        let (i, top) = s
            .iter()
            .enumerate()
            .fold((0, 0.0), |m, (i, &v)| if v > m.1 { (i, v) } else { m });
        assert!((w[i] - 397.3).abs() < 0.1, "{}", w[i]);
        assert!(top > 0.999 && top <= 1.0);
    }

    #[test]
    fn impossible_shift_gives_none() {
        assert!(band_nm(5000.0, WATER_RAMAN_SHIFT_PER_CM).is_none());
    }
}
