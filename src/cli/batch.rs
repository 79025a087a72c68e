//! `unblend batch`: plate-reader runs: plate maps, blanks, pathlengths,
//! dilutions, replicates; per-well and per-sample results.

use super::common::{ModelArgs, References, hex, parse_positive, screening_candidates};
use super::diagnostic_args::DiagnosticArgs;
use super::{Failure, exit};
use crate::atomic::AtomicFile;
use crate::batch::run::{self, Event, InputSummary, RunSpec};
use crate::batch::{BatchOptions, Models, PlateResult, WaterBand};
use crate::fit::FitOptions;
use crate::guard::Named;
use crate::input::platemap::{self, PlateMap};
use crate::output::batch::{RenderedPlate, SAMPLES_HEADER, WELLS_HEADER, render_plate_with};
use crate::reference::{Library, ReferenceSet};
use crate::report::plates::{PlateReport, RunHead};
use sha2::{Digest, Sha256};
use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

const AFTER_HELP: &str = "\
Inputs: the plate-grid layout (blocks headed `wavelength_nm=<nm>`, a grid of rows A–P and
columns 1–24 under each), or the wide and long layouts of `fit` with well identifiers
(`A1`, or `plate1:A1`) as sample names. See the README for the layouts and the plate map.

Outputs in --out-dir: wells.csv (per well and component), samples.csv (per sample and
component: mean, SD, CV% of the undiluted concentration), run.json (everything), and
run-log.txt (inputs with SHA-256, components, options, version). All are written under
temporary names and renamed only when the run is complete.

Exit codes:
  0  success
  1  failure: nothing was fitted or written (bad plate map, library or option, or no input
     could be read)
  2  command-line usage error
  3  partial: some files, plates or wells could not be read or fitted (listed in the
     outputs with their errors); the rest were

Results are decision support, not a certified analysis.";

/// Fit every well of one or more plates; blanks, pathlengths, dilutions and
/// replicates from a plate map.
#[derive(Debug, clap::Args)]
#[command(after_help = AFTER_HELP)]
pub struct Args {
    /// Input files (plate-grid, wide or long layout); `-` reads standard input.
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// Plate map CSV `well,role,sample,dilution,pathlength_cm` (role: blank, sample,
    /// standard, empty; optional `plate` column). Without it every well is a sample.
    #[arg(long, value_name = "MAP.csv")]
    pub plate_map: Option<PathBuf>,
    /// The references and the model fitted.
    #[command(flatten)]
    pub model: ModelArgs,
    /// Pathlength of each well from the near-infrared water band:
    /// l = (A(977 nm) − A(900 nm)) / --water-au-per-cm, from the reading before blank
    /// subtraction. The map's pathlength_cm, where given, wins.
    #[arg(long)]
    pub pathlength_from_water: bool,
    /// A(977 nm) − A(900 nm) of 1 cm of water, AU/cm (about 0.18 at room temperature;
    /// it depends on temperature).
    #[arg(long, default_value = "0.18", value_parser = parse_positive, value_name = "AU_PER_CM")]
    pub water_au_per_cm: f64,
    /// A word your instrument prints for a reading above its range (the word it shows for overflow); such readings are saturated points, masked. `>N` and `inf` are always read so. Repeat for several words.
    #[arg(long = "overflow-marker", value_name = "TEXT")]
    pub overflow_marker: Vec<String>,
    /// Significance level of the outlier tests (Grubbs, two-sided) on replicates and blanks.
    #[arg(long, default_value = "0.05", value_parser = parse_alpha, value_name = "ALPHA")]
    pub outlier_alpha: f64,
    /// Keep wells flagged as outliers in the blank and the replicate statistics.
    #[arg(long)]
    pub keep_outliers: bool,
    /// Folder for the outputs (created if missing; existing files are replaced).
    #[arg(long, default_value = "unblend-batch", value_name = "DIR")]
    pub out_dir: PathBuf,
    /// Never show the progress bar (it only shows when stderr is a terminal).
    #[arg(long)]
    pub no_progress: bool,
    /// Library folder of candidate components to try on flagged wells (one extra component at a time, F-test).
    #[arg(long, value_name = "DIR")]
    pub screen_with: Option<PathBuf>,
    /// Also write a self-contained HTML report: per plate a heatmap of each component's
    /// concentration and a map of well states and flags, linked to each well's fit figure.
    #[arg(long, value_name = "FILE.html")]
    pub report: Option<PathBuf>,
    /// Add each fitted well's curves (measured, fitted, contributions, residual; AU) to
    /// run.json, so `unblend report run.json` can draw the fit figures later.
    #[arg(long)]
    pub with_curves: bool,
    /// Residual tests and saturation masking (as in `fit`).
    #[command(flatten)]
    pub checks: DiagnosticArgs,
}

