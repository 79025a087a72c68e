//! Property tests (proptest) for the solver and the fit: invariants that
//! must hold for any input, checked on random problems.
//!
//! - concentrations are never negative;
//! - the Karush–Kuhn–Tucker conditions of NNLS hold (Lawson & Hanson 1974,
//!   ch. 23): gradient zero on the passive set and free variables,
//!   non-negative where a component is held at zero;
//! - permuting the components permutes the answer;
//! - scaling the pathlength scales the concentrations inversely;
//! - an exact, well-conditioned mixture is recovered to near machine
//!   precision;
//! - results are identical across thread counts.

use proptest::prelude::*;
use std::sync::Arc;
use unblend::fit::{FitOptions, Model, Outcome};
use unblend::input::spectra::Block;
use unblend::preprocess::Baseline;
use unblend::reference::{Component, ReferenceSet};
use unblend::solver::{Method, Prepared};
use unblend::spectrum::Grid;

/// KKT tolerance relative to ‖E_j‖·‖a‖: the normal-equation path works at
/// about cond² · ε ≈ 1e-8 for the condition numbers allowed there (≤ 1e4).
const KKT_TOL: f64 = 1e-7;
/// Exact-data recovery, relative: well-conditioned problems only (cond ≤ 100).
const EXACT_TOL: f64 = 1e-9;

/// A problem: `n` points, `k` band-shaped columns (centre, width, height).
#[derive(Debug, Clone)]
struct Problem {
    n: usize,
    bands: Vec<(f64, f64, f64)>,
    conc: Vec<f64>,
    noise: Vec<f64>,
    offset: f64,
}

fn problem() -> impl Strategy<Value = Problem> {
    (1usize..=5, 12usize..=80).prop_flat_map(|(k, n)| {
        (
            Just(n),
            prop::collection::vec((0.0..1.0f64, 0.03..0.3f64, 0.1..10.0f64), k),
            prop::collection::vec(prop_oneof![Just(0.0), 0.0..2.0f64], k),
            prop::collection::vec(-0.05..0.05f64, n),
            -0.5..0.5f64,
        )
            .prop_map(|(n, bands, conc, noise, offset)| Problem {
                n,
                bands,
                conc,
                noise,
                offset,
            })
    })
}

fn columns(p: &Problem) -> Vec<f64> {
    let mut out = Vec::new();
    for &(c, w, h) in &p.bands {
        for i in 0..p.n {
            let x = i as f64 / (p.n - 1) as f64;
            out.push(h * (-0.5 * ((x - c) / w).powi(2)).exp() + 1e-3 * h);
        }
    }
    out
}

fn spectrum(p: &Problem, cols: &[f64], with_noise: bool) -> Vec<f64> {
    (0..p.n)
        .map(|i| {
            let clean: f64 = p
                .conc
                .iter()
                .enumerate()
                .map(|(j, c)| cols[j * p.n + i] * c)
                .sum();
            clean + p.offset + if with_noise { p.noise[i] } else { 0.0 }
        })
        .collect()
}

fn with_offset(cols: &[f64], n: usize) -> Vec<f64> {
    let mut c = cols.to_vec();
    c.extend(std::iter::repeat_n(1.0, n));
    c
}

fn names(p: usize) -> Vec<String> {
    (0..p).map(|j| format!("c{j}")).collect()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(300))]

    #[test]
    fn kkt_conditions_hold_and_concentrations_are_never_negative(p in problem()) {
        let k = p.bands.len();
        let cols = with_offset(&columns(&p), p.n);
        let a = spectrum(&p, &columns(&p), true);
        let Ok(prep) = Prepared::new(&cols, p.n, k + 1, k, &names(k + 1)) else {
            return Ok(()); // refused as degenerate: nothing to check
        };
        for method in [Method::NormalEquations, Method::LawsonHanson] {
            let prep = prep.clone().with_method(method);
            if method == Method::NormalEquations && prep.condition() > unblend::solver::FALLBACK_CONDITION {
                continue;
            }
            let mut ws = prep.workspace();
            let sol = prep.solve(&a, &mut ws).expect("solves");
            let anorm = a.iter().map(|v| v * v).sum::<f64>().sqrt().max(1e-300);
            // Residual e = E·x − a and gradient g = Eᵀe.
            let e: Vec<f64> = (0..p.n)
                .map(|i| (0..=k).map(|j| cols[j * p.n + i] * sol.x[j]).sum::<f64>() - a[i])
                .collect();
            for j in 0..=k {
                let col = &cols[j * p.n..(j + 1) * p.n];
                let cnorm = col.iter().map(|v| v * v).sum::<f64>().sqrt();
                let g: f64 = col.iter().zip(&e).map(|(c, r)| c * r).sum();
                let tol = KKT_TOL * cnorm * anorm;
                if j < k {
                    // Not even -0: a concentration at its bound must print as 0.
                    prop_assert!(
                        sol.x[j] >= 0.0 && !sol.x[j].is_sign_negative(),
                        "{method:?}: x[{j}] = {}",
                        sol.x[j]
                    );
                    if sol.x[j] > 0.0 {
                        prop_assert!(g.abs() <= tol, "{method:?}: passive gradient {g} > {tol}");
                    } else {
                        prop_assert!(g >= -tol, "{method:?}: gradient {g} < 0 at a bound");
                    }
                } else {
                    prop_assert!(g.abs() <= tol, "{method:?}: free gradient {g}");
                }
            }
        }
    }

    #[test]
    fn permuting_components_permutes_the_answer(p in problem(), seed in 0u64..1000) {
        let k = p.bands.len();
        let cols = columns(&p);
        let a = spectrum(&p, &cols, true);
        let mut perm: Vec<usize> = (0..k).collect();
        // A deterministic shuffle from the seed.
        for i in (1..k).rev() {
            let j = ((seed.wrapping_mul(6364136223846793005).wrapping_add(i as u64)) >> 33) as usize % (i + 1);
            perm.swap(i, j);
        }
        let mut pcols = Vec::new();
        for &j in &perm {
            pcols.extend_from_slice(&cols[j * p.n..(j + 1) * p.n]);
        }
        let (Ok(p1), Ok(p2)) = (
            Prepared::new(&with_offset(&cols, p.n), p.n, k + 1, k, &names(k + 1)),
            Prepared::new(&with_offset(&pcols, p.n), p.n, k + 1, k, &names(k + 1)),
        ) else {
            return Ok(());
        };
        let s1 = p1.solve(&a, &mut p1.workspace()).expect("solves");
        let s2 = p2.solve(&a, &mut p2.workspace()).expect("solves");
        let scale = s1.x.iter().fold(0.0f64, |m, v| m.max(v.abs())).max(1e-12);
        let tol = 1e-6 * scale * p1.condition().max(p2.condition());
        for (q, &j) in perm.iter().enumerate() {
            prop_assert!((s2.x[q] - s1.x[j]).abs() <= tol, "component {j}: {} vs {}", s1.x[j], s2.x[q]);
        }
    }
}

