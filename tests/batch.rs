//! `unblend batch` end to end: invented plates in the three layouts (96 and
//! 384 wells) with blanks, replicates, dilutions, a pathlength map and the
//! water-band pathlength, built from the shipped (invented) demo library with
//! known concentrations and seeded noise; plus bad wells and unreadable files.
//!
//! Every plate here is invented for the test. Tolerances are set from the
//! noise: with 0.001 AU of Gaussian noise on 151 points the fit's standard
//! errors are about 0.3 % of the concentrations used here (as wells.csv
//! reports), so the checks below sit at several standard errors.

mod common;

use serde::Deserialize;
use std::collections::HashMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::Command;
use unblend::reference::Library;

/// Relative tolerance on a replicate mean: over 5 standard errors of the
/// mean at the noise used (see the module comment).
const MEAN_REL_TOL: f64 = 0.02;
/// Relative tolerance on a single well's concentration (about 6 standard
/// errors; diluted and short-path wells have proportionally larger ones).
const WELL_REL_TOL: f64 = 0.04;

fn bin() -> &'static str {
    common::BIN
}

fn library_dir() -> PathBuf {
    Path::new(common::ROOT).join("library")
}

fn temp_dir(name: &str) -> common::Scratch {
    common::Scratch::new(&format!("batch-{name}"))
}

/// SplitMix64 + Box–Muller: seeded noise without a dependency.
struct Rng(u64);
impl Rng {
    fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * self.uniform()).cos()
    }
}

/// The shipped references (invented dyes), in library order
/// (ember-red, fjord-blue, saffron-yellow), on the test's grid.
struct Refs {
    wavelengths_nm: Vec<f64>,
    eps: Vec<Vec<f64>>,
}

impl Refs {
    fn new(wavelengths_nm: Vec<f64>) -> Refs {
        let lib = Library::open(&library_dir()).unwrap();
        let set = lib.select(&[]).unwrap();
        let eps = set
            .components
            .iter()
            .map(|c| {
                wavelengths_nm
                    .iter()
                    .map(|&w| c.epsilon_at(w).unwrap_or(0.0))
                    .collect()
            })
            .collect();
        assert_eq!(set.names(), ["ember-red", "fjord-blue", "saffron-yellow"]);
        Refs {
            wavelengths_nm,
            eps,
        }
    }

    /// A(λ) = l·Σ εᵢ(λ)·cᵢ + offset + noise.
    fn spectrum(&self, c_mol_per_l: &[f64], l_cm: f64, offset_au: f64, rng: &mut Rng) -> Vec<f64> {
        (0..self.wavelengths_nm.len())
            .map(|j| {
                let s: f64 = (0..self.eps.len())
                    .map(|i| self.eps[i][j] * c_mol_per_l[i])
                    .sum();
                l_cm * s + offset_au + 0.001 * rng.normal()
            })
            .collect()
    }
}

fn grid_400_700() -> Vec<f64> {
    (0..151).map(|i| 400.0 + 2.0 * i as f64).collect()
}

/// Invented truth for sample `k`: ember-red, fjord-blue, saffron-yellow in mol/L.
fn truth(k: usize) -> [f64; 3] {
    [
        2e-6 + 0.5e-6 * (k % 5) as f64,
        4e-6 + 0.7e-6 * (k % 7) as f64,
        3e-6 + 0.4e-6 * (k % 3) as f64,
    ]
}

fn well_name(r: usize, c: usize) -> String {
    format!("{}{}", (b'A' + r as u8) as char, c + 1)
}

