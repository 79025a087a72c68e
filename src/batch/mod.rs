//! Plate batches (preprocessing and diagnostics for plates): from the
//! spectra of one plate and its plate map to per-well and per-sample
//! results.
//!
//! In: a [`PlateSpectra`], the plate's map entries, a [`Models`] cache of
//! fitted designs and [`BatchOptions`]. Out: a [`PlateResult`].
//!
//! For each plate:
//!
//! 1. **Blank**: the blank wells' spectra are averaged point by point,
//!    A_blank(λ) = mean over blank wells, and subtracted from every other
//!    well. A blank well whose mean absorbance over the fitted range is an
//!    outlier among the blanks (Grubbs' test, see [`stats`]) is named and
//!    left out of the average. A blank with a saturated reading is not used.
//! 2. **Pathlength** per well, in this order: the map's `pathlength_cm`;
//!    else, with the water-band method, l = (A(977 nm) − A(900 nm)) / k
//!    from the well's own reading before blank subtraction (the plate's own
//!    absorbance is nearly flat between the two and cancels), with k the
//!    difference for a 1 cm water path, 0.18 AU/cm at room temperature by
//!    default (common practice, value recalled from memory; it depends on
//!    temperature, so it is an option); else `--pathlength-cm`.
//! 3. **Fit** of the blank-corrected spectrum with the engine,
//!    A(λ) − A_blank(λ) = l·Σ εᵢ(λ)·cᵢ + baseline(λ). Saturated readings
//!    (overflow markers in the input) are left out of the fit and the well
//!    is flagged [`FLAG_SATURATED`].
//! 4. **Dilution**: the concentration in the specimen is cᵢ × dilution.
//! 5. **Replicates**: wells of the plate with the same role and sample name
//!    are replicates. Per component, Grubbs' test (two-sided, α =
//!    [`BatchOptions::outlier_alpha`]) looks for one well that disagrees
//!    with the rest; it is flagged [`FLAG_REPLICATE_OUTLIER`] only when it
//!    also differs from the mean of the others by more than
//!    [`OUTLIER_MIN_STD_ERRORS`] of its own standard errors (so that values
//!    at zero, or a spread far below the fit's own uncertainty, raise no
//!    flag). A flagged well is left out of that sample's statistics for
//!    every component unless [`BatchOptions::keep_outliers`]. Mean, SD and
//!    CV% are of the specimen's (undiluted) concentrations.

mod blank;
mod models;
mod plate;
mod replicates;
pub mod run;
pub mod stats;

use crate::curves::Curves;
use crate::fit::{FitOptions, SampleResult};
use crate::input::platemap::{MapEntry, Role};
use serde::{Deserialize, Serialize};

/// Flag: some readings of the well were overflow markers (saturated); they
/// were left out of the fit. Dilute and re-measure.
pub const FLAG_SATURATED: &str = "saturated-reading";
/// Flag: the well disagrees with its replicates (Grubbs' test).
pub const FLAG_REPLICATE_OUTLIER: &str = "replicate-outlier";
/// Flag: the blank well is an outlier among the plate's blanks.
pub const FLAG_BLANK_OUTLIER: &str = "blank-outlier";

/// Water band peak used for the pathlength, nm (common practice).
pub const WATER_PEAK_NM: f64 = 977.0;
/// Water band reference wavelength, nm (common practice).
pub const WATER_REFERENCE_NM: f64 = 900.0;
/// A(977) − A(900) of a 1 cm water path at room temperature, AU/cm
/// (common practice, value recalled from memory; temperature dependent).
pub const WATER_AU_PER_CM: f64 = 0.18;
/// How far the nearest reading may be from the water band wavelengths, nm.
pub const WATER_TOLERANCE_NM: f64 = 2.0;
/// A replicate flagged by Grubbs' test must also differ from the mean of
/// the others by more than this many of its own standard errors.
pub const OUTLIER_MIN_STD_ERRORS: f64 = 3.0;
/// Default significance level of the outlier tests (common practice).
pub const OUTLIER_ALPHA: f64 = 0.05;

/// The near-infrared water band method for pathlengths.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct WaterBand {
    /// Peak of the water band, nm.
    pub peak_nm: f64,
    /// Reference wavelength off the band, nm.
    pub reference_nm: f64,
    /// A(peak) − A(reference) for 1 cm of water, AU/cm.
    pub au_per_cm: f64,
}

