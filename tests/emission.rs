//! Emission fits on simulated data whose truth is known: three overlapping
//! invented fluorophores, mixtures from A_ex = 0.001 to 0.3 at the
//! excitation, observed emission attenuated by the inner filter as a direct
//! numerical integration of Beer–Lambert absorption along both light paths
//! over a finite observed window (0.2 cm, centred in a 1 cm cuvette),
//! computed here independently of the library's closed form. The fits
//! correct with the published centred-cuvette form (Lakowicz, *Principles
//! of Fluorescence Spectroscopy*, 3rd ed., eq. 2.7), whose difference from
//! the finite window is second order (< 0.1 % here).

use rand::SeedableRng;
use rand::rngs::StdRng;
use rand_distr::{Distribution, Normal};
use std::sync::Arc;
use unblend::diagnostics;
use unblend::emission::fit::{AbsorbanceSource, EmissionOptions, MeasuredAbsorbance};
use unblend::emission::{
    Cuvette, EmissionOutcome, EmissionSample, FLAG_INNER_FILTER_HIGH, Geometry, fit_emission,
};
use unblend::input::fields::Delimiter;
use unblend::input::spectra::{Block, Layout, SpectraFile};
use unblend::reference::{Component, EmissionCurve, ReferenceSet};
use unblend::spectrum::Grid;

/// The target: concentrations within 2 % (median) with the correction.
const MEDIAN_TOLERANCE: f64 = 0.02;
/// Emission noise, intensity units (the weakest sample peaks near 300).
const NOISE: f64 = 0.5;
/// Absorbance noise of the measured spectra, AU.
const NOISE_AU: f64 = 2e-4;
const EXCITATION_NM: f64 = 350.0;

struct Dye {
    name: &'static str,
    abs_centre_nm: f64,
    abs_sigma_nm: f64,
    epsilon_max: f64,
    em_centre_nm: f64,
    em_sigma_nm: f64,
    intensity_max: f64,
}

/// Invented fluorophores, overlapping in absorption and emission.
const DYES: [Dye; 3] = [
    Dye {
        name: "aster",
        abs_centre_nm: 350.0,
        abs_sigma_nm: 25.0,
        epsilon_max: 30_000.0,
        em_centre_nm: 450.0,
        em_sigma_nm: 25.0,
        intensity_max: 1.0e10,
    },
    Dye {
        name: "briar",
        abs_centre_nm: 370.0,
        abs_sigma_nm: 30.0,
        epsilon_max: 20_000.0,
        em_centre_nm: 480.0,
        em_sigma_nm: 30.0,
        intensity_max: 8.0e9,
    },
    Dye {
        name: "heath",
        abs_centre_nm: 395.0,
        abs_sigma_nm: 30.0,
        epsilon_max: 15_000.0,
        em_centre_nm: 510.0,
        em_sigma_nm: 30.0,
        intensity_max: 6.0e9,
    },
];

fn gauss(x: f64, centre: f64, sigma: f64) -> f64 {
    (-0.5 * ((x - centre) / sigma).powi(2)).exp()
}

fn abs_grid() -> Vec<f64> {
    (300..=650).map(f64::from).collect()
}

fn em_grid() -> Vec<f64> {
    (370..=620).map(f64::from).collect()
}

impl Dye {
    fn epsilon(&self, w: f64) -> f64 {
        self.epsilon_max * gauss(w, self.abs_centre_nm, self.abs_sigma_nm)
    }
    /// Emission per mol/L at an excitation: proportional to ε(λex).
    fn emission(&self, w: f64, ex: f64) -> f64 {
        let scale = self.epsilon(ex) / self.epsilon(EXCITATION_NM);
        self.intensity_max * scale * gauss(w, self.em_centre_nm, self.em_sigma_nm)
    }
    fn component(&self, excitations: &[f64]) -> Component {
        let w = abs_grid();
        let eps = w.iter().map(|&x| self.epsilon(x)).collect();
        let mut c = Component::from_curve(self.name, w, eps, "test").unwrap();
        for &ex in excitations {
            let em: Vec<f64> = em_grid().iter().map(|&x| self.emission(x, ex)).collect();
            c.set_emission(EmissionCurve::new(ex, em_grid(), em).unwrap())
                .unwrap();
        }
        c
    }
}

