//! Generate invented plate-reader runs for the `batch` benchmark and for
//! trying the command: N plates in the plate-grid (default) or wide layout,
//! with a plate map, from the shipped demo library (invented dyes).
//!
//! ```sh
//! cargo run --release --example make-plates -- --plates 1000 --out target/bench-plates
//! ```
//!
//! Writes `plates.txt` (or `plates.csv` with `--layout wide`) and `map.csv`
//! into the folder. Each plate: column 1 is blanks; the other 88 wells (or
//! 368 on 384-well plates) hold samples in triplicate, each of three dyes at
//! invented concentrations (seeded, so every run writes the same bytes),
//! with Gaussian noise of 0.002 AU and a small per-well offset. Nothing here
//! is measured data.

use std::io::Write;
use std::path::PathBuf;
use unblend::reference::Library;

struct Rng(u64);

impl Rng {
    /// SplitMix64 (Steele, Lea & Flood 2014): small, fast, reproducible.
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Standard normal by Box–Muller.
    fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

fn usage() -> ! {
    eprintln!(
        "usage: make-plates [--plates N] [--wells 96|384] [--wavelengths N] [--layout grid|wide] [--library DIR] [--seed N] --out DIR"
    );
    std::process::exit(2)
}

/// Append a value as a plate reader prints it: four decimals.
fn push_reading(out: &mut Vec<u8>, v: f64) {
    let scaled = (v * 1e4).round() as i64;
    if scaled < 0 {
        out.push(b'-');
    }
    let a = scaled.unsigned_abs();
    let _ = write!(out, "{}.{:04}", a / 10_000, a % 10_000);
}

fn main() {
    let mut plates = 10usize;
    let mut wells = 96usize;
    let mut n_wl = 401usize;
    let mut wide = false;
    let mut library = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/library"));
    let mut seed = 20261201u64;
    let mut out_dir: Option<PathBuf> = None;
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        let mut val = || args.next().unwrap_or_else(|| usage());
        match a.as_str() {
            "--plates" => plates = val().parse().unwrap_or_else(|_| usage()),
            "--wells" => wells = val().parse().unwrap_or_else(|_| usage()),
            "--wavelengths" => n_wl = val().parse().unwrap_or_else(|_| usage()),
            "--layout" => wide = val() == "wide",
            "--library" => library = val().into(),
            "--seed" => seed = val().parse().unwrap_or_else(|_| usage()),
            "--out" => out_dir = Some(val().into()),
            _ => usage(),
        }
    }
    let Some(out_dir) = out_dir else { usage() };
    let (rows, cols) = match wells {
        96 => (8usize, 12usize),
        384 => (16, 24),
        _ => usage(),
    };
    if n_wl < 10 {
        usage();
    }
    let lib = Library::open(&library).unwrap_or_else(|e| {
        eprintln!("make-plates: {e}");
        std::process::exit(1)
    });
    let refs = lib.select(&[]).unwrap_or_else(|e| {
        eprintln!("make-plates: {e}");
        std::process::exit(1)
    });
    // 350–750 nm in n_wl steps.
    let wl: Vec<f64> = (0..n_wl)
        .map(|i| 350.0 + 400.0 * i as f64 / (n_wl - 1) as f64)
        .collect();
    let eps: Vec<Vec<f64>> = refs
        .components
        .iter()
        .map(|c| wl.iter().map(|&w| c.epsilon_at(w).unwrap_or(0.0)).collect())
        .collect();
    std::fs::create_dir_all(&out_dir).expect("create the output folder");
    // Map: column 1 blanks, then samples in triplicate along each row.
    let mut map = String::from("well,role,sample,dilution,pathlength_cm\n");
    let mut roles = vec![(false, 0usize); rows * cols];
    let mut next_sample = 0;
    for r in 0..rows {
        for c in 0..cols {
            let well = format!("{}{}", (b'A' + r as u8) as char, c + 1);
            if c == 0 {
                map.push_str(&format!("{well},blank,,,\n"));
                roles[r * cols + c] = (true, 0);
            } else {
                let s = next_sample + (c - 1) / 3;
                map.push_str(&format!("{well},sample,s{s:03},,\n"));
                roles[r * cols + c] = (false, s);
            }
        }
        next_sample += (cols - 1).div_ceil(3);
    }
    std::fs::write(out_dir.join("map.csv"), map).expect("write map.csv");
    let mut rng = Rng(seed);
    let name = if wide { "plates.csv" } else { "plates.txt" };
    let file = std::fs::File::create(out_dir.join(name)).expect("create the plates file");
    let mut w = std::io::BufWriter::with_capacity(1 << 20, file);
    let mut buf: Vec<u8> = Vec::with_capacity(1 << 20);
    if wide {
        buf.extend_from_slice(b"sample");
        for &x in &wl {
            let _ = write!(buf, ",{x}");
        }
        buf.push(b'\n');
    } else {
        buf.extend_from_slice(b"Invented plate-reader export (make-plates; not measured data)\n\n");
    }
    let n_samples = next_sample;
    let mut spectra = vec![0.0f64; rows * cols * n_wl];
    for p in 0..plates {
        // Concentrations per sample on this plate, mol/L (2–12 µmol/L).
        let conc: Vec<Vec<f64>> = (0..n_samples)
            .map(|_| {
                (0..eps.len())
                    .map(|_| 2e-6 + 10e-6 * rng.uniform())
                    .collect()
            })
            .collect();
        for (k, &(is_blank, s)) in roles.iter().enumerate() {
            let offset = 0.04 + 0.003 * rng.normal();
            for (j, slot) in spectra[k * n_wl..(k + 1) * n_wl].iter_mut().enumerate() {
                let mut a = offset + 0.002 * rng.normal();
                if !is_blank {
                    a += (0..eps.len()).map(|i| eps[i][j] * conc[s][i]).sum::<f64>();
                }
                *slot = a;
            }
        }
        let plate = format!("P{:04}", p + 1);
        if wide {
            for (k, _) in roles.iter().enumerate() {
                let _ = write!(
                    buf,
                    "{plate}:{}{}",
                    (b'A' + (k / cols) as u8) as char,
                    k % cols + 1
                );
                for j in 0..n_wl {
                    buf.push(b',');
                    push_reading(&mut buf, spectra[k * n_wl + j]);
                }
                buf.push(b'\n');
            }
        } else {
            for j in 0..n_wl {
                let _ = writeln!(buf, "plate={plate} wavelength_nm={}", wl[j]);
                for c in 0..cols {
                    let _ = write!(buf, ",{}", c + 1);
                }
                buf.push(b'\n');
                for r in 0..rows {
                    buf.push(b'A' + r as u8);
                    for c in 0..cols {
                        buf.push(b',');
                        push_reading(&mut buf, spectra[(r * cols + c) * n_wl + j]);
                    }
                    buf.push(b'\n');
                }
                buf.push(b'\n');
            }
        }
        if buf.len() > (1 << 20) {
            w.write_all(&buf).expect("write");
            buf.clear();
        }
    }
    w.write_all(&buf).expect("write");
    w.flush().expect("write");
    eprintln!(
        "make-plates: wrote {} plates of {wells} wells × {n_wl} wavelengths to {} (and map.csv)",
        plates,
        out_dir.join(name).display()
    );
}
