//! The HTML report and SVG figures, run through the real binary: structure
//! (plain Rust, always runs) and, where Debian's `chromium` is installed, a
//! headless render with a screenshot and a console check.

mod common;

use common::{ROOT, Scratch, run_in};
use serde::Deserialize;
use std::path::Path;
/// The demo has 19 spectra (demo-data/lot-check.csv, invented), all fitted.
const DEMO_SAMPLES: usize = 19;

/// The parts of the results JSON the report reads, typed.
#[derive(Debug, Deserialize)]
struct Results {
    samples: Vec<Sample>,
    curves: Option<Vec<Curves>>,
}

#[derive(Debug, Deserialize)]
struct Sample {
    sample: String,
}

#[derive(Debug, Deserialize)]
struct Curves {
    sample: String,
    wavelengths_nm: Vec<f64>,
    measured_au: Vec<f64>,
    fitted_au: Vec<f64>,
    baseline_au: Vec<f64>,
    contributions_au: Vec<Contribution>,
    residual_au: Vec<f64>,
    noise_au: Option<f64>,
    masked: Vec<bool>,
}

#[derive(Debug, Deserialize)]
struct Contribution {
    name: String,
    au: Vec<f64>,
}

fn tempdir(name: &str) -> Scratch {
    Scratch::new(&format!("report-{name}"))
}

fn run(dir: &Path, args: &[&str]) -> (i32, String, String) {
    let r = run_in(dir, args, None, &[]);
    (r.code, r.stdout, r.stderr)
}

/// Checks any report must pass: one document, figures closed, nothing
/// fetched from elsewhere, no scripts, every sample linked to its section.
fn check_self_contained(html: &str, n_figures: usize, n_samples: usize) {
    assert!(html.starts_with("<!DOCTYPE html>"));
    assert!(html.trim_end().ends_with("</html>"));
    assert_eq!(html.matches("<svg").count(), n_figures);
    assert_eq!(html.matches("</svg>").count(), n_figures);
    assert!(!html.contains("<script"), "no scripts");
    assert!(!html.contains(" src="), "no external images or scripts");
    assert!(!html.contains("<link"), "no external stylesheets or fonts");
    assert!(!html.contains("@import") && !html.contains("url("));
    // The only URL is the SVG namespace name, which is never fetched.
    let urls = html.matches("http").count();
    assert_eq!(urls, html.matches("http://www.w3.org/2000/svg").count());
    for n in 1..=n_samples {
        assert!(html.contains(&format!("href=\"#sample-{n}\"")));
        assert!(html.contains(&format!("id=\"sample-{n}\"")));
    }
}

#[test]
fn demo_report_has_one_figure_per_sample_and_curves_that_add_up() {
    /// Sums of a few numbers of order 1 printed by ryu round-trip exactly;
    /// allow rounding in the sum.
    const TOL_AU: f64 = 1e-9;
    let dir = tempdir("demo");
    let (code, stdout, stderr) = run(&dir, &["demo"]);
    assert_eq!(code, 0, "{stderr}");
    assert!(stdout.trim_end().ends_with("unblend-demo/report.html"));
    let html = std::fs::read_to_string(dir.join("unblend-demo/report.html")).expect("report");
    check_self_contained(&html, DEMO_SAMPLES, DEMO_SAMPLES);
    for name in ["fjord-blue", "saffron-yellow", "ember-red", "lot-2615-a"] {
        assert!(html.contains(name));
    }
    // The lot-2615 replicates are saturated in the blue band: masked points shown.
    assert!(html.contains("masked ("));
    assert!(html.contains("±2σ noise band"));
    let json = std::fs::read_to_string(dir.join("unblend-demo/results.json")).expect("json");
    let res: Results = serde_json::from_str(&json).expect("typed JSON");
    let curves = res.curves.expect("the demo writes curves");
    assert_eq!(curves.len(), res.samples.len());
    for (c, s) in curves.iter().zip(&res.samples) {
        assert_eq!(c.sample, s.sample);
        let n = c.wavelengths_nm.len();
        assert!(n > 0);
        for v in [&c.measured_au, &c.fitted_au, &c.baseline_au, &c.residual_au] {
            assert_eq!(v.len(), n);
        }
        assert_eq!(c.masked.len(), n);
        assert_eq!(c.contributions_au.len(), 3);
        assert!(c.noise_au.is_some_and(|s| s > 0.0));
        for i in 0..n {
            let sum: f64 =
                c.baseline_au[i] + c.contributions_au.iter().map(|k| k.au[i]).sum::<f64>();
            assert!((sum - c.fitted_au[i]).abs() < TOL_AU, "{} at {i}", c.sample);
            let r = c.measured_au[i] - c.fitted_au[i];
            assert!((r - c.residual_au[i]).abs() < TOL_AU);
        }
        assert!(c.contributions_au.iter().all(|k| !k.name.is_empty()));
    }
    let masked = curves
        .iter()
        .find(|c| c.sample == "lot-2615-a")
        .expect("lot-2615-a");
    assert!(masked.masked.iter().any(|m| *m));
    // `unblend report` rebuilds the same report from the JSON.
    let out = dir.join("again.html");
    let (code, _, stderr) = run(
        &dir,
        &[
            "report",
            "unblend-demo/results.json",
            "--out",
            out.to_str().unwrap(),
        ],
    );
    assert_eq!(code, 0, "{stderr}");
    let again = std::fs::read_to_string(&out).expect("report");
    check_self_contained(&again, DEMO_SAMPLES, DEMO_SAMPLES);
}

