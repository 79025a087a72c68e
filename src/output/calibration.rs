//! Renderings of a calibration (`unblend calibrate`): the JSON summary, the
//! terminal summary and the per-wavelength CSV.

use super::text::sig;
use crate::calibrate::{self, CalibrationResult, UnreadableStandard};
use crate::input::concentrations::ConcentrationUnit;
use crate::reference::Calibration;
use serde::Serialize;
use std::io::{self, Write};
use std::path::Path;

/// The JSON document printed by `calibrate --format json`.
#[derive(Debug, Serialize)]
pub struct Summary<'a> {
    /// Tool name and version.
    pub tool: super::ToolInfo,
    /// The component's name.
    pub component: &'a str,
    /// The component file written (absent with --dry-run).
    pub file: Option<String>,
    /// The calibration table, as written into the component file.
    pub calibration: &'a Calibration,
    /// Standards whose spectra could not be read.
    pub unreadable: &'a [UnreadableStandard],
    /// Warnings.
    pub warnings: &'a [String],
}

/// What the terminal summary shows besides the result itself.
#[derive(Debug, Clone, Copy)]
pub struct SummaryText<'a> {
    /// The component's name.
    pub name: &'a str,
    /// Its molar mass in g/mol, when known (for mass units).
    pub molar_mass_g_per_mol: Option<f64>,
    /// The unit the concentrations were given in; shown back in it.
    pub unit: &'a ConcentrationUnit,
    /// The component file written, `None` on a dry run.
    pub written: Option<&'a Path>,
}

/// A concentration in mol/L shown in the unit the user gave.
fn in_unit(v_mol_per_l: f64, unit: &ConcentrationUnit, molar_mass: Option<f64>) -> String {
    let factor = match unit {
        ConcentrationUnit::MolPerL => Some(1.0),
        ConcentrationUnit::MmolPerL => Some(1e3),
        ConcentrationUnit::UmolPerL => Some(1e6),
        ConcentrationUnit::MgPerL => molar_mass.map(|m| m * 1e3),
        ConcentrationUnit::GPerL => molar_mass,
    };
    match factor {
        Some(f) => format!("{} {}", sig(v_mol_per_l * f), unit.label()),
        None => format!("{v_mol_per_l:.4e} mol/L"),
    }
}

/// The terminal summary of a calibration: the line at its band maximum, the
/// intercept and lack-of-fit tests, the calibrated range, what was left out.
pub fn write_summary(
    result: &CalibrationResult,
    text: &SummaryText,
    w: &mut (impl Write + ?Sized),
) -> io::Result<()> {
    let c = &result.calibration;
    let shown = |v: f64| in_unit(v, text.unit, text.molar_mass_g_per_mol);
    let used = result
        .wavelengths
        .iter()
        .filter(|w| w.excluded.is_none())
        .count();
    writeln!(
        w,
        "calibrated '{}' from {} standards at {} concentrations ({} blank{} subtracted), pathlength {} cm",
        text.name,
        c.n_standards,
        c.n_levels,
        c.n_blanks,
        if c.n_blanks == 1 { "" } else { "s" },
        c.pathlength_cm
    )?;
    writeln!(
        w,
        "  concentrations  {} to {}",
        shown(c.concentration_min_mol_per_l),
        shown(c.concentration_max_mol_per_l)
    )?;
    writeln!(
        w,
        "  wavelengths     {}–{} nm, {used} of {} used",
        c.range_nm[0],
        c.range_nm[1],
        result.wavelengths.len()
    )?;
    write_band_maximum(c, w)?;
    writeln!(
        w,
        "  calibrated range up to {} and {:.3} AU: `fit` flags concentrations above it with beyond-calibrated-range",
        shown(c.concentration_max_mol_per_l),
        c.max_absorbance_au
    )?;
    write_left_out(result, text, w)?;
    match text.written {
        Some(p) => writeln!(w, "wrote {}", p.display()),
        None => writeln!(w, "(dry run: nothing written)"),
    }
}

