//! Failure never loses data (issue 6, item 4), run as the binary:
//! an interrupted `fit --out` leaves the previous output as it was and no
//! temporary file; a library write that fails leaves the library as it was;
//! concurrent `library add` runs never leave a corrupt component file.

mod common;

use common::{BIN, ROOT, Scratch};
use std::io::Write;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn tempdir(tag: &str) -> Scratch {
    Scratch::new(&format!("loss-{tag}"))
}

/// Names of the atomic writer's temporary files (`.<name>.tmp-<pid>-<n>`) in `dir`.
fn temp_files(dir: &Path) -> Vec<String> {
    std::fs::read_dir(dir)
        .expect("dir readable")
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.contains(".tmp-"))
        .collect()
}

fn unblend(dir: &Path, args: &[&str]) -> std::process::Output {
    Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .env_remove("UNBLEND_LIBRARY")
        .output()
        .expect("binary runs")
}

fn demo_row(i: usize) -> String {
    // Absorbances on 560–640 nm in 20 nm steps (invented values).
    let a = 0.1 + 0.001 * (i % 50) as f64;
    format!("s{i},{a},{},{},{},{a}\n", a + 0.1, a + 0.2, a + 0.1)
}

#[test]
fn sigint_during_fit_out_leaves_the_previous_output_and_no_temp_file() {
    let dir = tempdir("sigint");
    let out = dir.join("results.csv");
    let previous = "previous results, kept\n";
    std::fs::write(&out, previous).expect("write previous output");
    let lib = format!("{ROOT}/library");
    let mut child = Command::new(BIN)
        .args(["fit", "-", "--library", &lib, "--format", "csv", "--out"])
        .arg(&out)
        .current_dir(&dir)
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary starts");
    let mut stdin = child.stdin.take().expect("piped");
    let mut text = String::from("sample,560,580,600,620,640\n");
    // Several of the reader's 1 MiB reads (src/input/spectra.rs), so the fit
    // starts writing before the input ends.
    for i in 0..100_000 {
        text.push_str(&demo_row(i));
    }
    stdin.write_all(text.as_bytes()).expect("stdin written");
    stdin.flush().expect("stdin flushed");
    // The run is now mid-way: it has rows, the input is still open, and the
    // temporary output file exists. Wait for it (bounded), then interrupt.
    let start = Instant::now();
    while temp_files(&dir).is_empty() && start.elapsed() < Duration::from_secs(30) {
        std::thread::sleep(Duration::from_millis(20));
    }
    assert!(
        !temp_files(&dir).is_empty(),
        "the run never started its output"
    );
    let status = Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .expect("kill runs");
    assert!(status.success());
    let done = child.wait_with_output().expect("child ends");
    drop(stdin);
    assert!(
        !done.status.success(),
        "an interrupted run must not report success"
    );
    assert_eq!(
        std::fs::read_to_string(&out).expect("output still there"),
        previous,
        "the previous output was changed"
    );
    assert!(
        temp_files(&dir).is_empty(),
        "temporary files left behind: {:?}",
        temp_files(&dir)
    );
}

fn eps_table(dir: &Path, name: &str, scale: f64) -> String {
    let mut csv = String::from("wavelength_nm,epsilon\n");
    for i in 0..=30 {
        let x = 400.0 + 10.0 * f64::from(i);
        let e = scale * (-0.5 * ((x - 550.0) / 40.0_f64).powi(2)).exp();
        csv.push_str(&format!("{x},{e}\n"));
    }
    let p = dir.join(format!("{name}.csv"));
    std::fs::write(&p, csv).expect("write ε table");
    p.display().to_string()
}

/// Every file in the library folder, with its bytes.
fn snapshot(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut v: Vec<_> = std::fs::read_dir(dir)
        .expect("library readable")
        .filter_map(|e| e.ok())
        .filter(|e| e.path().is_file())
        .map(|e| {
            (
                e.file_name().to_string_lossy().into_owned(),
                std::fs::read(e.path()).expect("file readable"),
            )
        })
        .collect();
    v.sort();
    v
}

