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

pub mod mask;
pub mod noise;
pub mod screen;
pub mod stats;

use crate::error::{Error, Result};
use crate::reference::ReferenceSet;
use serde::{Deserialize, Serialize};
use std::borrow::Cow;

/// Default false-alarm rate of the unexplained-absorbance flag.
pub const DEFAULT_ALARM_RATE: f64 = 0.01;

/// Default ceiling, AU: points above it are masked out of the fit. Common
/// practice (no single source): above about 2 AU stray light biases
/// readings low and little light reaches the detector.
pub const DEFAULT_MAX_ABSORBANCE_AU: f64 = 2.0;

/// 1/Φ⁻¹(3/4): turns a median absolute deviation into a Gaussian σ
/// (Hampel 1974; Φ⁻¹(0.75) = 0.6744897501960817 from scipy.stats.norm.ppf).
pub const MAD_TO_SIGMA: f64 = 1.482_602_218_505_602;

/// Half-width, in points, of the moving average used to read a band's
/// peak and width (9 points in all: 9 nm on a 1 nm grid).
pub const BAND_SMOOTH_HALF_WIDTH: usize = 4;

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

/// The runs test on the signs of the residual.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct RunsTest {
    /// Number of runs of equal sign.
    pub runs: usize,
    /// Runs expected under random signs.
    pub expected_runs: f64,
    /// One-sided p-value for too few runs (normal approximation with
    /// continuity correction).
    pub p_value: f64,
}

/// The largest coherent band in the residual.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Band {
    /// Centroid of the band, nm.
    pub centre_nm: f64,
    /// Wavelength of the band's extreme (smoothed residual), nm.
    pub peak_nm: f64,
    /// Smoothed residual at the extreme, AU: positive when the spectrum
    /// absorbs more than the fit (an unexplained absorber), negative when less
    /// (smoothed over about half the band's standard deviation, at least 9 points).
    pub peak_au: f64,
    /// Full width at half the extreme, nm.
    pub fwhm_nm: f64,
    /// First wavelength of the segment where the residual keeps its sign on average, nm.
    pub low_nm: f64,
    /// Last wavelength of that segment, nm.
    pub high_nm: f64,
    /// Integrated residual over the segment, AU·nm.
    pub area_au_nm: f64,
    /// |area| over (fitted component absorbance area + |area|): the share of
    /// the absorbance this band carries (a lower bound for an impurity, since
    /// the references take up part of it).
    pub signal_fraction: f64,
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
    thread_local! {
        // One buffer per thread: a fit examines every sample, and a fresh
        // vector per sample costs as much as the selection.
        static BITS: std::cell::RefCell<Vec<u64>> = const { std::cell::RefCell::new(Vec::new()) };
    }
    BITS.with_borrow_mut(|bits| {
        bits.clear();
        if uniform {
            let even = 1.0 / 1.5f64.sqrt();
            bits.extend(
                r[..n]
                    .windows(3)
                    .map(|t| ((0.5 * (t[0] + t[2]) - t[1]) * even).abs().to_bits()),
            );
        } else {
            bits.extend(
                pseudo_residuals(wavelengths_nm, r)
                    .iter()
                    .map(|v| v.abs().to_bits()),
            );
        }
        let mid = bits.len() / 2;
        let (_, med, _) = bits.select_nth_unstable(mid);
        Some(MAD_TO_SIGMA * f64::from_bits(*med))
    })
}

/// Durbin–Watson statistic Σ(rᵢ − rᵢ₋₁)² / Σrᵢ²; `None` for a zero residual.
pub fn durbin_watson(r: &[f64]) -> Option<f64> {
    let (ss, num) = square_sums(r);
    durbin_watson_of(ss, num, r.len())
}

/// [`durbin_watson`] from the sums of [`square_sums`] over `n` points.
fn durbin_watson_of(ss: f64, num: f64, n: usize) -> Option<f64> {
    (ss > 0.0 && ss.is_finite() && n >= 2).then(|| num / ss)
}