#[test]
fn report_from_plain_json_has_tables_and_says_the_curves_are_missing() {
    let dir = tempdir("plain");
    let input = format!("{ROOT}/demo-data/lot-check.csv");
    let lib = format!("{ROOT}/library");
    let (code, _, stderr) = run(
        &dir,
        &[
            "fit",
            &input,
            "--library",
            &lib,
            "--format",
            "json",
            "--out",
            "r.json",
        ],
    );
    assert_eq!(code, 0, "{stderr}");
    let plain = std::fs::read_to_string(dir.join("r.json")).unwrap();
    assert!(!plain.contains("\"curves\""), "default JSON unchanged");
    let (code, _, stderr) = run(&dir, &["report", "r.json"]);
    assert_eq!(code, 0, "{stderr}");
    assert!(stderr.contains("no fit curves"), "{stderr}");
    assert!(stderr.contains("--with-curves"), "{stderr}");
    let html = std::fs::read_to_string(dir.join("r.html")).expect("default name");
    check_self_contained(&html, 0, DEMO_SAMPLES);
    assert!(html.contains("lot-2611-a"));
}

#[test]
fn fit_writes_report_plot_and_curves_and_rejects_bad_requests() {
    let dir = tempdir("fit");
    let input = format!("{ROOT}/demo-data/lot-check.csv");
    let lib = format!("{ROOT}/library");
    let (code, stdout, stderr) = run(
        &dir,
        &[
            "fit",
            &input,
            "--library",
            &lib,
            "--report",
            "fit.html",
            "--plot",
            "one.svg",
            "--plot-sample",
            "lot-2612-b",
        ],
    );
    assert_eq!(code, 0, "{stderr}");
    assert!(stdout.contains("lot-2611-a"), "table still printed");
    let html = std::fs::read_to_string(dir.join("fit.html")).unwrap();
    check_self_contained(&html, DEMO_SAMPLES, DEMO_SAMPLES);
    assert!(html.contains("pathlength"));
    let svg = std::fs::read_to_string(dir.join("one.svg")).unwrap();
    assert!(svg.starts_with("<?xml"));
    assert_eq!(svg.matches("<svg").count(), 1);
    assert!(svg.contains("fit of lot-2612-b"));
    // Curves in JSON on request.
    let (code, stdout, stderr) = run(
        &dir,
        &[
            "fit",
            &input,
            "--library",
            &lib,
            "--format",
            "json",
            "--with-curves",
        ],
    );
    assert_eq!(code, 0, "{stderr}");
    let res: Results = serde_json::from_str(&stdout).expect("typed JSON");
    assert_eq!(res.curves.map(|c| c.len()), Some(DEMO_SAMPLES));
    // A PNG figure: the extension picks the format; twice the SVG's size.
    let (code, _, stderr) = run(&dir, &["fit", &input, "--library", &lib, "--plot", "x.png"]);
    assert_eq!(code, 0, "{stderr}");
    let png = std::fs::read(dir.join("x.png")).unwrap();
    assert!(common::chromium::is_png(&png));
    // IHDR width and height, big-endian u32 (ISO/IEC 15948, section 11.2.2).
    assert_eq!(u32::from_be_bytes(png[16..20].try_into().unwrap()), 1520);
    assert_eq!(u32::from_be_bytes(png[20..24].try_into().unwrap()), 860);
    // Bad requests say what was expected.
    // Options that do not go together are usage errors: exit 2 (issue 19).
    let (code, _, stderr) = run(&dir, &["fit", &input, "--library", &lib, "--plot", "x.jpg"]);
    assert_eq!(code, 2);
    assert!(stderr.contains(".svg or .png"), "{stderr}");
    assert!(!dir.join("x.jpg").exists());
    // Nothing fitted: the message says why, with the sample's own error.
    std::fs::write(
        dir.join("bad.csv"),
        "sample,400,410,420,430,440,450\ns1,0.1,abc,0.1,0.1,0.1,0.1\n",
    )
    .unwrap();
    let (code, _, stderr) = run(
        &dir,
        &["fit", "bad.csv", "--library", &lib, "--plot", "b.png"],
    );
    assert_eq!(code, 1);
    assert!(stderr.contains("line 2, column 3 ('abc')"), "{stderr}");
    assert!(!dir.join("b.png").exists());
    let (code, _, stderr) = run(&dir, &["fit", &input, "--library", &lib, "--with-curves"]);
    assert_eq!(code, 2);
    assert!(stderr.contains("--format json"), "{stderr}");
    let (code, _, stderr) = run(
        &dir,
        &[
            "fit",
            &input,
            "--library",
            &lib,
            "--plot",
            "y.svg",
            "--plot-sample",
            "nope",
        ],
    );
    assert_eq!(code, 1);
    assert!(stderr.contains("'nope'"), "{stderr}");
    std::fs::write(dir.join("bad.json"), "{\"tool\": 3}").unwrap();
    let (code, _, stderr) = run(&dir, &["report", "bad.json"]);
    assert_eq!(code, 1);
    assert!(stderr.contains("bad.json: line 1"), "{stderr}");
}

