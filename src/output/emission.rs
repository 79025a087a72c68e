//! Output of emission fits: an [`EmissionReport`] as a terminal table, tidy
//! CSV or JSON. Concentrations are mol/L as for absorbance; residuals,
//! baselines and the Raman height are in the input's intensity units
//! (`_intensity` in column names); absorbances in AU.

use super::{DisplayUnit, Format, ToolInfo, csv_field, display_unit};
use crate::emission::{EmissionOutcome, EmissionReport, InnerFilterResult, RamanResult};
use crate::fit::{ComponentResult, FailedSample};
use serde::{Deserialize, Serialize};
use std::io::{self, Write};

/// The JSON document of `fit --signal emission --format json`.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct EmissionJson {
    /// Tool name and version.
    pub tool: ToolInfo,
    /// Always `emission`.
    pub signal: String,
    /// Excitation wavelength, nm.
    pub excitation_nm: f64,
    /// Fluorophores in column order.
    pub components: Vec<String>,
    /// Fitted samples, in input order.
    pub samples: Vec<EmissionSampleJson>,
    /// Samples that could not be fitted, in input order.
    pub failed: Vec<FailedSample>,
    /// Run-level warnings.
    pub warnings: Vec<String>,
}

/// One fitted sample in the JSON document.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct EmissionSampleJson {
    /// Sample identifier.
    pub sample: String,
    /// Concentrations (mol/L) and blend fractions of the fluorophores.
    pub components: Vec<ComponentResult>,
    /// Fitted offset, intensity units (absent without that term).
    pub baseline_offset_intensity: Option<f64>,
    /// Fitted slope, intensity units per nm (absent without that term).
    pub baseline_slope_intensity_per_nm: Option<f64>,
    /// Residual root mean square, intensity units.
    pub residual_rms_intensity: f64,
    /// Noise estimated from the residual, intensity units (with the checks).
    pub noise_intensity: Option<f64>,
    /// Coefficient of determination.
    pub r_squared: Option<f64>,
    /// Emission range used, nm.
    pub range_nm: [f64; 2],
    /// Number of wavelengths used.
    pub n_points: usize,
    /// Flags raised.
    pub flags: Vec<String>,
    /// The water Raman term (with `--raman`).
    pub water_raman: Option<RamanResult>,
    /// The inner-filter correction (with `--absorbance`).
    pub inner_filter: Option<InnerFilterResult>,
}

impl EmissionJson {
    /// Build the JSON document from a report.
    pub fn from_report(report: &EmissionReport) -> Self {
        let mut samples = Vec::new();
        let mut failed = Vec::new();
        for o in &report.outcomes {
            match o {
                EmissionOutcome::Fitted(s) => {
                    let r = &s.result;
                    samples.push(EmissionSampleJson {
                        sample: r.sample.clone(),
                        components: r.components.clone(),
                        baseline_offset_intensity: r.baseline.offset_au,
                        baseline_slope_intensity_per_nm: r.baseline.slope_au_per_nm,
                        residual_rms_intensity: r.residual_rms,
                        noise_intensity: r.diagnostics.as_ref().map(|d| d.noise_au),
                        r_squared: r.r_squared,
                        range_nm: r.range_nm,
                        n_points: r.n_points,
                        flags: r.flags.clone(),
                        water_raman: s.raman.clone(),
                        inner_filter: s.inner_filter.clone(),
                    })
                }
                EmissionOutcome::Failed(f) => failed.push(f.clone()),
            }
        }
        EmissionJson {
            tool: ToolInfo {
                name: "unblend".into(),
                version: env!("CARGO_PKG_VERSION").into(),
            },
            signal: "emission".into(),
            excitation_nm: report.excitation_nm,
            components: report.component_names.clone(),
            samples,
            failed,
            warnings: report.warnings.clone(),
        }
    }
}

/// Write an emission report in a format.
pub fn write(report: &EmissionReport, format: Format, w: &mut dyn Write) -> io::Result<()> {
    match format {
        Format::Table => write_table(report, w),
        Format::Csv => write_csv(report, w),
        Format::Json => {
            serde_json::to_writer_pretty(&mut *w, &EmissionJson::from_report(report))
                .map_err(io::Error::other)?;
            writeln!(w)
        }
        Format::JsonLines => {
            // One object per sample, then one per failed sample.
            let doc = EmissionJson::from_report(report);
            for s in &doc.samples {
                serde_json::to_writer(&mut *w, s).map_err(io::Error::other)?;
                writeln!(w)?;
            }
            for f in &doc.failed {
                serde_json::to_writer(&mut *w, f).map_err(io::Error::other)?;
                writeln!(w)?;
            }
            Ok(())
        }
    }
}

