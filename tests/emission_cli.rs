//! The binary on the invented fluorescence demo data
//! (`demo-data/fluorescence/`, written by its `generate.py`): emission
//! references added to a library, emission fits with the inner-filter
//! correction and the Raman term, and the bad inputs of issue 17. The truth
//! is the generator's `trace-check-truth.csv`.

use serde::Deserialize;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

const DATA: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/fluorescence");
const DYES: [&str; 3] = ["glint-teal", "moss-amber", "dusk-rose"];

/// Trace lots: 3 counts of noise on hundreds of counts per nmol/L; the
/// generator's own inner filter (a 0.2 cm window) differs from the
/// centred form by < 0.1 %. 1 % relative (or 0.1 nmol/L absolute).
const RELATIVE_TOLERANCE: f64 = 0.01;
const ABSOLUTE_TOLERANCE_MOL_PER_L: f64 = 1e-10;

#[derive(Deserialize)]
struct Doc {
    signal: String,
    excitation_nm: f64,
    samples: Vec<Sample>,
    failed: Vec<Failed>,
}

#[derive(Deserialize)]
struct Sample {
    sample: String,
    components: Vec<Conc>,
    flags: Vec<String>,
    water_raman: Option<Raman>,
    inner_filter: Option<Inner>,
}

#[derive(Deserialize)]
struct Conc {
    name: String,
    concentration_mol_per_l: f64,
}

#[derive(Deserialize)]
struct Raman {
    band_nm: f64,
    height_intensity: f64,
}

#[derive(Deserialize)]
struct Inner {
    excitation_absorbance_au: f64,
}

#[derive(Deserialize)]
struct Failed {
    sample: String,
    error: String,
}

fn unblend(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_unblend"))
        .args(args)
        .output()
        .unwrap()
}

fn temp(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("unblend-emission-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn library(dir: &Path) -> String {
    let lib = dir.join("lib");
    for d in DYES {
        let out = unblend(&[
            "library",
            "add",
            d,
            "--spectrum",
            &format!("{DATA}/references/{d}.csv"),
            "--emission",
            &format!("{DATA}/references/{d}-em350.csv"),
            "--instrument-note",
            "invented demo fluorimeter",
            "--library",
            lib.to_str().unwrap(),
        ]);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    lib.to_str().unwrap().to_string()
}

fn truth() -> Vec<(String, [f64; 3])> {
    let text = std::fs::read_to_string(format!("{DATA}/trace-check-truth.csv")).unwrap();
    text.lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (
                f[0].to_string(),
                std::array::from_fn(|i| f[i + 1].parse().unwrap()),
            )
        })
        .collect()
}

fn fit_json(lib: &str, extra: &[&str]) -> (Doc, i32) {
    let input = format!("{DATA}/trace-check.csv");
    let mut args = vec![
        "fit",
        &input,
        "--library",
        lib,
        "--signal",
        "emission",
        "--excitation-nm",
        "350",
        "--format",
        "json",
    ];
    args.extend(extra);
    let out = unblend(&args);
    let doc = serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&out.stderr)));
    (doc, out.status.code().unwrap())
}

fn check_against_truth(doc: &Doc, skip: &[&str]) {
    for (name, conc) in truth() {
        if skip.contains(&name.as_str()) {
            continue;
        }
        let s = doc.samples.iter().find(|s| s.sample == name).unwrap();
        for (k, dye) in DYES.iter().enumerate() {
            let got = s.components.iter().find(|c| c.name == *dye).unwrap();
            let err = (got.concentration_mol_per_l - conc[k]).abs();
            assert!(
                err < ABSOLUTE_TOLERANCE_MOL_PER_L.max(RELATIVE_TOLERANCE * conc[k]),
                "{name} {dye}: {} vs {}",
                got.concentration_mol_per_l,
                conc[k]
            );
        }
    }
}

#[test]
fn emission_fit_with_modelled_absorbance_recovers_the_demo_truth() {
    let dir = temp("model");
    let lib = library(&dir);
    let (doc, code) = fit_json(&lib, &["--raman", "--absorbance", "model"]);
    assert_eq!(code, 0);
    assert_eq!(doc.signal, "emission");
    assert!((doc.excitation_nm - 350.0).abs() < 1e-12);
    // concentrate-2 (A_ex 0.33) is past the corrected limit: flagged.
    check_against_truth(&doc, &["concentrate-2"]);
    let top = doc
        .samples
        .iter()
        .find(|s| s.sample == "concentrate-2")
        .unwrap();
    assert!(
        top.flags.iter().any(|f| f == "inner-filter-high"),
        "{:?}",
        top.flags
    );
    let blank = doc
        .samples
        .iter()
        .find(|s| s.sample == "water-blank")
        .unwrap();
    let raman = blank.water_raman.as_ref().unwrap();
    // The generator's band: 60 counts at 1/(1/350 nm − 3,400 cm⁻¹) = 397.3 nm.
    assert!((raman.band_nm - 397.28).abs() < 0.01);
    assert!(
        (raman.height_intensity / 60.0 - 1.0).abs() < 0.1,
        "{}",
        raman.height_intensity
    );
}

