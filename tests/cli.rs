//! The real binary on small inputs: the demo, fit in every format, library
//! commands, and the catalogue of bad inputs (message and exit code).

mod common;

use common::{FitJson as Report, ROOT, Run, Scratch, run_in};
use std::path::Path;

fn run(args: &[&str]) -> Run {
    run_in(Path::new(ROOT), args, None, &[])
}

fn tempdir(tag: &str) -> Scratch {
    Scratch::new(&format!("cli-{tag}"))
}

fn write(dir: &Path, name: &str, content: &[u8]) -> String {
    let p = dir.join(name);
    std::fs::write(&p, content).expect("write test file");
    p.display().to_string()
}

fn library() -> String {
    format!("{ROOT}/library")
}

fn fit_json(input: &str, extra: &[&str]) -> (Run, Option<Report>) {
    let lib = library();
    let mut args = vec!["fit", input, "--library", &lib, "--format", "json"];
    args.extend_from_slice(extra);
    let r = run(&args);
    let parsed = serde_json::from_str(&r.stdout).ok();
    (r, parsed)
}

#[test]
fn demo_runs_from_any_folder_and_writes_its_files() {
    let dir = tempdir("demo");
    let r = run_in(&dir, &["demo"], None, &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(r.stdout.contains("lot-2611-a"));
    assert!(
        r.stdout
            .lines()
            .last()
            .unwrap_or("")
            .ends_with("unblend-demo/report.html"),
        "{}",
        r.stdout
    );
    let json = std::fs::read_to_string(dir.join("unblend-demo/results.json"))
        .expect("results.json written");
    let rep: Report = serde_json::from_str(&json).expect("typed JSON");
    assert_eq!(rep.samples.len(), 19);
    assert!(dir.join("unblend-demo/results.csv").exists());
    assert!(dir.join("unblend-demo/report.html").exists());
}

/// The demo data's truth (demo-data/lot-check-truth.csv, invented) is
/// recovered within 5 standard errors plus 1 % for every sample below 2 AU.
#[test]
fn fit_recovers_the_demo_truth() {
    let (r, rep) = fit_json(
        &format!("{ROOT}/demo-data/lot-check.csv"),
        &["--components", "fjord-blue,saffron-yellow,ember-red"],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    let rep = rep.expect("typed JSON");
    assert_eq!(
        rep.components,
        vec!["fjord-blue", "saffron-yellow", "ember-red"]
    );
    let truth = std::fs::read_to_string(format!("{ROOT}/demo-data/lot-check-truth.csv"))
        .expect("truth file");
    let mut checked = 0;
    for line in truth.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let (id, umber) = (f[0], f[4].parse::<f64>().expect("number"));
        if umber > 0.0 || id.starts_with("lot-2615") {
            continue; // impurity or saturation: not expected to be exact
        }
        let s = rep
            .samples
            .iter()
            .find(|s| s.sample == id)
            .expect("sample present");
        for (i, c) in s.components.iter().enumerate() {
            let want = f[1 + i].parse::<f64>().expect("number") * 1e-6;
            let se = c.std_error_mol_per_l.expect("se");
            assert!(
                (c.concentration_mol_per_l - want).abs() <= 5.0 * se + 0.01 * want,
                "{id} {}: {} vs {want}",
                c.name,
                c.concentration_mol_per_l
            );
        }
        checked += 1;
    }
    assert_eq!(checked, 14);
    let strong = rep
        .samples
        .iter()
        .find(|s| s.sample == "lot-2615-a")
        .expect("present");
    assert!(strong.flags.iter().any(|f| f == "high-absorbance"));
    let blank = rep
        .samples
        .iter()
        .find(|s| s.sample == "blank-1")
        .expect("present");
    assert!(blank.flags.iter().any(|f| f == "low-signal"));
}

#[test]
fn long_and_wide_layouts_give_identical_results() {
    let (_, wide) = fit_json(&format!("{ROOT}/demo-data/lot-check.csv"), &[]);
    let (r, long) = fit_json(&format!("{ROOT}/demo-data/lot-check-long.csv"), &[]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let (wide, long) = (wide.expect("json"), long.expect("json"));
    assert_eq!(long.samples.len(), 6);
    assert_eq!(&wide.samples[..6], &long.samples[..]);
}

fn synthetic_wide(n_spectra: usize) -> String {
    let mut s = String::from("sample");
    for w in (350..=750).step_by(2) {
        s.push_str(&format!(",{w}"));
    }
    s.push('\n');
    // Deterministic pseudo-noise (a linear congruential sequence), no rand needed.
    let mut state: u64 = 12345;
    let lib = unblend::reference::Library::open(Path::new(&library())).expect("library");
    let refs = lib.select(&[]).expect("components");
    for i in 0..n_spectra {
        s.push_str(&format!("s{i}"));
        for w in (350..=750).step_by(2) {
            let mut a = 0.0;
            for (j, c) in refs.components.iter().enumerate() {
                let conc = 1e-6 * (1.0 + ((i * 7 + j * 3) % 11) as f64);
                a += c.epsilon_at(f64::from(w)).expect("inside") * conc;
            }
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            a += ((state >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 0.004;
            s.push_str(&format!(",{a:.5}"));
        }
        s.push('\n');
    }
    s
}

#[test]
fn output_is_identical_across_thread_counts() {
    let dir = tempdir("threads");
    let input = write(&dir, "many.csv", synthetic_wide(1500).as_bytes());
    let lib = library();
    let args = [
        "fit",
        input.as_str(),
        "--library",
        lib.as_str(),
        "--format",
        "csv",
    ];
    let one = run_in(&dir, &args, None, &[("RAYON_NUM_THREADS", "1")]);
    let two = run_in(&dir, &args, None, &[("RAYON_NUM_THREADS", "2")]);
    let four = run_in(&dir, &args, None, &[("RAYON_NUM_THREADS", "4")]);
    assert_eq!(one.code, 0, "{}", one.stderr);
    assert_eq!(one.stdout, two.stdout);
    assert_eq!(one.stdout, four.stdout);
    assert_eq!(one.stdout.lines().count(), 1 + 1500 * 3);
}

#[test]
fn csv_output_is_tidy_with_units_in_the_header() {
    let lib = library();
    let input = format!("{ROOT}/demo-data/lot-check-long.csv");
    let r = run(&["fit", &input, "--library", &lib, "--format", "csv"]);
    assert_eq!(r.code, 0);
    let header = r.stdout.lines().next().expect("header");
    assert!(header.starts_with(
        "sample,component,concentration_mol_per_l,std_error_mol_per_l,concentration_mg_per_l"
    ));
    assert_eq!(r.stdout.lines().count(), 1 + 6 * 3);
}

#[test]
fn out_file_is_written_whole_and_stdin_is_read() {
    let dir = tempdir("out");
    let bytes = std::fs::read(format!("{ROOT}/demo-data/lot-check-long.csv")).expect("demo file");
    let lib = library();
    let out = dir.join("res.json").display().to_string();
    let r = run_in(
        &dir,
        &[
            "fit",
            "-",
            "--library",
            &lib,
            "--format",
            "json",
            "--out",
            &out,
        ],
        Some(&bytes),
        &[],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(r.stderr.contains("wrote 6 of 6 samples"));
    let rep: Report =
        serde_json::from_str(&std::fs::read_to_string(&out).expect("written")).expect("typed");
    assert_eq!(rep.samples.len(), 6);
    let names: Vec<String> = std::fs::read_dir(&dir)
        .expect("dir")
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    assert!(names.iter().all(|n| !n.contains(".tmp-")), "{names:?}");
}

#[test]
fn table_output_names_the_unit_and_range() {
    let lib = library();
    let r = run(&[
        "fit",
        &format!("{ROOT}/demo-data/lot-check.csv"),
        "--library",
        &lib,
    ]);
    assert_eq!(r.code, 0);
    assert!(r.stdout.contains("fjord-blue (µmol/L)"), "{}", r.stdout);
    assert!(r.stdout.contains("range 350–750 nm, 401 points"));
}

#[test]
fn transmittance_input_gives_the_same_concentrations() {
    let dir = tempdir("transmittance");
    let a = "sample,wavelength_nm,absorbance\n";
    let mut abs = String::from(a);
    let mut pct = String::from("sample,wavelength_nm,transmittance\n");
    let lib = unblend::reference::Library::open(Path::new(&library())).expect("library");
    let blue = lib.get("fjord-blue").expect("shipped");
    for w in (560..=680).step_by(4) {
        let av = blue.epsilon_at(f64::from(w)).expect("inside") * 5e-6;
        abs.push_str(&format!("x,{w},{av}\n"));
        pct.push_str(&format!("x,{w},{}\n", 100.0 * 10f64.powf(-av)));
    }
    let p1 = write(&dir, "a.csv", abs.as_bytes());
    let p2 = write(&dir, "t.csv", pct.as_bytes());
    let (_, r1) = fit_json(&p1, &["--components", "fjord-blue", "--baseline", "none"]);
    let (_, r2) = fit_json(
        &p2,
        &[
            "--components",
            "fjord-blue",
            "--baseline",
            "none",
            "--quantity",
            "transmittance-percent",
        ],
    );
    let (c1, c2) = (
        r1.expect("json").samples[0].components[0].concentration_mol_per_l,
        r2.expect("json").samples[0].components[0].concentration_mol_per_l,
    );
    // Exact data both ways: equal to rounding (log10 round trip).
    assert!(
        (c1 - 5e-6).abs() < 1e-15 && (c2 - 5e-6).abs() < 1e-13,
        "{c1} {c2}"
    );
}

#[test]
fn library_add_list_show_and_refuse_overwrite() {
    let dir = tempdir("library");
    let eps = write(
        &dir,
        "teal.csv",
        b"wavelength_nm,epsilon\n400,100\n500,2500.5\n600,900\n",
    );
    let lib = dir.join("lib").display().to_string();
    let r = run_in(
        &dir,
        &[
            "library",
            "add",
            "teal",
            "--spectrum",
            &eps,
            "--library",
            &lib,
            "--molar-mass",
            "512.3",
            "--solvent",
            "ethanol",
        ],
        None,
        &[],
    );
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(
        r.stdout.contains("peak ε 2500 L/(mol·cm) at 500 nm"),
        "{}",
        r.stdout
    );
    let again = run_in(
        &dir,
        &[
            "library",
            "add",
            "teal",
            "--spectrum",
            &eps,
            "--library",
            &lib,
        ],
        None,
        &[],
    );
    assert_eq!(again.code, 1);
    assert!(again.stderr.contains("already exists"), "{}", again.stderr);
    let text = std::fs::read_to_string(dir.join("lib/teal.toml")).expect("component file");
    assert!(text.contains("molar_mass_g_per_mol = 512.3"));
    assert!(text.contains("sha256 = "));
    let list = run_in(
        &dir,
        &["library", "list"],
        None,
        &[("UNBLEND_LIBRARY", &lib)],
    );
    assert_eq!(list.code, 0);
    assert!(list.stdout.contains("teal"));
    let show = run_in(
        &dir,
        &["library", "show", "teal", "--library", &lib],
        None,
        &[],
    );
    assert!(
        show.stdout.contains("solvent:     ethanol"),
        "{}",
        show.stdout
    );
    let csv = run_in(
        &dir,
        &["library", "show", "teal", "--library", &lib, "--csv"],
        None,
        &[],
    );
    assert_eq!(
        csv.stdout,
        "wavelength_nm,epsilon\n400,100\n500,2500.5\n600,900\n"
    );
    let bad = write(
        &dir,
        "bad.csv",
        b"wavelength_nm,epsilon\n400,100\n500,oops\n",
    );
    let r = run_in(
        &dir,
        &[
            "library",
            "add",
            "bad",
            "--spectrum",
            &bad,
            "--library",
            &lib,
        ],
        None,
        &[],
    );
    assert_eq!(r.code, 1);
    assert!(
        r.stderr.contains("line 3, column 2 ('oops')"),
        "{}",
        r.stderr
    );
    assert!(!dir.join("lib/bad.toml").exists());
}

/// One entry of the bad-input catalogue (DEVELOPERS.md lists them all).
struct Bad {
    what: &'static str,
    input: &'static [u8],
    extra: &'static [&'static str],
    code: i32,
    message: &'static str,
}

const HEADER: &str = "sample,560,600,640";

#[test]
fn bad_inputs_get_clear_messages_and_exit_codes() {
    let catalogue = [
        Bad {
            what: "empty file",
            input: b"",
            extra: &[],
            code: 1,
            message: "the input is empty",
        },
        Bad {
            what: "header only",
            input: b"sample,560,600,640\n",
            extra: &[],
            code: 1,
            message: "the header is the only line",
        },
        Bad {
            what: "text in a number cell",
            input: b"sample,560,580,600,620,640\ns1,0.1,0.2,0.3,0.2,0.1\ns2,0.1,abc,0.3,0.2,0.1\n",
            extra: &[],
            code: 3,
            message: "line 3, column 3 ('abc'): expected an absorbance (a number)",
        },
        Bad {
            what: "short row",
            input: b"sample,560,580,600,620,640\ns1,0.1,0.2,0.3,0.2,0.1\ns2,0.1,0.2\n",
            extra: &[],
            code: 3,
            message: "line 3: 3 fields but the header has 6",
        },
        Bad {
            what: "duplicate wavelength",
            input: b"sample,560,600,600\ns1,0.1,0.2,0.3\n",
            extra: &[],
            code: 1,
            message: "wavelength 600 nm appears twice",
        },
        Bad {
            what: "unordered wavelengths",
            input: b"sample,560,640,600\ns1,0.1,0.2,0.3\n",
            extra: &[],
            code: 1,
            message: "wavelength 600 nm is out of order",
        },
        Bad {
            what: "NaN",
            input: b"sample,560,580,600,620,640\ns1,0.1,NaN,0.3,0.2,0.1\ns2,0.1,0.2,0.3,0.2,0.1\n",
            extra: &[],
            code: 3,
            message: "line 2, column 3 ('NaN'): expected an absorbance (a number) (NaN and infinity are not allowed)",
        },
        Bad {
            what: "infinity",
            input: b"sample,560,580,600,620,640\ns1,0.1,inf,0.3,0.2,0.1\n",
            extra: &[],
            code: 1,
            message: "NaN and infinity are not allowed",
        },
        Bad {
            what: "no overlap with the references",
            input: b"sample,900,910,920\ns1,0.1,0.2,0.3\n",
            extra: &[],
            code: 1,
            message: "no wavelengths in common: the sample covers 900–920 nm",
        },
        Bad {
            what: "unknown component",
            input: b"sample,560,600,640\ns1,0.1,0.2,0.3\n",
            extra: &["--components", "fjord-blue,mauve"],
            code: 1,
            message: "no component named 'mauve' in the library (available: ember-red, fjord-blue, saffron-yellow)",
        },
        Bad {
            what: "binary garbage",
            input: b"\x00\x9f\x92\x96,\xff\xfe\x00\x01\n\x13\x37,\x00\n",
            extra: &[],
            code: 1,
            message: "expected a wavelength in nm in the header",
        },
        Bad {
            what: "one-column header",
            input: b"just some text\nmore text\n",
            extra: &[],
            code: 1,
            message: "header has one column",
        },
        Bad {
            what: "transmittance of zero",
            input: b"sample,560,580,600,620,640\ns1,50,0,40,40,40\n",
            extra: &["--quantity", "transmittance-percent"],
            code: 1,
            message: "line 2, column 3 ('0'): expected a transmittance percentage above 0",
        },
        Bad {
            what: "long layout with a bad third column name",
            input: b"sample,wavelength_nm,colour\ns1,560,0.1\n",
            extra: &[],
            code: 1,
            message: "line 1, column 3 ('colour'): expected 'absorbance' or 'transmittance'",
        },
    ];
    let _ = HEADER;
    let dir = tempdir("bad");
    for (i, b) in catalogue.iter().enumerate() {
        let path = write(&dir, &format!("bad{i}.csv"), b.input);
        let lib = library();
        let mut args = vec!["fit", path.as_str(), "--library", lib.as_str()];
        args.extend_from_slice(b.extra);
        let r = run_in(&dir, &args, None, &[]);
        let all = format!("{}{}", r.stdout, r.stderr);
        assert_eq!(
            r.code, b.code,
            "{}: exit code {}; output:\n{all}",
            b.what, r.code
        );
        assert!(
            all.contains(b.message),
            "{}: expected message '{}' in:\n{all}",
            b.what,
            b.message
        );
        assert!(!all.contains("panicked"), "{}: panicked", b.what);
    }
}

#[test]
fn failed_rows_appear_in_json_with_their_errors() {
    let dir = tempdir("failedjson");
    let p = write(
        &dir,
        "x.csv",
        b"sample,560,580,600,620,640\ns1,0.1,0.2,0.3,0.2,0.1\ns2,0.1,abc,0.3,0.2,0.1\n",
    );
    let (r, rep) = fit_json(&p, &[]);
    assert_eq!(r.code, 3);
    let rep = rep.expect("typed");
    assert_eq!(rep.samples.len(), 1);
    assert_eq!(rep.failed.len(), 1);
    assert_eq!(rep.failed[0].sample, "s2");
    assert!(rep.failed[0].error.contains("line 3, column 3"));
    // Three dyes and an offset on 5 wavelengths cannot be told apart well:
    // the collinearity warning is expected, nothing else.
    assert!(
        rep.warnings
            .iter()
            .all(|w| w.starts_with("collinear-references")),
        "{:?}",
        rep.warnings
    );
}

#[test]
fn usage_errors_exit_with_two_and_help_lists_exit_codes() {
    let r = run(&["fit", "x.csv", "--range-nm", "700:400"]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains("expected 0 < LO < HI in nm"),
        "{}",
        r.stderr
    );
    let r = run(&["fit", "--help"]);
    assert_eq!(r.code, 0);
    assert!(r.stdout.contains("Exit codes:"));
    let r = run(&["fit", "/no/such/file.csv", "--library", &library()]);
    assert_eq!(r.code, 1);
    assert!(r.stderr.contains("/no/such/file.csv"), "{}", r.stderr);
    let r = run(&[
        "fit",
        &format!("{ROOT}/demo-data/lot-check.csv"),
        "--library",
        "/no/such/lib",
    ]);
    assert_eq!(r.code, 1);
    assert!(
        r.stderr.contains("library folder /no/such/lib"),
        "{}",
        r.stderr
    );
}

#[test]
fn semicolon_decimal_comma_export_is_read() {
    let dir = tempdir("semicolon");
    let lib = unblend::reference::Library::open(Path::new(&library())).expect("library");
    let red = lib.get("ember-red").expect("shipped");
    let mut s = String::from("\u{feff}Sample;480;500;520;540\r\n");
    let vals: Vec<String> = [480.0, 500.0, 520.0, 540.0]
        .iter()
        .map(|w| format!("{:.6}", red.epsilon_at(*w).expect("inside") * 4e-6).replace('.', ","))
        .collect();
    s.push_str(&format!("r1;{}\r\n", vals.join(";")));
    let p = write(&dir, "semi.csv", s.as_bytes());
    let (r, rep) = fit_json(&p, &["--components", "ember-red", "--baseline", "none"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let c = rep.expect("json").samples[0].components[0].concentration_mol_per_l;
    assert!((c - 4e-6).abs() < 1e-9, "{c}");
}

/// More rows than one streaming chunk (2,048 lines), with a bad cell deep in
/// a later chunk: line numbers, order and counts stay right.
#[test]
fn long_files_stream_in_chunks_without_losing_rows_or_line_numbers() {
    let dir = tempdir("stream");
    let mut text = synthetic_wide(9000);
    // Row of sample s8500 is on line 8502 (header is line 1).
    let start = text.find("\ns8500,").expect("row present") + 1;
    let comma = start + text[start..].find(',').expect("fields");
    text.replace_range(comma + 1..comma + 1, "x");
    let p = write(&dir, "big.csv", text.as_bytes());
    let lib = library();
    let r = run_in(
        &dir,
        &["fit", &p, "--library", &lib, "--format", "json"],
        None,
        &[],
    );
    assert_eq!(r.code, 3, "{}", r.stderr);
    let rep: Report = serde_json::from_str(&r.stdout).expect("typed");
    assert_eq!(rep.samples.len(), 8999);
    assert_eq!(rep.failed.len(), 1);
    assert_eq!(rep.failed[0].sample, "s8500");
    assert!(
        rep.failed[0].error.starts_with("line 8502, column 2 ('x"),
        "{}",
        rep.failed[0].error
    );
    assert_eq!(rep.samples[8499].sample, "s8499");
    assert_eq!(rep.samples[8500].sample, "s8501");
    let csv = run_in(
        &dir,
        &["fit", &p, "--library", &lib, "--format", "csv"],
        None,
        &[],
    );
    assert_eq!(csv.stdout.lines().count(), 1 + 8999 * 3 + 1);
}
