//! Active-set NNLS on the normal equations (Lawson & Hanson 1974, ch. 23;
//! Bro & de Jong 1997), with always-passive free variables.
//!
//! Per spectrum: one fused pass forms r = Eᵀa and aᵀa; the active-set loop
//! then works on the p × p Gram matrix only. Sub-problems G_PP·z = r_P are
//! solved with G_PP⁻¹ (from a Cholesky factor, checked for positive pivots)
//! cached per passive set P (a bitmask), so a batch that keeps hitting the
//! same few sets factors each once and each sub-solve is one small
//! matrix–vector product. The final answer is always computed from the
//! cached inverse of the final set, so it
//! does not depend on the path taken (warm start or not): results are
//! identical whatever the chunking or thread count.

use super::{Prepared, Status};
use crate::error::{Error, Result};
use std::collections::HashMap;

/// G restricted to one passive set, inverted through its Cholesky factor.
#[derive(Debug, Clone)]
struct Factor {
    /// Diagonal of G_PP⁻¹ placed at full indices (0 elsewhere).
    inv_diag: Vec<f64>,
    /// G_PP⁻¹ placed at full indices (p × p, row-major, 0 outside P × P):
    /// z = G_PP⁻¹·r_P is then one small matrix–vector product with
    /// independent rows, instead of two dependent triangular sweeps.
    inv: Vec<f64>,
}

/// Per-thread scratch space: factor cache and warm start.
#[derive(Debug)]
pub struct Workspace {
    small: Vec<Option<Box<Factor>>>,
    large: HashMap<u64, Factor>,
    last_mask: Option<u64>,
    /// The passive set `z` was last solved for.
    z_mask: Option<u64>,
    r: Vec<f64>,
    /// The last solution, reused between spectra (see `Prepared::solve_here`).
    pub(crate) solution: Option<super::Solution>,
    x: Vec<f64>,
    z: Vec<f64>,
}

const SMALL_CACHE_BITS: usize = 14;

impl Workspace {
    pub(crate) fn new(p: usize) -> Self {
        let small = if p <= SMALL_CACHE_BITS {
            (0..(1usize << p)).map(|_| None).collect()
        } else {
            Vec::new()
        };
        Workspace {
            small,
            large: HashMap::new(),
            last_mask: None,
            z_mask: None,
            r: vec![0.0; p],
            solution: Some(super::Solution::default()),
            x: vec![0.0; p],
            z: vec![0.0; p],
        }
    }

    /// Forget the warm start (the next solve starts cold).
    pub fn reset_warm_start(&mut self) {
        self.last_mask = None;
    }

    fn factor(&mut self, prep: &Prepared, mask: u64) -> Result<&Factor> {
        if !self.small.is_empty() {
            let slot = &mut self.small[mask as usize];
            if slot.is_none() {
                *slot = Some(Box::new(build_factor(prep, mask)?));
            }
            // Just filled above when it was empty.
            return slot
                .as_deref()
                .ok_or_else(|| Error::Invalid("factor cache".into()));
        }
        if let std::collections::hash_map::Entry::Vacant(e) = self.large.entry(mask) {
            e.insert(build_factor(prep, mask)?);
        }
        self.large
            .get(&mask)
            .ok_or_else(|| Error::Invalid("factor cache".into()))
    }

    /// Diagonal of G_PP⁻¹ for a passive set (bitmask), at full indices.
    pub(crate) fn inverse_diag(&mut self, prep: &Prepared, mask: u64) -> Result<&[f64]> {
        Ok(&self.factor(prep, mask)?.inv_diag)
    }

    /// The solution of the last solve, scaled, at full indices.
    pub(crate) fn z(&self) -> &[f64] {
        &self.z
    }
}

