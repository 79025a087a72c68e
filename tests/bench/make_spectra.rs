//! Benchmark data generator (synthetic, invented): a library of K Gaussian-band
//! components and a wide-layout CSV of N mixture spectra on 350–750 nm at 1 nm
//! (401 points), with seeded noise. Nothing it writes is committed.
//!
//! cargo run --release --example make-spectra -- OUT_DIR [N_SPECTRA] [N_COMPONENTS]
//!
//! Writes OUT_DIR/library/*.toml and OUT_DIR/spectra.csv.

use std::io::Write;

fn main() {
    let mut args = std::env::args().skip(1);
    let out = std::path::PathBuf::from(args.next().unwrap_or_else(|| "bench-data".into()));
    let n: usize = args.next().and_then(|s| s.parse().ok()).unwrap_or(100_000);
    let k: usize = args.next().and_then(|s| s.parse().ok()).unwrap_or(6);
    let lib = out.join("library");
    std::fs::create_dir_all(&lib).expect("create output folder");
    let w: Vec<f64> = (350..=750).map(f64::from).collect();
    let mut eps = Vec::new();
    for j in 0..k {
        let centre = 380.0 + 340.0 * (j as f64 + 0.5) / k as f64;
        let e: Vec<f64> = w
            .iter()
            .map(|x| 40_000.0 * (-0.5 * ((x - centre) / 30.0).powi(2)).exp() + 500.0)
            .collect();
        let c = unblend::reference::Component::from_curve(
            &format!("band{j}"),
            w.clone(),
            e.clone(),
            "imported",
        )
        .expect("valid synthetic curve");
        unblend::reference::Library::add(&lib, &c, true).expect("write component");
        eps.push(e);
    }
    let file = std::fs::File::create(out.join("spectra.csv")).expect("create spectra.csv");
    let mut f = std::io::BufWriter::new(file);
    write!(f, "sample").unwrap();
    for x in &w {
        write!(f, ",{x}").unwrap();
    }
    writeln!(f).unwrap();
    let mut state: u64 = 0x9E3779B97F4A7C15;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    for i in 0..n {
        let c: Vec<f64> = (0..k)
            .map(|_| if next() < 0.2 { 0.0 } else { 2e-5 * next() })
            .collect();
        write!(f, "s{i}").unwrap();
        for p in 0..w.len() {
            let mut a = 0.0;
            for j in 0..k {
                a += eps[j][p] * c[j];
            }
            // Roughly Gaussian noise, sd ~0.002 AU (sum of uniforms).
            let noise = (next() + next() + next() - 1.5) * 0.004;
            write!(f, ",{:.5}", a + noise).unwrap();
        }
        writeln!(f).unwrap();
    }
    f.flush().unwrap();
    eprintln!(
        "wrote {} spectra x {} wavelengths, {k} components, to {}",
        n,
        w.len(),
        out.display()
    );
}
