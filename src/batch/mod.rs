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

pub mod run;
pub mod stats;

use crate::curves::Curves;
use crate::fit::{FitOptions, Model, Outcome, SampleResult};
use crate::input::plate::{PlateSpectra, Well, is_saturated};
use crate::input::platemap::{MapEntry, Role};
use crate::reference::ReferenceSet;
use crate::spectrum::Grid;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::sync::{Arc, Mutex};

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

/// Fitted designs shared by every plate of a run, one per wavelength grid,
/// with the residual checks of `fit` ([`crate::diagnostics`]).
pub struct Models<'a> {
    refs: &'a ReferenceSet,
    options: FitOptions,
    checks: crate::diagnostics::Options,
    cache: Mutex<Vec<(Vec<u64>, ModelEntry)>>,
    warnings: Mutex<Vec<String>>,
}

type ModelEntry = Arc<std::result::Result<Model, String>>;

impl<'a> Models<'a> {
    /// An empty cache for a reference set, fit options and checks.
    pub fn new(
        refs: &'a ReferenceSet,
        options: FitOptions,
        checks: crate::diagnostics::Options,
    ) -> Self {
        Models {
            refs,
            options,
            checks,
            cache: Mutex::new(Vec::new()),
            warnings: Mutex::new(Vec::new()),
        }
    }

    /// Build a model for a grid (not cached); its warnings (fallback
    /// solver, similar references, candidates left out) are kept once for
    /// the run.
    pub fn build(&self, grid: &Grid) -> std::result::Result<Model, String> {
        let m = Model::with_checks(grid, self.refs, &self.options, &self.checks)
            .map_err(|e| e.to_string())?;
        let mut new: Vec<String> = m.method_warning().into_iter().collect();
        new.extend(m.separability_warnings());
        new.extend(m.check_warnings().iter().cloned());
        if let Ok(mut w) = self.warnings.lock() {
            for x in new {
                if !w.contains(&x) {
                    w.push(x);
                }
            }
        }
        Ok(m)
    }

    /// Warnings about the models built so far (each once).
    pub fn warnings(&self) -> Vec<String> {
        self.warnings.lock().map(|w| w.clone()).unwrap_or_default()
    }

    /// The model for a grid (built on first use).
    pub fn get(&self, grid: &Grid) -> ModelEntry {
        let key: Vec<u64> = grid.wavelengths_nm().iter().map(|w| w.to_bits()).collect();
        if let Ok(cache) = self.cache.lock()
            && let Some((_, m)) = cache.iter().find(|(k, _)| *k == key)
        {
            return m.clone();
        }
        let built = Arc::new(self.build(grid));
        if let Ok(mut cache) = self.cache.lock() {
            if let Some((_, m)) = cache.iter().find(|(k, _)| *k == key) {
                return m.clone();
            }
            // Keep the cache small: plates of one run share few grids.
            if cache.len() >= 16 {
                cache.remove(0);
            }
            cache.push((key, built.clone()));
        }
        built
    }
}

/// Index of the grid point nearest `nm`, if within [`WATER_TOLERANCE_NM`].
fn nearest(grid: &Grid, nm: f64) -> Option<usize> {
    let w = grid.wavelengths_nm();
    let j = w.partition_point(|&x| x < nm);
    [j.checked_sub(1), (j < w.len()).then_some(j)]
        .into_iter()
        .flatten()
        .min_by(|&a, &b| (w[a] - nm).abs().total_cmp(&(w[b] - nm).abs()))
        .filter(|&i| (w[i] - nm).abs() <= WATER_TOLERANCE_NM)
}

fn fmt_wells(wells: &[String]) -> String {
    const SHOWN: usize = 12;
    if wells.len() <= SHOWN {
        wells.join(", ")
    } else {
        format!("{}, … ({} in all)", wells[..SHOWN].join(", "), wells.len())
    }
}