/// Rows of a CSV file as maps from column name to value.
fn csv_rows(path: &Path) -> Vec<HashMap<String, String>> {
    let mut r = csv::Reader::from_path(path).unwrap();
    let headers = r.headers().unwrap().clone();
    r.records()
        .map(|rec| {
            let rec = rec.unwrap();
            headers
                .iter()
                .zip(rec.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

fn f(row: &HashMap<String, String>, col: &str) -> f64 {
    row[col]
        .parse()
        .unwrap_or_else(|_| panic!("{col} = '{}' in {row:?}", row[col]))
}

fn close(got: f64, want: f64, rel: f64) -> bool {
    ((got - want) / want).abs() < rel
}

/// The run JSON, typed: a schema change breaks these tests.
#[derive(Debug, Deserialize)]
struct RunJson {
    tool: Tool,
    components: Vec<String>,
    plates: Vec<PlateJson>,
    inputs: Vec<InputJson>,
    summary: SummaryJson,
    warnings: Vec<String>,
}
#[derive(Debug, Deserialize)]
struct Tool {
    name: String,
}
#[derive(Debug, Deserialize)]
struct PlateJson {
    plate: String,
    format: Option<String>,
    mapped: bool,
    blank: BlankJson,
    wells: Vec<WellJson>,
    samples: Vec<SampleJson>,
    error: Option<String>,
}
#[derive(Debug, Deserialize)]
struct BlankJson {
    wells: Vec<String>,
    used: Vec<String>,
    outliers: Vec<String>,
    well_sd_au: Option<f64>,
}
#[derive(Debug, Deserialize)]
struct WellJson {
    well: String,
    role: String,
    pathlength_cm: Option<f64>,
    pathlength_source: Option<String>,
    fit: Option<FitJson>,
    flags: Vec<String>,
    error: Option<String>,
}
#[derive(Debug, Deserialize)]
struct FitJson {
    components: Vec<ComponentJson>,
    n_points: usize,
}
#[derive(Debug, Deserialize)]
struct ComponentJson {
    name: String,
    concentration_mol_per_l: f64,
}
#[derive(Debug, Deserialize)]
struct SampleJson {
    sample: String,
    outlier_wells: Vec<String>,
    components: Vec<StatsJson>,
}
#[derive(Debug, Deserialize)]
struct StatsJson {
    name: String,
    mean_mol_per_l: f64,
    n_wells: usize,
}
#[derive(Debug, Deserialize)]
struct InputJson {
    path: String,
    layout: Option<String>,
    sha256: Option<String>,
    plates: usize,
    error: Option<String>,
}
#[derive(Debug, Deserialize)]
struct SummaryJson {
    plates: usize,
    wells_fitted: usize,
    wells_failed: usize,
    blank_outliers: usize,
    replicate_outliers: usize,
}

fn run_batch(args: &[&str], cwd: &Path) -> std::process::Output {
    Command::new(bin())
        .args(["batch", "--library"])
        .arg(library_dir())
        .args(args)
        .current_dir(cwd)
        .output()
        .unwrap()
}

/// Cell text as a plate reader prints it.
fn reading(v: f64) -> String {
    format!("{v:.5}")
}

/// Two 96-well plates in the plate-grid layout, with the map:
/// column 1 blanks; rows A–H × column triplets (2–4, 5–7, 8–10) samples in
/// triplicate; column 11 a standard of fjord-blue alone; column 12 empty.
/// Row B diluted 4×, row C at 0.5 cm (from the map). Plate P1: well D2 has
/// `>4` (an overflow marker) at three points, well F5 holds 1.5× its sample (a pipetting error).
/// Plate P2: well E3 has a garbled cell, blank G1 reads 0.05 AU high.
fn grid_fixture(dir: &Path) -> (PathBuf, PathBuf) {
    let refs = Refs::new(grid_400_700());
    let mut rng = Rng(7);
    let mut map = String::from("well,role,sample,dilution,pathlength_cm\n");
    for r in 0..8 {
        for c in 0..12 {
            let w = well_name(r, c);
            let line = match c {
                0 => format!("{w},blank,,,\n"),
                1..=9 => {
                    let k = r * 3 + (c - 1) / 3;
                    let dil = if r == 1 { "4" } else { "" };
                    let path = if r == 2 { "0.5" } else { "" };
                    format!("{w},sample,s{k:02},{dil},{path}\n")
                }
                10 => format!("{w},standard,std-blue,,\n"),
                _ => format!("{w},empty,,,\n"),
            };
            map.push_str(&line);
        }
    }
    let map_path = dir.join("map.csv");
    std::fs::write(&map_path, map).unwrap();

    let n = refs.wavelengths_nm.len();
    let mut text = String::from(
        "Invented plate-reader export for a test\nInstrument: none (not measured data)\n\n",
    );
    for plate in ["P1", "P2"] {
        let mut spectra = vec![vec![0.0; n]; 96];
        for r in 0..8 {
            for c in 0..12 {
                let offset = 0.04 + 0.001 * rng.normal();
                let (conc, l) = match c {
                    0 => ([0.0; 3], 1.0),
                    1..=9 => {
                        let k = r * 3 + (c - 1) / 3;
                        let mut t = truth(k);
                        if r == 1 {
                            t.iter_mut().for_each(|x| *x /= 4.0);
                        }
                        if plate == "P1" && r == 5 && c == 4 {
                            t.iter_mut().for_each(|x| *x *= 1.5);
                        }
                        (t, if r == 2 { 0.5 } else { 1.0 })
                    }
                    10 => ([0.0, 6e-6, 0.0], 1.0),
                    _ => ([0.0; 3], 1.0),
                };
                let mut s = refs.spectrum(&conc, l, offset, &mut rng);
                if plate == "P2" && r == 6 && c == 0 {
                    s.iter_mut().for_each(|x| *x += 0.05);
                }
                spectra[r * 12 + c] = s;
            }
        }
        for (j, w) in refs.wavelengths_nm.iter().enumerate() {
            writeln!(text, "plate={plate} wavelength_nm={w} read=1,,,").unwrap();
            text.push_str(",1,2,3,4,5,6,7,8,9,10,11,12,\n");
            for r in 0..8 {
                text.push((b'A' + r as u8) as char);
                for c in 0..12 {
                    text.push(',');
                    let cell = if plate == "P1" && r == 3 && c == 1 && (60..63).contains(&j) {
                        ">4".to_string()
                    } else if plate == "P2" && r == 4 && c == 2 && j == 10 {
                        "0.1x".to_string()
                    } else if c == 11 {
                        String::new()
                    } else {
                        reading(spectra[r * 12 + c][j])
                    };
                    text.push_str(&cell);
                }
                text.push('\n');
            }
            text.push_str("\nTemperature: 25.0 C\n\n");
        }
    }
    let plates = dir.join("plates.txt");
    std::fs::write(&plates, text).unwrap();
    (plates, map_path)
}

#[test]
fn plate_grid_run_recovers_truth_with_blanks_dilutions_and_pathlength_map() {
    let dir = temp_dir("grid");
    let (plates, map) = grid_fixture(&dir);
    let out = dir.join("out");
    let o = run_batch(
        &[
            plates.to_str().unwrap(),
            "--plate-map",
            map.to_str().unwrap(),
            "--out-dir",
            out.to_str().unwrap(),
        ],
        &dir,
    );
    let stderr = String::from_utf8_lossy(&o.stderr);
    // One garbled cell fails one well: partial, exit 3.
    assert_eq!(o.status.code(), Some(3), "{stderr}");

    let samples = csv_rows(&out.join("samples.csv"));
    let refs_names = ["ember-red", "fjord-blue", "saffron-yellow"];
    let mut checked = 0;
    for row in &samples {
        let Some(k) = row["sample"]
            .strip_prefix('s')
            .and_then(|k| k.parse::<usize>().ok())
        else {
            continue;
        };
        let i = refs_names
            .iter()
            .position(|n| *n == row["component"])
            .unwrap();
        let want = truth(k)[i];
        let got = f(row, "mean_mol_per_l");
        assert!(
            close(got, want, MEAN_REL_TOL),
            "plate {} sample s{k:02} {}: {got:e} vs truth {want:e}",
            row["plate"],
            row["component"]
        );
        checked += 1;
    }
    // 2 plates × 24 samples × 3 components.
    assert_eq!(checked, 144);
    // The diluted row B reports the undiluted specimen (checked above) and
    // the well's own concentration a quarter of it.
    let wells = csv_rows(&out.join("wells.csv"));
    let b2 = wells
        .iter()
        .find(|r| r["plate"] == "P1" && r["well"] == "B2" && r["component"] == "fjord-blue")
        .unwrap();
    assert!((f(b2, "dilution_factor") - 4.0).abs() < 1e-12);
    assert!(close(
        f(b2, "concentration_mol_per_l"),
        truth(3)[1] / 4.0,
        WELL_REL_TOL
    ));
    assert!(close(
        f(b2, "undiluted_mol_per_l"),
        truth(3)[1],
        WELL_REL_TOL
    ));
    // Row C: pathlength 0.5 cm from the map.
    let c2 = wells
        .iter()
        .find(|r| r["plate"] == "P1" && r["well"] == "C2" && r["component"] == "ember-red")
        .unwrap();
    assert_eq!(c2["pathlength_source"], "map");
    assert!((f(c2, "pathlength_cm") - 0.5).abs() < 1e-12);
    // The standard of fjord-blue alone.
    let std_blue = samples
        .iter()
        .find(|r| r["plate"] == "P1" && r["sample"] == "std-blue" && r["component"] == "fjord-blue")
        .unwrap();
    assert_eq!(std_blue["role"], "standard");
    assert_eq!(std_blue["n_wells"], "8");
    assert!(close(f(std_blue, "mean_mol_per_l"), 6e-6, MEAN_REL_TOL));

    // Saturated readings: left out of the fit, flagged.
    let d2 = wells
        .iter()
        .find(|r| r["plate"] == "P1" && r["well"] == "D2" && r["component"] == "fjord-blue")
        .unwrap();
    assert!(d2["flags"].contains("saturated-reading"), "{d2:?}");
    assert_eq!(d2["n_points"], "148");
    assert!(close(
        f(d2, "undiluted_mol_per_l"),
        truth(9)[1],
        WELL_REL_TOL
    ));

    // The garbled cell fails only its well, with line and column.
    let e3 = wells
        .iter()
        .find(|r| r["plate"] == "P2" && r["well"] == "E3")
        .unwrap();
    assert!(e3["error"].contains("('0.1x')"), "{e3:?}");
    assert!(e3["error"].contains("column 4"), "{e3:?}");

    // Typed JSON.
    let json: RunJson =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    assert_eq!(json.tool.name, "unblend");
    assert_eq!(json.components, refs_names);
    assert_eq!(json.plates.len(), 2);
    assert_eq!(json.inputs[0].layout.as_deref(), Some("plate-grid"));
    assert_eq!(json.inputs[0].plates, 2);
    assert_eq!(json.inputs[0].sha256.as_ref().map(String::len), Some(64));
    let p1 = &json.plates[0];
    assert_eq!(p1.plate, "P1");
    assert_eq!(p1.format.as_deref(), Some("96-well"));
    assert!(p1.mapped);
    assert_eq!(p1.blank.wells.len(), 8);
    assert!(p1.blank.well_sd_au.unwrap() < 0.003);
    // Empty column 12 is not analysed; 8 blanks + 80 fitted wells.
    assert_eq!(p1.wells.len(), 88);
    assert!(p1.wells.iter().all(|w| w.well != "A12"));
    // The pipetting error in F5 is flagged and left out of its sample.
    let s16 = p1.samples.iter().find(|s| s.sample == "s16").unwrap();
    assert_eq!(s16.outlier_wells, vec!["F5"]);
    assert!(s16.components.iter().all(|c| c.n_wells == 2));
    let f5 = p1.wells.iter().find(|w| w.well == "F5").unwrap();
    assert!(f5.flags.contains(&"replicate-outlier".to_string()));
    // The high blank of P2 is named and left out of its blank.
    let p2 = &json.plates[1];
    assert_eq!(p2.blank.outliers, vec!["G1"]);
    assert!(!p2.blank.used.contains(&"G1".to_string()));
    let g1 = p2.wells.iter().find(|w| w.well == "G1").unwrap();
    assert_eq!(g1.role, "blank");
    assert!(g1.flags.contains(&"blank-outlier".to_string()));
    assert_eq!(json.summary.plates, 2);
    assert_eq!(json.summary.wells_failed, 1);
    assert_eq!(json.summary.wells_fitted, 159);
    assert_eq!(json.summary.blank_outliers, 1);
    assert_eq!(json.summary.replicate_outliers, 1);
    let fitted = p1.wells.iter().find(|w| w.well == "A2").unwrap();
    let fit = fitted.fit.as_ref().unwrap();
    assert_eq!(fit.n_points, 151);
    assert_eq!(fit.components[1].name, "fjord-blue");
    assert!(close(
        fit.components[1].concentration_mol_per_l,
        truth(0)[1],
        WELL_REL_TOL
    ));
    assert_eq!(fitted.pathlength_source.as_deref(), Some("option"));
    assert!(p1.error.is_none());
    let failed_e3 = p2.wells.iter().find(|w| w.well == "E3").unwrap();
    assert!(failed_e3.error.is_some());

    // The residual checks of `fit` run on every fitted well (run.json).
    let raw: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    assert!(
        raw["plates"][0]["wells"][8]["fit"]["diagnostics"].is_object(),
        "{}",
        raw["plates"][0]["wells"][8]
    );

    // The run log names inputs with checksums, components, options, version.
    let log = std::fs::read_to_string(out.join("run-log.txt")).unwrap();
    assert!(log.contains(json.inputs[0].sha256.as_deref().unwrap()));
    assert!(log.contains(&format!("unblend {}", env!("CARGO_PKG_VERSION"))));
    assert!(log.contains("fjord-blue"));
    assert!(log.contains("Grubbs"));
    assert!(s16.components[0].name == "ember-red" && s16.components[0].mean_mol_per_l > 0.0);
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn results_do_not_depend_on_the_number_of_threads() {
    let dir = temp_dir("threads");
    let (plates, map) = grid_fixture(&dir);
    let mut outputs = Vec::new();
    for threads in ["1", "2"] {
        let out = dir.join(format!("out-{threads}"));
        let o = Command::new(bin())
            .env("RAYON_NUM_THREADS", threads)
            .args(["batch", "--library"])
            .arg(library_dir())
            .arg(&plates)
            .arg("--plate-map")
            .arg(&map)
            .arg("--out-dir")
            .arg(&out)
            .output()
            .unwrap();
        assert_eq!(o.status.code(), Some(3));
        outputs.push((
            std::fs::read(out.join("wells.csv")).unwrap(),
            std::fs::read(out.join("samples.csv")).unwrap(),
        ));
    }
    assert!(
        outputs[0] == outputs[1],
        "outputs differ between 1 and 2 threads"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

/// A 384-well plate in the wide layout with plate-qualified well ids, and a
/// second plate the map does not cover.
#[test]
fn wide_384_well_plates_with_a_per_plate_map() {
    let dir = temp_dir("wide384");
    let refs = Refs::new(grid_400_700());
    let mut rng = Rng(11);
    let mut text = String::from("sample");
    for w in &refs.wavelengths_nm {
        write!(text, ",{w} nm").unwrap();
    }
    text.push('\n');
    let mut map = String::from("plate,well,role,sample,dilution\n");
    for plate in ["Q1", "Q2"] {
        for r in 0..16 {
            for c in 0..24 {
                let w = well_name(r, c);
                let (conc, role) = if c == 0 {
                    ([0.0; 3], "blank".to_string())
                } else {
                    // Samples in quadruplicate along the row; rows I–P diluted 2×.
                    let k = r * 6 + (c - 1) / 4;
                    let mut t = truth(k);
                    if r >= 8 {
                        t.iter_mut().for_each(|x| *x /= 2.0);
                    }
                    (
                        t,
                        format!("sample,k{k:03},{}", if r >= 8 { "2" } else { "" }),
                    )
                };
                if plate == "Q1" {
                    if c == 0 {
                        writeln!(map, "Q1,{w},blank,,").unwrap();
                    } else {
                        writeln!(map, "Q1,{w},{role}").unwrap();
                    }
                }
                if c == 23 {
                    continue; // column 24 not read: the map's wells there have no reading
                }
                let s = refs.spectrum(&conc, 1.0, 0.03, &mut rng);
                write!(text, "{plate}:{w}").unwrap();
                for v in s {
                    text.push(',');
                    text.push_str(&reading(v));
                }
                text.push('\n');
            }
        }
    }
    let input = dir.join("plates-384.csv");
    std::fs::write(&input, text).unwrap();
    std::fs::write(dir.join("map.csv"), map).unwrap();
    let o = run_batch(
        &[
            "plates-384.csv",
            "--plate-map",
            "map.csv",
            "--out-dir",
            "out",
        ],
        &dir,
    );
    let stderr = String::from_utf8_lossy(&o.stderr);
    // Mapped wells without a reading make the run partial (issue 19).
    assert_eq!(o.status.code(), Some(3), "{stderr}");
    assert!(
        stderr.contains("plate 'Q2' has no entries in the plate map"),
        "{stderr}"
    );
    assert!(
        stderr.contains("mapped well(s) have no reading"),
        "{stderr}"
    );
    let json: RunJson =
        serde_json::from_str(&std::fs::read_to_string(dir.join("out/run.json")).unwrap()).unwrap();
    assert_eq!(json.inputs[0].layout.as_deref(), Some("wide"));
    let q1 = &json.plates[0];
    assert_eq!(q1.format.as_deref(), Some("384-well"));
    assert_eq!(q1.blank.used.len(), 16);
    // The 16 mapped wells of column 24 are error rows that say why.
    let unread: Vec<&WellJson> = q1
        .wells
        .iter()
        .filter(|w| {
            w.error
                .as_deref()
                .is_some_and(|e| e.contains("no reading for this well"))
        })
        .collect();
    assert_eq!(unread.len(), 16);
    assert!(unread.iter().all(|w| w.well.ends_with("24")));
    // Q2 has no map: every well is its own sample, no blank subtracted.
    let q2 = &json.plates[1];
    assert!(!q2.mapped);
    assert!(q2.blank.wells.is_empty());
    assert_eq!(q2.wells.len(), 16 * 23);
    let names = ["ember-red", "fjord-blue", "saffron-yellow"];
    let mut checked = 0;
    for s in &q1.samples {
        let k: usize = s.sample[1..].parse().unwrap();
        for c in &s.components {
            let i = names.iter().position(|n| *n == c.name).unwrap();
            assert!(
                close(c.mean_mol_per_l, truth(k)[i], MEAN_REL_TOL),
                "{} {}: {:e} vs {:e}",
                s.sample,
                c.name,
                c.mean_mol_per_l,
                truth(k)[i]
            );
            checked += 1;
        }
    }
    assert_eq!(checked, 16 * 6 * 3);
    std::fs::remove_dir_all(&dir).unwrap();
}

/// The long layout with bare well ids, and the water-band pathlength on
/// simulated near-infrared reads: wells filled to different heights.
#[test]
fn long_layout_with_water_band_pathlengths_returns_the_paths_used() {
    let dir = temp_dir("long-water");
    let mut grid = grid_400_700();
    grid.extend([900.0, 977.0]);
    let refs = Refs::new(grid.clone());
    let mut rng = Rng(23);
    // Water: A(900) = 0.02 AU/cm, A(977) = 0.02 + 0.18 AU/cm (the default
    // constant, common practice, recalled from memory); nothing below 800 nm.
    let water = |nm: f64| match nm {
        x if (x - 900.0).abs() < 1e-9 => 0.02,
        x if (x - 977.0).abs() < 1e-9 => 0.20,
        _ => 0.0,
    };
    let mut text = String::from("# invented long-layout export\nsample,wavelength_nm,absorbance\n");
    let mut map = String::from("well,role,sample\n");
    let mut paths = HashMap::new();
    for r in 0..8 {
        for c in 0..12 {
            let w = well_name(r, c);
            // Fill heights give 0.30–0.63 cm.
            let l = 0.30 + 0.03 * ((r * 12 + c) % 12) as f64;
            paths.insert(w.clone(), l);
            let (conc, entry) = if c == 0 {
                ([0.0; 3], "blank,".to_string())
            } else {
                let k = r * 4 + (c - 1) / 3 % 4;
                (truth(k), format!("sample,w{k:02}"))
            };
            writeln!(map, "{w},{entry}").unwrap();
            let mut s = refs.spectrum(&conc, l, 0.04, &mut rng);
            for (j, nm) in grid.iter().enumerate() {
                // Quieter reads here: 0.0002 AU on the two NIR points.
                if *nm > 800.0 {
                    s[j] = 0.04 + l * water(*nm) + 0.0002 * rng.normal();
                }
            }
            for (j, nm) in grid.iter().enumerate() {
                writeln!(text, "{w},{nm},{}", reading(s[j])).unwrap();
            }
        }
    }
    std::fs::write(dir.join("plate.csv"), text).unwrap();
    std::fs::write(dir.join("map.csv"), map).unwrap();
    let o = run_batch(
        &[
            "plate.csv",
            "--plate-map",
            "map.csv",
            "--pathlength-from-water",
            "--out-dir",
            "out",
            "--range-nm",
            "400:700",
        ],
        &dir,
    );
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{stderr}");
    let json: RunJson =
        serde_json::from_str(&std::fs::read_to_string(dir.join("out/run.json")).unwrap()).unwrap();
    assert_eq!(json.inputs[0].layout.as_deref(), Some("long"));
    let plate = &json.plates[0];
    assert_eq!(plate.plate, "plate");
    // σ_l = √2 · 0.0002 / 0.18 ≈ 0.0016 cm: 0.008 cm is 5 σ.
    const PATH_TOL_CM: f64 = 0.008;
    let mut n = 0;
    for w in plate.wells.iter().filter(|w| w.role == "sample") {
        assert_eq!(w.pathlength_source.as_deref(), Some("water-band"));
        let got = w.pathlength_cm.unwrap();
        assert!(
            (got - paths[&w.well]).abs() < PATH_TOL_CM,
            "{}: {got} vs {}",
            w.well,
            paths[&w.well]
        );
        n += 1;
    }
    assert_eq!(n, 88);
    let names = ["ember-red", "fjord-blue", "saffron-yellow"];
    for s in &plate.samples {
        let k: usize = s.sample[1..].parse().unwrap();
        for c in &s.components {
            let i = names.iter().position(|x| *x == c.name).unwrap();
            // Path errors of ~0.5 % add to the fit's: tolerance 3 %.
            assert!(
                close(c.mean_mol_per_l, truth(k)[i], 0.03),
                "{} {}",
                s.sample,
                c.name
            );
        }
    }
    let log = std::fs::read_to_string(dir.join("out/run-log.txt")).unwrap();
    assert!(log.contains("0.18 AU/cm"), "{log}");
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn unreadable_files_are_skipped_and_the_rest_completes() {
    let dir = temp_dir("unreadable");
    let (plates, map) = grid_fixture(&dir);
    std::fs::write(dir.join("bad.csv"), "sample,400,abc\nA1,0.1,0.2\n").unwrap();
    let o = run_batch(
        &[
            "missing.txt",
            "bad.csv",
            plates.to_str().unwrap(),
            "--plate-map",
            map.to_str().unwrap(),
            "--out-dir",
            "out",
        ],
        &dir,
    );
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(3), "{stderr}");
    assert!(stderr.contains("missing.txt"), "{stderr}");
    assert!(
        stderr.contains("bad.csv: line 1, column 3 ('abc'): expected a wavelength"),
        "{stderr}"
    );
    let json: RunJson =
        serde_json::from_str(&std::fs::read_to_string(dir.join("out/run.json")).unwrap()).unwrap();
    assert_eq!(json.inputs.len(), 3);
    assert!(json.inputs[0].error.is_some() && json.inputs[1].error.is_some());
    assert_eq!(json.inputs[2].path, plates.to_str().unwrap());
    assert_eq!(json.summary.plates, 2);
    assert!(!json.warnings.is_empty() || json.summary.wells_fitted > 0);
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn nothing_readable_or_a_bad_map_writes_nothing_and_fails() {
    let dir = temp_dir("nothing");
    let o = run_batch(&["missing.txt", "--out-dir", "out"], &dir);
    assert_eq!(o.status.code(), Some(1));
    assert!(!dir.join("out/wells.csv").exists());
    std::fs::write(dir.join("map.csv"), "well,role\nA1,blank\nA1,sample\n").unwrap();
    std::fs::write(dir.join("p.csv"), "sample,400,410\nA1,0.1,0.2\n").unwrap();
    let o = run_batch(
        &["p.csv", "--plate-map", "map.csv", "--out-dir", "out"],
        &dir,
    );
    assert_eq!(o.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(
        stderr.contains("plate map map.csv: line 3: well A1 is already mapped on line 2"),
        "{stderr}"
    );
    let leftovers = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .any(|e| e.file_name().to_string_lossy().contains(".tmp-"));
    assert!(!leftovers);
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn without_a_map_every_well_is_a_sample_and_a_warning_says_so() {
    let dir = temp_dir("nomap");
    let refs = Refs::new(grid_400_700());
    let mut rng = Rng(5);
    let mut text = String::from("sample");
    for w in &refs.wavelengths_nm {
        write!(text, ",{w}").unwrap();
    }
    text.push('\n');
    for (i, w) in ["A1", "A2", "B1"].iter().enumerate() {
        let s = refs.spectrum(&truth(i), 1.0, 0.0, &mut rng);
        text.push_str(w);
        for v in s {
            write!(text, ",{}", reading(v)).unwrap();
        }
        text.push('\n');
    }
    std::fs::write(dir.join("run7.csv"), text).unwrap();
    let o = run_batch(&["run7.csv", "--out-dir", "out"], &dir);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{stderr}");
    assert!(stderr.contains("no --plate-map given"), "{stderr}");
    let samples = csv_rows(&dir.join("out/samples.csv"));
    assert_eq!(samples.len(), 9);
    assert_eq!(samples[0]["plate"], "run7");
    assert_eq!(samples[0]["sample"], "A1");
    assert_eq!(samples[0]["n_wells"], "1");
    assert_eq!(samples[0]["sd_mol_per_l"], "");
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn help_names_the_layouts_outputs_and_exit_codes() {
    let o = Command::new(bin())
        .args(["batch", "--help"])
        .output()
        .unwrap();
    let help = String::from_utf8_lossy(&o.stdout);
    for needle in [
        "--plate-map",
        "--pathlength-from-water",
        "--water-au-per-cm",
        "wells.csv",
        "samples.csv",
        "run.json",
        "Exit codes",
        "wavelength_nm=",
        "--alarm-rate",
        "--max-absorbance",
        "--screen-with",
    ] {
        assert!(help.contains(needle), "{needle} missing from help");
    }
}

/// Overflow words in the wide and long layouts are saturated points too
/// (left out, well flagged), not a parse error that loses the well.
#[test]
fn overflow_words_in_wide_and_long_files_are_saturated_points() {
    let dir = temp_dir("overflow-wide");
    let refs = Refs::new(grid_400_700());
    let mut rng = Rng(11);
    let mut wide = String::from("sample");
    for w in &refs.wavelengths_nm {
        write!(wide, ",{w}").unwrap();
    }
    wide.push('\n');
    let mut long = String::from("sample,wavelength_nm,absorbance\n");
    for (i, well) in ["A1", "A2"].iter().enumerate() {
        let s = refs.spectrum(&truth(i), 1.0, 0.0, &mut rng);
        wide.push_str(well);
        for (p, v) in s.iter().enumerate() {
            let cell = if i == 1 && (100..103).contains(&p) {
                "OVER".to_string()
            } else {
                reading(*v)
            };
            write!(wide, ",{cell}").unwrap();
            writeln!(long, "{well},{},{cell}", refs.wavelengths_nm[p]).unwrap();
        }
        wide.push('\n');
    }
    std::fs::write(dir.join("wide.csv"), wide).unwrap();
    std::fs::write(dir.join("long.csv"), long).unwrap();
    for (input, out) in [("wide.csv", "out-wide"), ("long.csv", "out-long")] {
        // OVER: a word the user names as their instrument's overflow marker.
        let o = run_batch(
            &[input, "--out-dir", out, "--overflow-marker", "over"],
            &dir,
        );
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(0), "{input}: {stderr}");
        let wells = csv_rows(&dir.join(format!("{out}/wells.csv")));
        let a2: Vec<_> = wells.iter().filter(|r| r["well"] == "A2").collect();
        assert!(!a2.is_empty(), "{input}: A2 missing");
        assert!(
            a2[0]["flags"].contains("saturated-reading"),
            "{input}: {:?}",
            a2[0]
        );
    }
    std::fs::remove_dir_all(&dir).unwrap();
}

/// Every `href="#x"` in a page has a matching `id="x"`.
fn links_resolve(html: &str) -> usize {
    let ids: std::collections::HashSet<&str> = html
        .split("id=\"")
        .skip(1)
        .filter_map(|t| t.split('"').next())
        .collect();
    let mut n = 0;
    for t in html.split("href=\"#").skip(1) {
        let target = t.split('"').next().unwrap();
        assert!(ids.contains(target), "link to #{target} has no target");
        n += 1;
    }
    n
}

/// The tooltip (`<title>`) texts of a plate figure's cells for one well.
fn cell_titles<'a>(figure: &'a str, well: &str) -> Vec<&'a str> {
    figure
        .split("<title>")
        .skip(1)
        .filter_map(|t| t.split("</title>").next())
        .filter(|t| t.starts_with(&format!("{well} · ")))
        .collect()
}

#[test]
fn batch_report_maps_each_plate_and_links_every_well_to_its_fit() {
    let dir = temp_dir("report");
    let (plates, map) = grid_fixture(&dir);
    let out = dir.join("out");
    let report = dir.join("plates.html");
    let o = run_batch(
        &[
            plates.to_str().unwrap(),
            "--plate-map",
            map.to_str().unwrap(),
            "--out-dir=out",
            "--report=plates.html",
        ],
        &dir,
    );
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(3), "{stderr}");
    assert!(stderr.contains("plates.html"), "{stderr}");
    let run: RunJson =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    let html = std::fs::read_to_string(&report).unwrap();
    // Self-contained: no scripts, nothing fetched.
    assert!(html.starts_with("<!DOCTYPE html>") && html.trim_end().ends_with("</html>"));
    assert!(!html.contains("<script") && !html.contains(" src=") && !html.contains("<link"));
    assert_eq!(
        html.matches("http").count(),
        html.matches("http://www.w3.org/2000/svg").count()
    );
    // One fit figure per fitted well, one figure per plate.
    let wells_fitted = run.summary.wells_fitted;
    assert_eq!(html.matches("<svg").count(), wells_fitted + 2);
    assert_eq!(html.matches("</svg>").count(), wells_fitted + 2);
    assert_eq!(html.matches("class=\"plate\" width=").count(), 2);
    assert_eq!(html.matches("class=\"fit\"").count(), wells_fitted);
    // run.json keeps no curves unless asked.
    assert!(
        !std::fs::read_to_string(out.join("run.json"))
            .unwrap()
            .contains("\"curves\"")
    );
    // Every link lands: plate index, heatmap cells, table rows, back links.
    let links = links_resolve(&html);
    assert!(links > 2 * 96 * 4, "{links} links");

    let figure = |k: usize| {
        let start = html
            .match_indices("<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"plate\"")
            .nth(k)
            .unwrap()
            .0;
        &html[start..start + html[start..].find("</svg>").unwrap()]
    };
    let p1 = figure(0);
    let p2 = figure(1);
    // Wells are labelled: row letters and column numbers on every panel.
    assert!(p1.contains(">H</text>") && p1.contains(">12</text>"));
    // Three component heatmaps and the state map per plate.
    assert_eq!(p1.matches("font-weight=\"bold\"").count(), 4);
    // Each component heatmap cell shows the specimen concentration that
    // wells.csv reports (dilution applied), in the panel's unit (µmol/L here).
    let wells = csv_rows(&out.join("wells.csv"));
    let row = wells
        .iter()
        .find(|r| r["plate"] == "P1" && r["well"] == "B5" && r["component"] == "fjord-blue")
        .unwrap();
    let want = f(row, "undiluted_mol_per_l") * 1e6;
    let title = cell_titles(p1, "B5")
        .into_iter()
        .find(|t| t.contains("fjord-blue"))
        .unwrap();
    let shown: f64 = title
        .rsplit("fjord-blue ")
        .next()
        .and_then(|t| t.split(' ').next())
        .unwrap()
        .parse()
        .unwrap();
    assert!(
        (shown - want).abs() < 1e-4 * want.max(1.0),
        "{title} vs {want}"
    );
    // The largest value of a panel gets the light end of the scale.
    assert!(p1.contains("#fde725"));
    // State map: the saturated well, the pipetting outlier, the blanks, and
    // on plate 2 the well with a garbled cell (not fitted).
    let states =
        |fig: &str, well: &str| cell_titles(fig, well).last().copied().unwrap().to_string();
    assert!(
        states(p1, "D2").contains("saturated-reading"),
        "{}",
        states(p1, "D2")
    );
    assert!(
        states(p1, "F5").contains("replicate-outlier"),
        "{}",
        states(p1, "F5")
    );
    assert!(states(p2, "E3").contains("0.1x"), "{}", states(p2, "E3"));
    assert!(cell_titles(p1, "A1").iter().all(|t| t.contains("blank")));
    // The fitted well's cells link to its fit section; the failed one to its table row.
    assert!(p1.contains("href=\"#fit-1-B5\""));
    assert!(p2.contains("href=\"#well-2-E3\""));
    assert!(!html.contains("id=\"fit-2-E3\""));

    // `unblend report run.json` afterwards: the same plates, without fit
    // figures unless the run kept the curves.
    let o = Command::new(bin())
        .args(["report", "out/run.json", "--out", "later.html"])
        .current_dir(&dir)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(0), "{stderr}");
    assert!(stderr.contains("no fit curves"), "{stderr}");
    let later = std::fs::read_to_string(dir.join("later.html")).unwrap();
    assert_eq!(later.matches("<svg").count(), 2);
    links_resolve(&later);
    let o = run_batch(
        &[
            plates.to_str().unwrap(),
            "--plate-map",
            map.to_str().unwrap(),
            "--out-dir",
            "kept",
            "--with-curves",
        ],
        &dir,
    );
    assert_eq!(o.status.code(), Some(3));
    let o = Command::new(bin())
        .args(["report", "kept/run.json"])
        .current_dir(&dir)
        .output()
        .unwrap();
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let kept = std::fs::read_to_string(dir.join("kept/run.html")).unwrap();
    assert_eq!(kept.matches("<svg").count(), wells_fitted + 2);

    // A report in a folder that does not exist: refused before anything is written.
    let o = run_batch(
        &[
            plates.to_str().unwrap(),
            "--out-dir=never",
            "--report=no-such-folder/r.html",
        ],
        &dir,
    );
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--report no-such-folder/r.html"));
    assert!(!dir.join("never").exists());

    // Headless Chromium, where installed: the page loads without console
    // errors and has the figures.
    if let Some(chromium) = common::chromium::find() {
        let page = common::chromium::render(chromium, &report, &dir);
        assert_eq!(page.dom.matches("<svg").count(), wells_fitted + 2);
        assert!(
            page.console.is_empty(),
            "console messages: {:?}",
            page.console
        );
        assert!(common::chromium::is_png(&page.png));
    } else {
        eprintln!("skipped the Chromium render: chromium is not installed");
    }
}
