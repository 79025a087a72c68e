//! Separability (diagnostics, after the solver's stage): can a set of
//! references be told apart, and how precisely?
//!
//! In: a [`Design`] (the model matrix the fit uses), or a [`ReferenceSet`]
//! with [`CheckOptions`] from which one is built on a regular grid. Out: a
//! [`DesignAnalysis`] (condition number, similarities, variance inflation)
//! and, for `library check`, a [`CheckReport`] with predicted standard
//! errors, detection and quantitation limits, the best-conditioned
//! wavelength range and warnings.
//!
//! For A(λ) = l·Σ εᵢ(λ)·cᵢ + baseline(λ) with independent noise σ (AU) at
//! each wavelength, the least-squares estimate of l·c has covariance
//! σ²·(EᵀE)⁻¹ (E the n × p model matrix, baseline columns included), so
//!
//! ```text
//! SE(cᵢ) = σ·√[(EᵀE)⁻¹]ᵢᵢ / l
//! VIFᵢ   = [(ẼᵀẼ)⁻¹]ᵢᵢ = 1 / (1 − R²ᵢ)     (Ẽ: columns scaled to unit length)
//! LOD    = 3.3·SE,  LOQ = 10·SE             (ICH Q2(R1) conventions; common practice)
//! ```
//!
//! where R²ᵢ is the (uncentred) R² of column i regressed on the others: the
//! factor by which the variance of cᵢ exceeds what it would be were its
//! spectrum orthogonal to everything else. A pair of components is called
//! collinear when their two-component variance inflation, once the
//! baseline is allowed for, reaches [`COLLINEAR_VIF`] (10, the usual rule
//! of thumb for serious collinearity; e.g. Kutner et al., *Applied Linear
//! Statistical Models*, §10.5, recalled from memory). The condition number
//! is that of Ẽ (the 2-norm ratio of its extreme singular values), which
//! is what the solver sees.

use crate::error::{Error, Result};
use crate::preprocess::{self, Baseline, Design};
use crate::reference::ReferenceSet;
use crate::solver::{DEGENERATE_CONDITION, FALLBACK_CONDITION};
use crate::spectrum::Grid;
use nalgebra::{DMatrix, SymmetricEigen};
use serde::{Deserialize, Serialize};

/// The warning code for references that cannot be separated well.
pub const WARNING_COLLINEAR: &str = "collinear-references";

/// Variance inflation at or above which a pair (or a component) counts as
/// collinear: a rule of thumb of regression practice (recalled from memory).
pub const COLLINEAR_VIF: f64 = 10.0;

/// Default absorbance noise, AU: a typical 0.001–0.002 AU of a good
/// spectrophotometer or plate reader at moderate absorbance (common
/// practice, no source). Measure yours: the standard deviation of a blank's
/// readings, or the residual RMS that `fit` reports.
pub const DEFAULT_NOISE_AU: f64 = 0.0015;

/// Limit of detection in standard errors (3.3σ, ICH Q2 convention).
pub const LOD_FACTOR: f64 = 3.3;

/// Limit of quantitation in standard errors (10σ, ICH Q2 convention).
pub const LOQ_FACTOR: f64 = 10.0;

/// The best-range scan looks at windows at least this fraction of the
/// whole range wide (narrower windows carry too little signal to matter).
pub const SCAN_MIN_FRACTION: f64 = 0.25;

/// Number of candidate edges the best-range scan tries across the range.
pub const SCAN_EDGES: usize = 40;

/// Two components' similarity in one design.
#[derive(Debug, Clone, PartialEq)]
pub struct PairAnalysis {
    /// Index of the first component.
    pub a: usize,
    /// Index of the second component.
    pub b: usize,
    /// Cosine of the two ε curves over the range.
    pub cosine: f64,
    /// Cosine once the baseline terms are projected out (what the fit
    /// sees); `None` when a curve is indistinguishable from the baseline.
    pub cosine_after_baseline: Option<f64>,
    /// 1 / (1 − cosine_after_baseline²); `None` when infinite.
    pub variance_inflation: Option<f64>,
}

impl PairAnalysis {
    /// Whether the pair cannot be separated well.
    pub fn collinear(&self) -> bool {
        self.cosine_after_baseline.is_some()
            && self.variance_inflation.is_none_or(|v| v >= COLLINEAR_VIF)
    }
}

