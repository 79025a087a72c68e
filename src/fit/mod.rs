//! Fitting and diagnostics (stages 3–5 joined): from read spectra and a
//! reference set to per-sample results.
//!
//! In: a [`SpectraFile`], a [`ReferenceSet`] and [`FitOptions`]. Out: a
//! [`FitReport`] with, per sample, concentrations cᵢ (mol/L) and their
//! standard errors from the model
//!
//! ```text
//! A(λ) = l·Σ εᵢ(λ)·cᵢ + b₀ + b₁·(λ − λ_mid),   cᵢ ≥ 0,
//! ```
//!
//! blend ratios (mole and mass fractions), baseline terms, residual RMS
//! (AU), R² and flags; plus run-level warnings. Spectra are solved in
//! parallel across samples in fixed-size chunks and collected in input
//! order, so output is identical whatever the thread count.
//!
//! Beside the fit, [`diagnostics`] checks each residual against the noise
//! (flag `unexplained-absorbance`), masks points above a saturation ceiling
//! (flags `saturation-masked`, `dilute-and-remeasure`) and, on request,
//! screens candidate components against flagged residuals.

use crate::diagnostics::{self, SerialMoments, View, mask, screen::Screener};
use crate::error::{Error, Result};
use crate::input::spectra::{Block, SpectraFile};
use crate::preprocess::{self, Baseline};
use crate::reference::ReferenceSet;
use crate::solver::{Method, Prepared, Status};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

mod spikes;
mod stream;
mod weighted;

pub use stream::{StreamError, fit_stream, fit_stream_with, merge_chunk};

pub use spikes::FLAG_SPIKE;

/// Spectra solved together in one chunk (warm start runs within a chunk).
/// Fixed, so results do not depend on the number of threads.
pub const CHUNK: usize = 256;

/// Above this absorbance (AU) readings are unreliable (stray light, too
/// little light reaching the detector): common practice, no single source;
/// the usual advice is to dilute and re-measure.
pub const HIGH_ABSORBANCE_AU: f64 = 2.0;

/// Below this peak absorbance (AU) a spectrum carries too little signal for
/// a meaningful blend ratio (common practice, no source).
pub const LOW_SIGNAL_AU: f64 = 0.01;

/// Options of a fit.
#[derive(Debug, Clone, Copy)]
pub struct FitOptions {
    /// Baseline terms fitted beside the components.
    pub baseline: Baseline,
    /// Wavelength window, nm (further restricts the common range).
    pub window_nm: Option<(f64, f64)>,
    /// Optical pathlength, cm.
    pub pathlength_cm: f64,
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions {
            baseline: Baseline::Offset,
            window_nm: None,
            pathlength_cm: 1.0,
        }
    }
}

/// One component's result in one sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ComponentResult {
    /// Component name (shared with the model: one allocation per run, not
    /// per sample).
    pub name: std::sync::Arc<str>,
    /// Concentration, mol/L.
    pub concentration_mol_per_l: f64,
    /// Standard error of the concentration, mol/L; `None` (JSON null) only
    /// when the fit has as many unknowns as wavelengths, so no noise estimate.
    pub std_error_mol_per_l: Option<f64>,
    /// Concentration, mg/L (when the molar mass is known).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub concentration_mg_per_l: Option<f64>,
    /// Standard error, mg/L (when the molar mass is known).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub std_error_mg_per_l: Option<f64>,
    /// Mole fraction among the fitted components (blend ratio).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub mole_fraction: Option<f64>,
    /// Mass fraction among the fitted components (all molar masses known).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub mass_fraction: Option<f64>,
}

/// Fitted baseline terms.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct BaselineResult {
    /// Offset, AU, at `reference_nm`.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub offset_au: Option<f64>,
    /// Slope, AU/nm.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub slope_au_per_nm: Option<f64>,
    /// Wavelength at which the offset applies (centre of the range), nm.
    pub reference_nm: f64,
}