fn references(excitations: &[f64]) -> ReferenceSet {
    ReferenceSet {
        components: DYES.iter().map(|d| d.component(excitations)).collect(),
    }
}

/// 1 / (mean attenuation over [0.4, 0.6] cm along both beams), by the
/// midpoint rule: the direct Beer–Lambert integration.
fn true_factor(a_ex: f64, a_em: f64) -> f64 {
    let n = 400;
    let h = 0.2 / n as f64;
    let mean = |a: f64| {
        (0..n)
            .map(|i| 10f64.powf(-a * (0.4 + (i as f64 + 0.5) * h)))
            .sum::<f64>()
            / n as f64
    };
    1.0 / (mean(a_ex) * mean(a_em))
}

struct Study {
    emission: SpectraFile,
    absorbance: SpectraFile,
    truth: Vec<[f64; 3]>,
    a_ex: Vec<f64>,
}

fn file(ids: Vec<String>, w: Vec<f64>, rows: Vec<f64>) -> SpectraFile {
    let n = ids.len();
    SpectraFile {
        layout: Layout::Wide,
        delimiter: Delimiter::Comma,
        blocks: vec![Block {
            grid: Arc::new(Grid::new(w).unwrap()),
            ids,
            positions: (0..n).collect(),
            absorbance_au: rows,
        }],
        failures: Vec::new(),
        n_samples: n,
        sections: Vec::new(),
        warnings: Vec::new(),
    }
}

/// Mixtures at the given total A_ex, three compositions each; `raman`
/// adds a water Raman band of that height (Gaussian in wavenumber at
/// 3,400 cm⁻¹ shift, 400 cm⁻¹ FWHM).
fn study(levels_au: &[f64], excitation_nm: f64, raman: f64, seed: u64) -> Study {
    let mut rng = StdRng::seed_from_u64(seed);
    let em_noise = Normal::new(0.0, NOISE).unwrap();
    let abs_noise = Normal::new(0.0, NOISE_AU).unwrap();
    let raman_centre = 1e7 / excitation_nm - 3400.0;
    let raman_sigma = 400.0 / (8.0 * 2f64.ln()).sqrt();
    let (mut ids, mut em_rows, mut abs_rows, mut truth, mut a_ex) =
        (vec![], vec![], vec![], vec![], vec![]);
    for (k, &level) in levels_au.iter().enumerate() {
        for (m, mix) in [[1.0, 1.0, 1.0], [2.0, 1.0, 0.5], [0.5, 1.0, 2.0]]
            .iter()
            .enumerate()
        {
            let unit: f64 = (0..3)
                .map(|i| mix[i] * DYES[i].epsilon(excitation_nm))
                .sum();
            let c: [f64; 3] = std::array::from_fn(|i| mix[i] * level / unit);
            let absorb = |w: f64| (0..3).map(|i| DYES[i].epsilon(w) * c[i]).sum::<f64>();
            for &w in &em_grid() {
                let f: f64 = (0..3)
                    .map(|i| DYES[i].emission(w, excitation_nm) * c[i])
                    .sum();
                let r = raman * gauss(1e7 / w, raman_centre, raman_sigma);
                // The solvent's Raman scatter comes from the same volume:
                // the inner filter attenuates it like the emission.
                let attenuated = (f + r) / true_factor(absorb(excitation_nm), absorb(w));
                em_rows.push(attenuated + 5.0 + em_noise.sample(&mut rng));
            }
            for &w in &abs_grid() {
                abs_rows.push(absorb(w) + abs_noise.sample(&mut rng));
            }
            ids.push(format!("mix-{k}-{m}"));
            truth.push(c);
            a_ex.push(level);
        }
    }
    Study {
        emission: file(ids.clone(), em_grid(), em_rows),
        absorbance: file(ids, abs_grid(), abs_rows),
        truth,
        a_ex,
    }
}

fn fitted(o: &EmissionOutcome) -> &EmissionSample {
    match o {
        EmissionOutcome::Fitted(s) => s,
        EmissionOutcome::Failed(f) => panic!("{}: {}", f.sample, f.error),
    }
}

