//! The emission fit driver: references at one excitation, the optional
//! Raman term, the inner-filter correction, and per-sample results.
//!
//! With `--absorbance model` the correction needs the concentrations it
//! corrects: the fit starts uncorrected, predicts A(λ) = Σ εᵢ(λ)·cᵢ per cm
//! from the absorbance references, corrects, refits, and repeats until no
//! concentration moves by more than [`MODEL_TOLERANCE`] of the largest
//! (a fixed-point iteration; the factor is smooth and close to one over the
//! range where the correction holds, so it converges in a few steps).

use super::inner_filter::{FLAG_INNER_FILTER_HIGH, Geometry};
use super::raman;
use crate::diagnostics;
use crate::error::{Error, Result};
use crate::fit::{self, FailedSample, FitOptions, FitReport, Model, Outcome, SampleResult};
use crate::input::spectra::{Block, SpectraFile};
use crate::reference::component::interpolate;
use crate::reference::{Component, ReferenceSet};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// Most fit–correct rounds with `--absorbance model`.
pub const MAX_MODEL_ITERATIONS: usize = 50;
/// Relative change of the concentrations at which the rounds stop.
pub const MODEL_TOLERANCE: f64 = 1e-7;

/// Absorbance spectra measured on the samples, by sample name, as decadic
/// absorbance per cm.
#[derive(Debug, Clone, Default)]
pub struct MeasuredAbsorbance {
    by_name: HashMap<String, (Vec<f64>, Vec<f64>)>,
}

impl MeasuredAbsorbance {
    /// The spectra of `file`, measured over `pathlength_cm`. Rows that could
    /// not be read are left out (their samples then fail by name).
    pub fn from_file(file: &SpectraFile, pathlength_cm: f64) -> Result<Self> {
        if !(pathlength_cm.is_finite() && pathlength_cm > 0.0) {
            return Err(Error::Invalid(format!(
                "absorbance pathlength {pathlength_cm} cm: expected a positive number of cm"
            )));
        }
        let mut by_name = HashMap::new();
        for block in &file.blocks {
            let w = block.grid.wavelengths_nm().to_vec();
            for (i, id) in block.ids.iter().enumerate() {
                let a = block.row(i).iter().map(|v| v / pathlength_cm).collect();
                by_name.insert(id.clone(), (w.clone(), a));
            }
        }
        Ok(MeasuredAbsorbance { by_name })
    }
}

/// Where the absorbance for the inner-filter correction comes from.
#[derive(Debug, Clone, Default)]
pub enum AbsorbanceSource {
    /// None: no correction, no flag.
    #[default]
    None,
    /// Measured spectra of the same samples (matched by name).
    Measured(MeasuredAbsorbance),
    /// Predicted from the components' absorptivity curves and the fitted
    /// concentrations, iterated to agreement.
    Model,
}

/// Options of an emission fit.
#[derive(Debug, Clone)]
pub struct EmissionOptions {
    excitation_nm: f64,
    geometry: Geometry,
    absorbance: AbsorbanceSource,
    raman: bool,
    fit: FitOptions,
}

impl EmissionOptions {
    /// Options for excitation at `excitation_nm`, validated.
    pub fn new(
        excitation_nm: f64,
        geometry: Geometry,
        absorbance: AbsorbanceSource,
    ) -> Result<Self> {
        if !(excitation_nm.is_finite() && excitation_nm > 0.0) {
            return Err(Error::Invalid(format!(
                "excitation {excitation_nm} nm: expected a positive wavelength in nm"
            )));
        }
        Ok(EmissionOptions {
            excitation_nm,
            geometry,
            absorbance,
            raman: false,
            fit: FitOptions::default(),
        })
    }

    /// Fit the water Raman band as a free non-negative term.
    pub fn with_raman(mut self, raman: bool) -> Self {
        self.raman = raman;
        self
    }

    /// Baseline and window (the pathlength is not used: emission curves are
    /// per mol/L in the cell they were measured in).
    pub fn with_fit(mut self, fit: FitOptions) -> Self {
        self.fit = FitOptions {
            pathlength_cm: 1.0,
            ..fit
        };
        self
    }

    /// The excitation wavelength, nm.
    pub fn excitation_nm(&self) -> f64 {
        self.excitation_nm
    }
}

