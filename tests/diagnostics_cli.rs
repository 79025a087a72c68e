//! The real binary on the demo data for the residual checks: the
//! unexplained-absorbance flag, `--screen-with`, saturation masking, the CSV
//! columns, `discover`, and bad option values. The demo data is invented
//! (demo-data/README.md); its truth file says what the fit should recover.

mod common;

use common::{ROOT, Run, Scratch, run_in};
use serde::Deserialize;
use std::path::Path;

#[derive(Debug, Deserialize)]
struct Report {
    samples: Vec<Sample>,
}

#[derive(Debug, Deserialize)]
struct Sample {
    sample: String,
    components: Vec<Conc>,
    flags: Vec<String>,
    diagnostics: Diagnostics,
    masking: Option<Masking>,
    screening: Option<Screening>,
}

#[derive(Debug, Deserialize)]
struct Conc {
    name: String,
    concentration_mol_per_l: f64,
}

#[derive(Debug, Deserialize)]
struct Diagnostics {
    noise_au: f64,
    noise_source: String,
    reduced_chi_squared: Option<f64>,
    durbin_watson: Option<f64>,
    alarm_rate: f64,
    alarm_p_value: Option<f64>,
    band: Option<Band>,
}

#[derive(Debug, Deserialize)]
struct Band {
    low_nm: f64,
    high_nm: f64,
    peak_au: f64,
    signal_fraction: f64,
}

#[derive(Debug, Deserialize)]
struct Masking {
    max_absorbance_au: f64,
    n_masked: usize,
    masked_nm: Vec<[f64; 2]>,
    dilute_and_remeasure: bool,
}

#[derive(Debug, Deserialize)]
struct Screening {
    best: Option<Candidate>,
    tried: Vec<Candidate>,
}

#[derive(Debug, Deserialize)]
struct Candidate {
    name: String,
    concentration_mol_per_l: f64,
    p_value: f64,
    explains: bool,
}

#[derive(Debug, Deserialize)]
struct Discovery {
    wavelengths_nm: Vec<f64>,
    n_signals: usize,
    rss_reduction_fraction: f64,
    samples: Vec<Amount>,
    left_out: Vec<[String; 2]>,
}

#[derive(Debug, Deserialize)]
struct Amount {
    sample: String,
    residual_rms_before_au: f64,
    residual_rms_after_au: f64,
}

fn run(args: &[&str]) -> Run {
    run_in(Path::new(ROOT), args, None, &[])
}

fn tempdir(tag: &str) -> Scratch {
    Scratch::new(&format!("diag-{tag}"))
}

/// A screening library with the two demo candidates, made with `library add`.
fn candidates(dir: &Path) -> String {
    let lib = dir.join("candidates");
    for name in ["umber-brown", "slate-violet"] {
        let r = run(&[
            "library",
            "add",
            name,
            "--spectrum",
            &format!("{ROOT}/demo-data/candidates/{name}.csv"),
            "--library",
            &lib.display().to_string(),
        ]);
        assert_eq!(r.code, 0, "{}", r.stderr);
    }
    lib.display().to_string()
}

fn demo_json(extra: &[&str]) -> Report {
    let mut args = vec![
        "fit",
        "demo-data/lot-check.csv",
        "--library",
        "library",
        "--format",
        "json",
    ];
    args.extend_from_slice(extra);
    let r = run(&args);
    assert_eq!(r.code, 0, "{}", r.stderr);
    serde_json::from_str(&r.stdout).expect("JSON report")
}

fn conc(s: &Sample, name: &str) -> f64 {
    s.components
        .iter()
        .find(|c| c.name == name)
        .expect("component")
        .concentration_mol_per_l
}

