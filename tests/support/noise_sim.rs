//! Invented blends under instrument-like noise, shared by the seeded study
//! in `tests/noise_study.rs` and the full study in `examples/noise-study.rs`.
//!
//! Three house references (Gaussian-band dyes on 350–750 nm), each present
//! with probability 0.75 at a peak of 0.05–0.8 AU, an offset of ±0.003 AU;
//! optionally an unknown band (peak and width drawn at random, position at
//! random in 380–720 nm) and a single-reading spike. Noise types:
//! white N(0, σ); a moving average of L readings of white noise (scaled so
//! each reading keeps σ: what a smoothing firmware does); constant in
//! transmittance, σ_A = σ·10^A (0.434·σ_T/T with σ_T = σ/0.434).

#![allow(dead_code)]

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Normal};
use std::sync::Arc;
use unblend::fit::{FitReport, Outcome, SampleResult};
use unblend::input::fields::Delimiter;
use unblend::input::spectra::{Block, Layout, SpectraFile};
use unblend::reference::{Component, Conditions, ReferenceSet, Source};
use unblend::spectrum::Grid;

/// Noise of one reading, AU (the 2 mAU).
pub const NOISE_AU: f64 = 0.002;

/// How the readings' noise is made.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Noise {
    /// White, constant in absorbance.
    White,
    /// A moving average of this many readings (each reading keeps σ).
    MovingAverage(usize),
    /// Constant in transmittance: σ_A = σ·10^A.
    Photometric,
}

impl Noise {
    /// Label for tables.
    pub fn label(self) -> String {
        match self {
            Noise::White => "white".into(),
            Noise::MovingAverage(l) => format!("moving average of {l}"),
            Noise::Photometric => "constant transmittance".into(),
        }
    }
}

/// An extra absorber: one Gaussian band.
#[derive(Debug, Clone, Copy)]
pub struct Unknown {
    /// Peak range, AU.
    pub peak_au: (f64, f64),
    /// Full width at half maximum range, nm.
    pub fwhm_nm: (f64, f64),
}

/// What to simulate.
#[derive(Debug, Clone, Copy)]
pub struct Scenario {
    pub noise: Noise,
    pub step_nm: f64,
    pub n_samples: usize,
    pub seed: u64,
    pub unknown: Option<Unknown>,
    /// A single-reading spike of this size, AU, at a random reading.
    pub spike_au: Option<f64>,
}

/// The simulated file and its truth (mol/L per reference).
pub struct Simulated {
    pub file: SpectraFile,
    pub truth: Vec<[f64; 3]>,
    pub refs: ReferenceSet,
}

fn wavelengths(step_nm: f64) -> Vec<f64> {
    let n = (400.0 / step_nm).round() as usize;
    (0..=n).map(|i| 350.0 + step_nm * i as f64).collect()
}

/// A Gaussian band: peak, centre (nm), standard deviation (nm).
type Band = (f64, f64, f64);

fn gauss(w: &[f64], spec: &[Band]) -> Vec<f64> {
    w.iter()
        .map(|x| {
            spec.iter()
                .map(|(p, c, sd)| p * (-0.5 * ((x - c) / sd).powi(2)).exp())
                .sum()
        })
        .collect()
}

fn component(name: &str, w: &[f64], eps: Vec<f64>) -> Component {
    Component {
        name: name.into(),
        molar_mass_g_per_mol: Some(500.0),
        note: None,
        created: String::new(),
        conditions: Conditions::default(),
        source: Source {
            kind: "imported".into(),
            file: None,
            sha256: None,
        },
        grid: Grid::new(w.to_vec()).unwrap(),
        epsilon_l_per_mol_cm: eps,
        epsilon_std_error_l_per_mol_cm: None,
        extra: toml::Table::new(),
    }
}

/// The three house references on a 1 nm grid (ε in L/(mol·cm)).
pub fn references() -> ReferenceSet {
    let w = wavelengths(1.0);
    let spec: [(&str, &[Band]); 3] = [
        ("teal", &[(50_000.0, 620.0, 30.0), (15_000.0, 570.0, 25.0)]),
        ("amber", &[(30_000.0, 430.0, 35.0), (15_000.0, 360.0, 20.0)]),
        ("rose", &[(40_000.0, 520.0, 25.0), (16_000.0, 480.0, 20.0)]),
    ];
    ReferenceSet {
        components: spec
            .iter()
            .map(|(n, s)| component(n, &w, gauss(&w, s)))
            .collect(),
    }
}

