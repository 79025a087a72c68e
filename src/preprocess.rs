//! Preprocessing (stage 3): put references and baseline on a sample's grid.
//!
//! In: a sample wavelength [`Grid`], a [`ReferenceSet`], a baseline model and
//! an optional wavelength window. Out: a [`Design`], the model matrix of
//!
//! ```text
//! A(λ) = l·Σ εᵢ(λ)·cᵢ + b₀ + b₁·(λ − λ_mid)
//! ```
//!
//! over the points where the sample and every reference are defined. Columns
//! hold εᵢ(λ) in L·mol⁻¹·cm⁻¹ (linearly interpolated from each curve), then a
//! column of ones (offset, AU) and a column of (λ − λ_mid)/half_span (slope),
//! as the baseline asks. The pathlength is applied later, at the edges: the
//! solver estimates l·cᵢ and the caller divides by l.

use crate::error::{Error, Result};
use crate::reference::ReferenceSet;
use crate::spectrum::Grid;

/// The baseline terms fitted beside the components; free in sign.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Baseline {
    /// No baseline term.
    None,
    /// A constant offset in AU (cuvette or well mismatch).
    #[default]
    Offset,
    /// Offset plus slope in AU/nm (scattering, drift).
    Linear,
}

impl Baseline {
    /// Name of the baseline model in outputs.
    pub fn name(self) -> &'static str {
        match self {
            Baseline::None => "none",
            Baseline::Offset => "offset",
            Baseline::Linear => "linear",
        }
    }

    /// Number of baseline columns.
    pub fn n_terms(self) -> usize {
        match self {
            Baseline::None => 0,
            Baseline::Offset => 1,
            Baseline::Linear => 2,
        }
    }
}

/// The model matrix for one wavelength grid.
#[derive(Debug, Clone)]
pub struct Design {
    /// First used index into the sample grid.
    pub start: usize,
    /// One past the last used index.
    pub end: usize,
    /// Wavelengths used, nm.
    pub wavelengths_nm: Vec<f64>,
    /// Number of component columns (non-negative).
    pub n_components: usize,
    /// Baseline model (free columns after the components).
    pub baseline: Baseline,
    /// Centre of the used range, nm (λ_mid of the slope term).
    pub centre_nm: f64,
    /// Half the used span, nm (the slope column is divided by it).
    pub half_span_nm: f64,
    /// Columns, column-major: `n_columns()` columns of `n_points()` values.
    pub columns: Vec<f64>,
}

impl Design {
    /// Number of wavelengths used.
    pub fn n_points(&self) -> usize {
        self.end - self.start
    }

    /// Number of columns (components and baseline terms).
    pub fn n_columns(&self) -> usize {
        self.n_components + self.baseline.n_terms()
    }

    /// Column `j`.
    pub fn column(&self, j: usize) -> &[f64] {
        let n = self.n_points();
        &self.columns[j * n..(j + 1) * n]
    }

    /// The range used, nm.
    pub fn range_nm(&self) -> (f64, f64) {
        (
            self.wavelengths_nm[0],
            self.wavelengths_nm[self.wavelengths_nm.len() - 1],
        )
    }
}

fn fmt_range((lo, hi): (f64, f64)) -> String {
    format!("{lo}–{hi} nm")
}

