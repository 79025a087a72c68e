//! Residual diagnostics (stage 5): is what the references leave over more
//! than noise, where does it lie, and which candidate could explain it.
//!
//! In: one fitted spectrum, its design (the columns εᵢ(λ) and baseline
//! terms of A(λ) = l·Σ εᵢ(λ)·cᵢ + b₀ + b₁·(λ − λ_mid)) and the solution.
//! Out: a [`Residual`] report: a noise estimate, reduced χ², the
//! Durbin–Watson statistic with its p-value, a runs test, and, when the
//! residual is more than noise, the largest coherent residual band.
//!
//! The residual r = a − E·x is recomputed here from the design (the solver
//! returns only its sum of squares). The tests:
//!
//! - Noise σ: from the data itself, as 1.4826 × the median absolute
//!   pseudo-residual of Gasser, Sroka & Jennen-Steinmetz (Biometrika
//!   73:625, 1986), ẽᵢ = (aᵢ·rᵢ₋₁ + bᵢ·rᵢ₊₁ − rᵢ)/√(aᵢ² + bᵢ² + 1) with
//!   aᵢ = (λᵢ₊₁ − λᵢ)/(λᵢ₊₁ − λᵢ₋₁), bᵢ = 1 − aᵢ (a second difference that
//!   has variance σ² under white noise, also on uneven grids). The median
//!   makes it robust to spikes; 1.4826 = 1/Φ⁻¹(3/4) turns a median absolute
//!   deviation into a Gaussian σ (Hampel, JASA 69:383, 1974). It is taken
//!   from the residual, not the raw spectrum, so the curvature of the
//!   reference bands does not inflate it. Or σ is given (`--noise-au`).
//! - Reduced χ² = RSS / (ν·σ²), ν = n − (number of free parameters).
//! - Durbin–Watson d = Σ(rᵢ − rᵢ₋₁)² / Σrᵢ² (Durbin & Watson, Biometrika
//!   37:409, 1950 and 38:159, 1951). Under white Gaussian noise d does not
//!   depend on σ, and its exact mean and variance follow from the design:
//!   with M = I − X(XᵀX)⁻¹Xᵀ and A the first-difference form (d = rᵀAr/rᵀr),
//!   E[d] = P/ν and Var[d] = 2(Q − P·E[d])/(ν(ν+2)), P = tr(MA),
//!   Q = tr((MA)²) (Durbin & Watson 1950, §3). The lower-tail p-value uses a
//!   beta distribution on [0, 4] with that mean and variance (the kind of
//!   approximation Durbin & Watson, Biometrika 58:1, 1971, recommend;
//!   recalled from memory). A smooth unexplained band makes neighbouring
//!   residuals alike, so d falls below 2.
//! - Runs test (Wald & Wolfowitz, Ann. Math. Stat. 11:147, 1940): too few
//!   runs of residual signs. Distribution-free, reported as a second
//!   opinion but not used for the flag (it is weaker and correlated with d).
//!
//! The flag `unexplained-absorbance` is raised when the alarm p-value is
//! below the alarm rate α. With σ estimated, the alarm p-value is that of
//! the Durbin–Watson test (the χ² with an estimated σ measures the same
//! thing and adds nothing). With σ given, d and RSS are independent under
//! the null (d depends only on the direction of the residual vector), so
//! the two tests are combined by Šidák: p = 1 − (1 − min(p_d, p_χ²))².
//! Either way a clean sample with white Gaussian noise is flagged with
//! probability α.

pub mod band;
pub mod mask;
pub mod noise;
pub mod screen;
pub mod serial;
pub mod stats;

use crate::error::{Error, Result};
use crate::reference::ReferenceSet;
use serde::{Deserialize, Serialize};
use std::borrow::Cow;

pub use band::{BAND_SMOOTH_HALF_WIDTH, Band, largest_bands};
use serial::durbin_watson_of;
pub use serial::{RunsTest, SerialMoments, durbin_watson, runs_test, square_sums};