/// The result for one sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct SampleResult {
    /// Sample identifier.
    pub sample: String,
    /// One entry per component, in reference-set order.
    pub components: Vec<ComponentResult>,
    /// Residual root mean square, AU.
    pub residual_rms: f64,
    /// Coefficient of determination of the fit (absent for a flat spectrum).
    pub r_squared: Option<f64>,
    /// Baseline terms.
    pub baseline: BaselineResult,
    /// Wavelength range used, nm: [low, high].
    pub range_nm: [f64; 2],
    /// Number of wavelengths used.
    pub n_points: usize,
    /// Pathlength used, cm.
    pub pathlength_cm: f64,
    /// Solver method (`normal-equations` or `lawson-hanson`).
    pub solver: std::borrow::Cow<'static, str>,
    /// Flags raised for this sample.
    pub flags: Vec<String>,
    /// Residual diagnostics (absent when switched off).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub diagnostics: Option<Box<diagnostics::Residual>>,
    /// Saturation masking (absent when no point was masked).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub masking: Option<Box<mask::Masking>>,
    /// Wavelengths of the readings left out as spikes, nm (flag `spike`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub spikes_nm: Option<Vec<f64>>,
    /// Candidate screening (flagged samples, with `--screen-with`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub screening: Option<Box<diagnostics::screen::Screening>>,
    /// Lot QC (`--target`, `--colour`): the JSON keys `target`, `colour`,
    /// `colour_note` and `correction` beside the others.
    #[serde(flatten, default, deserialize_with = "crate::target::qc_or_none")]
    pub qc: Option<Box<crate::target::Qc>>,
}

/// A sample that could not be fitted.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FailedSample {
    /// Sample identifier (as far as it could be read).
    pub sample: String,
    /// What went wrong.
    pub error: String,
}

/// One sample's outcome, in input order.
#[derive(Debug, Clone)]
pub enum Outcome {
    /// Fitted.
    Fitted(SampleResult),
    /// Not fitted.
    Failed(FailedSample),
}

/// Everything a fit produced.
#[derive(Debug, Clone)]
pub struct FitReport {
    /// Outcomes in input order.
    pub outcomes: Vec<Outcome>,
    /// Run-level warnings.
    pub warnings: Vec<String>,
    /// Names of the components, in column order.
    pub component_names: Vec<String>,
}

impl FitReport {
    /// Number of samples that failed.
    pub fn n_failed(&self) -> usize {
        self.outcomes
            .iter()
            .filter(|o| matches!(o, Outcome::Failed(_)))
            .count()
    }
}

/// Flags: the solver stopped at its iteration limit.
pub const FLAG_ITERATION_LIMIT: &str = "solver-iteration-limit";
/// Flags: some points in the range exceed [`HIGH_ABSORBANCE_AU`].
pub const FLAG_HIGH_ABSORBANCE: &str = "high-absorbance";
/// Flags: the peak absorbance is below [`LOW_SIGNAL_AU`].
pub const FLAG_LOW_SIGNAL: &str = "low-signal";
/// Flags: a concentration lies above the top of its component's calibrated
/// range (the highest standard used by `unblend calibrate`).
pub const FLAG_BEYOND_CALIBRATED_RANGE: &str = "beyond-calibrated-range";

/// Flags: as many unknowns as wavelengths, so no standard errors.
pub const FLAG_NO_ERROR_ESTIMATE: &str = "no-error-estimate";

/// Fit every spectrum of a file, with the default checks
/// ([`diagnostics::Options::default`]).
pub fn fit_file(
    file: &SpectraFile,
    refs: &ReferenceSet,
    options: &FitOptions,
) -> Result<FitReport> {
    fit_file_with(file, refs, options, &diagnostics::Options::default())
}