fn relative_errors(truth: &[[f64; 3]], samples: &[EmissionOutcome]) -> Vec<f64> {
    let mut out = Vec::new();
    for (o, truth) in samples.iter().zip(truth) {
        for (c, t) in fitted(o).result.components.iter().zip(truth) {
            out.push((c.concentration_mol_per_l - t) / t);
        }
    }
    out
}

fn median_abs(v: &[f64]) -> f64 {
    let mut a: Vec<f64> = v.iter().map(|x| x.abs()).collect();
    a.sort_by(f64::total_cmp);
    a[a.len() / 2]
}

const LEVELS: [f64; 10] = [0.001, 0.003, 0.01, 0.03, 0.05, 0.1, 0.15, 0.2, 0.25, 0.3];

fn run(
    study: &Study,
    geometry: Geometry,
    source: AbsorbanceSource,
    refs: &ReferenceSet,
) -> Vec<EmissionOutcome> {
    let opts = EmissionOptions::new(EXCITATION_NM, geometry, source).unwrap();
    fit_emission(
        &study.emission,
        refs,
        &opts,
        &diagnostics::Options::default(),
    )
    .unwrap()
    .outcomes
}

#[test]
fn measured_absorbance_correction_recovers_every_level_within_two_percent() {
    let s = study(&LEVELS, EXCITATION_NM, 0.0, 17);
    let refs = references(&[EXCITATION_NM]);
    let measured = MeasuredAbsorbance::from_file(&s.absorbance, 1.0).unwrap();
    let g = Geometry::Cuvette(Cuvette::standard());
    let out = run(&s, g, AbsorbanceSource::Measured(measured), &refs);
    for (k, level) in LEVELS.iter().enumerate() {
        let per_level = relative_errors(&s.truth[k * 3..k * 3 + 3], &out[k * 3..k * 3 + 3]);
        let m = median_abs(&per_level);
        assert!(m < MEDIAN_TOLERANCE, "A_ex {level}: median |error| {m}");
    }
    // The top level sits on the limit; the measured noise may tip it over.
    for (o, a) in out.iter().zip(&s.a_ex).filter(|(_, a)| **a < 0.29) {
        let flagged = fitted(o)
            .result
            .flags
            .iter()
            .any(|f| f == FLAG_INNER_FILTER_HIGH);
        assert!(!flagged, "A_ex {a} ≤ 0.3 is within the corrected limit");
    }
}

#[test]
fn modelled_absorbance_correction_agrees_within_two_percent() {
    let s = study(&LEVELS, EXCITATION_NM, 0.0, 18);
    let refs = references(&[EXCITATION_NM]);
    let out = run(
        &s,
        Geometry::Cuvette(Cuvette::standard()),
        AbsorbanceSource::Model,
        &refs,
    );
    let errors = relative_errors(&s.truth, &out);
    assert!(
        median_abs(&errors) < MEDIAN_TOLERANCE,
        "{}",
        median_abs(&errors)
    );
    let top = fitted(&out[out.len() - 1]).inner_filter.clone().unwrap();
    assert!(top.rounds > 1 && top.rounds < 50, "{top:?}");
    assert!((top.excitation_absorbance_au - 0.3).abs() < 0.3 * MEDIAN_TOLERANCE);
}

#[test]
fn without_correction_the_bias_at_a_ex_0_2_shows_and_the_flag_is_raised() {
    let s = study(&[0.2], EXCITATION_NM, 0.0, 19);
    let refs = references(&[EXCITATION_NM]);
    let measured = MeasuredAbsorbance::from_file(&s.absorbance, 1.0).unwrap();
    let out = run(
        &s,
        Geometry::None,
        AbsorbanceSource::Measured(measured),
        &refs,
    );
    let errors = relative_errors(&s.truth, &out);
    let mean = errors.iter().sum::<f64>() / errors.len() as f64;
    // 10^(−(0.2 + A_em)/2) ≤ 0.79: about 20 % low or more (here about 22 %).
    eprintln!("uncorrected bias at A_ex = 0.2: mean {:.1} %", 100.0 * mean);
    assert!(mean < -0.15, "{mean}");
    for o in &out {
        let r = &fitted(o).result;
        assert!(
            r.flags.iter().any(|f| f == FLAG_INNER_FILTER_HIGH),
            "{:?}",
            r.flags
        );
    }
}