/// Noise for one spectrum of `len` readings with true absorbance `a_true`.
fn noise(kind: Noise, a_true: &[f64], rng: &mut StdRng) -> Vec<f64> {
    let z = Normal::new(0.0, NOISE_AU).unwrap();
    match kind {
        Noise::White => a_true.iter().map(|_| z.sample(rng)).collect(),
        Noise::MovingAverage(l) => {
            let raw: Vec<f64> = (0..a_true.len() + l).map(|_| z.sample(rng)).collect();
            let k = 1.0 / (l as f64).sqrt();
            raw.windows(l)
                .take(a_true.len())
                .map(|w| k * w.iter().sum::<f64>())
                .collect()
        }
        Noise::Photometric => a_true
            .iter()
            .map(|a| z.sample(rng) * 10f64.powf(*a))
            .collect(),
    }
}

/// Simulate a scenario.
pub fn simulate(s: &Scenario) -> Simulated {
    let mut rng = StdRng::seed_from_u64(s.seed);
    let refs = references();
    let w = wavelengths(s.step_nm);
    let eps: Vec<Vec<f64>> = refs
        .components
        .iter()
        .map(|c| {
            w.iter()
                .map(|x| {
                    c.epsilon_at(*x)
                        .expect("the study grid lies inside the references")
                })
                .collect()
        })
        .collect();
    let mut rows = Vec::with_capacity(s.n_samples * w.len());
    let mut truth = Vec::with_capacity(s.n_samples);
    for _ in 0..s.n_samples {
        let mut c = [0.0; 3];
        for (j, e) in eps.iter().enumerate() {
            if rng.random_range(0.0..1.0) < 0.75 {
                c[j] = rng.random_range(0.05..0.8) / e.iter().fold(0.0f64, |m, v| m.max(*v));
            }
        }
        let offset = rng.random_range(-0.003..0.003);
        let mut a: Vec<f64> = (0..w.len())
            .map(|i| (0..3).map(|j| eps[j][i] * c[j]).sum::<f64>() + offset)
            .collect();
        if let Some(u) = s.unknown {
            let peak = rng.random_range(u.peak_au.0..u.peak_au.1);
            let fwhm = rng.random_range(u.fwhm_nm.0..u.fwhm_nm.1);
            let centre = rng.random_range(380.0..720.0);
            let band = gauss(&w, &[(peak, centre, fwhm / 2.354_820_045)]);
            a.iter_mut().zip(&band).for_each(|(x, b)| *x += b);
        }
        let e = noise(s.noise, &a, &mut rng);
        a.iter_mut().zip(&e).for_each(|(x, n)| *x += n);
        if let Some(size) = s.spike_au {
            let i = rng.random_range(0..w.len());
            a[i] += size;
        }
        rows.extend(a);
        truth.push(c);
    }
    let n = s.n_samples;
    Simulated {
        file: SpectraFile {
            layout: Layout::Wide,
            delimiter: Delimiter::Comma,
            blocks: vec![Block {
                grid: Arc::new(Grid::new(w).unwrap()),
                ids: (0..n).map(|i| format!("s{i}")).collect(),
                positions: (0..n).collect(),
                absorbance_au: rows,
            }],
            failures: Vec::new(),
            n_samples: n,
        },
        truth,
        refs,
    }
}

/// The fitted samples of a report (panics on a failed one: the study's
/// inputs are all valid).
pub fn fitted(report: &FitReport) -> Vec<&SampleResult> {
    report
        .outcomes
        .iter()
        .map(|o| match o {
            Outcome::Fitted(s) => s,
            Outcome::Failed(f) => panic!("{}: {}", f.sample, f.error),
        })
        .collect()
}

/// What the study measures on one scenario.
#[derive(Debug, Clone, Copy)]
pub struct Measured {
    /// Share of samples flagged with the given flag.
    pub flagged: f64,
    /// Share of concentrations (present components) whose ±1.96 SE interval holds the truth.
    pub coverage: f64,
}

/// Flag rate and ±1.96 SE coverage of a report against the truth.
pub fn measure(sim: &Simulated, report: &FitReport, flag: &str) -> Measured {
    let (mut flagged, mut inside, mut total) = (0usize, 0usize, 0usize);
    for (s, t) in fitted(report).iter().zip(&sim.truth) {
        flagged += usize::from(s.flags.iter().any(|f| f == flag));
        for (c, truth) in s.components.iter().zip(t) {
            if *truth > 0.0
                && let Some(se) = c.std_error_mol_per_l
            {
                total += 1;
                inside += usize::from((c.concentration_mol_per_l - truth).abs() <= 1.96 * se);
            }
        }
    }
    Measured {
        flagged: flagged as f64 / sim.truth.len().max(1) as f64,
        coverage: inside as f64 / total.max(1) as f64,
    }
}
