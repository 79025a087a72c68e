//! `unblend calibrate`: a reference component from a blank and standards.

use super::common::{
    FormatArg, QuantityArg, file_name, hex, library_dir, parse_pathlength_cm, parse_positive,
    parse_range_nm, print_rendered, print_stdout, summary_format,
};
use super::inputs;
use super::{Failure, exit};
use crate::calibrate::{
    self, ABSORBANCE_CEILING_AU, CalibrationOptions, LINEARITY_TOLERANCE, Provenance,
};
use crate::guard::Named;
use crate::input::concentrations::{self, ConcentrationUnit};
use crate::output;
use crate::reference::{Conditions, Library};
use sha2::{Digest, Sha256};
use std::path::PathBuf;

const AFTER_HELP: &str = "\
Concentration file: CSV `sample,concentration[,role][,unit][,note]`, one row per spectrum in INPUT.
  Blanks have concentration 0 or role `blank`; role `exclude` leaves a spectrum out.
  Rows that share a concentration are replicates. The unit may also be in the header
  (`concentration_umol_per_l`) or the cells (`12.5 umol/L`); all statements must agree.

Exit codes:
  0  success: the component was written (or, with --dry-run, would be)
  1  failure: nothing was written (bad file, unmatched samples, too few standards, ...)
  2  command-line usage error
  3  partial: some standards could not be read and were left out (named on stderr)

Results are decision support, not a certified analysis.";

/// Fit ε(λ) per wavelength from a blank and standards: A − A_blank = ε·l·c + b.
#[derive(Debug, clap::Args)]
#[command(after_help = AFTER_HELP)]
pub struct Args {
    /// Spectra of the blanks and standards: files or folders in any shape `fit` reads; `-` reads standard input.
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// CSV naming each standard's concentration: `sample,concentration[,role]`.
    #[arg(long, value_name = "FILE")]
    pub concentrations: PathBuf,
    /// Name of the new component (letters, digits, '-', '_', '.'); written as NAME.toml.
    #[arg(long)]
    pub name: String,
    /// Library folder to write into [default: $UNBLEND_LIBRARY or ./library].
    #[arg(long, value_name = "DIR")]
    pub library: Option<PathBuf>,
    /// Optical pathlength of the standards' cell, cm.
    #[arg(long, default_value = "1", value_parser = parse_pathlength_cm, allow_negative_numbers = true, value_name = "CM")]
    pub pathlength_cm: f64,
    /// Molar mass in g/mol (needed for mg/L and g/L; enables mg/L results).
    #[arg(long, value_parser = parse_positive, value_name = "G_PER_MOL")]
    pub molar_mass: Option<f64>,
    /// Unit of the concentrations: mol/L, mmol/L, umol/L, mg/L or g/L [default: as the file says, else mol/L].
    #[arg(long, value_parser = parse_unit, value_name = "UNIT")]
    pub unit: Option<ConcentrationUnit>,
    /// What the numbers in INPUT are [default: what the file says (a value heading, a units/mode metadata line, ##YUNITS), else absorbance]. Given, it wins over the file, with a warning when they differ.
    #[arg(long, value_enum)]
    pub quantity: Option<QuantityArg>,
    /// Use only wavelengths in LO:HI nm [default: every wavelength in INPUT].
    #[arg(long, value_parser = parse_range_nm, allow_hyphen_values = true, value_name = "LO:HI")]
    pub range_nm: Option<(f64, f64)>,
    /// Relative deviation from the line of the lower standards that counts as non-linear (fraction).
    #[arg(long, default_value_t = LINEARITY_TOLERANCE, value_parser = parse_positive, value_name = "FRACTION")]
    pub linearity_tolerance: f64,
    /// Readings above this absorbance are not used (stray light), AU.
    #[arg(long, default_value_t = ABSORBANCE_CEILING_AU, value_parser = parse_positive, value_name = "AU")]
    pub max_absorbance_au: f64,
    /// Free-text note kept with the component.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Solvent or buffer of the standards.
    #[arg(long, value_name = "TEXT")]
    pub solvent: Option<String>,
    /// pH of the standards.
    #[arg(long, value_name = "TEXT")]
    pub ph: Option<String>,
    /// Temperature of the standards, with its unit (e.g. "25 °C").
    #[arg(long, value_name = "TEXT")]
    pub temperature: Option<String>,
    /// Overwrite an existing component of the same name.
    #[arg(long)]
    pub replace: bool,
    /// Report only: do not write the component.
    #[arg(long)]
    pub dry_run: bool,
    /// INPUT holds emission spectra (intensities) at --excitation-nm: make an emission curve and add it to the existing component NAME (standards bent by the inner filter or self-quenching are left out and named).
    #[arg(long, requires = "excitation_nm")]
    pub emission: bool,
    /// Excitation wavelength of the emission standards, nm (with --emission).
    #[arg(long, value_parser = parse_positive, value_name = "NM", requires = "emission")]
    pub excitation_nm: Option<f64>,
    /// Instrument and settings the emission curve holds for, kept with it (with --emission).
    #[arg(long, value_name = "TEXT", requires = "emission")]
    pub instrument_note: Option<String>,
    /// Write the line at every wavelength (ε, standard errors, intercept, R², …) as CSV to FILE.
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Format of the summary on standard output.
    #[arg(long, default_value = "table", value_parser = summary_format())]
    pub format: FormatArg,
}

