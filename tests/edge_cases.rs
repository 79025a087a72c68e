//! Numerical edge cases, run as the binary: each gives a clear answer or a
//! clear error, never a panic, and never NaN or infinity in the JSON or CSV
//! output (issue 6, item 3).
//!
//! Spectra and ε curves here are invented test data (smooth Gaussian bands);
//! the expected outcomes follow from the model A(λ) = l·Σ εᵢ(λ)·cᵢ + baseline
//! and the rules of NNLS (Lawson & Hanson 1974, ch. 23), not from outside
//! measurements.

mod common;

use common::{FitJson as Report, Run, SampleJson as Sample, Scratch, run_in};
use std::fmt::Write as _;
use std::path::Path;

/// Relative tolerance for recovering a noise-free mixture after the CSV
/// round trip of ε and absorbance (values printed with ~6 significant
/// digits in the inputs below).
const REL_TOL: f64 = 1e-4;

fn tempdir(tag: &str) -> Scratch {
    Scratch::new(&format!("edge-{tag}"))
}

fn run(dir: &Path, args: &[&str]) -> Run {
    run_in(dir, args, None, &[])
}

fn band(x: f64, centre_nm: f64, width_nm: f64) -> f64 {
    (-0.5 * ((x - centre_nm) / width_nm).powi(2)).exp()
}

/// Add component `name` to the library in `dir` from ε values on `grid`.
fn add(dir: &Path, name: &str, grid: &[f64], eps: impl Fn(f64) -> f64) {
    let mut csv = String::from("wavelength_nm,epsilon\n");
    for &x in grid {
        writeln!(csv, "{x},{:e}", eps(x)).expect("string write");
    }
    let file = dir.join(format!("{name}.csv"));
    std::fs::write(&file, csv).expect("write ε table");
    let r = run(
        dir,
        &[
            "library",
            "add",
            name,
            "--spectrum",
            file.to_str().expect("utf-8 path"),
            "--library",
            "lib",
        ],
    );
    assert_eq!(r.code, 0, "library add {name}: {}", r.stderr);
}

/// Write a wide spectra file with one row per (id, values).
fn spectra(dir: &Path, grid: &[f64], rows: &[(&str, Vec<f64>)]) -> String {
    let mut csv = String::from("sample");
    for x in grid {
        write!(csv, ",{x}").expect("string write");
    }
    csv.push('\n');
    for (id, values) in rows {
        csv.push_str(id);
        for v in values {
            write!(csv, ",{v:e}").expect("string write");
        }
        csv.push('\n');
    }
    let p = dir.join("spectra.csv");
    std::fs::write(&p, csv).expect("write spectra");
    p.display().to_string()
}

fn grid(lo_nm: f64, step_nm: f64, n: usize) -> Vec<f64> {
    (0..n).map(|i| lo_nm + step_nm * i as f64).collect()
}

/// Fit as JSON and as CSV; both outputs are checked for NaN and infinity.
/// Returns the JSON run and its parsed report (when it parsed).
fn fit(dir: &Path, input: &str, extra: &[&str]) -> (Run, Option<Report>) {
    let mut args = vec!["fit", input, "--library", "lib", "--format", "json"];
    args.extend_from_slice(extra);
    let json = run(dir, &args);
    let mut args = vec!["fit", input, "--library", "lib", "--format", "csv"];
    args.extend_from_slice(extra);
    let csv = run(dir, &args);
    assert_eq!(json.code, csv.code, "JSON and CSV runs end alike");
    for (what, text) in [("json", &json.stdout), ("csv", &csv.stdout)] {
        let lower = text.to_ascii_lowercase();
        assert!(
            !lower.contains("nan") && !lower.contains("inf"),
            "{what} output holds NaN or infinity:\n{text}"
        );
    }
    let report = serde_json::from_str(&json.stdout).ok();
    (json, report)
}

fn conc(s: &Sample, name: &str) -> f64 {
    s.components
        .iter()
        .find(|c| c.name == name)
        .map(|c| c.concentration_mol_per_l)
        .expect("component in the result")
}

fn close(got: f64, want: f64, rel: f64) -> bool {
    (got - want).abs() <= rel * want.abs().max(f64::MIN_POSITIVE)
}

