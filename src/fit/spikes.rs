//! Spikes (stage 5 feeding back into stage 4): single readings far outside
//! the noise (a lamp flicker, a bubble, a scratch) are found in the
//! residual, left out of the fit, and reported with their wavelengths.
//!
//! In: a spectrum and its first solution. Out: the refitted [`Outcome`]
//! (flag [`FLAG_SPIKE`], `spikes_nm`), or `None` when there is no spike.
//!
//! A reading i is a spike when its pseudo-residual (Gasser, Sroka &
//! Jennen-Steinmetz, Biometrika 73:625, 1986), uᵢ = (½(rᵢ₋₁ + rᵢ₊₁) − rᵢ)/√1.5,
//! exceeds [`SPIKE_SIGMAS`] times the robust scale of all of them (1.4826 ×
//! their median magnitude; Hampel, JASA 69:383, 1974) and is the largest of
//! its neighbours (a spike of size S gives 0.82·S there and 0.41·S beside
//! it). The scale is that of the pseudo-residuals themselves, so noise
//! shared between neighbours (which makes them smaller) is allowed for;
//! where the noise grows with absorbance the threshold grows with it
//! (relative SD √(1 + h·10^(2A)) over its smallest value). The first and
//! last readings cannot be tested.

use super::{FailedSample, Model, Outcome};
use crate::diagnostics::{self, SerialMoments, View, mask, noise};
use crate::solver::{Prepared, Solution};

/// Flag: single readings far outside the noise were left out of the fit.
pub const FLAG_SPIKE: &str = "spike";

/// Threshold in robust SDs of the pseudo-residuals. Gaussian noise passes
/// 6 SD about twice in 10⁹ readings (common practice for outlier screens;
/// the issue asked for about 6 σ).
pub const SPIKE_SIGMAS: f64 = 6.0;

/// At most this share of the readings is treated as spikes; more is not a
/// spike but structure (a step pattern, quantisation) and is left alone.
pub const MAX_SPIKE_SHARE: f64 = 0.02;

/// Indices of spikes in residual `r` of a fit whose fitted curve is `fitted`.
pub fn find(r: &[f64], fitted: &[f64]) -> Vec<usize> {
    let n = r.len();
    if n < 5 {
        return Vec::new();
    }
    let u: Vec<f64> = (1..n - 1)
        .map(|i| ((0.5 * (r[i - 1] + r[i + 1]) - r[i]) / 1.5f64.sqrt()).abs())
        .collect();
    let Some(scale) = noise::mad_sigma(u.iter().copied()) else {
        return Vec::new();
    };
    let limit = SPIKE_SIGMAS * scale;
    if limit <= 0.0 || limit.is_nan() || u.iter().all(|v| *v <= limit) {
        return Vec::new();
    }
    let profile = noise::growth(r, fitted).map(|h| {
        let sd = noise::relative_sd(fitted, h);
        let least = sd.iter().fold(f64::INFINITY, |m, v| m.min(*v));
        sd.into_iter().map(|v| v / least).collect::<Vec<_>>()
    });
    let level = |i: usize| profile.as_ref().map_or(1.0, |p| p[i]);
    let found: Vec<usize> = (0..u.len())
        .filter(|&j| {
            let left = if j > 0 { u[j - 1] } else { 0.0 };
            let right = u.get(j + 1).copied().unwrap_or(0.0);
            u[j] > limit * level(j + 1) && u[j] >= left && u[j] >= right
        })
        .map(|j| j + 1)
        .collect();
    let cap = ((MAX_SPIKE_SHARE * n as f64) as usize).max(1);
    if found.len() > cap { Vec::new() } else { found }
}

impl Model {
    /// Refit `a` without its spikes, if it has any.
    pub(super) fn refit_without_spikes(
        &self,
        sample: &str,
        a: &[f64],
        first: &Solution,
        l_cm: f64,
    ) -> Option<Outcome> {
        self.checks.residual?;
        let d = &self.design;
        let r = diagnostics::residual(a, &d.columns, &first.x);
        let fitted: Vec<f64> = a.iter().zip(&r).map(|(v, e)| v - e).collect();
        let spikes = find(&r, &fitted);
        if spikes.is_empty() {
            return None;
        }
        let mut keep = vec![true; a.len()];
        spikes.iter().for_each(|&i| keep[i] = false);
        let a_kept = mask::select(a, &keep);
        let w_kept = mask::select(&d.wavelengths_nm, &keep);
        let cols = mask::rows(&d.columns, d.n_points(), &keep);
        let solved = Prepared::new(
            &cols,
            a_kept.len(),
            d.n_columns(),
            d.n_components,
            &self.column_names,
        )
        .and_then(|p| {
            let mut ws = p.workspace();
            p.solve(&a_kept, &mut ws).map(|s| (p, s))
        });
        let (prepared, sol) = match solved {
            Ok(v) => v,
            Err(e) => {
                return Some(Outcome::Failed(FailedSample {
                    sample: sample.to_string(),
                    error: format!("refit without {} spike(s): {e}", spikes.len()),
                }));
            }
        };
        let mut result = self.assemble(sample.to_string(), &a_kept, &sol, l_cm);
        result.solver = std::borrow::Cow::Borrowed(prepared.method().name());
        result.flags.push(FLAG_SPIKE.to_string());
        result.spikes_nm = Some(spikes.iter().map(|&i| d.wavelengths_nm[i]).collect());
        let moments = SerialMoments::new(&prepared.columns, a_kept.len(), d.n_columns());
        let view = View {
            wavelengths_nm: &w_kept,
            columns: &cols,
            n_components: d.n_components,
            moments: &moments,
            uniform_step: diagnostics::uniform_step(&w_kept),
        };
        self.check(&mut result, view, &a_kept, &sol, Some(&keep));
        Some(Outcome::Fitted(result))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_single_high_reading_is_a_spike_and_its_neighbours_are_not() {
        // Deterministic ±1 mAU pattern: pseudo-residual scale about 1.6 mAU.
        let mut r: Vec<f64> = (0..200)
            .map(|i| if i % 3 == 0 { 1e-3 } else { -1e-3 })
            .collect();
        let flat = vec![0.1; 200];
        assert!(find(&r, &flat).is_empty());
        r[77] += 0.3;
        assert_eq!(find(&r, &flat), vec![77]);
    }
}