/// The default map entry of a plate without a map: a sample named after
/// its well.
fn unmapped_entry(well: Well) -> MapEntry {
    MapEntry {
        role: Role::Sample,
        sample: well.to_string(),
        dilution: 1.0,
        pathlength_cm: None,
        line: 0,
    }
}

/// Mapped wells (any role but `empty`) the plate has no reading for, in
/// well order, as error rows: the run is then partial (exit 3) and
/// `wells.csv` says why, instead of the wells quietly going missing (a row
/// lost to a wrong delimiter, a truncated file).
fn unread_mapped_wells(spectra: &PlateSpectra, m: &HashMap<Well, MapEntry>) -> Vec<WellResult> {
    let read: std::collections::HashSet<Well> = spectra
        .wells
        .iter()
        .copied()
        .chain(spectra.failures.iter().filter_map(|f| f.well))
        .collect();
    let mut missing: Vec<(&Well, &MapEntry)> = m
        .iter()
        .filter(|(w, e)| e.role != Role::Empty && !read.contains(w))
        .collect();
    missing.sort_by_key(|(w, _)| **w);
    missing
        .into_iter()
        .map(|(w, e)| {
            let mut r = WellResult::new(&w.to_string(), e);
            r.error = Some(format!(
                "mapped as {} (plate map line {}) but the plate has no reading for this well: a lost or misread row of the input?",
                e.role.name(),
                e.line
            ));
            r
        })
        .collect()
}