fn build_factor(prep: &Prepared, mask: u64) -> Result<Factor> {
    let p = prep.p;
    let idx: Vec<usize> = (0..p).filter(|j| mask & (1 << j) != 0).collect();
    let m = idx.len();
    let mut l = vec![0.0; m * m];
    for i in 0..m {
        for j in 0..=i {
            let mut s = prep.gram[idx[i] * p + idx[j]];
            for k in 0..j {
                s -= l[i * m + k] * l[j * m + k];
            }
            if i == j {
                if s.is_nan() || s <= 0.0 {
                    return Err(Error::Degenerate(
                        "the references are linearly dependent on this passive set".into(),
                    ));
                }
                l[i * m + i] = s.sqrt();
            } else {
                l[i * m + j] = s / l[j * m + j];
            }
        }
    }
    // inv(G_PP) diagonal: column norms² of L⁻¹ (rows of L⁻ᵀ).
    let mut linv = vec![0.0; m * m];
    for col in 0..m {
        for i in col..m {
            let mut s = if i == col { 1.0 } else { 0.0 };
            for k in col..i {
                s -= l[i * m + k] * linv[k * m + col];
            }
            linv[i * m + col] = s / l[i * m + i];
        }
    }
    let mut inv_diag = vec![0.0; p];
    for (c, &j) in idx.iter().enumerate() {
        inv_diag[j] = (c..m).map(|i| linv[i * m + c].powi(2)).sum();
    }
    // G_PP⁻¹ = L⁻ᵀ·L⁻¹: entry (a, b) sums linv[i][a]·linv[i][b] over i ≥ max(a, b).
    let mut inv = vec![0.0; p * p];
    for a in 0..m {
        for b in 0..=a {
            let v: f64 = (a..m).map(|i| linv[i * m + a] * linv[i * m + b]).sum();
            inv[idx[a] * p + idx[b]] = v;
            inv[idx[b] * p + idx[a]] = v;
        }
    }
    Ok(Factor { inv_diag, inv })
}

/// Dot product with eight independent accumulators over exact chunks, a
/// shape the compiler turns into packed SIMD multiply-adds without bounds
/// checks.
/// Column-major columns (n points each, p columns) as row-major groups of
/// eight, zero-padded: `out[g * n + i][l]` is column 8g + l at point i.
pub(crate) fn interleave(columns: &[f64], n: usize, p: usize) -> Vec<[f64; 8]> {
    let groups = p.div_ceil(8);
    let mut out = vec![[0.0f64; 8]; groups * n];
    for j in 0..p {
        let (g, l) = (j / 8, j % 8);
        for i in 0..n {
            out[g * n + i][l] = columns[j * n + i];
        }
    }
    out
}

/// r = Eᵀa from the row-major groups of [`interleave`]: one pass over the
/// spectrum per eight columns, each a[i] broadcast against eight column
/// values (four accumulator sets, for the points in turn: eight independent
/// multiply-add chains, enough to cover the adder's latency on two FMA
/// units; against two sets the gain was within this machine's timing
/// noise); returns aᵀa. Compiled for AVX2 with FMA, AVX2
/// and the baseline, chosen at run time. The summation order is fixed by the
/// code; the FMA version rounds once per multiply-add, so its last bits can
/// differ from a CPU without FMA. On one machine the version is fixed, so
/// results never depend on the thread count.
#[multiversion::multiversion(targets("x86_64+avx2+fma", "x86_64+avx2"))]
pub(crate) fn project(rows8: &[[f64; 8]], n: usize, a: &[f64], r: &mut [f64]) -> f64 {
    let p = r.len();
    let a = &a[..n];
    for (g, group) in rows8.chunks_exact(n).enumerate() {
        let mut acc = [[0.0f64; 8]; 4];
        let quads = group.chunks_exact(4).zip(a.chunks_exact(4));
        // Known when this version is compiled: the branch not taken is removed.
        let fma = multiversion::target::selected_target!()
            .contains(multiversion::target_features::x86_64::FMA);
        for (rows, x) in quads {
            for (k, sum) in acc.iter_mut().enumerate() {
                for l in 0..8 {
                    if fma {
                        sum[l] = rows[k][l].mul_add(x[k], sum[l]);
                    } else {
                        sum[l] += rows[k][l] * x[k];
                    }
                }
            }
        }
        let done = n / 4 * 4;
        for (k, (row, x)) in group[done..].iter().zip(&a[done..]).enumerate() {
            for l in 0..8 {
                acc[k][l] += row[l] * x;
            }
        }
        for l in 0..8 {
            let j = g * 8 + l;
            if j < p {
                r[j] = (acc[0][l] + acc[1][l]) + (acc[2][l] + acc[3][l]);
            }
        }
    }
    dot(a, a)
}

