//! One plate, step by step: choose the wells to analyse from the map, the
//! blank (see [`super::blank`]), the pathlength of each well, the fit of its
//! blank-corrected spectrum (without saturated points), the dilution, then
//! the replicates (see [`super::replicates`]).

use super::blank::{BlankInputs, blank};
use super::models::{ModelEntry, Models};
use super::replicates::replicates;
use super::{
    BatchOptions, BlankSummary, FLAG_SATURATED, PathlengthSource, PlateResult, Undiluted,
    WATER_TOLERANCE_NM, WaterBand, WellResult,
};
use crate::fit::{FailedSample, Model, Outcome, SampleResult};
use crate::input::plate::{PlateSpectra, Well, is_saturated};
use crate::input::platemap::{MapEntry, Role};
use crate::solver::Workspace;
use crate::spectrum::Grid;
use std::collections::{HashMap, HashSet};
use std::sync::Arc;

/// The map entries of a plate (`None`: no map, every well is a sample).
type Entries<'a> = Option<&'a HashMap<Well, MapEntry>>;

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
    let used = wells_to_analyse(&spectra, entries, &mut result.warnings);
    let failed_reads = failed_reads(&spectra, entries);
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
    // 1. Blank.
    let mut blank_results: HashMap<usize, WellResult> = HashMap::new();
    let blank_inputs = BlankInputs {
        spectra: &spectra,
        used: &used,
        range: model.design.start..model.design.end,
        options,
    };
    let blank_mean = blank(&blank_inputs, &mut result.blank, &mut blank_results);
    if entries.is_some() && blank_mean.is_none() {
        result.warnings.push(no_blank_warning(&spectra.name, &used));
    }
    // 2.–4. Pathlength, fit and dilution, well by well.
    let mut plate = Plate {
        spectra: &spectra,
        water: options.water.map(|wb| {
            (
                wb,
                nearest(&grid, wb.peak_nm).zip(nearest(&grid, wb.reference_nm)),
            )
        }),
        grid: &grid,
        model,
        models,
        options,
        blank_mean_au: blank_mean.as_deref(),
        sub_models: HashMap::new(),
        ws: model.prepared.workspace(),
    };
    for (i, entry) in &used {
        if entry.role == Role::Blank {
            result.wells.extend(blank_results.remove(i));
            continue;
        }
        result.wells.push(plate.well(*i, entry));
    }
    result.wells.extend(failed_reads);
    // 5. Replicates.
    result.samples = replicates(&mut result.wells, options);
    result
}

/// The map entry of a well (`None`: mapped plate, well not in the map).
fn entry_of(entries: Entries, w: Well) -> Option<MapEntry> {
    match entries {
        Some(m) => m.get(&w).cloned(),
        None => Some(unmapped_entry(w)),
    }
}

/// Wells to analyse, in input order: (index into the spectra, entry).
/// Wells read but not mapped, and mapped wells not read, add warnings.
fn wells_to_analyse(
    spectra: &PlateSpectra,
    entries: Entries,
    warnings: &mut Vec<String>,
) -> Vec<(usize, MapEntry)> {
    let mut used: Vec<(usize, MapEntry)> = Vec::new();
    let mut unmapped: Vec<String> = Vec::new();
    for (i, &w) in spectra.wells.iter().enumerate() {
        match entry_of(entries, w) {
            Some(e) if e.role == Role::Empty => {}
            Some(e) => used.push((i, e)),
            None => unmapped.push(w.to_string()),
        }
    }
    if !unmapped.is_empty() {
        warnings.push(format!(
            "plate '{}': {} well(s) read but not in the plate map, not analysed: {}",
            spectra.name,
            unmapped.len(),
            fmt_wells(&unmapped)
        ));
    }
    if let Some(m) = entries {
        let missing = unread_mapped_wells(spectra, m);
        if !missing.is_empty() {
            let names: Vec<String> = missing.iter().map(|r| r.well.clone()).collect();
            warnings.push(format!(
                "plate '{}': {} mapped well(s) have no reading: {}",
                spectra.name,
                names.len(),
                fmt_wells(&names)
            ));
        }
    }
    used
}