/// The fitted Raman band of one sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RamanResult {
    /// Centre of the band, nm.
    pub band_nm: f64,
    /// Height of the band, in the input's intensity units.
    pub height_intensity: f64,
    /// Its standard error, same units.
    pub std_error_intensity: Option<f64>,
}

/// The inner-filter correction applied to one sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct InnerFilterResult {
    /// Geometry name (`none` when only the flag was checked).
    pub geometry: String,
    /// Absorbance at the excitation over the excitation path, AU.
    pub excitation_absorbance_au: f64,
    /// The absorbance above which the sample is flagged, AU.
    pub limit_au: f64,
    /// Largest factor F_corr/F_obs over the fitted range.
    pub max_factor: f64,
    /// Fit–correct rounds (`--absorbance model`; 1 for measured).
    pub rounds: usize,
}

/// One sample's emission result.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct EmissionSample {
    /// The fit, as for absorbance (residuals in intensity units).
    pub result: SampleResult,
    /// The Raman term, when fitted.
    pub raman: Option<RamanResult>,
    /// The inner-filter correction, when absorbance was known.
    pub inner_filter: Option<InnerFilterResult>,
}

/// One sample's outcome, in input order.
#[derive(Debug, Clone)]
pub enum EmissionOutcome {
    /// Fitted.
    Fitted(Box<EmissionSample>),
    /// Not fitted.
    Failed(FailedSample),
}

/// Everything an emission fit produced.
#[derive(Debug, Clone)]
pub struct EmissionReport {
    /// Outcomes in input order.
    pub outcomes: Vec<EmissionOutcome>,
    /// Run-level warnings.
    pub warnings: Vec<String>,
    /// The fluorophores fitted, in column order (the Raman term excluded).
    pub component_names: Vec<String>,
    /// Excitation wavelength, nm.
    pub excitation_nm: f64,
}

impl EmissionReport {
    /// The component results as an absorbance-style report, for the shared
    /// table, CSV and JSON writers.
    pub fn fit_report(&self) -> FitReport {
        let outcomes = self
            .outcomes
            .iter()
            .map(|o| match o {
                EmissionOutcome::Fitted(s) => Outcome::Fitted(s.result.clone()),
                EmissionOutcome::Failed(f) => Outcome::Failed(f.clone()),
            })
            .collect();
        FitReport {
            outcomes,
            warnings: self.warnings.clone(),
            component_names: self.component_names.clone(),
        }
    }
}

/// The emission curves of `refs` at `excitation_nm` as a reference set
/// (intensity per mol/L in place of ε). A component without a curve there
/// is an error naming it and the excitations it has.
pub fn emission_set(refs: &ReferenceSet, excitation_nm: f64) -> Result<ReferenceSet> {
    let mut out = Vec::with_capacity(refs.components.len());
    for c in &refs.components {
        let Some(curve) = c.emission_at(excitation_nm) else {
            let have: Vec<String> = c
                .emission_curves()
                .iter()
                .map(|e| format!("{} nm", e.excitation_nm))
                .collect();
            return Err(Error::Invalid(format!(
                "component '{}' has no emission curve at excitation {excitation_nm} nm (it has {}): expected references measured at the run's excitation",
                c.name,
                if have.is_empty() {
                    "none".to_string()
                } else {
                    have.join(", ")
                }
            )));
        };
        let mut e = Component::from_curve(
            &c.name,
            curve.grid.wavelengths_nm().to_vec(),
            curve.intensity_per_mol_per_l,
            "emission",
        )?;
        e.molar_mass_g_per_mol = c.molar_mass_g_per_mol;
        out.push(e);
    }
    Ok(ReferenceSet { components: out })
}