/// The residual checks the flags ask for, with `--screen-with` candidates.
fn checks(args: &Args) -> Result<crate::diagnostics::Options, Failure> {
    let mut checks = args.checks.options();
    if let Some(dir) = &args.screen_with {
        checks.candidates = Some(screening_candidates(
            dir,
            args.checks.no_diagnostics,
            "wells",
        )?);
    }
    Ok(checks)
}

/// The names of the four output files in `--out-dir`.
const OUTPUT_NAMES: [&str; 4] = ["wells.csv", "samples.csv", "run.json", "run-log.txt"];

/// Refuse a run whose outputs (in `--out-dir`, and `--report`) include an
/// input file or the plate map, before anything is read.
fn refuse_overwriting_inputs(args: &Args) -> Result<(), Failure> {
    let paths: Vec<PathBuf> = OUTPUT_NAMES.iter().map(|n| args.out_dir.join(n)).collect();
    let mut outputs: Vec<Named> = paths.iter().map(|p| Named::new("output", p)).collect();
    outputs.extend(crate::guard::given(&[("--report", args.report.as_deref())]));
    let mut inputs: Vec<Named> = args.inputs.iter().map(|p| Named::new("input", p)).collect();
    inputs.extend(crate::guard::given(&[(
        "--plate-map",
        args.plate_map.as_deref(),
    )]));
    Ok(crate::guard::refuse_overwriting(&inputs, &outputs)?)
}

fn parse_alpha(s: &str) -> Result<f64, String> {
    match s.trim().parse::<f64>() {
        Ok(v) if v > 0.0 && v < 0.5 => Ok(v),
        _ => Err(format!(
            "'{s}': expected a significance level between 0 and 0.5, e.g. 0.05"
        )),
    }
}

impl TryFrom<&Args> for BatchOptions {
    type Error = Failure;
    // `..FitOptions::default()` keeps this compiling when fit options gain
    // fields (the diagnostics' options), which then take their defaults.
    #[allow(clippy::needless_update)]
    fn try_from(a: &Args) -> Result<Self, Failure> {
        Ok(BatchOptions {
            fit: FitOptions::try_from(&a.model)?,
            water: a.pathlength_from_water.then(|| WaterBand {
                au_per_cm: a.water_au_per_cm,
                ..WaterBand::default()
            }),
            outlier_alpha: a.outlier_alpha,
            keep_outliers: a.keep_outliers,
            curves: a.report.is_some() || a.with_curves,
        })
    }
}

