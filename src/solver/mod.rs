//! Solver (stage 4): non-negative least squares with free baseline terms.
//!
//! Problem, for each spectrum a (n points) and a fixed design E (n × p):
//!
//! ```text
//! minimise ‖E·x − a‖²  subject to  xⱼ ≥ 0 for component columns,
//!                                  xⱼ free for baseline columns.
//! ```
//!
//! Columns are scaled to unit length first (x is unscaled on the way out),
//! so the conditioning the solver sees is that of the column-scaled matrix.
//!
//! Two methods, chosen once per design by [`Prepared::new`]:
//! - [`Method::NormalEquations`]: the active-set algorithm of Lawson & Hanson
//!   (*Solving Least Squares Problems*, 1974, ch. 23) run on the normal
//!   equations EᵀE·x = Eᵀa, with EᵀE formed once per batch and each
//!   spectrum reduced to Eᵀa and aᵀa in one pass (Bro & de Jong,
//!   J. Chemometrics 11:393, 1997, "fast NNLS"). Cholesky factors of EᵀE
//!   restricted to a passive set are cached per set; the passive set is
//!   warm-started from the previous spectrum of the same chunk.
//! - [`Method::LawsonHanson`]: forming EᵀE squares the condition number, so
//!   when the column-scaled E is worse conditioned than
//!   [`FALLBACK_CONDITION`], the `nnls` crate (Lawson–Hanson with Householder
//!   transformations on the full matrix) solves instead, after the baseline
//!   columns are projected out with a QR factorisation.
//!
//! Standard errors come from σ²·(EᵀE)⁻¹ restricted to the passive set (the
//! variables not held at zero), with σ² = RSS / (n − |P|). A component held
//! at zero gets the standard error it would have in the unconstrained model
//! (σ² times the diagonal of the full inverse), a bound on what could hide
//! below zero.

mod fallback;
mod normal;

use crate::error::{Error, Result};
use nalgebra::{DMatrix, SymmetricEigen};

/// Above this condition number of the column-scaled design the normal
/// equations (which square it) are not trusted and the orthogonal
/// Lawson–Hanson path is used: 1e4 squared leaves about 8 significant digits.
pub const FALLBACK_CONDITION: f64 = 1e4;

/// Above this condition number the references cannot be told apart at all
/// and fitting is refused.
pub const DEGENERATE_CONDITION: f64 = 1e8;

/// How a design is solved.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// Active-set NNLS on the normal equations (fast).
    NormalEquations,
    /// Lawson–Hanson on the full matrix (the `nnls` crate), for poorly
    /// conditioned designs.
    LawsonHanson,
}

impl Method {
    /// Name used in outputs.
    pub fn name(self) -> &'static str {
        match self {
            Method::NormalEquations => "normal-equations",
            Method::LawsonHanson => "lawson-hanson",
        }
    }
}

/// How a solve ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Status {
    /// The optimality (KKT) conditions hold.
    Converged,
    /// The iteration limit was reached; the answer is the last iterate.
    IterationLimit,
}

/// The answer for one spectrum, in the design's (unscaled) units.
#[derive(Debug, Clone)]
pub struct Solution {
    /// Coefficients: components (≥ 0) then baseline terms.
    pub x: Vec<f64>,
    /// Standard error of each coefficient; NaN when the fit has no degrees
    /// of freedom left to estimate the noise from.
    pub std_error: Vec<f64>,
    /// Residual sum of squares ‖E·x − a‖².
    pub rss: f64,
    /// Number of variables not held at zero (components and baseline).
    pub n_passive: usize,
    /// How the solve ended.
    pub status: Status,
}

impl Default for Solution {
    fn default() -> Self {
        Solution {
            x: Vec::new(),
            std_error: Vec::new(),
            rss: 0.0,
            n_passive: 0,
            status: Status::Converged,
        }
    }
}

/// A design made ready for solving many spectra.
#[derive(Debug, Clone)]
pub struct Prepared {
    pub(crate) n: usize,
    pub(crate) p: usize,
    pub(crate) n_nonneg: usize,
    /// Scaled columns, column-major (unit length).
    pub(crate) columns: Vec<f64>,
    /// The same columns row-major in groups of eight (zero-padded): row i of
    /// group g holds columns 8g..8g+8 at point i, for the Eᵀa pass.
    pub(crate) rows8: Vec<[f64; 8]>,
    /// Column norms (the scaling), one per column.
    pub(crate) scale: Vec<f64>,
    /// Gram matrix of the scaled columns, row-major p × p.
    pub(crate) gram: Vec<f64>,
    /// Diagonal of the inverse of the full scaled Gram matrix.
    pub(crate) full_inverse_diag: Vec<f64>,
    condition: f64,
    method: Method,
    fallback: Option<fallback::Projected>,
}

