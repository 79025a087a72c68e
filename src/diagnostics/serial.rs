//! Serial-correlation statistics of a residual (stage 5): the
//! Durbin–Watson statistic with its exact moments for a design, the runs
//! test, and the sums they share. The method is described in the parent
//! module.

use super::{noise, stats};
use serde::{Deserialize, Serialize};

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

/// Durbin–Watson statistic Σ(rᵢ − rᵢ₋₁)² / Σrᵢ²; `None` for a zero residual.
pub fn durbin_watson(r: &[f64]) -> Option<f64> {
    let (ss, num) = square_sums(r);
    durbin_watson_of(ss, num, r.len())
}

/// [`durbin_watson`] from the sums of [`square_sums`] over `n` points.
pub(crate) fn durbin_watson_of(ss: f64, num: f64, n: usize) -> Option<f64> {
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

#[cfg(test)]
mod tests {
    use super::*;

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
}