#[test]
fn a_library_write_that_fails_leaves_the_library_as_it_was() {
    let dir = tempdir("failwrite");
    let table = eps_table(&dir, "violet", 1000.0);
    let r = unblend(
        &dir,
        &[
            "library",
            "add",
            "violet",
            "--spectrum",
            &table,
            "--library",
            "lib",
        ],
    );
    assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
    let lib = dir.join("lib");
    // A directory where the new component file must go: the rename fails
    // even for root (whom a read-only folder would not stop).
    std::fs::create_dir(lib.join("amber.toml")).expect("blocking dir");
    let before = snapshot(&lib);
    let table = eps_table(&dir, "amber", 2000.0);
    for extra in [&[][..], &["--replace"][..]] {
        let mut args = vec![
            "library",
            "add",
            "amber",
            "--spectrum",
            &table,
            "--library",
            "lib",
        ];
        args.extend_from_slice(extra);
        let r = unblend(&dir, &args);
        let stderr = String::from_utf8_lossy(&r.stderr);
        assert_eq!(r.status.code(), Some(1), "{stderr}");
        assert!(
            stderr.contains("amber.toml"),
            "the error names the file: {stderr}"
        );
        assert!(!stderr.contains("panicked"), "{stderr}");
        assert_eq!(snapshot(&lib), before, "the library changed ({extra:?})");
        assert!(temp_files(&lib).is_empty(), "{:?}", temp_files(&lib));
    }
    // Replacing an existing component whose write fails keeps the old file:
    // a read-only folder (skipped when running as root, where permissions do
    // not stop writes).
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&lib, std::fs::Permissions::from_mode(0o555)).expect("chmod");
        let probe = std::fs::write(lib.join("probe"), b"x").is_err();
        if probe {
            let table = eps_table(&dir, "violet2", 3000.0);
            let r = unblend(
                &dir,
                &[
                    "library",
                    "add",
                    "violet",
                    "--spectrum",
                    &table,
                    "--library",
                    "lib",
                    "--replace",
                ],
            );
            assert_eq!(r.status.code(), Some(1));
            assert_eq!(snapshot(&lib), before, "the library changed (read-only)");
        } else {
            let _ = std::fs::remove_file(lib.join("probe"));
        }
        std::fs::set_permissions(&lib, std::fs::Permissions::from_mode(0o755)).expect("chmod");
    }
}

#[test]
fn concurrent_library_adds_never_corrupt_a_component() {
    let dir = tempdir("concurrent");
    let tables: Vec<String> = (0..6)
        .map(|i| eps_table(&dir, &format!("t{i}"), 1000.0 * f64::from(i + 1)))
        .collect();
    let spawn = |args: Vec<String>| {
        Command::new(BIN)
            .args(&args)
            .current_dir(&dir)
            .env_remove("UNBLEND_LIBRARY")
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .expect("binary starts")
    };
    let add = |name: &str, table: &str, replace: bool| {
        let mut a: Vec<String> = [
            "library",
            "add",
            name,
            "--spectrum",
            table,
            "--library",
            "lib",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        if replace {
            a.push("--replace".into());
        }
        a
    };
    let mut children = Vec::new();
    // Six runs race for one new name without --replace, six with it, and six
    // add distinct names, all at once.
    for t in &tables {
        children.push(("same", spawn(add("shared", t, false))));
        children.push(("replace", spawn(add("replaced", t, true))));
    }
    for (i, t) in tables.iter().enumerate() {
        children.push(("distinct", spawn(add(&format!("own-{i}"), t, false))));
    }
    let mut wins = std::collections::HashMap::new();
    for (kind, child) in children {
        let out = child.wait_with_output().expect("child ends");
        let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
        assert!(!stderr.contains("panicked"), "{stderr}");
        if out.status.success() {
            *wins.entry(kind).or_insert(0) += 1;
        } else {
            assert_eq!(kind, "same", "only the no-replace race may lose: {stderr}");
            assert!(stderr.contains("already exists"), "{stderr}");
        }
    }
    assert_eq!(
        wins.get("same"),
        Some(&1),
        "exactly one run creates 'shared'"
    );
    assert_eq!(wins.get("replace"), Some(&6));
    assert_eq!(wins.get("distinct"), Some(&6));
    let lib = dir.join("lib");
    assert!(temp_files(&lib).is_empty(), "{:?}", temp_files(&lib));
    // Every file is whole: the library opens and shows each component.
    let r = unblend(&dir, &["library", "list", "--library", "lib"]);
    assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
    for name in ["shared", "replaced", "own-0", "own-5"] {
        let r = unblend(&dir, &["library", "show", name, "--library", "lib"]);
        assert!(
            r.status.success(),
            "{name}: {}",
            String::from_utf8_lossy(&r.stderr)
        );
    }
}