/// Fit every emission spectrum of `file`.
pub fn fit_emission(
    file: &SpectraFile,
    refs: &ReferenceSet,
    options: &EmissionOptions,
    checks: &diagnostics::Options,
) -> Result<EmissionReport> {
    checks.validate()?;
    // The saturation ceiling is in AU, and the estimated weights model noise
    // that grows as 10^A: neither has a meaning for intensities.
    let checks = diagnostics::Options {
        max_absorbance_au: None,
        weights: diagnostics::Weights::None,
        ..checks.clone()
    };
    let set = emission_set(refs, options.excitation_nm)?;
    let mut warnings = Vec::new();
    if matches!(options.absorbance, AbsorbanceSource::None) {
        warnings.push("no inner-filter correction: no absorbance given (--absorbance FILE or --absorbance model); valid only where the samples absorb less than 0.05 at the excitation".to_string());
    }
    let mut slots: Vec<Option<EmissionOutcome>> = (0..file.n_samples).map(|_| None).collect();
    for f in &file.failures {
        slots[f.position] = Some(failed(&f.sample, f.error.to_string()));
    }
    for block in &file.blocks {
        let outcomes =
            GridFit::new(block, &set, refs, options, &checks).map(|b| b.fit_all(&mut warnings));
        match outcomes {
            Ok(results) => {
                for (pos, r) in block.positions.iter().zip(results) {
                    slots[*pos] = Some(r);
                }
            }
            Err(e) if file.blocks.len() == 1 => return Err(e),
            Err(e) => {
                for (pos, id) in block.positions.iter().zip(&block.ids) {
                    slots[*pos] = Some(failed(id, e.to_string()));
                }
            }
        }
    }
    Ok(EmissionReport {
        outcomes: slots
            .into_iter()
            .map(|s| s.unwrap_or_else(|| failed("", "sample was not processed".into())))
            .collect(),
        warnings,
        component_names: set.names().iter().map(|s| s.to_string()).collect(),
        excitation_nm: options.excitation_nm,
    })
}

fn failed(sample: &str, error: String) -> EmissionOutcome {
    EmissionOutcome::Failed(FailedSample {
        sample: sample.to_string(),
        error,
    })
}

/// One grid's model and what the correction needs on that grid.
struct GridFit<'a> {
    block: &'a Block,
    model: Model,
    options: &'a EmissionOptions,
    /// Number of fluorophores (the Raman term, if any, follows them).
    n_fluorophores: usize,
    raman_band_nm: Option<f64>,
    /// ε per component at the design's wavelengths and at the excitation
    /// (`--absorbance model` only), L·mol⁻¹·cm⁻¹.
    epsilon: Option<Absorptivities>,
}

struct Absorptivities {
    at_emission: Vec<Vec<f64>>,
    at_excitation: Vec<f64>,
}

impl<'a> GridFit<'a> {
    fn new(
        block: &'a Block,
        set: &ReferenceSet,
        absorbance_refs: &ReferenceSet,
        options: &'a EmissionOptions,
        checks: &diagnostics::Options,
    ) -> Result<Self> {
        let mut set = set.clone();
        let n_fluorophores = set.components.len();
        let mut raman_band_nm = None;
        if options.raman {
            set.components
                .push(raman_component(block, options.excitation_nm)?);
            raman_band_nm = raman::band_nm(options.excitation_nm, raman::WATER_RAMAN_SHIFT_PER_CM);
        }
        let model = Model::with_checks(&block.grid, &set, &options.fit, checks)?;
        let epsilon = match options.absorbance {
            AbsorbanceSource::Model => Some(absorptivities(
                absorbance_refs,
                &model.design.wavelengths_nm,
                options.excitation_nm,
            )?),
            _ => None,
        };
        Ok(GridFit {
            block,
            model,
            options,
            n_fluorophores,
            raman_band_nm,
            epsilon,
        })
    }

    fn fit_all(&self, warnings: &mut Vec<String>) -> Vec<EmissionOutcome> {
        for w in self
            .model
            .method_warning()
            .into_iter()
            .chain(self.model.separability_warnings())
            .chain(self.model.check_warnings().iter().cloned())
        {
            if !warnings.contains(&w) {
                warnings.push(w);
            }
        }
        let idx: Vec<usize> = (0..self.block.len()).collect();
        let out: Vec<Vec<EmissionOutcome>> = idx
            .par_chunks(fit::CHUNK)
            .map(|chunk| {
                let mut ws = self.model.prepared.workspace();
                chunk
                    .iter()
                    .map(|&i| self.fit_sample(&self.block.ids[i], self.block.row(i), &mut ws))
                    .collect()
            })
            .collect();
        out.into_iter().flatten().collect()
    }

