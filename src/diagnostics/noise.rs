//! The noise model of one spectrum (stage 5): how large the noise is, over
//! how many neighbouring readings it is shared (instrument smoothing), and
//! what that means for the residual test and the standard errors.
//!
//! In: a residual r = a − E·x on its wavelengths. Out: a [`NoiseEstimate`]
//! (σ, the span of readings that share noise) and, for the test, the block
//! length and the correlation left between neighbouring blocks.
//!
//! Model: e = the readings' noise, stationary over the spectrum with
//! autocovariance γₖ that vanishes beyond a few readings (a moving average
//! of L readings: ρₖ = (L − k)/L for k < L, 0 beyond).
//!
//! - Robust scale at spacing k: the pseudo-residual of Gasser, Sroka &
//!   Jennen-Steinmetz (Biometrika 73:625, 1986) taken k readings apart,
//!   uᵢ = (rᵢ₋ₖ + rᵢ₊ₖ)/2 − rᵢ, has variance 1.5γ₀ − 2γₖ + 0.5γ₂ₖ. Its
//!   scale is read as 1.4826 × the median |uᵢ| (the MAD; Hampel, JASA
//!   69:383, 1974), so spikes and steps do not inflate it, and a smooth
//!   band hardly enters a second difference. Far apart (k = [`FAR_SPACING`],
//!   beyond the correlation) the variance is 1.5γ₀: that gives σ = √γ₀.
//! - Span: the ratio R = Var(u at k = 1)/Var(u far) is 1 for white noise
//!   and 2/(3L) for a moving average of L ≥ 2 readings (from the formula
//!   above), so L̂ = 2/(3R). Below [`WHITE_RATIO`] the noise is taken as
//!   correlated.
//! - The test on correlated noise: the Durbin–Watson statistic (Durbin &
//!   Watson, Biometrika 37:409, 1950) on sums of the residual over blocks
//!   of m ≈ [`BLOCKS_PER_SPAN`]·L̂ readings. Block sums of noise that is
//!   correlated over fewer readings than m are nearly independent (the
//!   batch-means idea: Conway, Oper. Res. 31:263, 1983; recalled from
//!   memory), and a band tens of readings wide stays smooth across blocks.
//!   The exact Durbin–Watson moments of the block-summed design are used,
//!   with the mean and SD scaled by (1 − ρ_B) for the correlation ρ_B
//!   that neighbouring block sums keep through the readings at their edge
//!   (ρ_B = Σk·γₖ / Var(block sum), under the moving-average model).
//! - Standard errors: with noise correlated over a few readings and design
//!   columns smooth on that scale, Var(x̂) = G⁻¹XᵀΣXG⁻¹ ≈ f₀·G⁻¹, where
//!   f₀ = γ₀ + 2Σγₖ is the long-run variance (the sum the heteroscedasticity
//!   and autocorrelation consistent covariance of Newey & West,
//!   Econometrica 55:703, 1987, estimates). f₀ is estimated by overlapping
//!   batch means (Meketon & Schmeiser, Proc. Winter Simulation Conf. 1984;
//!   recalled from memory): the mean square of the residual's sums over
//!   every window of m readings, corrected for the parameters fitted, and
//!   the solver's standard errors (which assume white noise, f₀ = γ₀) are
//!   scaled by √(f₀/σ̂²).
//!
//! Where it breaks: noise correlated over more readings than a band is
//! wide cannot be told from the band (both are smooth); noise that is not
//! a moving average (e.g. a recursive filter with a long tail) gets a span
//! from the same ratio, which is then only approximate.

/// Spacing, in readings, of the far pseudo-residuals: beyond the
/// correlation of a moving average of up to this many readings.
pub const FAR_SPACING: usize = 6;

/// Below this ratio of near to far pseudo-residual variance the noise is
/// taken as correlated (white noise gives 1; its sampling SD at 400
/// readings is about 0.17, so white noise falls below 0.6 about 1 % of the
/// time, and is then tested on blocks: still valid, less sensitive).
pub const WHITE_RATIO: f64 = 0.75;

