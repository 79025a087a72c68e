//! Calibration (stage 4–5 for standards, beside the fit): a molar
//! absorptivity curve from a blank and a series of standards.
//!
//! In: a [`SpectraFile`] holding the standards' and blanks' spectra, their
//! concentrations as [`Standard`]s (mol/L) and [`CalibrationOptions`]. Out: a
//! [`CalibrationResult`]: ε(λ) with its standard error on the usable
//! wavelengths, the fit statistics, what was left out and why, and the
//! [`Calibration`] table that goes into the component file.
//!
//! Model, per wavelength λ, for standard i of concentration cᵢ read in a cell
//! of pathlength l, after the mean blank spectrum is subtracted:
//!
//! ```text
//! Aᵢ(λ) − Ā_blank(λ) = ε(λ)·(l·cᵢ) + b(λ) + noise
//! ```
//!
//! fitted by ordinary least squares as a straight line with intercept (the
//! calibration line of e.g. Miller & Miller, *Statistics and Chemometrics for
//! Analytical Chemistry*, ch. 5; recalled from memory). The slope is ε(λ)
//! and its standard error s/√Sxx; the intercept b(λ) is tested against zero
//! with Student's t, since a non-zero intercept points at a bad blank or an
//! offset between cells. Because the mean blank was subtracted, the
//! intercept measures the line's distance from that mean, whose own scatter
//! (taken as large as the standards') enters its standard error:
//! s·√(1/n + x̄²/Sxx + 1/n_blanks). With replicates (rows that share a concentration)
//! and three or more concentrations, the residual splits into pure error and
//! lack of fit, tested with F (Draper & Smith, *Applied Regression
//! Analysis*, ch. 2; recalled from memory).
//!
//! The usable range, at the band maximum (the wavelength of the largest ε):
//! 1. a standard reading above [`ABSORBANCE_CEILING_AU`] is left out (stray
//!    light biases such readings low; common practice);
//! 2. from the top down, a concentration level is left out when the mean of
//!    its replicates lies off the line through the lower levels by more than
//!    the linearity tolerance (default [`LINEARITY_TOLERANCE`], 5 %) *and*
//!    outside the 99 % prediction bound of that line (so noise alone does
//!    not exclude it); testing stops at the first level that passes.
//!
//! Then, per wavelength, with the standards kept: a wavelength is left out
//! where the blank or a standard reads above the ceiling (solvent or cell
//! cut-off), or where the top level bends away from the line by the same
//! two criteria while carrying at least [`LINEARITY_MIN_SIGNAL_FRACTION`] of
//! its band-maximum signal (band shape changing with concentration, as in
//! aggregation). The highest concentration and blank-subtracted absorbance
//! actually used become the calibrated range.

use crate::error::{Error, Result};
use crate::input::concentrations::{Role, Standard};
use crate::input::spectra::SpectraFile;
use crate::reference::component::{
    Calibration, Component, Conditions, ExcludedStandard, ExcludedWavelengths, LackOfFit, Source,
};
use crate::spectrum::Grid;
use crate::stats;
use serde::{Deserialize, Serialize};
use std::collections::{HashMap, HashSet};

/// Readings above this absorbance (AU) are not used: stray light and too
/// little light at the detector bias them low (common practice, no single
/// source; instrument dependent, so configurable).
pub const ABSORBANCE_CEILING_AU: f64 = 2.0;

/// Default relative deviation from the line of the lower standards beyond
/// which a standard or wavelength counts as non-linear (5 %, common
/// practice for a calibration's linear range, no source).
pub const LINEARITY_TOLERANCE: f64 = 0.05;

/// Two-sided significance level of the prediction bound a non-linear point
/// must also leave (99 %), so that noise alone does not exclude a standard.
pub const LINEARITY_ALPHA: f64 = 0.01;

/// Significance level of the intercept and lack-of-fit tests (5 %).
pub const TEST_ALPHA: f64 = 0.05;

/// A wavelength is tested for linearity only where its top standard reads
/// at least this fraction of its band-maximum signal: far from the band a 5 %
/// deviation is smaller than the noise and means nothing.
pub const LINEARITY_MIN_SIGNAL_FRACTION: f64 = 0.1;

/// Concentrations within this relative difference count as replicates.
pub const REPLICATE_TOLERANCE: f64 = 1e-9;

/// Below this R² at the band maximum the calibration gets a warning
/// (common practice asks for 0.995 or better, no source).
pub const MIN_R_SQUARED: f64 = 0.995;

/// Fewer concentration levels than this get a warning (five or more is
/// common practice, no source).
pub const RECOMMENDED_LEVELS: usize = 5;

/// Options of a calibration.
#[derive(Debug, Clone, Copy)]
pub struct CalibrationOptions {
    /// Optical pathlength of the standards, cm.
    pub pathlength_cm: f64,
    /// Wavelength window, nm (default: every wavelength in the file).
    pub window_nm: Option<(f64, f64)>,
    /// Relative deviation that counts as non-linear.
    pub linearity_tolerance: f64,
    /// Readings above this absorbance (AU) are not used.
    pub absorbance_ceiling_au: f64,
}

impl Default for CalibrationOptions {
    fn default() -> Self {
        CalibrationOptions {
            pathlength_cm: 1.0,
            window_nm: None,
            linearity_tolerance: LINEARITY_TOLERANCE,
            absorbance_ceiling_au: ABSORBANCE_CEILING_AU,
        }
    }
}

/// Where the inputs came from, recorded in the calibration table.
#[derive(Debug, Clone, Default)]
pub struct Provenance {
    /// The spectra file, as given.
    pub standards_file: String,
    /// Its SHA-256, hex.
    pub standards_sha256: String,
    /// The concentration file, as given.
    pub concentrations_file: String,
    /// Its SHA-256, hex.
    pub concentrations_sha256: String,
    /// The unit the concentrations were given in.
    pub concentration_unit: String,
    /// Date of the calibration (YYYY-MM-DD).
    pub date: String,
}

/// A straight line y = a + b·x fitted by least squares.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LineFit {
    /// Number of points.
    pub n: usize,
    /// Slope b.
    pub slope: f64,
    /// Intercept a.
    pub intercept: f64,
    /// Residual sum of squares.
    pub sse: f64,
    /// Mean of x.
    pub x_mean: f64,
    /// Σ(x − x̄)².
    pub sxx: f64,
    /// Σ(y − ȳ)².
    pub syy: f64,
}

