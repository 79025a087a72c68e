//! `unblend fit`: fit spectra against reference components.

use super::diagnostic_args::DiagnosticArgs;
use super::{Failure, exit, library_dir, parse_pathlength_cm, parse_range_nm};
use crate::atomic::{AtomicFile, stage_with};
use crate::fit::{FitOptions, FitReport, Outcome, StreamError, fit_stream_with};
use crate::guard::Named;
use crate::input::spectra::{self, Opened, Quantity, ReadOptions, WideStream};
use crate::limits::Capped;
use crate::output::{self, Format};
use crate::preprocess::Baseline;
use crate::reference::{Library, ReferenceSet};
use clap::ValueEnum;
use std::io::{Read, Write};
use std::path::PathBuf;

/// Fit each spectrum as A(λ) = l·Σ εᵢ(λ)·cᵢ + baseline(λ) with cᵢ ≥ 0.
#[derive(Debug, clap::Args)]
#[command(after_help = super::AFTER_HELP)]
pub struct Args {
    /// Spectra CSV (wide `sample,<nm>,<nm>,...` or long
    /// `sample,wavelength_nm,absorbance`); `-` reads standard input.
    pub input: PathBuf,
    /// Library folder of component files [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Components to fit, comma separated [default: every component in the library].
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    pub components: Vec<String>,
    /// Optical pathlength in cm.
    #[arg(long, default_value = "1", value_parser = parse_pathlength_cm, allow_negative_numbers = true, value_name = "CM")]
    pub pathlength_cm: f64,
    /// Baseline terms fitted beside the components (free in sign): offset in AU, slope in AU/nm.
    #[arg(long, value_enum, default_value_t = BaselineArg::Offset)]
    pub baseline: BaselineArg,
    /// Wavelength window LO:HI in nm [default: all wavelengths the sample and every reference cover].
    #[arg(long, value_parser = parse_range_nm, allow_hyphen_values = true, value_name = "LO:HI")]
    pub range_nm: Option<(f64, f64)>,
    /// What the numbers in INPUT are.
    #[arg(long, value_enum, default_value_t = QuantityArg::Absorbance)]
    pub quantity: QuantityArg,
    /// Output format.
    #[arg(long, value_enum, default_value_t = FormatArg::Table)]
    pub format: FormatArg,
    /// Write the results to FILE (atomically) instead of standard output.
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Library folder of candidate components to try on flagged samples (one extra component at a time, F-test).
    #[arg(long, value_name = "DIR")]
    pub screen_with: Option<PathBuf>,
    /// Residual tests and saturation masking.
    #[command(flatten)]
    pub checks: DiagnosticArgs,
    /// Also write a self-contained HTML report (summary, one figure per sample: measured, fitted, stacked component contributions, residual with the ±2σ noise band).
    #[arg(long, value_name = "FILE.html")]
    pub report: Option<PathBuf>,
    /// Also write one sample's fit figure, as SVG or PNG after the file's extension (the first fitted sample, or --plot-sample).
    #[arg(long, value_name = "FILE.svg|FILE.png")]
    pub plot: Option<PathBuf>,
    /// The sample --plot draws [default: the first fitted sample].
    #[arg(long, value_name = "NAME", requires = "plot")]
    pub plot_sample: Option<String>,
    /// Add each sample's fit curves (wavelengths, measured, fitted, contributions, residual, noise σ, masked points; AU) to the JSON results, so `unblend report` can draw them later.
    #[arg(long)]
    pub with_curves: bool,
}

/// `--baseline` values.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum BaselineArg {
    /// No baseline term.
    None,
    /// Constant offset (AU).
    Offset,
    /// Offset (AU) and slope (AU/nm).
    Linear,
}

/// `--quantity` values.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum QuantityArg {
    /// Decadic absorbance, AU (−log10 T).
    Absorbance,
    /// Napierian absorbance (−ln T), converted to decadic.
    AbsorbanceLn,
    /// Transmittance as a fraction 0–1.
    Transmittance,
    /// Transmittance in percent 0–100.
    TransmittancePercent,
}

