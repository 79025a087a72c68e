//! Output (stage 6): render a [`FitReport`] as a terminal table, tidy CSV or
//! JSON. Units are in every column name; concentrations in CSV and JSON are
//! always mol/L (mg/L beside them where the molar mass is known).

pub mod batch;
pub mod calibration;
pub mod emission;
pub mod jsonl;
pub mod library;
pub mod notes;
pub mod qc;
pub mod run_log;
pub mod text;

use crate::fit::{FailedSample, FitReport, Outcome, SampleResult};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::io::{self, Write};

/// Output format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Format {
    /// Aligned, human-readable table.
    #[default]
    Table,
    /// Tidy CSV: one row per sample and component.
    Csv,
    /// JSON document.
    Json,
    /// JSON Lines: one object per sample ([`jsonl`]).
    JsonLines,
}

/// The JSON document written by `fit --format json`.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct JsonReport {
    /// Tool name and version.
    pub tool: ToolInfo,
    /// Component names in column order.
    pub components: Vec<String>,
    /// Fitted samples, in input order.
    pub samples: Vec<SampleResult>,
    /// Samples that could not be fitted, in input order.
    pub failed: Vec<FailedSample>,
    /// Run-level warnings.
    pub warnings: Vec<String>,
    /// What was run: input, library, options (written with the fit curves).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub run: Option<RunInfo>,
    /// Per-sample fit curves (only with `--with-curves` or `--report`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub curves: Option<Vec<crate::curves::Curves>>,
}

/// What a run was given, for the report's summary.
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq)]
pub struct RunInfo {
    /// The command (`fit`, `demo`).
    pub command: String,
    /// Input file as given.
    pub input: String,
    /// Library folder as given.
    pub library: String,
    /// Options as (name, value) pairs, values with their units.
    pub options: Vec<[String; 2]>,
}

/// Tool identification.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ToolInfo {
    /// Always `unblend`.
    pub name: String,
    /// Crate version.
    pub version: String,
}

impl JsonReport {
    /// Build the JSON document from a report.
    pub fn from_report(report: &FitReport) -> Self {
        let mut samples = Vec::new();
        let mut failed = Vec::new();
        for o in &report.outcomes {
            match o {
                Outcome::Fitted(s) => samples.push(s.clone()),
                Outcome::Failed(f) => failed.push(f.clone()),
            }
        }
        JsonReport {
            tool: ToolInfo {
                name: "unblend".into(),
                version: env!("CARGO_PKG_VERSION").into(),
            },
            components: report.component_names.clone(),
            samples,
            failed,
            warnings: report.warnings.clone(),
            run: None,
            curves: None,
        }
    }
}

/// Write a JSON document (pretty, with a final newline).
pub fn write_json(doc: &JsonReport, w: &mut dyn Write) -> io::Result<()> {
    serde_json::to_writer_pretty(&mut *w, doc).map_err(io::Error::other)?;
    writeln!(w)
}

/// Write a report in a format.
pub fn write(report: &FitReport, format: Format, w: &mut dyn Write) -> io::Result<()> {
    match format {
        Format::Table => write_table(report, w),
        Format::Csv => write_csv(report, w),
        Format::Json => write_json(&JsonReport::from_report(report), w),
        Format::JsonLines => jsonl::write(report, w),
    }
}

/// Column names of the tidy CSV; the residual-check columns (from
/// `noise_au` on, see [`notes`]) come after `error`. The last two say which
/// concentration is the answer: when a screening candidate explains the
/// residual, `refitted_mol_per_l` holds the component's concentration with
/// the candidate in the model and `answer` reads `refit`; otherwise
/// `refitted_mol_per_l` is empty and `answer` reads `fit`.
pub const CSV_HEADER: &str = "sample,component,concentration_mol_per_l,std_error_mol_per_l,concentration_mg_per_l,std_error_mg_per_l,mole_fraction,mass_fraction,baseline_offset_au,baseline_slope_au_per_nm,residual_rms_au,r_squared,range_low_nm,range_high_nm,n_points,pathlength_cm,solver,flags,error,noise_au,reduced_chi_squared,durbin_watson,alarm_p_value,band_centre_nm,band_fwhm_nm,band_peak_au,band_signal_fraction,n_masked,screen_candidate,screen_concentration_mol_per_l,screen_p_value,refitted_mol_per_l,answer";

/// Characters that make a spreadsheet read a cell as a formula when they
/// start it (OWASP, "CSV Injection": = + - @ tab carriage return).
const FORMULA_STARTS: [char; 6] = ['=', '+', '-', '@', '\t', '\r'];

