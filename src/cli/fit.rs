//! `unblend fit`: fit spectra against reference components.

use super::common::{
    FormatArg, ModelArgs, References, code_for, emit, exit_code, screening_candidates, shown,
    summary,
};
use super::diagnostic_args::DiagnosticArgs;
use super::emission_args::EmissionArgs;
use super::qc_args::QcArgs;
use super::{Failure, inputs};
use crate::atomic::{AtomicFile, stage_with};
use crate::fit::{FitOptions, FitReport, Outcome, StreamError, fit_stream_with};
use crate::guard::Named;
use crate::input::spectra::{self, Opened, WideStream};
use crate::limits::Capped;
use crate::output::{self, Format};
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

/// Fit each spectrum as A(λ) = l·Σ εᵢ(λ)·cᵢ + baseline(λ) with cᵢ ≥ 0.
#[derive(Debug, clap::Args)]
#[command(after_help = super::AFTER_HELP)]
pub struct Args {
    /// Spectra files or folders (a folder means its files of known kinds), in any shape the README's "Input shapes" lists: CSV/TSV tables (wide, long, wavelengths down, one spectrum), JCAMP-DX, .xlsx/.ods workbooks; `-` reads standard input.
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// The references and the model fitted.
    #[command(flatten)]
    pub model: ModelArgs,
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
    /// Lot QC against a target recipe; colour of the solution.
    #[command(flatten)]
    pub qc: QcArgs,
    /// Emission (fluorescence) fits.
    #[command(flatten)]
    pub emission: EmissionArgs,
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

/// Run `unblend fit`.
pub fn run(mut args: Args) -> Result<u8, Failure> {
    // `--out -` is standard output, as `-` is standard input.
    args.out = args.out.filter(|p| p.as_os_str() != "-");
    let outputs = crate::guard::given(&[
        ("--out", args.out.as_deref()),
        ("--report", args.report.as_deref()),
        ("--plot", args.plot.as_deref()),
    ]);
    let named_inputs: Vec<Named> = args.inputs.iter().map(|p| Named::new("input", p)).collect();
    crate::guard::refuse_overwriting(&named_inputs, &outputs)?;
    let options = FitOptions::try_from(&args.model)?;
    let format: Format = args.format.into();
    let refs = args.model.references()?;
    let checks = checks(&args)?;
    if args.emission.is_emission() {
        let shown = args
            .inputs
            .iter()
            .map(|p| shown(p))
            .collect::<Vec<_>>()
            .join(", ");
        return run_emission(&args, &refs.set, options, &checks, format, &shown);
    }
    check_outputs(&args, format)?;
    let run = FitRun {
        args: &args,
        refs: &refs,
        options,
        checks,
        format,
        shown: args
            .inputs
            .iter()
            .map(|p| shown(p))
            .collect::<Vec<_>>()
            .join(", "),
    };
    let single = match args.inputs.as_slice() {
        [one] if !one.is_dir() => one,
        _ => {
            return fit_whole(
                &inputs::read_all(&args.inputs, args.model.read_options().quantity)?,
                &run,
            );
        }
    };
    if args.report.is_some() || args.plot.is_some() || args.with_curves || args.qc.active() {
        return run_with_curves(&run);
    }
    // Every line is capped, so an input without line breaks (/dev/zero)
    // fails with its line number instead of filling memory.
    let reader: Box<dyn Read + Send> = if single.as_os_str() == "-" {
        Box::new(Capped::new(std::io::stdin()))
    } else {
        Box::new(Capped::new(
            std::fs::File::open(single).map_err(|e| Failure::new(format!("{}: {e}", run.shown)))?,
        ))
    };
    let read_options = inputs::options_for(
        single,
        args.model.read_options().quantity,
        &Default::default(),
    );
    match spectra::open(reader, read_options).map_err(|e| run.context(e))? {
        Opened::Whole(file) => fit_whole(&file, &run),
        // Values that look like transmittance (rare): read whole so the
        // warning travels with the report.
        Opened::Wide(stream) if !stream.warnings().is_empty() => {
            fit_whole(&spectra::collect(stream).map_err(|e| run.context(e))?, &run)
        }
        Opened::Wide(mut stream) if matches!(format, Format::Csv | Format::JsonLines) => {
            stream_rows(&mut stream, &run)
        }
        Opened::Wide(mut stream) => fit_wide(&mut stream, &run),
    }
}

/// Fit spectra read whole; the file's warnings (quantity, missing readings,
/// sheets passed over) come first among the report's. With `--report`,
/// `--plot` or `--with-curves`, the curves are kept as well.
fn fit_whole(file: &spectra::SpectraFile, run: &FitRun) -> Result<u8, Failure> {
    let args = run.args;
    if args.report.is_some() || args.plot.is_some() || args.with_curves || args.qc.active() {
        return curves_for(file, run);
    }
    let report = fit_file(file, run)?;
    emit(&report, run.format, args.out.as_deref())?;
    Ok(exit_code(&report))
}

/// Fit a file read whole, its warnings first among the report's.
fn fit_file(file: &spectra::SpectraFile, run: &FitRun) -> Result<FitReport, Failure> {
    let mut report = crate::fit::fit_file_with(file, &run.refs.set, &run.options, &run.checks)
        .map_err(|e| run.context(e))?;
    report.warnings.splice(0..0, file.warnings.iter().cloned());
    Ok(report)
}

/// One `fit` run: its flags, references, options and the input's name.
struct FitRun<'a> {
    args: &'a Args,
    refs: &'a References,
    options: FitOptions,
    checks: crate::diagnostics::Options,
    format: Format,
    /// The input as messages show it.
    shown: String,
}

