//! Criterion benchmark of one plate through the batch stages: parse a
//! 96-well × 401-wavelength plate in the plate-grid layout, blank-subtract,
//! fit and gather replicates, and render its output rows. The end-to-end
//! figure (files, hashing, writing) comes from `scripts/bench-batch.sh`.
//!
//! ```sh
//! cargo bench --bench batch
//! ```

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use std::collections::HashMap;
use std::fmt::Write as _;
use unblend::batch::{BatchOptions, Models, process_plate};
use unblend::input::plate::{Well, parse_grid};
use unblend::input::platemap::{MapEntry, Role};
use unblend::input::spectra::Quantity;
use unblend::reference::Library;

fn plate_text(eps: &[Vec<f64>], wl: &[f64]) -> String {
    // Invented: column 1 blank, the rest three dyes at fixed amounts with a
    // deterministic ripple standing in for noise.
    let mut t = String::new();
    for (j, w) in wl.iter().enumerate() {
        writeln!(t, "plate=B wavelength_nm={w}").unwrap();
        t.push_str(",1,2,3,4,5,6,7,8,9,10,11,12\n");
        for r in 0..8 {
            t.push((b'A' + r as u8) as char);
            for c in 0..12 {
                let k = (r * 12 + c) as f64;
                let mut a = 0.04 + 0.001 * ((k * 7.0 + j as f64 * 13.0) % 11.0 - 5.0) / 5.0;
                if c > 0 {
                    a += eps.iter().map(|e| e[j] * (3e-6 + 1e-7 * k)).sum::<f64>();
                }
                write!(t, ",{a:.4}").unwrap();
            }
            t.push('\n');
        }
        t.push('\n');
    }
    t
}

fn bench(c: &mut Criterion) {
    let lib = Library::open(std::path::Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/library"
    )))
    .unwrap();
    let refs = lib.select(&[]).unwrap();
    let wl: Vec<f64> = (0..401).map(|i| 350.0 + i as f64).collect();
    let eps: Vec<Vec<f64>> = refs
        .components
        .iter()
        .map(|c| wl.iter().map(|&w| c.epsilon_at(w).unwrap()).collect())
        .collect();
    let text = plate_text(&eps, &wl);
    let map: HashMap<Well, MapEntry> = (0..96usize)
        .map(|i| {
            let w = Well {
                row: (i / 12) as u8,
                col: (i % 12) as u8,
            };
            let role = if w.col == 0 {
                Role::Blank
            } else {
                Role::Sample
            };
            let entry = MapEntry {
                role,
                sample: format!("s{}", (i / 12) * 4 + (i % 12).saturating_sub(1) / 3),
                dilution: 1.0,
                pathlength_cm: None,
                line: 0,
            };
            (w, entry)
        })
        .collect();
    let options = BatchOptions::default();
    let models = Models::new(&refs, options.fit, unblend::diagnostics::Options::default());
    let mut g = c.benchmark_group("batch");
    g.throughput(Throughput::Elements(96));
    g.bench_function("parse_plate_grid_96x401", |b| {
        b.iter(|| parse_grid(text.as_bytes(), 1, "B", &Quantity::Absorbance.into()).unwrap())
    });
    g.bench_function("parse_process_render_96x401", |b| {
        b.iter(|| {
            let p = parse_grid(text.as_bytes(), 1, "B", &Quantity::Absorbance.into()).unwrap();
            let r = process_plate(p, "bench", Some(&map), &models, &options);
            unblend::output::batch::render_plate(&r)
        })
    });
    let parsed = || parse_grid(text.as_bytes(), 1, "B", &Quantity::Absorbance.into()).unwrap();
    g.bench_function("process_96x401", |b| {
        b.iter_batched(
            parsed,
            |p| process_plate(p, "bench", Some(&map), &models, &options),
            criterion::BatchSize::SmallInput,
        )
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