/// Run `unblend batch`.
pub fn run(args: Args) -> Result<u8, Failure> {
    let started = Instant::now();
    let started_utc = now_utc();
    let options = BatchOptions::try_from(&args)?;
    refuse_overwriting_inputs(&args)?;
    if args.inputs.iter().filter(|p| p.as_os_str() == "-").count() > 1 {
        return Err(Failure {
            message: "standard input ('-') can be given only once".into(),
            code: exit::USAGE,
        });
    }
    let (map, map_info) = read_plate_map(args.plate_map.as_deref())?;
    let References { dir, set: refs } = args.model.references()?;
    let checks = checks(&args)?;
    let (mut out, created_dir) = open_outputs(&args, &refs, &options)?;
    let bar = progress_bar(&args);
    let mut tally = Tally::default();
    if map.is_none() {
        tally.warn("no --plate-map given: every well is a sample named after its well, and no blank is subtracted".into());
    }
    let bytes_read = AtomicU64::new(0);
    let spec = RunSpec {
        inputs: &args.inputs,
        map: map.as_ref(),
        reading: crate::input::plate::Reading {
            quantity: args.model.quantity.map(Into::into).unwrap_or_default(),
            overflow_markers: crate::input::fields::OverflowMarkers::new(&args.overflow_marker),
        },
        options: &options,
        bytes_read: &bytes_read,
    };
    let models = Models::new(&refs, options.fit, checks);
    let with_curves = args.with_curves;
    let render = |p: &mut PlateResult| render_plate_with(p, with_curves);
    let result = run::run(&spec, &models, render, |event| {
        match event {
            Event::Plate(p, rendered) => {
                tally.plate(&p);
                out.plate(&rendered)?;
                if let Some((_, r)) = out.report.as_mut() {
                    r.plate(&p);
                }
            }
            Event::Input(s) => {
                if let Some(e) = &s.error {
                    let msg = format!("{}: {e} (skipped)", s.path);
                    if let Some(b) = &bar {
                        b.suspend(|| eprintln!("unblend: error: {msg}"));
                    } else {
                        eprintln!("unblend: error: {msg}");
                    }
                }
                tally.inputs.push(s);
            }
        }
        if let Some(b) = &bar {
            b.set_position(bytes_read.load(Ordering::Relaxed));
            b.set_message(format!(
                "{} plates, {} wells",
                tally.plates, tally.wells_fitted
            ));
        }
        Ok(())
    });
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    result.map_err(|e| Failure::new(format!("{}: {e}", args.out_dir.display())))?;
    let elapsed_s = started.elapsed().as_secs_f64();

    let any_input = tally
        .inputs
        .iter()
        .any(|s| s.error.is_none() || s.plates > 0);
    if !any_input {
        drop(out);
        if created_dir {
            let _ = std::fs::remove_dir(&args.out_dir);
        }
        return Err(Failure::new(
            "no input could be read: nothing was written (errors above)",
        ));
    }
    print_warnings(&mut tally, &models);
    let log = LogInfo {
        started_utc,
        elapsed_s,
        map: map_info,
        library_dir: &dir,
        refs: &refs,
        options: &options,
        args: &args,
    };
    let paths = out
        .finish(&tally, &log)
        .map_err(|e| Failure::new(format!("{}: {e}", args.out_dir.display())))?;
    Ok(closing(&tally, elapsed_s, &paths))
}

/// Create the output folder and the temporary outputs (the report's first:
/// a report path in a missing folder fails before the folder is created,
/// unless the report goes into `--out-dir`, which is then made first),
/// and write their heads. Also says whether the folder is new.
fn open_outputs(
    args: &Args,
    refs: &ReferenceSet,
    options: &BatchOptions,
) -> Result<(Outputs, bool), Failure> {
    let created_dir = !args.out_dir.exists();
    let make_dir = || {
        std::fs::create_dir_all(&args.out_dir)
            .map_err(|e| Failure::new(format!("{}: {e}", args.out_dir.display())))
    };
    let inside = args
        .report
        .as_deref()
        .and_then(std::path::Path::parent)
        .is_some_and(|d| d.starts_with(&args.out_dir));
    if inside {
        make_dir()?;
    }
    let report_file = match &args.report {
        Some(path) => Some(AtomicFile::create(path).map_err(|e| {
            if inside && created_dir {
                let _ = std::fs::remove_dir(&args.out_dir);
            }
            Failure::new(format!(
                "--report {}: cannot write there ({e}); does its folder exist?",
                path.display()
            ))
        })?),
        None => None,
    };
    make_dir()?;
    let mut out = Outputs::create(&args.out_dir)?;
    out.report = report_file.map(|f| {
        let names = refs.names().into_iter().map(String::from).collect();
        (f, PlateReport::new(names))
    });
    out.begin(refs, options, args)
        .map_err(|e| Failure::new(format!("{}: {e}", args.out_dir.display())))?;
    Ok((out, created_dir))
}

