//! Discovery (after diagnostics): the spectrum of an unknown absorber that
//! a batch's flagged residuals share, and its amount in each sample.
//!
//! In: a [`SpectraFile`], the [`ReferenceSet`] and the fit and check
//! options. Out: a [`Discovery`]: the recovered shape s(λ) ≥ 0 scaled to a
//! stated peak ε, the amount of it in each flagged sample, and how much the
//! refit with it improves the residuals.
//!
//! 1. Every spectrum is fitted and tested ([`crate::fit::fit_file_with`]);
//!    the samples flagged `unexplained-absorbance` (and not masked for
//!    saturation) are kept.
//! 2. Counting signals: their least-squares residuals R = (I − H)·A, with H
//!    the projection on the references and baseline, are decomposed by SVD.
//!    White noise of σ alone gives singular values up to about
//!    σ·(√m + √(n − p)) for m spectra of n points and p fitted columns (the
//!    edge of the Marchenko–Pastur law; Marchenko & Pastur, Math. USSR Sb.
//!    1:457, 1967; Geman, Ann. Probab. 8:252, 1980). Singular values above
//!    [`SIGNAL_MARGIN`] times that edge count as independent signals; σ is
//!    pooled from each residual's pseudo-residuals (mean square, so that
//!    noise that grows with absorbance is counted at its full energy).
//! 3. Non-negative alternating least squares (multivariate curve
//!    resolution, Tauler, Chemom. Intell. Lab. Syst. 30:133, 1995): start
//!    from the first right singular vector clipped at zero; then repeat
//!    (a) fit each spectrum with the references, s and the baseline by NNLS,
//!    (b) set s(λ) = max(0, Σₖ cₖ·Rₖ(λ) / Σₖ cₖ²), where Rₖ is spectrum k
//!    minus its fitted references and baseline, and scale s to a peak of 1,
//!    until the total RSS and s stop changing.
//!
//! What the data fix and what they do not: D = C·Eᵀ + c·sᵀ is unchanged
//! when s gains a combination of the references (s + E·α) and the
//! reference concentrations lose c·αᵀ, so only the part of s outside the
//! span of the references (and baseline) is determined by the data; the
//! rest follows from non-negativity (of s and of every concentration). The
//! share of ‖s‖ outside that span is reported as `determined_fraction`: near
//! 1 the shape is pinned by the data, near 0 it is not and the recovered
//! shape may be far from the true one (Tauler, J. Chemometrics 15:627,
//! 2001, on such rotational ambiguity).

use crate::diagnostics::{self, SerialMoments, View};
use crate::error::{Error, Result};
use crate::fit::{self, FitOptions, Model, Outcome};
use crate::input::spectra::SpectraFile;
use crate::reference::ReferenceSet;
use crate::solver::Prepared;
use nalgebra::{DMatrix, SymmetricEigen};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// A singular value counts as a signal above this multiple of the noise
/// edge σ·(√m + √(n − p)) (margin for the error of the pooled σ and the
/// finite-size spread of the largest noise singular value; checked by
/// simulation in `tests/diagnostics.rs`).
pub const SIGNAL_MARGIN: f64 = 1.2;

/// Default peak ε given to the recovered shape, L/(mol·cm): a typical value
/// for a strongly absorbing dye (common practice, no source). The true ε of
/// an unknown cannot be learnt from mixtures, so its fitted "concentration"
/// is as if its peak ε were this.
pub const DEFAULT_PEAK_EPSILON: f64 = 10_000.0;

/// Default limit on alternating least-squares iterations.
pub const DEFAULT_MAX_ITERATIONS: usize = 3000;

/// Relative change of the total RSS below which the iterations stop.
const RSS_TOLERANCE: f64 = 1e-9;
/// Largest change of the unit-peak shape below which the iterations stop.
const SHAPE_TOLERANCE: f64 = 1e-6;

/// Options of discovery.
#[derive(Debug, Clone, Copy)]
pub struct DiscoverOptions {
    /// Peak ε of the recovered spectrum, L/(mol·cm).
    pub peak_epsilon_l_per_mol_cm: f64,
    /// Limit on alternating least-squares iterations.
    pub max_iterations: usize,
}