/// Fit every spectrum of a file with the given checks.
pub fn fit_file_with(
    file: &SpectraFile,
    refs: &ReferenceSet,
    options: &FitOptions,
    checks: &diagnostics::Options,
) -> Result<FitReport> {
    checks.validate()?;
    if !(options.pathlength_cm.is_finite() && options.pathlength_cm > 0.0) {
        return Err(Error::Invalid(format!(
            "pathlength {} cm: expected a positive number of cm",
            options.pathlength_cm
        )));
    }
    let mut slots: Vec<Option<Outcome>> = (0..file.n_samples).map(|_| None).collect();
    let mut warnings = Vec::new();
    for f in &file.failures {
        slots[f.position] = Some(Outcome::Failed(FailedSample {
            sample: f.sample.clone(),
            error: f.error.to_string(),
        }));
    }
    for block in &file.blocks {
        match fit_block(block, refs, options, checks, &mut warnings) {
            Ok(results) => {
                for (pos, r) in block.positions.iter().zip(results) {
                    slots[*pos] = Some(r);
                }
            }
            // With one grid for the whole file, a model that cannot be built
            // is a problem of the run, not of each sample: say it once.
            Err(e) if file.blocks.len() == 1 => return Err(e),
            Err(e) => {
                let msg = e.to_string();
                for (pos, id) in block.positions.iter().zip(&block.ids) {
                    slots[*pos] = Some(Outcome::Failed(FailedSample {
                        sample: id.clone(),
                        error: msg.clone(),
                    }));
                }
            }
        }
    }
    let outcomes = slots
        .into_iter()
        .map(|s| {
            s.unwrap_or_else(|| {
                Outcome::Failed(FailedSample {
                    sample: String::new(),
                    error: "sample was not processed".into(),
                })
            })
        })
        .collect();
    Ok(FitReport {
        outcomes,
        warnings,
        component_names: refs.names().iter().map(|s| s.to_string()).collect(),
    })
}

/// A design and its prepared solver for one grid, reusable across spectra.
pub struct Model {
    /// The design (range, columns).
    pub design: preprocess::Design,
    /// The prepared solver.
    pub prepared: Prepared,
    molar_masses: Vec<Option<f64>>,
    names: Vec<String>,
    /// The component names as shared strings for the results.
    shared_names: Vec<std::sync::Arc<str>>,
    /// Whether the design's wavelengths are evenly spaced (noise estimate).
    uniform_step: bool,
    column_names: Vec<String>,
    checks: diagnostics::Options,
    moments: SerialMoments,
    screener: Option<Screener>,
    check_warnings: Vec<String>,
    /// Top of each component's calibrated range, mol/L (calibrated ones).
    calibrated_max_mol_per_l: Vec<Option<f64>>,
}

impl Model {
    /// Build the plain model for a grid: no masking, no residual checks
    /// (as before the checks existed). [`Model::with_checks`] adds them;
    /// [`fit_file`] and [`fit_stream`] use the default checks.
    pub fn new(
        grid: &crate::spectrum::Grid,
        refs: &ReferenceSet,
        options: &FitOptions,
    ) -> Result<Self> {
        Self::with_checks(grid, refs, options, &diagnostics::Options::off())
    }

    /// Build the model for a grid with the given checks.
    pub fn with_checks(
        grid: &crate::spectrum::Grid,
        refs: &ReferenceSet,
        options: &FitOptions,
        checks: &diagnostics::Options,
    ) -> Result<Self> {
        let design = preprocess::design(grid, refs, options.baseline, options.window_nm)?;
        let mut names: Vec<String> = refs.names().iter().map(|s| s.to_string()).collect();
        names.push("baseline offset".into());
        names.push("baseline slope".into());
        names.truncate(design.n_columns());
        let prepared = Prepared::new(
            &design.columns,
            design.n_points(),
            design.n_columns(),
            design.n_components,
            &names,
        )?;
        let moments = SerialMoments::new(&prepared.columns, design.n_points(), design.n_columns());
        let (screener, check_warnings) = match &checks.candidates {
            Some(c) if checks.residual.is_some() => {
                let (s, w) = Screener::new(
                    &design.wavelengths_nm,
                    &design.columns,
                    design.n_components,
                    &names,
                    c,
                );
                (Some(s), w)
            }
            _ => (None, Vec::new()),
        };
        let uniform_step = diagnostics::uniform_step(&design.wavelengths_nm);
        Ok(Model {
            design,
            prepared,
            column_names: names,
            checks: checks.clone(),
            moments,
            screener,
            check_warnings,
            molar_masses: refs
                .components
                .iter()
                .map(|c| c.molar_mass_g_per_mol)
                .collect(),
            names: refs.names().iter().map(|s| s.to_string()).collect(),
            shared_names: refs
                .names()
                .iter()
                .map(|s| std::sync::Arc::from(*s))
                .collect(),
            uniform_step,
            calibrated_max_mol_per_l: refs
                .components
                .iter()
                .map(|c| c.calibration().map(|k| k.concentration_max_mol_per_l))
                .collect(),
        })
    }