/// Process one plate. `entries` is the plate's map (`None`: no map for this
/// plate, every well is a sample named after its well).
pub fn process_plate(
    spectra: PlateSpectra,
    input: &str,
    entries: Option<&HashMap<Well, MapEntry>>,
    models: &Models,
    options: &BatchOptions,
) -> PlateResult {
    let mut result = PlateResult {
        plate: spectra.name.clone(),
        input: input.to_string(),
        format: Some(spectra.format.name().to_string()),
        n_wavelengths: spectra.n_points(),
        mapped: entries.is_some(),
        blank: BlankSummary::default(),
        wells: Vec::new(),
        samples: Vec::new(),
        warnings: Vec::new(),
        error: None,
    };
    let entry_of = |w: Well| -> Option<MapEntry> {
        match entries {
            Some(m) => m.get(&w).cloned(),
            None => Some(unmapped_entry(w)),
        }
    };
    // Wells to analyse, in input order: (index into spectra, entry).
    let mut used: Vec<(usize, MapEntry)> = Vec::new();
    let mut unmapped: Vec<String> = Vec::new();
    for (i, &w) in spectra.wells.iter().enumerate() {
        match entry_of(w) {
            Some(e) if e.role == Role::Empty => {}
            Some(e) => used.push((i, e)),
            None => unmapped.push(w.to_string()),
        }
    }
    if !unmapped.is_empty() {
        result.warnings.push(format!(
            "plate '{}': {} well(s) read but not in the plate map, not analysed: {}",
            spectra.name,
            unmapped.len(),
            fmt_wells(&unmapped)
        ));
    }
    // Wells that could not be read, unless they are not analysed anyway;
    // first the mapped wells the plate has no reading for at all.
    let mut failed_reads = entries.map_or_else(Vec::new, |m| unread_mapped_wells(&spectra, m));
    if !failed_reads.is_empty() {
        let names: Vec<String> = failed_reads.iter().map(|r| r.well.clone()).collect();
        result.warnings.push(format!(
            "plate '{}': {} mapped well(s) have no reading: {}",
            spectra.name,
            names.len(),
            fmt_wells(&names)
        ));
    }
    for f in &spectra.failures {
        let entry = match f.well {
            Some(w) => match entry_of(w) {
                Some(e) if e.role == Role::Empty => continue,
                Some(e) => e,
                None => continue,
            },
            None => MapEntry {
                role: Role::Sample,
                sample: f.label.clone(),
                dilution: 1.0,
                pathlength_cm: None,
                line: 0,
            },
        };
        let mut r = WellResult::new(&f.label, &entry);
        r.error = Some(f.error.to_string());
        failed_reads.push(r);
    }
    let Some(grid) = spectra.grid.clone() else {
        result.wells = failed_reads;
        if result.wells.is_empty() {
            result.error = Some("no well of the plate could be read".into());
        }
        return result;
    };
    let model_entry = models.get(&grid);
    let model = match model_entry.as_ref() {
        Ok(m) => m,
        Err(msg) => {
            for (i, e) in &used {
                let mut r = WellResult::new(&spectra.wells[*i].to_string(), e);
                r.error = Some(msg.clone());
                result.wells.push(r);
            }
            result.wells.extend(failed_reads);
            return result;
        }
    };
    let (start, end) = (model.design.start, model.design.end);
    let n = grid.len();

    // 1. Blank.
    let mut blank_results: HashMap<usize, WellResult> = HashMap::new();
    let blank_mean = blank(
        &spectra,
        &used,
        start..end,
        options,
        &mut result.blank,
        &mut blank_results,
    );
    let has_blank_wells = used.iter().any(|(_, e)| e.role == Role::Blank);
    if entries.is_some() && blank_mean.is_none() {
        result.warnings.push(if has_blank_wells {
            format!(
                "plate '{}': no usable blank well (all saturated or outliers): spectra fitted without blank subtraction",
                spectra.name
            )
        } else {
            format!(
                "plate '{}': no blank wells in the map: spectra fitted without blank subtraction",
                spectra.name
            )
        });
    }

    // 2. Water band positions.
    let water = options.water.map(|wb| {
        (
            wb,
            nearest(&grid, wb.peak_nm).zip(nearest(&grid, wb.reference_nm)),
        )
    });

    // 3. Fit.
    let mut ws = model.prepared.workspace();
    let mut corrected = vec![0.0; n];
    let mut sub_models: HashMap<Vec<usize>, ModelEntry> = HashMap::new();
    for (i, entry) in &used {
        let label = spectra.wells[*i].to_string();
        if entry.role == Role::Blank {
            if let Some(r) = blank_results.remove(i) {
                result.wells.push(r);
            }
            continue;
        }
        let mut r = WellResult::new(&label, entry);
        let raw = spectra.row(*i);
        // Pathlength.
        let path = match (entry.pathlength_cm, water) {
            (Some(l), _) => Ok((l, PathlengthSource::Map)),
            (None, Some((wb, Some((ip, ir))))) => {
                let (ap, ar) = (raw[ip], raw[ir]);
                if is_saturated(ap) || is_saturated(ar) {
                    Err(format!(
                        "the water-band reading at {} or {} nm is saturated: no pathlength (give pathlength_cm in the plate map)",
                        grid.wavelengths_nm()[ip],
                        grid.wavelengths_nm()[ir]
                    ))
                } else {
                    let diff = ap - ar;
                    r.water_band_au = Some(diff);
                    let l = diff / wb.au_per_cm;
                    if l.is_finite() && l > 0.0 {
                        Ok((l, PathlengthSource::WaterBand))
                    } else {
                        Err(format!(
                            "water-band pathlength is not positive: A({}) − A({}) = {diff:.4} AU (is there water in the well? give pathlength_cm in the plate map)",
                            grid.wavelengths_nm()[ip],
                            grid.wavelengths_nm()[ir]
                        ))
                    }
                }
            }
            (None, Some((wb, None))) => Err(format!(
                "--pathlength-from-water needs readings within {WATER_TOLERANCE_NM} nm of {} and {} nm; plate '{}' has {}–{} nm",
                wb.peak_nm,
                wb.reference_nm,
                spectra.name,
                grid.min_nm(),
                grid.max_nm()
            )),
            (None, None) => Ok((options.fit.pathlength_cm, PathlengthSource::Option)),
        };
        let (l_cm, source) = match path {
            Ok(p) => p,
            Err(msg) => {
                r.error = Some(msg);
                result.wells.push(r);
                continue;
            }
        };
        r.pathlength_cm = Some(l_cm);
        r.pathlength_source = Some(source);
        // Blank subtraction.
        match &blank_mean {
            Some(b) => {
                for k in 0..n {
                    corrected[k] = raw[k] - b[k];
                }
            }
            None => corrected.copy_from_slice(raw),
        }
        // Saturated points inside the fitted range leave the fit.
        let saturated: Vec<usize> = (start..end).filter(|&k| is_saturated(raw[k])).collect();
        let want_curves = options.curves;
        let (outcome, curves) = if saturated.is_empty() {
            let o = model.fit_one(&label, &corrected, l_cm, &mut ws);
            let c = match (&o, want_curves) {
                (Outcome::Fitted(s), true) => crate::curves::compute(&model.design, s, &corrected),
                _ => None,
            };
            (o, c)
        } else {
            let w = grid.wavelengths_nm();
            r.flags.push(FLAG_SATURATED.to_string());
            r.notes.push(format!(
                "{} of {} point(s) read as overflow ({}–{} nm) were left out of the fit: dilute and re-measure",
                saturated.len(),
                end - start,
                w[saturated[0]],
                w[saturated[saturated.len() - 1]]
            ));
            let keep: Vec<usize> = (start..end).filter(|k| !saturated.contains(k)).collect();
            let sub = sub_models
                .entry(saturated.clone())
                .or_insert_with(|| {
                    let sub_grid =
                        Grid::new(keep.iter().map(|&k| w[k]).collect()).map_err(|e| e.to_string());
                    Arc::new(sub_grid.and_then(|g| models.build(&g)))
                })
                .clone();
            match sub.as_ref() {
                Ok(m) => {
                    let row: Vec<f64> = keep.iter().map(|&k| corrected[k]).collect();
                    let mut sub_ws = m.prepared.workspace();
                    let o = m.fit_one(&label, &row, l_cm, &mut sub_ws);
                    // The curves cover the points that were fitted: the
                    // saturated ones have no finite reading to draw.
                    let c = match (&o, want_curves) {
                        (Outcome::Fitted(s), true) => crate::curves::compute(&m.design, s, &row),
                        _ => None,
                    };
                    (o, c)
                }
                Err(msg) => (
                    Outcome::Failed(crate::fit::FailedSample {
                        sample: label.clone(),
                        error: format!(
                            "{} of {} points are saturated, too few left to fit ({msg}): dilute and re-measure",
                            saturated.len(),
                            end - start
                        ),
                    }),
                    None,
                ),
            }
        };
        r.curves = curves;
        match outcome {
            Outcome::Fitted(s) => {
                r.undiluted = s
                    .components
                    .iter()
                    .map(|c| Undiluted {
                        name: c.name.to_string(),
                        concentration_mol_per_l: c.concentration_mol_per_l * entry.dilution,
                        std_error_mol_per_l: c.std_error_mol_per_l.map(|v| v * entry.dilution),
                        concentration_mg_per_l: c
                            .concentration_mg_per_l
                            .map(|v| v * entry.dilution),
                        std_error_mg_per_l: c.std_error_mg_per_l.map(|v| v * entry.dilution),
                    })
                    .collect();
                r.fit = Some(s);
            }
            Outcome::Failed(f) => r.error = Some(f.error),
        }
        result.wells.push(r);
    }
    result.wells.extend(failed_reads);

    // 5. Replicates.
    result.samples = replicates(&mut result.wells, options);
    result
}