impl DiscoverOptions {
    /// Options with their values checked: the peak ε must be positive and
    /// at least one iteration allowed ([`Error::OutOfRange`] otherwise).
    pub fn new(peak_epsilon_l_per_mol_cm: f64, max_iterations: usize) -> Result<Self> {
        let options = DiscoverOptions {
            peak_epsilon_l_per_mol_cm,
            max_iterations,
        };
        options.check_values()?;
        Ok(options)
    }

    /// Check the values (the fields are public, so [`discover`] checks
    /// again what [`DiscoverOptions::new`] checked).
    fn check_values(&self) -> Result<()> {
        let expected = "a positive number of L/(mol·cm)";
        Error::require_positive("peak ε", self.peak_epsilon_l_per_mol_cm, "", expected)?;
        if self.max_iterations == 0 {
            return Err(Error::OutOfRange {
                option: "--max-iterations",
                value: 0.0,
                unit: "",
                expected: "at least 1",
            });
        }
        Ok(())
    }
}

impl Default for DiscoverOptions {
    fn default() -> Self {
        DiscoverOptions {
            peak_epsilon_l_per_mol_cm: DEFAULT_PEAK_EPSILON,
            max_iterations: DEFAULT_MAX_ITERATIONS,
        }
    }
}

/// One flagged sample in the discovery.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct SampleAmount {
    /// Sample identifier.
    pub sample: String,
    /// Peak absorbance of the recovered component in this sample, AU.
    pub peak_absorbance_au: f64,
    /// Concentration as if the component's peak ε were the stated one, mol/L.
    pub concentration_mol_per_l: f64,
    /// Residual RMS with the references only, AU.
    pub residual_rms_before_au: f64,
    /// Residual RMS with the recovered component added, AU.
    pub residual_rms_after_au: f64,
    /// Whether the residual is still more than noise after the refit.
    pub flagged_after: bool,
}

/// How far the recovered shape could move along one reference and fit the
/// batch exactly as well (rotational ambiguity), as a share of ‖s‖.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Ambiguity {
    /// Reference component name.
    pub name: String,
    /// Largest ‖t·ε‖/‖s‖ that can be added to s while every concentration
    /// of that reference stays ≥ 0.
    pub addable_fraction: f64,
    /// Largest ‖t·ε‖/‖s‖ that can be taken from s while s stays ≥ 0.
    pub removable_fraction: f64,
}

/// Above this share of ‖s‖ an ambiguity is reported as a warning.
pub const AMBIGUITY_WARNING: f64 = 0.2;

/// What discovery found.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Discovery {
    /// Wavelengths of the recovered spectrum, nm.
    pub wavelengths_nm: Vec<f64>,
    /// Recovered ε(λ), L/(mol·cm), scaled so its peak is `peak_epsilon_l_per_mol_cm`.
    pub epsilon_l_per_mol_cm: Vec<f64>,
    /// The stated peak ε (the scale is arbitrary), L/(mol·cm).
    pub peak_epsilon_l_per_mol_cm: f64,
    /// Wavelength of the recovered peak, nm.
    pub peak_nm: f64,
    /// Largest singular values of the flagged residuals, AU (at most 5).
    pub singular_values_au: Vec<f64>,
    /// The noise edge σ·(√m + √(n − p)), AU.
    pub noise_edge_au: f64,
    /// Pooled noise σ of the flagged residuals, AU.
    pub noise_au: f64,
    /// Number of independent signals above [`SIGNAL_MARGIN`] × the edge.
    pub n_signals: usize,
    /// Share of ‖s‖ outside the span of the references and baseline.
    pub determined_fraction: f64,
    /// Per reference: how much of it the shape could gain or lose without
    /// changing the fit (the constant level is never fixed when a baseline
    /// offset is fitted: the shape is taken to touch zero).
    pub ambiguity: Vec<Ambiguity>,
    /// Iterations run.
    pub iterations: usize,
    /// Whether the iterations met their tolerance before the limit.
    pub converged: bool,
    /// 1 − ΣRSS_after/ΣRSS_before over the samples used.
    pub rss_reduction_fraction: f64,
    /// The flagged samples used, in input order.
    pub samples: Vec<SampleAmount>,
    /// Flagged samples left out, with the reason.
    pub left_out: Vec<[String; 2]>,
    /// Samples of the input that could not be fitted.
    pub n_failed: usize,
    /// Warnings.
    pub warnings: Vec<String>,
}

