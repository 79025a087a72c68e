//! `unblend library add|list|show|check`: manage reference components and
//! check that a set of them can be told apart.

use super::common::{
    BaselineArg, FormatArg, hex, library_dir, parse_pathlength_cm, parse_positive, parse_range_nm,
    print_rendered, print_stdout, summary_format,
};
use super::{Failure, exit};
use crate::guard::Named;
use crate::output;
use crate::reference::{Component, Conditions, EmissionCurve, Library, Source};
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
    /// CSV with header `wavelength_nm,epsilon`, ε in L/(mol·cm) (needed for a new component).
    #[arg(long, value_name = "FILE")]
    pub spectrum: Option<PathBuf>,
    /// Emission curve, CSV with header `wavelength_nm,intensity_per_mol_per_l` (emission per mol/L at one excitation, on your instrument and settings); added to the component, or to an existing one without --spectrum.
    #[arg(long, value_name = "FILE")]
    pub emission: Option<PathBuf>,
    /// Excitation wavelength of --emission, nm (or a `# excitation_nm = X` line in the file).
    #[arg(long, value_parser = parse_positive, value_name = "NM", requires = "emission")]
    pub excitation_nm: Option<f64>,
    /// Instrument and settings the emission curve holds for (slits, detector voltage, reader), kept with it.
    #[arg(long, value_name = "TEXT", requires = "emission")]
    pub instrument_note: Option<String>,
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
    #[arg(long, value_parser = parse_range_nm, allow_hyphen_values = true, value_name = "LO:HI")]
    pub range_nm: Option<(f64, f64)>,
    /// Absorbance noise of one reading, AU (typical 0.001–0.002; measure it as the SD of a blank).
    #[arg(long, default_value_t = DEFAULT_NOISE_AU, value_parser = parse_positive, value_name = "AU")]
    pub noise_au: f64,
    /// Optical pathlength of the samples, cm.
    #[arg(long, default_value = "1", value_parser = parse_pathlength_cm, allow_negative_numbers = true, value_name = "CM")]
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
    /// Also predict emission LOD/LOQ from the components' emission curves at this excitation, nm, beside the absorbance ones.
    #[arg(long, value_parser = parse_positive, value_name = "NM", requires = "emission_noise")]
    pub excitation_nm: Option<f64>,
    /// Emission noise of one reading, in the emission curves' intensity units (the SD of a blank's emission).
    #[arg(long, value_parser = parse_positive, value_name = "INTENSITY", requires = "excitation_nm")]
    pub emission_noise: Option<f64>,
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
    let Some(spectrum) = a.spectrum.clone() else {
        return add_emission_only(a);
    };
    let component_file = Library::path_for(&library_dir(a.library.clone()), &a.name);
    crate::guard::refuse_overwriting(
        &[Named::new("--spectrum", &spectrum)],
        &[Named::new("component file", &component_file)],
    )?;
    let emission = a
        .emission
        .as_deref()
        .map(|p| emission_curve(p, &a))
        .transpose()?;
    let shown = spectrum.display().to_string();
    let bytes = std::fs::read(&spectrum).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let table =
        crate::input::epsilon::read(&bytes).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let sha = hex(&Sha256::digest(&bytes));
    let file_name = spectrum
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or(shown.clone());
    let mut c = Component {
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
    if let Some(curve) = emission {
        c.set_emission(curve)?;
    }
    let dir = library_dir(a.library);
    let path = Library::add(&dir, &c, a.replace)?;
    let (lo, hi) = c.range_nm();
    let (peak_nm, peak) = output::library::peak(&c);
    print_stdout(&format!(
        "added '{}' to {}: {} points, {lo}–{hi} nm, peak ε {peak:.0} L/(mol·cm) at {peak_nm} nm\n",
        c.name,
        path.display(),
        c.grid.len()
    ))?;
    Ok(exit::OK)
}

/// Read `--emission` with its excitation and instrument note.
fn emission_curve(path: &std::path::Path, a: &AddArgs) -> Result<EmissionCurve, Failure> {
    let shown = path.display().to_string();
    let ctx = |e: crate::Error| Failure::new(format!("{shown}: {e}"));
    let bytes = std::fs::read(path).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let table = crate::input::emission::read(&bytes, a.excitation_nm).map_err(ctx)?;
    if table.n_zeroed > 0 {
        eprintln!(
            "unblend: note: {shown}: {} small negative intensities (noise around zero) set to 0",
            table.n_zeroed
        );
    }
    let mut curve = EmissionCurve::new(
        table.excitation_nm,
        table.grid.wavelengths_nm().to_vec(),
        table.intensity_per_mol_per_l,
    )
    .map_err(ctx)?;
    curve.instrument_note = a.instrument_note.clone();
    curve.source_file = path.file_name().map(|s| s.to_string_lossy().into_owned());
    Ok(curve)
}