/// Average the usable blank wells; fill the summary and the blank wells'
/// results. Returns the blank spectrum over the whole grid.
fn blank(
    spectra: &PlateSpectra,
    used: &[(usize, MapEntry)],
    range: std::ops::Range<usize>,
    options: &BatchOptions,
    summary: &mut BlankSummary,
    results: &mut HashMap<usize, WellResult>,
) -> Option<Vec<f64>> {
    let n = spectra.n_points();
    let mut candidates: Vec<(usize, f64)> = Vec::new();
    for (i, e) in used.iter().filter(|(_, e)| e.role == Role::Blank) {
        let label = spectra.wells[*i].to_string();
        summary.wells.push(label.clone());
        let row = spectra.row(*i);
        let mut r = WellResult::new(&label, e);
        if row.iter().any(|v| is_saturated(*v)) {
            r.flags.push(FLAG_SATURATED.to_string());
            r.notes
                .push("blank has saturated readings: not used in the plate's blank".into());
        } else {
            let mean = row[range.clone()].iter().sum::<f64>() / range.len().max(1) as f64;
            r.blank_mean_au = Some(mean);
            candidates.push((*i, mean));
        }
        results.insert(*i, r);
    }
    let means: Vec<f64> = candidates.iter().map(|c| c.1).collect();
    let mut outlier = None;
    if let Some(g) = stats::grubbs(&means, options.outlier_alpha)
        && g.is_outlier()
    {
        let (i, _) = candidates[g.index];
        outlier = Some(i);
        let label = spectra.wells[i].to_string();
        summary.outliers.push(label);
        if let Some(r) = results.get_mut(&i) {
            r.flags.push(FLAG_BLANK_OUTLIER.to_string());
            r.notes.push(format!(
                "mean absorbance disagrees with the other blanks (Grubbs G = {:.3} > {:.3} at α = {}){}",
                g.g,
                g.critical,
                options.outlier_alpha,
                if options.keep_outliers {
                    "; kept in the blank (--keep-outliers)"
                } else {
                    "; left out of the blank"
                }
            ));
        }
    }
    let chosen: Vec<usize> = candidates
        .iter()
        .map(|c| c.0)
        .filter(|i| options.keep_outliers || Some(*i) != outlier)
        .collect();
    if chosen.is_empty() {
        return None;
    }
    summary.used = chosen
        .iter()
        .map(|i| spectra.wells[*i].to_string())
        .collect();
    let mut mean = vec![0.0; n];
    for &i in &chosen {
        for (m, v) in mean.iter_mut().zip(spectra.row(i)) {
            *m += v;
        }
    }
    let k = chosen.len() as f64;
    mean.iter_mut().for_each(|m| *m /= k);
    let used_means: Vec<f64> = candidates
        .iter()
        .filter(|c| chosen.contains(&c.0))
        .map(|c| c.1)
        .collect();
    summary.mean_au = Some(mean[range.clone()].iter().sum::<f64>() / range.len().max(1) as f64);
    summary.well_sd_au = stats::mean_sd(&used_means).1;
    if chosen.len() >= 2 {
        let mut max_sd = 0.0f64;
        let mut col = Vec::with_capacity(chosen.len());
        for j in range {
            col.clear();
            col.extend(chosen.iter().map(|&i| spectra.row(i)[j]));
            if let Some(sd) = stats::mean_sd(&col).1 {
                max_sd = max_sd.max(sd);
            }
        }
        summary.max_point_sd_au = Some(max_sd);
    }
    Some(mean)
}