/// Default false-alarm rate of the unexplained-absorbance flag.
pub const DEFAULT_ALARM_RATE: f64 = 0.01;

/// Default ceiling, AU: points above it are masked out of the fit. Common
/// practice (no single source): above about 2 AU stray light biases
/// readings low and little light reaches the detector.
pub const DEFAULT_MAX_ABSORBANCE_AU: f64 = 2.0;

/// 1/Φ⁻¹(3/4): turns a median absolute deviation into a Gaussian σ
/// (Hampel 1974; Φ⁻¹(0.75) = 0.6744897501960817 from scipy.stats.norm.ppf).
pub const MAD_TO_SIGMA: f64 = 1.482_602_218_505_602;

/// Flag: the residual is more than noise at the alarm rate.
pub const FLAG_UNEXPLAINED: &str = "unexplained-absorbance";

/// Options of the residual tests.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ResidualOptions {
    /// Noise σ of the absorbance readings, AU; `None` estimates it per spectrum.
    pub noise_au: Option<f64>,
    /// False-alarm rate α of the unexplained-absorbance flag (0 < α < 0.5).
    pub alarm_rate: f64,
}

impl Default for ResidualOptions {
    fn default() -> Self {
        ResidualOptions {
            noise_au: None,
            alarm_rate: DEFAULT_ALARM_RATE,
        }
    }
}

/// What to check beside the fit.
#[derive(Debug, Clone)]
pub struct Options {
    /// Residual tests; `None` skips them (no noise estimate, no flag).
    pub residual: Option<ResidualOptions>,
    /// Saturation ceiling, AU; points above it are left out of the fit.
    /// `None` keeps every point.
    pub max_absorbance_au: Option<f64>,
    /// Candidate components tried on flagged samples (`--screen-with`).
    pub candidates: Option<ReferenceSet>,
    /// How the readings are weighted in the fit.
    pub weights: Weights,
}

/// How the readings are weighted in the fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Weights {
    /// Every reading counts the same (ordinary least squares).
    None,
    /// Each spectrum's noise growth with absorbance is estimated
    /// ([`noise::growth`]); when it grows measurably the spectrum is refitted
    /// with weights 1/σᵢ² (generalised least squares, Aitken 1935).
    #[default]
    Estimated,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            residual: Some(ResidualOptions::default()),
            max_absorbance_au: Some(DEFAULT_MAX_ABSORBANCE_AU),
            candidates: None,
            weights: Weights::Estimated,
        }
    }
}

impl Options {
    /// No checks and no masking: the plain fit.
    pub fn off() -> Self {
        Options {
            residual: None,
            max_absorbance_au: None,
            candidates: None,
            weights: Weights::None,
        }
    }

    /// Check the numbers, saying which is wrong and what was expected.
    pub fn validate(&self) -> Result<()> {
        if let Some(r) = &self.residual {
            if !(r.alarm_rate > 0.0 && r.alarm_rate < 0.5) {
                return Err(Error::Invalid(format!(
                    "alarm rate {}: expected a probability between 0 and 0.5, e.g. 0.01",
                    r.alarm_rate
                )));
            }
            if let Some(s) = r.noise_au
                && !(s.is_finite() && s > 0.0)
            {
                return Err(Error::Invalid(format!(
                    "noise {s} AU: expected a positive number of AU"
                )));
            }
        }
        if let Some(c) = self.max_absorbance_au
            && !(c.is_finite() && c > 0.0)
        {
            return Err(Error::Invalid(format!(
                "maximum absorbance {c} AU: expected a positive number of AU"
            )));
        }
        Ok(())
    }
}

