//! Saturation masking: points above a ceiling are left out of the fit.
//!
//! Above about 2 AU (instrument dependent) so little light reaches the
//! detector that stray light biases readings low and noise, constant in
//! transmittance, grows as 10^A (common practice, no single source). Such
//! points are masked for that sample only: the fit runs on the rows of the
//! design that stay under the ceiling. When the mask covers more than
//! [`DILUTE_FRACTION`] of a component's band (its ε area over the fit
//! range), that component's concentration rests on its band's edges and
//! the sample should be diluted and measured again.

use serde::{Deserialize, Serialize};

/// Share of a component's ε area (within the fit range) that may be masked
/// before the sample is flagged `dilute-and-remeasure` (common practice:
/// most of the band must stay readable; no source).
pub const DILUTE_FRACTION: f64 = 0.5;

/// Flag: some points were above the ceiling and were left out of the fit.
pub const FLAG_SATURATION_MASKED: &str = "saturation-masked";
/// Flag: masking removed most of some component's band.
pub const FLAG_DILUTE: &str = "dilute-and-remeasure";

/// One component's share of its band that was masked.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct MaskedComponent {
    /// Component name.
    pub name: String,
    /// Masked ε area over total ε area within the fit range (0–1).
    pub band_masked_fraction: f64,
}

/// What masking did to one sample.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Masking {
    /// The ceiling, AU.
    pub max_absorbance_au: f64,
    /// Number of points left out.
    pub n_masked: usize,
    /// Masked wavelength intervals, nm: [first, last] of each run of masked points.
    pub masked_nm: Vec<[f64; 2]>,
    /// Components whose band lost some area to the mask, in reference order.
    pub components: Vec<MaskedComponent>,
    /// Whether any component lost more than [`DILUTE_FRACTION`] of its band.
    pub dilute_and_remeasure: bool,
}

/// Which points to keep (true) under a ceiling; `None` when every point is
/// at or below it.
pub fn keep(a: &[f64], ceiling_au: f64) -> Option<Vec<bool>> {
    if a.iter().all(|v| *v <= ceiling_au) {
        return None;
    }
    Some(a.iter().map(|v| *v <= ceiling_au).collect())
}

/// The rows of column-major `columns` (p columns of n points) that `keep` selects.
pub fn rows(columns: &[f64], n: usize, keep: &[bool]) -> Vec<f64> {
    let p = columns.len().checked_div(n).unwrap_or(0);
    let kept = keep.iter().filter(|k| **k).count();
    let mut out = Vec::with_capacity(kept * p);
    for j in 0..p {
        out.extend(
            columns[j * n..(j + 1) * n]
                .iter()
                .zip(keep)
                .filter(|(_, k)| **k)
                .map(|(v, _)| *v),
        );
    }
    out
}

/// The values of `v` that `keep` selects.
pub fn select(v: &[f64], keep: &[bool]) -> Vec<f64> {
    v.iter()
        .zip(keep)
        .filter(|(_, k)| **k)
        .map(|(x, _)| *x)
        .collect()
}

/// Describe a mask over the design's `wavelengths_nm`, with the share of
/// each component column's ε area (the first `names.len()` columns) it covers.
pub fn describe(
    wavelengths_nm: &[f64],
    columns: &[f64],
    names: &[String],
    keep: &[bool],
    ceiling_au: f64,
) -> Masking {
    let n = wavelengths_nm.len();
    let mut masked_nm = Vec::new();
    let mut i = 0;
    while i < n {
        if keep[i] {
            i += 1;
            continue;
        }
        let start = i;
        while i < n && !keep[i] {
            i += 1;
        }
        masked_nm.push([wavelengths_nm[start], wavelengths_nm[i - 1]]);
    }
    let width: Vec<f64> = (0..n)
        .map(|i| {
            let lo = if i == 0 {
                wavelengths_nm[0]
            } else {
                0.5 * (wavelengths_nm[i - 1] + wavelengths_nm[i])
            };
            let hi = if i + 1 == n {
                wavelengths_nm[n - 1]
            } else {
                0.5 * (wavelengths_nm[i] + wavelengths_nm[i + 1])
            };
            (hi - lo).max(f64::MIN_POSITIVE)
        })
        .collect();
    let mut components = Vec::new();
    for (j, name) in names.iter().enumerate() {
        let col = &columns[j * n..(j + 1) * n];
        let total: f64 = col.iter().zip(&width).map(|(e, w)| e * w).sum();
        let lost: f64 = col
            .iter()
            .zip(&width)
            .zip(keep)
            .filter(|(_, k)| !**k)
            .map(|((e, w), _)| e * w)
            .sum();
        if total > 0.0 && lost > 0.0 {
            components.push(MaskedComponent {
                name: name.clone(),
                band_masked_fraction: lost / total,
            });
        }
    }
    let dilute_and_remeasure = components
        .iter()
        .any(|c| c.band_masked_fraction > DILUTE_FRACTION);
    Masking {
        max_absorbance_au: ceiling_au,
        n_masked: keep.iter().filter(|k| !**k).count(),
        masked_nm,
        components,
        dilute_and_remeasure,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn points_above_the_ceiling_are_masked_and_described() {
        let a = [0.5, 2.1, 2.3, 1.9, 2.05, 0.1];
        let k = keep(&a, 2.0).unwrap();
        assert_eq!(k, vec![true, false, false, true, false, true]);
        let w = [400.0, 401.0, 402.0, 403.0, 404.0, 405.0];
        let cols = [0.0, 1.0, 1.0, 0.0, 1.0, 0.0];
        let m = describe(&w, &cols, &["x".to_string()], &k, 2.0);
        assert_eq!(m.n_masked, 3);
        assert_eq!(m.masked_nm, vec![[401.0, 402.0], [404.0, 404.0]]);
        assert!((m.components[0].band_masked_fraction - 1.0).abs() < 1e-12);
        assert!(m.dilute_and_remeasure);
        assert!(keep(&[1.0, 2.0], 2.0).is_none());
    }

    #[test]
    fn rows_keep_the_selected_points_of_every_column() {
        let cols = [1.0, 2.0, 3.0, 10.0, 20.0, 30.0];
        assert_eq!(
            rows(&cols, 3, &[true, false, true]),
            vec![1.0, 3.0, 10.0, 30.0]
        );
    }
}
