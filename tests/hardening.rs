//! Hardening, round two (issue 19), run as the binary: no run writes over
//! its own input, outputs are replaced as whole sets, interrupts respect the
//! commit point, closed and full standard output end cleanly, endless or
//! odd inputs fail with located errors, absurd option values are refused.
//!
//! Every input here is invented or taken from the invented demo data.

mod common;

use common::{BIN, ROOT, Scratch};
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

/// A scratch folder for one test, removed when the test ends.
fn scratch(tag: &str) -> Scratch {
    Scratch::new(&format!("harden-{tag}"))
}

fn demo(name: &str) -> PathBuf {
    Path::new(ROOT).join("demo-data").join(name)
}

fn library() -> String {
    format!("{ROOT}/library")
}

fn run(dir: &Path, args: &[&str]) -> Output {
    Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .env_remove("UNBLEND_LIBRARY")
        .output()
        .expect("binary runs")
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// A refused run: exit 1, a message naming both roles, the input intact.
fn assert_refused(o: &Output, input: &Path, before: &[u8], roles: [&str; 2]) {
    let e = stderr(o);
    assert_eq!(o.status.code(), Some(1), "{e}");
    assert!(e.contains("is the same file as"), "{e}");
    for role in roles {
        assert!(e.contains(role), "'{role}' missing from: {e}");
    }
    assert_eq!(std::fs::read(input).expect("input still there"), before);
}

fn copy_demo(dir: &Path, from: &str, to: &str) -> (PathBuf, Vec<u8>) {
    let bytes = std::fs::read(demo(from)).expect("demo data");
    let path = dir.join(to);
    std::fs::write(&path, &bytes).expect("copy");
    (path, bytes)
}

#[test]
fn fit_refuses_an_output_that_is_its_input_by_any_path() {
    let dir = scratch("fit-same");
    let (input, before) = copy_demo(&dir, "lot-check.csv", "in.csv");
    #[cfg(unix)]
    std::os::unix::fs::symlink(&input, dir.join("link.csv")).expect("link");
    let lib = library();
    for (flag, path) in [
        ("--out", "in.csv"),
        ("--out", "./in.csv"),
        ("--out", "link.csv"),
        ("--report", "in.csv"),
    ] {
        let o = run(&dir, &["fit", "in.csv", "--library", &lib, flag, path]);
        assert_refused(&o, &input, &before, [flag, "input"]);
    }
    let o = run(
        &dir,
        &[
            "fit",
            "in.csv",
            "--library",
            &lib,
            "--out",
            "r.html",
            "--report",
            "r.html",
        ],
    );
    assert_refused(&o, &input, &before, ["--out", "--report"]);
}

#[test]
fn discover_calibrate_and_library_add_refuse_to_overwrite_an_input() {
    let dir = scratch("others-same");
    let lib = library();
    let (input, before) = copy_demo(&dir, "lot-check.csv", "in.csv");
    let o = run(
        &dir,
        &["discover", "in.csv", "--library", &lib, "--out", "in.csv"],
    );
    assert_refused(&o, &input, &before, ["--out", "input"]);

    let (std_path, std_before) = copy_demo(&dir, "calibration/saffron-standards.csv", "std.csv");
    let (conc, conc_before) = copy_demo(&dir, "calibration/saffron-concentrations.csv", "conc.csv");
    let cal = |out: &str| {
        let args = [
            "calibrate",
            "std.csv",
            "--concentrations",
            "conc.csv",
            "--name",
            "x",
        ];
        let mut args = args.to_vec();
        args.extend(["--library", "lib", "--out", out]);
        run(&dir, &args)
    };
    assert_refused(&cal("std.csv"), &std_path, &std_before, ["--out", "input"]);
    assert_refused(
        &cal("conc.csv"),
        &conc,
        &conc_before,
        ["--out", "--concentrations"],
    );

    // A spectrum kept inside the library under the component's file name.
    std::fs::create_dir_all(dir.join("lib")).expect("library folder");
    let (spectrum, sp_before) = copy_demo(&dir, "references/ember-red.csv", "lib/red.toml");
    let o = run(
        &dir,
        &[
            "library",
            "add",
            "red",
            "--spectrum",
            "lib/red.toml",
            "--library",
            "lib",
            "--replace",
        ],
    );
    assert_refused(&o, &spectrum, &sp_before, ["component file", "--spectrum"]);
}

#[test]
fn batch_refuses_inputs_and_maps_in_the_output_folder_under_an_output_name() {
    let dir = scratch("batch-same");
    let lib = library();
    let (input, before) = copy_demo(&dir, "lot-check.csv", "wells.csv");
    let o = run(
        &dir,
        &["batch", "wells.csv", "--library", &lib, "--out-dir", "."],
    );
    assert_refused(&o, &input, &before, ["wells.csv", "input"]);
    let (_, _) = copy_demo(&dir, "lot-check.csv", "in.csv");
    let map = dir.join("run.json");
    std::fs::write(&map, "well,role,sample\nA1,sample,s1\n").expect("map");
    let o = run(
        &dir,
        &[
            "batch",
            "in.csv",
            "--plate-map",
            "run.json",
            "--library",
            &lib,
            "--out-dir",
            ".",
        ],
    );
    assert_refused(
        &o,
        &map,
        b"well,role,sample\nA1,sample,s1\n",
        ["run.json", "--plate-map"],
    );
}

/// Start `fit` writing `--out out.csv --report r.html` over old files,
/// paused at `point`; wait until `ready` holds, send SIGINT, return the
/// output of the run.
#[cfg(unix)]
fn interrupt_fit(dir: &Path, point: &str, ready: impl Fn() -> bool) -> Output {
    let lib = library();
    let child = Command::new(BIN)
        .args([
            "fit",
            "in.csv",
            "--library",
            &lib,
            "--out",
            "out.csv",
            "--report",
            "r.html",
        ])
        .current_dir(dir)
        .env("UNBLEND_TEST_PAUSE", format!("{point}:3000"))
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary runs");
    let start = Instant::now();
    while !ready() && start.elapsed() < Duration::from_secs(60) {
        std::thread::sleep(Duration::from_millis(20));
    }
    let pid = child.id().to_string();
    let sent = Command::new("kill").args(["-INT", &pid]).status();
    assert!(sent.is_ok_and(|s| s.success()), "kill -INT failed");
    child.wait_with_output().expect("run ends")
}

#[cfg(unix)]
fn hidden(dir: &Path) -> Vec<String> {
    std::fs::read_dir(dir)
        .expect("folder")
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with('.'))
        .collect()
}