/// The residual diagnostics of one sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Residual {
    /// Noise σ used, AU.
    pub noise_au: f64,
    /// `estimated` (from the residual's pseudo-residuals) or `given` (`--noise-au`).
    pub noise_source: Cow<'static, str>,
    /// RSS / (ν·σ²); about 1 when the residual is noise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reduced_chi_squared: Option<f64>,
    /// Upper-tail p-value of RSS/σ² against χ²(ν); only with a given σ.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub chi_squared_p_value: Option<f64>,
    /// Durbin–Watson statistic (about 2 for white noise, lower for smooth structure).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub durbin_watson: Option<f64>,
    /// Its exact expectation for this design under white noise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub durbin_watson_expected: Option<f64>,
    /// Lower-tail p-value of the Durbin–Watson statistic.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub durbin_watson_p_value: Option<f64>,
    /// Runs test on the residual signs.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runs: Option<RunsTest>,
    /// The false-alarm rate the flag was tested at.
    pub alarm_rate: f64,
    /// The p-value compared with the alarm rate (see the module docs).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub alarm_p_value: Option<f64>,
    /// The largest positive residual band (absorbance the references do not
    /// explain); present when the sample is flagged.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub band: Option<Band>,
    /// The largest negative residual band (the spectrum reads below the
    /// fit); present when the sample is flagged.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub negative_band: Option<Band>,
    /// Readings that share noise (instrument smoothing), when the noise is
    /// correlated between neighbours; absent for white noise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub noise_span_readings: Option<f64>,
    /// Correlation between neighbouring readings' noise (moving-average
    /// model), when correlated.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lag1_correlation: Option<f64>,
    /// Readings summed per block for the serial test (correlated noise).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub block_readings: Option<usize>,
    /// Factor applied to the standard errors for correlated noise, √(f₀/σ̂²).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub std_error_factor: Option<f64>,
    /// Share of the noise variance at 0 AU that is constant in transmittance
    /// (σ² ∝ 1 + h·10^(2A), share h/(1 + h)); present when the noise grows
    /// with absorbance and the fit was weighted.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub noise_transmittance_share: Option<f64>,
    /// The fit is exact (residual at rounding level): not tested.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub exact_fit: bool,
}

impl Residual {
    /// Whether the residual is more than noise at the alarm rate.
    pub fn flagged(&self) -> bool {
        self.alarm_p_value.is_some_and(|p| p < self.alarm_rate)
    }
}

/// r = a − E·x for column-major `columns` (n points each) and coefficients x.
// Compiled for AVX2 as well as the baseline (chosen at run time); the
// operations and their order are the same, so every version gives the same bits.
#[multiversion::multiversion(targets("x86_64+avx2"))]
pub fn residual(a: &[f64], columns: &[f64], x: &[f64]) -> Vec<f64> {
    let n = a.len();
    let mut r = a.to_vec();
    for (j, &xj) in x.iter().enumerate() {
        if xj != 0.0 {
            let col = &columns[j * n..(j + 1) * n];
            for (ri, ci) in r.iter_mut().zip(col) {
                *ri -= ci * xj;
            }
        }
    }
    r
}

/// Gasser–Sroka–Jennen-Steinmetz pseudo-residuals of `r` on `wavelengths_nm`
/// (n − 2 values, each with variance σ² under white noise of σ).
pub fn pseudo_residuals(wavelengths_nm: &[f64], r: &[f64]) -> Vec<f64> {
    let n = r.len().min(wavelengths_nm.len());
    if n < 3 {
        return Vec::new();
    }
    let w = wavelengths_nm;
    // On an even step a = b = 1/2 and the norm is √1.5: skip the divisions.
    let even = 1.0 / 1.5f64.sqrt();
    (1..n - 1)
        .map(|i| {
            let (h1, h2) = (w[i] - w[i - 1], w[i + 1] - w[i]);
            if (h1 - h2).abs() <= 1e-9 * h1 {
                (0.5 * (r[i - 1] + r[i + 1]) - r[i]) * even
            } else {
                let a = h2 / (h1 + h2);
                let b = 1.0 - a;
                (a * r[i - 1] + b * r[i + 1] - r[i]) / (a * a + b * b + 1.0).sqrt()
            }
        })
        .collect()
}