/// Recover the common unknown absorber of a batch's flagged samples.
///
/// The steps: fit the batch and take its flagged samples ([`flagged_rows`]),
/// the leading signal of their residuals ([`leading_signal`]), alternating
/// non-negative least squares ([`alternate`]), then the amounts per sample
/// ([`amounts`]) and how well the shape is pinned down ([`ambiguities`]).
pub fn discover(
    file: &SpectraFile,
    refs: &ReferenceSet,
    options: &FitOptions,
    checks: &diagnostics::Options,
    d: &DiscoverOptions,
) -> Result<Discovery> {
    let Some(res_opts) = checks.residual else {
        return Err(Error::Invalid(
            "discovery needs the residual tests to find flagged samples".into(),
        ));
    };
    d.check_values()?;
    let checks = diagnostics::Options {
        candidates: None,
        ..checks.clone()
    };
    let report = fit::fit_file_with(file, refs, options, &checks)?;
    let flagged = flagged_rows(file, &report, res_opts.alarm_rate)?;
    let block = &file.blocks[flagged.block];
    let model = Model::with_checks(&block.grid, refs, options, &checks)?;
    let design = &model.design;
    let spectra: Vec<&[f64]> = flagged
        .rows
        .iter()
        .map(|&i| &block.row(i)[design.start..design.end])
        .collect();
    let projector = Projector::new(&model);
    let mut warnings = Vec::new();
    let signal = leading_signal(&model, &projector, &spectra, &mut warnings)?;
    let names = component_names(refs, design.n_columns());
    let alternated = alternate(design, &names, &spectra, signal.shape, d)?;
    let l_times_peak = options.pathlength_cm * d.peak_epsilon_l_per_mol_cm;
    let amount_inputs = AmountInputs {
        design,
        alternated: &alternated,
        rows: &flagged.rows,
        positions: &block.positions,
        spectra: &spectra,
        res_opts: &res_opts,
        l_times_peak,
    };
    let (samples, rss_reduction_fraction) = amounts(&amount_inputs, &report.outcomes);
    let shape = &alternated.shape;
    let determined_fraction = norm(&projector.outside(shape)) / norm(shape);
    let ambiguity = ambiguities(design, &alternated, &names);
    ambiguity_warnings(determined_fraction, &ambiguity, &mut warnings);
    if !alternated.converged {
        warnings.push(format!(
            "the alternating least squares did not settle within {} iterations: the spectrum is the last iterate",
            d.max_iterations
        ));
    }
    let n = design.n_points();
    let peak_i = (0..n).fold(0, |b, i| if shape[i] > shape[b] { i } else { b });
    let peak_eps = d.peak_epsilon_l_per_mol_cm;
    Ok(Discovery {
        wavelengths_nm: design.wavelengths_nm.clone(),
        epsilon_l_per_mol_cm: shape.iter().map(|v| v * peak_eps).collect(),
        peak_epsilon_l_per_mol_cm: peak_eps,
        peak_nm: design.wavelengths_nm[peak_i],
        singular_values_au: signal.singular.iter().take(5).copied().collect(),
        noise_edge_au: signal.edge,
        noise_au: signal.noise,
        n_signals: signal.n_signals,
        determined_fraction,
        ambiguity,
        iterations: alternated.iterations,
        converged: alternated.converged,
        rss_reduction_fraction,
        samples,
        left_out: flagged.left_out,
        n_failed: report.n_failed(),
        warnings,
    })
}

/// The flagged samples used: all on one wavelength grid.
struct Flagged {
    /// The block they are in (the one with the most flagged samples).
    block: usize,
    /// Their rows in that block.
    rows: Vec<usize>,
    /// Flagged samples left out, with the reason.
    left_out: Vec<[String; 2]>,
}