#[cfg(unix)]
#[test]
fn an_interrupt_before_the_commit_point_leaves_every_output_old() {
    let dir = scratch("int-before");
    copy_demo(&dir, "lot-check.csv", "in.csv");
    std::fs::write(dir.join("out.csv"), "old out\n").expect("old");
    std::fs::write(dir.join("r.html"), "old report\n").expect("old");
    let o = interrupt_fit(&dir, "before-commit", || hidden(&dir).len() >= 2);
    assert_eq!(o.status.code(), Some(130), "{}", stderr(&o));
    assert!(stderr(&o).contains("outputs left as they were"));
    assert_eq!(
        std::fs::read(dir.join("out.csv")).expect("out"),
        b"old out\n"
    );
    assert_eq!(
        std::fs::read(dir.join("r.html")).expect("report"),
        b"old report\n"
    );
    assert!(hidden(&dir).is_empty(), "{:?}", hidden(&dir));
}

#[cfg(unix)]
#[test]
fn an_interrupt_after_the_commit_point_lets_the_run_finish() {
    let dir = scratch("int-inside");
    copy_demo(&dir, "lot-check.csv", "in.csv");
    std::fs::write(dir.join("out.csv"), "old out\n").expect("old");
    std::fs::write(dir.join("r.html"), "old report\n").expect("old");
    // The set's first rename has happened once either output is new.
    let renamed = || {
        let changed =
            |name: &str, old: &[u8]| std::fs::read(dir.join(name)).is_ok_and(|b| b != old);
        changed("out.csv", b"old out\n") || changed("r.html", b"old report\n")
    };
    let o = interrupt_fit(&dir, "inside-commit", renamed);
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(0), "{e}");
    assert!(e.contains("finishing") && e.contains("wrote"), "{e}");
    assert!(!e.contains("left as they were"), "{e}");
    let out = std::fs::read_to_string(dir.join("out.csv")).expect("out");
    assert!(out.starts_with("sample"), "{out}");
    let report = std::fs::read_to_string(dir.join("r.html")).expect("report");
    assert!(report.contains("<html"), "new report expected");
    assert!(hidden(&dir).is_empty(), "{:?}", hidden(&dir));
}