/// Conditioning of a design.
#[derive(Debug, Clone, PartialEq)]
pub struct DesignAnalysis {
    /// Condition number of the column-scaled design; `None` when singular.
    pub condition: Option<f64>,
    /// Diagonal of (EᵀE)⁻¹ per column, in the design's units; `None` when
    /// singular.
    pub inverse_diag: Vec<Option<f64>>,
    /// Variance inflation factor per column; `None` when infinite.
    pub vif: Vec<Option<f64>>,
    /// Every pair of component columns.
    pub pairs: Vec<PairAnalysis>,
    /// Number of component columns (the rest are baseline).
    pub n_components: usize,
}

/// Analyse a design as the fit would use it.
pub fn analyse(design: &Design) -> DesignAnalysis {
    analyse_columns(
        &design.columns,
        design.n_points(),
        design.n_columns(),
        design.n_components,
    )
}

/// Analyse `p` column-major columns of `n` points, the first `k` of them
/// components.
pub fn analyse_columns(columns: &[f64], n: usize, p: usize, k: usize) -> DesignAnalysis {
    let scale: Vec<f64> = (0..p)
        .map(|j| {
            columns[j * n..(j + 1) * n]
                .iter()
                .map(|v| v * v)
                .sum::<f64>()
                .sqrt()
        })
        .collect();
    let usable = scale.iter().all(|s| *s > 0.0 && s.is_finite());
    let mut gram = DMatrix::<f64>::zeros(p, p);
    for i in 0..p {
        for j in i..p {
            let g = if usable {
                let (ci, cj) = (&columns[i * n..(i + 1) * n], &columns[j * n..(j + 1) * n]);
                ci.iter().zip(cj).map(|(a, b)| a * b).sum::<f64>() / (scale[i] * scale[j])
            } else {
                0.0
            };
            gram[(i, j)] = g;
            gram[(j, i)] = g;
        }
    }
    let eig = SymmetricEigen::new(gram.clone());
    let max = eig.eigenvalues.iter().cloned().fold(0.0, f64::max);
    let min = eig
        .eigenvalues
        .iter()
        .cloned()
        .fold(f64::INFINITY, f64::min);
    let singular = !usable || min.is_nan() || min <= 0.0 || min <= max * 1e-300;
    let condition = (!singular).then(|| (max / min).sqrt());
    let inv_scaled: Vec<Option<f64>> = (0..p)
        .map(|i| {
            (!singular).then(|| {
                (0..p)
                    .map(|m| eig.eigenvectors[(i, m)].powi(2) / eig.eigenvalues[m])
                    .sum::<f64>()
            })
        })
        .collect();
    let inverse_diag = inv_scaled
        .iter()
        .zip(&scale)
        .map(|(v, s)| v.map(|v| v / (s * s)))
        .collect();
    // Inner products with the baseline projected out.
    let f = p - k;
    let gbb_inv = if f > 0 {
        gram.view((k, k), (f, f)).into_owned().try_inverse()
    } else {
        Some(DMatrix::zeros(0, 0))
    };
    let projected = |a: usize, b: usize| -> Option<f64> {
        let g = gram[(a, b)];
        if f == 0 {
            return Some(g);
        }
        let inv = gbb_inv.as_ref()?;
        let ga = gram.view((a, k), (1, f)).into_owned();
        let gb = gram.view((k, b), (f, 1)).into_owned();
        Some(g - (ga * inv * gb)[(0, 0)])
    };
    let mut pairs = Vec::new();
    for a in 0..k {
        for b in a + 1..k {
            let cosine = gram[(a, b)];
            let adjusted = match (projected(a, b), projected(a, a), projected(b, b)) {
                (Some(ab), Some(aa), Some(bb)) if usable && aa > 1e-12 && bb > 1e-12 => {
                    Some((ab / (aa * bb).sqrt()).clamp(-1.0, 1.0))
                }
                _ => None,
            };
            let variance_inflation = adjusted.and_then(|r| {
                let d = 1.0 - r * r;
                (d > 1e-300).then(|| 1.0 / d)
            });
            pairs.push(PairAnalysis {
                a,
                b,
                cosine,
                cosine_after_baseline: adjusted,
                variance_inflation,
            });
        }
    }
    DesignAnalysis {
        condition,
        inverse_diag,
        vif: inv_scaled,
        pairs,
        n_components: k,
    }
}