/// Print the first warnings; the rest are counted.
fn print_warnings(tally: &mut Tally, models: &Models) {
    for w in models.warnings() {
        tally.warn(w);
    }
    for w in tally.warnings.iter().take(SHOWN_WARNINGS) {
        eprintln!("unblend: warning: {w}");
    }
    if tally.n_warnings > SHOWN_WARNINGS {
        eprintln!(
            "unblend: {} more warning(s) in run-log.txt and run.json",
            tally.n_warnings - SHOWN_WARNINGS
        );
    }
}

/// The plate map, and its line for the run log (path, SHA-256, entries).
fn read_plate_map(path: Option<&Path>) -> Result<(Option<PlateMap>, Option<String>), Failure> {
    Ok(match path {
        Some(path) => {
            let bytes = std::fs::read(path)
                .map_err(|e| Failure::new(format!("plate map {}: {e}", path.display())))?;
            let map = platemap::read(&bytes)
                .map_err(|e| Failure::new(format!("plate map {}: {e}", path.display())))?;
            let info = format!(
                "{}  sha256 {}  ({} entries)",
                path.display(),
                hex(&Sha256::digest(&bytes)),
                map.len()
            );
            (Some(map), Some(info))
        }
        None => (None, None),
    })
}

/// The progress bar, when asked for and stderr is a terminal.
fn progress_bar(args: &Args) -> Option<indicatif::ProgressBar> {
    let total_bytes: Option<u64> = args
        .inputs
        .iter()
        .map(|p| {
            (p.as_os_str() != "-")
                .then(|| std::fs::metadata(p).ok().map(|m| m.len()))
                .flatten()
        })
        .sum();
    (!args.no_progress && std::io::stderr().is_terminal()).then(|| {
        let bar = match total_bytes {
            Some(t) => indicatif::ProgressBar::new(t),
            None => indicatif::ProgressBar::new_spinner(),
        };
        let style = indicatif::ProgressStyle::with_template(
            "{spinner} {elapsed_precise} [{wide_bar}] {bytes}/{total_bytes} {msg}",
        )
        .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar());
        bar.set_style(style);
        bar
    })
}

/// Print the run's closing lines; the exit code they add up to.
fn closing(tally: &Tally, elapsed_s: f64, paths: &[String]) -> u8 {
    if !tally.summary.is_empty() {
        println!("specimens (mean ± SD over replicate wells, dilution applied):");
        for line in &tally.summary {
            println!("  {line}");
        }
        if tally.summary_more > 0 {
            println!("  … {} more in samples.csv", tally.summary_more);
        }
    }
    let rate = tally.wells_fitted as f64 / elapsed_s.max(1e-9);
    eprintln!(
        "unblend: {} plate(s), {} well(s) fitted, {} failed, in {elapsed_s:.2} s ({rate:.0} wells/s); wrote {}",
        tally.plates,
        tally.wells_fitted,
        tally.wells_failed,
        paths.join(", ")
    );
    if tally.failures() > 0 {
        eprintln!(
            "unblend: {} file(s), {} plate(s) and {} well(s) could not be used: see the error column of wells.csv and run-log.txt",
            tally.inputs_failed(),
            tally.plates_failed,
            tally.wells_failed
        );
    }
    if tally.failures() == 0 {
        exit::OK
    } else if tally.wells_fitted == 0 {
        exit::FAILED
    } else {
        exit::PARTIAL
    }
}