    /// `collinear-references` warnings for this model's reference set over
    /// its range (see [`crate::separability`]).
    pub fn separability_warnings(&self) -> Vec<String> {
        let analysis = crate::separability::analyse(&self.design);
        crate::separability::collinearity_warnings(
            &analysis,
            &self.names,
            self.design.range_nm(),
            self.design.baseline,
        )
    }

    /// A warning to show when this model was solved with the fallback.
    pub fn method_warning(&self) -> Option<String> {
        (self.prepared.method() == Method::LawsonHanson).then(|| {
            let (lo, hi) = self.design.range_nm();
            format!(
                "the reference set is poorly conditioned over {lo}–{hi} nm (condition number {:.3e} after column scaling): solved with Lawson–Hanson on the full matrix instead of the normal equations; expect larger uncertainties",
                self.prepared.condition()
            )
        })
    }

    /// Warnings from preparing the checks (candidates left out).
    pub fn check_warnings(&self) -> &[String] {
        &self.check_warnings
    }

    /// Fit one full-grid spectrum (its absorbances on the model's grid).
    pub fn fit_one(
        &self,
        sample: &str,
        full_row: &[f64],
        pathlength_cm: f64,
        ws: &mut crate::solver::Workspace,
    ) -> Outcome {
        self.fit_named(sample.to_string(), full_row, pathlength_cm, ws)
    }

    /// [`Model::fit_one`] for a name the caller owns (it moves into the
    /// result: no copy per sample).
    fn fit_named(
        &self,
        sample: String,
        full_row: &[f64],
        pathlength_cm: f64,
        ws: &mut crate::solver::Workspace,
    ) -> Outcome {
        let d = &self.design;
        let a = &full_row[d.start..d.end];
        if let Some(ceiling) = self.checks.max_absorbance_au
            && let Some(keep) = mask::keep(a, ceiling)
        {
            return self.fit_masked(&sample, a, &keep, ceiling, pathlength_cm);
        }
        match self.prepared.solve_here(a, ws) {
            Ok(sol) => {
                if let Some(out) = self.refit_without_spikes(&sample, a, sol, pathlength_cm) {
                    return out;
                }
                if let Some(out) = self.refit_weighted(&sample, a, sol, pathlength_cm) {
                    return out;
                }
                let mut r = self.assemble(sample, a, sol, pathlength_cm);
                let view = View {
                    wavelengths_nm: &d.wavelengths_nm,
                    columns: &d.columns,
                    n_components: d.n_components,
                    moments: &self.moments,
                    uniform_step: self.uniform_step,
                };
                self.check(&mut r, view, a, sol, None);
                Outcome::Fitted(r)
            }
            Err(e) => Outcome::Failed(FailedSample {
                sample,
                error: e.to_string(),
            }),
        }
    }