/// Step 1: the flagged, unmasked samples of the block that has the most.
fn flagged_rows(file: &SpectraFile, report: &fit::FitReport, alarm_rate: f64) -> Result<Flagged> {
    let mut left_out: Vec<[String; 2]> = Vec::new();
    let mut per_block: Vec<Vec<usize>> = vec![Vec::new(); file.blocks.len()];
    for (b, block) in file.blocks.iter().enumerate() {
        for (i, pos) in block.positions.iter().enumerate() {
            if let Outcome::Fitted(s) = &report.outcomes[*pos]
                && s.flags.iter().any(|f| f == diagnostics::FLAG_UNEXPLAINED)
            {
                if s.masking.is_some() {
                    left_out.push([
                        s.sample.clone(),
                        "points above the saturation ceiling were masked".into(),
                    ]);
                } else {
                    per_block[b].push(i);
                }
            }
        }
    }
    let Some((bi, _)) = per_block
        .iter()
        .enumerate()
        .max_by_key(|(i, r)| (r.len(), std::cmp::Reverse(*i)))
        .filter(|(_, r)| !r.is_empty())
    else {
        return Err(Error::Invalid(format!(
            "no sample carries unexplained absorbance at alarm rate {alarm_rate}{}: nothing to recover",
            if left_out.is_empty() {
                String::new()
            } else {
                format!(" ({} flagged but masked for saturation)", left_out.len())
            }
        )));
    };
    for (b, r) in per_block.iter().enumerate() {
        if b != bi {
            for &i in r {
                left_out.push([
                    file.blocks[b].ids[i].clone(),
                    "measured on another wavelength grid".into(),
                ]);
            }
        }
    }
    Ok(Flagged {
        block: bi,
        rows: std::mem::take(&mut per_block[bi]),
        left_out,
    })
}

/// Removes from a spectrum its least-squares fit by the design's columns.
struct Projector {
    q: DMatrix<f64>,
}

impl Projector {
    fn new(model: &Model) -> Self {
        let (n, p) = (model.design.n_points(), model.design.n_columns());
        let x = DMatrix::from_column_slice(n, p, &model.prepared.columns);
        Projector { q: x.qr().q() }
    }

    /// The part of `v` outside the span of the columns.
    fn outside(&self, v: &[f64]) -> Vec<f64> {
        let a = nalgebra::DVector::from_column_slice(v);
        (&a - &self.q * (self.q.transpose() * &a))
            .as_slice()
            .to_vec()
    }
}

/// The leading signal of the flagged residuals.
struct Signal {
    /// Largest singular values, AU.
    singular: Vec<f64>,
    /// The noise edge σ·(√m + √(n − p)), AU.
    edge: f64,
    /// Pooled noise σ, AU.
    noise: f64,
    /// Singular values above [`SIGNAL_MARGIN`] × the edge.
    n_signals: usize,
    /// The starting shape: the leading right singular vector, positive
    /// part, unit peak.
    shape: Vec<f64>,
}

/// Step 2: least-squares residuals and their singular values; no signal
/// above the noise is an error, more than one a warning.
fn leading_signal(
    model: &Model,
    projector: &Projector,
    spectra: &[&[f64]],
    warnings: &mut Vec<String>,
) -> Result<Signal> {
    let design = &model.design;
    let (n, p, m) = (design.n_points(), design.n_columns(), spectra.len());
    let resid: Vec<Vec<f64>> = spectra.iter().map(|a| projector.outside(a)).collect();
    let noise_sq: f64 = resid
        .iter()
        .map(|r| {
            let e = diagnostics::pseudo_residuals(&design.wavelengths_nm, r);
            e.iter().map(|v| v * v).sum::<f64>() / e.len().max(1) as f64
        })
        .sum::<f64>()
        / m as f64;
    let noise = noise_sq.sqrt();
    let edge = noise * ((m as f64).sqrt() + ((n - p) as f64).sqrt());
    let r_mat = DMatrix::from_fn(m, n, |i, j| resid[i][j]);
    let (singular, v1, u1) = leading_singular(&r_mat);
    let n_signals = singular
        .iter()
        .filter(|s| **s > SIGNAL_MARGIN * edge)
        .count();
    if n_signals == 0 {
        return Err(Error::Invalid(format!(
            "the residuals of the {m} flagged sample(s) hold no signal above the noise (largest singular value {:.3e} AU, noise edge {:.3e} AU): nothing to recover",
            singular.first().copied().unwrap_or(0.0),
            edge
        )));
    }
    if n_signals > 1 {
        warnings.push(format!(
            "the flagged residuals hold {n_signals} independent signals: more than one unknown absorber, or an unknown plus a reference that does not match; recovering the strongest"
        ));
    }
    let sign = if u1.iter().sum::<f64>() < 0.0 {
        -1.0
    } else {
        1.0
    };
    let mut shape: Vec<f64> = v1.iter().map(|v| (sign * v).max(0.0)).collect();
    if !normalise(&mut shape) {
        return Err(Error::Invalid(
            "the leading residual signal has no positive part: it does not look like an absorber"
                .into(),
        ));
    }
    Ok(Signal {
        singular,
        edge,
        noise,
        n_signals,
        shape,
    })
}