/// Two well-separated components on 400–700 nm, 1 nm steps.
fn two_component_library(dir: &Path) -> Vec<f64> {
    let g = grid(400.0, 1.0, 301);
    add(dir, "blue", &g, |x| 20000.0 * band(x, 450.0, 25.0));
    add(dir, "red", &g, |x| 15000.0 * band(x, 620.0, 30.0));
    g
}

#[test]
fn all_zero_spectrum_gives_zero_concentrations() {
    let dir = tempdir("zero");
    let g = two_component_library(&dir);
    let input = spectra(&dir, &g, &[("water", vec![0.0; g.len()])]);
    let (r, report) = fit(&dir, &input, &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let report = report.expect("JSON report");
    let s = &report.samples[0];
    for name in ["blue", "red"] {
        assert!(conc(s, name).abs() < 1e-12, "{name}: {}", conc(s, name));
    }
}

#[test]
fn a_single_wavelength_is_an_error_with_a_baseline_and_an_answer_without() {
    let dir = tempdir("single");
    let g = two_component_library(&dir);
    let at = [450.0];
    let a = 20000.0 * 2e-5;
    let input = spectra(&dir, &at, &[("s1", vec![a])]);
    // One wavelength, one component plus an offset: too few equations.
    let (r, _) = fit(&dir, &input, &["--components", "blue"]);
    assert_eq!(r.code, 1, "{}{}", r.stdout, r.stderr);
    assert!(
        r.stderr
            .contains("expected at least as many wavelengths as unknowns"),
        "{}",
        r.stderr
    );
    // Without the baseline one equation determines one concentration.
    let (r, report) = fit(
        &dir,
        &input,
        &["--components", "blue", "--baseline", "none"],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let report = report.expect("JSON report");
    assert!(close(conc(&report.samples[0], "blue"), 2e-5, REL_TOL));
    let _ = g;
}

#[test]
fn more_components_than_wavelengths_is_an_error() {
    let dir = tempdir("underdetermined");
    let g = grid(400.0, 1.0, 301);
    add(&dir, "c1", &g, |x| 10000.0 * band(x, 450.0, 20.0));
    add(&dir, "c2", &g, |x| 10000.0 * band(x, 550.0, 20.0));
    add(&dir, "c3", &g, |x| 10000.0 * band(x, 650.0, 20.0));
    let at = [450.0, 550.0];
    let input = spectra(&dir, &at, &[("s1", vec![0.2, 0.3])]);
    let (r, _) = fit(&dir, &input, &["--baseline", "none"]);
    assert_eq!(r.code, 1, "{}{}", r.stdout, r.stderr);
    assert!(
        r.stderr.contains("2 wavelength(s) in common")
            && r.stderr
                .contains("expected at least as many wavelengths as unknowns"),
        "{}",
        r.stderr
    );
}

#[test]
fn two_identical_references_are_an_error_that_names_both() {
    let dir = tempdir("twins");
    let g = grid(400.0, 1.0, 301);
    add(&dir, "twin-a", &g, |x| 10000.0 * band(x, 500.0, 30.0));
    add(&dir, "twin-b", &g, |x| 10000.0 * band(x, 500.0, 30.0));
    let a: Vec<f64> = g.iter().map(|&x| 0.5 * band(x, 500.0, 30.0)).collect();
    let input = spectra(&dir, &g, &[("s1", a)]);
    let (r, _) = fit(&dir, &input, &[]);
    assert_eq!(r.code, 1, "{}{}", r.stdout, r.stderr);
    assert!(
        r.stderr.contains("cannot tell 'twin-a' and 'twin-b' apart"),
        "{}",
        r.stderr
    );
}

#[test]
fn a_reference_of_all_zeros_is_refused_when_added_and_when_fitted() {
    let dir = tempdir("zeroref");
    let g = two_component_library(&dir);
    // ε zero everywhere: refused when the component is added.
    let file = dir.join("flat.csv");
    std::fs::write(&file, "wavelength_nm,epsilon\n400,0\n500,0\n600,0\n").expect("write");
    let r = run(
        &dir,
        &[
            "library",
            "add",
            "flat",
            "--spectrum",
            file.to_str().expect("utf-8 path"),
            "--library",
            "lib",
        ],
    );
    assert_eq!(r.code, 1, "{}", r.stderr);
    assert!(r.stderr.contains("every ε value is zero"), "{}", r.stderr);
    assert!(!dir.join("lib/flat.toml").exists());
    // ε zero over the whole fitted range (it absorbs only above 750 nm, the
    // sample stops at 700 nm): an error that names it.
    let wide = grid(400.0, 1.0, 501);
    add(
        &dir,
        "ghost",
        &wide,
        |x| if x > 750.0 { 5000.0 } else { 0.0 },
    );
    let a: Vec<f64> = g
        .iter()
        .map(|&x| 20000.0 * band(x, 450.0, 25.0) * 1e-5 + 15000.0 * band(x, 620.0, 30.0) * 2e-5)
        .collect();
    let input = spectra(&dir, &g, &[("s1", a)]);
    let (r, _) = fit(&dir, &input, &[]);
    assert_eq!(r.code, 1, "{}{}", r.stdout, r.stderr);
    assert!(
        r.stderr
            .contains("'ghost' is zero at every wavelength used"),
        "{}",
        r.stderr
    );
}

#[test]
fn epsilon_of_1e6_beside_1e_minus_3_gives_finite_answers() {
    let dir = tempdir("scales");
    let g = grid(400.0, 1.0, 301);
    add(&dir, "strong", &g, |x| 1e6 * band(x, 480.0, 25.0));
    add(&dir, "faint", &g, |x| 1e-3 * band(x, 600.0, 40.0));
    let (c_strong, c_faint) = (1e-7, 100.0);
    let a: Vec<f64> = g
        .iter()
        .map(|&x| 1e6 * band(x, 480.0, 25.0) * c_strong + 1e-3 * band(x, 600.0, 40.0) * c_faint)
        .collect();
    let input = spectra(&dir, &g, &[("s1", a)]);
    let (r, report) = fit(&dir, &input, &["--baseline", "none"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let report = report.expect("JSON report");
    let s = &report.samples[0];
    assert!(
        close(conc(s, "strong"), c_strong, REL_TOL),
        "{:?}",
        s.components
    );
    assert!(
        close(conc(s, "faint"), c_faint, REL_TOL),
        "{:?}",
        s.components
    );
}

#[test]
fn negative_absorbances_from_noise_give_non_negative_concentrations() {
    let dir = tempdir("negative");
    let g = two_component_library(&dir);
    // Blank-subtracted noise around zero: alternating ±0.002 AU, with only a
    // trace of red. Invented data.
    let a: Vec<f64> = g
        .iter()
        .enumerate()
        .map(|(i, &x)| {
            let noise = if i % 2 == 0 { -0.002 } else { 0.0015 };
            15000.0 * band(x, 620.0, 30.0) * 1e-8 + noise - 0.001
        })
        .collect();
    assert!(a.iter().any(|v| *v < 0.0));
    let input = spectra(&dir, &g, &[("noisy-blank", a)]);
    let (r, report) = fit(&dir, &input, &["--baseline", "none"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let report = report.expect("JSON report");
    let s = &report.samples[0];
    assert_eq!(s.sample, "noisy-blank");
    for c in &s.components {
        assert!(c.concentration_mol_per_l >= 0.0, "{c:?}");
    }
}

#[test]
fn a_10000_point_spectrum_is_fitted() {
    let dir = tempdir("long");
    // 10,000 points, 200.00–1199.90 nm in 0.1 nm steps.
    let g = grid(200.0, 0.1, 10_000);
    let g: Vec<f64> = g.iter().map(|x| (x * 10.0).round() / 10.0).collect();
    add(&dir, "uv", &g, |x| 30000.0 * band(x, 260.0, 15.0));
    add(&dir, "vis", &g, |x| 12000.0 * band(x, 700.0, 80.0));
    let a: Vec<f64> = g
        .iter()
        .map(|&x| 30000.0 * band(x, 260.0, 15.0) * 1e-5 + 12000.0 * band(x, 700.0, 80.0) * 3e-5)
        .collect();
    let input = spectra(&dir, &g, &[("s1", a)]);
    let (r, report) = fit(&dir, &input, &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let report = report.expect("JSON report");
    assert!(
        report.failed.is_empty(),
        "{:?}",
        report.failed.iter().map(|f| &f.error).collect::<Vec<_>>()
    );
    let s = &report.samples[0];
    assert!(close(conc(s, "uv"), 1e-5, REL_TOL), "{:?}", s.components);
    assert!(close(conc(s, "vis"), 3e-5, REL_TOL), "{:?}", s.components);
    let _ = &s.flags;
}