impl LineFit {
    /// Fit a line through points; needs two or more distinct x.
    pub fn new(points: &[(f64, f64)]) -> Option<Self> {
        let n = points.len();
        if n < 2 {
            return None;
        }
        let nf = n as f64;
        let x_mean = points.iter().map(|p| p.0).sum::<f64>() / nf;
        let y_mean = points.iter().map(|p| p.1).sum::<f64>() / nf;
        let sxx: f64 = points.iter().map(|p| (p.0 - x_mean).powi(2)).sum();
        if sxx.is_nan() || sxx <= 0.0 {
            return None;
        }
        let sxy: f64 = points.iter().map(|p| (p.0 - x_mean) * (p.1 - y_mean)).sum();
        let syy: f64 = points.iter().map(|p| (p.1 - y_mean).powi(2)).sum();
        let slope = sxy / sxx;
        let intercept = y_mean - slope * x_mean;
        let sse = points
            .iter()
            .map(|p| (p.1 - intercept - slope * p.0).powi(2))
            .sum();
        Some(LineFit {
            n,
            slope,
            intercept,
            sse,
            x_mean,
            sxx,
            syy,
        })
    }

    /// Residual degrees of freedom, n − 2.
    pub fn df(&self) -> usize {
        self.n - 2
    }

    /// Residual standard deviation s = √(SSE / (n − 2)); `None` for two points.
    pub fn residual_sd(&self) -> Option<f64> {
        (self.df() > 0).then(|| (self.sse / self.df() as f64).sqrt())
    }

    /// Standard error of the slope, s/√Sxx.
    pub fn slope_std_error(&self) -> Option<f64> {
        self.residual_sd().map(|s| s / self.sxx.sqrt())
    }

    /// Standard error of the intercept, s·√(1/n + x̄²/Sxx).
    pub fn intercept_std_error(&self) -> Option<f64> {
        self.residual_sd()
            .map(|s| s * (1.0 / self.n as f64 + self.x_mean.powi(2) / self.sxx).sqrt())
    }

    /// Coefficient of determination; `None` when y does not vary.
    pub fn r_squared(&self) -> Option<f64> {
        (self.syy > 0.0).then(|| 1.0 - self.sse / self.syy)
    }

    /// The line at x.
    pub fn predict(&self, x: f64) -> f64 {
        self.intercept + self.slope * x
    }

    /// Standard error of (mean of m new readings at x0) − (line at x0):
    /// s·√(1/m + 1/n + (x0 − x̄)²/Sxx).
    pub fn prediction_std_error(&self, x0: f64, m: usize) -> Option<f64> {
        self.residual_sd().map(|s| {
            s * (1.0 / m as f64 + 1.0 / self.n as f64 + (x0 - self.x_mean).powi(2) / self.sxx)
                .sqrt()
        })
    }

    /// Standard error of the intercept as a difference from the mean of
    /// `n_blanks` blanks that were subtracted: the blank mean carries its own
    /// scatter, taken as large as the standards',
    /// s·√(1/n + x̄²/Sxx + 1/n_blanks). Without blanks, the plain standard
    /// error.
    pub fn intercept_std_error_against_blank(&self, n_blanks: usize) -> Option<f64> {
        let blank = if n_blanks > 0 {
            1.0 / n_blanks as f64
        } else {
            0.0
        };
        self.residual_sd()
            .map(|s| s * (1.0 / self.n as f64 + self.x_mean.powi(2) / self.sxx + blank).sqrt())
    }

    /// Two-sided p-value of the t test of intercept = 0 (without blanks).
    pub fn intercept_p_value(&self) -> Option<f64> {
        self.intercept_p_value_against_blank(0)
    }

    /// Two-sided p-value of the t test of intercept = 0, the intercept
    /// being measured from the mean of `n_blanks` subtracted blanks.
    pub fn intercept_p_value_against_blank(&self, n_blanks: usize) -> Option<f64> {
        let se = self.intercept_std_error_against_blank(n_blanks)?;
        Some(if se > 0.0 {
            stats::t_two_sided_p(self.intercept / se, self.df() as f64)
        } else if self.intercept.abs() > 0.0 {
            0.0
        } else {
            1.0
        })
    }
}

/// The calibration line at one wavelength.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct WavelengthResult {
    /// Wavelength, nm.
    pub wavelength_nm: f64,
    /// ε (the slope), L·mol⁻¹·cm⁻¹; negative values are kept here and set
    /// to 0 in the component.
    pub epsilon_l_per_mol_cm: f64,
    /// Standard error of ε, L·mol⁻¹·cm⁻¹.
    pub epsilon_std_error_l_per_mol_cm: f64,
    /// Intercept, AU.
    pub intercept_au: f64,
    /// Its standard error as a distance from the mean blank, AU.
    pub intercept_std_error_au: f64,
    /// Two-sided p-value of intercept = 0.
    pub intercept_p_value: f64,
    /// R² of the line (absent when the readings do not vary).
    pub r_squared: Option<f64>,
    /// Residual standard deviation, AU.
    pub residual_sd_au: f64,
    /// Lack-of-fit p-value (with replicates and three or more levels).
    pub lack_of_fit_p_value: Option<f64>,
    /// Why this wavelength was left out; `None` when used.
    pub excluded: Option<String>,
}

/// A standard whose spectrum could not be read.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct UnreadableStandard {
    /// Sample identifier.
    pub sample: String,
    /// The read error, with line and column.
    pub error: String,
}

/// Everything a calibration produced.
#[derive(Debug, Clone)]
pub struct CalibrationResult {
    /// The summary and provenance for the component file.
    pub calibration: Calibration,
    /// The line at every wavelength of the window, used or not.
    pub wavelengths: Vec<WavelengthResult>,
    /// Standards whose spectra could not be read (left out).
    pub unreadable: Vec<UnreadableStandard>,
    /// Things the analyst should look at.
    pub warnings: Vec<String>,
}

impl CalibrationResult {
    /// The component: ε ≥ 0 with its standard error on the used wavelengths,
    /// with the calibration table attached.
    pub fn component(
        &self,
        name: &str,
        molar_mass_g_per_mol: Option<f64>,
        note: Option<String>,
        conditions: Conditions,
    ) -> Result<Component> {
        crate::reference::component::validate_name(name)?;
        let used: Vec<&WavelengthResult> = self
            .wavelengths
            .iter()
            .filter(|w| w.excluded.is_none())
            .collect();
        let grid = Grid::new(used.iter().map(|w| w.wavelength_nm).collect())?;
        let mut c = Component {
            name: name.to_string(),
            molar_mass_g_per_mol,
            note,
            created: self.calibration.date.clone(),
            conditions,
            source: Source {
                kind: "calibration".into(),
                file: Some(self.calibration.standards_file.clone()),
                sha256: Some(self.calibration.standards_sha256.clone()),
            },
            grid,
            epsilon_l_per_mol_cm: used
                .iter()
                .map(|w| w.epsilon_l_per_mol_cm.max(0.0))
                .collect(),
            epsilon_std_error_l_per_mol_cm: Some(
                used.iter()
                    .map(|w| w.epsilon_std_error_l_per_mol_cm)
                    .collect(),
            ),
            extra: toml::Table::new(),
        };
        c.set_calibration(&self.calibration)?;
        Ok(c)
    }
}