/// `collinear-references` warnings for a design: one per pair that cannot
/// be separated well, and one per component that is nearly a combination of
/// several others without a single look-alike.
pub fn collinearity_warnings(
    analysis: &DesignAnalysis,
    names: &[String],
    range_nm: (f64, f64),
    baseline: Baseline,
) -> Vec<String> {
    let (lo, hi) = range_nm;
    let has_baseline = baseline.n_terms() > 0;
    let mut out = Vec::new();
    let mut in_pair = vec![false; analysis.n_components];
    for pr in analysis.pairs.iter().filter(|p| p.collinear()) {
        in_pair[pr.a] = true;
        in_pair[pr.b] = true;
        let adjusted = match pr.cosine_after_baseline {
            Some(c) if has_baseline && (c - pr.cosine).abs() >= 5e-5 => {
                format!(", {c:.4} once the baseline is allowed for")
            }
            _ => String::new(),
        };
        let inflation = match pr.variance_inflation {
            Some(v) => format!(
                "standard errors about {:.0}× those of well-separated spectra",
                v.sqrt()
            ),
            None => "no finite standard error".into(),
        };
        out.push(format!(
            "{WARNING_COLLINEAR}: '{}' and '{}' have nearly the same spectrum over {lo}–{hi} nm (cosine similarity {:.4}{adjusted}): the fit cannot reliably tell how much of the signal belongs to each, so their concentrations are uncertain ({inflation}) and a small error in either reference moves concentration from one to the other, while their sum stays well determined; widen the range, add wavelengths where they differ, or fit only one of them",
            names[pr.a], names[pr.b], pr.cosine
        ));
    }
    for i in 0..analysis.n_components {
        if in_pair[i] {
            continue;
        }
        let others = if has_baseline {
            "the other references and the baseline"
        } else {
            "the other references"
        };
        match analysis.vif[i] {
            Some(v) if v < COLLINEAR_VIF => {}
            Some(v) => out.push(format!(
                "{WARNING_COLLINEAR}: '{}' is nearly a combination of {others} over {lo}–{hi} nm (variance inflation factor {v:.0}): its concentration is uncertain (standard error about {:.0}× that of a well-separated spectrum) and errors in the other references leak into it; widen the range or drop a reference",
                names[i],
                v.sqrt()
            )),
            None => out.push(format!(
                "{WARNING_COLLINEAR}: '{}' cannot be told apart from {others} over {lo}–{hi} nm at all: the fit will refuse this set; widen the range or drop a reference",
                names[i]
            )),
        }
    }
    out
}

/// Options of `library check`.
#[derive(Debug, Clone, Copy)]
pub struct CheckOptions {
    /// Baseline terms the fit would use.
    pub baseline: Baseline,
    /// Wavelength window, nm (default: the range every reference covers).
    pub window_nm: Option<(f64, f64)>,
    /// Spacing of the readings the prediction assumes, nm.
    pub step_nm: f64,
    /// Absorbance noise per reading, AU.
    pub noise_au: f64,
    /// Pathlength, cm.
    pub pathlength_cm: f64,
}

impl CheckOptions {
    /// Options with their values checked: step, noise and pathlength must
    /// be positive ([`Error::OutOfRange`] otherwise).
    pub fn new(
        baseline: Baseline,
        window_nm: Option<(f64, f64)>,
        step_nm: f64,
        noise_au: f64,
        pathlength_cm: f64,
    ) -> Result<Self> {
        let options = CheckOptions {
            baseline,
            window_nm,
            step_nm,
            noise_au,
            pathlength_cm,
        };
        options.check_values()?;
        Ok(options)
    }

    /// Check the values (the fields are public, so [`check`] checks again
    /// what [`CheckOptions::new`] checked).
    fn check_values(&self) -> Result<()> {
        let expected = "a positive number";
        Error::require_positive("--step-nm", self.step_nm, "", expected)?;
        Error::require_positive("--noise-au", self.noise_au, "", expected)?;
        Error::require_positive("--pathlength-cm", self.pathlength_cm, "", expected)
    }
}

impl Default for CheckOptions {
    fn default() -> Self {
        CheckOptions {
            baseline: Baseline::Offset,
            window_nm: None,
            step_nm: 1.0,
            noise_au: DEFAULT_NOISE_AU,
            pathlength_cm: 1.0,
        }
    }
}

