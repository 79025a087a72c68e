//! Fit curves (diagnostics stage, for the report): from a fitted sample, its
//! measured spectrum and the design, the curves an analyst looks at.
//!
//! In: a [`Design`] (ε columns on the fitted range), a [`SampleResult`]
//! (concentrations, baseline, masking) and the sample's full-grid
//! absorbances. Out: [`Curves`] on the fitted range:
//!
//! ```text
//! contribution_i(λ) = l·εᵢ(λ)·cᵢ            (AU)
//! baseline(λ)       = b₀ + b₁·(λ − λ_ref)   (AU)
//! fitted(λ)         = Σ contribution_i(λ) + baseline(λ)
//! residual(λ)       = measured(λ) − fitted(λ)
//! ```
//!
//! The numbers are kept in full; only plotting decimates them.

use crate::fit::{FitReport, Outcome, SampleResult};
use crate::input::spectra::SpectraFile;
use crate::preprocess::{self, Design};
use crate::reference::ReferenceSet;
use serde::{Deserialize, Serialize};

/// The curves of one fitted sample, on the wavelengths of its fitted range.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Curves {
    /// Sample identifier (matches `samples[].sample` of the same document).
    pub sample: String,
    /// Wavelengths, nm.
    pub wavelengths_nm: Vec<f64>,
    /// Measured absorbance, AU (after conversion to decadic absorbance).
    pub measured_au: Vec<f64>,
    /// Fitted absorbance, AU (components plus baseline).
    pub fitted_au: Vec<f64>,
    /// Baseline term, AU (zeros with `--baseline none`).
    pub baseline_au: Vec<f64>,
    /// Each component's contribution l·εᵢ(λ)·cᵢ, AU, in component order.
    pub contributions_au: Vec<ComponentCurve>,
    /// Measured minus fitted, AU.
    pub residual_au: Vec<f64>,
    /// Noise standard deviation σ the residual was judged against, AU
    /// (absent when the residual checks were off).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub noise_au: Option<f64>,
    /// Whether each point was left out of the fit (saturation masking, spikes).
    pub masked: Vec<bool>,
}

/// One component's contribution curve.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ComponentCurve {
    /// Component name.
    pub name: String,
    /// l·εᵢ(λ)·cᵢ, AU.
    pub au: Vec<f64>,
}

/// The curves of one sample from its design, result and full-grid row;
/// `None` when the row holds a non-finite reading inside the range (a
/// saturated plate read), which JSON could not carry.
pub fn compute(design: &Design, result: &SampleResult, full_row: &[f64]) -> Option<Curves> {
    let a = full_row.get(design.start..design.end)?;
    if a.iter().any(|v| !v.is_finite()) || result.components.len() != design.n_components {
        return None;
    }
    let w = &design.wavelengths_nm;
    let n = w.len();
    let l = result.pathlength_cm;
    let contributions_au: Vec<ComponentCurve> = result
        .components
        .iter()
        .enumerate()
        .map(|(j, c)| ComponentCurve {
            name: c.name.to_string(),
            au: design
                .column(j)
                .iter()
                .map(|eps| l * eps * c.concentration_mol_per_l)
                .collect(),
        })
        .collect();
    let offset = result.baseline.offset_au.unwrap_or(0.0);
    let slope = result.baseline.slope_au_per_nm.unwrap_or(0.0);
    let baseline_au: Vec<f64> = w
        .iter()
        .map(|x| offset + slope * (x - result.baseline.reference_nm))
        .collect();
    let fitted_au: Vec<f64> = (0..n)
        .map(|i| baseline_au[i] + contributions_au.iter().map(|c| c.au[i]).sum::<f64>())
        .collect();
    let residual_au = (0..n).map(|i| a[i] - fitted_au[i]).collect();
    let masked = w
        .iter()
        .map(|x| {
            result
                .masking
                .as_ref()
                .is_some_and(|m| m.masked_nm.iter().any(|[lo, hi]| *x >= *lo && *x <= *hi))
                || result
                    .spikes_nm
                    .as_ref()
                    .is_some_and(|s| s.iter().any(|v| (v - x).abs() <= 1e-9 * x.abs().max(1.0)))
        })
        .collect();
    Some(Curves {
        sample: result.sample.clone(),
        wavelengths_nm: w.clone(),
        measured_au: a.to_vec(),
        fitted_au,
        baseline_au,
        contributions_au,
        residual_au,
        noise_au: result.diagnostics.as_ref().map(|d| d.noise_au),
        masked,
    })
}

/// Curves for every fitted sample of a report made from `file`, in the
/// order of the report's fitted samples. A block whose design cannot be
/// built (its samples failed) contributes nothing.
pub fn for_file(
    file: &SpectraFile,
    refs: &ReferenceSet,
    options: &crate::fit::FitOptions,
    report: &FitReport,
) -> Vec<Curves> {
    let mut by_position: Vec<Option<Curves>> = vec![None; report.outcomes.len()];
    for block in &file.blocks {
        let Ok(design) = preprocess::design(&block.grid, refs, options.baseline, options.window_nm)
        else {
            continue;
        };
        for (i, pos) in block.positions.iter().enumerate() {
            if let Some(Outcome::Fitted(s)) = report.outcomes.get(*pos) {
                by_position[*pos] = compute(&design, s, block.row(i));
            }
        }
    }
    by_position.into_iter().flatten().collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::{FitOptions, fit_file};
    use crate::input::spectra::{ReadOptions, read};
    use crate::reference::Component;

    /// Sums of floats of order 1 agree to a few ulps.
    const TOL_AU: f64 = 1e-9;

    fn comp(name: &str, eps: Vec<f64>) -> Component {
        Component::from_curve(
            name,
            vec![400.0, 450.0, 500.0, 550.0, 600.0],
            eps,
            "imported",
        )
        .unwrap()
    }

    #[test]
    fn contributions_and_baseline_add_up_to_the_fitted_curve() {
        let refs = ReferenceSet {
            components: vec![
                comp("a", vec![1000.0, 3000.0, 1000.0, 200.0, 0.0]),
                comp("b", vec![0.0, 200.0, 1000.0, 3000.0, 1000.0]),
            ],
        };
        // 2e-4 mol/L a, 1e-4 mol/L b, 0.01 AU offset, plus a little structure.
        let csv = "sample,400,450,500,550,600\ns1,0.212,0.631,0.31,0.35,0.11\n";
        let file = read(csv.as_bytes(), ReadOptions::default()).unwrap();
        let options = FitOptions::default();
        let report = fit_file(&file, &refs, &options).unwrap();
        let curves = for_file(&file, &refs, &options, &report);
        assert_eq!(curves.len(), 1);
        let c = &curves[0];
        assert_eq!(c.wavelengths_nm.len(), 5);
        for i in 0..5 {
            let sum = c.baseline_au[i] + c.contributions_au.iter().map(|k| k.au[i]).sum::<f64>();
            assert!((sum - c.fitted_au[i]).abs() < TOL_AU);
            assert!((c.measured_au[i] - c.fitted_au[i] - c.residual_au[i]).abs() < TOL_AU);
        }
        assert!(c.masked.iter().all(|m| !m));
    }
}
