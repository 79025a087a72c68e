//! `unblend library add|list|show|check`: manage reference components and
//! check that a set of them can be told apart.

use super::common::{
    BaselineArg, FormatArg, hex, library_dir, parse_positive, parse_range_nm, print_rendered,
    print_stdout, summary_format,
};
use super::{Failure, exit};
use crate::output;
use crate::reference::{Component, Conditions, Library, Source};
use crate::separability::{self, CheckOptions, DEFAULT_NOISE_AU};
use sha2::{Digest, Sha256};
use std::path::PathBuf;

/// Library subcommands.
#[derive(Debug, clap::Subcommand)]
pub enum Command {
    /// Add a component from a table of its molar absorptivity.
    Add(AddArgs),
    /// List the components in the library.
    List(ListArgs),
    /// Show one component: provenance, conditions and its curve.
    Show(ShowArgs),
    /// Check that a set of components can be separated: conditioning,
    /// similarity, variance inflation, predicted errors and limits.
    Check(CheckArgs),
}

/// Arguments of `library add`.
#[derive(Debug, clap::Args)]
pub struct AddArgs {
    /// Component name (letters, digits, '-', '_', '.'); the file is NAME.toml.
    pub name: String,
    /// CSV with header `wavelength_nm,epsilon`, ε in L/(mol·cm).
    #[arg(long, value_name = "FILE")]
    pub spectrum: PathBuf,
    /// Library folder [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Molar mass in g/mol (enables mg/L results and mass fractions).
    #[arg(long, value_parser = parse_positive, value_name = "G_PER_MOL")]
    pub molar_mass: Option<f64>,
    /// Free-text note kept with the component.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Solvent or buffer the curve was measured in.
    #[arg(long, value_name = "TEXT")]
    pub solvent: Option<String>,
    /// pH the curve was measured at.
    #[arg(long, value_name = "TEXT")]
    pub ph: Option<String>,
    /// Temperature the curve was measured at, with its unit (e.g. "25 °C").
    #[arg(long, value_name = "TEXT")]
    pub temperature: Option<String>,
    /// Overwrite an existing component of the same name.
    #[arg(long)]
    pub replace: bool,
}

/// Arguments of `library list`.
#[derive(Debug, clap::Args)]
pub struct ListArgs {
    /// Library folder [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
}

/// Arguments of `library show`.
#[derive(Debug, clap::Args)]
pub struct ShowArgs {
    /// Component name.
    pub name: String,
    /// Library folder [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Print the curve as CSV (`wavelength_nm,epsilon`) instead of a summary.
    #[arg(long)]
    pub csv: bool,
}

/// Arguments of `library check`.
#[derive(Debug, clap::Args)]
#[command(after_help = CHECK_AFTER_HELP)]
pub struct CheckArgs {
    /// Library folder [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Components to check, comma separated [default: every component in the library].
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    pub components: Vec<String>,
    /// Wavelength range LO:HI in nm [default: the range every component covers].
    #[arg(long, value_parser = parse_range_nm, value_name = "LO:HI")]
    pub range_nm: Option<(f64, f64)>,
    /// Absorbance noise of one reading, AU (typical 0.001–0.002; measure it as the SD of a blank).
    #[arg(long, default_value_t = DEFAULT_NOISE_AU, value_parser = parse_positive, value_name = "AU")]
    pub noise_au: f64,
    /// Optical pathlength of the samples, cm.
    #[arg(long, default_value = "1", value_parser = parse_positive, value_name = "CM")]
    pub pathlength_cm: f64,
    /// Baseline terms the fit will use (as `fit --baseline`).
    #[arg(long, value_enum, default_value_t = BaselineArg::Offset)]
    pub baseline: BaselineArg,
    /// Spacing of the readings the prediction assumes, nm (your instrument's step).
    #[arg(long, default_value = "1", value_parser = parse_positive, value_name = "NM")]
    pub step_nm: f64,
    /// Output format.
    #[arg(long, default_value = "table", value_parser = summary_format())]
    pub format: FormatArg,
    /// Also write a self-contained HTML page: the reference spectra overlaid and the separability tables.
    #[arg(long, value_name = "FILE.html")]
    pub report: Option<PathBuf>,
}

const CHECK_AFTER_HELP: &str = "\
The predicted standard error of each concentration is σ·√diag((EᵀE)⁻¹)/l for readings
every --step-nm nm over the range, each with independent noise --noise-au; the limit of
detection is 3.3 and the limit of quantitation 10 standard errors (common practice).
A pair whose variance inflation reaches 10 gets a `collinear-references` warning.

