//! Output of the residual checks: extra tidy-CSV columns and the notes
//! printed under the terminal table.

use super::opt as num;
use crate::fit::{FitReport, Outcome, SampleResult};
use std::io::{self, Write};

/// Number of residual-check columns at the end of [`super::CSV_HEADER`].
pub const CSV_EXTRA_COLUMNS: usize = 12;

/// The numbers of the residual-check columns from `noise_au` to
/// `band_signal_fraction`, in column order (`None`: empty).
pub fn check_numbers(s: &SampleResult) -> [Option<f64>; 8] {
    let d = s.diagnostics.as_ref();
    let band = d.and_then(|d| d.band.as_ref());
    [
        d.map(|d| d.noise_au),
        d.and_then(|d| d.reduced_chi_squared),
        d.and_then(|d| d.durbin_watson),
        d.and_then(|d| d.alarm_p_value),
        band.map(|b| b.centre_nm),
        band.map(|b| b.fwhm_nm),
        band.map(|b| b.peak_au),
        band.map(|b| b.signal_fraction),
    ]
}

/// Append the extra columns of one fitted sample, each preceded by a comma.
pub fn csv_extra(s: &SampleResult, out: &mut String) {
    let best = s.screening.as_ref().and_then(|x| x.best.as_ref());
    for v in check_numbers(s) {
        out.push(',');
        num(out, v);
    }
    out.push(',');
    out.push_str(&s.masking.as_ref().map_or(0, |m| m.n_masked).to_string());
    out.push(',');
    if let Some(b) = best {
        out.push_str(&super::csv_field(&b.name));
    }
    out.push(',');
    num(out, best.map(|b| b.concentration_mol_per_l));
    out.push(',');
    num(out, best.map(|b| b.p_value));
}

fn p_text(p: f64) -> String {
    if p < 1e-300 {
        "< 1e-300".into()
    } else {
        format!("{p:.2e}")
    }
}

/// One line per remark: unexplained bands, masking, screening results.
pub fn notes(s: &SampleResult, unit: &super::DisplayUnit) -> Vec<String> {
    let mut out = Vec::new();
    if let Some(spikes) = &s.spikes_nm {
        let at: Vec<String> = spikes.iter().map(|w| format!("{w}")).collect();
        out.push(format!(
            "{} spike(s) left out of the fit (single readings far outside the noise at {} nm)",
            spikes.len(),
            at.join(", ")
        ));
    }
    if let Some(m) = &s.masking {
        let spans: Vec<String> = m
            .masked_nm
            .iter()
            .map(|[a, b]| {
                if (b - a).abs() < f64::EPSILON * a.abs().max(1.0) {
                    format!("{a}")
                } else {
                    format!("{a}–{b}")
                }
            })
            .collect();
        out.push(format!(
            "{} point(s) above {} AU left out of the fit ({} nm)",
            m.n_masked,
            m.max_absorbance_au,
            spans.join(", ")
        ));
        for c in &m.components {
            if c.band_masked_fraction > crate::diagnostics::mask::DILUTE_FRACTION {
                out.push(format!(
                    "{:.0} % of {}'s band is masked: its concentration rests on the band's edges; dilute and re-measure",
                    100.0 * c.band_masked_fraction,
                    c.name
                ));
            }
        }
    }
    if let Some(d) = &s.diagnostics
        && d.flagged()
    {
        let p = d.alarm_p_value.map_or("-".into(), p_text);
        let mut line = format!(
            "residual is more than noise (p = {p} at alarm rate {}; noise {:.2} mAU {}, reduced χ² {})",
            d.alarm_rate,
            d.noise_au * 1000.0,
            d.noise_source,
            d.reduced_chi_squared
                .map_or("-".into(), |c| format!("{c:.2}"))
        );
        if let Some(b) = &d.band {
            line.push_str(&format!(
                "; unexplained absorbance {}–{} nm, centre {:.0} nm, FWHM {:.0} nm, peak {:.4} AU at {} nm, {:.2} % of the signal",
                b.low_nm,
                b.high_nm,
                b.centre_nm,
                b.fwhm_nm,
                b.peak_au,
                b.peak_nm,
                100.0 * b.signal_fraction
            ));
        }
        if let Some(b) = &d.negative_band {
            line.push_str(&format!(
                "; reads below the fit {}–{} nm (down to {:.4} AU at {} nm)",
                b.low_nm, b.high_nm, b.peak_au, b.peak_nm
            ));
        }
        out.push(line);
    }
    if let Some(sc) = &s.screening {
        match &sc.best {
            Some(b) => out.push(format!(
                "candidate {} explains the residual: {:.3} ± {:.3} {} (F = {:.1}, p = {}), residual then {:.2} mAU",
                b.name,
                b.concentration_mol_per_l * unit.factor,
                b.std_error_mol_per_l * unit.factor,
                unit.label,
                b.f_statistic,
                p_text(b.p_value),
                b.residual_rms_au * 1000.0
            )),
            None => out.push(format!(
                "no candidate explains the residual ({} tried{})",
                sc.tried.len(),
                sc.tried.first().map_or(String::new(), |c| format!(
                    "; closest {} leaves {:.2} mAU",
                    c.name,
                    c.residual_rms_au * 1000.0
                ))
            )),
        }
    }
    out
}

/// Write the notes of every sample that has any, under a heading.
pub fn write_notes(
    report: &FitReport,
    unit: &super::DisplayUnit,
    w: &mut dyn Write,
) -> io::Result<()> {
    let mut first = true;
    for o in &report.outcomes {
        let Outcome::Fitted(s) = o else { continue };
        for line in notes(s, unit) {
            if first {
                writeln!(w, "\nnotes:")?;
                first = false;
            }
            writeln!(w, "  {}: {line}", s.sample)?;
        }
    }
    Ok(())
}