/// Group fitted wells into replicates, flag outliers, compute statistics.
fn replicates(wells: &mut [WellResult], options: &BatchOptions) -> Vec<SampleSummary> {
    let mut order: Vec<(Role, String)> = Vec::new();
    let mut members: HashMap<(Role, String), Vec<usize>> = HashMap::new();
    for (i, w) in wells.iter().enumerate() {
        if w.fit.is_none() || !matches!(w.role, Role::Sample | Role::Standard) {
            continue;
        }
        let key = (w.role, w.sample.clone());
        if !members.contains_key(&key) {
            order.push(key.clone());
        }
        members.entry(key).or_default().push(i);
    }
    let mut out = Vec::new();
    for key in order {
        let idx = members.remove(&key).unwrap_or_default();
        let n_comp = wells[idx[0]].undiluted.len();
        let mut flagged: Vec<usize> = Vec::new();
        let mut per_comp_flags: Vec<Vec<usize>> = vec![Vec::new(); n_comp];
        for c in 0..n_comp {
            let values: Vec<f64> = idx
                .iter()
                .map(|&i| wells[i].undiluted[c].concentration_mol_per_l)
                .collect();
            let Some(g) = stats::grubbs(&values, options.outlier_alpha) else {
                continue;
            };
            if !g.is_outlier() {
                continue;
            }
            let i = idx[g.index];
            let others: Vec<f64> = values
                .iter()
                .enumerate()
                .filter(|(k, _)| *k != g.index)
                .map(|(_, v)| *v)
                .collect();
            let (others_mean, _) = stats::mean_sd(&others);
            let u = &wells[i].undiluted[c];
            let gap = (u.concentration_mol_per_l - others_mean).abs();
            // Without a standard error (no noise estimate) Grubbs' test decides alone.
            if u.std_error_mol_per_l
                .is_some_and(|se| gap <= OUTLIER_MIN_STD_ERRORS * se)
            {
                continue;
            }
            per_comp_flags[c].push(i);
            let note = format!(
                "disagrees with its {} replicate(s) in {} (Grubbs G = {:.3} > {:.3} at α = {}; {:.4e} vs {:.4e} mol/L){}",
                idx.len() - 1,
                u.name,
                g.g,
                g.critical,
                options.outlier_alpha,
                u.concentration_mol_per_l,
                others_mean,
                if options.keep_outliers {
                    "; kept in the statistics (--keep-outliers)"
                } else {
                    "; left out of the statistics"
                }
            );
            wells[i].notes.push(note);
            if !flagged.contains(&i) {
                flagged.push(i);
                wells[i].flags.push(FLAG_REPLICATE_OUTLIER.to_string());
            }
        }
        flagged.sort();
        let in_stats: Vec<usize> = idx
            .iter()
            .copied()
            .filter(|i| options.keep_outliers || !flagged.contains(i))
            .collect();
        let components = (0..n_comp)
            .map(|c| {
                let v: Vec<f64> = in_stats
                    .iter()
                    .map(|&i| wells[i].undiluted[c].concentration_mol_per_l)
                    .collect();
                let (mean, sd) = stats::mean_sd(&v);
                let mg: Option<Vec<f64>> = in_stats
                    .iter()
                    .map(|&i| wells[i].undiluted[c].concentration_mg_per_l)
                    .collect();
                let (mean_mg, sd_mg) = match mg {
                    Some(m) if !m.is_empty() => {
                        let (a, b) = stats::mean_sd(&m);
                        (Some(a), b)
                    }
                    _ => (None, None),
                };
                ComponentStats {
                    name: wells[idx[0]].undiluted[c].name.clone(),
                    mean_mol_per_l: mean,
                    sd_mol_per_l: sd,
                    cv_percent: stats::cv_percent(mean, sd),
                    n_wells: v.len(),
                    mean_mg_per_l: mean_mg,
                    sd_mg_per_l: sd_mg,
                    outlier_wells: per_comp_flags[c]
                        .iter()
                        .map(|&i| wells[i].well.clone())
                        .collect(),
                }
            })
            .collect();
        out.push(SampleSummary {
            sample: key.1,
            role: key.0,
            wells: idx.iter().map(|&i| wells[i].well.clone()).collect(),
            outlier_wells: flagged.iter().map(|&i| wells[i].well.clone()).collect(),
            outliers_kept: options.keep_outliers,
            components,
        });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::input::plate::PlateFormat;
    use crate::reference::Component;

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