fn parse_unit(s: &str) -> Result<ConcentrationUnit, String> {
    ConcentrationUnit::parse(s).ok_or_else(|| {
        format!("'{s}': expected a concentration unit: mol/L, mmol/L, umol/L, mg/L or g/L")
    })
}

impl TryFrom<&Args> for CalibrationOptions {
    type Error = Failure;
    fn try_from(a: &Args) -> Result<Self, Failure> {
        Ok(CalibrationOptions::new(
            a.pathlength_cm,
            a.range_nm,
            a.linearity_tolerance,
            a.max_absorbance_au,
        )?)
    }
}

/// Run `unblend calibrate`.
pub fn run(args: Args) -> Result<u8, Failure> {
    crate::reference::component::validate_name(&args.name)?;
    refuse_overwriting_inputs(&args)?;
    let options = CalibrationOptions::try_from(&args)?;
    let read = inputs::read_all_with_provenance(&args.inputs, args.quantity.map(Into::into))?;
    for w in &read.file.warnings {
        eprintln!("unblend: warning: {w}");
    }
    let file = read.file;
    let conc_shown = args.concentrations.display().to_string();
    let conc_bytes = std::fs::read(&args.concentrations)
        .map_err(|e| Failure::new(format!("{conc_shown}: {e}")))?;
    let table = concentrations::read(&conc_bytes, args.unit)
        .map_err(|e| Failure::new(format!("{conc_shown}: {e}")))?;
    let standards = table
        .standards(args.molar_mass)
        .map_err(|e| Failure::new(format!("{conc_shown}: {e}")))?;
    let provenance = Provenance {
        standards_file: read.names.join(", "),
        standards_sha256: hex(&read.sha256),
        concentrations_file: file_name(&args.concentrations),
        concentrations_sha256: hex(&Sha256::digest(&conc_bytes)),
        concentration_unit: table.unit.label().into(),
        date: crate::dates::today_utc(),
    };
    if let (true, Some(excitation_nm)) = (args.emission, args.excitation_nm) {
        return run_emission(
            &args,
            &file,
            &standards,
            &options,
            &provenance,
            excitation_nm,
        );
    }
    let mut result = calibrate::calibrate(&file, &standards, &options, &provenance)?;
    if table.unit_stated_by.is_none() {
        result.warnings.insert(
            0,
            "no concentration unit given: read as mol/L (state it with --unit or in the header, e.g. `concentration_umol_per_l`)".into(),
        );
    }
    let component = result.component(
        &args.name,
        args.molar_mass,
        args.note.clone(),
        Conditions {
            solvent: args.solvent.clone(),
            ph: args.ph.clone(),
            temperature: args.temperature.clone(),
        },
    )?;
    let written = if args.dry_run {
        None
    } else {
        let dir = library_dir(args.library.clone());
        Some(Library::add(&dir, &component, args.replace)?)
    };
    if let Some(path) = &args.out {
        crate::atomic::write_with(path, false, |w| {
            output::calibration::write_wavelengths(&result, w)
        })?;
    }
    for w in &result.warnings {
        eprintln!("unblend: warning: {w}");
    }
    print_result(&args, &table.unit, &result, written.as_deref())?;
    Ok(if result.unreadable.is_empty() {
        exit::OK
    } else {
        exit::PARTIAL
    })
}

/// Refuse a run whose outputs (--out, the component file) are one of its
/// inputs (the standards, --concentrations), before anything is read.
fn refuse_overwriting_inputs(args: &Args) -> Result<(), Failure> {
    let component_file = Library::path_for(&library_dir(args.library.clone()), &args.name);
    let outputs = crate::guard::given(&[
        ("--out", args.out.as_deref()),
        ("component file", Some(&component_file)),
    ]);
    let mut named_inputs: Vec<Named> = args.inputs.iter().map(|p| Named::new("input", p)).collect();
    named_inputs.push(Named::new("--concentrations", &args.concentrations));
    crate::guard::refuse_overwriting(&named_inputs, &outputs)?;
    Ok(())
}