/// Σrᵢ² and Σ(rᵢ − rᵢ₋₁)², each kept in four partial sums taken in turn, so
/// that consecutive additions do not wait for each other (one running sum
/// makes the pass as slow as the adder's latency). Fixed order: the same
/// bits on every run and thread count.
pub fn square_sums(r: &[f64]) -> (f64, f64) {
    let mut ss = [0.0f64; 4];
    let mut dd = [0.0f64; 4];
    let sq = r.chunks_exact(4);
    let tail = sq.remainder();
    for c in sq {
        for l in 0..4 {
            ss[l] += c[l] * c[l];
        }
    }
    let mut ss_sum = (ss[0] + ss[1]) + (ss[2] + ss[3]);
    for v in tail {
        ss_sum += v * v;
    }
    if r.len() < 2 {
        return (ss_sum, 0.0);
    }
    let (later, earlier) = (&r[1..], &r[..r.len() - 1]);
    let pairs = later.chunks_exact(4).zip(earlier.chunks_exact(4));
    for (a, b) in pairs {
        for l in 0..4 {
            let d = a[l] - b[l];
            dd[l] += d * d;
        }
    }
    let done = later.len() / 4 * 4;
    let mut dd_sum = (dd[0] + dd[1]) + (dd[2] + dd[3]);
    for (a, b) in later[done..].iter().zip(&earlier[done..]) {
        dd_sum += (a - b) * (a - b);
    }
    (ss_sum, dd_sum)
}

/// Wald–Wolfowitz runs test for too few runs of residual signs.
pub fn runs_test(r: &[f64]) -> Option<RunsTest> {
    // Signs of a noisy residual are random, so count without branches; exact
    // zeros (no sign) are rare and take the filtered path.
    let (n1, n2, runs) = match sign_runs(r) {
        Some(counts) => counts,
        None => {
            let kept: Vec<f64> = r.iter().copied().filter(|v| *v != 0.0).collect();
            sign_runs(&kept).unwrap_or((0.0, 0.0, 0))
        }
    };
    if n1 < 1.0 || n2 < 1.0 {
        return None;
    }
    let n = n1 + n2;
    let mu = 1.0 + 2.0 * n1 * n2 / n;
    let var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - n) / (n * n * (n - 1.0));
    if var.is_nan() || var <= 0.0 {
        return None;
    }
    let z = (runs as f64 - mu + 0.5) / var.sqrt();
    Some(RunsTest {
        runs,
        expected_runs: mu,
        p_value: stats::normal_cdf(z),
    })
}

/// (positive count, negative count, runs) of a residual; `None` when it
/// holds exact zeros (no sign), which the caller leaves out first. One pass
/// that counts the zeros as it goes.
fn sign_runs(r: &[f64]) -> Option<(f64, f64, usize)> {
    let Some(first) = r.first() else {
        return Some((0.0, 0.0, 0));
    };
    let mut prev = usize::from(*first > 0.0);
    let (mut pos, mut changes) = (prev, 0usize);
    let mut zeros = usize::from(*first == 0.0);
    for v in &r[1..] {
        let s = usize::from(*v > 0.0);
        zeros += usize::from(*v == 0.0);
        pos += s;
        changes += s ^ prev;
        prev = s;
    }
    (zeros == 0).then(|| (pos as f64, (r.len() - pos) as f64, changes + 1))
}

/// The pieces of the Durbin–Watson moments that depend only on the design:
/// G = XᵀX, B = (DX)ᵀ(DX) = XᵀAX and C = (AX)ᵀ(AX) = XᵀA²X, for the
/// (column-scaled) design X and the first-difference matrix D (A = DᵀD).
#[derive(Debug, Clone)]
pub struct SerialMoments {
    n: usize,
    p: usize,
    /// The (column-scaled) design, kept to build the block-summed moments.
    columns: Vec<f64>,
    /// The moments of the design summed over blocks of m readings (index m),
    /// built on first use (correlated noise, see [`noise`]).
    blocked: Vec<std::sync::OnceLock<Box<SerialMoments>>>,
    gram: Vec<f64>,
    b: Vec<f64>,
    c: Vec<f64>,
    /// The moments with every column free (the usual case), computed once.
    all_free: Option<(f64, f64, usize)>,
    /// The moments per passive set (bitmask), computed on first use and
    /// shared by every thread (designs of up to [`MOMENT_CACHE_BITS`] columns).
    by_mask: Vec<std::sync::OnceLock<Option<(f64, f64, usize)>>>,
}

/// Designs with at most this many columns cache their Durbin–Watson moments
/// per passive set (2¹⁴ slots at most).
const MOMENT_CACHE_BITS: usize = 14;