impl FitRun<'_> {
    /// An engine error about the input, with the input's name.
    fn context(&self, e: crate::Error) -> Failure {
        Failure::new(format!("{}: {e}", self.shown))
    }
}

/// The residual checks the flags ask for, with `--screen-with` candidates.
fn checks(args: &Args) -> Result<crate::diagnostics::Options, Failure> {
    let mut checks = args.checks.options();
    if let Some(dir) = &args.screen_with {
        checks.candidates = Some(screening_candidates(
            dir,
            args.checks.no_diagnostics,
            "samples",
        )?);
    }
    Ok(checks)
}

/// Reject output flags that do not go together.
fn check_outputs(args: &Args, format: Format) -> Result<(), Failure> {
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
    Ok(())
}

/// Fit a wide file chunk by chunk, keeping the results for the table or JSON.
fn fit_wide<R: Read + Send>(stream: &mut WideStream<R>, run: &FitRun) -> Result<u8, Failure> {
    let mut outcomes = Vec::new();
    let warnings = fit_stream_with(stream, &run.refs.set, &run.options, &run.checks, |chunk| {
        outcomes.extend(chunk);
        Ok::<(), ()>(())
    })
    .map_err(|e| match e {
        StreamError::Engine(e) => run.context(e),
        StreamError::Sink(()) => Failure::new("internal: result collection failed"),
    })?;
    let report = FitReport {
        outcomes,
        warnings,
        component_names: run.refs.set.names().iter().map(|s| s.to_string()).collect(),
    };
    emit(&report, run.format, run.args.out.as_deref())?;
    Ok(exit_code(&report))
}

/// `--signal emission`: read the whole input, fit the emission references
/// at the excitation (inner-filter correction, Raman term), write the
/// emission outputs.
fn run_emission(
    args: &Args,
    refs: &crate::reference::ReferenceSet,
    options: FitOptions,
    checks: &crate::diagnostics::Options,
    format: Format,
    shown: &str,
) -> Result<u8, Failure> {
    if args.report.is_some()
        || args.plot.is_some()
        || args.with_curves
        || args.screen_with.is_some()
    {
        return Err(Failure::new(
            "--signal emission writes the table, CSV or JSON only: drop --report, --plot, --with-curves and --screen-with",
        ));
    }
    let em = args.emission.options()?.with_fit(options);
    let ctx = |e: crate::Error| Failure::new(format!("{shown}: {e}"));
    let file = inputs::read_all(&args.inputs, None)?;
    let report = crate::emission::fit_emission(&file, refs, &em, checks).map_err(ctx)?;
    for w in &report.warnings {
        eprintln!("unblend: warning: {w}");
    }
    let n_failed = report
        .outcomes
        .iter()
        .filter(|o| matches!(o, crate::emission::EmissionOutcome::Failed(_)))
        .count();
    match args.out.as_deref() {
        Some(path) => {
            crate::atomic::write_with(path, false, |w| {
                output::emission::write(&report, format, w)
            })?;
            eprintln!("{}", summary(report.outcomes.len(), n_failed, path));
        }
        None => {
            let mut lock = std::io::BufWriter::new(std::io::stdout().lock());
            let r = output::emission::write(&report, format, &mut lock).and_then(|_| lock.flush());
            if let Err(e) = r
                && e.kind() != std::io::ErrorKind::BrokenPipe
            {
                return Err(Failure::new(format!("standard output: {e}")));
            }
        }
    }
    Ok(code_for(report.outcomes.len(), n_failed))
}

/// Pixels per SVG pixel in a PNG figure (sharp on high-density screens and
/// in print: the 760 × 430 px figure becomes 1520 × 860).
#[cfg(feature = "png")]
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
/// report, the figure or the JSON. Every file output is staged first and
/// replaced as one set (all old or all new); what was written is said only
/// once it is in place.
fn run_with_curves(run: &FitRun) -> Result<u8, Failure> {
    let file = inputs::read_all(&run.args.inputs, run.args.model.read_options().quantity)?;
    curves_for(&file, run)
}