/// Block length, in spans of correlated readings. At 4 spans the block
/// sums of a moving average keep a correlation of about 0.04 (corrected).
pub const BLOCKS_PER_SPAN: f64 = 4.0;

/// Fewest blocks the correlated-noise test runs on.
pub const MIN_BLOCKS: usize = 16;

/// Longest block, readings.
pub const MAX_BLOCK: usize = 32;

/// 1/Φ⁻¹(3/4): median absolute deviation to Gaussian σ (see the parent module).
use super::MAD_TO_SIGMA;

/// The noise model of one spectrum's residual.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NoiseEstimate {
    /// Noise σ of one reading, AU (√γ₀).
    pub sigma_au: f64,
    /// Readings that share noise (1 for white noise; L for a moving average of L).
    pub span_readings: f64,
}

impl NoiseEstimate {
    /// Whether the noise is correlated between neighbouring readings.
    pub fn correlated(&self) -> bool {
        self.span_readings > 1.0
    }

    /// Lag-1 correlation under the moving-average model, 1 − 1/L.
    pub fn lag1_correlation(&self) -> f64 {
        1.0 - 1.0 / self.span_readings
    }

    /// Block length m for the test over `n` readings (1 for white noise).
    pub fn block_readings(&self, n: usize) -> usize {
        if !self.correlated() {
            return 1;
        }
        let want = (BLOCKS_PER_SPAN * self.span_readings).ceil() as usize;
        want.clamp(2, MAX_BLOCK).min((n / MIN_BLOCKS).max(1))
    }

    /// Σk·ρₖ of the moving-average model: (L² − 1)/6.
    fn lagged_sum(&self) -> f64 {
        (self.span_readings * self.span_readings - 1.0) / 6.0
    }

    /// Correlation between neighbouring block sums of `m` readings,
    /// Σk·γₖ / (m·f₀ − 2Σk·γₖ) with f₀ = L·γ₀.
    pub fn block_correlation(&self, m: usize) -> f64 {
        if m <= 1 || !self.correlated() {
            return 0.0;
        }
        let s = self.lagged_sum();
        (s / (m as f64 * self.span_readings - 2.0 * s)).clamp(0.0, 0.5)
    }

    /// Long-run variance f₀ (AU²) by overlapping batch means of the
    /// residual `r` over windows of `m` readings, with `n_free` fitted
    /// parameters: mean square window sum / (1 − n_free·m/n) estimates the
    /// window-sum variance m·f₀ − 2Σk·γₖ.
    pub fn long_run_variance(&self, r: &[f64], m: usize, n_free: usize) -> Option<f64> {
        let n = r.len();
        if m < 2 || n < 2 * m {
            return None;
        }
        let mut sum: f64 = r[..m].iter().sum();
        let mut ss = sum * sum;
        for i in m..n {
            sum += r[i] - r[i - m];
            ss += sum * sum;
        }
        let windows = (n - m + 1) as f64;
        let keep = 1.0 - n_free as f64 * m as f64 / n as f64;
        if keep <= 0.1 {
            return None;
        }
        let v_m = ss / windows / keep;
        let gamma0 = self.sigma_au * self.sigma_au;
        Some((v_m + 2.0 * self.lagged_sum() * gamma0) / m as f64)
    }
}

/// 1.4826 × the median of |values| (a robust Gaussian σ); `None` when empty.
/// The median is selected on the bit patterns (for non-negative floats the
/// integer order is the numeric order) in a per-thread buffer.
pub fn mad_sigma(values: impl Iterator<Item = f64>) -> Option<f64> {
    thread_local! {
        static BITS: std::cell::RefCell<Vec<u64>> = const { std::cell::RefCell::new(Vec::new()) };
    }
    BITS.with_borrow_mut(|bits| {
        bits.clear();
        bits.extend(values.map(|v| v.abs().to_bits()));
        if bits.is_empty() {
            return None;
        }
        let mid = bits.len() / 2;
        let (_, med, _) = bits.select_nth_unstable(mid);
        Some(MAD_TO_SIGMA * f64::from_bits(*med))
    })
}

