//! Weighted refits (stage 4 for heteroscedastic noise): when a spectrum's
//! noise grows with absorbance, refit it by generalised least squares.
//!
//! In: the unweighted solution of one spectrum. Out: its [`Outcome`] from
//! the weighted fit, or `None` when the noise does not grow measurably.
//!
//! Model: aᵢ = Σⱼ Eᵢⱼ·xⱼ + eᵢ with Var(eᵢ) = σ²·sᵢ², sᵢ² ∝ 1 + h·10^(2Âᵢ)
//! (Âᵢ the unweighted fit; [`noise::growth`]). Dividing each row by sᵢ
//! gives white noise of σ, so the same NNLS (Lawson & Hanson 1974) on the
//! scaled rows is the weighted fit with weights 1/sᵢ² (Aitken, Proc. R.
//! Soc. Edinb. 55:42, 1935), and its standard errors σ̂·√diag((EᵀWE)⁻¹)
//! are those of the weighted model. The weights come from the fitted
//! curve, not the readings, so they do not follow the noise. The residual
//! tests run on the scaled residual with the scaled design. Saturation-
//! masked samples are not reweighted (their high readings are already out).

use super::{FailedSample, Model, Outcome};
use crate::diagnostics::{self, SerialMoments, View, noise};
use crate::solver::{Prepared, Solution};

impl Model {
    /// Refit `a` with weights when its noise grows with absorbance.
    pub(super) fn refit_weighted(
        &self,
        sample: &str,
        a: &[f64],
        unweighted: &Solution,
        l_cm: f64,
    ) -> Option<Outcome> {
        if self.checks.weights != diagnostics::Weights::Estimated {
            return None;
        }
        let d = &self.design;
        let r = diagnostics::residual(a, &d.columns, &unweighted.x);
        let fitted: Vec<f64> = a.iter().zip(&r).map(|(v, e)| v - e).collect();
        let h = noise::growth(&r, &fitted)?;
        let sd = noise::relative_sd(&fitted, h);
        let n = a.len();
        let a_w: Vec<f64> = a.iter().zip(&sd).map(|(v, s)| v / s).collect();
        let cols_w: Vec<f64> = d
            .columns
            .chunks_exact(n)
            .flat_map(|c| c.iter().zip(&sd).map(|(v, s)| v / s))
            .collect();
        let fail = |why: String| {
            Outcome::Failed(FailedSample {
                sample: sample.to_string(),
                error: format!("weighted refit: {why}"),
            })
        };
        let prepared = match Prepared::new(
            &cols_w,
            n,
            d.n_columns(),
            d.n_components,
            &self.column_names,
        ) {
            Ok(p) => p,
            Err(e) => return Some(fail(e.to_string())),
        };
        let mut ws = prepared.workspace();
        let mut sol = match prepared.solve(&a_w, &mut ws) {
            Ok(s) => s,
            Err(e) => return Some(fail(e.to_string())),
        };
        // The report's RMS, R² and the screening's base are in AU.
        let weighted_rss = sol.rss;
        sol.rss = diagnostics::square_sums(&diagnostics::residual(a, &d.columns, &sol.x)).0;
        let mut result = self.assemble(sample.to_string(), a, &sol, l_cm);
        result.solver = std::borrow::Cow::Borrowed(prepared.method().name());
        let moments = SerialMoments::new(&prepared.columns, n, d.n_columns());
        let view = View {
            wavelengths_nm: &d.wavelengths_nm,
            columns: &cols_w,
            n_components: d.n_components,
            moments: &moments,
            uniform_step: self.uniform_step,
        };
        sol.rss = weighted_rss;
        self.check(&mut result, view, &a_w, &sol, None);
        if let Some(res) = result.diagnostics.as_mut() {
            res.noise_transmittance_share = Some(if h.is_finite() { h / (1.0 + h) } else { 1.0 });
        }
        Some(Outcome::Fitted(result))
    }
}