#[test]
fn impurity_lot_is_flagged_and_screening_names_umber_brown() {
    let dir = tempdir("screen");
    let lib = candidates(&dir);
    let report = demo_json(&["--screen-with", &lib]);
    for s in &report.samples {
        let d = &s.diagnostics;
        assert_eq!(d.noise_source, "estimated");
        assert!((d.alarm_rate - 0.01).abs() < 1e-12);
        // The demo's noise is about 1.5 mAU at low absorbance
        // (demo-data/README.md, noise model).
        assert!(d.noise_au > 0.001 && d.noise_au < 0.0025, "{}", s.sample);
        assert!(d.durbin_watson.is_some() && d.reduced_chi_squared.is_some());
    }
    for s in report
        .samples
        .iter()
        .filter(|s| s.sample.starts_with("lot-2614"))
    {
        assert!(s.flags.iter().any(|f| f == "unexplained-absorbance"));
        assert!(s.diagnostics.alarm_p_value.unwrap() < 1e-10);
        let band = s.diagnostics.band.as_ref().expect("band");
        assert!(band.low_nm < band.high_nm && band.peak_au > 0.0);
        assert!(band.signal_fraction > 0.0 && band.signal_fraction < 0.2);
        let sc = s.screening.as_ref().expect("screened");
        let best = sc.best.as_ref().expect("a candidate explains it");
        assert_eq!(best.name, "umber-brown");
        assert!(best.explains && best.p_value < 1e-10);
        // Truth: 4 µmol/L umber-brown (demo-data/lot-check-truth.csv); the
        // fit's standard error is about 0.08 µmol/L, allow 5 %.
        assert!(
            (best.concentration_mol_per_l / 4e-6 - 1.0).abs() < 0.05,
            "{best:?}"
        );
        let violet = sc.tried.iter().find(|c| c.name == "slate-violet").unwrap();
        assert!(!violet.explains);
    }
    // The clean lots of the same shade carry no flag.
    for s in report
        .samples
        .iter()
        .filter(|s| s.sample.starts_with("lot-2613"))
    {
        assert!(
            !s.flags.iter().any(|f| f == "unexplained-absorbance"),
            "{}",
            s.sample
        );
        assert!(s.screening.is_none());
    }
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn saturated_lot_is_masked_and_recovers_its_recipe() {
    let report = demo_json(&[]);
    for s in report
        .samples
        .iter()
        .filter(|s| s.sample.starts_with("lot-2615"))
    {
        assert!(s.flags.iter().any(|f| f == "saturation-masked"));
        let m = s.masking.as_ref().expect("masking");
        assert!((m.max_absorbance_au - 2.0).abs() < 1e-12);
        // About 38 points over 604–642 nm read above 2 AU (demo-data/README.md).
        assert!((30..=45).contains(&m.n_masked), "{}", m.n_masked);
        assert!(m.masked_nm.iter().all(|[a, b]| *a >= 595.0 && *b <= 650.0));
        assert!(!m.dilute_and_remeasure);
        // Truth: blue 40, yellow 25 µmol/L; within 2 % once masked.
        assert!((conc(s, "fjord-blue") / 40e-6 - 1.0).abs() < 0.02);
        assert!((conc(s, "saffron-yellow") / 25e-6 - 1.0).abs() < 0.02);
    }
    // Without masking (and unweighted: weights 1/σ² also play the
    // saturated points down) the stray-light points pull blue down further.
    let unmasked = demo_json(&["--max-absorbance", "none", "--weights", "none"]);
    let blue = |r: &Report| {
        r.samples
            .iter()
            .filter(|s| s.sample.starts_with("lot-2615"))
            .map(|s| (conc(s, "fjord-blue") / 40e-6 - 1.0).abs())
            .fold(0.0f64, f64::max)
    };
    assert!(blue(&unmasked) > blue(&report));
    assert!(unmasked.samples.iter().all(|s| s.masking.is_none()));
}

#[test]
fn csv_has_the_check_columns_on_every_row_and_the_table_has_notes() {
    let r = run(&[
        "fit",
        "demo-data/lot-check.csv",
        "--library",
        "library",
        "--format",
        "csv",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let mut lines = r.stdout.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    for col in [
        "noise_au",
        "durbin_watson",
        "alarm_p_value",
        "band_centre_nm",
        "n_masked",
        "screen_candidate",
    ] {
        assert!(header.contains(&col), "{col}");
    }
    assert_eq!(header[18], "error");
    for l in lines {
        assert_eq!(l.split(',').count(), header.len(), "{l}");
    }
    let t = run(&["fit", "demo-data/lot-check.csv", "--library", "library"]);
    assert!(t.stdout.contains("notes:"), "{}", t.stdout);
    assert!(t.stdout.contains("lot-2614-a: residual is more than noise"));
    assert!(t.stdout.contains("lot-2615-a: ") && t.stdout.contains("left out of the fit"));
}

#[test]
fn no_diagnostics_and_a_given_noise_level_change_what_is_tested() {
    let r = run(&[
        "fit",
        "demo-data/lot-check.csv",
        "--library",
        "library",
        "--format",
        "json",
        "--no-diagnostics",
    ]);
    assert_eq!(r.code, 0);
    assert!(!r.stdout.contains("\"diagnostics\""));
    assert!(!r.stdout.contains("unexplained-absorbance"));
    let given = demo_json(&["--noise-au", "0.0015"]);
    for s in &given.samples {
        assert_eq!(s.diagnostics.noise_source, "given");
        assert!((s.diagnostics.noise_au - 0.0015).abs() < 1e-15);
    }
}

#[test]
fn discover_recovers_a_spectrum_that_library_add_accepts() {
    let dir = tempdir("discover");
    let out = dir.join("unknown.csv").display().to_string();
    let r = run(&[
        "discover",
        "demo-data/lot-check.csv",
        "--library",
        "library",
        "--out",
        &out,
        "--format",
        "json",
    ]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let d: Discovery = serde_json::from_str(&r.stdout).expect("JSON");
    assert_eq!(d.n_signals, 1);
    assert!(d.left_out.iter().any(|[s, _]| s.starts_with("lot-2615")));
    let lot: Vec<&Amount> = d
        .samples
        .iter()
        .filter(|s| s.sample.starts_with("lot-2614"))
        .collect();
    assert_eq!(lot.len(), 3);
    for s in lot {
        assert!(s.residual_rms_after_au < 0.5 * s.residual_rms_before_au);
    }
    assert!(d.rss_reduction_fraction > 0.5);
    // The demo's impurity overlaps the references: the shape is ambiguous
    // and the tool says so.
    assert!(r.stderr.contains("not unique"), "{}", r.stderr);
    let text = std::fs::read_to_string(&out).unwrap();
    assert!(text.starts_with("wavelength_nm,epsilon\n"));
    assert_eq!(text.lines().count(), d.wavelengths_nm.len() + 1);
    let lib = dir.join("lib").display().to_string();
    let add = run(&[
        "library",
        "add",
        "found",
        "--spectrum",
        &out,
        "--library",
        &lib,
    ]);
    assert_eq!(add.code, 0, "{}", add.stderr);
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn discover_with_nothing_flagged_says_so_and_writes_nothing() {
    let dir = tempdir("nothing");
    let input = dir.join("clean.csv");
    let text = std::fs::read_to_string(format!("{ROOT}/demo-data/lot-check.csv")).unwrap();
    let clean: Vec<&str> = text
        .lines()
        .filter(|l| {
            l.starts_with("sample") || l.starts_with("lot-2611") || l.starts_with("lot-2613")
        })
        .collect();
    std::fs::write(&input, clean.join("\n")).unwrap();
    let out = dir.join("x.csv");
    let r = run(&[
        "discover",
        &input.display().to_string(),
        "--library",
        "library",
        "--out",
        &out.display().to_string(),
    ]);
    assert_eq!(r.code, 1);
    assert!(r.stderr.contains("nothing to recover"), "{}", r.stderr);
    assert!(!out.exists());
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn bad_check_options_are_usage_errors_with_what_was_expected() {
    for (args, needle) in [
        (vec!["--alarm-rate", "0.7"], "between 0 and 0.5"),
        (vec!["--alarm-rate", "abc"], "between 0 and 0.5"),
        (
            vec!["--max-absorbance=-1"],
            "positive absorbance in AU, or none",
        ),
        (
            vec!["--max-absorbance", "0"],
            "positive absorbance in AU, or none",
        ),
        (vec!["--noise-au", "0"], "positive number"),
    ] {
        let mut a = vec!["fit", "demo-data/lot-check.csv", "--library", "library"];
        a.extend(args.iter());
        let r = run(&a);
        assert_eq!(r.code, 2, "{args:?}: {}", r.stderr);
        assert!(r.stderr.contains(needle), "{args:?}: {}", r.stderr);
    }
    let r = run(&[
        "fit",
        "demo-data/lot-check.csv",
        "--library",
        "library",
        "--screen-with",
        "no-such-folder",
    ]);
    assert_eq!(r.code, 1);
    assert!(r.stderr.contains("no-such-folder"), "{}", r.stderr);
}