impl Default for WaterBand {
    fn default() -> Self {
        WaterBand {
            peak_nm: WATER_PEAK_NM,
            reference_nm: WATER_REFERENCE_NM,
            au_per_cm: WATER_AU_PER_CM,
        }
    }
}

/// Options of a batch.
#[derive(Debug, Clone, Copy)]
pub struct BatchOptions {
    /// The fit options (components' range, baseline, default pathlength).
    pub fit: FitOptions,
    /// Pathlengths from the water band (when the map gives none).
    pub water: Option<WaterBand>,
    /// Significance level of the outlier tests (replicates, blanks).
    pub outlier_alpha: f64,
    /// Keep outlier wells in the statistics (they are still flagged).
    pub keep_outliers: bool,
    /// Keep each fitted well's curves (measured, fitted, contributions,
    /// residual) for the report and `--with-curves`.
    pub curves: bool,
}

impl Default for BatchOptions {
    fn default() -> Self {
        BatchOptions {
            fit: FitOptions::default(),
            water: None,
            outlier_alpha: OUTLIER_ALPHA,
            keep_outliers: false,
            curves: false,
        }
    }
}

/// Where a well's pathlength came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PathlengthSource {
    /// The plate map.
    Map,
    /// The near-infrared water band.
    WaterBand,
    /// The `--pathlength-cm` option.
    Option,
}

impl PathlengthSource {
    /// Name used in outputs.
    pub fn name(self) -> &'static str {
        match self {
            PathlengthSource::Map => "map",
            PathlengthSource::WaterBand => "water-band",
            PathlengthSource::Option => "option",
        }
    }
}

/// A component's concentration in the specimen (dilution applied).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Undiluted {
    /// Component name.
    pub name: String,
    /// Concentration in the specimen, mol/L.
    pub concentration_mol_per_l: f64,
    /// Its standard error, mol/L (`None` when the fit has no noise
    /// estimate).
    pub std_error_mol_per_l: Option<f64>,
    /// Concentration in the specimen, mg/L (molar mass known).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub concentration_mg_per_l: Option<f64>,
    /// Its standard error, mg/L.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub std_error_mg_per_l: Option<f64>,
}

/// The result for one well.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct WellResult {
    /// Well, e.g. `B3`.
    pub well: String,
    /// What the well holds.
    pub role: Role,
    /// Specimen name.
    pub sample: String,
    /// Dilution factor applied.
    pub dilution_factor: f64,
    /// Pathlength used, cm.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pathlength_cm: Option<f64>,
    /// Where the pathlength came from.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pathlength_source: Option<PathlengthSource>,
    /// A(977) − A(900) of the well, AU (water-band method).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub water_band_au: Option<f64>,
    /// Blank wells: mean absorbance over the fitted range, AU.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub blank_mean_au: Option<f64>,
    /// The fit (concentrations in the well, mol/L).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fit: Option<SampleResult>,
    /// Concentrations in the specimen (dilution applied).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub undiluted: Vec<Undiluted>,
    /// Batch flags (the fit's own flags are in `fit.flags`).
    pub flags: Vec<String>,
    /// Explanations of the flags.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
    /// Why the well could not be used.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
    /// The fit's curves (with [`BatchOptions::curves`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub curves: Option<Curves>,
}

impl WellResult {
    fn new(well: &str, entry: &MapEntry) -> Self {
        WellResult {
            well: well.to_string(),
            role: entry.role,
            sample: entry.sample.clone(),
            dilution_factor: entry.dilution,
            pathlength_cm: None,
            pathlength_source: None,
            water_band_au: None,
            blank_mean_au: None,
            fit: None,
            undiluted: Vec::new(),
            flags: Vec::new(),
            notes: Vec::new(),
            error: None,
            curves: None,
        }
    }

    /// Every flag: the fit's, then the batch's.
    pub fn all_flags(&self) -> Vec<&str> {
        let mut v: Vec<&str> = self
            .fit
            .as_ref()
            .map(|f| f.flags.iter().map(String::as_str).collect())
            .unwrap_or_default();
        v.extend(self.flags.iter().map(String::as_str));
        v
    }
}

/// The blank of one plate.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct BlankSummary {
    /// Blank wells read.
    pub wells: Vec<String>,
    /// Blank wells averaged and subtracted.
    pub used: Vec<String>,
    /// Blank wells left out as outliers.
    pub outliers: Vec<String>,
    /// Mean of the subtracted blank over the fitted range, AU.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mean_au: Option<f64>,
    /// Spread of the used blank wells: SD of their mean absorbances, AU.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub well_sd_au: Option<f64>,
    /// Largest SD across the used blank wells at one wavelength, AU.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub max_point_sd_au: Option<f64>,
}