#[test]
fn measured_absorbance_corrects_and_uncorrected_concentrate_is_flagged() {
    let dir = temp("measured");
    let lib = library(&dir);
    let abs = format!("{DATA}/trace-check-absorbance.csv");
    let (doc, _) = fit_json(&lib, &["--raman", "--absorbance", &abs]);
    check_against_truth(&doc, &["concentrate-2"]);
    let (none, _) = fit_json(
        &lib,
        &["--raman", "--absorbance", &abs, "--geometry", "none"],
    );
    let c1 = none
        .samples
        .iter()
        .find(|s| s.sample == "concentrate-1")
        .unwrap();
    assert!(c1.flags.iter().any(|f| f == "inner-filter-high"));
    let a = c1.inner_filter.as_ref().unwrap().excitation_absorbance_au;
    assert!((a - 0.127).abs() < 0.005, "{a}");
    let teal = c1
        .components
        .iter()
        .find(|c| c.name == "glint-teal")
        .unwrap();
    // Uncorrected, A_ex = 0.13 reads at least 10 % low.
    assert!(
        teal.concentration_mol_per_l < 0.9 * 2.0e-6,
        "{}",
        teal.concentration_mol_per_l
    );
}

#[test]
fn unmatched_absorbance_sample_is_named_and_the_rest_fitted() {
    let dir = temp("unmatched");
    let lib = library(&dir);
    let text = std::fs::read_to_string(format!("{DATA}/trace-check-absorbance.csv")).unwrap();
    let abs = dir.join("abs.csv");
    std::fs::write(&abs, text.replace("lot-2612-b,", "lot-2612-x,")).unwrap();
    let (doc, code) = fit_json(&lib, &["--absorbance", abs.to_str().unwrap()]);
    assert_eq!(code, 3, "partial");
    assert_eq!(doc.failed.len(), 1);
    assert_eq!(doc.failed[0].sample, "lot-2612-b");
    assert!(
        doc.failed[0]
            .error
            .contains("no absorbance spectrum named 'lot-2612-b'")
    );
    assert_eq!(doc.samples.len(), 8);
}