/// Compiled for AVX2 as well as the baseline; the best version the CPU runs
/// is chosen at run time (same results: the summation order is fixed by
/// the code, not the instruction set).
#[multiversion::multiversion(targets("x86_64+avx2"))]
pub(crate) fn dot(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a, b) = (&a[..n], &b[..n]);
    let (mut s0, mut s1, mut s2, mut s3) = (0.0f64, 0.0f64, 0.0f64, 0.0f64);
    let (mut s4, mut s5, mut s6, mut s7) = (0.0f64, 0.0f64, 0.0f64, 0.0f64);
    let ca = a.chunks_exact(8);
    let cb = b.chunks_exact(8);
    let (ra, rb) = (ca.remainder(), cb.remainder());
    for (x, y) in ca.zip(cb) {
        s0 += x[0] * y[0];
        s1 += x[1] * y[1];
        s2 += x[2] * y[2];
        s3 += x[3] * y[3];
        s4 += x[4] * y[4];
        s5 += x[5] * y[5];
        s6 += x[6] * y[6];
        s7 += x[7] * y[7];
    }
    let mut s = ((s0 + s4) + (s1 + s5)) + ((s2 + s6) + (s3 + s7));
    for (x, y) in ra.iter().zip(rb) {
        s += x * y;
    }
    s
}

fn solve_mask(prep: &Prepared, ws: &mut Workspace, mask: u64) -> Result<()> {
    if ws.z_mask == Some(mask) {
        return Ok(());
    }
    ws.z_mask = Some(mask);
    if mask == 0 {
        ws.z.iter_mut().for_each(|v| *v = 0.0);
        return Ok(());
    }
    let mut z = std::mem::take(&mut ws.z);
    let r = std::mem::take(&mut ws.r);
    let p = prep.p;
    let out = match ws.factor(prep, mask) {
        Ok(f) => {
            // Variables outside the passive set sit at their bound: exactly
            // +0 (their rows of the inverse are zero, and a sum of zero
            // products can come out as -0, which would print as "-0.000").
            for (j, (zi, row)) in z.iter_mut().zip(f.inv.chunks_exact(p)).enumerate() {
                *zi = if mask & (1 << j) != 0 {
                    row.iter().zip(&r).map(|(g, v)| g * v).sum()
                } else {
                    0.0
                };
            }
            Ok(())
        }
        Err(e) => Err(e),
    };
    ws.z = z;
    ws.r = r;
    if out.is_err() {
        ws.z_mask = None;
    }
    out
}