#[test]
fn raman_band_is_found_at_the_right_shift_for_two_excitations() {
    for ex in [350.0, 370.0] {
        let s = study(&[0.01, 0.05], ex, 200.0, 20);
        let refs = references(&[350.0, 370.0]);
        let measured = MeasuredAbsorbance::from_file(&s.absorbance, 1.0).unwrap();
        let opts = EmissionOptions::new(
            ex,
            Geometry::Cuvette(Cuvette::standard()),
            AbsorbanceSource::Measured(measured),
        )
        .unwrap()
        .with_raman(true);
        let out = fit_emission(&s.emission, &refs, &opts, &diagnostics::Options::default())
            .unwrap()
            .outcomes;
        // 350 nm → 397.3 nm; 370 nm → 424.5 nm (1/(1/λex − 3,400 cm⁻¹), by hand).
        let want = 1e7 / (1e7 / ex - 3400.0);
        for o in &out {
            let raman = fitted(o).raman.clone().unwrap();
            assert!((raman.band_nm - want).abs() < 1e-9);
            assert!(
                (raman.height_intensity / 200.0 - 1.0).abs() < 0.05,
                "{ex}: {raman:?}"
            );
        }
        let errors = relative_errors(&s.truth, &out);
        assert!(
            median_abs(&errors) < MEDIAN_TOLERANCE,
            "{ex}: {}",
            median_abs(&errors)
        );
    }
}

#[test]
fn excitation_without_references_is_an_error_naming_the_component() {
    let s = study(&[0.01], EXCITATION_NM, 0.0, 21);
    let refs = references(&[EXCITATION_NM]);
    let opts = EmissionOptions::new(280.0, Geometry::None, AbsorbanceSource::None).unwrap();
    let e = fit_emission(&s.emission, &refs, &opts, &diagnostics::Options::default()).unwrap_err();
    assert!(
        e.to_string()
            .contains("'aster' has no emission curve at excitation 280 nm (it has 350 nm)"),
        "{e}"
    );
}

#[test]
fn unmatched_absorbance_sample_fails_by_name_and_the_others_are_fitted() {
    let s = study(&[0.01], EXCITATION_NM, 0.0, 22);
    let mut absorbance = s.absorbance;
    absorbance.blocks[0].ids[1] = "someone-else".into();
    let s = Study {
        absorbance: file(vec![], abs_grid(), vec![]),
        ..s
    };
    let measured = MeasuredAbsorbance::from_file(&absorbance, 1.0).unwrap();
    let refs = references(&[EXCITATION_NM]);
    let out = run(
        &s,
        Geometry::Cuvette(Cuvette::standard()),
        AbsorbanceSource::Measured(measured),
        &refs,
    );
    match &out[1] {
        EmissionOutcome::Failed(f) => assert!(
            f.error.contains("no absorbance spectrum named 'mix-0-1'"),
            "{}",
            f.error
        ),
        EmissionOutcome::Fitted(_) => panic!("mix-0-1 has no absorbance"),
    }
    assert!(
        matches!(out[0], EmissionOutcome::Fitted(_))
            && matches!(out[2], EmissionOutcome::Fitted(_))
    );
}