/// Headless Chromium (Debian package `chromium`) renders the demo report:
/// the DOM holds one `<svg` per sample, a screenshot is written, and the
/// browser logs no console message (the page has no scripts, so any
/// console line would be a load or parse error). Skipped, with a message,
/// where Chromium is not installed; `.ci/run` installs it when it can.
#[test]
fn demo_report_renders_in_headless_chromium() {
    let Some(chromium) = common::chromium::find() else {
        eprintln!("skipped: chromium is not installed (the structural report tests still ran)");
        return;
    };
    let dir = tempdir("chromium");
    let (code, _, stderr) = run(&dir, &["demo"]);
    assert_eq!(code, 0, "{stderr}");
    let page = common::chromium::render(chromium, &dir.join("unblend-demo/report.html"), &dir);
    // One figure per sample; the demo is not a plate run, so no plate maps.
    assert_eq!(page.dom.matches("<svg").count(), DEMO_SAMPLES);
    assert!(
        page.console.is_empty(),
        "console messages: {:?}",
        page.console
    );
    assert!(common::chromium::is_png(&page.png));
}

#[test]
fn library_check_report_overlays_the_references_and_lists_the_pairs() {
    let dir = tempdir("check");
    let lib = format!("{ROOT}/library");
    let (code, _, stderr) = run(
        &dir,
        &[
            "library",
            "check",
            "--library",
            &lib,
            "--report",
            "check.html",
        ],
    );
    assert_eq!(code, 0, "{stderr}");
    let html = std::fs::read_to_string(dir.join("check.html")).expect("check report");
    check_self_contained(&html, 1, 0);
    // One curve per demo reference, and the three pairs of three components.
    assert_eq!(html.matches("<polyline").count(), 3);
    for name in ["fjord-blue", "saffron-yellow", "ember-red"] {
        assert!(html.contains(name));
    }
    assert_eq!(html.matches(" / ").count(), 3);
    assert!(html.contains("LOD"));
}
