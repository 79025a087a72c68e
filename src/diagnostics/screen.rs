//! Candidate screening (`--screen-with`): which extra component explains a
//! flagged residual.
//!
//! For a flagged sample, each candidate ε curve is added to the design as
//! one more non-negative column and the spectrum is refitted. The extra sum
//! of squares gives the F-test for nested least-squares models,
//! F = (RSS₀ − RSS₁) / (RSS₁/(n − p₁)) on (1, n − p₁) degrees of freedom
//! (e.g. Draper & Smith, *Applied Regression Analysis*, 3rd ed., 1998,
//! "extra sum of squares" principle). The candidate's concentration is
//! constrained to be ≥ 0, so the test is one-sided and the p-value is half
//! the F tail (the null distribution is an even mixture of 0 and F(1, ν)).
//!
//! A candidate *explains* the residual when its p-value is below α/m (the
//! alarm rate shared by the m candidates tried, Bonferroni) and the
//! refitted residual is no longer flagged. A candidate that only takes up
//! part of a structured residual passes the F-test easily (the test assumes
//! the larger model is right), which is why the second condition is there.

use super::{ResidualOptions, SerialMoments, View, examine, mask, stats};
use crate::reference::ReferenceSet;
use crate::reference::component::interpolate;
use crate::solver::Prepared;
use serde::{Deserialize, Serialize};

/// A reference component refitted beside a candidate.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Refitted {
    /// Component name.
    pub name: String,
    /// Concentration with the candidate in the model, mol/L.
    pub concentration_mol_per_l: f64,
}

/// One candidate tried on one sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct CandidateResult {
    /// Candidate name (its file stem in the screening library).
    pub name: String,
    /// Its estimated concentration, mol/L.
    pub concentration_mol_per_l: f64,
    /// Standard error of that concentration, mol/L.
    pub std_error_mol_per_l: f64,
    /// Concentration in mg/L, when the candidate's molar mass is known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub concentration_mg_per_l: Option<f64>,
    /// F statistic of the extra sum of squares (1 and n − p₁ degrees of freedom).
    pub f_statistic: f64,
    /// One-sided p-value of the F-test.
    pub p_value: f64,
    /// Residual RMS with the candidate in the model, AU.
    pub residual_rms_au: f64,
    /// Whether the residual with the candidate is still more than noise.
    pub still_flagged: bool,
    /// Significant at α/m and the residual left is noise.
    pub explains: bool,
    /// The reference components refitted with the candidate.
    pub refitted: Vec<Refitted>,
}

/// Screening of one flagged sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Screening {
    /// The significance level each candidate was tested at (α/m).
    pub level: f64,
    /// The best candidate that explains the residual, if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub best: Option<CandidateResult>,
    /// Every candidate tried, best fit (smallest RSS) first.
    pub tried: Vec<CandidateResult>,
}

#[derive(Debug, Clone)]
struct Candidate {
    name: String,
    molar_mass_g_per_mol: Option<f64>,
    /// Augmented unscaled columns: components, candidate, baseline terms.
    columns: Vec<f64>,
    names: Vec<String>,
    prepared: Prepared,
    moments: SerialMoments,
}

/// Candidates made ready for one design.
#[derive(Debug, Clone)]
pub struct Screener {
    n: usize,
    n_components: usize,
    candidates: Vec<Candidate>,
}

impl Screener {
    /// Put each candidate on the design's wavelengths. Candidates that do
    /// not cover the range, share a name with a reference, or cannot be told
    /// apart from the references are left out, each with a warning.
    pub fn new(
        wavelengths_nm: &[f64],
        columns: &[f64],
        n_components: usize,
        column_names: &[String],
        candidates: &ReferenceSet,
    ) -> (Self, Vec<String>) {
        let n = wavelengths_nm.len();
        let p = column_names.len();
        let mut warnings = Vec::new();
        let mut out = Vec::new();
        let (lo, hi) = (wavelengths_nm[0], wavelengths_nm[n - 1]);
        for c in &candidates.components {
            if column_names[..n_components].contains(&c.name) {
                warnings.push(format!(
                    "candidate '{}' is also a fitted component: not screened",
                    c.name
                ));
                continue;
            }
            let w = c.grid.wavelengths_nm();
            let col: Option<Vec<f64>> = wavelengths_nm
                .iter()
                .map(|&x| interpolate(w, &c.epsilon_l_per_mol_cm, x))
                .collect();
            let Some(col) = col else {
                let (clo, chi) = c.range_nm();
                warnings.push(format!(
                    "candidate '{}' covers {clo}–{chi} nm, the fit uses {lo}–{hi} nm: not screened",
                    c.name
                ));
                continue;
            };
            let mut aug = Vec::with_capacity(n * (p + 1));
            aug.extend_from_slice(&columns[..n_components * n]);
            aug.extend_from_slice(&col);
            aug.extend_from_slice(&columns[n_components * n..p * n]);
            let mut names: Vec<String> = column_names[..n_components].to_vec();
            names.push(c.name.clone());
            names.extend_from_slice(&column_names[n_components..]);
            match Prepared::new(&aug, n, p + 1, n_components + 1, &names) {
                Ok(prepared) => {
                    let moments = SerialMoments::new(&prepared.columns, n, p + 1);
                    out.push(Candidate {
                        name: c.name.clone(),
                        molar_mass_g_per_mol: c.molar_mass_g_per_mol,
                        columns: aug,
                        names,
                        prepared,
                        moments,
                    });
                }
                Err(e) => warnings.push(format!("candidate '{}' not screened: {e}", c.name)),
            }
        }
        (
            Screener {
                n,
                n_components,
                candidates: out,
            },
            warnings,
        )
    }