/// `library add NAME --emission FILE` without `--spectrum`: add the
/// emission curve to a component already in the library.
fn add_emission_only(a: AddArgs) -> Result<u8, Failure> {
    let Some(path) = a.emission.as_deref() else {
        return Err(Failure::new(
            "library add: give --spectrum FILE (absorptivity), --emission FILE (emission curve) or both",
        ));
    };
    let curve = emission_curve(path, &a)?;
    let dir = library_dir(a.library.clone());
    let lib = Library::open(&dir)?;
    let Some(existing) = lib.get(&a.name) else {
        return Err(Failure::new(format!(
            "no component named '{}' in {}: a new component needs its absorptivity curve too (--spectrum FILE)",
            a.name,
            dir.display()
        )));
    };
    let mut c = existing.clone();
    let (ex, n) = (curve.excitation_nm, curve.grid.len());
    c.set_emission(curve)?;
    let written = Library::add(&dir, &c, true)?;
    let all: Vec<String> = c
        .emission_curves()
        .iter()
        .map(|e| format!("{} nm", e.excitation_nm))
        .collect();
    println!(
        "added an emission curve at excitation {ex} nm ({n} points) to '{}' in {} (emission curves at {})",
        c.name,
        written.display(),
        all.join(", ")
    );
    Ok(exit::OK)
}

fn list(a: ListArgs) -> Result<u8, Failure> {
    let dir = library_dir(a.library);
    let lib = Library::open(&dir)?;
    if lib.components.is_empty() && lib.broken.is_empty() {
        print_stdout(&format!(
            "{}: no components (add one with `unblend library add NAME --spectrum FILE.csv`)\n",
            dir.display()
        ))?;
        return Ok(exit::OK);
    }
    print_rendered(|w| output::library::write_list(&lib.components, w))?;
    for w in &lib.skipped {
        eprintln!("unblend: warning: {w}");
    }
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
    let limits = match (a.excitation_nm, a.emission_noise) {
        (Some(excitation_nm), Some(emission_noise)) => Some(crate::emission::limits::limits(
            &refs,
            &crate::emission::limits::LimitOptions {
                excitation_nm,
                emission_noise,
                absorbance: options,
            },
        )?),
        _ => None,
    };
    match a.format {
        FormatArg::Json => {
            let text = match &limits {
                None => serde_json::to_string_pretty(&report),
                Some(l) => serde_json::to_string_pretty(
                    &serde_json::json!({ "check": report, "emission_limits": l }),
                ),
            }
            .map_err(|e| Failure::new(format!("json: {e}")))?;
            print_stdout(&format!("{text}\n"))?;
        }
        // `summary_format` never gives csv or jsonl.
        FormatArg::Table | FormatArg::Csv | FormatArg::Jsonl => {
            print_rendered(|w| output::library::write_check(&report, w))?;
            if let Some(l) = &limits {
                print_stdout(&emission_limits_table(l, &a))?;
            }
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

/// The emission and absorbance limits side by side.
fn emission_limits_table(l: &[crate::emission::limits::ComponentLimits], a: &CheckArgs) -> String {
    let typical = l
        .iter()
        .filter_map(|c| c.emission_lod_mol_per_l)
        .fold(f64::INFINITY, f64::min);
    let (label, f) =
        output::library::concentration_unit(if typical.is_finite() { typical } else { 1e-9 });
    let v = |x: Option<f64>| x.map_or("-".into(), |x| format!("{:.4}", x * f));
    let mut out = format!(
        "\nemission at excitation {} nm, noise {} per reading, vs absorbance (noise {} AU, {} cm); {label}:\n{:<20} {:>14} {:>14} {:>14} {:>14}\n",
        a.excitation_nm.unwrap_or(f64::NAN),
        a.emission_noise.unwrap_or(f64::NAN),
        a.noise_au,
        a.pathlength_cm,
        "component",
        "LOD emission",
        "LOQ emission",
        "LOD absorbance",
        "LOQ absorbance"
    );
    for c in l {
        out.push_str(&format!(
            "{:<20} {:>14} {:>14} {:>14} {:>14}\n",
            c.name,
            v(c.emission_lod_mol_per_l),
            v(c.emission_loq_mol_per_l),
            v(c.absorbance_lod_mol_per_l),
            v(c.absorbance_loq_mol_per_l)
        ));
    }
    out
}