/// The names of the augmented design's columns: references, "recovered",
/// then the baseline terms fitted.
fn component_names(refs: &ReferenceSet, p: usize) -> Vec<String> {
    let mut names: Vec<String> = refs.names().iter().map(|s| s.to_string()).collect();
    names.push("recovered".into());
    names.push("baseline offset".into());
    names.push("baseline slope".into());
    names.truncate(p + 1);
    names
}

/// Where the alternating least squares ended.
struct Alternated {
    /// The solver for the last augmented design.
    prepared: Prepared,
    /// The last augmented design's columns.
    columns: Vec<f64>,
    /// The last solutions, one per flagged sample.
    sols: Vec<crate::solver::Solution>,
    /// The shape the last solutions were computed with (unit peak).
    shape: Vec<f64>,
    /// Iterations run.
    iterations: usize,
    /// Whether the tolerances were met before the limit.
    converged: bool,
}

/// Step 3: non-negative alternating least squares, concentrations given the
/// shape, then the shape given the concentrations.
fn alternate(
    design: &crate::preprocess::Design,
    names: &[String],
    spectra: &[&[f64]],
    mut shape: Vec<f64>,
    d: &DiscoverOptions,
) -> Result<Alternated> {
    let (n, p, k) = (design.n_points(), design.n_columns(), design.n_components);
    let mut prev_rss = f64::INFINITY;
    let mut iterations = 0;
    let mut converged = false;
    let mut last: Option<(Prepared, Vec<f64>, Vec<crate::solver::Solution>)> = None;
    while iterations < d.max_iterations {
        iterations += 1;
        let columns = augmented(&design.columns, n, k, &shape);
        let prepared = Prepared::new(&columns, n, p + 1, k + 1, names).map_err(|e| {
            Error::Degenerate(format!(
                "the recovered signal cannot be told apart from the references: {e}"
            ))
        })?;
        let sols = solve_all(&prepared, spectra)?;
        let rss: f64 = sols.iter().map(|s| s.rss).sum();
        let next = next_shape(spectra, &sols, &columns, (n, k))?;
        let change = next
            .iter()
            .zip(&shape)
            .fold(0.0f64, |mx, (a, b)| mx.max((a - b).abs()));
        let settled = (prev_rss - rss).abs() <= RSS_TOLERANCE * rss.max(f64::MIN_POSITIVE)
            && change <= SHAPE_TOLERANCE;
        prev_rss = rss;
        last = Some((prepared, columns, sols));
        if settled {
            converged = true;
            break;
        }
        shape = next;
    }
    // The final refit uses the shape the last solutions were computed with.
    let (prepared, columns, sols) =
        last.ok_or_else(|| Error::Invalid("--max-iterations must be at least 1".into()))?;
    let shape = columns[k * n..(k + 1) * n].to_vec();
    Ok(Alternated {
        prepared,
        columns,
        sols,
        shape,
        iterations,
        converged,
    })
}

/// The shape given the concentrations: the least-squares fit of what the
/// other columns leave, weighted by the recovered component's amounts,
/// clipped at zero and scaled to a unit peak.
fn next_shape(
    spectra: &[&[f64]],
    sols: &[crate::solver::Solution],
    columns: &[f64],
    (n, k): (usize, usize),
) -> Result<Vec<f64>> {
    let mut num = vec![0.0; n];
    let mut den = 0.0;
    for (a, sol) in spectra.iter().zip(sols) {
        let c = sol.x[k];
        if c <= 0.0 {
            continue;
        }
        let mut others = sol.x.clone();
        others[k] = 0.0;
        let r = diagnostics::residual(a, columns, &others);
        for (acc, v) in num.iter_mut().zip(&r) {
            *acc += c * v;
        }
        den += c * c;
    }
    if den <= 0.0 {
        return Err(Error::Invalid(
            "the recovered component dropped out of every sample: no common unknown absorber could be resolved".into(),
        ));
    }
    let mut next: Vec<f64> = num.iter().map(|v| (v / den).max(0.0)).collect();
    if !normalise(&mut next) {
        return Err(Error::Invalid(
            "the recovered spectrum became zero at every wavelength".into(),
        ));
    }
    Ok(next)
}