/// One standard or blank with its readings over the window.
struct Reading<'a> {
    sample: &'a str,
    concentration_mol_per_l: f64,
    /// l·c, mol·L⁻¹·cm.
    x: f64,
    /// Raw absorbances over the window, AU.
    raw: &'a [f64],
    /// Blank-subtracted absorbances over the window, AU.
    y: Vec<f64>,
}

/// Concentration levels: indices into the readings, grouped by replicate,
/// ascending.
fn levels(readings: &[Reading], active: &[bool]) -> Vec<Vec<usize>> {
    let mut idx: Vec<usize> = (0..readings.len()).filter(|&i| active[i]).collect();
    idx.sort_by(|&a, &b| readings[a].x.total_cmp(&readings[b].x));
    let mut out: Vec<Vec<usize>> = Vec::new();
    for i in idx {
        let x = readings[i].x;
        match out.last_mut() {
            Some(g) if (x - readings[g[0]].x).abs() <= REPLICATE_TOLERANCE * x.abs() => g.push(i),
            _ => out.push(vec![i]),
        }
    }
    out
}

fn line_at(
    readings: &[Reading],
    members: impl Iterator<Item = usize>,
    j: usize,
) -> Option<LineFit> {
    let pts: Vec<(f64, f64)> = members.map(|i| (readings[i].x, readings[i].y[j])).collect();
    LineFit::new(&pts)
}

/// Relative deviation of the top level from the line through the lower ones
/// at wavelength j, when it counts as non-linear.
fn bends(readings: &[Reading], lv: &[Vec<usize>], j: usize, tolerance: f64) -> Option<f64> {
    let (top, lower) = lv.split_last()?;
    let fit = line_at(readings, lower.iter().flatten().copied(), j)?;
    let x_top = readings[top[0]].x;
    let mean_top = top.iter().map(|&i| readings[i].y[j]).sum::<f64>() / top.len() as f64;
    let predicted = fit.predict(x_top);
    if predicted.is_nan() || predicted <= 0.0 {
        return None;
    }
    let deviation = mean_top - predicted;
    let relative = deviation / predicted;
    if relative.abs() <= tolerance {
        return None;
    }
    if let Some(se) = fit.prediction_std_error(x_top, top.len()) {
        let t = stats::t_two_sided_critical(LINEARITY_ALPHA, fit.df() as f64);
        if deviation.abs() <= t * se {
            return None;
        }
    }
    Some(relative)
}

/// Lack-of-fit F test at wavelength j.
fn lack_of_fit(
    readings: &[Reading],
    lv: &[Vec<usize>],
    fit: &LineFit,
    j: usize,
) -> Option<LackOfFit> {
    let k = lv.len();
    let n = fit.n;
    if k < 3 || n <= k {
        return None;
    }
    let mut ss_pure = 0.0;
    for g in lv {
        let mean = g.iter().map(|&i| readings[i].y[j]).sum::<f64>() / g.len() as f64;
        ss_pure += g
            .iter()
            .map(|&i| (readings[i].y[j] - mean).powi(2))
            .sum::<f64>();
    }
    if ss_pure.is_nan() || ss_pure <= 0.0 {
        return None;
    }
    let ss_lack = (fit.sse - ss_pure).max(0.0);
    let (df_lack, df_pure) = (k - 2, n - k);
    let f = (ss_lack / df_lack as f64) / (ss_pure / df_pure as f64);
    Some(LackOfFit {
        f_statistic: f,
        df_lack_of_fit: df_lack,
        df_pure_error: df_pure,
        p_value: stats::f_sf(f, df_lack as f64, df_pure as f64),
    })
}

/// The wavelength of the largest slope among those whose blank stays below
/// the ceiling.
fn band_maximum(
    readings: &[Reading],
    active: &[bool],
    blank_ok: &[bool],
    wavelengths_nm: &[f64],
) -> Result<usize> {
    let mut best: Option<(usize, f64)> = None;
    for (j, ok) in blank_ok.iter().enumerate() {
        if !ok {
            continue;
        }
        let members = (0..readings.len()).filter(|&i| active[i]);
        if let Some(fit) = line_at(readings, members, j)
            && fit.slope.is_finite()
            && best.is_none_or(|(_, s)| fit.slope > s)
        {
            best = Some((j, fit.slope));
        }
    }
    match best {
        Some((j, s)) if s > 0.0 => Ok(j),
        _ => Err(Error::Invalid(format!(
            "the standards' absorbance does not rise with concentration at any wavelength from {} to {} nm: check the concentrations, the sample names and that the blank is a blank",
            wavelengths_nm[0],
            wavelengths_nm[wavelengths_nm.len() - 1]
        ))),
    }
}

fn list_names(names: &[String]) -> String {
    let quoted: Vec<String> = names.iter().map(|n| format!("'{n}'")).collect();
    join_some(&quoted)
}

/// The first five items, then how many more.
fn join_some(items: &[String]) -> String {
    let shown: Vec<&str> = items.iter().take(5).map(String::as_str).collect();
    let more = items.len().saturating_sub(5);
    if more > 0 {
        format!("{} and {more} more", shown.join(", "))
    } else {
        shown.join(", ")
    }
}