/// Robust noise σ (AU) of a residual: 1.4826 × median |pseudo-residual|.
/// `None` with fewer than 3 points.
pub fn noise_au(wavelengths_nm: &[f64], r: &[f64]) -> Option<f64> {
    noise_au_with(wavelengths_nm, r, uniform_step(wavelengths_nm))
}

/// Whether every step of a wavelength grid is the same (to 1e-9 relative),
/// as [`pseudo_residuals`] decides point by point.
pub fn uniform_step(wavelengths_nm: &[f64]) -> bool {
    wavelengths_nm.windows(3).all(|t| {
        let (h1, h2) = (t[1] - t[0], t[2] - t[1]);
        (h1 - h2).abs() <= 1e-9 * h1
    })
}

/// [`noise_au`] with the grid's [`uniform_step`] already known. On an even
/// grid the pseudo-residuals are (½(rᵢ₋₁ + rᵢ₊₁) − rᵢ)/√1.5, computed in one
/// pass; the median of their magnitudes is selected on the bit patterns
/// (for non-negative floats the integer order is the numeric order), which
/// gives the same value as comparing the floats, faster.
pub fn noise_au_with(wavelengths_nm: &[f64], r: &[f64], uniform: bool) -> Option<f64> {
    let n = r.len().min(wavelengths_nm.len());
    if n < 3 {
        return None;
    }
    // One selection buffer per thread (noise::mad_sigma): a fit examines
    // every sample, and a fresh vector per sample costs as much as the selection.
    if uniform {
        let even = 1.0 / 1.5f64.sqrt();
        noise::mad_sigma(
            r[..n]
                .windows(3)
                .map(|t| (0.5 * (t[0] + t[2]) - t[1]) * even),
        )
    } else {
        noise::mad_sigma(pseudo_residuals(wavelengths_nm, r).into_iter())
    }
}

/// What [`examine`] needs to know about the design a spectrum was fitted with.
#[derive(Debug, Clone, Copy)]
pub struct View<'a> {
    /// Wavelengths of the points used, nm.
    pub wavelengths_nm: &'a [f64],
    /// Unscaled design columns over those points, column-major.
    pub columns: &'a [f64],
    /// Number of component (non-negative) columns; baseline terms follow.
    pub n_components: usize,
    /// The design's Durbin–Watson moments.
    pub moments: &'a SerialMoments,
    /// Whether the wavelengths are evenly spaced ([`uniform_step`]): the
    /// noise estimate then takes its fast path.
    pub uniform_step: bool,
}

/// Below this ratio of residual to signal RMS a fit is exact: what is left
/// is the rounding of the arithmetic (about 1e-16 relative) or of an export
/// with at least nine significant digits, not noise, and is not tested.
pub const EXACT_FIT_RELATIVE: f64 = 1e-9;

