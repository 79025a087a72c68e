//! Command-line interface: argument parsing (clap) and the subcommands.
//!
//! Each subcommand lives in its own file with the same order: its `Args`,
//! `pub fn run`, then helpers. Flags become engine options through
//! `TryFrom`, so the engine never depends on clap.

pub mod batch;
pub mod calibrate;
pub mod common;
pub mod demo;
pub mod diagnostic_args;
pub mod discover;
pub mod emission_args;
pub mod fit;
pub mod inputs;
pub mod library;
pub mod qc_args;
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
    interrupt_removes_temporaries();
    ExitCode::from(main_from(std::env::args_os()))
}

/// Make Ctrl-C (SIGINT, SIGTERM) end the process removing its temporary
/// files. An interrupted run's outputs keep their previous content, or,
/// past the commit point, the run finishes (see `atomic::on_interrupt`). If the handler cannot be installed the default applies: the
/// process stops at once and temporaries stay behind, but no output is ever
/// half written. For a process that is only this command (not a notebook).
pub fn interrupt_removes_temporaries() {
    let _ = ctrlc::set_handler(|| match crate::atomic::on_interrupt() {
        crate::atomic::Interrupt::Finish(message) => eprintln!("unblend: {message}"),
        crate::atomic::Interrupt::Exit(message) => {
            eprintln!("unblend: {message}");
            std::process::exit(i32::from(exit::INTERRUPTED))
        }
    });
}

/// Parse a command line (its first item is the program name), run it,
/// print any error, and return the exit code: [`main`] without the
/// interrupt handler, for callers such as the Python package's `unblend`.
pub fn main_from<I, T>(args: I) -> u8
where
    I: IntoIterator<Item = T>,
    T: Into<std::ffi::OsString> + Clone,
{
    let cli = match Cli::try_parse_from(args) {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() {
                exit::USAGE
            } else {
                exit::OK
            };
        }
    };
    match run(cli) {
        Ok(code) => code,
        Err(f) => {
            eprintln!("unblend: error: {}", f.message);
            f.code
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

#[cfg(test)]
mod tests {
    use super::*;
    use clap::CommandFactory;

    fn parse(args: &[&str]) -> Result<Cli, clap::Error> {
        Cli::try_parse_from(std::iter::once("unblend").chain(args.iter().copied()))
    }

    #[test]
    fn the_command_definition_is_consistent() {
        // clap's own check of the whole definition: duplicate flags, bad
        // defaults, conflicting groups.
        Cli::command().debug_assert();
    }

    #[test]
    fn model_flags_parse_the_same_in_fit_batch_and_discover() {
        let flags = [
            "--pathlength-cm",
            "0.5",
            "--baseline",
            "linear",
            "--range-nm",
            "400:700",
            "--quantity",
            "transmittance",
            "--components",
            "a,b",
        ];
        let mut fit = vec!["fit", "in.csv"];
        let mut batch = vec!["batch", "in.csv"];
        let mut discover = vec!["discover", "in.csv", "--out", "x.csv"];
        for v in [&mut fit, &mut batch, &mut discover] {
            v.extend(flags);
        }
        for args in [fit, batch, discover] {
            let model = match parse(&args).expect("valid command line").command {
                Command::Fit(a) => a.model,
                Command::Batch(a) => a.model,
                Command::Discover(a) => a.model,
                _ => unreachable!("only fitting subcommands are parsed here"),
            };
            let options = crate::fit::FitOptions::try_from(&model).expect("valid options");
            assert!((options.pathlength_cm - 0.5).abs() < 1e-15, "{args:?}");
            assert_eq!(options.window_nm.map(|w| w.0.round()), Some(400.0));
            assert!(matches!(
                options.baseline,
                crate::preprocess::Baseline::Linear
            ));
            assert_eq!(model.components, ["a", "b"]);
            assert!(matches!(
                model.quantity,
                Some(common::QuantityArg::Transmittance)
            ));
        }
    }

    #[test]
    fn bad_values_are_usage_errors() {
        for args in [
            ["fit", "in.csv", "--pathlength-cm", "-1"],
            ["fit", "in.csv", "--pathlength-cm", "abc"],
            ["fit", "in.csv", "--range-nm", "700:400"],
            ["fit", "in.csv", "--range-nm", "400-700"],
            ["fit", "in.csv", "--baseline", "cubic"],
            ["fit", "in.csv", "--format", "xml"],
        ] {
            let e = parse(&args).expect_err("rejected");
            assert!(e.use_stderr(), "{args:?}");
        }
    }

    #[test]
    fn summary_commands_accept_table_and_json_only() {
        let ok = parse(&["library", "check", "--format", "json"]).expect("json accepted");
        assert!(matches!(ok.command, Command::Library(_)));
        assert!(parse(&["library", "check", "--format", "csv"]).is_err());
        assert!(parse(&["discover", "in.csv", "--out", "x.csv", "--format", "csv"]).is_err());
        match parse(&["discover", "in.csv", "--out", "x.csv"]).map(|c| c.command) {
            Ok(Command::Discover(a)) => assert_eq!(a.format, common::FormatArg::Table),
            _ => panic!("discover parses with the default format"),
        }
    }
}