/// Quinine sulfate in 0.05 M H₂SO₄, the usual fluorescence standard, for
/// the shape of the test only (common practice, values recalled from
/// memory, not certified): excitation 350 nm, emission maximum near 450 nm,
/// a broad band (about 100 nm wide at half height), ε(350 nm) about
/// 5,700 L·mol⁻¹·cm⁻¹. A calibration series up to A_ex ≈ 0.29 bends by the
/// inner filter; corrected, it is linear again.
#[test]
fn quinine_like_calibration_series_is_straightened_by_the_correction() {
    let eps = |w: f64| 5700.0 * gauss(w, 347.5, 20.0);
    let shape = |w: f64| 5.0e9 * gauss(w, 450.0, 42.0);
    let mut c = Component::from_curve(
        "quinine-like",
        abs_grid(),
        abs_grid().iter().map(|&w| eps(w)).collect(),
        "test",
    )
    .unwrap();
    c.set_emission(
        EmissionCurve::new(
            350.0,
            em_grid(),
            em_grid().iter().map(|&w| shape(w)).collect(),
        )
        .unwrap(),
    )
    .unwrap();
    let refs = ReferenceSet {
        components: vec![c],
    };
    let concs = [1e-6, 5e-6, 1e-5, 2e-5, 3e-5, 5e-5];
    let (mut ids, mut em, mut ab) = (vec![], vec![], vec![]);
    for (i, &conc) in concs.iter().enumerate() {
        ids.push(format!("qs-{i}"));
        for &w in &em_grid() {
            em.push(shape(w) * conc / true_factor(eps(350.0) * conc, eps(w) * conc));
        }
        ab.extend(abs_grid().iter().map(|&w| eps(w) * conc));
    }
    let emission = file(ids.clone(), em_grid(), em);
    let measured = MeasuredAbsorbance::from_file(&file(ids, abs_grid(), ab), 1.0).unwrap();
    let opts = EmissionOptions::new(
        350.0,
        Geometry::Cuvette(Cuvette::standard()),
        AbsorbanceSource::Measured(measured),
    )
    .unwrap();
    let out = fit_emission(&emission, &refs, &opts, &diagnostics::Options::off()).unwrap();
    for (o, &conc) in out.outcomes.iter().zip(&concs) {
        let got = fitted(o).result.components[0].concentration_mol_per_l;
        assert!((got / conc - 1.0).abs() < 0.002, "{conc}: {got}");
    }
}

/// An emission reference from a quinine-like calibration series (shape as
/// above): two blanks and eight levels up to A_ex ≈ 0.29; the top levels,
/// bent by the inner filter, are left out and named, and the curve from the
/// dilute levels matches the truth.
#[test]
fn emission_reference_from_calibration_leaves_out_inner_filtered_standards() {
    use unblend::calibrate::{CalibrationOptions, Provenance};
    use unblend::emission::calibrate::emission_curve;
    use unblend::input::concentrations::{Role, Standard};
    let eps = |w: f64| 5700.0 * gauss(w, 347.5, 20.0);
    let shape = |w: f64| 5.0e9 * gauss(w, 450.0, 42.0);
    let concs = [0.0, 0.0, 1e-6, 2e-6, 4e-6, 6e-6, 8e-6, 1e-5, 3e-5, 5e-5];
    let mut rng = StdRng::seed_from_u64(23);
    let noise = Normal::new(0.0, 20.0).unwrap();
    let (mut ids, mut rows, mut standards) = (vec![], vec![], vec![]);
    for (i, &c) in concs.iter().enumerate() {
        let id = format!("std-{i}");
        for &w in &em_grid() {
            let f = shape(w) * c / true_factor(eps(350.0) * c, eps(w) * c);
            rows.push(f + 30.0 + noise.sample(&mut rng));
        }
        standards.push(Standard {
            sample: id.clone(),
            line: i + 2,
            concentration_mol_per_l: c,
            role: if c > 0.0 { Role::Standard } else { Role::Blank },
        });
        ids.push(id);
    }
    let spectra = file(ids, em_grid(), rows);
    let (curve, result) = emission_curve(
        &spectra,
        &standards,
        &CalibrationOptions::default(),
        &Provenance::default(),
        350.0,
    )
    .unwrap();
    let mut left_out: Vec<&str> = result
        .calibration
        .excluded_standards
        .iter()
        .map(|e| e.sample.as_str())
        .collect();
    left_out.sort();
    // A_ex = 0.17 and 0.29 lose 18 % and 28 % of their emission.
    assert_eq!(left_out, ["std-8", "std-9"]);
    let at450 = curve
        .grid
        .wavelengths_nm()
        .iter()
        .position(|&w| (w - 450.0).abs() < 1e-9)
        .unwrap();
    // The kept levels (A_ex ≤ 0.057) still lose up to 6 % at the top, within
    // the linearity tolerance: the slope comes out about 7 % low, as any
    // calibration of uncorrected emission does (so keep standards dilute).
    let ratio = curve.intensity_per_mol_per_l[at450] / shape(450.0);
    assert!(ratio > 0.90 && ratio < 1.0, "{ratio}");
    assert!((curve.excitation_nm - 350.0).abs() < 1e-12);
}
