//! Command-line interface: argument parsing (clap) and the subcommands.
//!
//! Each subcommand lives in its own file with the same order: its `Args`,
//! `pub fn run`, then helpers. Flags become engine options through
//! `TryFrom`, so the engine never depends on clap.

pub mod batch;
pub mod calibrate;
pub mod demo;
pub mod diagnostic_args;
pub mod discover;
pub mod fit;
pub mod library;
pub mod report;
pub mod stdout;

use clap::{Parser, Subcommand};
use std::process::ExitCode;

/// Exit codes, documented in `--help` and the README.
pub mod exit {
    /// Everything asked for was done.
    pub const OK: u8 = 0;
    /// Nothing could be done: bad input file, library or option.
    pub const FAILED: u8 = 1;
    /// Command-line usage error (unknown option, missing argument).
    pub const USAGE: u8 = 2;
    /// Partly done: some samples could not be fitted; the rest were.
    pub const PARTIAL: u8 = 3;
    /// Interrupted (Ctrl-C, SIGINT or SIGTERM): 128 + SIGINT, the shell's
    /// convention. Outputs keep their previous content.
    pub const INTERRUPTED: u8 = 130;
}

const AFTER_HELP: &str = "\
Exit codes:
  0  success
  1  failure: nothing was fitted or written (bad file, library or option)
  2  command-line usage error
  3  partial: some samples failed (listed in the output), the others were fitted
  130  interrupted (Ctrl-C): outputs keep their previous content

Results are decision support, not a certified analysis.";

/// Turn absorbance spectra of mixtures into component concentrations.
#[derive(Debug, Parser)]
#[command(name = "unblend", version, about, after_help = AFTER_HELP)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Fit spectra as non-negative sums of reference components.
    Fit(fit::Args),
    /// Fit plate-reader runs: plate maps, blanks, pathlengths, dilutions, replicates.
    Batch(batch::Args),
    /// Add, list, show and check reference components.
    #[command(subcommand)]
    Library(library::Command),
    /// Make a reference component from a blank and a series of standards.
    Calibrate(calibrate::Args),
    /// Run the fit on the built-in demo data (an invented ink workshop).
    Demo(demo::Args),
    /// Recover the spectrum of an unknown absorber shared by flagged samples.
    Discover(discover::Args),
    /// Make a self-contained HTML report from saved JSON results.
    Report(report::Args),
}

/// An error for the user, with the exit code it should give.
#[derive(Debug)]
pub struct Failure {
    /// Message, possibly several lines.
    pub message: String,
    /// Exit code.
    pub code: u8,
}

impl Failure {
    /// A failure with exit code [`exit::FAILED`].
    pub fn new(message: impl Into<String>) -> Self {
        Failure {
            message: message.into(),
            code: exit::FAILED,
        }
    }

    /// A command-line usage error (options that do not go together, a
    /// value clap cannot check alone), with exit code [`exit::USAGE`].
    pub fn usage(message: impl Into<String>) -> Self {
        Failure {
            message: message.into(),
            code: exit::USAGE,
        }
    }
}

impl From<crate::Error> for Failure {
    fn from(e: crate::Error) -> Self {
        Failure::new(e.to_string())
    }
}

/// Parse the command line, run it, and return the exit code.
pub fn main() -> ExitCode {
    // An interrupted run removes its temporary files; the outputs it was
    // writing keep their previous content, or, past the commit point, the
    // run finishes (see `atomic::on_interrupt`). If the handler
    // cannot be installed the default applies: the process stops at once and
    // temporaries stay behind, but no output is ever half written.
    let _ = ctrlc::set_handler(|| crate::atomic::on_interrupt(i32::from(exit::INTERRUPTED)));
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return ExitCode::from(if e.use_stderr() {
                exit::USAGE
            } else {
                exit::OK
            });
        }
    };
    match run(cli) {
        Ok(code) => ExitCode::from(code),
        Err(f) => {
            eprintln!("unblend: error: {}", f.message);
            ExitCode::from(f.code)
        }
    }
}

/// Run a parsed command line; returns the exit code on success.
pub fn run(cli: Cli) -> Result<u8, Failure> {
    match cli.command {
        Command::Fit(a) => fit::run(a),
        Command::Batch(a) => batch::run(a),
        Command::Library(c) => library::run(c),
        Command::Calibrate(a) => calibrate::run(a),
        Command::Demo(a) => demo::run(a),
        Command::Discover(a) => discover::run(a),
        Command::Report(a) => report::run(a),
    }
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
    for v in [lo, hi] {
        crate::ranges::WAVELENGTH_NM
            .check(v)
            .map_err(|e| format!("'{s}': {e}"))?;
    }
    if hi <= lo {
        return Err(format!("'{s}': expected 0 < LO < HI in nm"));
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