/// Warnings printed to stderr; the rest go to the run log.
const SHOWN_WARNINGS: usize = 20;
/// Warnings kept for the run log and JSON (per-plate warnings are also in
/// each plate's JSON object).
const KEPT_WARNINGS: usize = 1000;

/// Counters over the run (bounded memory: counts, not rows).
#[derive(Default)]
struct Tally {
    plates: usize,
    plates_failed: usize,
    wells_fitted: usize,
    wells_failed: usize,
    blanks: usize,
    blank_outliers: usize,
    replicate_outliers: usize,
    saturated: usize,
    samples: usize,
    inputs: Vec<InputSummary>,
    warnings: Vec<String>,
    n_warnings: usize,
    /// The first specimens' summary lines, and how many more there were.
    summary: Vec<String>,
    summary_more: usize,
}

impl Tally {
    fn warn(&mut self, w: String) {
        self.n_warnings += 1;
        if self.warnings.len() < KEPT_WARNINGS && !self.warnings.contains(&w) {
            self.warnings.push(w);
        }
    }

    fn plate(&mut self, p: &PlateResult) {
        self.plates += 1;
        if let Some(e) = &p.error {
            self.plates_failed += 1;
            self.warn(format!("plate '{}' ({}): {e}", p.plate, p.input));
        }
        self.wells_fitted += p.n_fitted();
        self.wells_failed += p.n_failed();
        self.blanks += p.blank.wells.len();
        self.blank_outliers += p.blank.outliers.len();
        self.samples += p.samples.len();
        for line in crate::output::batch::summary_lines(p) {
            if self.summary.len() < crate::output::batch::SUMMARY_SHOWN {
                self.summary.push(line);
            } else {
                self.summary_more += 1;
            }
        }
        for w in &p.wells {
            if w.flags
                .iter()
                .any(|f| f == crate::batch::FLAG_REPLICATE_OUTLIER)
            {
                self.replicate_outliers += 1;
            }
            if w.flags.iter().any(|f| f == crate::batch::FLAG_SATURATED) {
                self.saturated += 1;
            }
        }
        for w in &p.warnings {
            self.warn(w.clone());
        }
    }

    fn inputs_failed(&self) -> usize {
        self.inputs.iter().filter(|s| s.error.is_some()).count()
    }

    fn failures(&self) -> usize {
        self.inputs_failed() + self.plates_failed + self.wells_failed
    }
}

/// The four output files, filled as the run goes and committed together.
struct Outputs {
    wells: AtomicFile,
    samples: AtomicFile,
    json: AtomicFile,
    log: AtomicFile,
    first_plate: bool,
    /// `--report`: the file and the report being built.
    report: Option<(AtomicFile, PlateReport)>,
}

struct LogInfo<'a> {
    started_utc: String,
    elapsed_s: f64,
    map: Option<String>,
    library_dir: &'a Path,
    refs: &'a ReferenceSet,
    options: &'a BatchOptions,
    args: &'a Args,
}

impl Outputs {
    fn create(dir: &Path) -> Result<Self, Failure> {
        Ok(Outputs {
            wells: AtomicFile::create(&dir.join(OUTPUT_NAMES[0]))?,
            samples: AtomicFile::create(&dir.join(OUTPUT_NAMES[1]))?,
            json: AtomicFile::create(&dir.join(OUTPUT_NAMES[2]))?,
            log: AtomicFile::create(&dir.join(OUTPUT_NAMES[3]))?,
            first_plate: true,
            report: None,
        })
    }