/// Mapped wells (any role but `empty`) the plate has no reading for, in
/// well order, as error rows: the run is then partial (exit 3) and
/// `wells.csv` says why, instead of the wells quietly going missing (a row
/// lost to a wrong delimiter, a truncated file).
fn unread_mapped_wells(spectra: &PlateSpectra, m: &HashMap<Well, MapEntry>) -> Vec<WellResult> {
    let read: HashSet<Well> = spectra
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

/// Wells that could not be read, unless they are not analysed anyway; first
/// the mapped wells the plate has no reading for at all.
fn failed_reads(spectra: &PlateSpectra, entries: Entries) -> Vec<WellResult> {
    let mut out = entries.map_or_else(Vec::new, |m| unread_mapped_wells(spectra, m));
    for f in &spectra.failures {
        let entry = match f.well {
            Some(w) => match entry_of(entries, w) {
                Some(e) if e.role == Role::Empty => continue,
                Some(e) => e,
                None => continue,
            },
            None => MapEntry {
                sample: f.label.clone(),
                ..unmapped_entry_named()
            },
        };
        let mut r = WellResult::new(&f.label, &entry);
        r.error = Some(f.error.to_string());
        out.push(r);
    }
    out
}

/// Why a mapped plate was fitted without blank subtraction.
fn no_blank_warning(plate: &str, used: &[(usize, MapEntry)]) -> String {
    if used.iter().any(|(_, e)| e.role == Role::Blank) {
        format!(
            "plate '{plate}': no usable blank well (all saturated or outliers): spectra fitted without blank subtraction"
        )
    } else {
        format!(
            "plate '{plate}': no blank wells in the map: spectra fitted without blank subtraction"
        )
    }
}

/// What every well of a plate is fitted with.
struct Plate<'a> {
    spectra: &'a PlateSpectra,
    grid: &'a Grid,
    /// The water band and its (peak, reference) indices on the grid.
    water: Option<(WaterBand, Option<(usize, usize)>)>,
    model: &'a Model,
    models: &'a Models<'a>,
    options: &'a BatchOptions,
    blank_mean_au: Option<&'a [f64]>,
    /// Models without the saturated points, by the points left out.
    sub_models: HashMap<Vec<usize>, ModelEntry>,
    /// The solver's workspace for `model`, kept warm across wells.
    ws: Workspace,
}

impl Plate<'_> {
    /// Pathlength, blank subtraction, fit and dilution of one well.
    fn well(&mut self, i: usize, entry: &MapEntry) -> WellResult {
        let label = self.spectra.wells[i].to_string();
        let mut r = WellResult::new(&label, entry);
        let raw = self.spectra.row(i);
        let (l_cm, source) = match self.pathlength(raw, entry, &mut r) {
            Ok(p) => p,
            Err(msg) => {
                r.error = Some(msg);
                return r;
            }
        };
        r.pathlength_cm = Some(l_cm);
        r.pathlength_source = Some(source);
        let corrected: Vec<f64> = match self.blank_mean_au {
            Some(b) => raw.iter().zip(b).map(|(a, b)| a - b).collect(),
            None => raw.to_vec(),
        };
        let (outcome, curves) = self.fit(&label, raw, &corrected, l_cm, &mut r);
        r.curves = curves;
        match outcome {
            Outcome::Fitted(s) => {
                r.undiluted = undiluted(&s, entry.dilution, self.model.molar_masses());
                r.fit = Some(s);
            }
            Outcome::Failed(f) => r.error = Some(f.error),
        }
        r
    }

    /// The well's pathlength and where it came from: the map, the water band
    /// (which also records A(peak) − A(reference) in `r`), or the option.
    fn pathlength(
        &self,
        raw: &[f64],
        entry: &MapEntry,
        r: &mut WellResult,
    ) -> Result<(f64, PathlengthSource), String> {
        let w = self.grid.wavelengths_nm();
        match (entry.pathlength_cm, self.water) {
            (Some(l), _) => Ok((l, PathlengthSource::Map)),
            (None, Some((wb, Some((ip, ir))))) => {
                let (ap, ar) = (raw[ip], raw[ir]);
                if is_saturated(ap) || is_saturated(ar) {
                    return Err(format!(
                        "the water-band reading at {} or {} nm is saturated: no pathlength (give pathlength_cm in the plate map)",
                        w[ip], w[ir]
                    ));
                }
                let diff = ap - ar;
                r.water_band_au = Some(diff);
                let l = diff / wb.au_per_cm;
                if l.is_finite() && l > 0.0 {
                    Ok((l, PathlengthSource::WaterBand))
                } else {
                    Err(format!(
                        "water-band pathlength is not positive: A({}) − A({}) = {diff:.4} AU (is there water in the well? give pathlength_cm in the plate map)",
                        w[ip], w[ir]
                    ))
                }
            }
            (None, Some((wb, None))) => Err(format!(
                "--pathlength-from-water needs readings within {WATER_TOLERANCE_NM} nm of {} and {} nm; plate '{}' has {}–{} nm",
                wb.peak_nm,
                wb.reference_nm,
                self.spectra.name,
                self.grid.min_nm(),
                self.grid.max_nm()
            )),
            (None, None) => Ok((self.options.fit.pathlength_cm, PathlengthSource::Option)),
        }
    }

    /// Fit the corrected spectrum; saturated points inside the fitted range
    /// leave the fit (and flag the well).
    fn fit(
        &mut self,
        label: &str,
        raw: &[f64],
        corrected: &[f64],
        l_cm: f64,
        r: &mut WellResult,
    ) -> (Outcome, Option<crate::curves::Curves>) {
        let (start, end) = (self.model.design.start, self.model.design.end);
        let saturated: Vec<usize> = (start..end).filter(|&k| is_saturated(raw[k])).collect();
        if saturated.is_empty() {
            let how = WellFit {
                label,
                l_cm,
                curves: self.options.curves,
            };
            return fit_with(self.model, corrected, &how, &mut self.ws);
        }
        let w = self.grid.wavelengths_nm();
        r.flags.push(FLAG_SATURATED.to_string());
        r.notes.push(format!(
            "{} of {} point(s) read as overflow ({}–{} nm) were left out of the fit: dilute and re-measure",
            saturated.len(),
            end - start,
            w[saturated[0]],
            w[saturated[saturated.len() - 1]]
        ));
        let keep: Vec<usize> = (start..end).filter(|k| !saturated.contains(k)).collect();
        let models = self.models;
        let sub = self
            .sub_models
            .entry(saturated.clone())
            .or_insert_with(|| {
                let sub_grid =
                    Grid::new(keep.iter().map(|&k| w[k]).collect()).map_err(|e| e.to_string());
                Arc::new(sub_grid.and_then(|g| models.build(&g)))
            })
            .clone();
        match sub.as_ref() {
            // The curves cover the points that were fitted: the saturated
            // ones have no finite reading to draw.
            Ok(m) => {
                let row: Vec<f64> = keep.iter().map(|&k| corrected[k]).collect();
                let how = WellFit {
                    label,
                    l_cm,
                    curves: self.options.curves,
                };
                fit_with(m, &row, &how, &mut m.prepared.workspace())
            }
            Err(msg) => (
                Outcome::Failed(FailedSample {
                    sample: label.to_string(),
                    error: format!(
                        "{} of {} points are saturated, too few left to fit ({msg}): dilute and re-measure",
                        saturated.len(),
                        end - start
                    ),
                }),
                None,
            ),
        }
    }
}