/// Test one fitted spectrum `a` with solution `x` (unscaled) against noise.
pub fn examine(view: View<'_>, a: &[f64], x: &[f64], opts: &ResidualOptions) -> Residual {
    let r = residual(a, view.columns, x);
    let n = a.len();
    let passive: Vec<bool> = x
        .iter()
        .enumerate()
        .map(|(j, v)| j >= view.n_components || *v > 0.0)
        .collect();
    let n_free = passive.iter().filter(|b| **b).count();
    let (rss, diff_ss) = square_sums(&r);
    let near = noise_au_with(view.wavelengths_nm, &r, view.uniform_step);
    let model = near.map(|s| noise::estimate(&r, s));
    let (noise, source) = match (opts.noise_au, model) {
        (Some(s), _) => (Some(s), "given"),
        (None, m) => (m.map(|m| m.sigma_au), "estimated"),
    };
    let sigma = noise.unwrap_or(0.0);
    let correlated = model.is_some_and(|m| m.correlated());
    let nu = n.saturating_sub(n_free);
    let chi2 = (sigma > 0.0 && nu > 0).then(|| rss / (sigma * sigma));
    let reduced = chi2.map(|c| c / nu as f64);
    // The χ² test needs white noise of the given σ: under correlated noise
    // RSS/σ² is no longer χ²(ν), so only the serial test decides.
    let chi_p = match (opts.noise_au, chi2) {
        (Some(_), Some(c)) if !correlated => Some(stats::chi_squared_sf(c, nu as f64)),
        _ => None,
    };
    let d = durbin_watson_of(rss, diff_ss, n);
    let moments = view.moments.durbin_watson(&passive);
    let serial = match model.filter(|m| m.correlated()) {
        Some(m) => blocked_test(view.moments, &r, &passive, m),
        None => Serial::plain(d, moments),
    };
    let exact = rss.sqrt() <= EXACT_FIT_RELATIVE * square_sums(a).0.sqrt();
    let alarm_p_value = match (serial.p_value, chi_p) {
        _ if exact => None,
        (Some(pd), Some(pc)) => Some(1.0 - (1.0 - pd.min(pc)).powi(2)),
        (Some(pd), None) => Some(pd),
        (None, Some(pc)) => Some(pc),
        (None, None) => None,
    };
    let factor = model
        .filter(|m| m.correlated())
        .and_then(|m| std_error_factor(&r, m, serial.block, n_free, rss));
    let mut out = Residual {
        noise_au: sigma,
        noise_source: Cow::Borrowed(source),
        reduced_chi_squared: reduced,
        chi_squared_p_value: chi_p,
        durbin_watson: d,
        durbin_watson_expected: moments.map(|m| m.0),
        durbin_watson_p_value: serial.p_value,
        runs: runs_test(&r),
        alarm_rate: opts.alarm_rate,
        alarm_p_value,
        band: None,
        negative_band: None,
        noise_span_readings: model.filter(|m| m.correlated()).map(|m| m.span_readings),
        lag1_correlation: model
            .filter(|m| m.correlated())
            .map(|m| m.lag1_correlation()),
        block_readings: (serial.block > 1).then_some(serial.block),
        std_error_factor: factor,
        noise_transmittance_share: None,
        exact_fit: exact,
    };
    if out.flagged() {
        let k = view.n_components.min(x.len());
        let explained: Vec<f64> = (0..n)
            .map(|i| (0..k).map(|j| view.columns[j * n + i] * x[j]).sum())
            .collect();
        (out.band, out.negative_band) = largest_bands(view.wavelengths_nm, &r, &explained);
    }
    out
}

/// The serial-correlation test's outcome: its p-value and the block length
/// it ran on (1: the readings themselves).
struct Serial {
    p_value: Option<f64>,
    block: usize,
}

impl Serial {
    /// Durbin–Watson on the readings, with the design's exact moments.
    fn plain(d: Option<f64>, moments: Option<(f64, f64, usize)>) -> Self {
        let p_value = match (d, moments) {
            (Some(d), Some((mean, var, _))) => stats::beta_cdf_matched(d, 0.0, 4.0, mean, var),
            _ => None,
        };
        Serial { p_value, block: 1 }
    }
}

/// Durbin–Watson on block sums of the residual (correlated noise, see
/// [`noise`]), its moments those of the block-summed design with mean and
/// SD scaled by (1 − ρ_B).
fn blocked_test(
    moments: &SerialMoments,
    r: &[f64],
    passive: &[bool],
    model: noise::NoiseEstimate,
) -> Serial {
    let m = model.block_readings(r.len());
    let Some(blocked) = moments.blocked(m) else {
        return Serial::plain(durbin_watson(r), moments.durbin_watson(passive));
    };
    let sums = noise::block_sums(r, m);
    let shrink = 1.0 - model.block_correlation(m);
    let p_value = match (durbin_watson(&sums), blocked.durbin_watson(passive)) {
        (Some(d), Some((mean, var, _))) => {
            stats::beta_cdf_matched(d, 0.0, 4.0, mean * shrink, var * shrink * shrink)
        }
        _ => None,
    };
    Serial { p_value, block: m }
}

