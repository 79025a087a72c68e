//! Lot QC through the real binary: recipe errors name their line, the
//! correction brings a re-simulated lot onto its target, the colour follows
//! Beer–Lambert, and the JSON keys have the promised shape (typed).

use serde::Deserialize;
use std::path::{Path, PathBuf};
use std::process::Command;
use unblend::reference::Component;

const BIN: &str = env!("CARGO_BIN_EXE_unblend");
const ROOT: &str = env!("CARGO_MANIFEST_DIR");
/// Noise-free spectra written to 7 significant digits: a fit recovers the
/// concentrations to about this relative error.
const RECOVERY_RELATIVE: f64 = 1e-5;

#[derive(Debug, Deserialize)]
struct Report {
    samples: Vec<Sample>,
}

#[derive(Debug, Deserialize)]
struct Sample {
    sample: String,
    components: Vec<Fitted>,
    target: Option<TargetOut>,
    colour: Option<ColourOut>,
    colour_note: Option<String>,
    correction: Option<CorrectionOut>,
}

#[derive(Debug, Deserialize)]
struct Fitted {
    name: String,
    concentration_mol_per_l: f64,
}

#[derive(Debug, Deserialize)]
struct TargetOut {
    name: String,
    pass: bool,
    reasons: Vec<String>,
    components: Vec<StrengthOut>,
}

#[derive(Debug, Deserialize)]
struct StrengthOut {
    name: String,
    target_mol_per_l: f64,
    strength_percent: Option<f64>,
}

#[allow(non_snake_case, dead_code)]
#[derive(Debug, Deserialize)]
struct ColourOut {
    illuminant: String,
    observer: String,
    L: f64,
    a: f64,
    b: f64,
    C: f64,
    h: f64,
    source: String,
    delta_e00: Option<f64>,
}

#[derive(Debug, Deserialize)]
struct CorrectionOut {
    dilution_factor: f64,
    components: Vec<AdditionOut>,
}