/// What the amounts step reads.
struct AmountInputs<'a> {
    design: &'a crate::preprocess::Design,
    alternated: &'a Alternated,
    /// Rows of the flagged samples in their block.
    rows: &'a [usize],
    /// The block's positions in the input (index into the outcomes).
    positions: &'a [usize],
    spectra: &'a [&'a [f64]],
    res_opts: &'a diagnostics::ResidualOptions,
    /// Pathlength × peak ε, cm·L/(mol·cm).
    l_times_peak: f64,
}

/// Step 4: the recovered component's amount in each flagged sample, whether
/// its residual is still flagged, and 1 − ΣRSS_after/ΣRSS_before.
fn amounts(a: &AmountInputs, outcomes: &[Outcome]) -> (Vec<SampleAmount>, f64) {
    let design = a.design;
    let (n, k) = (design.n_points(), design.n_components);
    let alt = a.alternated;
    let moments = SerialMoments::new(&alt.prepared.columns, n, design.n_columns() + 1);
    let view = View {
        wavelengths_nm: &design.wavelengths_nm,
        columns: &alt.columns,
        n_components: k + 1,
        moments: &moments,
        uniform_step: diagnostics::uniform_step(&design.wavelengths_nm),
    };
    let mut samples = Vec::with_capacity(a.spectra.len());
    let (mut before, mut after) = (0.0, 0.0);
    for ((&i, spectrum), sol) in a.rows.iter().zip(a.spectra).zip(&alt.sols) {
        let Outcome::Fitted(base) = &outcomes[a.positions[i]] else {
            continue;
        };
        let flagged_after = diagnostics::examine(view, spectrum, &sol.x, a.res_opts).flagged();
        before += base.residual_rms.powi(2) * n as f64;
        after += sol.rss;
        samples.push(SampleAmount {
            sample: base.sample.clone(),
            peak_absorbance_au: sol.x[k],
            concentration_mol_per_l: sol.x[k] / a.l_times_peak,
            residual_rms_before_au: base.residual_rms,
            residual_rms_after_au: (sol.rss / n as f64).sqrt(),
            flagged_after,
        });
    }
    let reduction = if before > 0.0 {
        1.0 - after / before
    } else {
        0.0
    };
    (samples, reduction)
}

/// The Euclidean norm.
fn norm(v: &[f64]) -> f64 {
    v.iter().map(|x| x * x).sum::<f64>().sqrt()
}

/// Step 5: per reference, how much of it the shape could gain or lose and
/// fit the batch as well.
fn ambiguities(
    design: &crate::preprocess::Design,
    alt: &Alternated,
    names: &[String],
) -> Vec<Ambiguity> {
    let (n, k) = (design.n_points(), design.n_components);
    let shape = &alt.shape;
    let norm_s = norm(shape);
    let mut ambiguity = Vec::new();
    for j in 0..k {
        let eps = &design.columns[j * n..(j + 1) * n];
        let norm_e = norm(eps);
        let add = alt
            .sols
            .iter()
            .filter(|s| s.x[k] > 0.0)
            .map(|s| s.x[j] / s.x[k])
            .fold(f64::INFINITY, f64::min);
        let remove = eps
            .iter()
            .zip(shape)
            .filter(|(e, _)| **e > 0.0)
            .map(|(e, v)| v / e)
            .fold(f64::INFINITY, f64::min);
        let frac = |t: f64| {
            if t.is_finite() {
                t * norm_e / norm_s
            } else {
                0.0
            }
        };
        ambiguity.push(Ambiguity {
            name: names[j].clone(),
            addable_fraction: frac(add),
            removable_fraction: frac(remove),
        });
    }
    ambiguity
}

/// Warnings when the shape is mostly set by non-negativity, or could trade
/// much of a reference.
fn ambiguity_warnings(
    determined_fraction: f64,
    ambiguity: &[Ambiguity],
    warnings: &mut Vec<String>,
) {
    if determined_fraction < 0.5 {
        warnings.push(format!(
            "only {:.0} % of the recovered shape lies outside what the references can mimic: the rest is set by non-negativity, not by the data, and may differ from the true spectrum",
            100.0 * determined_fraction
        ));
    }
    let loose: Vec<String> = ambiguity
        .iter()
        .filter(|a| a.addable_fraction.max(a.removable_fraction) > AMBIGUITY_WARNING)
        .map(|a| {
            format!(
                "{} (+{:.0} % / −{:.0} %)",
                a.name,
                100.0 * a.addable_fraction,
                100.0 * a.removable_fraction
            )
        })
        .collect();
    if !loose.is_empty() {
        warnings.push(format!(
            "the recovered shape is not unique: it could gain or lose this much of a reference (share of its norm) and fit the batch as well: {}; samples in which those references are absent, or wavelengths where the unknown does not absorb, would pin it down",
            loose.join(", ")
        ));
    }
}