/// Fit a file read whole and keep each sample's curves.
fn curves_for(file: &spectra::SpectraFile, run: &FitRun) -> Result<u8, Failure> {
    let args = run.args;
    let mut report = fit_file(file, run)?;
    if let Some(qc) = args.qc.setup(&run.refs.set)? {
        let context = |_: &str| Some(qc.context(&run.refs.set));
        crate::target::apply_to_file(file, &mut report, context);
    }
    if let Some(path) = &args.qc.qc_csv {
        crate::atomic::write_with(path, false, |w| output::qc::write_qc_csv(&report, w))?;
    }
    let curves = crate::curves::for_file(file, &run.refs.set, &run.options, &report);
    let mut doc = output::JsonReport::from_report(&report);
    doc.run = Some(run_info(args, &run.shown, &run.refs.dir));
    doc.curves = Some(curves);
    let mut staged = Vec::new();
    let mut said = Vec::new();
    if let Some(path) = &args.plot {
        let (file, line) = plot(&doc, path, run)?;
        staged.push(file);
        said.push(line);
    }
    if let Some(path) = &args.report {
        let html = crate::report::render_html(&doc, &format!("unblend fit: {}", run.shown));
        staged.push(stage_with(path, |w| w.write_all(html.as_bytes()))?);
        said.push(format!("unblend: wrote the report to {}", path.display()));
    }
    let json_doc = run.format == Format::Json && (args.with_curves || args.report.is_some());
    let write = |w: &mut (dyn Write + Send)| {
        if json_doc {
            output::write_json(&doc, w)
        } else {
            output::write(&report, run.format, w)
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

/// The `--plot` figure of the chosen (or first fitted) sample, staged (not
/// yet in place), and the line that says so once it is.
fn plot(
    doc: &output::JsonReport,
    path: &Path,
    run: &FitRun,
) -> Result<(AtomicFile, String), Failure> {
    let shown = &run.shown;
    let curve = match &run.args.plot_sample {
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
    let file = stage_figure(path, &svg)?;
    let line = format!(
        "unblend: wrote the fit of {} to {}",
        curve.sample,
        path.display()
    );
    Ok((file, line))
}

/// Stage a figure as SVG, or as PNG when the file name says so.
fn stage_figure(path: &std::path::Path, svg: &str) -> Result<AtomicFile, Failure> {
    if plot_kind(path) == Some(PlotKind::Png) {
        return stage_png(path, svg);
    }
    Ok(stage_with(path, |w| {
        w.write_all(b"<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n")?;
        w.write_all(svg.as_bytes())?;
        w.write_all(b"\n")
    })?)
}

#[cfg(feature = "png")]
fn stage_png(path: &std::path::Path, svg: &str) -> Result<AtomicFile, Failure> {
    let png = crate::report::png::render(svg, PNG_SCALE).map_err(Failure::new)?;
    if !png.has_font {
        eprintln!(
            "unblend: warning: no system font found: the PNG's text labels are missing (install a sans-serif font, or write the figure as .svg)"
        );
    }
    Ok(stage_with(path, |w| w.write_all(&png.bytes))?)
}

#[cfg(not(feature = "png"))]
fn stage_png(path: &std::path::Path, _svg: &str) -> Result<AtomicFile, Failure> {
    Err(Failure::usage(format!(
        "--plot {}: this build has no PNG support (built without the `png` feature): write the figure as .svg",
        path.display()
    )))
}

/// The run's inputs and options for the report's summary.
fn run_info(args: &Args, shown: &str, library: &std::path::Path) -> output::RunInfo {
    let mut options = vec![
        [
            "pathlength".to_string(),
            format!("{} cm", args.model.pathlength_cm),
        ],
        [
            "baseline".to_string(),
            format!("{:?}", args.model.baseline).to_lowercase(),
        ],
        [
            "range".to_string(),
            args.model.range_nm.map_or(
                "common range of sample and references".into(),
                |(lo, hi)| format!("{lo}–{hi} nm"),
            ),
        ],
        [
            "input quantity".to_string(),
            args.model
                .quantity
                .map_or("as each file says, else absorbance".into(), |q| {
                    format!("{q:?}").to_lowercase()
                }),
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
    options.extend(args.qc.run_info());
    output::RunInfo {
        command: "fit".into(),
        input: shown.to_string(),
        library: library.display().to_string(),
        options,
    }
}

/// Fit a wide file chunk by chunk and write tidy CSV or JSON Lines as it
/// goes, so memory stays bounded for any number of spectra.
fn stream_rows<R: Read + Send>(stream: &mut WideStream<R>, run: &FitRun) -> Result<u8, Failure> {
    let out = run.args.out.as_deref();
    let (refs, options, checks) = (&run.refs.set, &run.options, &run.checks);
    let mut total = 0usize;
    let mut failed = 0usize;
    let mut engine_error: Option<crate::Error> = None;
    let mut warnings = Vec::new();
    let mut body = |w: &mut (dyn Write + Send)| -> std::io::Result<()> {
        if run.format == Format::Csv {
            writeln!(w, "{}", output::CSV_HEADER)?;
        }
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
                let parts = match run.format {
                    Format::JsonLines => output::jsonl::line_parts(&chunk),
                    _ => output::csv_row_parts(&chunk),
                };
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
        return Err(run.context(e));
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