    fn begin(
        &mut self,
        refs: &ReferenceSet,
        options: &BatchOptions,
        args: &Args,
    ) -> std::io::Result<()> {
        writeln!(self.wells, "{WELLS_HEADER}")?;
        writeln!(self.samples, "{SAMPLES_HEADER}")?;
        let head = serde_json::json!({
            "tool": {"name": "unblend", "version": env!("CARGO_PKG_VERSION")},
            "components": refs.names(),
            "options": options_json(options, args),
        });
        let head = serde_json::to_string(&head).map_err(std::io::Error::other)?;
        // Open the object and the `plates` array; closed in `finish`.
        self.json.write_all(&head.as_bytes()[..head.len() - 1])?;
        self.json.write_all(b",\"plates\":[")?;
        Ok(())
    }

    fn plate(&mut self, r: &RenderedPlate) -> std::io::Result<()> {
        self.wells.write_all(r.wells_csv.as_bytes())?;
        self.samples.write_all(r.samples_csv.as_bytes())?;
        if !self.first_plate {
            self.json.write_all(b",\n")?;
        }
        self.first_plate = false;
        self.json.write_all(r.json.as_bytes())
    }

    fn finish(mut self, t: &Tally, log: &LogInfo) -> Result<Vec<String>, crate::Error> {
        let io = |e: std::io::Error| crate::Error::io("output", e);
        let tail = serde_json::json!({
            "inputs": t.inputs,
            "summary": {
                "plates": t.plates,
                "plates_failed": t.plates_failed,
                "wells_fitted": t.wells_fitted,
                "wells_failed": t.wells_failed,
                "blank_wells": t.blanks,
                "blank_outliers": t.blank_outliers,
                "replicate_outliers": t.replicate_outliers,
                "saturated_wells": t.saturated,
                "samples": t.samples,
                "elapsed_s": log.elapsed_s,
            },
            "warnings": t.warnings,
        });
        let tail = serde_json::to_string(&tail).map_err(|e| io(std::io::Error::other(e)))?;
        self.json.write_all(b"],").map_err(io)?;
        self.json.write_all(&tail.as_bytes()[1..]).map_err(io)?;
        self.json.write_all(b"\n").map_err(io)?;
        write_log(&mut self.log, t, log).map_err(io)?;
        let mut files = vec![self.wells, self.samples, self.json, self.log];
        if let Some((mut file, report)) = self.report {
            let html = report.finish(&run_head(t, log));
            file.write_all(html.as_bytes()).map_err(io)?;
            files.push(file);
        }
        let paths = files
            .iter()
            .map(|f| f.target().display().to_string())
            .collect();
        // All old or all new: a failure part way puts the old set back.
        crate::atomic::commit_all(files)?;
        Ok(paths)
    }
}

/// The report's summary lines: what was run, on what.
fn run_head(t: &Tally, l: &LogInfo) -> RunHead {
    let mut rows = vec![
        ("started (UTC)".to_string(), l.started_utc.clone()),
        (
            "command".to_string(),
            std::env::args()
                .map(|a| shell_word(&a))
                .collect::<Vec<_>>()
                .join(" "),
        ),
    ];
    for s in &t.inputs {
        let mut v = format!("{} ({} plate(s)", s.path, s.plates);
        if let Some(h) = &s.sha256 {
            v.push_str(&format!(", sha256 {h}"));
        }
        v.push(')');
        if let Some(e) = &s.error {
            v.push_str(&format!(": {e}"));
        }
        rows.push(("input".to_string(), v));
    }
    rows.push((
        "plate map".to_string(),
        l.map.clone().unwrap_or_else(|| "none".into()),
    ));
    rows.push(("library".to_string(), l.library_dir.display().to_string()));
    if let serde_json::Value::Object(m) = options_json(l.options, l.args) {
        for (k, v) in m {
            let v = match v {
                serde_json::Value::String(s) => s,
                serde_json::Value::Null => "(not set)".to_string(),
                other => other.to_string(),
            };
            rows.push((format!("option {k}"), v));
        }
    }
    rows.push(("elapsed (s)".to_string(), format!("{:.2}", l.elapsed_s)));
    RunHead {
        title: "unblend batch report".to_string(),
        tool: format!("unblend {}", env!("CARGO_PKG_VERSION")),
        rows,
        warnings: t.warnings.clone(),
    }
}