/// One component in a check.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ComponentCheck {
    /// Component name.
    pub name: String,
    /// Variance inflation factor (absent when infinite).
    pub vif: Option<f64>,
    /// Predicted standard error of the concentration at the noise, mol/L.
    pub std_error_mol_per_l: Option<f64>,
    /// Limit of detection, 3.3 standard errors, mol/L.
    pub lod_mol_per_l: Option<f64>,
    /// Limit of quantitation, 10 standard errors, mol/L.
    pub loq_mol_per_l: Option<f64>,
    /// Predicted standard error, mg/L (with a molar mass).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub std_error_mg_per_l: Option<f64>,
    /// Limit of detection, mg/L (with a molar mass).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lod_mg_per_l: Option<f64>,
    /// Limit of quantitation, mg/L (with a molar mass).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub loq_mg_per_l: Option<f64>,
    /// Top of the calibrated range, mol/L (calibrated components only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibrated_max_mol_per_l: Option<f64>,
}

/// One pair of components in a check.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct PairCheck {
    /// First component.
    pub a: String,
    /// Second component.
    pub b: String,
    /// Cosine similarity of the ε curves over the range.
    pub cosine: f64,
    /// Cosine with the baseline projected out (absent when undefined).
    pub cosine_after_baseline: Option<f64>,
    /// Two-component variance inflation (absent when infinite).
    pub variance_inflation: Option<f64>,
    /// Whether the pair gets a `collinear-references` warning.
    pub collinear: bool,
}

/// The best-conditioned window found by the scan.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RangeScan {
    /// The window, nm: [low, high].
    pub range_nm: [f64; 2],
    /// Points in it.
    pub n_points: usize,
    /// The scan's criterion there: the condition number with the columns
    /// scaled as over the whole range (comparable with the whole range's
    /// `condition_number`).
    pub scan_condition_number: f64,
    /// The condition number the fit would see over the window (columns
    /// scaled over the window itself).
    pub condition_number: Option<f64>,
    /// Narrowest window tried, nm.
    pub min_width_nm: f64,
}

/// Everything `library check` reports.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct CheckReport {
    /// Components, in order.
    pub components: Vec<String>,
    /// Range analysed, nm: [low, high].
    pub range_nm: [f64; 2],
    /// Readings assumed in it.
    pub n_points: usize,
    /// Their spacing, nm.
    pub step_nm: f64,
    /// Baseline model (`none`, `offset`, `linear`).
    pub baseline: String,
    /// Noise assumed per reading, AU.
    pub noise_au: f64,
    /// Pathlength assumed, cm.
    pub pathlength_cm: f64,
    /// Condition number of the column-scaled design (absent when singular).
    pub condition_number: Option<f64>,
    /// The solver the fit would use (`normal-equations`, `lawson-hanson`),
    /// or `refused` when the set cannot be separated at all.
    pub solver: String,
    /// Per component.
    pub per_component: Vec<ComponentCheck>,
    /// Per pair.
    pub pairs: Vec<PairCheck>,
    /// The best-conditioned window (absent when none could be scanned).
    pub best_range: Option<RangeScan>,
    /// Warnings, each starting with its code.
    pub warnings: Vec<String>,
}

/// A regular grid from `lo` to `hi` (inclusive within round-off).
fn regular_grid(lo: f64, hi: f64, step: f64) -> Result<Grid> {
    let n = ((hi - lo) / step * (1.0 + 1e-12)).floor() as usize + 1;
    Grid::new((0..n).map(|i| lo + step * i as f64).collect())
}

/// Check a reference set: conditioning, similarity, predicted errors.
pub fn check(refs: &ReferenceSet, options: &CheckOptions) -> Result<CheckReport> {
    options.check_values()?;
    if refs.components.is_empty() {
        return Err(Error::Invalid("no reference components selected".into()));
    }
    let (lo, hi) = shared_range(refs, options.window_nm)?;
    let grid = regular_grid(lo, hi, options.step_nm)?;
    let design = preprocess::design(&grid, refs, options.baseline, None)?;
    let names: Vec<String> = refs.names().iter().map(|s| s.to_string()).collect();
    let analysis = analyse(&design);
    let per_component = component_checks(refs, &analysis, options);
    let pairs = analysis
        .pairs
        .iter()
        .map(|p| PairCheck {
            a: names[p.a].clone(),
            b: names[p.b].clone(),
            cosine: p.cosine,
            cosine_after_baseline: p.cosine_after_baseline,
            variance_inflation: p.variance_inflation,
            collinear: p.collinear(),
        })
        .collect();
    let range = design.range_nm();
    let mut warnings = collinearity_warnings(&analysis, &names, range, options.baseline);
    let solver = solver_for(&analysis, range, &mut warnings);
    quantitation_warnings(&per_component, &mut warnings);
    let best_range = scan(refs, &grid, options.baseline, design.n_components);
    Ok(CheckReport {
        components: names,
        range_nm: [range.0, range.1],
        n_points: design.n_points(),
        step_nm: options.step_nm,
        baseline: options.baseline.name().into(),
        noise_au: options.noise_au,
        pathlength_cm: options.pathlength_cm,
        condition_number: analysis.condition,
        solver: solver.into(),
        per_component,
        pairs,
        best_range,
        warnings,
    })
}

