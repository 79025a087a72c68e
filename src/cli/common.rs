//! What the subcommands share: the model flags (`ModelArgs`), the one
//! reference loader, the value enums, input reading, number display and the
//! way results reach a file or standard output. Subcommand files import from
//! here and from `cli/mod.rs`, never from each other.

use super::{Failure, exit};
use crate::fit::{FitOptions, FitReport};
use crate::input::spectra::{Quantity, ReadOptions};
pub use crate::output::text::sig;
use crate::output::{self, Format};
use crate::preprocess::Baseline;
use crate::reference::{Library, ReferenceSet};
use clap::ValueEnum;
use clap::builder::{PossibleValue, PossibleValuesParser, TypedValueParser};

use std::path::{Path, PathBuf};

/// The model every fitting subcommand (`fit`, `batch`, `discover`) builds:
/// which references, the pathlength, the baseline terms, the wavelength
/// window, and what the input numbers are.
#[derive(Debug, clap::Args)]
pub struct ModelArgs {
    /// Library folder of component files [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Components to fit, comma separated [default: every component in the library].
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    pub components: Vec<String>,
    /// Optical pathlength in cm (in `batch`: for wells whose plate map gives none).
    #[arg(long, default_value = "1", value_parser = parse_pathlength_cm, allow_negative_numbers = true, value_name = "CM")]
    pub pathlength_cm: f64,
    /// Baseline terms fitted beside the components (free in sign): offset in AU, slope in AU/nm.
    #[arg(long, value_enum, default_value_t = BaselineArg::Offset)]
    pub baseline: BaselineArg,
    /// Wavelength window LO:HI in nm [default: all wavelengths the input and every reference cover].
    #[arg(long, value_parser = parse_range_nm, allow_hyphen_values = true, value_name = "LO:HI")]
    pub range_nm: Option<(f64, f64)>,
    /// What the numbers in the input are [default: what each file says (a value heading, a units/mode metadata line, ##YUNITS), else absorbance]. Given, it wins over the file, with a warning when they differ.
    #[arg(long, value_enum)]
    pub quantity: Option<QuantityArg>,
}

impl TryFrom<&ModelArgs> for FitOptions {
    type Error = Failure;
    fn try_from(a: &ModelArgs) -> Result<Self, Failure> {
        Ok(FitOptions {
            baseline: a.baseline.into(),
            window_nm: a.range_nm,
            pathlength_cm: a.pathlength_cm,
        })
    }
}

/// The references a run fits, with the library folder they came from.
pub struct References {
    /// The library folder (for logs and reports).
    pub dir: PathBuf,
    /// The selected components.
    pub set: ReferenceSet,
}

impl ModelArgs {
    /// Open the library and select the `--components` (all by default).
    pub fn references(&self) -> Result<References, Failure> {
        let dir = library_dir(self.library.clone());
        let library = Library::open(&dir)?;
        for w in &library.skipped {
            eprintln!("unblend: warning: {w}");
        }
        let set = library.select(&self.components)?;
        Ok(References { dir, set })
    }

    /// How the input files are read.
    pub fn read_options(&self) -> ReadOptions {
        ReadOptions {
            quantity: self.quantity.map(Into::into),
            ..Default::default()
        }
    }
}

/// The candidates of `--screen-with DIR`: every readable component there.
/// `flagged` names what the residual tests flag ("samples", "wells").
pub fn screening_candidates(
    dir: &Path,
    no_diagnostics: bool,
    flagged: &str,
) -> Result<ReferenceSet, Failure> {
    if no_diagnostics {
        return Err(Failure::new(format!(
            "--screen-with tries candidates on {flagged} the residual tests flag: drop --no-diagnostics"
        )));
    }
    let candidates = Library::open(dir).map_err(|e| Failure::new(format!("--screen-with: {e}")))?;
    for e in &candidates.broken {
        eprintln!("unblend: warning: screening library: {e}");
    }
    if candidates.components.is_empty() {
        return Err(Failure::new(format!(
            "--screen-with {}: no readable component files (*.toml) there",
            dir.display()
        )));
    }
    Ok(ReferenceSet {
        components: candidates.components,
    })
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
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum FormatArg {
    /// Aligned table for the terminal.
    Table,
    /// Tidy CSV, one row per sample and component.
    Csv,
    /// JSON document.
    Json,
    /// JSON Lines: one JSON object per sample, streamed in input order.
    Jsonl,
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
            FormatArg::Jsonl => Format::JsonLines,
        }
    }
}