fn options_json(o: &BatchOptions, a: &Args) -> serde_json::Value {
    serde_json::json!({
        "baseline": format!("{:?}", o.fit.baseline).to_lowercase(),
        "range_nm": o.fit.window_nm.map(|(lo, hi)| [lo, hi]),
        "quantity": format!("{:?}", a.model.quantity.unwrap_or(super::common::QuantityArg::Absorbance)).to_lowercase(),
        "pathlength_cm": o.fit.pathlength_cm,
        "water_band": o.water,
        "outlier_test": "grubbs-two-sided",
        "outlier_alpha": o.outlier_alpha,
        "outlier_min_std_errors": crate::batch::OUTLIER_MIN_STD_ERRORS,
        "keep_outliers": o.keep_outliers,
        "plate_map": a.plate_map.as_ref().map(|p| p.display().to_string()),
        "residual_checks": !a.checks.no_diagnostics,
        "noise_au": a.checks.noise_au,
        "alarm_rate": a.checks.alarm_rate,
        "max_absorbance_au": a.checks.max_absorbance.0,
        "screen_with": a.screen_with.as_ref().map(|p| p.display().to_string()),
    })
}

fn write_log(w: &mut dyn Write, t: &Tally, l: &LogInfo) -> std::io::Result<()> {
    writeln!(w, "unblend batch: run log")?;
    writeln!(w, "tool:       unblend {}", env!("CARGO_PKG_VERSION"))?;
    writeln!(w, "started:    {}", l.started_utc)?;
    let command: Vec<String> = std::env::args().map(|a| shell_word(&a)).collect();
    writeln!(w, "command:    {}", command.join(" "))?;
    writeln!(
        w,
        "elapsed:    {:.2} s ({:.0} wells/s, {} thread(s))",
        l.elapsed_s,
        t.wells_fitted as f64 / l.elapsed_s.max(1e-9),
        rayon::current_num_threads()
    )?;
    writeln!(w, "\ninputs")?;
    for s in &t.inputs {
        match (&s.error, &s.sha256) {
            (None, Some(sha)) => writeln!(
                w,
                "  {}  {}  {} plate(s)  {} bytes  sha256 {sha}",
                s.path,
                s.layout.unwrap_or("?"),
                s.plates,
                s.bytes
            )?,
            (e, _) => writeln!(
                w,
                "  {}  {} plate(s) read  ERROR: {}",
                s.path,
                s.plates,
                e.as_deref().unwrap_or("not read to the end")
            )?,
        }
    }
    writeln!(
        w,
        "plate map:  {}",
        l.map
            .as_deref()
            .unwrap_or("none (every well a sample, no blank)")
    )?;
    write_log_components(w, l)?;
    write_log_options(w, l)?;
    write_log_results(w, t)
}

/// The run log's library and components, each with its file's SHA-256.
fn write_log_components(w: &mut dyn Write, l: &LogInfo) -> std::io::Result<()> {
    writeln!(w, "library:    {}", l.library_dir.display())?;
    writeln!(w, "components:")?;
    for c in &l.refs.components {
        let path = Library::path_for(l.library_dir, &c.name);
        let sha = std::fs::read(&path)
            .map(|b| hex(&Sha256::digest(&b)))
            .unwrap_or_else(|_| "?".into());
        let (lo, hi) = c.range_nm();
        writeln!(
            w,
            "  {}  {lo}–{hi} nm  {}  sha256 {sha}",
            c.name,
            path.display()
        )?;
    }
    Ok(())
}