Exit codes:
  0  the check ran (read the warnings on standard error)
  1  failure: unreadable library, unknown component, no common wavelength range
  2  command-line usage error";

impl TryFrom<&CheckArgs> for CheckOptions {
    type Error = Failure;
    fn try_from(a: &CheckArgs) -> Result<Self, Failure> {
        Ok(CheckOptions::new(
            a.baseline.into(),
            a.range_nm,
            a.step_nm,
            a.noise_au,
            a.pathlength_cm,
        )?)
    }
}

/// Run a library subcommand.
pub fn run(cmd: Command) -> Result<u8, Failure> {
    match cmd {
        Command::Add(a) => add(a),
        Command::List(a) => list(a),
        Command::Show(a) => show(a),
        Command::Check(a) => check(a),
    }
}

fn add(a: AddArgs) -> Result<u8, Failure> {
    crate::reference::component::validate_name(&a.name)?;
    let shown = a.spectrum.display().to_string();
    let bytes = std::fs::read(&a.spectrum).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let table =
        crate::input::epsilon::read(&bytes).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let sha = hex(&Sha256::digest(&bytes));
    let file_name = a
        .spectrum
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or(shown.clone());
    let c = Component {
        name: a.name.clone(),
        molar_mass_g_per_mol: a.molar_mass,
        note: a.note,
        created: crate::dates::today_utc(),
        conditions: Conditions {
            solvent: a.solvent,
            ph: a.ph,
            temperature: a.temperature,
        },
        source: Source {
            kind: "imported".into(),
            file: Some(file_name),
            sha256: Some(sha),
        },
        grid: table.grid,
        epsilon_l_per_mol_cm: table.epsilon_l_per_mol_cm,
        epsilon_std_error_l_per_mol_cm: None,
        extra: toml::Table::new(),
    };
    let dir = library_dir(a.library);
    let path = Library::add(&dir, &c, a.replace)?;
    let (lo, hi) = c.range_nm();
    let (peak_nm, peak) = output::library::peak(&c);
    println!(
        "added '{}' to {}: {} points, {lo}–{hi} nm, peak ε {peak:.0} L/(mol·cm) at {peak_nm} nm",
        c.name,
        path.display(),
        c.grid.len()
    );
    Ok(exit::OK)
}

fn list(a: ListArgs) -> Result<u8, Failure> {
    let dir = library_dir(a.library);
    let lib = Library::open(&dir)?;
    if lib.components.is_empty() && lib.broken.is_empty() {
        println!(
            "{}: no components (add one with `unblend library add NAME --spectrum FILE.csv`)",
            dir.display()
        );
        return Ok(exit::OK);
    }
    print_rendered(|w| output::library::write_list(&lib.components, w))?;
    for e in &lib.broken {
        eprintln!("unblend: warning: {e}");
    }
    Ok(if lib.broken.is_empty() {
        exit::OK
    } else {
        exit::PARTIAL
    })
}

fn show(a: ShowArgs) -> Result<u8, Failure> {
    let dir = library_dir(a.library);
    let lib = Library::open(&dir)?;
    let set = lib.select(std::slice::from_ref(&a.name))?;
    let c = &set.components[0];
    if a.csv {
        print_rendered(|w| output::library::write_component_csv(c, w))?;
    } else {
        let path = Library::path_for(&dir, &c.name);
        print_rendered(|w| output::library::write_component(c, &path, w))?;
    }
    Ok(exit::OK)
}

fn check(a: CheckArgs) -> Result<u8, Failure> {
    let options = CheckOptions::try_from(&a)?;
    let dir = library_dir(a.library.clone());
    let lib = Library::open(&dir)?;
    let refs = lib.select(&a.components)?;
    let report = separability::check(&refs, &options)?;
    for w in &report.warnings {
        eprintln!("unblend: warning: {w}");
    }
    match a.format {
        FormatArg::Json => {
            let text = serde_json::to_string_pretty(&report)
                .map_err(|e| Failure::new(format!("json: {e}")))?;
            print_stdout(&format!("{text}\n"))?;
        }
        // `summary_format` never gives csv.
        FormatArg::Table | FormatArg::Csv => {
            print_rendered(|w| output::library::write_check(&report, w))?
        }
    }
    if let Some(path) = &a.report {
        let html = crate::report::render_check_html(&refs, &report, &dir.display().to_string());
        crate::atomic::write_with(path, false, |w| {
            std::io::Write::write_all(w, html.as_bytes())
        })?;
        eprintln!("unblend: wrote the check report to {}", path.display());
    }
    Ok(exit::OK)
}