/// Run the active-set method for one spectrum. Leaves the scaled solution
/// in the workspace ([`Workspace::z`]); returns the RSS, the passive set as a
/// bitmask and the status.
pub(crate) fn solve(prep: &Prepared, a: &[f64], ws: &mut Workspace) -> Result<(f64, u64, Status)> {
    let (n, p, nn) = (prep.n, prep.p, prep.n_nonneg);
    let aa = project(&prep.rows8, n, a, &mut ws.r);
    // A new right-hand side: any cached z is stale.
    ws.z_mask = None;
    let free_mask: u64 = (nn..p).fold(0, |m, j| m | (1 << j));
    let rmax = ws.r.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let tol = 1e-12 * rmax.max(f64::MIN_POSITIVE);

    // Start from the previous spectrum's passive set (every variable for the
    // first spectrum of a chunk) and drop the components whose
    // least-squares value is not positive until the rest are: a feasible
    // start with x_P > 0 solving the sub-problem, as the Lawson–Hanson
    // iteration requires. Usually one or two sub-solves instead of adding
    // the components one at a time.
    let all_mask: u64 = (0..p).fold(0, |m, j| m | (1 << j));
    let mut mask = ws.last_mask.unwrap_or(all_mask) | free_mask;
    loop {
        solve_mask(prep, ws, mask)?;
        let bad = (0..nn)
            .filter(|&j| mask & (1 << j) != 0 && ws.z[j] <= 0.0)
            .fold(0u64, |m, j| m | (1 << j));
        if bad == 0 {
            break;
        }
        mask &= !bad;
    }
    ws.x.copy_from_slice(&ws.z);

    let max_iter = 3 * p + 10;
    let mut status = Status::IterationLimit;
    let mut blocked: u64 = 0;
    for _ in 0..max_iter {
        // Gradient of ½‖Ex−a‖² is −w with w = r − G·x.
        let mut best: Option<(usize, f64)> = None;
        for j in 0..nn {
            let bit = 1u64 << j;
            if mask & bit != 0 || blocked & bit != 0 {
                continue;
            }
            let g = &prep.gram[j * p..(j + 1) * p];
            let w = ws.r[j] - g.iter().zip(&ws.x).map(|(a, b)| a * b).sum::<f64>();
            if w > tol && best.is_none_or(|(_, bw)| w > bw) {
                best = Some((j, w));
            }
        }
        let Some((t, _)) = best else {
            status = Status::Converged;
            break;
        };
        mask |= 1 << t;
        solve_mask(prep, ws, mask)?;
        if ws.z[t] <= 0.0 {
            // Round-off: t cannot enter; try the next best candidate.
            mask &= !(1 << t);
            blocked |= 1 << t;
            continue;
        }
        blocked = 0;
        // Inner loop: step back until every passive non-negative z > 0.
        for _ in 0..=p {
            let infeasible: Vec<usize> = (0..nn)
                .filter(|&j| mask & (1 << j) != 0 && ws.z[j] <= 0.0)
                .collect();
            if infeasible.is_empty() {
                break;
            }
            let alpha = infeasible
                .iter()
                .map(|&j| ws.x[j] / (ws.x[j] - ws.z[j]))
                .fold(f64::INFINITY, f64::min);
            for j in 0..p {
                ws.x[j] += alpha * (ws.z[j] - ws.x[j]);
            }
            for j in 0..nn {
                if mask & (1 << j) != 0
                    && ws.x[j] <= 1e-15 * ws.x.iter().fold(0.0f64, |m, v| m.max(v.abs()))
                {
                    mask &= !(1 << j);
                    ws.x[j] = 0.0;
                }
            }
            // Make sure every infeasible index found leaves the set.
            for &j in &infeasible {
                if (ws.x[j]).abs() <= 0.0 {
                    mask &= !(1 << j);
                }
            }
            solve_mask(prep, ws, mask)?;
        }
        ws.x.copy_from_slice(&ws.z);
        for j in 0..nn {
            if mask & (1 << j) == 0 {
                ws.x[j] = 0.0;
            }
        }
    }
    // Final answer from the final set's factor (path independent).
    solve_mask(prep, ws, mask)?;
    for j in 0..nn {
        if mask & (1 << j) != 0 && ws.z[j] < 0.0 {
            ws.z[j] = 0.0;
        }
    }
    ws.last_mask = Some(mask);
    let xr: f64 = (0..p).map(|j| ws.z[j] * ws.r[j]).sum();
    let mut rss = aa - xr;
    if rss < 1e-6 * aa {
        // The Gram identity cancels badly for near-exact fits: recompute.
        let mut s = 0.0;
        for (i, &ai) in a.iter().enumerate() {
            let mut fit = 0.0;
            for j in 0..p {
                fit += prep.columns[j * n + i] * ws.z[j];
            }
            s += (ai - fit) * (ai - fit);
        }
        rss = s;
    }
    Ok((rss, mask, status))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Relative tolerance between the vectorised and the scalar sums: they
    /// add the same products in a different order (and the FMA build rounds
    /// once per multiply-add), so they agree to a few ulps of the sum of
    /// absolute products, far inside 1e-12 for 37 points.
    const SUM_ORDER_TOL: f64 = 1e-12;

    #[test]
    fn vectorised_projection_agrees_with_a_plain_scalar_loop() {
        // Fixed, uneven data: 37 points (not a multiple of 4) and 11 columns
        // (two groups of eight, the second zero-padded).
        let (n, p) = (37, 11);
        let columns: Vec<f64> = (0..n * p)
            .map(|k| ((k * 7919 % 1013) as f64 / 1013.0 - 0.3) * 1e3)
            .collect();
        let a: Vec<f64> = (0..n)
            .map(|i| ((i * 31 % 17) as f64 - 8.0) * 0.01)
            .collect();
        let mut r = vec![0.0; p];
        let ata = project(&interleave(&columns, n, p), n, &a, &mut r);
        // The definition of Eᵀa, written as a plain loop (common practice, no source).
        for j in 0..p {
            let mut want = 0.0;
            let mut scale = 0.0;
            for i in 0..n {
                want += columns[j * n + i] * a[i];
                scale += (columns[j * n + i] * a[i]).abs();
            }
            assert!(
                (r[j] - want).abs() <= SUM_ORDER_TOL * scale,
                "column {j}: vectorised {} vs scalar {want}",
                r[j]
            );
        }
        let want_ata: f64 = a.iter().map(|x| x * x).sum();
        assert!((ata - want_ata).abs() <= SUM_ORDER_TOL * want_ata);
    }
}