/// The summary's lines on the band maximum: ε, the intercept's t test and
/// the lack-of-fit F test.
fn write_band_maximum(c: &Calibration, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    writeln!(
        w,
        "  band maximum    {} nm: ε = {} ± {} L/(mol·cm), R² = {:.5}, residual SD {:.5} AU",
        c.band_max_nm,
        sig(c.epsilon_at_band_max_l_per_mol_cm),
        sig(c.epsilon_std_error_at_band_max_l_per_mol_cm),
        c.r_squared_at_band_max,
        c.residual_sd_at_band_max_au
    )?;
    let verdict = if c.intercept_p_value < calibrate::TEST_ALPHA {
        "differs from 0: check the blank"
    } else {
        "not significantly different from 0"
    };
    writeln!(
        w,
        "  intercept       {:.5} ± {:.5} AU at {} nm (t test p = {:.3}, {verdict})",
        c.intercept_at_band_max_au,
        c.intercept_std_error_at_band_max_au,
        c.band_max_nm,
        c.intercept_p_value
    )?;
    match &c.lack_of_fit {
        Some(l) => writeln!(
            w,
            "  lack of fit     F = {:.2} ({}, {} df), p = {:.3}{}",
            l.f_statistic,
            l.df_lack_of_fit,
            l.df_pure_error,
            l.p_value,
            if l.p_value < calibrate::TEST_ALPHA {
                ": the means curve away from the line"
            } else {
                ": no evidence against a straight line"
            }
        ),
        None => writeln!(
            w,
            "  lack of fit     not tested (needs replicates at 3 or more concentrations)"
        ),
    }
}

/// The summary's standards and wavelengths left out, and unreadable standards.
fn write_left_out(
    result: &CalibrationResult,
    text: &SummaryText,
    w: &mut (impl Write + ?Sized),
) -> io::Result<()> {
    let c = &result.calibration;
    if !c.excluded_standards.is_empty() || !c.excluded_wavelengths.is_empty() {
        writeln!(w, "  left out:")?;
        for e in &c.excluded_standards {
            let at = in_unit(
                e.concentration_mol_per_l,
                text.unit,
                text.molar_mass_g_per_mol,
            );
            writeln!(w, "    {} ({at}): {}", e.sample, e.reason)?;
        }
        for e in &c.excluded_wavelengths {
            writeln!(
                w,
                "    {}–{} nm: {}",
                e.range_nm[0], e.range_nm[1], e.reason
            )?;
        }
    }
    for u in &result.unreadable {
        writeln!(w, "  unreadable:     {}: {}", u.sample, u.error)?;
    }
    Ok(())
}

/// The line at every wavelength as CSV.
pub fn write_wavelengths(
    result: &CalibrationResult,
    w: &mut (impl Write + ?Sized),
) -> io::Result<()> {
    writeln!(
        w,
        "wavelength_nm,epsilon_l_per_mol_cm,std_error_l_per_mol_cm,intercept_au,intercept_std_error_au,intercept_p_value,r_squared,residual_sd_au,lack_of_fit_p_value,used,excluded_reason"
    )?;
    let opt = |v: Option<f64>| v.map(|v| v.to_string()).unwrap_or_default();
    for r in &result.wavelengths {
        writeln!(
            w,
            "{},{},{},{},{},{},{},{},{},{},{}",
            r.wavelength_nm,
            r.epsilon_l_per_mol_cm,
            r.epsilon_std_error_l_per_mol_cm,
            r.intercept_au,
            r.intercept_std_error_au,
            r.intercept_p_value,
            opt(r.r_squared),
            r.residual_sd_au,
            opt(r.lack_of_fit_p_value),
            if r.excluded.is_none() { "yes" } else { "no" },
            super::csv_field(r.excluded.as_deref().unwrap_or(""))
        )?;
    }
    Ok(())
}