#[derive(Debug, Deserialize)]
struct AdditionOut {
    name: String,
    add_mol_per_l_of_lot: f64,
    add_g_per_l_of_lot: Option<f64>,
}

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("unblend-target-{name}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn unblend(dir: &Path, args: &[&str]) -> (i32, String, String) {
    let out = Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .env_remove("UNBLEND_LIBRARY")
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn library() -> Vec<Component> {
    ["fjord-blue", "saffron-yellow", "ember-red"]
        .iter()
        .map(|n| {
            let path = format!("{ROOT}/library/{n}.toml");
            Component::from_toml(&std::fs::read_to_string(&path).unwrap(), &path).unwrap()
        })
        .collect()
}

/// A noise-free wide spectra file, 1 cm: A(λ) = Σ εᵢ(λ)·cᵢ over `lo..=hi` nm.
fn spectra(samples: &[(&str, [f64; 3])], lo: u32, hi: u32) -> String {
    spectra_with(samples, lo, hi, |r, nm| r.epsilon_at(nm).unwrap())
}

/// As [`spectra`], with ε = 0 where the references end (800 nm).
fn spectra_beyond(samples: &[(&str, [f64; 3])], lo: u32, hi: u32) -> String {
    spectra_with(samples, lo, hi, |r, nm| r.epsilon_at(nm).unwrap_or(0.0))
}

fn spectra_with(
    samples: &[(&str, [f64; 3])],
    lo: u32,
    hi: u32,
    epsilon: impl Fn(&Component, f64) -> f64,
) -> String {
    let refs = library();
    let mut text = String::from("sample");
    for nm in lo..=hi {
        text.push_str(&format!(",{nm}"));
    }
    for (name, c) in samples {
        text.push_str(&format!("\n{name}"));
        for nm in lo..=hi {
            let a: f64 = refs
                .iter()
                .zip(c)
                .map(|(r, c)| epsilon(r, f64::from(nm)) * c)
                .sum();
            text.push_str(&format!(",{a:.7e}"));
        }
    }
    text.push('\n');
    text
}

fn fit_json(dir: &Path, input: &str, extra: &[&str]) -> Report {
    let library = format!("{ROOT}/library");
    let mut args = vec![
        "fit",
        input,
        "--library",
        &library,
        "--format",
        "json",
        "--no-diagnostics",
    ];
    args.extend(extra);
    let (code, stdout, stderr) = unblend(dir, &args);
    assert_eq!(code, 0, "{stderr}");
    serde_json::from_str(&stdout).unwrap()
}

const RECIPE: &str = "component,concentration,unit\nfjord-blue,5,umol/L\nsaffron-yellow,3,umol/L\nember-red,7,umol/L\n";

#[test]
fn correction_resimulated_brings_the_lot_onto_its_target() {
    let dir = scratch("resim");
    std::fs::write(dir.join("recipe.csv"), RECIPE).unwrap();
    // Blue 12 % over, yellow 10 % short, red on target (µmol/L → mol/L).
    let lot = [5.6e-6, 2.7e-6, 7.0e-6];
    std::fs::write(dir.join("lot.csv"), spectra(&[("lot", lot)], 350, 750)).unwrap();
    let r = fit_json(&dir, "lot.csv", &["--target", "recipe.csv"]);
    let s = &r.samples[0];
    assert_eq!(s.sample, "lot");
    let t = s.target.as_ref().unwrap();
    assert!(
        !t.pass && t.reasons.len() == 3,
        "two strengths and ΔE00: {:?}",
        t.reasons
    );
    assert_eq!(t.name, "recipe");
    let blue = t
        .components
        .iter()
        .find(|c| c.name == "fjord-blue")
        .unwrap();
    assert!((blue.strength_percent.unwrap() - 112.0).abs() < 1e-3);
    assert!((blue.target_mol_per_l - 5e-6).abs() < 1e-15);
    let c = s.correction.as_ref().unwrap();
    assert!(
        (c.dilution_factor - 1.12).abs() < 1e-5,
        "{}",
        c.dilution_factor
    );
    // Apply the correction to the true lot: (cᵢ + aᵢ) / f, and fit again.
    let corrected: Vec<f64> = ["fjord-blue", "saffron-yellow", "ember-red"]
        .iter()
        .zip(lot)
        .map(|(name, ci)| {
            let a = c.components.iter().find(|a| a.name == *name).unwrap();
            assert!(a.add_mol_per_l_of_lot >= 0.0);
            assert!(
                a.add_g_per_l_of_lot.is_some(),
                "library molar masses give g/L"
            );
            (ci + a.add_mol_per_l_of_lot) / c.dilution_factor
        })
        .collect();
    let corrected = [corrected[0], corrected[1], corrected[2]];
    std::fs::write(
        dir.join("fixed.csv"),
        spectra(&[("fixed", corrected)], 350, 750),
    )
    .unwrap();
    let r = fit_json(&dir, "fixed.csv", &["--target", "recipe.csv"]);
    let s = &r.samples[0];
    for (name, want) in [
        ("fjord-blue", 5e-6),
        ("saffron-yellow", 3e-6),
        ("ember-red", 7e-6),
    ] {
        let got = s
            .components
            .iter()
            .find(|c| c.name == name)
            .unwrap()
            .concentration_mol_per_l;
        assert!(
            (got - want).abs() <= RECOVERY_RELATIVE * want,
            "{name}: {got} vs {want}"
        );
    }
    assert!(s.target.as_ref().unwrap().pass, "{:?}", s.target);
    let de = s.colour.as_ref().unwrap().delta_e00.unwrap();
    assert!(de < 0.01, "corrected lot ΔE00 {de}");
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn colour_comes_from_the_measured_spectrum_when_it_covers_380_to_780_nm() {
    let dir = scratch("source");
    let c = [5e-6, 3e-6, 7e-6];
    std::fs::write(
        dir.join("wide.csv"),
        spectra_beyond(&[("wide", c)], 360, 830),
    )
    .unwrap();
    std::fs::write(dir.join("narrow.csv"), spectra(&[("narrow", c)], 350, 750)).unwrap();
    let wide = fit_json(&dir, "wide.csv", &["--colour"]);
    let narrow = fit_json(&dir, "narrow.csv", &["--colour"]);
    let (w, n) = (
        wide.samples[0].colour.as_ref().unwrap(),
        narrow.samples[0].colour.as_ref().unwrap(),
    );
    assert_eq!(
        (w.source.as_str(), n.source.as_str()),
        ("measured", "model")
    );
    assert_eq!((w.illuminant.as_str(), w.observer.as_str()), ("D65", "2"));
    // Noise-free: the model rebuilds the measured spectrum (same ε values)
    // over 360–800 nm, where the references end; 800–830 nm weighs ~1e-5.
    for (m, f) in [(w.L, n.L), (w.a, n.a), (w.b, n.b)] {
        assert!((m - f).abs() < 0.01, "{w:?} vs {n:?}");
    }
    assert!(wide.samples[0].target.is_none() && wide.samples[0].correction.is_none());
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn colour_at_twice_the_pathlength_is_the_colour_of_twice_the_concentration() {
    // Beer–Lambert: A = ε·l·c, so l and c trade one for one.
    let dir = scratch("path");
    let c = [5e-6, 3e-6, 7e-6];
    let doubled = c.map(|v| 2.0 * v);
    std::fs::write(
        dir.join("s.csv"),
        spectra(&[("one", c), ("two", doubled)], 350, 750),
    )
    .unwrap();
    let r = fit_json(
        &dir,
        "s.csv",
        &[
            "--colour",
            "--colour-pathlength-cm",
            "2",
            "--observer",
            "10",
            "--illuminant",
            "A",
        ],
    );
    let one = r.samples[0].colour.as_ref().unwrap();
    let plain = fit_json(
        &dir,
        "s.csv",
        &["--colour", "--observer", "10", "--illuminant", "A"],
    );
    let two = plain.samples[1].colour.as_ref().unwrap();
    assert_eq!(
        (one.illuminant.as_str(), one.observer.as_str()),
        ("A", "10")
    );
    assert!(
        (one.L - two.L).abs() < 1e-3 && (one.b - two.b).abs() < 1e-3,
        "{one:?} vs {two:?}"
    );
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn colour_outside_the_references_range_is_not_given_with_the_reason() {
    // A reference that covers only 400–700 nm, measured over the same range.
    let dir = scratch("none");
    std::fs::create_dir_all(dir.join("lib")).unwrap();
    let nm: Vec<f64> = (400..=700).map(f64::from).collect();
    let eps: Vec<f64> = nm
        .iter()
        .map(|x| 1e4 * (-((x - 550.0) / 40.0).powi(2)).exp())
        .collect();
    let narrow = Component::from_curve("narrow-dye", nm.clone(), eps.clone(), "imported").unwrap();
    std::fs::write(dir.join("lib/narrow-dye.toml"), narrow.to_toml()).unwrap();
    let mut text = String::from("sample");
    nm.iter().for_each(|x| text.push_str(&format!(",{x}")));
    text.push_str("\ns");
    eps.iter()
        .for_each(|e| text.push_str(&format!(",{:.7e}", e * 2e-5)));
    std::fs::write(dir.join("s.csv"), text + "\n").unwrap();
    let (code, stdout, stderr) = unblend(
        &dir,
        &[
            "fit",
            "s.csv",
            "--library",
            "lib",
            "--format",
            "json",
            "--colour",
        ],
    );
    assert_eq!(code, 0, "{stderr}");
    let r: Report = serde_json::from_str(&stdout).unwrap();
    let s = &r.samples[0];
    assert!(s.colour.is_none());
    let note = s.colour_note.as_deref().unwrap();
    assert!(
        note.contains("400–700 nm") && note.contains("380–780"),
        "{note}"
    );
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn bad_recipe_lines_are_named() {
    let dir = scratch("bad");
    let lot = spectra(&[("lot", [5e-6, 3e-6, 7e-6])], 350, 750);
    std::fs::write(dir.join("lot.csv"), lot).unwrap();
    let header = "component,concentration,unit,tolerance_percent\n";
    let cases = [
        (
            "fjord-blue,5,umol/L,\nviolet-x,1,umol/L,\n",
            "line 3: component 'violet-x' is not among the fitted references",
        ),
        (
            "fjord-blue,-5,umol/L,\n",
            "line 2, column 2 ('-5'): expected a concentration",
        ),
        (
            "fjord-blue,five,umol/L,\n",
            "line 2, column 2 ('five'): expected a concentration",
        ),
        (
            "fjord-blue,5,grains/L,\n",
            "line 2, column 3 ('grains/L'): expected a concentration unit",
        ),
        (
            "fjord-blue,5,umol/L,120\n",
            "line 2, column 4 ('120'): expected a strength tolerance",
        ),
    ];
    let library = format!("{ROOT}/library");
    for (i, (body, want)) in cases.iter().enumerate() {
        let name = format!("bad{i}.csv");
        std::fs::write(dir.join(&name), format!("{header}{body}")).unwrap();
        let (code, _, stderr) = unblend(
            &dir,
            &["fit", "lot.csv", "--library", &library, "--target", &name],
        );
        assert_ne!(code, 0);
        assert!(stderr.contains(&name) && stderr.contains(want), "{stderr}");
    }
    let (code, _, stderr) = unblend(
        &dir,
        &[
            "fit",
            "lot.csv",
            "--library",
            &library,
            "--target",
            "bad0.csv",
            "--strength-tolerance-percent",
            "0",
        ],
    );
    assert_ne!(code, 0);
    assert!(stderr.contains("tolerance out of range"), "{stderr}");
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn report_and_qc_csv_carry_the_verdict() {
    let dir = scratch("outputs");
    std::fs::write(dir.join("recipe.csv"), RECIPE).unwrap();
    let lots = [("on", [5e-6, 3e-6, 7e-6]), ("off", [5.6e-6, 3e-6, 7e-6])];
    std::fs::write(dir.join("lots.csv"), spectra(&lots, 350, 750)).unwrap();
    let library = format!("{ROOT}/library");
    let args = [
        "fit",
        "lots.csv",
        "--library",
        &library,
        "--target",
        "recipe.csv",
        "--report",
        "r.html",
        "--qc-csv",
        "q.csv",
        "--no-diagnostics",
    ];
    let (code, _, stderr) = unblend(&dir, &args);
    assert_eq!(code, 0, "{stderr}");
    let html = std::fs::read_to_string(dir.join("r.html")).unwrap();
    assert!(
        html.contains("Against the target") && html.contains("FAIL") && html.contains(">pass<")
    );
    assert_eq!(
        html.matches("<svg").count(),
        2,
        "one figure per fitted sample, no SVG in the QC table"
    );
    let csv = std::fs::read_to_string(dir.join("q.csv")).unwrap();
    let lines: Vec<&str> = csv.lines().collect();
    assert!(lines[0].starts_with("sample,target,pass,reasons,component,target_mol_per_l"));
    assert_eq!(lines.len(), 1 + 2 * 3, "one row per sample and component");
    let header: Vec<&str> = lines[0].split(',').collect();
    let off_blue: Vec<&str> = lines
        .iter()
        .find(|l| l.starts_with("off,") && l.contains(",fjord-blue,"))
        .unwrap()
        .split(',')
        .collect();
    assert_eq!(off_blue.len(), header.len());
    let col = |name: &str| off_blue[header.iter().position(|h| *h == name).unwrap()];
    assert_eq!(col("pass"), "false");
    assert!((col("strength_percent").parse::<f64>().unwrap() - 112.0).abs() < 1e-3);
    assert!((col("dilution_factor").parse::<f64>().unwrap() - 1.12).abs() < 1e-5);
    std::fs::remove_dir_all(&dir).ok();
}