/// One component's statistics over a sample's replicate wells.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ComponentStats {
    /// Component name.
    pub name: String,
    /// Mean concentration in the specimen, mol/L.
    pub mean_mol_per_l: f64,
    /// Sample standard deviation, mol/L (two or more wells).
    pub sd_mol_per_l: Option<f64>,
    /// Coefficient of variation, % (positive mean).
    pub cv_percent: Option<f64>,
    /// Wells in the statistics.
    pub n_wells: usize,
    /// Mean, mg/L (molar mass known).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mean_mg_per_l: Option<f64>,
    /// SD, mg/L (molar mass known).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sd_mg_per_l: Option<f64>,
    /// Wells this component's test found to disagree.
    pub outlier_wells: Vec<String>,
}

/// A specimen's results over its replicate wells on one plate.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SampleSummary {
    /// Specimen name.
    pub sample: String,
    /// Role of its wells (sample or standard).
    pub role: Role,
    /// Fitted wells.
    pub wells: Vec<String>,
    /// Wells flagged as disagreeing with the rest.
    pub outlier_wells: Vec<String>,
    /// Whether the flagged wells were kept in the statistics.
    pub outliers_kept: bool,
    /// Per-component statistics, in component order.
    pub components: Vec<ComponentStats>,
}

/// Everything about one plate.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct PlateResult {
    /// Plate name.
    pub plate: String,
    /// The input file it came from.
    pub input: String,
    /// `96-well` or `384-well`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub format: Option<String>,
    /// Wavelengths read per well.
    pub n_wavelengths: usize,
    /// Whether the plate map had entries for this plate.
    pub mapped: bool,
    /// The blank.
    pub blank: BlankSummary,
    /// Wells in input order (empty and unmapped wells left out).
    pub wells: Vec<WellResult>,
    /// Replicate statistics, in order of first appearance.
    pub samples: Vec<SampleSummary>,
    /// Warnings about this plate.
    pub warnings: Vec<String>,
    /// Why the plate could not be read at all.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
}

impl PlateResult {
    /// A plate that could not be read.
    pub fn failed(plate: &str, input: &str, error: String) -> Self {
        PlateResult {
            plate: plate.to_string(),
            input: input.to_string(),
            format: None,
            n_wavelengths: 0,
            mapped: false,
            blank: BlankSummary::default(),
            wells: Vec::new(),
            samples: Vec::new(),
            warnings: Vec::new(),
            error: Some(error),
        }
    }

    /// Wells that were fitted.
    pub fn n_fitted(&self) -> usize {
        self.wells.iter().filter(|w| w.fit.is_some()).count()
    }

    /// Wells that could not be used.
    pub fn n_failed(&self) -> usize {
        self.wells.iter().filter(|w| w.error.is_some()).count()
    }
}