/// The run log's options section.
fn write_log_options(w: &mut dyn Write, l: &LogInfo) -> std::io::Result<()> {
    let o = l.options;
    writeln!(w, "\noptions")?;
    writeln!(
        w,
        "  range:       {}",
        o.fit.window_nm.map_or(
            "every wavelength the plate and all references cover".into(),
            |(lo, hi)| format!("{lo}–{hi} nm (within what the plate and references cover)")
        )
    )?;
    writeln!(
        w,
        "  baseline:    {}",
        format!("{:?}", o.fit.baseline).to_lowercase()
    )?;
    writeln!(
        w,
        "  quantity:    {}",
        format!(
            "{:?}",
            l.args
                .model
                .quantity
                .unwrap_or(super::common::QuantityArg::Absorbance)
        )
        .to_lowercase()
    )?;
    match o.water {
        Some(wb) => writeln!(
            w,
            "  pathlength:  plate map, else water band l = (A({} nm) − A({} nm)) / {} AU/cm (readings before blank subtraction; the constant depends on temperature), else {} cm",
            wb.peak_nm, wb.reference_nm, wb.au_per_cm, o.fit.pathlength_cm
        )?,
        None => writeln!(
            w,
            "  pathlength:  plate map, else {} cm",
            o.fit.pathlength_cm
        )?,
    }
    writeln!(
        w,
        "  outliers:    Grubbs (1969) two-sided, α = {}, and more than {} standard errors from the other replicates; {}",
        o.outlier_alpha,
        crate::batch::OUTLIER_MIN_STD_ERRORS,
        if o.keep_outliers {
            "flagged wells kept in the statistics"
        } else {
            "flagged wells left out of the blank and the statistics"
        }
    )?;
    let c = &l.args.checks;
    writeln!(
        w,
        "  checks:      {}; saturation ceiling {}{}",
        if c.no_diagnostics {
            "residual tests off".to_string()
        } else {
            format!(
                "residual tests at false-alarm rate {}, noise {}",
                c.alarm_rate,
                c.noise_au
                    .map_or("estimated per well".into(), |n| format!("{n} AU"))
            )
        },
        c.max_absorbance
            .0
            .map_or("none".into(), |v| format!("{v} AU")),
        l.args
            .screen_with
            .as_ref()
            .map(|d| format!("; screening with {}", d.display()))
            .unwrap_or_default()
    )?;
    Ok(())
}

/// The run log's results, outputs and warnings.
fn write_log_results(w: &mut dyn Write, t: &Tally) -> std::io::Result<()> {
    writeln!(w, "\nresults")?;
    writeln!(
        w,
        "  plates:      {} read, {} could not be read",
        t.plates, t.plates_failed
    )?;
    writeln!(
        w,
        "  wells:       {} fitted, {} failed, {} with saturated readings, {} replicate outlier(s)",
        t.wells_fitted, t.wells_failed, t.saturated, t.replicate_outliers
    )?;
    writeln!(
        w,
        "  blanks:      {} well(s), {} outlier(s)",
        t.blanks, t.blank_outliers
    )?;
    writeln!(w, "  samples:     {} (per plate)", t.samples)?;
    writeln!(
        w,
        "\noutputs:     wells.csv, samples.csv, run.json, run-log.txt"
    )?;
    if !t.warnings.is_empty() {
        writeln!(w, "\nwarnings")?;
        for x in &t.warnings {
            writeln!(w, "  {x}")?;
        }
        if t.n_warnings > t.warnings.len() {
            writeln!(
                w,
                "  … {} more (repeats, or past the first {KEPT_WARNINGS}; each plate's own are in run.json)",
                t.n_warnings - t.warnings.len()
            )?;
        }
    }
    writeln!(
        w,
        "\nResults are decision support, not a certified analysis."
    )
}

fn shell_word(s: &str) -> String {
    if !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "-_./:=,+".contains(c))
    {
        s.to_string()
    } else {
        format!("'{}'", s.replace('\'', "'\\''"))
    }
}

fn now_utc() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    let day = crate::dates::civil_from_days((secs / 86_400) as i64);
    let s = secs % 86_400;
    format!("{day} {:02}:{:02}:{:02} UTC", s / 3600, s / 60 % 60, s % 60)
}