/// `--format` values.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum FormatArg {
    /// Aligned table for the terminal.
    Table,
    /// Tidy CSV, one row per sample and component.
    Csv,
    /// JSON document.
    Json,
}

impl From<BaselineArg> for Baseline {
    fn from(b: BaselineArg) -> Self {
        match b {
            BaselineArg::None => Baseline::None,
            BaselineArg::Offset => Baseline::Offset,
            BaselineArg::Linear => Baseline::Linear,
        }
    }
}

impl From<QuantityArg> for Quantity {
    fn from(q: QuantityArg) -> Self {
        match q {
            QuantityArg::Absorbance => Quantity::Absorbance,
            QuantityArg::AbsorbanceLn => Quantity::AbsorbanceNatural,
            QuantityArg::Transmittance => Quantity::Transmittance,
            QuantityArg::TransmittancePercent => Quantity::TransmittancePercent,
        }
    }
}

impl From<FormatArg> for Format {
    fn from(f: FormatArg) -> Self {
        match f {
            FormatArg::Table => Format::Table,
            FormatArg::Csv => Format::Csv,
            FormatArg::Json => Format::Json,
        }
    }
}

impl TryFrom<&Args> for FitOptions {
    type Error = Failure;
    fn try_from(a: &Args) -> Result<Self, Failure> {
        Ok(FitOptions {
            baseline: a.baseline.into(),
            window_nm: a.range_nm,
            pathlength_cm: a.pathlength_cm,
        })
    }
}

/// Run `unblend fit`.
pub fn run(mut args: Args) -> Result<u8, Failure> {
    // `--out -` is standard output, as `-` is standard input.
    args.out = args.out.filter(|p| p.as_os_str() != "-");
    let outputs = crate::guard::given(&[
        ("--out", args.out.as_deref()),
        ("--report", args.report.as_deref()),
        ("--plot", args.plot.as_deref()),
    ]);
    crate::guard::refuse_overwriting(&[Named::new("input", &args.input)], &outputs)?;
    let options = FitOptions::try_from(&args)?;
    let format: Format = args.format.into();
    let shown = if args.input.as_os_str() == "-" {
        "standard input".to_string()
    } else {
        args.input.display().to_string()
    };
    let dir = library_dir(args.library.clone());
    let library_dir_shown = dir.clone();
    let library = Library::open(&dir)?;
    for w in &library.skipped {
        eprintln!("unblend: warning: {w}");
    }
    let refs = library.select(&args.components)?;
    let mut checks = args.checks.options();
    if let Some(dir) = &args.screen_with {
        if args.checks.no_diagnostics {
            return Err(Failure::new(
                "--screen-with tries candidates on samples the residual tests flag: drop --no-diagnostics",
            ));
        }
        let candidates = Library::open(dir)?;
        for e in &candidates.broken {
            eprintln!("unblend: warning: screening library: {e}");
        }
        if candidates.components.is_empty() {
            return Err(Failure::new(format!(
                "--screen-with {}: no readable component files (*.toml) there",
                dir.display()
            )));
        }
        checks.candidates = Some(ReferenceSet {
            components: candidates.components,
        });
    }
    if args.with_curves && format != Format::Json {
        return Err(Failure::usage(
            "--with-curves adds the fit curves to the JSON results: use it with --format json",
        ));
    }
    if let Some(p) = &args.plot
        && plot_kind(p).is_none()
    {
        return Err(Failure::usage(format!(
            "--plot {}: expected a file name ending in .svg or .png (the extension picks the format)",
            p.display()
        )));
    }
    if args.report.is_some() || args.plot.is_some() || args.with_curves {
        return run_with_curves(
            &args,
            &refs,
            &options,
            &checks,
            format,
            &shown,
            &library_dir_shown,
        );
    }
    // Every line is capped, so an input without line breaks (/dev/zero)
    // fails with its line number instead of filling memory.
    let reader: Box<dyn Read + Send> = if args.input.as_os_str() == "-" {
        Box::new(Capped::new(std::io::stdin()))
    } else {
        Box::new(Capped::new(
            std::fs::File::open(&args.input).map_err(|e| Failure::new(format!("{shown}: {e}")))?,
        ))
    };
    let ctx = |e: crate::Error| Failure::new(format!("{shown}: {e}"));
    let read_options = ReadOptions {
        quantity: args.quantity.into(),
        ..Default::default()
    };
    match spectra::open(reader, read_options).map_err(ctx)? {
        Opened::Long(file) => {
            let report = crate::fit::fit_file_with(&file, &refs, &options, &checks).map_err(ctx)?;
            emit(&report, format, args.out.as_deref())?;
            Ok(exit_code(&report))
        }
        Opened::Wide(mut stream) if format == Format::Csv => stream_csv(
            &mut stream,
            &refs,
            &options,
            &checks,
            args.out.as_deref(),
            &shown,
        ),
        Opened::Wide(mut stream) => {
            let mut outcomes = Vec::new();
            let warnings = fit_stream_with(&mut stream, &refs, &options, &checks, |chunk| {
                outcomes.extend(chunk);
                Ok::<(), ()>(())
            })
            .map_err(|e| match e {
                StreamError::Engine(e) => ctx(e),
                StreamError::Sink(()) => Failure::new("internal: result collection failed"),
            })?;
            let report = FitReport {
                outcomes,
                warnings,
                component_names: refs.names().iter().map(|s| s.to_string()).collect(),
            };
            emit(&report, format, args.out.as_deref())?;
            Ok(exit_code(&report))
        }
    }
}