/// A text cell for CSV: neutralised when it starts like a formula (a
/// leading single quote, so `=HYPERLINK(..)` or `+cmd|..` in a sample name
/// stays text when the file is opened in a spreadsheet), then quoted when
/// it needs it. Only text goes through here: numbers are written as they
/// are, and JSON keeps the raw text.
pub fn csv_field(s: &str) -> std::borrow::Cow<'_, str> {
    let s: std::borrow::Cow<'_, str> = if s.starts_with(FORMULA_STARTS) {
        std::borrow::Cow::Owned(format!("'{s}"))
    } else {
        std::borrow::Cow::Borrowed(s)
    };
    if s.contains([',', '"', '\n', '\r']) || s.starts_with(' ') || s.ends_with(' ') {
        std::borrow::Cow::Owned(format!("\"{}\"", s.replace('"', "\"\"")))
    } else {
        s
    }
}

/// A finite number in shortest round-trip form (nothing for NaN/inf).
pub(crate) fn num(out: &mut String, v: f64) {
    if v.is_finite() {
        let mut b = zmij::Buffer::new();
        out.push_str(b.format_finite(v));
    }
}

/// [`num`] of a value that may be absent.
pub(crate) fn opt(out: &mut String, v: Option<f64>) {
    if let Some(v) = v {
        num(out, v);
    }
}

fn csv_rows(o: &Outcome, out: &mut String) {
    match o {
        Outcome::Failed(f) => {
            out.push_str(&csv_field(&f.sample));
            out.push_str(&",".repeat(18));
            out.push_str(&csv_field(&f.error));
            out.push_str(&",".repeat(notes::CSV_EXTRA_COLUMNS + 2));
            out.push('\n');
        }
        Outcome::Fitted(s) => {
            // The per-sample columns are the same on every row of a sample:
            // format them once.
            let mut tail = String::with_capacity(160);
            opt(&mut tail, s.baseline.offset_au);
            tail.push(',');
            opt(&mut tail, s.baseline.slope_au_per_nm);
            tail.push(',');
            num(&mut tail, s.residual_rms);
            tail.push(',');
            opt(&mut tail, s.r_squared);
            tail.push(',');
            num(&mut tail, s.range_nm[0]);
            tail.push(',');
            num(&mut tail, s.range_nm[1]);
            tail.push(',');
            tail.push_str(itoa::Buffer::new().format(s.n_points));
            tail.push(',');
            num(&mut tail, s.pathlength_cm);
            tail.push(',');
            tail.push_str(&s.solver);
            tail.push(',');
            for (i, f) in s.flags.iter().enumerate() {
                if i > 0 {
                    tail.push(' ');
                }
                tail.push_str(f);
            }
            tail.push(',');
            notes::csv_extra(s, &mut tail);
            tail.push(',');
            let sample = csv_field(&s.sample);
            for c in &s.components {
                out.push_str(&sample);
                out.push(',');
                out.push_str(&csv_field(&c.name));
                out.push(',');
                num(out, c.concentration_mol_per_l);
                out.push(',');
                opt(out, c.std_error_mol_per_l);
                out.push(',');
                opt(out, c.concentration_mg_per_l);
                out.push(',');
                opt(out, c.std_error_mg_per_l);
                out.push(',');
                opt(out, c.mole_fraction);
                out.push(',');
                opt(out, c.mass_fraction);
                out.push(',');
                out.push_str(&tail);
                opt(out, notes::refitted_mol_per_l(s, &c.name));
                out.push(',');
                out.push_str(notes::answer(s));
                out.push('\n');
            }
        }
    }
}

/// Tidy CSV: one row per sample and component; a failed sample is one row
/// with only its name and the `error` column.
pub fn write_csv(report: &FitReport, w: &mut dyn Write) -> io::Result<()> {
    writeln!(w, "{CSV_HEADER}")?;
    w.write_all(csv_rows_parallel(&report.outcomes).as_bytes())
}

/// The CSV rows (no header) of some outcomes, formatted in parallel.
pub fn csv_rows_parallel(outcomes: &[Outcome]) -> String {
    csv_row_parts(outcomes).concat()
}

/// [`csv_rows_parallel`] in pieces (of 1,024 samples each), to be written
/// one after another without joining them first.
pub fn csv_row_parts(outcomes: &[Outcome]) -> Vec<String> {
    outcomes
        .par_chunks(1024)
        .map(|chunk| {
            // About 200 bytes per component row: one allocation per piece.
            let rows: usize = chunk
                .iter()
                .map(|o| match o {
                    Outcome::Fitted(s) => s.components.len().max(1),
                    Outcome::Failed(_) => 1,
                })
                .sum();
            let mut s = String::with_capacity(rows * 224);
            for o in chunk {
                csv_rows(o, &mut s);
            }
            s
        })
        .collect()
}

/// A concentration unit for display.
#[derive(Debug, Clone, Copy)]
pub struct DisplayUnit {
    /// Label, e.g. `µmol/L`.
    pub label: &'static str,
    /// Multiply mol/L by this.
    pub factor: f64,
}