/// Column names of the emission tidy CSV.
pub const CSV_HEADER: &str = "sample,component,concentration_mol_per_l,std_error_mol_per_l,concentration_mg_per_l,mole_fraction,excitation_nm,residual_rms_intensity,r_squared,water_raman_band_nm,water_raman_height_intensity,inner_filter_geometry,excitation_absorbance_au,inner_filter_max_factor,flags,error";

fn opt(v: Option<f64>) -> String {
    v.filter(|x| x.is_finite())
        .map_or(String::new(), |x| x.to_string())
}

/// Tidy CSV: one row per sample and fluorophore (one row for a failure).
pub fn write_csv(report: &EmissionReport, w: &mut dyn Write) -> io::Result<()> {
    writeln!(w, "{CSV_HEADER}")?;
    for o in &report.outcomes {
        match o {
            EmissionOutcome::Fitted(s) => {
                let r = &s.result;
                let inner = s.inner_filter.as_ref();
                let tail = [
                    report.excitation_nm.to_string(),
                    r.residual_rms.to_string(),
                    opt(r.r_squared),
                    opt(s.raman.as_ref().map(|x| x.band_nm)),
                    opt(s.raman.as_ref().map(|x| x.height_intensity)),
                    inner.map_or(String::new(), |i| i.geometry.clone()),
                    opt(inner.map(|i| i.excitation_absorbance_au)),
                    opt(inner.map(|i| i.max_factor)),
                    csv_field(&r.flags.join(" ")).into_owned(),
                    String::new(),
                ]
                .join(",");
                for c in &r.components {
                    writeln!(
                        w,
                        "{},{},{},{},{},{},{tail}",
                        csv_field(&r.sample),
                        csv_field(&c.name),
                        c.concentration_mol_per_l,
                        opt(c.std_error_mol_per_l),
                        opt(c.concentration_mg_per_l),
                        opt(c.mole_fraction),
                    )?;
                }
            }
            EmissionOutcome::Failed(f) => writeln!(
                w,
                "{},,,,,,{},,,,,,,,,{}",
                csv_field(&f.sample),
                report.excitation_nm,
                csv_field(&f.error)
            )?,
        }
    }
    Ok(())
}

/// Aligned terminal table: one row per sample.
pub fn write_table(report: &EmissionReport, w: &mut dyn Write) -> io::Result<()> {
    let unit = display_unit(&report.fit_report());
    let mut header: Vec<String> = vec!["sample".into()];
    header.extend(
        report
            .component_names
            .iter()
            .map(|n| format!("{n} ({})", unit.label)),
    );
    header.extend([
        "Raman (intensity)".into(),
        "A_ex (AU)".into(),
        "residual (intensity)".into(),
        "flags".into(),
    ]);
    let mut rows = Vec::new();
    let mut errors = Vec::new();
    for o in &report.outcomes {
        match o {
            EmissionOutcome::Fitted(s) => rows.push(table_row(s, &unit)),
            EmissionOutcome::Failed(f) => {
                let mut row = vec![f.sample.clone()];
                row.extend(std::iter::repeat_n("error".to_string(), header.len() - 2));
                row.push("not fitted (see below)".into());
                rows.push(row);
                errors.push(format!("{}: {}", f.sample, f.error));
            }
        }
    }
    super::write_aligned(&header, &rows, w)?;
    writeln!(
        w,
        "\nexcitation {} nm; concentrations ± standard error; residual and Raman height in the input's intensity units; A_ex over the excitation path",
        report.excitation_nm
    )?;
    if !errors.is_empty() {
        writeln!(w, "\nnot fitted:")?;
        for e in errors {
            writeln!(w, "  {e}")?;
        }
    }
    Ok(())
}

fn table_row(s: &crate::emission::EmissionSample, unit: &DisplayUnit) -> Vec<String> {
    let r = &s.result;
    let mut row = vec![r.sample.clone()];
    for c in &r.components {
        let v = c.concentration_mol_per_l * unit.factor;
        row.push(match c.std_error_mol_per_l {
            Some(se) => format!("{v:.4} ± {:.4}", se * unit.factor),
            None => format!("{v:.4} ± ?"),
        });
    }
    row.push(
        s.raman
            .as_ref()
            .map_or("-".into(), |x| format!("{:.4}", x.height_intensity)),
    );
    row.push(
        s.inner_filter
            .as_ref()
            .map_or("-".into(), |i| format!("{:.4}", i.excitation_absorbance_au)),
    );
    row.push(format!("{:.4}", r.residual_rms));
    row.push(if r.flags.is_empty() {
        "-".into()
    } else {
        r.flags.join(" ")
    });
    row
}
