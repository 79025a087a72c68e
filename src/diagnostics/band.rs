//! Residual bands (stage 5): where the residual of a flagged sample lies,
//! its peak, width and share of the signal.
//!
//! In: a residual on its wavelengths and the fitted component absorbance.
//! Out: the largest positive and negative [`Band`]s.

use serde::{Deserialize, Serialize};

/// Half-width, in points, of the moving average used to read a band's
/// peak and width (9 points in all: 9 nm on a 1 nm grid).
pub const BAND_SMOOTH_HALF_WIDTH: usize = 4;

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
        let segment = Segment {
            sign,
            lo,
            hi,
            area_abs: best,
        };
        (best > 0.0).then(|| describe_band(w, r, &wt, segment, explained_area))
    };
    (band(1.0), band(-1.0))
}

/// A segment of the residual that keeps one sign on average.
#[derive(Debug, Clone, Copy)]
struct Segment {
    /// +1 for a positive band, −1 for a negative one.
    sign: f64,
    /// First and last index.
    lo: usize,
    hi: usize,
    /// |Σ rᵢ·Δλᵢ| over the segment, AU·nm.
    area_abs: f64,
}

/// Moving average of `r` over `2h + 1` points (fewer at the ends), from
/// running sums: linear in the length whatever h.
fn moving_average(r: &[f64], h: usize) -> Vec<f64> {
    let n = r.len();
    let mut prefix = Vec::with_capacity(n + 1);
    prefix.push(0.0);
    let mut acc = 0.0;
    for v in r {
        acc += v;
        prefix.push(acc);
    }
    (0..n)
        .map(|i| {
            let (a, b) = (i.saturating_sub(h), (i + h).min(n - 1));
            (prefix[b + 1] - prefix[a]) / (b - a + 1) as f64
        })
        .collect()
}

/// Describe the residual segment of `seg`.
fn describe_band(w: &[f64], r: &[f64], wt: &[f64], seg: Segment, explained_area: f64) -> Band {
    let n = r.len();
    let Segment {
        sign,
        lo,
        hi,
        area_abs,
    } = seg;
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
    let smooth = moving_average(r, h);
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

    fn grid(n: usize) -> Vec<f64> {
        (0..n).map(|i| 350.0 + i as f64).collect()
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