pub use models::Models;
pub use plate::process_plate;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::input::plate::{PlateFormat, PlateSpectra, Well};
    use crate::reference::{Component, ReferenceSet};
    use crate::spectrum::Grid;
    use std::collections::HashMap;
    use std::sync::Arc;

    /// A smooth invented band (Gaussian), ε in L/(mol·cm).
    fn band(name: &str, centre_nm: f64, peak: f64) -> Component {
        let w: Vec<f64> = (300..=1000).map(f64::from).collect();
        let e = w
            .iter()
            .map(|x| peak * (-((x - centre_nm) / 40.0).powi(2)).exp())
            .collect();
        Component::from_curve(name, w, e, "imported").unwrap()
    }

    fn refs() -> ReferenceSet {
        ReferenceSet {
            components: vec![band("a", 450.0, 20_000.0), band("b", 600.0, 15_000.0)],
        }
    }

    /// Wavelengths 400–700 nm every 5 nm, then the two water band points.
    fn grid() -> Vec<f64> {
        let mut g: Vec<f64> = (0..61).map(|i| 400.0 + 5.0 * i as f64).collect();
        g.extend([900.0, 977.0]);
        g
    }

    /// A(λ) = l·Σ εc + l·water(λ) + plate offset: no noise. Water:
    /// A(977) − A(900) = 0.18 AU per cm (the default constant).
    fn well(refs: &ReferenceSet, c: [f64; 2], l_cm: f64) -> Vec<f64> {
        grid()
            .iter()
            .map(|&nm| {
                let water = if nm > 950.0 {
                    0.21
                } else if nm > 800.0 {
                    0.03
                } else {
                    0.0
                };
                let s: f64 = refs
                    .components
                    .iter()
                    .zip(c)
                    .map(|(k, c)| k.epsilon_at(nm).unwrap() * c)
                    .sum();
                0.045 + l_cm * (s + water)
            })
            .collect()
    }

    fn plate(rows: Vec<Vec<f64>>, wells: &[&str]) -> PlateSpectra {
        let g = Arc::new(Grid::new(grid()).unwrap());
        PlateSpectra {
            name: "t".into(),
            format: PlateFormat::Wells96,
            grid: Some(g),
            wells: wells.iter().map(|w| Well::parse(w).unwrap()).collect(),
            absorbance_au: rows.concat(),
            failures: Vec::new(),
        }
    }

    fn entry(role: Role, sample: &str) -> MapEntry {
        MapEntry {
            role,
            sample: sample.into(),
            dilution: 1.0,
            pathlength_cm: None,
            line: 0,
        }
    }

    fn map(entries: &[(&str, MapEntry)]) -> HashMap<Well, MapEntry> {
        entries
            .iter()
            .map(|(w, e)| (Well::parse(w).unwrap(), e.clone()))
            .collect()
    }

    /// Noise-free data come back to rounding.
    const EXACT_REL: f64 = 1e-8;

    #[test]
    fn water_band_returns_the_pathlength_it_was_made_with() {
        let refs = refs();
        let c = [5e-6, 3e-6];
        let paths = [0.31, 0.47, 0.62];
        let mut rows = vec![well(&refs, [0.0, 0.0], 0.5)];
        rows.extend(paths.iter().map(|&l| well(&refs, c, l)));
        let p = plate(rows, &["A1", "A2", "A3", "A4"]);
        let m = map(&[
            ("A1", entry(Role::Blank, "")),
            ("A2", entry(Role::Sample, "x")),
            ("A3", entry(Role::Sample, "x")),
            ("A4", entry(Role::Sample, "x")),
        ]);
        let options = BatchOptions {
            water: Some(WaterBand::default()),
            fit: FitOptions {
                window_nm: Some((400.0, 700.0)),
                ..FitOptions::default()
            },
            ..BatchOptions::default()
        };
        let models = Models::new(&refs, options.fit, crate::diagnostics::Options::off());
        let r = process_plate(p, "test", Some(&m), &models, &options);
        assert!(r.warnings.is_empty(), "{:?}", r.warnings);
        for (w, want) in r.wells[1..].iter().zip(paths) {
            assert_eq!(w.pathlength_source, Some(PathlengthSource::WaterBand));
            let got = w.pathlength_cm.unwrap();
            assert!(((got - want) / want).abs() < EXACT_REL, "{got} vs {want}");
            // The blank (0.5 cm of water) is subtracted only over the fit
            // range, where water does not absorb: concentrations exact.
            let fit = w.fit.as_ref().unwrap();
            for (k, want_c) in c.iter().enumerate() {
                let got_c = fit.components[k].concentration_mol_per_l;
                assert!(
                    ((got_c - want_c) / want_c).abs() < 1e-6,
                    "{got_c} vs {want_c}"
                );
            }
        }
    }

    #[test]
    fn map_pathlength_wins_and_missing_water_points_fail_only_those_wells() {
        let refs = refs();
        let mut g = grid();
        g.truncate(61); // no near-infrared points
        let rows: Vec<Vec<f64>> = [0.5, 0.8]
            .iter()
            .map(|&l| {
                let mut w = well(&refs, [4e-6, 2e-6], l);
                w.truncate(61);
                w
            })
            .collect();
        let p = PlateSpectra {
            name: "t".into(),
            format: PlateFormat::Wells96,
            grid: Some(Arc::new(Grid::new(g).unwrap())),
            wells: vec![Well::parse("A1").unwrap(), Well::parse("A2").unwrap()],
            absorbance_au: rows.concat(),
            failures: Vec::new(),
        };
        let mut with_path = entry(Role::Sample, "x");
        with_path.pathlength_cm = Some(0.5);
        let m = map(&[("A1", with_path), ("A2", entry(Role::Sample, "y"))]);
        let options = BatchOptions {
            water: Some(WaterBand::default()),
            ..BatchOptions::default()
        };
        let models = Models::new(&refs, options.fit, crate::diagnostics::Options::off());
        let r = process_plate(p, "test", Some(&m), &models, &options);
        assert_eq!(r.wells[0].pathlength_source, Some(PathlengthSource::Map));
        let c = r.wells[0].fit.as_ref().unwrap().components[0].concentration_mol_per_l;
        assert!(((c - 4e-6) / 4e-6).abs() < 1e-6);
        let e = r.wells[1].error.as_deref().unwrap();
        assert!(e.contains("--pathlength-from-water needs readings"), "{e}");
        assert!(r.warnings.iter().any(|w| w.contains("no blank wells")));
    }

    #[test]
    fn saturated_points_leave_the_fit_and_flag_the_well() {
        let refs = refs();
        let c = [8e-6, 1e-6];
        let mut sat = well(&refs, c, 1.0);
        for v in &mut sat[8..12] {
            *v = f64::INFINITY; // 440–455 nm read as overflow
        }
        let p = plate(vec![sat.clone(), sat], &["A1", "A2"]);
        let options = BatchOptions {
            fit: FitOptions {
                window_nm: Some((400.0, 700.0)),
                ..FitOptions::default()
            },
            ..BatchOptions::default()
        };
        let models = Models::new(&refs, options.fit, crate::diagnostics::Options::off());
        let r = process_plate(p, "test", None, &models, &options);
        for w in &r.wells {
            assert!(w.flags.contains(&FLAG_SATURATED.to_string()));
            assert!(w.notes[0].starts_with("4 of 61 point(s)"), "{}", w.notes[0]);
            let fit = w.fit.as_ref().unwrap();
            assert_eq!(fit.n_points, 57);
            let got = fit.components[0].concentration_mol_per_l;
            assert!(((got - 8e-6) / 8e-6).abs() < 1e-6, "{got}");
        }
    }

    #[test]
    fn replicates_at_zero_raise_no_outlier_but_a_far_well_does() {
        let refs = refs();
        // Component b absent (fitted at zero); component a: 1.0, 1.0, 1.0, 1.3.
        let rows: Vec<Vec<f64>> = (0..4).map(|i| r_row(&refs, i)).collect();
        let p = plate(rows, &["B1", "B2", "B3", "B4"]);
        let m = map(&[
            ("B1", entry(Role::Sample, "s")),
            ("B2", entry(Role::Sample, "s")),
            ("B3", entry(Role::Sample, "s")),
            ("B4", entry(Role::Sample, "s")),
        ]);
        let options = BatchOptions {
            fit: FitOptions {
                window_nm: Some((400.0, 700.0)),
                ..FitOptions::default()
            },
            ..BatchOptions::default()
        };
        let models = Models::new(&refs, options.fit, crate::diagnostics::Options::off());
        let r = process_plate(p, "test", Some(&m), &models, &options);
        let s = &r.samples[0];
        assert_eq!(s.outlier_wells, vec!["B4"]);
        assert_eq!(s.components[0].outlier_wells, vec!["B4"]);
        assert!(s.components[1].outlier_wells.is_empty());
        assert_eq!(s.components[0].n_wells, 3);
        let mean = s.components[0].mean_mol_per_l;
        assert!(((mean - 5e-6) / 5e-6).abs() < 1e-3, "{mean}");
        // Kept when asked, still flagged.
        let keep = BatchOptions {
            keep_outliers: true,
            ..options
        };
        let rows: Vec<Vec<f64>> = (0..4).map(|i| r_row(&refs, i)).collect();
        let p = plate(rows, &["B1", "B2", "B3", "B4"]);
        let r = process_plate(p, "test", Some(&m), &models, &keep);
        assert_eq!(r.samples[0].components[0].n_wells, 4);
        assert!(
            r.wells[3]
                .flags
                .contains(&FLAG_REPLICATE_OUTLIER.to_string())
        );
    }

    /// Replicate `i` of a sample whose fourth well holds 1.3× the others,
    /// with a tiny deterministic ripple so the fits are not identical.
    fn r_row(refs: &ReferenceSet, i: usize) -> Vec<f64> {
        let k = [1.0, 1.0, 1.0, 1.3][i];
        let mut w = well(refs, [5e-6 * k, 0.0], 1.0);
        for (j, v) in w.iter_mut().enumerate() {
            *v += 1e-4 * (((i * 7 + j * 13) % 11) as f64 - 5.0) / 5.0;
        }
        w
    }
}