/// Pixels per SVG pixel in a PNG figure (sharp on high-density screens and
/// in print: the 760 × 430 px figure becomes 1520 × 860).
const PNG_SCALE: f32 = 2.0;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum PlotKind {
    Svg,
    Png,
}

/// The figure format a `--plot` file name asks for.
fn plot_kind(path: &std::path::Path) -> Option<PlotKind> {
    let ext = path.extension()?;
    if ext.eq_ignore_ascii_case("svg") {
        Some(PlotKind::Svg)
    } else if ext.eq_ignore_ascii_case("png") {
        Some(PlotKind::Png)
    } else {
        None
    }
}

/// Fit the whole input in memory and keep each sample's curves for the
/// report, the figure or the JSON.
fn run_with_curves(
    args: &Args,
    refs: &ReferenceSet,
    options: &FitOptions,
    checks: &crate::diagnostics::Options,
    format: Format,
    shown: &str,
    library: &std::path::Path,
) -> Result<u8, Failure> {
    let ctx = |e: crate::Error| Failure::new(format!("{shown}: {e}"));
    let bytes = read_input(&args.input)?;
    let read_options = ReadOptions {
        quantity: args.quantity.into(),
        ..Default::default()
    };
    let file = spectra::read(&bytes, read_options).map_err(ctx)?;
    let report = crate::fit::fit_file_with(&file, refs, options, checks).map_err(ctx)?;
    let curves = crate::curves::for_file(&file, refs, options, &report);
    let mut doc = output::JsonReport::from_report(&report);
    doc.run = Some(run_info(args, shown, library));
    doc.curves = Some(curves);
    // Every file output is staged first and replaced as one set (all old
    // or all new); what was written is said only once it is in place.
    let mut staged = Vec::new();
    let mut said = Vec::new();
    if let Some(path) = &args.plot {
        let (file, line) = stage_plot(args, &doc, path, shown)?;
        staged.push(file);
        said.push(line);
    }
    if let Some(path) = &args.report {
        let html = crate::report::render_html(&doc, &format!("unblend fit: {shown}"));
        staged.push(stage_with(path, |w| w.write_all(html.as_bytes()))?);
        said.push(format!("unblend: wrote the report to {}", path.display()));
    }
    let json_doc = format == Format::Json && (args.with_curves || args.report.is_some());
    let write = |w: &mut (dyn Write + Send)| {
        if json_doc {
            output::write_json(&doc, w)
        } else {
            output::write(&report, format, w)
        }
    };
    if let Some(path) = args.out.as_deref() {
        staged.push(stage_with(path, write)?);
        said.push(summary(report.outcomes.len(), report.n_failed(), path));
    }
    for w in &report.warnings {
        eprintln!("unblend: warning: {w}");
    }
    crate::atomic::commit_all(staged)?;
    for line in said {
        eprintln!("{line}");
    }
    if args.out.is_none() {
        super::stdout::write_with(write)?;
    }
    Ok(exit_code(&report))
}