    /// Number of candidates that will be tried.
    pub fn len(&self) -> usize {
        self.candidates.len()
    }

    /// Whether no candidate is usable.
    pub fn is_empty(&self) -> bool {
        self.candidates.is_empty()
    }

    /// Try every candidate on spectrum `a` (the design's points, or those
    /// `keep` selects when the sample was masked). `base_rss` is the
    /// residual sum of squares without a candidate.
    pub fn screen(&self, input: ScreenInput<'_>, opts: &ResidualOptions) -> Option<Screening> {
        if self.candidates.is_empty() {
            return None;
        }
        let level = opts.alarm_rate / self.candidates.len() as f64;
        let k = self.n_components;
        let mut tried = Vec::new();
        for c in &self.candidates {
            let owned;
            let (prepared, columns, moments, wl): (&Prepared, &[f64], &SerialMoments, &[f64]) =
                match input.keep {
                    None => (&c.prepared, &c.columns, &c.moments, input.wavelengths_nm),
                    Some(keep) => {
                        let cols = mask::rows(&c.columns, self.n, keep);
                        let m = input.wavelengths_nm.len();
                        let Ok(prep) = Prepared::new(&cols, m, c.names.len(), k + 1, &c.names)
                        else {
                            continue;
                        };
                        let mom = SerialMoments::new(&prep.columns, m, c.names.len());
                        owned = (prep, cols, mom);
                        (&owned.0, &owned.1, &owned.2, input.wavelengths_nm)
                    }
                };
            let mut ws = prepared.workspace();
            let Ok(sol) = prepared.solve(input.a, &mut ws) else {
                continue;
            };
            let n = input.a.len();
            let p1 = sol.n_passive;
            let x_c = sol.x[k];
            let nu2 = n.saturating_sub(p1).max(1) as f64;
            let gain = (input.base_rss - sol.rss).max(0.0);
            let f = if x_c > 0.0 && sol.rss > 0.0 {
                gain / (sol.rss / nu2)
            } else {
                0.0
            };
            let p_value = if f > 0.0 {
                0.5 * stats::f_sf(f, 1.0, nu2)
            } else {
                1.0
            };
            let view = View {
                wavelengths_nm: wl,
                columns,
                n_components: k + 1,
                moments,
                uniform_step: super::uniform_step(wl),
            };
            let still_flagged = examine(view, input.a, &sol.x, opts).flagged();
            let l = input.pathlength_cm;
            let conc = x_c / l;
            tried.push((
                sol.rss,
                CandidateResult {
                    name: c.name.clone(),
                    concentration_mol_per_l: conc,
                    std_error_mol_per_l: sol.std_error[k] / l,
                    concentration_mg_per_l: c.molar_mass_g_per_mol.map(|m| conc * m * 1000.0),
                    f_statistic: f,
                    p_value,
                    residual_rms_au: (sol.rss / n as f64).sqrt(),
                    still_flagged,
                    explains: p_value < level && !still_flagged,
                    refitted: (0..k)
                        .map(|j| Refitted {
                            name: c.names[j].clone(),
                            concentration_mol_per_l: sol.x[j] / l,
                        })
                        .collect(),
                },
            ));
        }
        tried.sort_by(|a, b| a.0.total_cmp(&b.0));
        let tried: Vec<CandidateResult> = tried.into_iter().map(|(_, c)| c).collect();
        let best = tried.iter().find(|c| c.explains).cloned();
        Some(Screening { level, best, tried })
    }
}

/// One sample as the screener needs it.
#[derive(Debug, Clone, Copy)]
pub struct ScreenInput<'a> {
    /// Absorbances of the points used, AU.
    pub a: &'a [f64],
    /// Wavelengths of the points used, nm.
    pub wavelengths_nm: &'a [f64],
    /// Which of the design's points were used (masked samples only).
    pub keep: Option<&'a [bool]>,
    /// Residual sum of squares of the fit without a candidate.
    pub base_rss: f64,
    /// Pathlength, cm.
    pub pathlength_cm: f64,
}