/// √(f₀/σ̂²): how much larger the standard errors are under correlated
/// noise than the solver's white-noise ones (σ̂² = RSS/(n − n_free)).
fn std_error_factor(
    r: &[f64],
    model: noise::NoiseEstimate,
    block: usize,
    n_free: usize,
    rss: f64,
) -> Option<f64> {
    let dof = r.len().checked_sub(n_free).filter(|d| *d > 0)?;
    let white = rss / dof as f64;
    let m = block.max((noise::BLOCKS_PER_SPAN * model.span_readings).ceil() as usize);
    let f0 = model.long_run_variance(r, m, n_free)?;
    (white > 0.0 && f0 > 0.0).then(|| (f0 / white).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};

    fn grid(n: usize) -> Vec<f64> {
        (0..n).map(|i| 350.0 + i as f64).collect()
    }

    #[test]
    fn fast_noise_path_gives_the_general_answer() {
        // The even-grid pass and the selection on bit patterns must give the
        // value of the point-by-point pseudo-residuals and a float median.
        let w = grid(401);
        let mut state: u64 = 3;
        let r: Vec<f64> = (0..401)
            .map(|_| {
                state = state
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                ((state >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 1e-3
            })
            .collect();
        assert!(uniform_step(&w));
        let mut e: Vec<f64> = pseudo_residuals(&w, &r).iter().map(|v| v.abs()).collect();
        let mid = e.len() / 2;
        let (_, med, _) = e.select_nth_unstable_by(mid, f64::total_cmp);
        let want = MAD_TO_SIGMA * *med;
        assert_eq!(noise_au_with(&w, &r, true), Some(want));
        assert_eq!(noise_au_with(&w, &r, false), Some(want));
        assert_eq!(noise_au(&w, &r), Some(want));
        let mut uneven = w.clone();
        uneven[200] += 0.3;
        assert!(!uniform_step(&uneven));
    }

    #[test]
    fn noise_estimate_recovers_sigma_of_white_noise() {
        let mut rng = rand::rngs::StdRng::seed_from_u64(7);
        let noise = Normal::new(0.0, 0.002).unwrap();
        let r: Vec<f64> = (0..4001).map(|_| noise.sample(&mut rng)).collect();
        let s = noise_au(&grid(4001), &r).unwrap();
        // MAD has about 37 % efficiency (Hampel 1974): relative SE ≈ 1.2/√n
        // ≈ 2 % here, more for correlated pseudo-residuals; allow 8 %.
        assert!((s / 0.002 - 1.0).abs() < 0.08, "{s}");
    }

    #[test]
    fn noise_estimate_ignores_a_smooth_band_and_a_spike() {
        let mut rng = rand::rngs::StdRng::seed_from_u64(8);
        let noise = Normal::new(0.0, 0.001).unwrap();
        // 2001 points at 0.2 nm: the estimate's relative SD is about 3 %
        // (7 % at 401 points, by simulation of white noise).
        let w: Vec<f64> = (0..2001).map(|i| 350.0 + 0.2 * i as f64).collect();
        let mut r: Vec<f64> = w
            .iter()
            .map(|x| 0.05 * (-0.5 * ((x - 500.0) / 20.0f64).powi(2)).exp() + noise.sample(&mut rng))
            .collect();
        r[100] += 0.5;
        let s = noise_au(&w, &r).unwrap();
        assert!((s / 0.001 - 1.0).abs() < 0.12, "{s}");
    }
}