impl SerialMoments {
    /// From column-major columns (`p` columns of `n` points).
    pub fn new(columns: &[f64], n: usize, p: usize) -> Self {
        let mut dx = vec![0.0; (n.saturating_sub(1)) * p];
        let mut ax = vec![0.0; n * p];
        for j in 0..p {
            let x = &columns[j * n..(j + 1) * n];
            for i in 0..n.saturating_sub(1) {
                dx[j * (n - 1) + i] = x[i + 1] - x[i];
            }
            // A·x = Dᵀ(D·x).
            for i in 0..n {
                let left = if i > 0 { dx[j * (n - 1) + i - 1] } else { 0.0 };
                let right = if i + 1 < n { dx[j * (n - 1) + i] } else { 0.0 };
                ax[j * n + i] = left - right;
            }
        }
        let dot = |u: &[f64], v: &[f64]| u.iter().zip(v).map(|(a, b)| a * b).sum::<f64>();
        let m = n.saturating_sub(1);
        let mut gram = vec![0.0; p * p];
        let mut b = vec![0.0; p * p];
        let mut c = vec![0.0; p * p];
        for i in 0..p {
            for k in i..p {
                let g = dot(&columns[i * n..(i + 1) * n], &columns[k * n..(k + 1) * n]);
                let bb = dot(&dx[i * m..(i + 1) * m], &dx[k * m..(k + 1) * m]);
                let cc = dot(&ax[i * n..(i + 1) * n], &ax[k * n..(k + 1) * n]);
                for (mat, v) in [(&mut gram, g), (&mut b, bb), (&mut c, cc)] {
                    mat[i * p + k] = v;
                    mat[k * p + i] = v;
                }
            }
        }
        let mut m = SerialMoments {
            n,
            p,
            columns: columns.to_vec(),
            blocked: (0..=noise::MAX_BLOCK)
                .map(|_| std::sync::OnceLock::new())
                .collect(),
            gram,
            b,
            c,
            all_free: None,
            by_mask: if p <= MOMENT_CACHE_BITS {
                (0..1usize << p)
                    .map(|_| std::sync::OnceLock::new())
                    .collect()
            } else {
                Vec::new()
            },
        };
        m.all_free = m.compute(&vec![true; p]);
        m
    }

    /// The moments of this design summed over blocks of `m` readings
    /// (m ≤ [`noise::MAX_BLOCK`]), built once and shared by the threads.
    pub fn blocked(&self, m: usize) -> Option<&SerialMoments> {
        let slot = self.blocked.get(m)?;
        if m < 2 || self.n / m < 3 {
            return None;
        }
        Some(slot.get_or_init(|| {
            let cols = noise::block_columns(&self.columns, self.n, self.p, m);
            Box::new(SerialMoments::new(&cols, self.n / m, self.p))
        }))
    }

    /// Exact mean and variance of d under white noise for the columns in
    /// `passive` (the free parameters), and the residual degrees of freedom.
    pub fn durbin_watson(&self, passive: &[bool]) -> Option<(f64, f64, usize)> {
        if passive.iter().all(|b| *b) {
            return self.all_free;
        }
        if self.by_mask.is_empty() || passive.len() != self.p {
            return self.compute(passive);
        }
        let mask = passive
            .iter()
            .enumerate()
            .fold(0usize, |m, (j, &b)| if b { m | (1 << j) } else { m });
        *self.by_mask[mask].get_or_init(|| self.compute(passive))
    }