/// Print the calibration's summary in the chosen format.
fn print_result(
    args: &Args,
    unit: &ConcentrationUnit,
    result: &calibrate::CalibrationResult,
    written: Option<&std::path::Path>,
) -> Result<(), Failure> {
    match args.format {
        FormatArg::Json => {
            let summary = output::calibration::Summary {
                tool: output::ToolInfo {
                    name: "unblend".into(),
                    version: env!("CARGO_PKG_VERSION").into(),
                },
                component: &args.name,
                file: written.map(|p| p.display().to_string()),
                calibration: &result.calibration,
                unreadable: &result.unreadable,
                warnings: &result.warnings,
            };
            let text = serde_json::to_string_pretty(&summary)
                .map_err(|e| Failure::new(format!("json: {e}")))?;
            print_stdout(&format!("{text}\n"))?;
        }
        // `summary_format` never gives csv or jsonl.
        FormatArg::Table | FormatArg::Csv | FormatArg::Jsonl => {
            let text = output::calibration::SummaryText {
                name: &args.name,
                molar_mass_g_per_mol: args.molar_mass,
                unit,
                written,
            };
            print_rendered(|w| output::calibration::write_summary(result, &text, w))?
        }
    }
    Ok(())
}

/// `calibrate --emission`: an emission curve from the standards, added to
/// the component NAME already in the library.
fn run_emission(
    args: &Args,
    file: &crate::input::spectra::SpectraFile,
    standards: &[crate::input::concentrations::Standard],
    options: &CalibrationOptions,
    provenance: &Provenance,
    excitation_nm: f64,
) -> Result<u8, Failure> {
    let (mut curve, result) = crate::emission::calibrate::emission_curve(
        file,
        standards,
        options,
        provenance,
        excitation_nm,
    )?;
    curve.instrument_note = args.instrument_note.clone();
    let dir = library_dir(args.library.clone());
    let lib = Library::open(&dir)?;
    let mut component = lib.get(&args.name).cloned().ok_or_else(|| {
        Failure::new(format!(
            "no component named '{}' in {}: add it with its absorptivity curve first (library add or calibrate), then its emission curve",
            args.name,
            dir.display()
        ))
    })?;
    component.set_emission(curve.clone())?;
    let written = if args.dry_run {
        None
    } else {
        Some(Library::add(&dir, &component, true)?)
    };
    for w in &result.warnings {
        eprintln!("unblend: warning: {w}");
    }
    let cal = &result.calibration;
    let doc = serde_json::json!({
        "component": args.name,
        "file": written.as_ref().map(|p| p.display().to_string()),
        "excitation_nm": excitation_nm,
        "n_points": curve.grid.len(),
        "range_nm": cal.range_nm,
        "band_max_nm": cal.band_max_nm,
        "intensity_per_mol_per_l_at_band_max": cal.epsilon_at_band_max_l_per_mol_cm,
        "r_squared_at_band_max": cal.r_squared_at_band_max,
        "n_standards": cal.n_standards,
        "concentration_max_mol_per_l": cal.concentration_max_mol_per_l,
        "excluded_standards": cal.excluded_standards,
        "warnings": result.warnings,
    });
    let text = match args.format {
        FormatArg::Json => format!("{doc:#}\n"),
        FormatArg::Table | FormatArg::Csv | FormatArg::Jsonl => {
            let mut t = format!(
                "emission curve of '{}' at excitation {excitation_nm} nm: {} points, {}–{} nm, {:.4e} per mol/L at {} nm (R² {:.5}), {} standards up to {:.4e} mol/L\n",
                args.name,
                curve.grid.len(),
                cal.range_nm[0],
                cal.range_nm[1],
                cal.epsilon_at_band_max_l_per_mol_cm,
                cal.band_max_nm,
                cal.r_squared_at_band_max,
                cal.n_standards,
                cal.concentration_max_mol_per_l
            );
            for e in &cal.excluded_standards {
                t.push_str(&format!(
                    "left out: {} ({:.4e} mol/L): {}\n",
                    e.sample, e.concentration_mol_per_l, e.reason
                ));
            }
            t.push_str(&match &written {
                Some(p) => format!("wrote {}\n", p.display()),
                None => "dry run: nothing written\n".into(),
            });
            t
        }
    };
    print_stdout(&text)?;
    Ok(if result.unreadable.is_empty() {
        exit::OK
    } else {
        exit::PARTIAL
    })
}
