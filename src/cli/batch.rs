//! `unblend batch`: plate-reader runs: plate maps, blanks, pathlengths,
//! dilutions, replicates; per-well and per-sample results.

use super::common::{ModelArgs, References, hex, parse_positive, screening_candidates};
use super::diagnostic_args::DiagnosticArgs;
use super::{Failure, exit};
use crate::atomic::AtomicFile;
use crate::batch::run::{self, Event, Input, RunSpec};
use crate::batch::{BatchOptions, Models, PlateResult, WaterBand};
use crate::fit::FitOptions;
use crate::guard::Named;
use crate::input::platemap::{self, PlateMap};
use crate::output::batch::{RenderedPlate, SAMPLES_HEADER, WELLS_HEADER, render_plate_with};
use crate::output::run_log::{self, LoggedComponent, RunContext, RunSettings, RunTally};
use crate::reference::{Library, ReferenceSet};
use crate::report::plates::PlateReport;
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
    let mut tally = RunTally::default();
    if map.is_none() {
        tally.warn("no --plate-map given: every well is a sample named after its well, and no blank is subtracted".into());
    }
    let bytes_read = AtomicU64::new(0);
    let spec = RunSpec {
        inputs: inputs(&args.inputs),
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
    let result = run::run(spec, &models, render, |event| {
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
    let log = RunContext {
        started_utc,
        elapsed_s,
        command: command_line(),
        threads: rayon::current_num_threads(),
        map: map_info,
        library_dir: dir.display().to_string(),
        components: logged_components(&dir, &refs),
        options: &options,
        settings: &settings(&args),
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
    out.begin(refs, &run_log::options_json(options, &settings(args)))
        .map_err(|e| Failure::new(format!("{}: {e}", args.out_dir.display())))?;
    Ok((out, created_dir))
}

/// Print the first warnings; the rest are counted.
fn print_warnings(tally: &mut RunTally, models: &Models) {
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
fn closing(tally: &RunTally, elapsed_s: f64, paths: &[String]) -> u8 {
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

    fn begin(&mut self, refs: &ReferenceSet, options: &serde_json::Value) -> std::io::Result<()> {
        writeln!(self.wells, "{WELLS_HEADER}")?;
        writeln!(self.samples, "{SAMPLES_HEADER}")?;
        run_log::write_json_head(&refs.names(), options, &mut self.json)
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

    fn finish(mut self, t: &RunTally, log: &RunContext) -> Result<Vec<String>, crate::Error> {
        let io = |e: std::io::Error| crate::Error::io("output", e);
        run_log::write_json_tail(t, log.elapsed_s, &mut self.json).map_err(io)?;
        run_log::write_log(t, log, &mut self.log).map_err(io)?;
        let mut files = vec![self.wells, self.samples, self.json, self.log];
        if let Some((mut file, report)) = self.report {
            let html = report.finish(&run_log::run_head(t, log));
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

/// The run's settings as the log and `run.json` record them.
fn settings(a: &Args) -> RunSettings {
    RunSettings {
        quantity: format!(
            "{:?}",
            a.model
                .quantity
                .unwrap_or(super::common::QuantityArg::Absorbance)
        )
        .to_lowercase(),
        plate_map: a.plate_map.as_ref().map(|p| p.display().to_string()),
        residual_checks: !a.checks.no_diagnostics,
        noise_au: a.checks.noise_au,
        alarm_rate: a.checks.alarm_rate,
        max_absorbance_au: a.checks.max_absorbance.0,
        screen_with: a.screen_with.as_ref().map(|p| p.display().to_string()),
    }
}

/// The components as the run log lists them, each with its file's SHA-256.
fn logged_components(dir: &Path, refs: &ReferenceSet) -> Vec<LoggedComponent> {
    let component = |c: &crate::reference::Component| {
        let path = Library::path_for(dir, &c.name);
        let sha256 = std::fs::read(&path)
            .map(|b| hex(&Sha256::digest(&b)))
            .unwrap_or_else(|_| "?".into());
        LoggedComponent {
            name: c.name.clone(),
            range_nm: c.range_nm(),
            path: path.display().to_string(),
            sha256,
        }
    };
    refs.components.iter().map(component).collect()
}

/// The runs's inputs: `-` is standard input, anything else a file.
fn inputs(paths: &[PathBuf]) -> Vec<Input> {
    let input = |p: &PathBuf| {
        if p.as_os_str() == "-" {
            Input::reader("standard input", "stdin", std::io::stdin())
        } else {
            Input::file(p)
        }
    };
    paths.iter().map(input).collect()
}

/// The command line as run, quoted for a shell.
fn command_line() -> String {
    let words: Vec<String> = std::env::args().map(|a| run_log::shell_word(&a)).collect();
    words.join(" ")
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
