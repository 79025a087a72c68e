//! Replicate statistics: mean, standard deviation, coefficient of variation,
//! and Grubbs' test for a single outlier.
//!
//! Grubbs' test (F. E. Grubbs, "Procedures for detecting outlying
//! observations in samples", Technometrics 11:1–21, 1969; also ASTM E178 and
//! ISO 5725-2): for n values with mean x̄ and standard deviation s, the
//! statistic is G = max |xᵢ − x̄| / s, and the most extreme value is an
//! outlier at two-sided significance α when
//!
//! ```text
//! G > (n − 1)/√n · √( t² / (n − 2 + t²) ),   t = t_{α/(2n), n−2}
//! ```
//!
//! (t the upper α/(2n) quantile of Student's t with n − 2 degrees of
//! freedom). The test needs n ≥ 3 and assumes the rest are normal.
//!
//! Student's t quantile comes from the shared `crate::stats` module.

use crate::stats::t_quantile;

/// Mean and sample standard deviation (n − 1 in the denominator; `None`
/// for fewer than two values).
pub fn mean_sd(values: &[f64]) -> (f64, Option<f64>) {
    let n = values.len();
    if n == 0 {
        return (f64::NAN, None);
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    if n < 2 {
        return (mean, None);
    }
    let ss: f64 = values.iter().map(|v| (v - mean).powi(2)).sum();
    (mean, Some((ss / (n - 1) as f64).sqrt()))
}

/// Coefficient of variation in percent, 100·s/x̄; `None` when the mean is
/// not positive (a CV of a value at zero means nothing).
pub fn cv_percent(mean: f64, sd: Option<f64>) -> Option<f64> {
    let sd = sd?;
    (mean > 0.0 && mean.is_finite() && sd.is_finite()).then(|| 100.0 * sd / mean)
}

/// Grubbs' two-sided critical value for `n` values at significance `alpha`
/// (`None` for n < 3, where the test is undefined).
pub fn grubbs_critical(n: usize, alpha: f64) -> Option<f64> {
    if n < 3 || !(alpha > 0.0 && alpha < 1.0) {
        return None;
    }
    let nf = n as f64;
    let t = t_quantile(1.0 - alpha / (2.0 * nf), nf - 2.0);
    Some((nf - 1.0) / nf.sqrt() * (t * t / (nf - 2.0 + t * t)).sqrt())
}

/// [`grubbs_critical`], remembered: a batch asks for the same few (n, α)
/// thousands of times.
pub fn grubbs_critical_cached(n: usize, alpha: f64) -> Option<f64> {
    use std::collections::HashMap;
    use std::sync::{Mutex, OnceLock};
    type Table = HashMap<(usize, u64), Option<f64>>;
    static CACHE: OnceLock<Mutex<Table>> = OnceLock::new();
    let cache = CACHE.get_or_init(|| Mutex::new(HashMap::new()));
    let key = (n, alpha.to_bits());
    if let Ok(c) = cache.lock()
        && let Some(v) = c.get(&key)
    {
        return *v;
    }
    let v = grubbs_critical(n, alpha);
    if let Ok(mut c) = cache.lock() {
        c.insert(key, v);
    }
    v
}

/// The result of Grubbs' test on one set of values.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Grubbs {
    /// Index of the most extreme value.
    pub index: usize,
    /// The statistic G.
    pub g: f64,
    /// The critical value at the chosen α.
    pub critical: f64,
}

impl Grubbs {
    /// Whether the most extreme value is an outlier.
    pub fn is_outlier(&self) -> bool {
        self.g > self.critical
    }
}

/// Run Grubbs' test; `None` when it cannot be run (n < 3, or no spread).
pub fn grubbs(values: &[f64], alpha: f64) -> Option<Grubbs> {
    let critical = grubbs_critical_cached(values.len(), alpha)?;
    let (mean, sd) = mean_sd(values);
    let sd = sd?;
    let scale = values.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    if !(sd > 1e-12 * scale && sd.is_finite()) {
        return None;
    }
    let (index, dev) = values
        .iter()
        .enumerate()
        .map(|(i, v)| (i, (v - mean).abs()))
        .fold((0, f64::NEG_INFINITY), |b, x| if x.1 > b.1 { x } else { b });
    Some(Grubbs {
        index,
        g: dev / sd,
        critical,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Relative agreement with scipy's quantiles: bisection stops near
    /// 1e-14 and the continued fraction converges to about 1e-15.
    const REL_TOL: f64 = 1e-9;

    #[test]
    fn grubbs_critical_values_match_the_published_table() {
        // Two-sided α = 0.05: computed with scipy.stats.t.ppf from Grubbs'
        // (1969) formula; they agree with the ASTM E178 table to its three
        // decimals (1.155, 1.481, 1.715, 1.887, 2.126, 2.290; recalled from
        // memory).
        let cases = [
            (3, 1.1543048513440386),
            (4, 1.4812500000000002),
            (5, 1.7150373123433635),
            (6, 1.8871451177839336),
            (8, 2.1266450871954667),
            (10, 2.2899540844796036),
            (20, 2.7082456458057584),
            (50, 3.1282473343309976),
        ];
        for (n, want) in cases {
            let got = grubbs_critical(n, 0.05).unwrap();
            assert!(
                ((got - want) / want).abs() < REL_TOL,
                "n {n}: {got} vs {want}"
            );
        }
        // α = 0.01 (same source).
        let got = grubbs_critical(10, 0.01).unwrap();
        assert!(((got - 2.482083249715342) / 2.482083249715342).abs() < REL_TOL);
        assert!(grubbs_critical(2, 0.05).is_none());
    }

    #[test]
    fn a_far_value_is_an_outlier_and_a_close_one_is_not() {
        let g = grubbs(&[1.00, 1.01, 0.99, 1.02, 1.60], 0.05).unwrap();
        assert_eq!(g.index, 4);
        assert!(g.is_outlier());
        let g = grubbs(&[1.00, 1.01, 0.99, 1.02, 1.03], 0.05).unwrap();
        assert!(!g.is_outlier());
        assert!(grubbs(&[1.0, 1.0, 1.0], 0.05).is_none());
        assert!(grubbs(&[1.0, 2.0], 0.05).is_none());
    }

    #[test]
    fn mean_sd_and_cv_follow_their_definitions() {
        // numpy.std([2, 4, 4, 4, 5, 5, 7, 9], ddof=1) = 2.138089935299395.
        let (m, s) = mean_sd(&[2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0]);
        assert!((m - 5.0).abs() < 1e-12);
        assert!((s.unwrap() - 2.138089935299395).abs() < 1e-12);
        assert!((cv_percent(m, s).unwrap() - 42.7617987059879).abs() < 1e-9);
        assert_eq!(mean_sd(&[3.0]).1, None);
        assert_eq!(cv_percent(0.0, Some(1.0)), None);
    }
}