/// How one well's spectrum is fitted.
struct WellFit<'a> {
    /// The well's label.
    label: &'a str,
    /// Its pathlength, cm.
    l_cm: f64,
    /// Whether to compute the fit's curves.
    curves: bool,
}

/// Fit one spectrum with a model, with its curves when asked for.
fn fit_with(
    model: &Model,
    row: &[f64],
    how: &WellFit,
    ws: &mut Workspace,
) -> (Outcome, Option<crate::curves::Curves>) {
    let o = model.fit_one(how.label, row, how.l_cm, ws);
    let c = match (&o, how.curves) {
        (Outcome::Fitted(s), true) => crate::curves::compute(&model.design, s, row),
        _ => None,
    };
    (o, c)
}

/// The concentrations in the specimen: the well's answer times the
/// dilution. The answer is the fit, or, when a screening candidate explains
/// the residual, the components refitted beside it (the refit has no
/// standard errors, so they are left empty).
fn undiluted(s: &SampleResult, dilution: f64, molar_masses: &[Option<f64>]) -> Vec<Undiluted> {
    let refit = s.screening.as_ref().and_then(|x| x.best.as_ref());
    s.components
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let refitted = refit.and_then(|b| {
                b.refitted
                    .iter()
                    .find(|r| *r.name == *c.name)
                    .map(|r| r.concentration_mol_per_l)
            });
            match refitted {
                Some(mol) => Undiluted {
                    name: c.name.to_string(),
                    concentration_mol_per_l: mol * dilution,
                    std_error_mol_per_l: None,
                    concentration_mg_per_l: molar_masses
                        .get(i)
                        .copied()
                        .flatten()
                        .map(|m| mol * dilution * m * 1000.0),
                    std_error_mg_per_l: None,
                },
                None => Undiluted {
                    name: c.name.to_string(),
                    concentration_mol_per_l: c.concentration_mol_per_l * dilution,
                    std_error_mol_per_l: c.std_error_mol_per_l.map(|v| v * dilution),
                    concentration_mg_per_l: c.concentration_mg_per_l.map(|v| v * dilution),
                    std_error_mg_per_l: c.std_error_mg_per_l.map(|v| v * dilution),
                },
            }
        })
        .collect()
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

/// Well names, the first twelve, then how many in all.
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
        sample: well.to_string(),
        ..unmapped_entry_named()
    }
}

/// A sample at dilution 1 with no pathlength, its name left empty.
fn unmapped_entry_named() -> MapEntry {
    MapEntry {
        role: Role::Sample,
        sample: String::new(),
        dilution: 1.0,
        pathlength_cm: None,
        line: 0,
    }
}