    fn fit_sample(
        &self,
        id: &str,
        row: &[f64],
        ws: &mut crate::solver::Workspace,
    ) -> EmissionOutcome {
        let fitted = match &self.options.absorbance {
            AbsorbanceSource::None => {
                plain_result(self.model.fit_one(id, row, 1.0, ws)).map(|r| (r, None))
            }
            AbsorbanceSource::Measured(m) => self.fit_measured(m, id, row, ws),
            AbsorbanceSource::Model => self.fit_modelled(id, row, ws),
        };
        match fitted {
            Ok((r, inner)) => EmissionOutcome::Fitted(Box::new(self.finish(r, inner))),
            Err(error) => failed(id, error),
        }
    }

    /// Correct with the sample's measured absorbance, then fit.
    fn fit_measured(
        &self,
        m: &MeasuredAbsorbance,
        id: &str,
        row: &[f64],
        ws: &mut crate::solver::Workspace,
    ) -> std::result::Result<(SampleResult, Option<InnerFilterResult>), String> {
        let Some((w, a)) = m.by_name.get(id) else {
            return Err(format!(
                "no absorbance spectrum named '{id}' in the --absorbance file: expected one per emission sample, matched by name"
            ));
        };
        let d = &self.model.design;
        let at = |x: f64| {
            interpolate(w, a, x).ok_or_else(|| {
                format!(
                    "the absorbance spectrum of '{id}' covers {}–{} nm, not {x} nm: expected it to cover the excitation and the fitted emission range",
                    w[0],
                    w[w.len() - 1]
                )
            })
        };
        let a_ex = at(self.options.excitation_nm)?;
        let a_em = d
            .wavelengths_nm
            .iter()
            .map(|&x| at(x))
            .collect::<std::result::Result<Vec<f64>, String>>()?;
        let (corrected, info) = self.correct(row, a_ex, &a_em, 1);
        let r = plain_result(self.model.fit_one(id, &corrected, 1.0, ws))?;
        Ok((r, Some(info)))
    }

    /// Fit, predict the absorbance from the result, correct, refit: until
    /// the concentrations agree.
    fn fit_modelled(
        &self,
        id: &str,
        row: &[f64],
        ws: &mut crate::solver::Workspace,
    ) -> std::result::Result<(SampleResult, Option<InnerFilterResult>), String> {
        let eps = self
            .epsilon
            .as_ref()
            .ok_or("no absorptivities for the model")?;
        let mut r = plain_result(self.model.fit_one(id, row, 1.0, ws))?;
        for round in 1..=MAX_MODEL_ITERATIONS {
            let c: Vec<f64> = r.components[..self.n_fluorophores]
                .iter()
                .map(|x| x.concentration_mol_per_l)
                .collect();
            let dot = |e: &[f64]| e.iter().zip(&c).map(|(e, c)| e * c).sum::<f64>();
            let a_ex = dot(&eps.at_excitation);
            let a_em: Vec<f64> = eps.at_emission.iter().map(|e| dot(e)).collect();
            let (corrected, info) = self.correct(row, a_ex, &a_em, round);
            let next = plain_result(self.model.fit_one(id, &corrected, 1.0, ws))?;
            let top = c.iter().fold(f64::MIN_POSITIVE, |m, &v| m.max(v));
            let moved = next.components[..self.n_fluorophores]
                .iter()
                .zip(&c)
                .fold(0.0f64, |m, (n, o)| {
                    m.max((n.concentration_mol_per_l - o).abs())
                });
            r = next;
            if moved <= MODEL_TOLERANCE * top || round == MAX_MODEL_ITERATIONS {
                if moved > MODEL_TOLERANCE * top {
                    r.flags.push(FLAG_MODEL_NOT_CONVERGED.to_string());
                }
                return Ok((r, Some(info)));
            }
        }
        Ok((r, None))
    }

    /// The full row with the design's points multiplied by the factor.
    fn correct(
        &self,
        row: &[f64],
        a_ex: f64,
        a_em: &[f64],
        rounds: usize,
    ) -> (Vec<f64>, InnerFilterResult) {
        let d = &self.model.design;
        let g = self.options.geometry;
        let mut out = row.to_vec();
        let mut max_factor = 1.0f64;
        for (v, &em) in out[d.start..d.end].iter_mut().zip(a_em) {
            let f = g.factor(a_ex, em);
            max_factor = max_factor.max(f);
            *v *= f;
        }
        let info = InnerFilterResult {
            geometry: g.name().to_string(),
            excitation_absorbance_au: g.excitation_absorbance_au(a_ex),
            limit_au: g.limit_au(),
            max_factor,
            rounds,
        };
        (out, info)
    }