/// The `--plot` figure, staged (not yet in place), and the line that says
/// so once it is.
fn stage_plot(
    args: &Args,
    doc: &output::JsonReport,
    path: &std::path::Path,
    shown: &str,
) -> Result<(AtomicFile, String), Failure> {
    let curve = match &args.plot_sample {
        Some(name) => doc
            .curves
            .iter()
            .flatten()
            .find(|c| &c.sample == name)
            .ok_or_else(|| {
                Failure::new(format!(
                    "--plot-sample '{name}': no fitted sample of that name in {shown}"
                ))
            })?,
        None => doc.curves.iter().flatten().next().ok_or_else(|| {
            // Say why, with the first sample's own error.
            let why = doc
                .failed
                .first()
                .map(|f| format!(" ({}: {})", f.sample, f.error))
                .unwrap_or_default();
            Failure::new(format!("--plot: no sample of {shown} was fitted{why}"))
        })?,
    };
    let svg = crate::report::sample_figure(curve);
    let file = if plot_kind(path) == Some(PlotKind::Png) {
        let png = crate::report::png::render(&svg, PNG_SCALE).map_err(Failure::new)?;
        if !png.has_font {
            eprintln!(
                "unblend: warning: no system font found: the PNG's text labels are missing (install a sans-serif font, or write the figure as .svg)"
            );
        }
        stage_with(path, |w| w.write_all(&png.bytes))?
    } else {
        stage_with(path, |w| {
            w.write_all(b"<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n")?;
            w.write_all(svg.as_bytes())?;
            w.write_all(b"\n")
        })?
    };
    let line = format!(
        "unblend: wrote the fit of {} to {}",
        curve.sample,
        path.display()
    );
    Ok((file, line))
}

/// The run's inputs and options for the report's summary.
fn run_info(args: &Args, shown: &str, library: &std::path::Path) -> output::RunInfo {
    let mut options = vec![
        [
            "pathlength".to_string(),
            format!("{} cm", args.pathlength_cm),
        ],
        [
            "baseline".to_string(),
            format!("{:?}", args.baseline).to_lowercase(),
        ],
        [
            "range".to_string(),
            args.range_nm.map_or(
                "common range of sample and references".into(),
                |(lo, hi)| format!("{lo}–{hi} nm"),
            ),
        ],
        [
            "input quantity".to_string(),
            format!("{:?}", args.quantity).to_lowercase(),
        ],
    ];
    let checks = args.checks.options();
    options.push([
        "residual checks".to_string(),
        match &checks.residual {
            Some(r) => format!(
                "on, alarm rate {}, noise {}",
                r.alarm_rate,
                r.noise_au
                    .map_or("estimated from the residual".into(), |n| format!("{n} AU"))
            ),
            None => "off".into(),
        },
    ]);
    options.push([
        "saturation ceiling".to_string(),
        checks
            .max_absorbance_au
            .map_or("off".into(), |v| format!("{v} AU")),
    ]);
    if let Some(d) = &args.screen_with {
        options.push(["screening library".to_string(), d.display().to_string()]);
    }
    output::RunInfo {
        command: "fit".into(),
        input: shown.to_string(),
        library: library.display().to_string(),
        options,
    }
}