impl Prepared {
    /// Prepare a column-major design of `p` columns of `n` points, the first
    /// `n_nonneg` of them constrained to be non-negative. `names` label the
    /// columns in error messages.
    pub fn new(
        columns: &[f64],
        n: usize,
        p: usize,
        n_nonneg: usize,
        names: &[String],
    ) -> Result<Self> {
        if n == 0 || p == 0 || columns.len() != n * p || n_nonneg > p || names.len() != p {
            return Err(Error::Invalid(format!(
                "solver given an inconsistent design ({n} points, {p} columns, {} values)",
                columns.len()
            )));
        }
        if n < p {
            return Err(Error::Degenerate(format!(
                "{n} points for {p} unknowns: expected at least as many points as unknowns"
            )));
        }
        if p > 60 {
            return Err(Error::Invalid(format!(
                "{p} columns: at most 60 components and baseline terms are supported"
            )));
        }
        if columns.iter().any(|v| !v.is_finite()) {
            return Err(Error::Invalid("design holds a non-finite value".into()));
        }
        let (scale, scaled) = scale_columns(columns, n, p, names)?;
        let gram = gram_matrix(&scaled, n, p);
        let (condition, full_inverse_diag) = conditioning(&gram, p, names)?;
        let method = if condition > FALLBACK_CONDITION {
            Method::LawsonHanson
        } else {
            Method::NormalEquations
        };
        let fallback = match method {
            Method::LawsonHanson => Some(fallback::Projected::new(&scaled, n, p, n_nonneg)),
            Method::NormalEquations => None,
        };
        Ok(Prepared {
            n,
            p,
            n_nonneg,
            rows8: normal::interleave(&scaled, n, p),
            columns: scaled,
            scale,
            gram,
            full_inverse_diag,
            condition,
            method,
            fallback,
        })
    }

    /// Use a given method regardless of the conditioning (tests compare the
    /// two paths on the same problems).
    pub fn with_method(mut self, method: Method) -> Self {
        self.method = method;
        self.fallback = match method {
            Method::LawsonHanson => Some(fallback::Projected::new(
                &self.columns,
                self.n,
                self.p,
                self.n_nonneg,
            )),
            Method::NormalEquations => None,
        };
        self
    }

    /// Condition number of the column-scaled design (2-norm).
    pub fn condition(&self) -> f64 {
        self.condition
    }

    /// The method that will be used.
    pub fn method(&self) -> Method {
        self.method
    }

    /// Number of points each spectrum must have.
    pub fn n_points(&self) -> usize {
        self.n
    }

    /// Cosine similarity of the two most similar component columns.
    pub fn most_similar_components(&self) -> Option<(usize, usize, f64)> {
        (self.n_nonneg >= 2).then(|| most_similar_pair(&self.gram, self.n_nonneg.min(self.p)))
    }

    /// A fresh per-thread workspace (factor cache, warm start).
    pub fn workspace(&self) -> Workspace {
        Workspace::new(self.p)
    }

    /// Solve one spectrum `a` (length [`Self::n_points`]).
    pub fn solve(&self, a: &[f64], ws: &mut Workspace) -> Result<Solution> {
        let mut out = Solution::default();
        self.solve_into(a, ws, &mut out)?;
        Ok(out)
    }

    /// Solve one spectrum into the workspace's own solution buffer and
    /// return it (no allocation once the workspace is warm).
    pub fn solve_here<'w>(&self, a: &[f64], ws: &'w mut Workspace) -> Result<&'w Solution> {
        let mut out = ws.solution.take().unwrap_or_default();
        let r = self.solve_into(a, ws, &mut out);
        ws.solution = Some(out);
        r?;
        ws.solution
            .as_ref()
            .ok_or_else(|| Error::Invalid("solution buffer".into()))
    }

    /// Solve one spectrum into `out`, reusing its storage (no allocation on
    /// the normal-equation path once `out` and `ws` are warm).
    pub fn solve_into(&self, a: &[f64], ws: &mut Workspace, out: &mut Solution) -> Result<()> {
        if a.len() != self.n {
            return Err(Error::Invalid(format!(
                "spectrum has {} points, the design {}",
                a.len(),
                self.n
            )));
        }
        out.x.clear();
        out.std_error.clear();
        let (rss, n_passive, status) = match &self.fallback {
            None => {
                let (rss, mask, status) = normal::solve(self, a, ws)?;
                let n_passive = mask.count_ones() as usize;
                let sigma2 = sigma2(rss, self.n, n_passive);
                for j in 0..self.p {
                    out.x.push(ws.z()[j] / self.scale[j]);
                }
                let inv = ws.inverse_diag(self, mask)?;
                for j in 0..self.p {
                    let d = if mask & (1 << j) != 0 {
                        inv[j]
                    } else {
                        self.full_inverse_diag[j]
                    };
                    out.std_error
                        .push((sigma2 * d.max(0.0)).sqrt() / self.scale[j]);
                }
                (rss, n_passive, status)
            }
            Some(proj) => {
                let (xs, rss, passive, status) = proj.solve(a)?;
                let n_passive = passive.iter().filter(|&&b| b).count();
                let sigma2 = sigma2(rss, self.n, n_passive);
                let inv = proj.inverse_diag(&passive)?;
                for j in 0..self.p {
                    out.x.push(xs[j] / self.scale[j]);
                    let d = if passive[j] {
                        inv[j]
                    } else {
                        self.full_inverse_diag[j]
                    };
                    out.std_error
                        .push((sigma2 * d.max(0.0)).sqrt() / self.scale[j]);
                }
                (rss, n_passive, status)
            }
        };
        if out.x.iter().any(|v| !v.is_finite())
            || out.std_error.iter().any(|v| v.is_infinite())
            || !rss.is_finite()
        {
            return Err(Error::Degenerate(
                "the solver produced a non-finite value: the references or the spectrum are degenerate".into(),
            ));
        }
        out.rss = rss.max(0.0);
        out.n_passive = n_passive;
        out.status = status;
        Ok(())
    }
}

