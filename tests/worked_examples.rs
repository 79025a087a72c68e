//! Mixture analysis against textbook worked examples, and recovery of
//! synthetic blends with seeded noise against the bound the noise allows.

use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::sync::Arc;
use unblend::fit::{FitOptions, Model, Outcome, SampleResult};
use unblend::preprocess::Baseline;
use unblend::reference::{Component, ReferenceSet};
use unblend::spectrum::Grid;

/// Textbook answers are printed to three significant figures, so they can
/// differ from the exact solution of the printed data by up to ~0.3 %.
const TEXTBOOK_REL_TOL: f64 = 5e-3;

fn two_point(name: &str, w: [f64; 2], e: [f64; 2]) -> Component {
    Component::from_curve(name, w.to_vec(), e.to_vec(), "imported").expect("valid curve")
}

fn fit(refs: &ReferenceSet, wl: &[f64], a: &[f64], options: &FitOptions) -> SampleResult {
    let grid = Grid::new(wl.to_vec()).expect("valid grid");
    let model = Model::new(&grid, refs, options).expect("model builds");
    let mut ws = model.prepared.workspace();
    match model.fit_one("s", a, options.pathlength_cm, &mut ws) {
        Outcome::Fitted(r) => r,
        Outcome::Failed(f) => panic!("fit failed: {}", f.error),
    }
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// Harris, *Quantitative Chemical Analysis*, Fe–transferrin (T) and
/// Fe–desferrioxamine (D): ε(428 nm) 3540 and 2730, ε(470 nm) 4170 and 2290
/// L/(mol·cm); A470 = 0.424, A428 = 0.401 in 1 cm; answer [T] = 7.30e-5 M,
/// [D] = 5.22e-5 M (read via a reproduction of the problem).
#[test]
fn harris_transferrin_desferrioxamine() {
    let refs = ReferenceSet {
        components: vec![
            two_point("transferrin", [428.0, 470.0], [3540.0, 4170.0]),
            two_point("desferrioxamine", [428.0, 470.0], [2730.0, 2290.0]),
        ],
    };
    let options = FitOptions {
        baseline: Baseline::None,
        ..FitOptions::default()
    };
    let r = fit(&refs, &[428.0, 470.0], &[0.401, 0.424], &options);
    assert!(
        rel(r.components[0].concentration_mol_per_l, 7.30e-5) < TEXTBOOK_REL_TOL,
        "{r:?}"
    );
    assert!(
        rel(r.components[1].concentration_mol_per_l, 5.22e-5) < TEXTBOOK_REL_TOL,
        "{r:?}"
    );
    // Two equations, two unknowns: exact, and no noise estimate.
    assert!(r.components[0].std_error_mol_per_l.is_none());
    assert!(r.flags.iter().any(|f| f == "no-error-estimate"));
}

/// Skoog, *Fundamentals of Analytical Chemistry*, Co and Ni with
/// 2,3-quinoxalinedithiol: ε(510) Co 36400, Ni 5520; ε(656) Co 1240,
/// Ni 17500; A510 = 0.446, A656 = 0.326; answer Co 9.53e-6 M, Ni 1.80e-5 M
/// (values recalled from memory; the printed data reproduce the answer).
#[test]
fn skoog_cobalt_nickel() {
    let refs = ReferenceSet {
        components: vec![
            two_point("cobalt", [510.0, 656.0], [36400.0, 1240.0]),
            two_point("nickel", [510.0, 656.0], [5520.0, 17500.0]),
        ],
    };
    let options = FitOptions {
        baseline: Baseline::None,
        ..FitOptions::default()
    };
    let r = fit(&refs, &[510.0, 656.0], &[0.446, 0.326], &options);
    assert!(
        rel(r.components[0].concentration_mol_per_l, 9.53e-6) < TEXTBOOK_REL_TOL,
        "{r:?}"
    );
    assert!(
        rel(r.components[1].concentration_mol_per_l, 1.80e-5) < TEXTBOOK_REL_TOL,
        "{r:?}"
    );
}

/// A Gaussian absorption band (synthetic reference, invented for the test).
fn band(w: &[f64], centre: f64, sigma: f64, peak: f64) -> Vec<f64> {
    w.iter()
        .map(|x| peak * (-0.5 * ((x - centre) / sigma).powi(2)).exp())
        .collect()
}

fn synthetic_refs(w: &[f64], bands: &[(f64, f64, f64)]) -> ReferenceSet {
    ReferenceSet {
        components: bands
            .iter()
            .enumerate()
            .map(|(i, &(c, s, p))| {
                let mut e = band(w, c, s, p);
                // A weak UV tail so every reference absorbs everywhere a little.
                for (x, v) in w.iter().zip(e.iter_mut()) {
                    *v += 0.02 * p * (-(x - 350.0) / 80.0).exp();
                }
                Component::from_curve(&format!("dye{i}"), w.to_vec(), e, "imported")
                    .expect("valid curve")
            })
            .collect(),
    }
}

/// Build noisy mixtures from known concentrations, fit them, and check the
/// errors against the standard errors the fit reports: the z-scores
/// (ĉ − c)/se must look like N(0, 1) — mean near 0, SD near 1 — and none may
/// exceed 5 (probability ~6e-7 each for Gaussian noise).
fn recovery(bands: &[(f64, f64, f64)], l_cm: f64, offset_au: f64, baseline: Baseline, seed: u64) {
    let w: Vec<f64> = (350..=750).map(f64::from).collect();
    let refs = synthetic_refs(&w, bands);
    let k = bands.len();
    let noise_au = 0.002;
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let noise = Normal::new(0.0, noise_au).expect("valid");
    let conc = rand_distr::Uniform::new(2e-6, 2e-5).expect("valid");
    let options = FitOptions {
        baseline,
        pathlength_cm: l_cm,
        ..FitOptions::default()
    };
    let grid = Arc::new(Grid::new(w.clone()).expect("valid"));
    let model = Model::new(&grid, &refs, &options).expect("model builds");
    let mut ws = model.prepared.workspace();
    let mut z = Vec::new();
    let trials = 300;
    for t in 0..trials {
        let c: Vec<f64> = (0..k)
            .map(|i| {
                if (t + i) % 7 == 0 {
                    0.0
                } else {
                    conc.sample(&mut rng)
                }
            })
            .collect();
        let a: Vec<f64> = (0..w.len())
            .map(|p| {
                let clean: f64 = (0..k)
                    .map(|i| l_cm * refs.components[i].epsilon_l_per_mol_cm[p] * c[i])
                    .sum();
                let slope = if baseline == Baseline::Linear {
                    2e-5 * (w[p] - 550.0)
                } else {
                    0.0
                };
                clean + offset_au + slope + noise.sample(&mut rng)
            })
            .collect();
        let r = match model.fit_one("s", &a, l_cm, &mut ws) {
            Outcome::Fitted(r) => r,
            Outcome::Failed(f) => panic!("{}", f.error),
        };
        // Trials with an absent component: the constraint holds it at or
        // near zero, which biases its neighbours slightly (constrained
        // estimation), so only trials with every component present enter
        // the z-score statistics.
        let all_present = c.iter().all(|v| *v > 0.0);
        for i in 0..k {
            let got = &r.components[i];
            assert!(got.concentration_mol_per_l >= 0.0);
            let se = got.std_error_mol_per_l.expect("degrees of freedom remain");
            let zi = (got.concentration_mol_per_l - c[i]) / se;
            assert!(zi.abs() < 5.0, "trial {t}, component {i}: z = {zi}");
            if all_present {
                z.push(zi);
            }
        }
        if baseline != Baseline::None {
            let off = r.baseline.offset_au.expect("offset fitted");
            assert!(
                (off - offset_au).abs() < 5.0 * noise_au,
                "offset {off} vs {offset_au}"
            );
        }
        assert!(
            (r.residual_rms - noise_au).abs() < 0.2 * noise_au,
            "residual {} vs noise {noise_au}",
            r.residual_rms
        );
    }
    let n = z.len() as f64;
    let mean = z.iter().sum::<f64>() / n;
    let sd = (z.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    let worst = z.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    // With several hundred z-scores, the SD of N(0,1) samples is within ±10 % with
    // overwhelming probability; the mean within ±0.15.
    assert!((sd - 1.0).abs() < 0.1, "z-score SD {sd}");
    assert!(mean.abs() < 0.15, "z-score mean {mean}");
    assert!(worst < 5.0, "largest |z| {worst}");
}

#[test]
fn three_component_blend_is_recovered_within_its_standard_errors() {
    recovery(
        &[
            (430.0, 30.0, 28000.0),
            (520.0, 25.0, 45000.0),
            (630.0, 28.0, 62000.0),
        ],
        1.0,
        0.0,
        Baseline::Offset,
        1,
    );
}

#[test]
fn five_component_blend_is_recovered_within_its_standard_errors() {
    recovery(
        &[
            (400.0, 25.0, 20000.0),
            (470.0, 30.0, 30000.0),
            (540.0, 25.0, 45000.0),
            (610.0, 30.0, 50000.0),
            (680.0, 25.0, 35000.0),
        ],
        1.0,
        0.0,
        Baseline::Offset,
        2,
    );
}

#[test]
fn short_pathlength_and_baseline_offset_are_handled() {
    // A 0.2 cm well with a +0.03 AU offset (well mismatch).
    recovery(
        &[
            (430.0, 30.0, 28000.0),
            (520.0, 25.0, 45000.0),
            (630.0, 28.0, 62000.0),
        ],
        0.2,
        0.03,
        Baseline::Offset,
        3,
    );
}

#[test]
fn long_pathlength_with_sloping_baseline() {
    recovery(
        &[
            (430.0, 30.0, 28000.0),
            (520.0, 25.0, 45000.0),
            (630.0, 28.0, 62000.0),
        ],
        5.0,
        -0.01,
        Baseline::Linear,
        4,
    );
}

#[test]
fn pathlength_scales_concentration_inversely() {
    let w: Vec<f64> = (400..=700).step_by(2).map(f64::from).collect();
    let refs = synthetic_refs(&w, &[(450.0, 30.0, 30000.0), (600.0, 30.0, 50000.0)]);
    let a: Vec<f64> = (0..w.len())
        .map(|p| {
            refs.components[0].epsilon_l_per_mol_cm[p] * 1e-5
                + refs.components[1].epsilon_l_per_mol_cm[p] * 2e-5
        })
        .collect();
    let base = FitOptions {
        baseline: Baseline::None,
        ..FitOptions::default()
    };
    let r1 = fit(&refs, &w, &a, &base);
    let r2 = fit(
        &refs,
        &w,
        &a,
        &FitOptions {
            pathlength_cm: 0.5,
            ..base
        },
    );
    for i in 0..2 {
        let (c1, c2) = (
            r1.components[i].concentration_mol_per_l,
            r2.components[i].concentration_mol_per_l,
        );
        // Exact data, well-conditioned: agreement to near machine precision.
        assert!(rel(c2, 2.0 * c1) < 1e-12, "{c1} {c2}");
    }
    assert!(rel(r1.components[0].concentration_mol_per_l, 1e-5) < 1e-10);
    assert!(rel(r1.components[1].concentration_mol_per_l, 2e-5) < 1e-10);
}

/// Two bands 0.005 nm apart: column-scaled condition number about 2e4 (> 1e4),
/// so the normal equations are not trusted and the Lawson–Hanson path
/// solves, with a warning; exact data are still recovered.
#[test]
fn poorly_conditioned_set_falls_back_to_lawson_hanson() {
    let w: Vec<f64> = (400..=700).map(f64::from).collect();
    let refs = ReferenceSet {
        components: vec![
            Component::from_curve("a", w.clone(), band(&w, 550.0, 40.0, 30000.0), "imported")
                .expect("valid"),
            Component::from_curve("b", w.clone(), band(&w, 550.005, 40.0, 30000.0), "imported")
                .expect("valid"),
            Component::from_curve("c", w.clone(), band(&w, 450.0, 30.0, 20000.0), "imported")
                .expect("valid"),
        ],
    };
    let options = FitOptions {
        baseline: Baseline::None,
        ..FitOptions::default()
    };
    let grid = Grid::new(w.clone()).expect("valid");
    let model = Model::new(&grid, &refs, &options).expect("model builds");
    assert_eq!(
        model.prepared.method(),
        unblend::solver::Method::LawsonHanson
    );
    assert!(model.prepared.condition() > unblend::solver::FALLBACK_CONDITION);
    assert!(
        model
            .method_warning()
            .expect("a warning")
            .contains("poorly conditioned")
    );
    let a: Vec<f64> = (0..w.len())
        .map(|p| {
            refs.components[0].epsilon_l_per_mol_cm[p] * 4e-6
                + refs.components[1].epsilon_l_per_mol_cm[p] * 6e-6
                + refs.components[2].epsilon_l_per_mol_cm[p] * 1e-5
        })
        .collect();
    let mut ws = model.prepared.workspace();
    let Outcome::Fitted(r) = model.fit_one("s", &a, 1.0, &mut ws) else {
        panic!("fit failed")
    };
    // The well-separated component is exact; the collinear pair's sum is
    // (their individual split is what the conditioning makes uncertain).
    assert!(rel(r.components[2].concentration_mol_per_l, 1e-5) < 1e-8);
    let pair = r.components[0].concentration_mol_per_l + r.components[1].concentration_mol_per_l;
    assert!(rel(pair, 1e-5) < 1e-6, "{pair}");
    assert!(r.solver == "lawson-hanson");
}

#[test]
fn identical_references_are_refused_naming_the_pair() {
    let w: Vec<f64> = (400..=700).map(f64::from).collect();
    let e = band(&w, 550.0, 40.0, 30000.0);
    let refs = ReferenceSet {
        components: vec![
            Component::from_curve("twin-a", w.clone(), e.clone(), "imported").expect("valid"),
            Component::from_curve("twin-b", w.clone(), e, "imported").expect("valid"),
        ],
    };
    let grid = Grid::new(w).expect("valid");
    let err = Model::new(&grid, &refs, &FitOptions::default())
        .err()
        .expect("refused");
    let msg = err.to_string();
    assert!(
        msg.contains("cannot tell 'twin-a' and 'twin-b' apart"),
        "{msg}"
    );
}