/// Fit a wide file chunk by chunk and write tidy CSV as it goes, so memory
/// stays bounded for any number of spectra.
fn stream_csv<R: Read + Send>(
    stream: &mut WideStream<R>,
    refs: &ReferenceSet,
    options: &FitOptions,
    checks: &crate::diagnostics::Options,
    out: Option<&std::path::Path>,
    shown: &str,
) -> Result<u8, Failure> {
    let mut total = 0usize;
    let mut failed = 0usize;
    let mut engine_error: Option<crate::Error> = None;
    let mut warnings = Vec::new();
    let mut body = |w: &mut (dyn Write + Send)| -> std::io::Result<()> {
        writeln!(w, "{}", output::CSV_HEADER)?;
        // Formatting runs here (in parallel); a writer thread does the I/O
        // so the next chunk's fit overlaps this chunk's write.
        std::thread::scope(|scope| {
            // The outcomes travel with their text so the writer thread, not
            // the fitting one, spends the time freeing them.
            let (tx, rx) = std::sync::mpsc::sync_channel::<(Vec<String>, Vec<Outcome>)>(2);
            let writer = scope.spawn(move || -> std::io::Result<()> {
                for (parts, outcomes) in rx {
                    for text in parts {
                        w.write_all(text.as_bytes())?;
                    }
                    drop(outcomes);
                }
                Ok(())
            });
            let r = fit_stream_with(stream, refs, options, checks, |chunk: Vec<Outcome>| {
                total += chunk.len();
                failed += chunk
                    .iter()
                    .filter(|o| matches!(o, Outcome::Failed(_)))
                    .count();
                let parts = output::csv_row_parts(&chunk);
                tx.send((parts, chunk))
                    .map_err(|_| std::io::Error::other("the output writer stopped"))
            });
            drop(tx);
            let written = writer
                .join()
                .unwrap_or_else(|_| Err(std::io::Error::other("the output writer failed")));
            match r {
                Ok(ws) => {
                    warnings = ws;
                    written
                }
                // The writer's own error says more than "it stopped".
                Err(StreamError::Sink(e)) => written.and(Err(e)),
                Err(StreamError::Engine(e)) => {
                    engine_error = Some(e);
                    Err(std::io::Error::other("stopped"))
                }
            }
        })
    };
    let result = match out {
        Some(path) => crate::atomic::write_with(path, false, &mut body).map_err(Failure::from),
        None => super::stdout::write_with(|w| body(w)),
    };
    if let Some(e) = engine_error {
        return Err(Failure::new(format!("{shown}: {e}")));
    }
    result?;
    for w in &warnings {
        eprintln!("unblend: warning: {w}");
    }
    if let Some(path) = out {
        eprintln!("{}", summary(total, failed, path));
    }
    Ok(code_for(total, failed))
}

fn summary(total: usize, failed: usize, path: &std::path::Path) -> String {
    format!(
        "unblend: wrote {} of {total} samples to {}{}",
        total - failed,
        path.display(),
        if failed > 0 {
            format!(" ({failed} not fitted, listed in the file)")
        } else {
            String::new()
        }
    )
}

fn code_for(total: usize, failed: usize) -> u8 {
    if failed == 0 {
        exit::OK
    } else if failed == total {
        exit::FAILED
    } else {
        exit::PARTIAL
    }
}

/// Read a file, or standard input for `-`, with every line capped (see
/// [`crate::limits`]).
pub fn read_input(path: &std::path::Path) -> Result<Vec<u8>, Failure> {
    crate::limits::read_text(path).map_err(|e| match e {
        crate::Error::Io { .. } => Failure::from(e),
        e if path.as_os_str() == "-" => Failure::new(format!("standard input: {e}")),
        e => Failure::new(format!("{}: {e}", path.display())),
    })
}

/// Print warnings to stderr and write the report to a file or stdout.
pub fn emit(
    report: &FitReport,
    format: Format,
    out: Option<&std::path::Path>,
) -> Result<(), Failure> {
    for w in &report.warnings {
        eprintln!("unblend: warning: {w}");
    }
    match out {
        Some(path) => {
            crate::atomic::write_with(path, false, |w| output::write(report, format, w))?;
            eprintln!(
                "{}",
                summary(report.outcomes.len(), report.n_failed(), path)
            );
        }
        None => super::stdout::write_with(|w| output::write(report, format, w))?,
    }
    Ok(())
}

/// The exit code a report deserves.
pub fn exit_code(report: &FitReport) -> u8 {
    code_for(report.outcomes.len(), report.n_failed())
}