#[cfg(unix)]
#[test]
fn a_batch_whose_last_rename_fails_keeps_the_whole_old_set() {
    let dir = scratch("batch-set");
    let lib = library();
    copy_demo(&dir, "lot-check.csv", "in.csv");
    let out = dir.join("out");
    std::fs::create_dir_all(&out).expect("out folder");
    std::fs::write(out.join("wells.csv"), "old wells\n").expect("old");
    // A non-empty folder where run-log.txt goes: that rename fails after
    // wells.csv, samples.csv and run.json have been renamed.
    std::fs::create_dir_all(out.join("run-log.txt").join("x")).expect("blocker");
    let o = run(
        &dir,
        &["batch", "in.csv", "--library", &lib, "--out-dir", "out"],
    );
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{e}");
    assert!(e.contains("outputs left as they were"), "{e}");
    assert_eq!(
        std::fs::read(out.join("wells.csv")).expect("wells"),
        b"old wells\n"
    );
    assert!(!out.join("samples.csv").exists() && !out.join("run.json").exists());
    assert!(hidden(&out).is_empty(), "{:?}", hidden(&out));
}

#[cfg(target_os = "linux")]
#[test]
fn a_killed_runs_temporaries_are_removed_by_the_next_run() {
    let dir = scratch("stale");
    copy_demo(&dir, "lot-check.csv", "in.csv");
    // A finished child's pid stands for a run killed with SIGKILL.
    let mut child = Command::new("true").spawn().expect("true runs");
    let dead = child.id();
    child.wait().expect("true ends");
    let stale = dir.join(format!(".out.csv.tmp-{dead}-Ab3dE6gH9k"));
    std::fs::write(&stale, "half a results file").expect("stale temporary");
    let o = run(
        &dir,
        &["fit", "in.csv", "--library", &library(), "--out", "out.csv"],
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert!(!stale.exists(), "the killed run's temporary is gone");
}

/// Run with standard output closed before anything is written (a reader
/// that stopped, as `| head` does).
#[cfg(unix)]
fn with_closed_stdout(dir: &Path, args: &[&str]) -> Output {
    let mut child = Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary runs");
    drop(child.stdout.take());
    child.wait_with_output().expect("run ends")
}

#[cfg(unix)]
#[test]
fn a_closed_stdout_ends_quietly_and_a_full_one_fails() {
    let dir = scratch("stdout");
    let lib = library();
    let input = demo("lot-check.csv");
    let input = input.to_str().expect("utf-8 path");
    let commands: [&[&str]; 5] = [
        &["library", "list", "--library", &lib],
        &["library", "show", "ember-red", "--library", &lib],
        &["demo", "--out-dir", "demo-out"],
        &["fit", input, "--library", &lib, "--format", "json"],
        &["fit", input, "--library", &lib, "--format", "csv"],
    ];
    for args in commands {
        let o = with_closed_stdout(&dir, args);
        let e = stderr(&o);
        assert_eq!(o.status.code(), Some(0), "{args:?}: {e}");
        assert!(
            !e.contains("panicked") && !e.contains("Broken pipe"),
            "{args:?}: {e}"
        );
        let full = std::fs::File::create("/dev/full").expect("/dev/full (Linux)");
        let o = Command::new(BIN)
            .args(args)
            .current_dir(&dir)
            .stdout(full)
            .output()
            .expect("binary runs");
        let e = stderr(&o);
        assert_eq!(o.status.code(), Some(1), "{args:?}: {e}");
        assert!(
            e.contains("standard output") && !e.contains("panicked"),
            "{args:?}: {e}"
        );
    }
}

#[cfg(target_os = "linux")]
#[test]
fn endless_input_and_odd_library_entries_fail_cleanly() {
    let dir = scratch("endless");
    let o = run(&dir, &["fit", "/dev/zero", "--library", &library()]);
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{e}");
    assert!(e.contains("line 1 is longer than 64 MiB"), "{e}");

    // A library holding a FIFO and a link to /dev/zero beside a real file.
    let lib = dir.join("lib");
    std::fs::create_dir_all(&lib).expect("library");
    std::fs::copy(
        format!("{ROOT}/library/ember-red.toml"),
        lib.join("ember-red.toml"),
    )
    .expect("component");
    let made = Command::new("mkfifo").arg(lib.join("pipe.toml")).status();
    assert!(made.is_ok_and(|s| s.success()), "mkfifo");
    std::os::unix::fs::symlink("/dev/zero", lib.join("zero.toml")).expect("link");
    let mut child = Command::new(BIN)
        .args(["library", "list", "--library", "lib"])
        .current_dir(&dir)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary runs");
    let start = Instant::now();
    while child.try_wait().expect("wait").is_none() {
        if start.elapsed() > Duration::from_secs(30) {
            let _ = child.kill();
            panic!("library list hangs on a FIFO in the library");
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    let o = child.wait_with_output().expect("output");
    let (out, e) = (String::from_utf8_lossy(&o.stdout), stderr(&o));
    assert_eq!(o.status.code(), Some(0), "{e}");
    assert!(out.contains("ember-red"), "{out}");
    assert!(e.contains("pipe.toml") && e.contains("zero.toml"), "{e}");
}

#[test]
fn absurd_and_negative_option_values_are_refused_with_the_range() {
    let dir = scratch("ranges");
    let input = demo("lot-check.csv");
    let input = input.to_str().expect("utf-8 path");
    let lib = library();
    for value in ["1e-320", "-1", "20000"] {
        let o = run(
            &dir,
            &["fit", input, "--library", &lib, "--pathlength-cm", value],
        );
        let e = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{value}: {e}");
        assert!(e.contains("1 µm to 10 m"), "{value}: {e}");
    }
    let o = run(
        &dir,
        &["fit", input, "--library", &lib, "--range-nm", "10:700"],
    );
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(2), "{e}");
    assert!(e.contains("100 to 25,000 nm"), "{e}");
}

#[test]
fn usage_errors_exit_2_and_out_dash_is_standard_output() {
    let dir = scratch("usage");
    let input = demo("lot-check.csv");
    let input = input.to_str().expect("utf-8 path");
    let lib = library();
    let plot = ["fit", input, "--library", &lib, "--plot", "x.jpg"];
    let curves = ["fit", input, "--library", &lib, "--with-curves"];
    for args in [&plot[..], &curves[..]] {
        let o = run(&dir, args);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {}", stderr(&o));
    }
    let o = run(
        &dir,
        &[
            "fit",
            input,
            "--library",
            &lib,
            "--format",
            "csv",
            "--out",
            "-",
        ],
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert!(String::from_utf8_lossy(&o.stdout).starts_with("sample,component,"));
    assert!(!dir.join("-").exists(), "no file named '-'");
}

#[test]
fn formula_like_names_are_neutralised_in_csv_and_kept_in_json() {
    // OWASP "CSV Injection" lists = + - @ tab and carriage return as the
    // characters that start a formula, with a leading single quote as the
    // usual neutraliser.
    let dir = scratch("formula");
    let lot = std::fs::read_to_string(demo("lot-check.csv")).expect("demo");
    let mut lines = lot.lines();
    let header = lines.next().expect("header");
    let row = lines.next().expect("a row");
    let values = row.split_once(',').expect("sample column").1;
    let text =
        format!("{header}\n\"=HYPERLINK(\"\"x\"\")\",{values}\n+cmd,{values}\n@sum,{values}\n");
    std::fs::write(dir.join("in.csv"), text).expect("input");
    let lib = library();
    let o = run(
        &dir,
        &["fit", "in.csv", "--library", &lib, "--format", "csv"],
    );
    let csv = String::from_utf8_lossy(&o.stdout);
    assert!(csv.contains("\n\"'=HYPERLINK(\"\"x\"\")\","), "{csv}");
    assert!(
        csv.contains("\n'+cmd,") && csv.contains("\n'@sum,"),
        "{csv}"
    );
    let o = run(
        &dir,
        &["fit", "in.csv", "--library", &lib, "--format", "json"],
    );
    let json: serde_json::Value = serde_json::from_slice(&o.stdout).expect("json");
    let text = json.to_string();
    assert!(
        text.contains("\"+cmd\"") && !text.contains("'+cmd"),
        "{text}"
    );
}

#[test]
fn a_long_files_rows_may_come_in_any_order() {
    // The README: "a sample's rows may be anywhere in the file and in any
    // wavelength order". Each sample's rows are permuted (i·7919 mod n, a
    // fixed shuffle); the results must equal those of the ordered file.
    let dir = scratch("long-order");
    let text = std::fs::read_to_string(demo("lot-check-long.csv")).expect("demo");
    let mut lines = text.lines();
    let header = lines.next().expect("header");
    let mut groups: Vec<(String, Vec<&str>)> = Vec::new();
    for line in lines.filter(|l| !l.is_empty()) {
        let sample = line.split(',').next().expect("sample").to_string();
        match groups.last_mut() {
            Some((s, rows)) if *s == sample => rows.push(line),
            _ => groups.push((sample, vec![line])),
        }
    }
    let mut shuffled = format!("{header}\n");
    for (_, rows) in &groups {
        let n = rows.len();
        let mut order: Vec<usize> = (0..n).collect();
        order.sort_by_key(|&i| (i * 7919) % n);
        for i in order {
            shuffled.push_str(rows[i]);
            shuffled.push('\n');
        }
    }
    std::fs::write(dir.join("shuffled.csv"), shuffled).expect("shuffled file");
    let lib = library();
    let ordered = demo("lot-check-long.csv");
    let ordered = ordered.to_str().expect("utf-8 path");
    let a = run(
        &dir,
        &["fit", ordered, "--library", &lib, "--format", "csv"],
    );
    let b = run(
        &dir,
        &["fit", "shuffled.csv", "--library", &lib, "--format", "csv"],
    );
    assert_eq!(b.status.code(), a.status.code(), "{}", stderr(&b));
    assert!(!a.stdout.is_empty());
    assert_eq!(a.stdout, b.stdout);
}

#[test]
fn report_refuses_a_results_file_whose_curves_disagree() {
    // The regression kept for the `report` fuzz target: a fit results file
    // whose first residual is two points short (report panicked, exit 101).
    let dir = scratch("report-check");
    let bad = Path::new(ROOT).join("tests/fuzz/regressions/report/unequal-curve-lengths.json");
    std::fs::copy(&bad, dir.join("bad.json")).expect("copy");
    let o = run(&dir, &["report", "bad.json", "--out", "r.html"]);
    let e = stderr(&o);
    assert_eq!(o.status.code(), Some(1), "{e}");
    assert!(
        e.contains("curves entry 1 (sample '") && e.contains("residual_au has"),
        "{e}"
    );
    assert!(!dir.join("r.html").exists());
    let good = Path::new(ROOT).join("tests/fuzz/corpus/report/fit-with-curves.json");
    std::fs::copy(&good, dir.join("good.json")).expect("copy");
    let o = run(&dir, &["report", "good.json", "--out", "good.json"]);
    assert_refused(
        &o,
        &dir.join("good.json"),
        &std::fs::read(&good).expect("seed"),
        ["--out", "results"],
    );
}