/// Build the design for `grid`. `window_nm` restricts the range further.
pub fn design(
    grid: &Grid,
    refs: &ReferenceSet,
    baseline: Baseline,
    window_nm: Option<(f64, f64)>,
) -> Result<Design> {
    if refs.components.is_empty() {
        return Err(Error::Invalid("no reference components selected".into()));
    }
    let describe = || {
        let each: Vec<String> = refs
            .components
            .iter()
            .map(|c| format!("{} {}", c.name, fmt_range(c.range_nm())))
            .collect();
        let mut s = format!(
            "the sample covers {}, the references {}",
            fmt_range((grid.min_nm(), grid.max_nm())),
            each.join(", ")
        );
        if let Some(w) = window_nm {
            s.push_str(&format!(", --range-nm {}", fmt_range(w)));
        }
        s
    };
    let Some((mut lo, mut hi)) = refs.common_range_nm() else {
        return Err(Error::NoOverlap(format!(
            "the references have no wavelength range in common: {}",
            describe()
        )));
    };
    lo = lo.max(grid.min_nm());
    hi = hi.min(grid.max_nm());
    if let Some((wlo, whi)) = window_nm {
        lo = lo.max(wlo);
        hi = hi.min(whi);
    }
    let w = grid.wavelengths_nm();
    let start = w.partition_point(|&x| x < lo);
    let end = w.partition_point(|&x| x <= hi);
    let n = end.saturating_sub(start);
    let p = refs.components.len() + baseline.n_terms();
    if n == 0 {
        return Err(Error::NoOverlap(format!(
            "no wavelengths in common: {}",
            describe()
        )));
    }
    if n < p {
        return Err(Error::NoOverlap(format!(
            "{n} wavelength(s) in common ({}) for {p} unknowns ({} component(s) and {} baseline term(s)): expected at least as many wavelengths as unknowns (--baseline none removes the baseline unknowns); {}",
            fmt_range((w[start], w[end - 1])),
            refs.components.len(),
            baseline.n_terms(),
            describe()
        )));
    }
    let used = &w[start..end];
    let (ulo, uhi) = (used[0], used[n - 1]);
    let centre_nm = 0.5 * (ulo + uhi);
    let half_span_nm = (0.5 * (uhi - ulo)).max(f64::MIN_POSITIVE);
    let mut columns = Vec::with_capacity(n * p);
    for c in &refs.components {
        let cw = c.grid.wavelengths_nm();
        for &x in used {
            // Inside the common range by construction; 0 is never reached.
            columns.push(interpolate(cw, &c.epsilon_l_per_mol_cm, x).unwrap_or(0.0));
        }
    }
    if baseline.n_terms() >= 1 {
        columns.extend(std::iter::repeat_n(1.0, n));
    }
    if baseline.n_terms() == 2 {
        columns.extend(used.iter().map(|&x| (x - centre_nm) / half_span_nm));
    }
    Ok(Design {
        start,
        end,
        wavelengths_nm: used.to_vec(),
        n_components: refs.components.len(),
        baseline,
        centre_nm,
        half_span_nm,
        columns,
    })
}

/// Linear interpolation of `ys` over ascending `xs` at `x`; `None` outside.
pub fn interpolate(xs: &[f64], ys: &[f64], x: f64) -> Option<f64> {
    let n = xs.len();
    if n == 0 || x < xs[0] || x > xs[n - 1] {
        return None;
    }
    let j = xs.partition_point(|&v| v < x);
    if j < n && (xs[j] - x).abs() <= f64::EPSILON * x.abs() {
        return Some(ys[j]);
    }
    if j == 0 {
        return Some(ys[0]);
    }
    let (x0, x1, y0, y1) = (xs[j - 1], xs[j], ys[j - 1], ys[j]);
    Some(y0 + (y1 - y0) * (x - x0) / (x1 - x0))
}

#[cfg(test)]
mod tests {
    use super::*;

    use crate::reference::Component;

    fn comp(name: &str, lo: f64, hi: f64) -> Component {
        Component::from_curve(name, vec![lo, hi], vec![1000.0, 2000.0], "imported").unwrap()
    }

    #[test]
    fn range_is_the_overlap_of_sample_and_references() {
        let refs = ReferenceSet {
            components: vec![comp("a", 400.0, 600.0), comp("b", 450.0, 700.0)],
        };
        let grid = Grid::new((350..=650).step_by(10).map(f64::from).collect()).unwrap();
        let d = design(&grid, &refs, Baseline::Linear, None).unwrap();
        assert_eq!(d.range_nm(), (450.0, 600.0));
        assert_eq!(d.n_columns(), 4);
        // ε interpolated linearly: a at 450 nm = 1000 + 1000·50/200.
        assert!((d.column(0)[0] - 1250.0).abs() < 1e-9);
        assert!((d.column(3)[0] + 1.0).abs() < 1e-12);
    }

    #[test]
    fn no_overlap_is_an_error_that_names_the_ranges() {
        let refs = ReferenceSet {
            components: vec![comp("a", 400.0, 600.0)],
        };
        let grid = Grid::new(vec![700.0, 710.0, 720.0]).unwrap();
        let e = design(&grid, &refs, Baseline::None, None).unwrap_err();
        assert!(e.to_string().contains("a 400–600 nm"), "{e}");
    }

    #[test]
    fn too_few_points_for_the_unknowns_is_an_error() {
        let refs = ReferenceSet {
            components: vec![comp("a", 400.0, 600.0)],
        };
        let grid = Grid::new(vec![450.0, 500.0]).unwrap();
        assert!(design(&grid, &refs, Baseline::Offset, None).is_ok());
        let e = design(&grid, &refs, Baseline::Linear, None).unwrap_err();
        assert!(
            e.to_string()
                .contains("at least as many wavelengths as unknowns"),
            "{e}"
        );
    }

    #[test]
    fn interpolation_is_linear_and_bounded() {
        let xs = [400.0, 500.0];
        let ys = [0.0, 10.0];
        assert!((interpolate(&xs, &ys, 450.0).unwrap() - 5.0).abs() < 1e-12);
        assert!(interpolate(&xs, &ys, 399.0).is_none());
        assert!((interpolate(&xs, &ys, 500.0).unwrap() - 10.0).abs() < 1e-12);
    }
}
