//! Speed of the main job (criterion). Run: `cargo bench --bench fit`.
//!
//! - `solve/...`: the NNLS solve alone, in memory (Eᵀa, active set, standard
//!   errors), 6 components + offset × 401 wavelengths, parallel over spectra,
//!   into the workspace's reused solution buffer (`Prepared::solve_here`, as
//!   `fit` does).
//! - `fit_block/...`: the same plus building each sample's full result.
//! - `parse_fit_csv/...`: parse a wide CSV held in memory, fit, and format
//!   the tidy CSV output (everything but disk I/O).
//!
//! Data are synthetic (Gaussian bands, seeded noise), built in the bench.

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use rayon::prelude::*;
use std::hint::black_box;
use std::sync::Arc;
use unblend::fit::{FitOptions, Model};
use unblend::input::spectra::{self, Block, ReadOptions};
use unblend::reference::{Component, ReferenceSet};
use unblend::spectrum::Grid;

const K: usize = 6;
const N: usize = 20_000;

fn setup() -> (ReferenceSet, Block) {
    let w: Vec<f64> = (350..=750).map(f64::from).collect();
    let mut comps = Vec::new();
    for j in 0..K {
        let centre = 380.0 + 340.0 * (j as f64 + 0.5) / K as f64;
        let e: Vec<f64> = w
            .iter()
            .map(|x| 40_000.0 * (-0.5 * ((x - centre) / 30.0).powi(2)).exp() + 500.0)
            .collect();
        comps.push(
            Component::from_curve(&format!("band{j}"), w.clone(), e, "imported").expect("valid"),
        );
    }
    let refs = ReferenceSet { components: comps };
    let mut state: u64 = 0x9E3779B97F4A7C15;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut values = Vec::with_capacity(N * w.len());
    let mut ids = Vec::new();
    for i in 0..N {
        let c: Vec<f64> = (0..K)
            .map(|_| if next() < 0.2 { 0.0 } else { 2e-5 * next() })
            .collect();
        for p in 0..w.len() {
            let a: f64 = (0..K)
                .map(|j| refs.components[j].epsilon_l_per_mol_cm[p] * c[j])
                .sum();
            values.push(a + (next() + next() + next() - 1.5) * 0.004);
        }
        ids.push(format!("s{i}"));
    }
    let block = Block {
        grid: Arc::new(Grid::new(w).expect("valid")),
        ids,
        positions: (0..N).collect(),
        absorbance_au: values,
    };
    (refs, block)
}

fn to_csv(block: &Block) -> Vec<u8> {
    let mut s = String::from("sample");
    for w in block.grid.wavelengths_nm() {
        s.push_str(&format!(",{w}"));
    }
    s.push('\n');
    for i in 0..block.len() {
        s.push_str(&block.ids[i]);
        for v in block.row(i) {
            s.push_str(&format!(",{v:.5}"));
        }
        s.push('\n');
    }
    s.into_bytes()
}

fn benches(c: &mut Criterion) {
    let (refs, block) = setup();
    let options = FitOptions::default();
    let model = Model::new(&block.grid, &refs, &options).expect("model");
    let mut g = c.benchmark_group("fit");
    g.throughput(Throughput::Elements(N as u64));
    g.sample_size(20);
    g.bench_function("solve/6x401", |b| {
        b.iter(|| {
            let idx: Vec<usize> = (0..block.len()).collect();
            let total: f64 = idx
                .par_chunks(256)
                .map(|chunk| {
                    let mut ws = model.prepared.workspace();
                    chunk
                        .iter()
                        .map(|&i| {
                            let a = &block.row(i)[model.design.start..model.design.end];
                            model.prepared.solve_here(a, &mut ws).expect("solves").rss
                        })
                        .sum::<f64>()
                })
                .sum();
            black_box(total)
        })
    });
    g.bench_function("fit_block/6x401", |b| {
        b.iter(|| black_box(model.fit_block(&block, 1.0).len()))
    });
    let csv = to_csv(&block);
    g.bench_function("parse_fit_csv/6x401", |b| {
        b.iter(|| {
            let file = spectra::read(&csv, ReadOptions::default()).expect("parses");
            let report = unblend::fit::fit_file(&file, &refs, &options).expect("fits");
            black_box(unblend::output::csv_rows_parallel(&report.outcomes).len())
        })
    });
    g.finish();
}

criterion_group!(fit, benches);
criterion_main!(fit);