    /// Fit a spectrum on the points under the saturation ceiling only.
    fn fit_masked(
        &self,
        sample: &str,
        a: &[f64],
        keep: &[bool],
        ceiling: f64,
        l_cm: f64,
    ) -> Outcome {
        let d = &self.design;
        let masking = mask::describe(&d.wavelengths_nm, &d.columns, &self.names, keep, ceiling);
        let fail = |why: String| {
            Outcome::Failed(FailedSample {
                sample: sample.to_string(),
                error: format!(
                    "{} point(s) read above {ceiling} AU and were masked: {why}; dilute and re-measure",
                    masking.n_masked
                ),
            })
        };
        let a_kept = mask::select(a, keep);
        let w_kept = mask::select(&d.wavelengths_nm, keep);
        let cols = mask::rows(&d.columns, d.n_points(), keep);
        let prepared = match Prepared::new(
            &cols,
            a_kept.len(),
            d.n_columns(),
            d.n_components,
            &self.column_names,
        ) {
            Ok(p) => p,
            Err(e) => return fail(e.to_string()),
        };
        let mut ws = prepared.workspace();
        let sol = match prepared.solve(&a_kept, &mut ws) {
            Ok(s) => s,
            Err(e) => return fail(e.to_string()),
        };
        let mut r = self.assemble(sample.to_string(), &a_kept, &sol, l_cm);
        r.solver = std::borrow::Cow::Borrowed(prepared.method().name());
        let peak = a.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(v));
        if peak > HIGH_ABSORBANCE_AU && !r.flags.iter().any(|f| f == FLAG_HIGH_ABSORBANCE) {
            r.flags.push(FLAG_HIGH_ABSORBANCE.to_string());
        }
        r.flags.push(mask::FLAG_SATURATION_MASKED.to_string());
        if masking.dilute_and_remeasure {
            r.flags.push(mask::FLAG_DILUTE.to_string());
        }
        r.masking = Some(Box::new(masking));
        let moments = SerialMoments::new(&prepared.columns, a_kept.len(), d.n_columns());
        let view = View {
            wavelengths_nm: &w_kept,
            columns: &cols,
            n_components: d.n_components,
            moments: &moments,
            uniform_step: diagnostics::uniform_step(&w_kept),
        };
        self.check(&mut r, view, &a_kept, &sol, Some(keep));
        Outcome::Fitted(r)
    }

    /// Residual tests and, for a flagged sample, candidate screening.
    fn check(
        &self,
        r: &mut SampleResult,
        view: View<'_>,
        a: &[f64],
        sol: &crate::solver::Solution,
        keep: Option<&[bool]>,
    ) {
        let Some(opts) = &self.checks.residual else {
            return;
        };
        let res = diagnostics::examine(view, a, &sol.x, opts);
        if let Some(f) = res.std_error_factor {
            for c in &mut r.components {
                c.std_error_mol_per_l = c.std_error_mol_per_l.map(|v| v * f);
                c.std_error_mg_per_l = c.std_error_mg_per_l.map(|v| v * f);
            }
        }
        if res.flagged() {
            r.flags.push(diagnostics::FLAG_UNEXPLAINED.to_string());
            if let Some(s) = &self.screener {
                let input = diagnostics::screen::ScreenInput {
                    a,
                    wavelengths_nm: view.wavelengths_nm,
                    keep,
                    base_rss: sol.rss,
                    pathlength_cm: r.pathlength_cm,
                };
                r.screening = s.screen(input, opts).map(Box::new);
            }
        }
        r.diagnostics = Some(Box::new(res));
    }

    fn assemble(
        &self,
        sample: String,
        a: &[f64],
        sol: &crate::solver::Solution,
        l_cm: f64,
    ) -> SampleResult {
        let d = &self.design;
        let k = d.n_components;
        let n = a.len();
        let conc = |i: usize| sol.x[i] / l_cm;
        let se = |i: usize| sol.std_error[i] / l_cm;
        let total: f64 = (0..k).map(conc).sum();
        let all_masses = self.molar_masses.iter().all(Option::is_some);
        let mass_total: f64 = (0..k)
            .map(|i| conc(i) * self.molar_masses[i].unwrap_or(0.0))
            .sum();
        let components = (0..k)
            .map(|i| {
                let (c, se) = (conc(i), se(i));
                ComponentResult {
                    name: self.shared_names[i].clone(),
                    concentration_mol_per_l: c,
                    std_error_mol_per_l: se.is_finite().then_some(se),
                    concentration_mg_per_l: self.molar_masses[i].map(|m| c * m * 1000.0),
                    std_error_mg_per_l: self.molar_masses[i]
                        .filter(|_| se.is_finite())
                        .map(|m| se * m * 1000.0),
                    mole_fraction: (total > 0.0).then(|| c / total),
                    mass_fraction: (all_masses && mass_total > 0.0)
                        .then(|| c * self.molar_masses[i].unwrap_or(0.0) / mass_total),
                }
            })
            .collect();
        let baseline = BaselineResult {
            offset_au: (d.baseline.n_terms() >= 1).then(|| sol.x[k]),
            slope_au_per_nm: (d.baseline.n_terms() == 2).then(|| sol.x[k + 1] / d.half_span_nm),
            reference_nm: d.centre_nm,
        };
        let (sum, aa, peak) = moments(a);
        let sstot = aa - sum * sum / n as f64;
        let r_squared = (sstot > 0.0 && sstot.is_finite()).then(|| 1.0 - sol.rss / sstot);
        let mut flags = Vec::new();
        if sol.status == Status::IterationLimit {
            flags.push(FLAG_ITERATION_LIMIT.to_string());
        }
        if sol.std_error.iter().any(|v| v.is_nan()) {
            flags.push(FLAG_NO_ERROR_ESTIMATE.to_string());
        }
        if peak > HIGH_ABSORBANCE_AU {
            flags.push(FLAG_HIGH_ABSORBANCE.to_string());
        }
        if peak < LOW_SIGNAL_AU {
            flags.push(FLAG_LOW_SIGNAL.to_string());
        }
        if (0..k).any(|i| self.calibrated_max_mol_per_l[i].is_some_and(|m| conc(i) > m)) {
            flags.push(FLAG_BEYOND_CALIBRATED_RANGE.to_string());
        }
        let (lo, hi) = d.range_nm();
        SampleResult {
            sample,
            components,
            residual_rms: (sol.rss / n as f64).sqrt(),
            r_squared,
            baseline,
            range_nm: [lo, hi],
            n_points: n,
            pathlength_cm: l_cm,
            solver: std::borrow::Cow::Borrowed(self.prepared.method().name()),
            flags,
            diagnostics: None,
            masking: None,
            spikes_nm: None,
            screening: None,
            qc: None,
        }
    }
}

