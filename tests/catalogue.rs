//! The bad-input catalogue beyond `fit`'s spectra files (DEVELOPERS.md,
//! "Bad-input catalogue"): plate maps and plate grids (`batch`),
//! concentration files (`calibrate`) and component files (any command that
//! opens a library). Each entry is run as the binary; the message and exit
//! code must match and nothing may panic. The `fit` entries are in
//! `tests/cli.rs`.

mod common;

use common::{BIN, ROOT, Scratch};
use std::path::Path;
use std::process::Command;

/// One entry: the files to write, the command line, exit code and message.
struct Bad {
    what: &'static str,
    files: &'static [(&'static str, &'static str)],
    args: &'static [&'static str],
    code: i32,
    message: &'static str,
}

fn tempdir(tag: &str) -> Scratch {
    Scratch::new(&format!("catalogue-{tag}"))
}

const GRID: &str =
    "plate=P1 wavelength_nm=560\n,1,2\nA,0.1,0.2\n\nplate=P1 wavelength_nm=600\n,1,2\nA,0.2,0.3\n";
const STANDARDS: &str = "sample,360,380\nblank,0,0\ns1,0.1,0.2\n";
/// A whole component file (six points of the demo's ember-red).
const SMALL_COMPONENT: &str = include_str!("fuzz/corpus/component/small.toml");
const SPECTRUM: &str = "sample,560,600,640\ns1,0.1,0.2,0.3\n";

fn check(dir: &Path, b: &Bad) {
    for (name, text) in b.files {
        let p = dir.join(name);
        if let Some(parent) = p.parent() {
            std::fs::create_dir_all(parent).expect("dir");
        }
        std::fs::write(&p, text).expect("write input");
    }
    let lib = format!("{ROOT}/library");
    let args: Vec<String> = b.args.iter().map(|a| a.replace("@LIB", &lib)).collect();
    let out = Command::new(BIN)
        .args(&args)
        .current_dir(dir)
        .env_remove("UNBLEND_LIBRARY")
        .output()
        .expect("binary runs");
    let all = format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(out.status.code(), Some(b.code), "{}: {all}", b.what);
    assert!(
        all.contains(b.message),
        "{}: expected '{}' in:\n{all}",
        b.what,
        b.message
    );
    assert!(!all.contains("panicked"), "{}: panicked", b.what);
}

#[test]
fn bad_plate_maps_and_grids_get_clear_messages_and_exit_codes() {
    let catalogue = [
        Bad {
            what: "plate map: unknown role",
            files: &[
                ("g.csv", GRID),
                ("m.csv", "well,role\nA1,sample\nA2,solvent\n"),
            ],
            args: &[
                "batch",
                "g.csv",
                "--plate-map",
                "m.csv",
                "--library",
                "@LIB",
                "--out-dir",
                "o",
            ],
            code: 1,
            message: "plate map m.csv: line 3, column 2 ('solvent'): expected a role: blank, sample, standard or empty",
        },
        Bad {
            what: "plate map: well off the plate",
            files: &[("g.csv", GRID), ("m.csv", "well,role\nZ9,sample\n")],
            args: &[
                "batch",
                "g.csv",
                "--plate-map",
                "m.csv",
                "--library",
                "@LIB",
                "--out-dir",
                "o",
            ],
            code: 1,
            message: "line 2, column 1 ('Z9'): expected a well such as A1 or P24",
        },
        Bad {
            what: "plate map: dilution 0",
            files: &[
                ("g.csv", GRID),
                ("m.csv", "well,role,dilution\nA1,sample,0\n"),
            ],
            args: &[
                "batch",
                "g.csv",
                "--plate-map",
                "m.csv",
                "--library",
                "@LIB",
                "--out-dir",
                "o",
            ],
            code: 1,
            message: "line 2, column 3 ('0'): expected a dilution factor, a positive number",
        },
        Bad {
            what: "plate map: no role column",
            files: &[("g.csv", GRID), ("m.csv", "well,sample\nA1,x\n")],
            args: &[
                "batch",
                "g.csv",
                "--plate-map",
                "m.csv",
                "--library",
                "@LIB",
                "--out-dir",
                "o",
            ],
            code: 1,
            message: "line 1: plate map header: expected the columns `well,role`",
        },
        Bad {
            what: "plate grid: NaN in a cell",
            files: &[("g.csv", "plate=P1 wavelength_nm=560\n,1,2\nA,0.1,NaN\n")],
            args: &["batch", "g.csv", "--library", "@LIB", "--out-dir", "o"],
            code: 1,
            message: "see the error column of wells.csv",
        },
        Bad {
            what: "plate grid: wavelength not a number",
            files: &[("g.csv", "plate=P1 wavelength_nm=abc\n,1,2\nA,0.1,0.2\n")],
            args: &["batch", "g.csv", "--library", "@LIB", "--out-dir", "o"],
            code: 1,
            message: "line 1 ('abc'): expected a positive wavelength in nm after `wavelength_nm=`",
        },
        Bad {
            what: "plate grid: row letter off the plate",
            files: &[("g.csv", "plate=P1 wavelength_nm=560\n,1,2\nQ,0.1,0.2\n")],
            args: &["batch", "g.csv", "--library", "@LIB", "--out-dir", "o"],
            code: 1,
            message: "line 3, column 1 ('Q'): expected a row letter A–P",
        },
    ];
    for (i, b) in catalogue.iter().enumerate() {
        check(&tempdir(&format!("plate{i}")), b);
    }
    // The NaN cell is named in the well's error row.
    let dir = tempdir("plate4");
    check(&dir, &catalogue[4]);
    let wells = std::fs::read_to_string(dir.join("o/wells.csv")).expect("wells.csv written");
    assert!(
        wells.contains("line 3, column 3 ('NaN'): expected an absorbance or an overflow marker"),
        "{wells}"
    );
}

