//! `unblend fit`: fit spectra against reference components.

use super::diagnostic_args::DiagnosticArgs;
use super::{Failure, exit, library_dir, parse_positive, parse_range_nm};
use crate::fit::{FitOptions, FitReport};
use crate::input::spectra::{self, Quantity, ReadOptions};
use crate::output::{self, Format};
use crate::preprocess::Baseline;
use crate::reference::Library;
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
    let shown = if args.input.as_os_str() == "-" {
        "standard input".to_string()
    } else {
        args.input.display().to_string()
    };
    let bytes = read_input(&args.input)?;
    let file = spectra::read(
        &bytes,
        ReadOptions {
            quantity: args.quantity.into(),
        },
    )
    .map_err(|e| Failure::new(format!("{shown}: {e}")))?;
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
        checks.candidates = Some(crate::reference::ReferenceSet {
            components: candidates.components,
        });
    }
    let report = crate::fit::fit_file_with(&file, &refs, &options, &checks)?;
    emit(&report, args.format.into(), args.out.as_deref())?;
    Ok(exit_code(&report))
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
            let n = report.outcomes.len();
            eprintln!(
                "unblend: wrote {} of {n} samples to {}{}",
                n - report.n_failed(),
                path.display(),
                if report.n_failed() > 0 {
                    format!(" ({} not fitted, listed in the file)", report.n_failed())
                } else {
                    String::new()
                }
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
    let failed = report.n_failed();
    if failed == 0 {
        exit::OK
    } else if failed == report.outcomes.len() {
        exit::FAILED
    } else {
        exit::PARTIAL
    }
}