#[test]
fn bad_emission_inputs_name_file_line_and_value() {
    let dir = temp("bad");
    let lib = library(&dir);
    let lib_dir = lib.as_str();
    // No excitation anywhere.
    let plain = dir.join("plain.csv");
    std::fs::write(
        &plain,
        "wavelength_nm,intensity_per_mol_per_l\n400,1e9\n450,2e9\n",
    )
    .unwrap();
    let out = unblend(&[
        "library",
        "add",
        "glint-teal",
        "--emission",
        plain.to_str().unwrap(),
        "--library",
        lib_dir,
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1));
    assert!(err.contains("plain.csv: no excitation wavelength"), "{err}");
    // The file says 350 nm, the flag 365 nm.
    let em = format!("{DATA}/references/glint-teal-em350.csv");
    let out = unblend(&[
        "library",
        "add",
        "glint-teal",
        "--emission",
        &em,
        "--excitation-nm",
        "365",
        "--library",
        lib_dir,
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("glint-teal-em350.csv: line 2, column 1 ('350')"),
        "{err}"
    );
    // A negative intensity beyond the noise.
    let neg = dir.join("neg.csv");
    std::fs::write(
        &neg,
        "# excitation_nm = 350\nwavelength_nm,intensity_per_mol_per_l\n400,1e9\n410,-3e8\n",
    )
    .unwrap();
    let out = unblend(&[
        "library",
        "add",
        "glint-teal",
        "--emission",
        neg.to_str().unwrap(),
        "--library",
        lib_dir,
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("neg.csv: line 4, column 2 ('-3e8')"), "{err}");
    // A run at an excitation the references were not measured at.
    let input = format!("{DATA}/trace-check.csv");
    let out = unblend(&[
        "fit",
        &input,
        "--library",
        lib_dir,
        "--signal",
        "emission",
        "--excitation-nm",
        "280",
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1));
    assert!(
        err.contains("has no emission curve at excitation 280 nm (it has 350 nm)"),
        "{err}"
    );
}

#[test]
fn emission_curve_is_added_to_an_existing_component_and_kept() {
    let dir = temp("second");
    let lib = library(&dir);
    let src = std::fs::read_to_string(format!("{DATA}/references/glint-teal-em350.csv")).unwrap();
    let other = dir.join("teal-em365.csv");
    std::fs::write(
        &other,
        src.replace("excitation_nm = 350", "excitation_nm = 365"),
    )
    .unwrap();
    let out = unblend(&[
        "library",
        "add",
        "glint-teal",
        "--emission",
        other.to_str().unwrap(),
        "--library",
        &lib,
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = std::fs::read_to_string(Path::new(&lib).join("glint-teal.toml")).unwrap();
    assert_eq!(text.matches("[[emission]]").count(), 2, "{text}");
    assert!(text.contains("instrument_note = \"invented demo fluorimeter\""));
    // The absorbance fit still reads the library.
    let out = unblend(&["library", "list", "--library", &lib]);
    assert!(out.status.success());
}

/// `calibrate --emission`: standards of glint-teal made from its demo curve,
/// the top two bent by the inner filter (Lakowicz centred form applied
/// here, ε from the demo's absorptivity file), are left out and named; the
/// curve goes onto the existing component.
#[test]
fn calibrate_emission_adds_a_curve_and_names_bent_standards() {
    let dir = temp("calibrate");
    let lib = library(&dir);
    let read = |name: &str| -> Vec<(f64, f64)> {
        std::fs::read_to_string(format!("{DATA}/references/{name}"))
            .unwrap()
            .lines()
            .filter(|l| !l.starts_with('#') && !l.starts_with('w'))
            .map(|l| {
                let (a, b) = l.split_once(',').unwrap();
                (a.parse().unwrap(), b.parse().unwrap())
            })
            .collect()
    };
    let eps = read("glint-teal.csv");
    let em = read("glint-teal-em350.csv");
    let eps_at = |w: f64| eps.iter().find(|p| (p.0 - w).abs() < 1e-9).unwrap().1;
    let levels = [0.0, 0.0, 2e-8, 5e-8, 1e-7, 2e-7, 5e-7, 1e-6, 4e-6, 7e-6];
    let mut spectra = String::from("sample");
    for (w, _) in &em {
        spectra.push_str(&format!(",{w}"));
    }
    let mut conc = String::from("sample,concentration,role\n");
    for (i, c) in levels.iter().enumerate() {
        let id = format!("std-{i}");
        spectra.push_str(&format!("\n{id}"));
        for (w, s) in &em {
            let factor = 10f64.powf((eps_at(350.0) * c + eps_at(*w) * c) / 2.0);
            spectra.push_str(&format!(",{}", s * c / factor + 12.0));
        }
        let role = if *c > 0.0 { "standard" } else { "blank" };
        conc.push_str(&format!("{id},{c},{role}\n"));
    }
    std::fs::write(dir.join("std.csv"), spectra + "\n").unwrap();
    std::fs::write(dir.join("conc.csv"), conc).unwrap();
    let out = unblend(&[
        "calibrate",
        dir.join("std.csv").to_str().unwrap(),
        "--concentrations",
        dir.join("conc.csv").to_str().unwrap(),
        "--unit",
        "mol/L",
        "--name",
        "glint-teal",
        "--library",
        &lib,
        "--emission",
        "--excitation-nm",
        "365",
        "--format",
        "json",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let left: Vec<&str> = doc["excluded_standards"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e["sample"].as_str().unwrap())
        .collect();
    // A_ex = 0.17 and 0.29: 18 % and 29 % short of the line.
    assert!(
        left.contains(&"std-8") && left.contains(&"std-9"),
        "{left:?}"
    );
    let top = doc["intensity_per_mol_per_l_at_band_max"].as_f64().unwrap();
    // The kept levels reach A_ex 0.04, whose emission is 4.5 % short (within
    // the 5 % linearity tolerance): the slope is that much low, as for any
    // uncorrected calibration (keep standards below A_ex ≈ 0.01 for 1 %).
    assert!(top < 6.0e10 && top > 0.93 * 6.0e10, "{top}");
    let text = std::fs::read_to_string(Path::new(&lib).join("glint-teal.toml")).unwrap();
    assert!(text.contains("excitation_nm = 365.0"), "{text}");
}