    fn compute(&self, passive: &[bool]) -> Option<(f64, f64, usize)> {
        let idx: Vec<usize> = (0..self.p).filter(|&j| passive[j]).collect();
        let m = idx.len();
        let n = self.n;
        if n < m + 3 {
            return None;
        }
        let nu = (n - m) as f64;
        let tr_a = 2.0 * (n as f64 - 1.0);
        let tr_a2 = 6.0 * n as f64 - 8.0;
        let (mut p_tr, mut q_tr) = (tr_a, tr_a2);
        if m > 0 {
            let sub = |mat: &[f64]| {
                nalgebra::DMatrix::from_fn(m, m, |r, c| mat[idx[r] * self.p + idx[c]])
            };
            let g = sub(&self.gram).cholesky()?;
            let gb = g.solve(&sub(&self.b));
            let gc = g.solve(&sub(&self.c));
            p_tr -= gb.trace();
            q_tr += -2.0 * gc.trace() + (&gb * &gb).trace();
        }
        let mean = p_tr / nu;
        let var = 2.0 * (q_tr - p_tr * mean) / (nu * (nu + 2.0));
        (mean.is_finite() && var > 0.0).then_some((mean, var, n - m))
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

/// Integration weights (trapezoid) for a grid, nm.
fn weights_nm(w: &[f64]) -> Vec<f64> {
    let n = w.len();
    if n < 2 {
        return vec![1.0; n];
    }
    (0..n)
        .map(|i| {
            let lo = if i == 0 {
                w[0]
            } else {
                0.5 * (w[i - 1] + w[i])
            };
            let hi = if i + 1 == n {
                w[n - 1]
            } else {
                0.5 * (w[i] + w[i + 1])
            };
            hi - lo
        })
        .collect()
}

/// The largest coherent bands of a residual, positive (the spectrum absorbs
/// more than the fit: unexplained absorbance) and negative (it reads below
/// the fit: over-fitted references, stray light). Each is the contiguous
/// segment with the largest Σ rᵢ·Δλᵢ of that sign (Kadane's maximum
/// subarray). `explained` is the fitted component absorbance, for the
/// band's share of the signal.
pub fn largest_bands(w: &[f64], r: &[f64], explained: &[f64]) -> (Option<Band>, Option<Band>) {
    let n = r.len();
    if n < 3 || w.len() != n || explained.len() != n {
        return (None, None);
    }
    let wt = weights_nm(w);
    let explained_area: f64 = explained.iter().zip(&wt).map(|(e, q)| e * q).sum();
    let band = |sign: f64| {
        let (mut best, mut lo, mut hi) = (0.0, 0, 0);
        let (mut run, mut run_lo) = (0.0, 0);
        for i in 0..n {
            let v = sign * r[i] * wt[i];
            if run <= 0.0 {
                run = v;
                run_lo = i;
            } else {
                run += v;
            }
            if run > best {
                best = run;
                lo = run_lo;
                hi = i;
            }
        }
        (best > 0.0).then(|| describe_band(w, r, &wt, sign, lo, hi, best, explained_area))
    };
    (band(1.0), band(-1.0))
}

/// Describe the residual segment `lo..=hi` of sign `sign` and area `area_abs`.
#[allow(clippy::too_many_arguments)]
fn describe_band(
    w: &[f64],
    r: &[f64],
    wt: &[f64],
    sign: f64,
    lo: usize,
    hi: usize,
    area_abs: f64,
    explained_area: f64,
) -> Band {
    let n = r.len();
    // Smooth over about half the band's standard deviation (its second
    // moment over the segment; at least 9 points) so the peak and the
    // half-height crossings follow the band, not the noise. A box of width
    // σ/2 widens a Gaussian by about 1 %.
    let mass: f64 = (lo..=hi).map(|i| sign * r[i] * wt[i]).sum();
    let centre: f64 = (lo..=hi).map(|i| w[i] * sign * r[i] * wt[i]).sum::<f64>() / mass;
    let spread = ((lo..=hi)
        .map(|i| (w[i] - centre).powi(2) * (sign * r[i]).max(0.0) * wt[i])
        .sum::<f64>()
        / mass)
        .max(0.0)
        .sqrt();
    let step_nm = (w[n - 1] - w[0]) / (n - 1) as f64;
    let h = BAND_SMOOTH_HALF_WIDTH.max((0.25 * spread / step_nm) as usize);
    let smooth: Vec<f64> = (0..n)
        .map(|i| {
            let (a, b) = (i.saturating_sub(h), (i + h).min(n - 1));
            r[a..=b].iter().sum::<f64>() / (b - a + 1) as f64
        })
        .collect();
    let peak = (lo..=hi).fold(lo, |m, i| {
        if sign * smooth[i] > sign * smooth[m] {
            i
        } else {
            m
        }
    });
    let top = sign * smooth[peak];
    let crossing = |step: isize| -> f64 {
        let mut i = peak as isize;
        loop {
            let j = i + step;
            if j < 0 || j >= n as isize {
                return w[i as usize];
            }
            let (vi, vj) = (sign * smooth[i as usize], sign * smooth[j as usize]);
            if vj < 0.5 * top {
                let t = (vi - 0.5 * top) / (vi - vj);
                return w[i as usize] + t * (w[j as usize] - w[i as usize]);
            }
            i = j;
        }
    };
    let weighted: f64 = (lo..=hi).map(|i| w[i] * sign * r[i] * wt[i]).sum();
    let total = explained_area.max(0.0) + area_abs;
    Band {
        centre_nm: (weighted / area_abs).clamp(w[lo], w[hi]),
        peak_nm: w[peak],
        peak_au: smooth[peak],
        fwhm_nm: (crossing(1) - crossing(-1)).max(0.0),
        low_nm: w[lo],
        high_nm: w[hi],
        area_au_nm: sign * area_abs,
        signal_fraction: if total > 0.0 { area_abs / total } else { 0.0 },
    }
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
    fn square_sums_match_the_plain_sums() {
        // Four partial sums change only the rounding, at every length
        // (remainders of 0–3 after the groups of four).
        for n in [0usize, 1, 2, 3, 4, 5, 7, 8, 9, 401] {
            let r: Vec<f64> = (0..n)
                .map(|i| ((i * 37 % 11) as f64 - 5.0) * 1e-3)
                .collect();
            let ss: f64 = r.iter().map(|v| v * v).sum();
            let dd: f64 = r.windows(2).map(|p| (p[1] - p[0]).powi(2)).sum();
            let (got_ss, got_dd) = square_sums(&r);
            assert!((got_ss - ss).abs() <= 1e-14 * ss.max(1e-300), "{n}");
            assert!((got_dd - dd).abs() <= 1e-14 * dd.max(1e-300), "{n}");
        }
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

    #[test]
    fn durbin_watson_moments_match_the_textbook_case_without_regressors() {
        // With no columns, M = I: E[d] = tr(A)/n = 2(n−1)/n (Durbin & Watson 1950).
        let m = SerialMoments::new(&[], 50, 0);
        let (mean, var, nu) = m.durbin_watson(&[]).unwrap();
        assert_eq!(nu, 50);
        assert!((mean - 2.0 * 49.0 / 50.0).abs() < 1e-12);
        // Var = 2(Q − P·E)/(n(n+2)) with Q = tr(A²) = 6n − 8.
        let want = 2.0 * ((6.0 * 50.0 - 8.0) - 98.0 * mean) / (50.0 * 52.0);
        assert!((var - want).abs() < 1e-12);
    }

    #[test]
    fn durbin_watson_moments_agree_with_a_dense_computation() {
        // Dense M·A for a small design, computed with nalgebra directly.
        let n = 12;
        let cols: Vec<f64> = (0..n)
            .map(|i| (i as f64 / 3.0).sin() + 1.5)
            .chain(std::iter::repeat_n(1.0, n))
            .collect();
        let m = SerialMoments::new(&cols, n, 2);
        let (mean, var, _) = m.durbin_watson(&[true, true]).unwrap();
        let x = nalgebra::DMatrix::from_column_slice(n, 2, &cols);
        let h = &x * (x.transpose() * &x).try_inverse().unwrap() * x.transpose();
        let mm = nalgebra::DMatrix::identity(n, n) - h;
        let mut a = nalgebra::DMatrix::zeros(n, n);
        for i in 0..n - 1 {
            a[(i, i)] += 1.0;
            a[(i + 1, i + 1)] += 1.0;
            a[(i, i + 1)] -= 1.0;
            a[(i + 1, i)] -= 1.0;
        }
        let ma = &mm * &a;
        let nu = (n - 2) as f64;
        let p = ma.trace();
        let q = (&ma * &ma).trace();
        assert!((mean - p / nu).abs() < 1e-10);
        assert!((var - 2.0 * (q - p * p / nu) / (nu * (nu + 2.0))).abs() < 1e-10);
    }

    #[test]
    fn runs_test_counts_runs() {
        let r = [1.0, 2.0, -1.0, -1.0, 3.0, -2.0];
        let t = runs_test(&r).unwrap();
        assert_eq!(t.runs, 4);
        // μ = 1 + 2·3·3/6 = 4 (Wald & Wolfowitz 1940).
        assert!((t.expected_runs - 4.0).abs() < 1e-12);
        // An exact zero has no sign and is left out.
        let z = runs_test(&[1.0, 2.0, 0.0, -1.0, -1.0, 3.0, -2.0]).unwrap();
        assert_eq!(z, t);
    }

    #[test]
    fn band_is_found_at_its_place() {
        let w = grid(401);
        let r: Vec<f64> = w
            .iter()
            .map(|x| 0.01 * (-0.5 * ((x - 480.0) / 15.0f64).powi(2)).exp())
            .collect();
        let explained = vec![0.0; 401];
        let (b, neg) = largest_bands(&w, &r, &explained);
        let b = b.unwrap();
        assert!(neg.is_none());
        assert!((b.centre_nm - 480.0).abs() < 0.5, "{b:?}");
        assert!((b.peak_nm - 480.0).abs() < 0.5);
        // Gaussian FWHM = 2√(2 ln 2)·σ ≈ 35.3 nm; the 9-point average widens it a little.
        assert!((b.fwhm_nm - 35.3).abs() < 1.5, "{}", b.fwhm_nm);
        assert!(b.peak_au > 0.0095 && b.peak_au <= 0.01);
        assert!((b.signal_fraction - 1.0).abs() < 1e-12);
    }
}