    /// Take the Raman term out of the components, drop the flags that
    /// speak of absorbance, add the inner-filter flag.
    fn finish(&self, mut r: SampleResult, inner: Option<InnerFilterResult>) -> EmissionSample {
        r.flags
            .retain(|f| f != fit::FLAG_HIGH_ABSORBANCE && f != fit::FLAG_LOW_SIGNAL);
        let raman = self.raman_band_nm.and_then(|band_nm| {
            let term = r.components.pop()?;
            Some(RamanResult {
                band_nm,
                height_intensity: term.concentration_mol_per_l,
                std_error_intensity: term.std_error_mol_per_l,
            })
        });
        if raman.is_some() {
            refraction(&mut r);
        }
        if let Some(i) = &inner
            && i.excitation_absorbance_au > i.limit_au
        {
            r.flags.push(FLAG_INNER_FILTER_HIGH.to_string());
        }
        EmissionSample {
            result: r,
            raman,
            inner_filter: inner,
        }
    }
}

/// Flag: `--absorbance model` did not reach agreement in
/// [`MAX_MODEL_ITERATIONS`] rounds.
pub const FLAG_MODEL_NOT_CONVERGED: &str = "absorbance-model-not-converged";

fn plain_result(o: Outcome) -> std::result::Result<SampleResult, String> {
    match o {
        Outcome::Fitted(r) => Ok(r),
        Outcome::Failed(f) => Err(f.error),
    }
}

/// Recompute the blend fractions among the fluorophores only.
fn refraction(r: &mut SampleResult) {
    let total: f64 = r.components.iter().map(|c| c.concentration_mol_per_l).sum();
    let masses: Option<Vec<f64>> = r
        .components
        .iter()
        .map(|c| c.concentration_mg_per_l)
        .collect();
    let mass_total = masses.as_ref().map(|m| m.iter().sum::<f64>());
    for (i, c) in r.components.iter_mut().enumerate() {
        c.mole_fraction = (total > 0.0).then(|| c.concentration_mol_per_l / total);
        c.mass_fraction = match (&masses, mass_total) {
            (Some(m), Some(t)) if t > 0.0 => Some(m[i] / t),
            _ => None,
        };
    }
}

/// The unit-height Raman band on the block's grid, as a component.
fn raman_component(block: &Block, excitation_nm: f64) -> Result<Component> {
    let w = block.grid.wavelengths_nm().to_vec();
    let shape = raman::shape(&w, excitation_nm).ok_or_else(|| {
        Error::Invalid(format!(
            "excitation {excitation_nm} nm: the water Raman band would lie beyond zero wavenumber"
        ))
    })?;
    if shape.iter().all(|v| *v < 1e-6) {
        return Err(Error::Invalid(format!(
            "the water Raman band for excitation {excitation_nm} nm ({:.1} nm) lies outside the spectra ({}–{} nm): leave out --raman",
            raman::band_nm(excitation_nm, raman::WATER_RAMAN_SHIFT_PER_CM).unwrap_or(f64::NAN),
            w[0],
            w[w.len() - 1]
        )));
    }
    Component::from_curve(raman::RAMAN_NAME, w, shape, "raman")
}

/// ε of each component at the design's wavelengths and the excitation.
fn absorptivities(refs: &ReferenceSet, w: &[f64], excitation_nm: f64) -> Result<Absorptivities> {
    let mut at_emission = vec![Vec::with_capacity(refs.components.len()); w.len()];
    let mut at_excitation = Vec::with_capacity(refs.components.len());
    for c in &refs.components {
        let (lo, hi) = c.range_nm();
        let missing = || {
            Error::Invalid(format!(
                "--absorbance model: the absorptivity curve of '{}' covers {lo}–{hi} nm: expected it to cover the excitation ({excitation_nm} nm) and the fitted emission range ({}–{} nm)",
                c.name,
                w[0],
                w[w.len() - 1]
            ))
        };
        at_excitation.push(c.epsilon_at(excitation_nm).ok_or_else(missing)?);
        for (row, &x) in at_emission.iter_mut().zip(w) {
            row.push(c.epsilon_at(x).ok_or_else(missing)?);
        }
    }
    Ok(Absorptivities {
        at_emission,
        at_excitation,
    })
}