/// Residual variance σ² = RSS / (n − |P|). With no degrees of freedom left
/// (as many points as unknowns) the residual says nothing about the noise:
/// NaN, which callers report as an unknown standard error.
fn sigma2(rss: f64, n: usize, n_passive: usize) -> f64 {
    let dof = n.saturating_sub(n_passive);
    if dof == 0 {
        f64::NAN
    } else {
        rss.max(0.0) / dof as f64
    }
}

/// Columns scaled to unit length: (the norms, the scaled columns).
fn scale_columns(
    columns: &[f64],
    n: usize,
    p: usize,
    names: &[String],
) -> Result<(Vec<f64>, Vec<f64>)> {
    let mut scale = Vec::with_capacity(p);
    let mut scaled = Vec::with_capacity(n * p);
    for j in 0..p {
        let col = &columns[j * n..(j + 1) * n];
        let norm = col.iter().map(|v| v * v).sum::<f64>().sqrt();
        if !(norm > 0.0 && norm.is_finite()) {
            return Err(Error::Degenerate(format!(
                "'{}' is zero at every wavelength used: it cannot be fitted over this range",
                names[j]
            )));
        }
        scale.push(norm);
        scaled.extend(col.iter().map(|v| v / norm));
    }
    Ok((scale, scaled))
}

/// Gram matrix EᵀE of column-major columns, row-major p × p.
fn gram_matrix(scaled: &[f64], n: usize, p: usize) -> Vec<f64> {
    let mut gram = vec![0.0; p * p];
    for i in 0..p {
        for j in i..p {
            let g = normal::dot(&scaled[i * n..(i + 1) * n], &scaled[j * n..(j + 1) * n]);
            gram[i * p + j] = g;
            gram[j * p + i] = g;
        }
    }
    gram
}

/// The condition number of the scaled design (√ of the Gram matrix's
/// eigenvalue ratio) and the diagonal of the Gram matrix's inverse; an
/// error naming the most similar pair when the design is degenerate.
fn conditioning(gram: &[f64], p: usize, names: &[String]) -> Result<(f64, Vec<f64>)> {
    let gm = DMatrix::from_row_slice(p, p, gram);
    let eig = SymmetricEigen::new(gm.clone());
    let max = eig
        .eigenvalues
        .iter()
        .cloned()
        .fold(f64::NEG_INFINITY, f64::max);
    let min = eig
        .eigenvalues
        .iter()
        .cloned()
        .fold(f64::INFINITY, f64::min);
    let condition = if min > 0.0 {
        (max / min).sqrt()
    } else {
        f64::INFINITY
    };
    if condition.is_nan() || condition >= DEGENERATE_CONDITION {
        let (a, b, cos) = most_similar_pair(gram, p);
        return Err(Error::Degenerate(format!(
            "the model cannot tell '{}' and '{}' apart over this range (spectral similarity {:.6}, condition number {}): remove one, widen the range, or check the files",
            names[a],
            names[b],
            cos,
            if condition.is_finite() {
                format!("{condition:.3e}")
            } else {
                "infinite".into()
            }
        )));
    }
    let full_inverse_diag = match gm.cholesky() {
        Some(ch) => {
            let inv = ch.inverse();
            (0..p).map(|i| inv[(i, i)]).collect()
        }
        None => {
            // Positive definite by the condition check above; recompute
            // the diagonal from the eigen-decomposition if rounding says no.
            (0..p)
                .map(|i| {
                    (0..p)
                        .map(|k| eig.eigenvectors[(i, k)].powi(2) / eig.eigenvalues[k])
                        .sum()
                })
                .collect()
        }
    };
    Ok((condition, full_inverse_diag))
}

pub use normal::Workspace;

fn most_similar_pair(gram: &[f64], k: usize) -> (usize, usize, f64) {
    let p = (gram.len() as f64).sqrt().round() as usize;
    let mut best = (0, 1.min(k.saturating_sub(1)), f64::NEG_INFINITY);
    for i in 0..k {
        for j in i + 1..k {
            let c = gram[i * p + j] / (gram[i * p + i] * gram[j * p + j]).sqrt();
            if c > best.2 {
                best = (i, j, c);
            }
        }
    }
    best
}
