//! Lawson–Hanson NNLS on the full matrix (the `nnls` crate), for designs too
//! poorly conditioned for the normal equations.
//!
//! Free baseline columns B are projected out first: with B = Q_B·R_B (QR),
//! the components solve NNLS on (I − Q_B·Q_Bᵀ)·E_c against
//! (I − Q_B·Q_Bᵀ)·a, and the baseline follows from R_B·β = Q_Bᵀ·(a − E_c·x).
//! The crate panics on empty or degenerate input, so inputs are checked
//! first and the call runs under `catch_unwind`.

use super::Status;
use crate::error::{Error, Result};
use nalgebra::{DMatrix, DVector};
use ndarray::{Array1, Array2};

/// A design with its baseline projected out.
#[derive(Debug, Clone)]
pub(crate) struct Projected {
    n: usize,
    p: usize,
    nn: usize,
    /// Scaled design, n × p.
    full: DMatrix<f64>,
    /// Orthonormal basis of the baseline columns, n × f.
    qb: DMatrix<f64>,
    /// R of the baseline QR, f × f.
    rb: DMatrix<f64>,
    /// Projected component columns, n × nn (row-major for the crate).
    ec: Array2<f64>,
}

impl Projected {
    pub(crate) fn new(scaled: &[f64], n: usize, p: usize, nn: usize) -> Self {
        let full = DMatrix::from_column_slice(n, p, scaled);
        let f = p - nn;
        let (qb, rb) = if f > 0 {
            let qr = full.columns(nn, f).into_owned().qr();
            (qr.q(), qr.r())
        } else {
            (DMatrix::zeros(n, 0), DMatrix::zeros(0, 0))
        };
        let e = full.columns(0, nn).into_owned();
        let e_proj = if f > 0 {
            &e - &qb * (qb.transpose() * &e)
        } else {
            e
        };
        let ec = Array2::from_shape_fn((n, nn), |(i, j)| e_proj[(i, j)]);
        Projected {
            n,
            p,
            nn,
            full,
            qb,
            rb,
            ec,
        }
    }

    pub(crate) fn solve(&self, a: &[f64]) -> Result<(Vec<f64>, f64, Vec<bool>, Status)> {
        let (n, p, nn) = (self.n, self.p, self.nn);
        let f = p - nn;
        let av = DVector::from_column_slice(a);
        let qta = if f > 0 {
            self.qb.transpose() * &av
        } else {
            DVector::zeros(0)
        };
        let a_proj = if f > 0 {
            &av - &self.qb * &qta
        } else {
            av.clone()
        };
        let mut xc = vec![0.0; nn];
        if nn > 0 && n > 0 && a_proj.iter().all(|v| v.is_finite()) && a_proj.norm() > 0.0 {
            let b = Array1::from_iter(a_proj.iter().cloned());
            let ec = self.ec.view();
            let out =
                std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| nnls::nnls(ec, b.view())));
            match out {
                Ok((x, _)) => {
                    for (dst, v) in xc.iter_mut().zip(x.iter()) {
                        *dst = v.max(0.0);
                    }
                }
                Err(_) => {
                    return Err(Error::Degenerate(
                        "the Lawson–Hanson solver failed on this spectrum (round-off in a degenerate reference set)".into(),
                    ));
                }
            }
        }
        let mut x = vec![0.0; p];
        x[..nn].copy_from_slice(&xc);
        if f > 0 {
            let ecx = self.full.columns(0, nn) * DVector::from_column_slice(&xc);
            let rhs = self.qb.transpose() * (&av - ecx);
            let beta = self.rb.solve_upper_triangular(&rhs).ok_or_else(|| {
                Error::Degenerate("the baseline terms are linearly dependent".into())
            })?;
            x[nn..].copy_from_slice(beta.as_slice());
        }
        let resid = &av - &self.full * DVector::from_column_slice(&x);
        let rss = resid.norm_squared();
        let passive: Vec<bool> = (0..p).map(|j| j >= nn || x[j] > 0.0).collect();
        Ok((x, rss, passive, Status::Converged))
    }

    /// Diagonal of (E_Pᵀ·E_P)⁻¹ on the passive columns, at full indices.
    pub(crate) fn inverse_diag(&self, passive: &[bool]) -> Result<Vec<f64>> {
        let idx: Vec<usize> = (0..self.p).filter(|&j| passive[j]).collect();
        let mut out = vec![0.0; self.p];
        if idx.is_empty() {
            return Ok(out);
        }
        let m = DMatrix::from_fn(self.n, idx.len(), |i, c| self.full[(i, idx[c])]);
        let r = m.qr().r();
        let rinv = r
            .solve_upper_triangular(&DMatrix::identity(idx.len(), idx.len()))
            .ok_or_else(|| {
                Error::Degenerate("the passive references are linearly dependent".into())
            })?;
        for (c, &j) in idx.iter().enumerate() {
            out[j] = rinv.row(c).norm_squared();
        }
        Ok(out)
    }
}