impl DisplayUnit {
    /// mol/L, mmol/L, µmol/L or nmol/L: the largest in which `typical`
    /// (mol/L) reads 0.1 or more (µmol/L when it is not positive).
    pub fn for_typical(typical: f64) -> DisplayUnit {
        let typical = if typical.is_finite() && typical > 0.0 {
            typical
        } else {
            1e-6
        };
        let units = [
            ("mol/L", 1.0),
            ("mmol/L", 1e3),
            ("µmol/L", 1e6),
            ("nmol/L", 1e9),
        ];
        let (label, factor) = units
            .into_iter()
            .find(|(_, f)| typical * f >= 0.1)
            .unwrap_or(units[3]);
        DisplayUnit { label, factor }
    }
}

/// Choose mol/L, mmol/L, µmol/L or nmol/L so typical values read 0.1–1000.
pub fn display_unit(report: &FitReport) -> DisplayUnit {
    let mut v: Vec<f64> = report
        .outcomes
        .iter()
        .filter_map(|o| match o {
            Outcome::Fitted(s) => Some(s),
            Outcome::Failed(_) => None,
        })
        .flat_map(|s| s.components.iter().map(|c| c.concentration_mol_per_l))
        .filter(|c| *c > 0.0)
        .collect();
    v.sort_by(f64::total_cmp);
    DisplayUnit::for_typical(v.get(v.len() / 2).copied().unwrap_or(1e-6))
}

/// Aligned terminal table: one row per sample, concentrations ± standard
/// error in one display unit, then residual, R² and flags.
pub fn write_table(report: &FitReport, w: &mut dyn Write) -> io::Result<()> {
    let unit = display_unit(report);
    let mut header: Vec<String> = vec!["sample".into()];
    for name in &report.component_names {
        header.push(format!("{name} ({})", unit.label));
    }
    header.extend(["residual (mAU)".into(), "R²".into(), "flags".into()]);
    let mut rows: Vec<Vec<String>> = Vec::new();
    let mut errors: Vec<String> = Vec::new();
    for o in &report.outcomes {
        match o {
            Outcome::Fitted(s) => {
                let mut row = vec![s.sample.clone()];
                for c in &s.components {
                    row.push(match c.std_error_mol_per_l {
                        Some(se) => format!(
                            "{:.3} ± {:.3}",
                            c.concentration_mol_per_l * unit.factor,
                            se * unit.factor
                        ),
                        None => format!("{:.3} ± ?", c.concentration_mol_per_l * unit.factor),
                    });
                }
                row.push(format!("{:.2}", s.residual_rms * 1000.0));
                row.push(s.r_squared.map_or("-".into(), |r| format!("{r:.5}")));
                row.push(if s.flags.is_empty() {
                    "-".into()
                } else {
                    s.flags.join(" ")
                });
                rows.push(row);
            }
            Outcome::Failed(f) => {
                let mut row = vec![f.sample.clone()];
                row.extend(std::iter::repeat_n(
                    "error".to_string(),
                    report.component_names.len(),
                ));
                row.extend(["-".into(), "-".into(), "not fitted (see below)".into()]);
                rows.push(row);
                errors.push(format!("{}: {}", f.sample, f.error));
            }
        }
    }
    write_aligned(&header, &rows, w)?;
    if let Some(first) = report.outcomes.iter().find_map(|o| match o {
        Outcome::Fitted(s) => Some(s),
        Outcome::Failed(_) => None,
    }) {
        writeln!(
            w,
            "\nrange {}–{} nm, {} points, pathlength {} cm, solver {}; concentrations ± standard error",
            first.range_nm[0], first.range_nm[1], first.n_points, first.pathlength_cm, first.solver
        )?;
    }
    notes::write_notes(report, &unit, w)?;
    qc::write_qc(report, &unit, w)?;
    if !errors.is_empty() {
        writeln!(w, "\nnot fitted:")?;
        for e in errors {
            writeln!(w, "  {e}")?;
        }
    }
    Ok(())
}

/// Write a header, a rule and rows as aligned columns: the first and last
/// column left-aligned, the others right-aligned.
pub fn write_aligned(header: &[String], rows: &[Vec<String>], w: &mut dyn Write) -> io::Result<()> {
    let ncol = header.len();
    let mut width = vec![0usize; ncol];
    for r in std::iter::once(header).chain(rows.iter().map(Vec::as_slice)) {
        for (i, cell) in r.iter().enumerate() {
            width[i] = width[i].max(cell.chars().count());
        }
    }
    let line = |w: &mut dyn Write, r: &[String]| -> io::Result<()> {
        let mut s = String::new();
        for (i, cell) in r.iter().enumerate() {
            let pad = width[i] - cell.chars().count();
            if i == 0 || i == ncol - 1 {
                s.push_str(cell);
                if i != ncol - 1 {
                    s.push_str(&" ".repeat(pad));
                }
            } else {
                s.push_str(&" ".repeat(pad));
                s.push_str(cell);
            }
            if i != ncol - 1 {
                s.push_str("  ");
            }
        }
        writeln!(w, "{}", s.trim_end())
    };
    line(w, header)?;
    let rule: Vec<String> = width.iter().map(|n| "-".repeat(*n)).collect();
    line(w, &rule)?;
    for r in rows {
        line(w, r)?;
    }
    Ok(())
}