/// Design columns with `shape` inserted after the `k` component columns.
fn augmented(columns: &[f64], n: usize, k: usize, shape: &[f64]) -> Vec<f64> {
    let mut out = Vec::with_capacity(columns.len() + n);
    out.extend_from_slice(&columns[..k * n]);
    out.extend_from_slice(shape);
    out.extend_from_slice(&columns[k * n..]);
    out
}

/// Scale to a peak of 1; false when there is no positive value.
fn normalise(v: &mut [f64]) -> bool {
    let max = v.iter().fold(0.0f64, |m, x| m.max(*x));
    if !(max > 0.0 && max.is_finite()) {
        return false;
    }
    v.iter_mut().for_each(|x| *x /= max);
    true
}

/// Solve every spectrum, in chunks like the fit (results in input order).
fn solve_all(prepared: &Prepared, spectra: &[&[f64]]) -> Result<Vec<crate::solver::Solution>> {
    let out: Vec<Result<Vec<crate::solver::Solution>>> = spectra
        .par_chunks(fit::CHUNK)
        .map(|chunk| {
            let mut ws = prepared.workspace();
            chunk.iter().map(|a| prepared.solve(a, &mut ws)).collect()
        })
        .collect();
    let mut all = Vec::with_capacity(spectra.len());
    for c in out {
        all.extend(c?);
    }
    Ok(all)
}

/// Singular values (descending) of an m × n matrix and its first right and
/// left singular vectors, from the eigen-decomposition of the smaller Gram
/// matrix.
fn leading_singular(r: &DMatrix<f64>) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let (m, n) = r.shape();
    let small_rows = m <= n;
    let gram = if small_rows {
        r * r.transpose()
    } else {
        r.transpose() * r
    };
    let eig = SymmetricEigen::new(gram);
    let mut order: Vec<usize> = (0..eig.eigenvalues.len()).collect();
    order.sort_by(|a, b| eig.eigenvalues[*b].total_cmp(&eig.eigenvalues[*a]));
    let singular: Vec<f64> = order
        .iter()
        .map(|&i| eig.eigenvalues[i].max(0.0).sqrt())
        .collect();
    let top = eig.eigenvectors.column(order[0]).into_owned();
    let s1 = singular[0].max(f64::MIN_POSITIVE);
    let (v, u) = if small_rows {
        let v = r.transpose() * &top / s1;
        (v, top)
    } else {
        let u = r * &top / s1;
        (top, u)
    };
    (singular, v.as_slice().to_vec(), u.as_slice().to_vec())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn leading_singular_vector_of_a_rank_one_matrix() {
        let u = [1.0, 2.0, 2.0];
        let v = [0.0, 3.0, 4.0, 0.0];
        let r = DMatrix::from_fn(3, 4, |i, j| u[i] * v[j]);
        let (s, v1, u1) = leading_singular(&r);
        // ‖u‖·‖v‖ = 3·5.
        assert!((s[0] - 15.0).abs() < 1e-10);
        assert!(s[1].abs() < 1e-6);
        let sign = v1[1].signum();
        assert!((sign * v1[1] - 0.6).abs() < 1e-10 && (sign * v1[2] - 0.8).abs() < 1e-10);
        assert!((sign * u1[0] - 1.0 / 3.0).abs() < 1e-10);
        // The same through the other Gram matrix.
        let (s_t, _, _) = leading_singular(&r.transpose());
        assert!((s_t[0] - 15.0).abs() < 1e-10);
    }

    #[test]
    fn options_reject_a_non_positive_peak_and_zero_iterations() {
        // A molar absorptivity is positive by definition (Beer–Lambert law: common
        // practice, no source).
        assert!(DiscoverOptions::new(20_000.0, 50).is_ok());
        let e = DiscoverOptions::new(0.0, 50).unwrap_err().to_string();
        assert!(e.starts_with("peak ε 0: expected a positive"), "{e}");
        let e = DiscoverOptions::new(20_000.0, 0).unwrap_err().to_string();
        assert_eq!(e, "--max-iterations 0: expected at least 1");
    }
}