/// `--format` of the subcommands that print a summary (`calibrate`,
/// `discover`, `library check`): [`FormatArg`] without `csv`.
pub fn summary_format() -> impl TypedValueParser<Value = FormatArg> {
    PossibleValuesParser::new([
        PossibleValue::new("table").help("Aligned text for the terminal"),
        PossibleValue::new("json").help("JSON document"),
    ])
    .map(|s| {
        if s == "json" {
            FormatArg::Json
        } else {
            FormatArg::Table
        }
    })
}

/// The library folder: `--library`, else `UNBLEND_LIBRARY`, else `./library`.
pub fn library_dir(flag: Option<std::path::PathBuf>) -> std::path::PathBuf {
    flag.or_else(|| std::env::var_os("UNBLEND_LIBRARY").map(Into::into))
        .unwrap_or_else(|| "library".into())
}

/// Parse `LO:HI` in nm.
pub fn parse_range_nm(s: &str) -> Result<(f64, f64), String> {
    let (lo, hi) = s
        .split_once(':')
        .ok_or_else(|| format!("'{s}': expected LO:HI in nm, e.g. 400:700"))?;
    let lo: f64 = lo
        .trim()
        .parse()
        .map_err(|_| format!("'{lo}': expected a wavelength in nm"))?;
    let hi: f64 = hi
        .trim()
        .parse()
        .map_err(|_| format!("'{hi}': expected a wavelength in nm"))?;
    if !(lo.is_finite() && hi.is_finite() && lo > 0.0 && hi > lo) {
        return Err(format!("'{s}': expected 0 < LO < HI in nm"));
    }
    for v in [lo, hi] {
        crate::ranges::WAVELENGTH_NM
            .check(v)
            .map_err(|e| format!("'{s}': {e}"))?;
    }
    Ok((lo, hi))
}

/// Parse a pathlength in cm inside its plausible range (1 µm to 10 m).
pub fn parse_pathlength_cm(s: &str) -> Result<f64, String> {
    crate::ranges::PATHLENGTH_CM.parse(s)
}

/// Parse a positive finite number (pathlength, molar mass).
pub fn parse_positive(s: &str) -> Result<f64, String> {
    match s.trim().parse::<f64>() {
        Ok(v) if v.is_finite() && v > 0.0 => Ok(v),
        _ => Err(format!("'{s}': expected a positive number")),
    }
}

/// The closing line of a run that wrote results to a file.
pub fn summary(total: usize, failed: usize, path: &std::path::Path) -> String {
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

/// The exit code for `failed` of `total` samples.
pub fn code_for(total: usize, failed: usize) -> u8 {
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
        e => Failure::new(format!("{}: {e}", shown(path))),
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

/// Write text to standard output; a reader that went away (a closed pipe)
/// is not an error, a full device is (see [`super::stdout`]).
pub fn print_stdout(text: &str) -> Result<(), Failure> {
    super::stdout::print(text)
}

/// Render into memory with `write` and print the text on standard output
/// (see [`print_stdout`]).
pub fn print_rendered(
    write: impl FnOnce(&mut Vec<u8>) -> std::io::Result<()>,
) -> Result<(), Failure> {
    let mut text = Vec::new();
    write(&mut text).map_err(|e| Failure::new(format!("standard output: {e}")))?;
    print_stdout(&String::from_utf8_lossy(&text))
}

/// An input path as messages show it (`-` is standard input).
pub fn shown(path: &Path) -> String {
    if path.as_os_str() == "-" {
        "standard input".into()
    } else {
        path.display().to_string()
    }
}

/// An input's file name for logs and provenance (`-` is standard input).
pub fn file_name(path: &Path) -> String {
    if path.as_os_str() == "-" {
        return "standard input".into();
    }
    path.file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| path.display().to_string())
}

/// Bytes as lowercase hexadecimal (SHA-256 digests).
pub fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}
