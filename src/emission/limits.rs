//! Detection limits for emission (diagnostics): LOD and LOQ of each
//! component from its emission curve and the emission noise, beside those
//! from its absorptivity curve and the absorbance noise, so a user sees
//! where fluorescence beats absorbance.
//!
//! In: a [`ReferenceSet`], the excitation and [`LimitOptions`]. Out: one
//! [`ComponentLimits`] per component. Both predictions are those of
//! `library check` ([`crate::separability::check`]): SE(cᵢ) =
//! σ·√[(EᵀE)⁻¹]ᵢᵢ for the design E of the whole set over its common range
//! (baseline included), LOD = 3.3·SE, LOQ = 10·SE (ICH Q2(R1) conventions;
//! common practice). For emission, E holds the emission curves (intensity
//! per mol/L) and σ is the emission noise per reading in intensity units.

use super::fit::emission_set;
use crate::error::Result;
use crate::reference::ReferenceSet;
use crate::separability::{self, CheckOptions};
use serde::{Deserialize, Serialize};

/// Options of an emission limit check.
#[derive(Debug, Clone, Copy)]
pub struct LimitOptions {
    /// Excitation wavelength, nm.
    pub excitation_nm: f64,
    /// Emission noise per reading, in the references' intensity units.
    pub emission_noise: f64,
    /// The absorbance side (noise in AU, pathlength, step, baseline).
    pub absorbance: CheckOptions,
}

/// LOD and LOQ of one component by each technique.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ComponentLimits {
    /// Component name.
    pub name: String,
    /// Emission LOD, mol/L (absent when the set cannot be separated).
    pub emission_lod_mol_per_l: Option<f64>,
    /// Emission LOQ, mol/L.
    pub emission_loq_mol_per_l: Option<f64>,
    /// Absorbance LOD, mol/L (with the absorbance noise and pathlength).
    pub absorbance_lod_mol_per_l: Option<f64>,
    /// Absorbance LOQ, mol/L.
    pub absorbance_loq_mol_per_l: Option<f64>,
}

/// Emission and absorbance limits of every component of `refs`.
pub fn limits(refs: &ReferenceSet, options: &LimitOptions) -> Result<Vec<ComponentLimits>> {
    let emission_refs = emission_set(refs, options.excitation_nm)?;
    let emission = separability::check(
        &emission_refs,
        &CheckOptions {
            noise_au: options.emission_noise,
            pathlength_cm: 1.0,
            window_nm: None,
            ..options.absorbance
        },
    )?;
    let absorbance = separability::check(refs, &options.absorbance)?;
    Ok(emission
        .per_component
        .iter()
        .zip(&absorbance.per_component)
        .map(|(e, a)| ComponentLimits {
            name: e.name.clone(),
            emission_lod_mol_per_l: e.lod_mol_per_l,
            emission_loq_mol_per_l: e.loq_mol_per_l,
            absorbance_lod_mol_per_l: a.lod_mol_per_l,
            absorbance_loq_mol_per_l: a.loq_mol_per_l,
        })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::reference::{Component, EmissionCurve};

    /// One component with flat curves and no baseline term.
    #[test]
    fn single_component_limits_follow_the_closed_form() {
        // E is one column of n equal values s: (EᵀE)⁻¹ = 1/(n·s²), so
        // SE = σ/(s·√n) (ordinary least squares, by hand).
        let w: Vec<f64> = (400..=500).map(f64::from).collect();
        let n = w.len() as f64;
        let mut c = Component::from_curve("flat", w.clone(), vec![1000.0; w.len()], "x").unwrap();
        c.set_emission(EmissionCurve::new(350.0, w.clone(), vec![1e9; w.len()]).unwrap())
            .unwrap();
        let refs = ReferenceSet {
            components: vec![c],
        };
        let opts = LimitOptions {
            excitation_nm: 350.0,
            emission_noise: 2.0,
            absorbance: CheckOptions {
                baseline: crate::preprocess::Baseline::None,
                noise_au: 0.001,
                ..CheckOptions::default()
            },
        };
        let got = &limits(&refs, &opts).unwrap()[0];
        let em_se = 2.0 / (1e9 * n.sqrt());
        let ab_se = 0.001 / (1000.0 * n.sqrt());
        let close = |a: Option<f64>, b: f64| (a.unwrap() / b - 1.0).abs() < 1e-9;
        assert!(close(got.emission_lod_mol_per_l, 3.3 * em_se), "{got:?}");
        assert!(close(got.emission_loq_mol_per_l, 10.0 * em_se));
        assert!(close(got.absorbance_lod_mol_per_l, 3.3 * ab_se));
    }
}