/// The wavelength range all references share, cut to the window, nm.
fn shared_range(refs: &ReferenceSet, window_nm: Option<(f64, f64)>) -> Result<(f64, f64)> {
    let describe: Vec<String> = refs
        .components
        .iter()
        .map(|c| format!("{} {}–{} nm", c.name, c.range_nm().0, c.range_nm().1))
        .collect();
    let (mut lo, mut hi) = refs.common_range_nm().ok_or_else(|| {
        Error::NoOverlap(format!(
            "the references have no wavelength range in common: {}",
            describe.join(", ")
        ))
    })?;
    if let Some((wlo, whi)) = window_nm {
        lo = lo.max(wlo);
        hi = hi.min(whi);
    }
    if hi.is_nan() || lo.is_nan() || hi <= lo {
        return Err(Error::NoOverlap(format!(
            "--range-nm leaves no wavelengths the references share ({})",
            describe.join(", ")
        )));
    }
    Ok((lo, hi))
}

/// Per component: VIF, predicted standard error, LOD and LOQ.
fn component_checks(
    refs: &ReferenceSet,
    analysis: &DesignAnalysis,
    options: &CheckOptions,
) -> Vec<ComponentCheck> {
    let l = options.pathlength_cm;
    refs.components
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let se = analysis.inverse_diag[i].map(|d| options.noise_au * d.sqrt() / l);
            let mg = |v: Option<f64>| {
                c.molar_mass_g_per_mol
                    .and_then(|m| v.map(|v| v * m * 1000.0))
            };
            ComponentCheck {
                name: c.name.clone(),
                vif: analysis.vif[i],
                std_error_mol_per_l: se,
                lod_mol_per_l: se.map(|s| LOD_FACTOR * s),
                loq_mol_per_l: se.map(|s| LOQ_FACTOR * s),
                std_error_mg_per_l: mg(se),
                lod_mg_per_l: mg(se.map(|s| LOD_FACTOR * s)),
                loq_mg_per_l: mg(se.map(|s| LOQ_FACTOR * s)),
                calibrated_max_mol_per_l: c.calibration().map(|k| k.concentration_max_mol_per_l),
            }
        })
        .collect()
}

/// The solver `fit` would use for this design; a refused one adds a warning.
fn solver_for(
    analysis: &DesignAnalysis,
    range: (f64, f64),
    warnings: &mut Vec<String>,
) -> &'static str {
    let solver = match analysis.condition {
        Some(c) if c < DEGENERATE_CONDITION && c > FALLBACK_CONDITION => "lawson-hanson",
        Some(c) if c < DEGENERATE_CONDITION => "normal-equations",
        _ => "refused",
    };
    if solver == "refused" {
        warnings.push(format!(
            "the set cannot be separated over {}–{} nm (condition number {}): `fit` refuses it; drop a reference or change the range",
            range.0,
            range.1,
            analysis
                .condition
                .map_or("infinite".into(), |c| format!("{c:.3e}"))
        ));
    }
    solver
}

/// A warning for each component whose predicted LOQ lies above the top of
/// its calibrated range.
fn quantitation_warnings(per_component: &[ComponentCheck], warnings: &mut Vec<String>) {
    for c in per_component {
        if let (Some(loq), Some(max)) = (c.loq_mol_per_l, c.calibrated_max_mol_per_l)
            && loq > max
        {
            warnings.push(format!(
                "'{}': the predicted limit of quantitation ({loq:.3e} mol/L) lies above the top of its calibrated range ({max:.3e} mol/L): it cannot be quantified within that range in this set",
                c.name
            ));
        }
    }
}