/// Sum, sum of squares and largest value of a spectrum in one pass, four
/// lanes wide so the compiler keeps it in vector registers (the lanes are
/// combined in a fixed order: the result does not depend on the CPU).
fn moments(a: &[f64]) -> (f64, f64, f64) {
    let mut sum = [0.0f64; 4];
    let mut sq = [0.0f64; 4];
    let mut peak = [f64::NEG_INFINITY; 4];
    let quads = a.chunks_exact(4);
    let rest = quads.remainder();
    for q in quads {
        for l in 0..4 {
            sum[l] += q[l];
            sq[l] += q[l] * q[l];
            peak[l] = if q[l] > peak[l] { q[l] } else { peak[l] };
        }
    }
    for (l, &v) in rest.iter().enumerate() {
        sum[l] += v;
        sq[l] += v * v;
        peak[l] = if v > peak[l] { v } else { peak[l] };
    }
    let max2 = |x: f64, y: f64| if y > x { y } else { x };
    (
        (sum[0] + sum[1]) + (sum[2] + sum[3]),
        (sq[0] + sq[1]) + (sq[2] + sq[3]),
        max2(max2(peak[0], peak[1]), max2(peak[2], peak[3])),
    )
}

fn fit_block(
    block: &Block,
    refs: &ReferenceSet,
    options: &FitOptions,
    checks: &diagnostics::Options,
    warnings: &mut Vec<String>,
) -> Result<Vec<Outcome>> {
    let model = Model::with_checks(&block.grid, refs, options, checks)?;
    for w in model
        .method_warning()
        .into_iter()
        .chain(model.separability_warnings())
        .chain(model.check_warnings().iter().cloned())
    {
        if !warnings.contains(&w) {
            warnings.push(w);
        }
    }
    Ok(model.fit_block(block, options.pathlength_cm))
}

impl Model {
    /// Fit every spectrum of a block (on this model's grid) in parallel, in
    /// fixed chunks of [`CHUNK`]; outcomes in block order.
    pub fn fit_block(&self, block: &Block, pathlength_cm: f64) -> Vec<Outcome> {
        let idx: Vec<usize> = (0..block.len()).collect();
        let out: Vec<Vec<Outcome>> = idx
            .par_chunks(CHUNK)
            .map(|chunk| {
                let mut ws = self.prepared.workspace();
                chunk
                    .iter()
                    .map(|&i| self.fit_one(&block.ids[i], block.row(i), pathlength_cm, &mut ws))
                    .collect()
            })
            .collect();
        out.into_iter().flatten().collect()
    }
}