#[test]
fn bad_concentration_files_get_clear_messages_and_write_nothing() {
    let catalogue = [
        Bad {
            what: "concentration: text",
            files: &[
                ("st.csv", STANDARDS),
                ("c.csv", "sample,concentration\nblank,0\ns1,abc\n"),
            ],
            args: &[
                "calibrate",
                "st.csv",
                "--concentrations",
                "c.csv",
                "--name",
                "new",
                "--library",
                "lib",
            ],
            code: 1,
            message: "c.csv: line 3, column 2 ('abc'): expected a concentration (a number, optionally followed by its unit)",
        },
        Bad {
            what: "concentration: negative",
            files: &[
                ("st.csv", STANDARDS),
                ("c.csv", "sample,concentration\nblank,0\ns1,-2\n"),
            ],
            args: &[
                "calibrate",
                "st.csv",
                "--concentrations",
                "c.csv",
                "--name",
                "new",
                "--library",
                "lib",
            ],
            code: 1,
            message: "line 3, column 2 ('-2'): expected a concentration of 0 or more",
        },
        Bad {
            what: "concentration: no concentration column",
            files: &[("st.csv", STANDARDS), ("c.csv", "sample\nblank\n")],
            args: &[
                "calibrate",
                "st.csv",
                "--concentrations",
                "c.csv",
                "--name",
                "new",
                "--library",
                "lib",
            ],
            code: 1,
            message: "line 1: header 'sample': expected the columns `sample,concentration`",
        },
    ];
    for (i, b) in catalogue.iter().enumerate() {
        let dir = tempdir(&format!("conc{i}"));
        check(&dir, b);
        assert!(
            !dir.join("lib/new.toml").exists(),
            "{}: a component was written",
            b.what
        );
    }
}

#[test]
fn bad_component_files_get_clear_messages_and_exit_codes() {
    let catalogue = [
        Bad {
            what: "component: broken TOML",
            files: &[
                ("s.csv", SPECTRUM),
                (
                    "lib/x.toml",
                    "format = \"unblend-component\"\nformat_version = 1\nname = \"x\"\npoints = [\n",
                ),
            ],
            args: &["fit", "s.csv", "--library", "lib"],
            code: 1,
            message: "unclosed array, expected `]` (fix or remove it, or choose components with --components)",
        },
        Bad {
            what: "component: name differs from the file name",
            files: &[("s.csv", SPECTRUM), ("lib/y.toml", SMALL_COMPONENT)],
            args: &["fit", "s.csv", "--library", "lib"],
            code: 1,
            message: "its name is 'ember-red' but the file is named 'y.toml': they must match",
        },
        Bad {
            what: "component: no [source] table",
            files: &[
                ("s.csv", SPECTRUM),
                (
                    "lib/y.toml",
                    "format = \"unblend-component\"\nformat_version = 1\nname = \"y\"\n[absorptivity]\npoints = [[500.0, 1.0], [510.0, 2.0]]\n",
                ),
            ],
            args: &["fit", "s.csv", "--library", "lib"],
            code: 1,
            message: "component file lib/y.toml: missing [source] table",
        },
        Bad {
            what: "component: newer format version",
            files: &[
                ("s.csv", SPECTRUM),
                (
                    "lib/z.toml",
                    "format = \"unblend-component\"\nformat_version = 99\nname = \"z\"\n[absorptivity]\npoints = [[500.0, 1.0], [510.0, 2.0]]\n",
                ),
            ],
            args: &["fit", "s.csv", "--library", "lib"],
            code: 1,
            message: "format_version 99 is newer than this unblend reads (1): upgrade unblend",
        },
    ];
    for (i, b) in catalogue.iter().enumerate() {
        check(&tempdir(&format!("component{i}")), b);
    }
}
