//! `unblend fit`: fit spectra against reference components.

use super::diagnostic_args::DiagnosticArgs;
use super::{Failure, exit, library_dir, parse_positive, parse_range_nm};
use crate::fit::{FitOptions, FitReport, Outcome, StreamError, fit_stream_with};
use crate::input::spectra::{self, Opened, Quantity, ReadOptions, WideStream};
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
    #[arg(long, default_value = "1", value_parser = parse_positive, value_name = "CM")]
    pub pathlength_cm: f64,
    /// Baseline terms fitted beside the components (free in sign): offset in AU, slope in AU/nm.
    #[arg(long, value_enum, default_value_t = BaselineArg::Offset)]
    pub baseline: BaselineArg,
    /// Wavelength window LO:HI in nm [default: all wavelengths the sample and every reference cover].
    #[arg(long, value_parser = parse_range_nm, value_name = "LO:HI")]
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
pub fn run(args: Args) -> Result<u8, Failure> {
    let options = FitOptions::try_from(&args)?;
    let format: Format = args.format.into();
    let shown = if args.input.as_os_str() == "-" {
        "standard input".to_string()
    } else {
        args.input.display().to_string()
    };
    let dir = library_dir(args.library.clone());
    let library = Library::open(&dir)?;
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
    let reader: Box<dyn Read + Send> = if args.input.as_os_str() == "-" {
        Box::new(std::io::stdin())
    } else {
        Box::new(
            std::fs::File::open(&args.input).map_err(|e| Failure::new(format!("{shown}: {e}")))?,
        )
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
            let (tx, rx) = std::sync::mpsc::sync_channel::<String>(2);
            let writer = scope.spawn(move || -> std::io::Result<()> {
                for text in rx {
                    w.write_all(text.as_bytes())?;
                }
                Ok(())
            });
            let r = fit_stream_with(stream, refs, options, checks, |chunk: Vec<Outcome>| {
                total += chunk.len();
                failed += chunk
                    .iter()
                    .filter(|o| matches!(o, Outcome::Failed(_)))
                    .count();
                tx.send(output::csv_rows_parallel(&chunk))
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
        None => {
            let mut lock = std::io::BufWriter::with_capacity(1 << 20, std::io::stdout());
            match body(&mut lock).and_then(|_| lock.flush()) {
                Ok(()) => Ok(()),
                Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
                Err(e) => Err(Failure::new(format!("standard output: {e}"))),
            }
        }
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

/// Read a file, or standard input for `-`.
pub fn read_input(path: &std::path::Path) -> Result<Vec<u8>, Failure> {
    let mut bytes = Vec::new();
    if path.as_os_str() == "-" {
        std::io::stdin()
            .read_to_end(&mut bytes)
            .map_err(|e| Failure::new(format!("standard input: {e}")))?;
    } else {
        bytes =
            std::fs::read(path).map_err(|e| Failure::new(format!("{}: {e}", path.display())))?;
    }
    Ok(bytes)
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
        None => {
            let stdout = std::io::stdout();
            let mut lock = std::io::BufWriter::new(stdout.lock());
            let r = output::write(report, format, &mut lock).and_then(|_| lock.flush());
            if let Err(e) = r
                && e.kind() != std::io::ErrorKind::BrokenPipe
            {
                return Err(Failure::new(format!("standard output: {e}")));
            }
        }
    }
    Ok(())
}

/// The exit code a report deserves.
pub fn exit_code(report: &FitReport) -> u8 {
    code_for(report.outcomes.len(), report.n_failed())
}