/// Calibrate one component from its standards.
pub fn calibrate(
    file: &SpectraFile,
    standards: &[Standard],
    options: &CalibrationOptions,
    provenance: &Provenance,
) -> Result<CalibrationResult> {
    if !(options.pathlength_cm.is_finite() && options.pathlength_cm > 0.0) {
        return Err(Error::Invalid(format!(
            "pathlength {} cm: expected a positive number of cm",
            options.pathlength_cm
        )));
    }
    if !(options.linearity_tolerance.is_finite() && options.linearity_tolerance > 0.0) {
        return Err(Error::Invalid(format!(
            "linearity tolerance {}: expected a positive fraction such as 0.05",
            options.linearity_tolerance
        )));
    }
    if !(options.absorbance_ceiling_au.is_finite() && options.absorbance_ceiling_au > 0.0) {
        return Err(Error::Invalid(format!(
            "absorbance ceiling {} AU: expected a positive number of AU",
            options.absorbance_ceiling_au
        )));
    }
    let mut warnings = Vec::new();

    // Match the spectra with the concentration rows, both ways.
    let mut located: HashMap<&str, (usize, usize)> = HashMap::new();
    let mut in_input: Vec<(usize, &str)> = Vec::new();
    for (b, block) in file.blocks.iter().enumerate() {
        for (r, id) in block.ids.iter().enumerate() {
            if located.insert(id.as_str(), (b, r)).is_some() {
                return Err(Error::Invalid(format!(
                    "sample '{id}' appears twice in the spectra file: expected one spectrum per standard"
                )));
            }
            in_input.push((block.positions[r], id.as_str()));
        }
    }
    let failed: HashMap<&str, &crate::input::spectra::RowFailure> = file
        .failures
        .iter()
        .map(|f| (f.sample.as_str(), f))
        .collect();
    for f in &file.failures {
        in_input.push((f.position, f.sample.as_str()));
    }
    in_input.sort();
    let listed: HashSet<&str> = standards.iter().map(|s| s.sample.as_str()).collect();
    let unlisted: Vec<String> = in_input
        .iter()
        .filter(|(_, id)| !listed.contains(id))
        .map(|(_, id)| id.to_string())
        .collect();
    if !unlisted.is_empty() {
        return Err(Error::Invalid(format!(
            "the concentration file has no row for {} of the spectra file: give every spectrum a row (role `exclude` leaves one out on purpose)",
            list_names(&unlisted)
        )));
    }
    let absent: Vec<String> = standards
        .iter()
        .filter(|s| {
            !located.contains_key(s.sample.as_str()) && !failed.contains_key(s.sample.as_str())
        })
        .map(|s| format!("'{}' (line {})", s.sample, s.line))
        .collect();
    if !absent.is_empty() {
        return Err(Error::Invalid(format!(
            "the concentration file names {} that the spectra file does not have: check the sample names",
            join_some(&absent)
        )));
    }

    // Sort the rows into used, excluded on purpose and unreadable.
    let mut excluded_standards = Vec::new();
    let mut unreadable = Vec::new();
    let mut used: Vec<(&Standard, usize, usize)> = Vec::new();
    for s in standards {
        if s.role == Role::Exclude {
            excluded_standards.push(ExcludedStandard {
                sample: s.sample.clone(),
                concentration_mol_per_l: s.concentration_mol_per_l,
                reason: "role `exclude` in the concentration file".into(),
            });
            continue;
        }
        if let Some(f) = failed.get(s.sample.as_str()) {
            warnings.push(format!(
                "standard '{}' could not be read and was left out: {}",
                s.sample, f.error
            ));
            unreadable.push(UnreadableStandard {
                sample: s.sample.clone(),
                error: f.error.to_string(),
            });
            continue;
        }
        let (b, r) = located[s.sample.as_str()];
        used.push((s, b, r));
    }
    let n_standard_rows = standards
        .iter()
        .filter(|s| s.role == Role::Standard)
        .count();
    if n_standard_rows == 0 {
        return Err(Error::Invalid(
            "every concentration in the concentration file is 0 (or a blank): expected standards of known concentration above 0 besides the blanks".into(),
        ));
    }

    // One wavelength grid for all.
    let Some(&(_, block_index, _)) = used.first() else {
        return Err(Error::Invalid(
            "no readable standard is left to calibrate with".into(),
        ));
    };
    if let Some((other, b, _)) = used.iter().find(|(_, b, _)| *b != block_index) {
        let g0 = &file.blocks[block_index].grid;
        let g1 = &file.blocks[*b].grid;
        return Err(Error::Invalid(format!(
            "'{}' ({}–{} nm, {} points) and '{}' ({}–{} nm, {} points) were read at different wavelengths: calibration needs every standard and blank on the same wavelengths",
            used[0].0.sample,
            g0.min_nm(),
            g0.max_nm(),
            g0.len(),
            other.sample,
            g1.min_nm(),
            g1.max_nm(),
            g1.len()
        )));
    }
    let block = &file.blocks[block_index];
    let w_all = block.grid.wavelengths_nm();
    let (start, end) = match options.window_nm {
        None => (0, w_all.len()),
        Some((lo, hi)) => (
            w_all.partition_point(|&x| x < lo),
            w_all.partition_point(|&x| x <= hi),
        ),
    };
    if end <= start + 1 {
        return Err(Error::NoOverlap(format!(
            "{} wavelength(s) of the spectra ({}–{} nm) lie in --range-nm: expected at least 2",
            end.saturating_sub(start),
            block.grid.min_nm(),
            block.grid.max_nm()
        )));
    }
    let wavelengths_nm = &w_all[start..end];
    let nw = wavelengths_nm.len();

    // Blanks: averaged and subtracted.
    let blanks: Vec<&[f64]> = used
        .iter()
        .filter(|(s, _, _)| s.role == Role::Blank)
        .map(|(_, _, r)| &block.row(*r)[start..end])
        .collect();
    let mut blank_mean = vec![0.0; nw];
    let mut blank_max = vec![f64::NEG_INFINITY; nw];
    for b in &blanks {
        for j in 0..nw {
            blank_mean[j] += b[j] / blanks.len() as f64;
            blank_max[j] = blank_max[j].max(b[j]);
        }
    }
    if blanks.is_empty() {
        warnings.push(
            "no blank (concentration 0 or role `blank`): nothing was subtracted, so the intercept carries the solvent and cell absorbance and cannot reveal a bad blank".into(),
        );
    }
    let ceiling = options.absorbance_ceiling_au;
    let blank_ok: Vec<bool> = blank_max.iter().map(|&b| b <= ceiling).collect();

    let l = options.pathlength_cm;
    let readings: Vec<Reading> = used
        .iter()
        .filter(|(s, _, _)| s.role == Role::Standard)
        .map(|(s, _, r)| {
            let raw = &block.row(*r)[start..end];
            Reading {
                sample: &s.sample,
                concentration_mol_per_l: s.concentration_mol_per_l,
                x: l * s.concentration_mol_per_l,
                raw,
                y: raw.iter().zip(&blank_mean).map(|(a, b)| a - b).collect(),
            }
        })
        .collect();
    let mut active = vec![true; readings.len()];
    let lv = levels(&readings, &active);
    if lv.len() < 2 {
        let what = match readings.first() {
            Some(r) => format!(
                "{} standard(s), all at {} mol/L",
                readings.len(),
                r.concentration_mol_per_l
            ),
            None => "no readable standard".into(),
        };
        return Err(Error::Invalid(format!(
            "{what}: a calibration needs standards at 2 or more different concentrations (5 or more is usual)"
        )));
    }
    if readings.len() < 3 {
        return Err(Error::Invalid(format!(
            "{} standards: a calibration line with standard errors needs at least 3 (5 or more concentrations is usual)",
            readings.len()
        )));
    }

    // The usable range at the band maximum.
    let band = band_maximum(&readings, &active, &blank_ok, wavelengths_nm)?;
    let band_nm = wavelengths_nm[band];
    for (i, r) in readings.iter().enumerate() {
        if r.raw[band] > ceiling {
            active[i] = false;
            excluded_standards.push(ExcludedStandard {
                sample: r.sample.to_string(),
                concentration_mol_per_l: r.concentration_mol_per_l,
                reason: format!(
                    "reads {:.3} AU at {band_nm} nm, above the {ceiling} AU ceiling where stray light biases readings low: dilute it",
                    r.raw[band]
                ),
            });
        }
    }
    loop {
        let lv = levels(&readings, &active);
        if lv.len() < 3 {
            break;
        }
        let Some(relative) = bends(&readings, &lv, band, options.linearity_tolerance) else {
            break;
        };
        let top = &lv[lv.len() - 1];
        for &i in top {
            active[i] = false;
            excluded_standards.push(ExcludedStandard {
                sample: readings[i].sample.to_string(),
                concentration_mol_per_l: readings[i].concentration_mol_per_l,
                reason: format!(
                    "the mean of this concentration reads {:+.1} % off the line of the lower standards at {band_nm} nm (tolerance ±{:.1} %): outside the linear range",
                    100.0 * relative,
                    100.0 * options.linearity_tolerance
                ),
            });
        }
    }
    let lv = levels(&readings, &active);
    let n_active = active.iter().filter(|a| **a).count();
    if lv.len() < 2 || n_active < 3 {
        return Err(Error::Invalid(format!(
            "after leaving out the standards outside the usable range ({}), {n_active} standard(s) at {} concentration(s) remain: expected at least 3 at 2 or more concentrations; dilute the top standards or add lower ones",
            list_names(
                &excluded_standards
                    .iter()
                    .map(|e| e.sample.clone())
                    .collect::<Vec<_>>()
            ),
            lv.len()
        )));
    }
    if lv.len() < 3 {
        warnings.push(format!(
            "{} concentrations: linearity could not be tested (it needs 3 or more)",
            lv.len()
        ));
    } else if lv.len() < RECOMMENDED_LEVELS {
        warnings.push(format!(
            "{} concentrations: {RECOMMENDED_LEVELS} or more are usual for a calibration (common practice)",
            lv.len()
        ));
    }
    let band = band_maximum(&readings, &active, &blank_ok, wavelengths_nm)?;

    // Per wavelength: what cannot be used.
    #[derive(Clone, Copy, PartialEq)]
    enum Cut {
        Blank,
        Standard,
        Bends(f64),
    }
    let top_signal_band = {
        let top = &lv[lv.len() - 1];
        top.iter().map(|&i| readings[i].y[band]).sum::<f64>() / top.len() as f64
    };
    let cuts: Vec<Option<Cut>> = (0..nw)
        .map(|j| {
            if !blank_ok[j] {
                return Some(Cut::Blank);
            }
            if (0..readings.len()).any(|i| active[i] && readings[i].raw[j] > ceiling) {
                return Some(Cut::Standard);
            }
            if lv.len() >= 3 {
                let top = &lv[lv.len() - 1];
                let signal = top.iter().map(|&i| readings[i].y[j]).sum::<f64>() / top.len() as f64;
                if signal >= LINEARITY_MIN_SIGNAL_FRACTION * top_signal_band
                    && let Some(r) = bends(&readings, &lv, j, options.linearity_tolerance)
                {
                    return Some(Cut::Bends(r));
                }
            }
            None
        })
        .collect();
    let mut excluded_wavelengths: Vec<ExcludedWavelengths> = Vec::new();
    let mut j = 0;
    while j < nw {
        let Some(kind) = cuts[j] else {
            j += 1;
            continue;
        };
        let same = |c: Option<Cut>| match (c, kind) {
            (Some(Cut::Bends(_)), Cut::Bends(_)) => true,
            (Some(a), b) => a == b,
            (None, _) => false,
        };
        let mut k = j;
        let mut worst = 0.0f64;
        while k < nw && same(cuts[k]) {
            if let Some(Cut::Bends(r)) = cuts[k]
                && r.abs() > worst.abs()
            {
                worst = r;
            }
            k += 1;
        }
        let reason = match kind {
            Cut::Blank => {
                format!("the blank reads above the {ceiling} AU ceiling (solvent or cell cut-off)")
            }
            Cut::Standard => format!("a standard reads above the {ceiling} AU ceiling"),
            Cut::Bends(_) => format!(
                "the top standard bends away from the line of the lower ones (up to {:+.1} %, tolerance ±{:.1} %)",
                100.0 * worst,
                100.0 * options.linearity_tolerance
            ),
        };
        excluded_wavelengths.push(ExcludedWavelengths {
            range_nm: [wavelengths_nm[j], wavelengths_nm[k - 1]],
            reason,
        });
        j = k;
    }

    // The final lines.
    let members: Vec<usize> = (0..readings.len()).filter(|&i| active[i]).collect();
    let mut wavelengths = Vec::with_capacity(nw);
    for j in 0..nw {
        let fit = line_at(&readings, members.iter().copied(), j).ok_or_else(|| {
            Error::Invalid("calibration line: fewer than 2 concentrations".into())
        })?;
        let lof = lack_of_fit(&readings, &lv, &fit, j);
        let excluded = cuts[j].map(|_| {
            excluded_wavelengths
                .iter()
                .find(|e| e.range_nm[0] <= wavelengths_nm[j] && wavelengths_nm[j] <= e.range_nm[1])
                .map(|e| e.reason.clone())
                .unwrap_or_default()
        });
        wavelengths.push(WavelengthResult {
            wavelength_nm: wavelengths_nm[j],
            epsilon_l_per_mol_cm: fit.slope,
            epsilon_std_error_l_per_mol_cm: fit.slope_std_error().unwrap_or(0.0),
            intercept_au: fit.intercept,
            intercept_std_error_au: fit
                .intercept_std_error_against_blank(blanks.len())
                .unwrap_or(0.0),
            intercept_p_value: fit
                .intercept_p_value_against_blank(blanks.len())
                .unwrap_or(1.0),
            r_squared: fit.r_squared(),
            residual_sd_au: fit.residual_sd().unwrap_or(0.0),
            lack_of_fit_p_value: lof.as_ref().map(|l| l.p_value),
            excluded,
        });
    }
    let used_idx: Vec<usize> = (0..nw).filter(|&j| cuts[j].is_none()).collect();
    if used_idx.len() < 2 {
        return Err(Error::Invalid(format!(
            "{} usable wavelength(s) left after leaving out readings above {ceiling} AU and non-linear ones: expected at least 2; dilute the standards or use a cell with a shorter pathlength",
            used_idx.len()
        )));
    }
    for pair in used_idx.windows(2) {
        if pair[1] > pair[0] + 1 {
            warnings.push(format!(
                "wavelengths {}–{} nm inside the curve were left out: ε is interpolated across them when fitting; check the spectra there",
                wavelengths_nm[pair[0] + 1],
                wavelengths_nm[pair[1] - 1]
            ));
        }
    }
    // One-sided 5 % over all used wavelengths together (Bonferroni), so
    // noise at hundreds of non-absorbing wavelengths does not raise it.
    let t_negative = stats::t_two_sided_critical(
        2.0 * TEST_ALPHA / used_idx.len() as f64,
        (members.len() - 2) as f64,
    );
    let negative: Vec<f64> = used_idx
        .iter()
        .filter(|&&j| {
            let w = &wavelengths[j];
            w.epsilon_l_per_mol_cm < -t_negative * w.epsilon_std_error_l_per_mol_cm
        })
        .map(|&j| wavelengths_nm[j])
        .collect();
    if let (Some(first), Some(last)) = (negative.first(), negative.last()) {
        warnings.push(format!(
            "ε is significantly below zero at {} wavelength(s) between {first} and {last} nm (set to 0 in the component): the blank absorbs more than the standards there; check that blank and standards share solvent and cell",
            negative.len()
        ));
    }

    let bw = &wavelengths[band];
    let band_fit = line_at(&readings, members.iter().copied(), band)
        .ok_or_else(|| Error::Invalid("calibration line: fewer than 2 concentrations".into()))?;
    let lof = lack_of_fit(&readings, &lv, &band_fit, band);
    let band_nm = wavelengths_nm[band];
    if bw.intercept_p_value < TEST_ALPHA {
        warnings.push(format!(
            "the intercept at {band_nm} nm is {:.5} ± {:.5} AU, significantly different from zero (t test, p = {:.3}): a sign of a bad blank or an offset between cells; check the blank and read blank and standards in the same cell",
            bw.intercept_au, bw.intercept_std_error_au, bw.intercept_p_value
        ));
    }
    if let Some(l) = &lof
        && l.p_value < TEST_ALPHA
    {
        warnings.push(format!(
            "lack of fit at {band_nm} nm (F = {:.2}, p = {:.3}): the replicate means do not lie on a straight line; look for a curved response or a bad standard",
            l.f_statistic, l.p_value
        ));
    }
    let r2 = bw.r_squared.unwrap_or(0.0);
    if r2 < MIN_R_SQUARED {
        warnings.push(format!(
            "R² at {band_nm} nm is {r2:.4}, below the {MIN_R_SQUARED} usually asked of a calibration line (common practice)"
        ));
    }

    let concentration_max = members
        .iter()
        .map(|&i| readings[i].concentration_mol_per_l)
        .fold(0.0, f64::max);
    let concentration_min = members
        .iter()
        .map(|&i| readings[i].concentration_mol_per_l)
        .fold(f64::INFINITY, f64::min);
    let max_absorbance = members
        .iter()
        .flat_map(|&i| used_idx.iter().map(move |&j| (i, j)))
        .map(|(i, j)| readings[i].y[j])
        .fold(f64::NEG_INFINITY, f64::max);
    let calibration = Calibration {
        date: provenance.date.clone(),
        standards_file: provenance.standards_file.clone(),
        standards_sha256: provenance.standards_sha256.clone(),
        concentrations_file: provenance.concentrations_file.clone(),
        concentrations_sha256: provenance.concentrations_sha256.clone(),
        concentration_unit: provenance.concentration_unit.clone(),
        pathlength_cm: l,
        n_standards: members.len(),
        n_levels: lv.len(),
        n_blanks: blanks.len(),
        concentration_min_mol_per_l: concentration_min,
        concentration_max_mol_per_l: concentration_max,
        max_absorbance_au: max_absorbance,
        band_max_nm: band_nm,
        epsilon_at_band_max_l_per_mol_cm: bw.epsilon_l_per_mol_cm,
        epsilon_std_error_at_band_max_l_per_mol_cm: bw.epsilon_std_error_l_per_mol_cm,
        r_squared_at_band_max: r2,
        residual_sd_at_band_max_au: bw.residual_sd_au,
        intercept_at_band_max_au: bw.intercept_au,
        intercept_std_error_at_band_max_au: bw.intercept_std_error_au,
        intercept_p_value: bw.intercept_p_value,
        linearity_tolerance: options.linearity_tolerance,
        absorbance_ceiling_au: ceiling,
        range_nm: [
            wavelengths_nm[used_idx[0]],
            wavelengths_nm[used_idx[used_idx.len() - 1]],
        ],
        lack_of_fit: lof,
        excluded_standards,
        excluded_wavelengths,
    };
    Ok(CalibrationResult {
        calibration,
        wavelengths,
        unreadable,
        warnings,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::input::concentrations;
    use crate::input::spectra::{self, ReadOptions};

    /// Agreement with scipy's printed digits (float64 round-off only).
    const SCIPY_TOL: f64 = 1e-12;

    #[test]
    fn line_fit_matches_scipy_linregress() {
        // scipy.stats.linregress 1.17.1 on these six points.
        let pts: Vec<(f64, f64)> = [0.11, 0.19, 0.32, 0.41, 0.48, 0.62]
            .iter()
            .enumerate()
            .map(|(i, &y)| ((i + 1) as f64, y))
            .collect();
        let f = LineFit::new(&pts).unwrap();
        let close = |a: f64, b: f64| (a - b).abs() <= SCIPY_TOL * b.abs().max(1e-3);
        assert!(close(f.slope, 0.10028571428571428));
        assert!(close(f.intercept, 0.0040000000000000036));
        assert!(close(f.slope_std_error().unwrap(), 0.00438922614163923));
        assert!(close(f.intercept_std_error().unwrap(), 0.01709357996999106));
        assert!(close(f.r_squared().unwrap(), 0.9923959885617624));
        // 2·scipy.stats.t.sf(|a/se(a)|, 4).
        assert!((f.intercept_p_value().unwrap() - 0.8264693183590661).abs() < 1e-10);
    }

    fn spectra_csv(wavelengths: &[f64], rows: &[(&str, Vec<f64>)]) -> SpectraFile {
        let mut s = String::from("sample");
        for w in wavelengths {
            s.push_str(&format!(",{w}"));
        }
        s.push('\n');
        for (id, a) in rows {
            s.push_str(id);
            for v in a {
                s.push_str(&format!(",{v}"));
            }
            s.push('\n');
        }
        spectra::read(s.as_bytes(), ReadOptions::default()).unwrap()
    }

    fn standards(text: &str) -> Vec<Standard> {
        concentrations::read(text.as_bytes(), None)
            .unwrap()
            .standards(None)
            .unwrap()
    }

    /// Noise-free series: ε = [1000, 5000, 2000] at three wavelengths, a
    /// blank of 0.05 AU everywhere.
    fn clean_series(levels_mol_per_l: &[f64]) -> (SpectraFile, Vec<Standard>) {
        let eps = [1000.0, 5000.0, 2000.0];
        let mut rows = vec![("blank", vec![0.05; 3])];
        let mut conc = String::from("sample,concentration\nblank,0\n");
        let names: Vec<String> = (0..levels_mol_per_l.len())
            .map(|i| format!("s{i}"))
            .collect();
        for (i, c) in levels_mol_per_l.iter().enumerate() {
            rows.push((
                names[i].as_str(),
                eps.iter().map(|e| 0.05 + e * c).collect(),
            ));
            conc.push_str(&format!("{},{c}\n", names[i]));
        }
        let rows: Vec<(&str, Vec<f64>)> = rows.into_iter().collect();
        (spectra_csv(&[400.0, 450.0, 500.0], &rows), standards(&conc))
    }

    #[test]
    fn exact_series_returns_its_absorptivities() {
        let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5, 1e-4]);
        let r = calibrate(
            &file,
            &std,
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        let eps: Vec<f64> = r
            .wavelengths
            .iter()
            .map(|w| w.epsilon_l_per_mol_cm)
            .collect();
        for (got, want) in eps.iter().zip([1000.0, 5000.0, 2000.0]) {
            assert!((got - want).abs() < 1e-9 * want, "{got}");
        }
        let c = &r.calibration;
        assert!((c.band_max_nm - 450.0).abs() < 1e-12);
        assert_eq!((c.n_standards, c.n_levels, c.n_blanks), (5, 5, 1));
        assert!((c.concentration_max_mol_per_l - 1e-4).abs() < 1e-18);
        // Blank-subtracted top absorbance: 5000 × 1e-4.
        assert!((c.max_absorbance_au - 0.5).abs() < 1e-12);
        assert!(c.excluded_standards.is_empty() && c.excluded_wavelengths.is_empty());
    }

    #[test]
    fn pathlength_divides_the_slope() {
        let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5]);
        let options = CalibrationOptions {
            pathlength_cm: 0.5,
            ..Default::default()
        };
        let r = calibrate(&file, &std, &options, &Provenance::default()).unwrap();
        // The absorbances were made for 1 cm: in 0.5 cm the same readings mean twice the ε.
        assert!((r.wavelengths[1].epsilon_l_per_mol_cm - 10_000.0).abs() < 1e-6);
    }

    #[test]
    fn standard_above_the_ceiling_is_left_out() {
        let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5, 5e-4]);
        let r = calibrate(
            &file,
            &std,
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        let ex = &r.calibration.excluded_standards;
        assert_eq!(ex.len(), 1);
        assert_eq!(ex[0].sample, "s4");
        assert!(ex[0].reason.contains("ceiling"), "{}", ex[0].reason);
        assert!((r.calibration.concentration_max_mol_per_l - 8e-5).abs() < 1e-18);
    }

    #[test]
    fn bending_top_level_is_left_out_and_named() {
        // The top standard reads 20 % low at every wavelength.
        let (mut file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5, 1.6e-4]);
        let n = file.blocks[0].grid.len();
        let top = file.blocks[0].len() - 1;
        for j in 0..n {
            let v = &mut file.blocks[0].absorbance_au[top * n + j];
            *v = 0.05 + 0.8 * (*v - 0.05);
        }
        let r = calibrate(
            &file,
            &std,
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        let ex = &r.calibration.excluded_standards;
        assert_eq!(ex.len(), 1, "{ex:?}");
        assert_eq!(ex[0].sample, "s4");
        assert!(ex[0].reason.contains("-20.0 %"), "{}", ex[0].reason);
        assert!((r.wavelengths[1].epsilon_l_per_mol_cm - 5000.0).abs() < 1e-6);
    }

    #[test]
    fn replicates_give_a_lack_of_fit_test() {
        let eps = 5000.0;
        let mut rows = vec![("b", vec![0.0, 0.0])];
        let mut conc = String::from("sample,concentration\nb,0\n");
        let noise = [0.001, -0.001, 0.0005, -0.0005, 0.0008, -0.0008];
        let names = ["a1", "a2", "b1", "b2", "c1", "c2"];
        for (i, name) in names.iter().enumerate() {
            let c = 2e-5 * (1 + i / 2) as f64;
            rows.push((name, vec![eps * c + noise[i], eps * c * 0.5 + noise[i]]));
            conc.push_str(&format!("{name},{c}\n"));
        }
        let file = spectra_csv(&[400.0, 410.0], &rows);
        let r = calibrate(
            &file,
            &standards(&conc),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        let lof = r.calibration.lack_of_fit.as_ref().unwrap();
        assert_eq!((lof.df_lack_of_fit, lof.df_pure_error), (1, 3));
        assert!(lof.p_value > 0.05, "{lof:?}");
        assert_eq!(r.calibration.n_levels, 3);
    }

    /// A noisy series (σ = 0.001 AU, two blanks, five levels) whose blank
    /// may read `blank_bias_au` too high.
    fn noisy_series(seed: u64, blank_bias_au: f64) -> CalibrationResult {
        use rand::SeedableRng;
        use rand_distr::{Distribution, Normal};
        let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
        let noise = Normal::new(0.0, 0.001).unwrap();
        let mut rows = Vec::new();
        let mut conc = String::from("sample,concentration\n");
        let names = ["b1", "b2", "s1", "s2", "s3", "s4", "s5"];
        for (i, name) in names.iter().enumerate() {
            let c = if i < 2 { 0.0 } else { 2e-5 * (i - 1) as f64 };
            let bias = if i < 2 { blank_bias_au } else { 0.0 };
            rows.push((
                *name,
                vec![
                    5000.0 * c + bias + noise.sample(&mut rng),
                    2000.0 * c + bias + noise.sample(&mut rng),
                ],
            ));
            conc.push_str(&format!("{name},{c}\n"));
        }
        let file = spectra_csv(&[400.0, 450.0], &rows);
        calibrate(
            &file,
            &standards(&conc),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap()
    }

    #[test]
    fn intercept_test_holds_its_false_alarm_rate_and_catches_a_bad_blank() {
        // 400 clean series: about 5 % should come out "significant" at
        // p < 0.05 (binomial SD ≈ 1.1 %; 2.5–8 % allows three of them).
        let n = 400;
        let alarms = (0..n)
            .filter(|&seed| noisy_series(seed, 0.0).calibration.intercept_p_value < TEST_ALPHA)
            .count();
        let rate = alarms as f64 / n as f64;
        assert!((0.025..=0.08).contains(&rate), "false-alarm rate {rate}");
        // A blank reading 0.01 AU high (10σ) is caught, with its warning.
        let r = noisy_series(1, 0.01);
        assert!(
            r.calibration.intercept_p_value < 0.01,
            "{}",
            r.calibration.intercept_p_value
        );
        assert!(r.warnings.iter().any(|w| w.contains("bad blank")));
    }

    #[test]
    fn wavelengths_where_the_blank_is_opaque_are_left_out() {
        // Solvent cut-off: below 410 nm the blank (and so every reading)
        // is above 2 AU.
        let w = [400.0, 405.0, 410.0, 420.0, 430.0];
        let solvent = [2.5, 2.2, 0.1, 0.02, 0.0];
        let mut rows = vec![("blank", solvent.to_vec())];
        let mut conc = String::from("sample,concentration\nblank,0\n");
        let names = ["s1", "s2", "s3", "s4"];
        for (i, name) in names.iter().enumerate() {
            let c = 2e-5 * (i + 1) as f64;
            rows.push((*name, solvent.iter().map(|b| b + 5000.0 * c).collect()));
            conc.push_str(&format!("{name},{c}\n"));
        }
        let file = spectra_csv(&w, &rows);
        let r = calibrate(
            &file,
            &standards(&conc),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        let ex = &r.calibration.excluded_wavelengths;
        assert_eq!(ex.len(), 1, "{ex:?}");
        let nm = |r: [f64; 2]| (r[0].round() as i64, r[1].round() as i64);
        assert_eq!(nm(ex[0].range_nm), (400, 405));
        assert!(
            ex[0].reason.contains("the blank reads above"),
            "{}",
            ex[0].reason
        );
        assert_eq!(nm(r.calibration.range_nm), (410, 430));
        let c = r
            .component("dye", None, None, Conditions::default())
            .unwrap();
        assert_eq!(c.grid.wavelengths_nm(), &[410.0, 420.0, 430.0]);
    }

    #[test]
    fn band_that_changes_shape_at_the_top_loses_its_flank() {
        // The top standard's band shifts (as on aggregation): its maximum
        // stays on the line, one flank reads 15 % low, the other 12 % high
        // (not enough to move the band maximum to that flank).
        let w = [480.0, 490.0, 500.0, 510.0, 520.0];
        let eps = [3000.0, 4000.0, 5000.0, 4000.0, 3000.0];
        let mut rows = vec![("blank", vec![0.0; 5])];
        let mut conc = String::from("sample,concentration\nblank,0\n");
        let names = ["s1", "s2", "s3", "s4", "s5"];
        for (i, name) in names.iter().enumerate() {
            let c = 2e-5 * (i + 1) as f64;
            let mut a: Vec<f64> = eps.iter().map(|e| e * c).collect();
            if i == names.len() - 1 {
                a[1] *= 0.85;
                a[3] *= 1.12;
            }
            rows.push((*name, a));
            conc.push_str(&format!("{name},{c}\n"));
        }
        let file = spectra_csv(&w, &rows);
        let r = calibrate(
            &file,
            &standards(&conc),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        assert!(r.calibration.excluded_standards.is_empty());
        let ex = &r.calibration.excluded_wavelengths;
        assert_eq!(ex.len(), 2, "{ex:?}");
        assert_eq!(
            (ex[0].range_nm, ex[1].range_nm),
            ([490.0, 490.0], [510.0, 510.0])
        );
        assert!(ex[0].reason.contains("bends away"), "{}", ex[0].reason);
        assert!(r.warnings.iter().any(|w| w.contains("interpolated across")));
    }

    #[test]
    fn standards_on_different_wavelengths_are_an_error() {
        let text = "sample,wavelength_nm,absorbance\n\
                    b,400,0\nb,410,0\ns1,400,0.1\ns1,410,0.1\n\
                    s2,400,0.2\ns2,410,0.2\ns3,400,0.3\ns3,420,0.3\n";
        let file = spectra::read(text.as_bytes(), ReadOptions::default()).unwrap();
        let e = calibrate(
            &file,
            &standards("sample,concentration\nb,0\ns1,1e-5\ns2,2e-5\ns3,3e-5\n"),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap_err();
        assert!(e.to_string().contains("different wavelengths"), "{e}");
    }

    #[test]
    fn excluded_role_is_left_out_and_named() {
        let (file, _) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5]);
        let std = standards(
            "sample,concentration,role\nblank,0,\ns0,2e-5,\ns1,4e-5,\ns2,6e-5,\ns3,8e-5,exclude\n",
        );
        let r = calibrate(
            &file,
            &std,
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        let ex = &r.calibration.excluded_standards;
        assert_eq!(ex.len(), 1);
        assert_eq!(ex[0].sample, "s3");
        assert!(ex[0].reason.contains("role `exclude`"));
        assert_eq!(r.calibration.n_standards, 3);
    }

    #[test]
    fn samples_must_match_both_ways() {
        let (file, _) = clean_series(&[2e-5, 4e-5, 6e-5]);
        let e = calibrate(
            &file,
            &standards("sample,concentration\nblank,0\ns0,2e-5\ns1,4e-5\n"),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap_err();
        assert!(e.to_string().contains("no row for 's2'"), "{e}");
        let e = calibrate(
            &file,
            &standards("sample,concentration\nblank,0\ns0,2e-5\ns1,4e-5\ns2,6e-5\nzz,1\n"),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap_err();
        assert!(e.to_string().contains("'zz' (line 6)"), "{e}");
    }

    #[test]
    fn single_level_and_all_blank_are_errors() {
        let (file, _) = clean_series(&[2e-5, 2e-5, 2e-5]);
        let e = calibrate(
            &file,
            &standards("sample,concentration\nblank,0\ns0,2e-5\ns1,2e-5\ns2,2e-5\n"),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap_err();
        assert!(
            e.to_string().contains("2 or more different concentrations"),
            "{e}"
        );
        let e = calibrate(
            &file,
            &standards("sample,concentration\nblank,0\ns0,0\ns1,0\ns2,0\n"),
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap_err();
        assert!(e.to_string().contains("every concentration"), "{e}");
    }

    #[test]
    fn component_carries_the_calibration() {
        let (file, std) = clean_series(&[2e-5, 4e-5, 6e-5, 8e-5]);
        let r = calibrate(
            &file,
            &std,
            &CalibrationOptions::default(),
            &Provenance::default(),
        )
        .unwrap();
        let c = r
            .component("dye", Some(500.0), None, Conditions::default())
            .unwrap();
        let back = Component::from_toml(&c.to_toml(), "dye.toml").unwrap();
        assert_eq!(back.source.kind, "calibration");
        assert_eq!(back.calibration(), Some(r.calibration.clone()));
        assert_eq!(
            back.epsilon_std_error_l_per_mol_cm.map(|v| v.len()),
            Some(3)
        );
    }
}