/// Robust scale of the pseudo-residuals `k` readings apart,
/// (rᵢ₋ₖ + rᵢ₊ₖ)/2 − rᵢ (not normalised: variance 1.5γ₀ − 2γₖ + 0.5γ₂ₖ).
pub fn spaced_scale(r: &[f64], k: usize) -> Option<f64> {
    if k == 0 || r.len() < 2 * k + 3 {
        return None;
    }
    let n = r.len();
    mad_sigma((k..n - k).map(|i| 0.5 * (r[i - k] + r[i + k]) - r[i]))
}

/// Estimate the noise model from a residual. `near_sigma` is the
/// (normalised) spacing-1 estimate the caller already has, σ₁ = scale/√1.5.
pub fn estimate(r: &[f64], near_sigma: f64) -> NoiseEstimate {
    let white = NoiseEstimate {
        sigma_au: near_sigma,
        span_readings: 1.0,
    };
    let Some(far) = spaced_scale(r, FAR_SPACING) else {
        return white;
    };
    let far_sigma = far / 1.5f64.sqrt();
    if !(far_sigma > 0.0 && far_sigma.is_finite()) {
        return white;
    }
    let ratio = (near_sigma / far_sigma).powi(2);
    if ratio >= WHITE_RATIO {
        return white;
    }
    NoiseEstimate {
        sigma_au: far_sigma,
        span_readings: (2.0 / (3.0 * ratio.max(1e-6))).min(FAR_SPACING as f64),
    }
}

/// Fewest readings in each half of the absorbance range for the growth estimate.
pub const MIN_GROWTH_POINTS: usize = 20;

/// How many standard errors the log variance ratio of the two halves must
/// exceed before the noise is taken to grow with absorbance (the MAD's σ̂
/// has a relative SD of about 1.17/√n, Hampel 1974, so ln σ̂² about 2.34/√n).
pub const GROWTH_SIGNIFICANCE: f64 = 2.0;

/// Growth of the noise with absorbance: σ²(A) ∝ 1 + h·10^(2A), the sum of a
/// constant term and one constant in transmittance (σ_A = 0.434·σ_T·10^A:
/// common practice, no source). h (1/AU², per unit 10^(2A)) from the robust
/// scales of the spacing-1 pseudo-residuals of the readings in the lower
/// and upper half of the fitted absorbance `fitted`; `None` when the noise
/// does not grow measurably (or the range is too narrow to tell);
/// `Some(f64::INFINITY)` when it is all constant in transmittance.
pub fn growth(r: &[f64], fitted: &[f64]) -> Option<f64> {
    let n = r.len().min(fitted.len());
    if n < 2 * MIN_GROWTH_POINTS + 2 {
        return None;
    }
    let inner = &fitted[1..n - 1];
    let (lo, hi) = inner
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        });
    if hi - lo <= 0.15 || hi.is_nan() || lo.is_nan() {
        return None;
    }
    let mid = 0.5 * (lo + hi);
    let pseudo = |i: usize| 0.5 * (r[i - 1] + r[i + 1]) - r[i];
    let half = |upper: bool| {
        let idx = (1..n - 1).filter(move |&i| (fitted[i] > mid) == upper);
        let count = idx.clone().count();
        let t = idx
            .clone()
            .map(|i| 10f64.powf(2.0 * fitted[i]))
            .sum::<f64>()
            / count.max(1) as f64;
        let s = mad_sigma(idx.map(pseudo));
        (count, t, s)
    };
    let (n_lo, t_lo, s_lo) = half(false);
    let (n_hi, t_hi, s_hi) = half(true);
    if n_lo < MIN_GROWTH_POINTS || n_hi < MIN_GROWTH_POINTS {
        return None;
    }
    let (s_lo, s_hi) = (s_lo?, s_hi?);
    if s_lo <= 0.0 || s_lo.is_nan() {
        return None;
    }
    let q = (s_hi / s_lo).powi(2);
    let se = 2.34 * (1.0 / n_lo as f64 + 1.0 / n_hi as f64).sqrt();
    if q.is_nan() || q.ln() <= GROWTH_SIGNIFICANCE * se {
        return None;
    }
    let denominator = t_hi - q * t_lo;
    Some(if denominator > 1e-3 * t_hi {
        (q - 1.0) / denominator
    } else {
        f64::INFINITY
    })
}