/// Scan windows of the grid for the best conditioning: edges at
/// [`SCAN_EDGES`] positions, windows at least [`SCAN_MIN_FRACTION`] of the
/// range wide; ties go to the wider window.
///
/// The criterion is the condition number with every column scaled to unit
/// length over the *whole* grid (over the whole grid it is the ordinary
/// column-scaled condition number). Scaling each window afresh would reward
/// a window that keeps only the weak tail of a band, since the scaled
/// condition number ignores how much signal is left.
pub fn scan(refs: &ReferenceSet, grid: &Grid, baseline: Baseline, k: usize) -> Option<RangeScan> {
    let w = grid.wavelengths_nm();
    let n = w.len();
    let p = k + baseline.n_terms();
    if n < p + 2 {
        return None;
    }
    let whole = preprocess::design(grid, refs, baseline, None).ok()?;
    let scale: Vec<f64> = (0..p)
        .map(|j| whole.column(j).iter().map(|v| v * v).sum::<f64>().sqrt())
        .collect();
    if scale.iter().any(|s| s.is_nan() || *s <= 0.0) {
        return None;
    }
    let stride = (n / SCAN_EDGES).max(1);
    let mut edges: Vec<usize> = (0..n).step_by(stride).collect();
    if edges.last() != Some(&(n - 1)) {
        edges.push(n - 1);
    }
    let span = w[n - 1] - w[0];
    let min_width = SCAN_MIN_FRACTION * span;
    let mut best: Option<(f64, usize, usize)> = None;
    for (ai, &s) in edges.iter().enumerate() {
        for &e in &edges[ai + 1..] {
            if w[e] - w[s] < min_width * (1.0 - 1e-12) || e - s + 1 < p + 2 {
                continue;
            }
            let Ok(sub) = Grid::new(w[s..=e].to_vec()) else {
                continue;
            };
            let Ok(d) = preprocess::design(&sub, refs, baseline, None) else {
                continue;
            };
            let Some(c) = fixed_scale_condition(&d, &scale) else {
                continue;
            };
            let better = match best {
                None => true,
                Some((bc, bs, be)) => {
                    c < bc * (1.0 - 1e-9) || (c <= bc * (1.0 + 1e-9) && w[e] - w[s] > w[be] - w[bs])
                }
            };
            if better {
                best = Some((c, s, e));
            }
        }
    }
    let (c, s, e) = best?;
    let sub = Grid::new(w[s..=e].to_vec()).ok()?;
    let d = preprocess::design(&sub, refs, baseline, None).ok()?;
    Some(RangeScan {
        range_nm: [w[s], w[e]],
        n_points: e - s + 1,
        scan_condition_number: c,
        condition_number: analyse(&d).condition,
        min_width_nm: min_width,
    })
}

