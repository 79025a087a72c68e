//! Screening results reach every file the analyst reads: the `fit` CSV,
//! table and HTML report, and a plate's `wells.csv`, `samples.csv` and
//! report. The data are the invented demo lots (demo-data/README.md); lot
//! 2614 holds 5, 3 and 7 µmol/L of fjord-blue, saffron-yellow and ember-red
//! plus 4 µmol/L of the umber-brown impurity (demo-data/lot-check-truth.csv).
//! Files are read back with the csv crate (a general-purpose CSV reader).

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

const BIN: &str = env!("CARGO_BIN_EXE_unblend");
const ROOT: &str = env!("CARGO_MANIFEST_DIR");

/// Truth of lot 2614 in mol/L (demo-data/lot-check-truth.csv).
const LOT_2614: [(&str, f64); 3] = [
    ("fjord-blue", 5e-6),
    ("saffron-yellow", 3e-6),
    ("ember-red", 7e-6),
];

/// The refit's standard error is about 0.08 µmol/L (the candidate's, printed
/// by `fit`); 0.3 µmol/L is well over three of them, and the fit without
/// the candidate misses saffron-yellow by 1.3 µmol/L.
const REFIT_TOL_MOL_PER_L: f64 = 0.3e-6;

fn run(args: &[&str], cwd: &Path) -> (i32, String, String) {
    let out = Command::new(BIN)
        .args(args)
        .current_dir(cwd)
        .env_remove("UNBLEND_LIBRARY")
        .stdin(Stdio::null())
        .output()
        .expect("binary runs");
    (
        out.status.code().expect("exited normally"),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn scratch(tag: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("unblend-outputs-{tag}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).expect("temp dir");
    d
}

/// A screening library with the two demo candidates, made with `library add`.
fn candidates(dir: &Path) -> String {
    let lib = dir.join("candidates");
    for name in ["umber-brown", "slate-violet"] {
        let spectrum = format!("{ROOT}/demo-data/candidates/{name}.csv");
        let lib_s = lib.display().to_string();
        let (code, _, err) = run(
            &[
                "library",
                "add",
                name,
                "--spectrum",
                &spectrum,
                "--library",
                &lib_s,
            ],
            dir,
        );
        assert_eq!(code, 0, "{err}");
    }
    lib.display().to_string()
}

fn rows(text: &str) -> Vec<HashMap<String, String>> {
    let mut r = csv::Reader::from_reader(text.as_bytes());
    let headers = r.headers().expect("header").clone();
    r.records()
        .map(|rec| {
            let rec = rec.expect("record");
            assert_eq!(rec.len(), headers.len());
            headers
                .iter()
                .zip(rec.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

fn number(row: &HashMap<String, String>, column: &str) -> f64 {
    row[column]
        .parse()
        .unwrap_or_else(|_| panic!("{column}: {:?}", row[column]))
}

fn truth(component: &str) -> f64 {
    LOT_2614
        .iter()
        .find(|(n, _)| *n == component)
        .map(|(_, c)| *c)
        .expect("a demo dye")
}

#[test]
fn fit_csv_table_and_report_carry_the_candidate_and_the_refit() {
    let dir = scratch("fit");
    let lib = candidates(&dir);
    let base = ["fit", "demo-data/lot-check.csv", "--library", "library"];
    let screen = ["--screen-with", lib.as_str()];
    let csv_args: Vec<&str> = [&base[..], &screen, &["--format", "csv"]].concat();
    let (code, out, err) = run(&csv_args, Path::new(ROOT));
    assert_eq!(code, 0, "{err}");
    let rows = rows(&out);
    let lot: Vec<_> = rows
        .iter()
        .filter(|r| r["sample"].starts_with("lot-2614"))
        .collect();
    assert_eq!(lot.len(), 9);
    for r in lot {
        assert_eq!(r["screen_candidate"], "umber-brown");
        assert_eq!(r["answer"], "refit");
        let want = truth(&r["component"]);
        let refit = number(r, "refitted_mol_per_l");
        assert!((refit - want).abs() < REFIT_TOL_MOL_PER_L, "{r:?}");
    }
    let clean = rows.iter().find(|r| r["sample"] == "lot-2613-a").unwrap();
    assert_eq!(clean["answer"], "fit");
    assert_eq!(clean["refitted_mol_per_l"], "");

    let table_args: Vec<&str> = [&base[..], &screen].concat();
    let (code, table, err) = run(&table_args, Path::new(ROOT));
    assert_eq!(code, 0, "{err}");
    let note = table
        .lines()
        .find(|l| l.contains("lot-2614-a: candidate umber-brown"))
        .expect("the candidate's note");
    assert!(note.contains("refitted with it (the answer)"), "{note}");
    assert!(note.contains("saffron-yellow 3.0"), "{note}");

    let report = dir.join("fit.html");
    let report_s = report.display().to_string();
    let report_args: Vec<&str> = [&base[..], &screen, &["--report", &report_s]].concat();
    let (code, _, err) = run(&report_args, Path::new(ROOT));
    assert_eq!(code, 0, "{err}");
    let html = std::fs::read_to_string(&report).unwrap();
    assert!(
        html.contains("candidate umber-brown explains the residual"),
        "the report names the candidate"
    );
    assert!(html.contains("refitted with it (the answer)"));
    std::fs::remove_dir_all(&dir).unwrap();
}

/// The demo lots laid out on a plate: one row per well (A1, A2, ...) and a
/// map giving blanks, standards and the lots' replicate wells.
fn demo_plate(dir: &Path) {
    let text = std::fs::read_to_string(format!("{ROOT}/demo-data/lot-check.csv")).unwrap();
    let mut lines = text.lines();
    let mut plate = String::from(lines.next().unwrap());
    plate.push('\n');
    let mut map = String::from("well,role,sample\n");
    for (i, line) in lines.enumerate() {
        let (name, values) = line.split_once(',').unwrap();
        let well = format!("{}{}", (b'A' + (i / 12) as u8) as char, i % 12 + 1);
        let (role, sample) = if name.starts_with("blank") {
            ("blank", name)
        } else if name.starts_with("std") {
            ("standard", name)
        } else {
            ("sample", name.rsplit_once('-').map_or(name, |(lot, _)| lot))
        };
        map.push_str(&format!("{well},{role},{sample}\n"));
        plate.push_str(&format!("{well},{values}\n"));
    }
    std::fs::write(dir.join("plate.csv"), plate).unwrap();
    std::fs::write(dir.join("map.csv"), map).unwrap();
}

#[test]
fn batch_wells_samples_and_report_carry_the_candidate_and_the_refit() {
    let dir = scratch("batch");
    let lib = candidates(&dir);
    demo_plate(&dir);
    let library = format!("{ROOT}/library");
    let args = [
        "batch",
        "plate.csv",
        "--plate-map",
        "map.csv",
        "--library",
        &library,
        "--screen-with",
        &lib,
        "--out-dir",
        "out",
        // The report goes into the output folder, which does not exist yet:
        // it is made first.
        "--report",
        "out/plate.html",
    ];
    let (code, out, err) = run(&args, &dir);
    assert_eq!(code, 0, "{err}");
    // The closing per-specimen summary on stdout (nothing else is there).
    let line = out
        .lines()
        .find(|l| l.contains("plate lot-2614 (sample, 3 well(s))"))
        .unwrap_or_else(|| panic!("no summary line: {out}"));
    assert!(line.contains("µmol/L") && line.contains("refitted with umber-brown"));
    let wells = rows(&std::fs::read_to_string(dir.join("out/wells.csv")).unwrap());
    let lot: Vec<_> = wells.iter().filter(|r| r["sample"] == "lot-2614").collect();
    assert_eq!(lot.len(), 9);
    for r in &lot {
        assert_eq!(r["screen_candidate"], "umber-brown");
        assert_eq!(r["answer"], "refit");
        // Dilution 1: the specimen's concentration is the refitted one.
        let refit = number(r, "refitted_mol_per_l");
        let undiluted = number(r, "undiluted_mol_per_l");
        assert!((refit - undiluted).abs() <= 1e-12 * refit.abs(), "{r:?}");
        assert!(r["notes"].contains("unexplained absorbance"), "{r:?}");
        assert!(r["notes"].contains("candidate umber-brown"), "{r:?}");
    }
    let samples = rows(&std::fs::read_to_string(dir.join("out/samples.csv")).unwrap());
    let lot: Vec<_> = samples
        .iter()
        .filter(|r| r["sample"] == "lot-2614")
        .collect();
    assert_eq!(lot.len(), 3);
    for r in lot {
        assert_eq!(r["screen_candidates"], "umber-brown");
        assert!(r["flags"].contains("unexplained-absorbance"), "{r:?}");
        assert!(r["notes"].contains("refitted concentrations are used"));
        let mean = number(r, "mean_mol_per_l");
        let want = truth(&r["component"]);
        assert!((mean - want).abs() < REFIT_TOL_MOL_PER_L, "{r:?}");
    }
    let clean = samples.iter().find(|r| r["sample"] == "lot-2613").unwrap();
    assert_eq!(clean["screen_candidates"], "");
    let html = std::fs::read_to_string(dir.join("out/plate.html")).unwrap();
    assert!(html.contains("candidate umber-brown explains the residual"));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn the_absorbance_ceiling_has_one_spelling_and_the_old_one_still_works() {
    let base = ["fit", "demo-data/lot-check.csv", "--library", "library"];
    let new: Vec<&str> = [&base[..], &["--max-absorbance-au", "1.5"]].concat();
    let old: Vec<&str> = [&base[..], &["--max-absorbance", "1.5"]].concat();
    let (code_new, out_new, err) = run(&new, Path::new(ROOT));
    assert_eq!(code_new, 0, "{err}");
    let (code_old, out_old, err) = run(&old, Path::new(ROOT));
    assert_eq!(code_old, 0, "{err}");
    assert_eq!(out_new, out_old);
    assert!(out_new.contains("above 1.5 AU"), "the ceiling was applied");
    let (_, help, _) = run(&["fit", "--help"], Path::new(ROOT));
    assert!(help.contains("--max-absorbance-au"));
    assert!(
        !help.contains("--max-absorbance "),
        "the old spelling is hidden"
    );
}