/// Relative noise SD of each reading under growth `h` (see [`growth`]),
/// √(1 + h·10^(2A)) (or 10^A for h = ∞), scaled to a mean square of 1.
pub fn relative_sd(fitted: &[f64], h: f64) -> Vec<f64> {
    let raw: Vec<f64> = fitted
        .iter()
        .map(|a| {
            let t = 10f64.powf(2.0 * a.clamp(-1.0, 6.0));
            if h.is_finite() {
                (1.0 + h * t).sqrt()
            } else {
                t.sqrt()
            }
        })
        .collect();
    let ms = raw.iter().map(|v| v * v).sum::<f64>() / raw.len().max(1) as f64;
    let k = 1.0 / ms.sqrt();
    raw.into_iter().map(|v| v * k).collect()
}

/// Sums of `r` over consecutive blocks of `m` readings (the remainder at
/// the end is left out).
pub fn block_sums(r: &[f64], m: usize) -> Vec<f64> {
    r.chunks_exact(m.max(1)).map(|c| c.iter().sum()).collect()
}

/// The block-summed design: each of the `p` column-major columns of `n`
/// points summed over consecutive blocks of `m` (as [`block_sums`]).
pub fn block_columns(columns: &[f64], n: usize, p: usize, m: usize) -> Vec<f64> {
    (0..p)
        .flat_map(|j| block_sums(&columns[j * n..(j + 1) * n], m))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};

    fn moving_average(len: usize, span: usize, seed: u64) -> Vec<f64> {
        let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
        let z = Normal::new(0.0, 1.0).unwrap();
        let raw: Vec<f64> = (0..len + span).map(|_| z.sample(&mut rng)).collect();
        // Scaled so that each reading has unit variance.
        let k = 1.0 / (span as f64).sqrt();
        raw.windows(span)
            .take(len)
            .map(|w| k * w.iter().sum::<f64>())
            .collect()
    }

    #[test]
    fn white_noise_is_recognised_as_white() {
        let r = moving_average(4001, 1, 1);
        let near =
            super::super::noise_au(&(0..4001).map(f64::from).collect::<Vec<_>>(), &r).unwrap();
        let e = estimate(&r, near);
        assert!(!e.correlated(), "{e:?}");
        assert_eq!(e.block_readings(4001), 1);
    }

    #[test]
    fn span_of_a_moving_average_is_recovered() {
        // 4001 readings: the ratio's sampling SD is about 5 %; the span
        // L̂ = 2/(3R) inherits it. Allow 15 %.
        for span in 2..=5usize {
            let r = moving_average(4001, span, 10 + span as u64);
            let w: Vec<f64> = (0..4001).map(f64::from).collect();
            let near = super::super::noise_au(&w, &r).unwrap();
            let e = estimate(&r, near);
            assert!(
                (e.span_readings / span as f64 - 1.0).abs() < 0.15,
                "{span}: {e:?}"
            );
            assert!((e.sigma_au - 1.0).abs() < 0.08, "{span}: {e:?}");
        }
    }

    #[test]
    fn batch_means_give_the_long_run_variance() {
        // A moving average of 4 unit-variance readings: f₀ = L·γ₀ = 4.
        let r = moving_average(20_000, 4, 5);
        let e = NoiseEstimate {
            sigma_au: 1.0,
            span_readings: 4.0,
        };
        let f0 = e.long_run_variance(&r, 16, 0).unwrap();
        assert!((f0 / 4.0 - 1.0).abs() < 0.1, "{f0}");
    }

    #[test]
    fn block_correlation_matches_the_moving_average_formula() {
        // L = 2 (ρ₁ = ½), m = 8: Σkγₖ = ½, Var(block) = 8·2 − 1 = 15.
        let e = NoiseEstimate {
            sigma_au: 1.0,
            span_readings: 2.0,
        };
        assert!((e.block_correlation(8) - 0.5 / 15.0).abs() < 1e-12);
        assert!((e.lag1_correlation() - 0.5).abs() < 1e-12);
    }
}