/// Condition number of a design with its columns divided by fixed scales.
fn fixed_scale_condition(d: &Design, scale: &[f64]) -> Option<f64> {
    let p = d.n_columns();
    let mut g = DMatrix::<f64>::zeros(p, p);
    for i in 0..p {
        for j in i..p {
            let v = d
                .column(i)
                .iter()
                .zip(d.column(j))
                .map(|(a, b)| a * b)
                .sum::<f64>()
                / (scale[i] * scale[j]);
            g[(i, j)] = v;
            g[(j, i)] = v;
        }
    }
    let eig = SymmetricEigen::new(g);
    let max = eig.eigenvalues.iter().cloned().fold(0.0, f64::max);
    let min = eig
        .eigenvalues
        .iter()
        .cloned()
        .fold(f64::INFINITY, f64::min);
    (min > 0.0 && max.is_finite()).then(|| (max / min).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::reference::{Component, Conditions, Source};

    fn gaussian(name: &str, centre_nm: f64, width_nm: f64, peak: f64) -> Component {
        let w: Vec<f64> = (300..=700).map(f64::from).collect();
        let e = w
            .iter()
            .map(|x| peak * (-0.5 * ((x - centre_nm) / width_nm).powi(2)).exp())
            .collect();
        Component {
            name: name.into(),
            molar_mass_g_per_mol: None,
            note: None,
            created: String::new(),
            conditions: Conditions::default(),
            source: Source {
                kind: "imported".into(),
                file: None,
                sha256: None,
            },
            grid: Grid::new(w).unwrap(),
            epsilon_l_per_mol_cm: e,
            epsilon_std_error_l_per_mol_cm: None,
            extra: toml::Table::new(),
        }
    }

    #[test]
    fn orthogonal_columns_have_no_inflation() {
        // Two disjoint indicator columns: EᵀE = diag(2, 2), VIF = 1.
        let cols = [1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0, 1.0];
        let a = analyse_columns(&cols, 4, 2, 2);
        assert!((a.condition.unwrap() - 1.0).abs() < 1e-12);
        for v in &a.vif {
            assert!((v.unwrap() - 1.0).abs() < 1e-12);
        }
        for d in &a.inverse_diag {
            assert!((d.unwrap() - 0.5).abs() < 1e-12);
        }
        assert!(a.pairs[0].cosine.abs() < 1e-15);
    }

    #[test]
    fn two_column_vif_is_one_over_one_minus_cosine_squared() {
        // Columns (1, 0) and (cos t, sin t) at t = 0.3: the textbook
        // two-regressor identity VIF = 1/(1 − r²).
        let t: f64 = 0.3;
        let cols = [1.0, 0.0, 0.0, t.cos(), t.sin(), 0.0];
        let a = analyse_columns(&cols, 3, 2, 2);
        let want = 1.0 / (1.0 - t.cos().powi(2));
        assert!((a.vif[0].unwrap() - want).abs() < 1e-10 * want);
        assert!((a.pairs[0].variance_inflation.unwrap() - want).abs() < 1e-10 * want);
    }

    #[test]
    fn look_alike_pair_is_collinear_and_distinct_pair_is_not() {
        let alike = ReferenceSet {
            components: vec![
                gaussian("a", 500.0, 40.0, 1e4),
                gaussian("b", 502.0, 40.0, 1e4),
            ],
        };
        let r = check(&alike, &CheckOptions::default()).unwrap();
        assert!(r.pairs[0].collinear, "{:?}", r.pairs[0]);
        assert!(r.warnings[0].starts_with("collinear-references: 'a' and 'b'"));
        let distinct = ReferenceSet {
            components: vec![
                gaussian("a", 420.0, 30.0, 1e4),
                gaussian("b", 600.0, 30.0, 1e4),
            ],
        };
        let r = check(&distinct, &CheckOptions::default()).unwrap();
        assert!(!r.pairs[0].collinear);
        assert!(r.warnings.is_empty(), "{:?}", r.warnings);
    }

    #[test]
    fn identical_references_are_refused() {
        let same = ReferenceSet {
            components: vec![
                gaussian("a", 500.0, 40.0, 1e4),
                gaussian("b", 500.0, 40.0, 2e4),
            ],
        };
        let r = check(&same, &CheckOptions::default()).unwrap();
        assert_eq!(r.solver, "refused");
        assert!(r.warnings.iter().any(|w| w.contains("cannot be separated")));
    }

    fn two_band(name: &str, bands: &[(f64, f64, f64)]) -> Component {
        let mut c = gaussian(name, 500.0, 10.0, 0.0);
        let w = c.grid.wavelengths_nm().to_vec();
        c.epsilon_l_per_mol_cm = w
            .iter()
            .map(|x| {
                bands
                    .iter()
                    .map(|(m, s, h)| h * (-0.5 * ((x - m) / s).powi(2)).exp())
                    .sum()
            })
            .collect();
        c
    }

    #[test]
    fn scan_drops_the_band_both_references_share() {
        // a and b share a strong band at 400 nm and differ at 550 / 620 nm:
        // leaving the shared band's peak out improves the conditioning.
        let set = ReferenceSet {
            components: vec![
                two_band("a", &[(400.0, 25.0, 3e4), (550.0, 20.0, 1e4)]),
                two_band("b", &[(400.0, 25.0, 3e4), (620.0, 20.0, 1e4)]),
            ],
        };
        let grid = regular_grid(300.0, 700.0, 1.0).unwrap();
        for baseline in [Baseline::None, Baseline::Offset] {
            let whole = analyse(&preprocess::design(&grid, &set, baseline, None).unwrap())
                .condition
                .unwrap();
            let best = scan(&set, &grid, baseline, 2).unwrap();
            assert!(
                best.scan_condition_number < 0.75 * whole,
                "{best:?} vs {whole}"
            );
            assert!(best.range_nm[0] > 400.0, "{best:?}");
            assert!(
                best.range_nm[0] <= 530.0 && best.range_nm[1] >= 640.0,
                "{best:?}"
            );
        }
    }
}
