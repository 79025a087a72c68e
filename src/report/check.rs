//! Checks on a results file before `unblend report` draws it (output
//! stage): a results file may have been edited, cut short or made by hand,
//! and the drawing code relies on what `fit` and `batch` always write.
//!
//! In: a parsed fit results document or a batch's plates. Out: nothing, or
//! an error that says which sample, plate or well and what is wrong:
//! curves whose lengths disagree, wavelengths out of order or outside the
//! plausible range, numbers too large to draw, a plate format this program
//! does not write, a well name that is not on the plate.

use crate::batch::PlateResult;
use crate::curves::Curves;
use crate::error::{Error, Result};
use crate::input::plate::Well;
use crate::output::JsonReport;

/// The largest magnitude a drawn value may have, in its unit (AU for the
/// curves): far beyond any reading, small enough that differences and
/// scales stay finite in the figures' arithmetic.
const MAX_DRAWN: f64 = 1e6;

/// Check a fit results document: every sample's curves.
pub fn results(doc: &JsonReport) -> Result<()> {
    for (i, c) in doc.curves.iter().flatten().enumerate() {
        curves(c).map_err(|e| {
            Error::Invalid(format!(
                "curves entry {} (sample '{}'): {e}",
                i + 1,
                c.sample
            ))
        })?;
    }
    Ok(())
}

/// Check a batch's plates: formats, well names on the plate, curves.
pub fn plates(plates: &[PlateResult]) -> Result<()> {
    for (i, p) in plates.iter().enumerate() {
        let at = |e: String| Error::Invalid(format!("plate {} ('{}'): {e}", i + 1, p.plate));
        let (rows, cols) = match p.format.as_deref() {
            None => (16, 24),
            Some("96-well") => (8, 12),
            Some("384-well") => (16, 24),
            Some(other) => {
                return Err(at(format!(
                    "format '{other}': expected 96-well or 384-well"
                )));
            }
        };
        for w in &p.wells {
            match Well::parse(&w.well) {
                Some(k) if k.row < rows && k.col < cols => {}
                // A well read from a wide or long file may carry a label
                // that is not a well; only a well off the plate is wrong.
                Some(_) => {
                    return Err(at(format!(
                        "well '{}' is not on a {} plate",
                        w.well,
                        p.format.as_deref().unwrap_or("384-well")
                    )));
                }
                None => {}
            }
            if let Some(c) = &w.curves {
                curves(c).map_err(|e| at(format!("well '{}': {e}", w.well)))?;
            }
        }
    }
    Ok(())
}

/// Check one sample's curves: equal lengths, ascending plausible
/// wavelengths, drawable numbers.
pub fn curves(c: &Curves) -> std::result::Result<(), String> {
    let n = c.wavelengths_nm.len();
    if n < 2 {
        return Err(format!(
            "{n} wavelength(s): expected at least 2 to draw a curve"
        ));
    }
    let mut series: Vec<(&str, &[f64])> = vec![
        ("measured_au", &c.measured_au),
        ("fitted_au", &c.fitted_au),
        ("baseline_au", &c.baseline_au),
        ("residual_au", &c.residual_au),
    ];
    for k in &c.contributions_au {
        series.push((k.name.as_str(), &k.au));
    }
    for (name, values) in &series {
        if values.len() != n {
            return Err(format!(
                "{name} has {} values for {n} wavelengths",
                values.len()
            ));
        }
        if let Some(v) = values
            .iter()
            .find(|v| !(-MAX_DRAWN..=MAX_DRAWN).contains(*v))
        {
            return Err(format!(
                "{name} holds {}: expected a finite absorbance within ±1e6 AU",
                crate::ranges::shown(v)
            ));
        }
    }
    if c.masked.len() != n {
        return Err(format!(
            "masked has {} values for {n} wavelengths",
            c.masked.len()
        ));
    }
    for w in &c.wavelengths_nm {
        crate::ranges::WAVELENGTH_NM
            .check(*w)
            .map_err(|e| e.to_string())?;
    }
    if let Some(p) = c.wavelengths_nm.windows(2).position(|p| p[1] <= p[0]) {
        return Err(format!(
            "wavelength {} nm after {} nm: expected strictly ascending wavelengths",
            c.wavelengths_nm[p + 1],
            c.wavelengths_nm[p]
        ));
    }
    match c.noise_au {
        Some(s) if !(0.0..=MAX_DRAWN).contains(&s) => Err(format!(
            "noise_au {s}: expected a finite noise of 0 AU or more"
        )),
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::curves::ComponentCurve;

    fn good() -> Curves {
        Curves {
            sample: "s1".into(),
            wavelengths_nm: vec![400.0, 500.0, 600.0],
            measured_au: vec![0.1, 0.2, 0.1],
            fitted_au: vec![0.1, 0.2, 0.1],
            baseline_au: vec![0.0; 3],
            contributions_au: vec![ComponentCurve {
                name: "red".into(),
                au: vec![0.1, 0.2, 0.1],
            }],
            residual_au: vec![0.0; 3],
            noise_au: Some(0.001),
            masked: vec![false; 3],
        }
    }

    #[test]
    fn curves_as_fit_writes_them_pass() {
        curves(&good()).unwrap();
    }

    #[test]
    fn curves_of_unequal_length_are_refused_with_the_series() {
        // The hardening campaign's case: report panicked (index out of
        // bounds in the SVG code) on a residual shorter than the wavelengths.
        let mut c = good();
        c.residual_au.pop();
        assert_eq!(
            curves(&c).unwrap_err(),
            "residual_au has 2 values for 3 wavelengths"
        );
        let mut c = good();
        c.contributions_au[0].au.push(0.0);
        assert_eq!(
            curves(&c).unwrap_err(),
            "red has 4 values for 3 wavelengths"
        );
        let mut c = good();
        c.masked.clear();
        assert!(curves(&c).unwrap_err().starts_with("masked has 0 values"));
    }

    #[test]
    fn undrawable_numbers_and_disordered_wavelengths_are_refused() {
        let mut c = good();
        c.measured_au[1] = 1e300;
        assert!(
            curves(&c)
                .unwrap_err()
                .starts_with("measured_au holds 1e300")
        );
        let mut c = good();
        c.wavelengths_nm.swap(0, 1);
        assert!(curves(&c).unwrap_err().contains("strictly ascending"));
        let mut c = good();
        c.wavelengths_nm[2] = 1e9;
        assert!(curves(&c).unwrap_err().starts_with("wavelength 1e9 nm"));
        let mut c = good();
        c.noise_au = Some(-1.0);
        assert!(curves(&c).unwrap_err().starts_with("noise_au -1"));
    }

    #[test]
    fn unknown_formats_and_wells_off_the_plate_are_located() {
        let mut p = PlateResult::failed("P1", "in.csv", "x".into());
        p.error = None;
        p.format = Some("1536-well".into());
        let e = plates(&[p.clone()]).unwrap_err().to_string();
        assert_eq!(
            e,
            "plate 1 ('P1'): format '1536-well': expected 96-well or 384-well"
        );
        p.format = Some("96-well".into());
        let json = serde_json::json!({"well": "H13", "role": "sample", "sample": "x", "dilution_factor": 1.0, "flags": []});
        p.wells.push(serde_json::from_value(json).unwrap());
        let e = plates(&[p]).unwrap_err().to_string();
        assert_eq!(e, "plate 1 ('P1'): well 'H13' is not on a 96-well plate");
    }
}