fn refs_for(p: &Problem, w: &[f64]) -> ReferenceSet {
    let cols = columns(p);
    ReferenceSet {
        components: (0..p.bands.len())
            .map(|j| {
                let e: Vec<f64> = cols[j * p.n..(j + 1) * p.n]
                    .iter()
                    .map(|v| v * 1e4)
                    .collect();
                Component::from_curve(&format!("c{j}"), w.to_vec(), e, "imported").expect("valid")
            })
            .collect(),
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(150))]

    #[test]
    fn pathlength_scales_concentrations_inversely(p in problem(), l in 0.01..10.0f64) {
        let w: Vec<f64> = (0..p.n).map(|i| 400.0 + i as f64).collect();
        let refs = refs_for(&p, &w);
        let a = spectrum(&p, &columns(&p), true);
        let grid = Grid::new(w).expect("valid");
        let base = FitOptions { baseline: Baseline::Offset, ..FitOptions::default() };
        let Ok(model) = Model::new(&grid, &refs, &base) else { return Ok(()) };
        let mut ws = model.prepared.workspace();
        let (Outcome::Fitted(r1), Outcome::Fitted(r2)) =
            (model.fit_one("s", &a, 1.0, &mut ws), model.fit_one("s", &a, l, &mut ws))
        else {
            return Err(TestCaseError::fail("fit failed"));
        };
        for (c1, c2) in r1.components.iter().zip(&r2.components) {
            let (x1, x2) = (c1.concentration_mol_per_l, c2.concentration_mol_per_l);
            prop_assert!((x2 * l - x1).abs() <= 1e-12 * x1.abs().max(1e-300), "{x1} vs {x2}·{l}");
        }
    }

    #[test]
    fn exact_well_conditioned_mixture_is_recovered(p in problem()) {
        let k = p.bands.len();
        let cols = columns(&p);
        let a = spectrum(&p, &cols, false);
        let Ok(prep) = Prepared::new(&with_offset(&cols, p.n), p.n, k + 1, k, &names(k + 1)) else {
            return Ok(());
        };
        prop_assume!(prep.condition() < 100.0);
        let sol = prep.solve(&a, &mut prep.workspace()).expect("solves");
        let scale = p.conc.iter().fold(0.0f64, |m, v| m.max(*v)).max(1.0);
        for j in 0..k {
            prop_assert!((sol.x[j] - p.conc[j]).abs() <= EXACT_TOL * scale, "x[{j}] {} vs {}", sol.x[j], p.conc[j]);
        }
        prop_assert!((sol.x[k] - p.offset).abs() <= EXACT_TOL * scale.max(p.offset.abs()));
    }
}

/// Results are bit-identical whatever the number of threads.
#[test]
fn results_are_identical_across_thread_counts() {
    let n = 120;
    let p = Problem {
        n,
        bands: vec![(0.2, 0.1, 3.0), (0.5, 0.08, 5.0), (0.8, 0.12, 2.0)],
        conc: vec![0.5, 1.0, 0.0],
        noise: (0..n)
            .map(|i| ((i * 7919) % 101) as f64 * 1e-4 - 5e-3)
            .collect(),
        offset: 0.01,
    };
    let w: Vec<f64> = (0..n).map(|i| 400.0 + i as f64).collect();
    let refs = refs_for(&p, &w);
    let cols = columns(&p);
    let mut values = Vec::new();
    let spectra = 3000;
    for s in 0..spectra {
        let scale = 1e-4 * (1.0 + (s % 17) as f64);
        values.extend(
            spectrum(&p, &cols, true)
                .iter()
                .enumerate()
                .map(|(i, v)| v * scale + p.noise[(i + s) % n] * 1e-5),
        );
    }
    let block = Block {
        grid: Arc::new(Grid::new(w).expect("valid")),
        ids: (0..spectra).map(|s| format!("s{s}")).collect(),
        positions: (0..spectra).collect(),
        absorbance_au: values,
    };
    let model = Model::new(&block.grid, &refs, &FitOptions::default()).expect("model");
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("pool");
        pool.install(|| {
            model
                .fit_block(&block, 1.0)
                .into_iter()
                .map(|o| match o {
                    Outcome::Fitted(r) => format!("{r:?}"),
                    Outcome::Failed(f) => f.error,
                })
                .collect::<Vec<_>>()
        })
    };
    let one = run(1);
    assert_eq!(one, run(2));
    assert_eq!(one, run(3));
}
