//! Lot QC in the terminal table: strength against the target, colour,
//! pass/fail and the correction (output stage).
//!
//! In: a [`FitReport`] whose samples carry `target`, `colour` and
//! `correction` (see [`crate::target`]). Out: text sections after the main
//! table; nothing when no sample carries them.

use super::DisplayUnit;
use crate::fit::{FitReport, Outcome};
use crate::target::Qc;
use std::fmt::Write as _;
use std::io::{self, Write};

/// Write the QC sections of the table, if any sample has QC results.
pub fn write_qc(report: &FitReport, unit: &DisplayUnit, w: &mut dyn Write) -> io::Result<()> {
    let fitted: Vec<(&str, &Qc)> = report
        .outcomes
        .iter()
        .filter_map(|o| match o {
            Outcome::Fitted(s) => s.qc.as_deref().map(|q| (s.sample.as_str(), q)),
            Outcome::Failed(_) => None,
        })
        .collect();
    if fitted.is_empty() {
        return Ok(());
    }
    let (header, rows) = verdict_rows(report, &fitted);
    if fitted.iter().any(|(_, s)| s.target.is_some()) {
        writeln!(w, "\nagainst the target (strength = measured / target):")?;
    } else {
        writeln!(w, "\ncolour of each solution:")?;
    }
    super::text::write_numbers_table(w, &header, &rows, false)?;
    if let Some(c) = fitted.iter().find_map(|(_, s)| s.colour.as_ref()) {
        writeln!(
            w,
            "colour: CIELAB, illuminant {}, {}° observer, shown at {} cm; ΔE00 = CIEDE2000 to the target's colour",
            c.illuminant, c.observer, c.pathlength_cm
        )?;
    }
    write_reasons_and_corrections(&fitted, unit, w)
}

fn verdict_rows(report: &FitReport, fitted: &[(&str, &Qc)]) -> (Vec<String>, Vec<Vec<String>>) {
    let with_target = fitted.iter().any(|(_, s)| s.target.is_some());
    let mut header = vec!["sample".to_string()];
    if with_target {
        header.push("target".into());
        header.extend(report.component_names.iter().map(|n| format!("{n} (%)")));
    }
    header.extend(["L*", "a*", "b*", "C*", "h (°)", "source"].map(String::from));
    if with_target {
        header.extend(["ΔE00", "verdict"].map(String::from));
    }
    let rows = fitted
        .iter()
        .map(|(sample, s)| {
            let mut row = vec![sample.to_string()];
            if let Some(t) = &s.target {
                row.push(t.name.clone());
                row.extend(t.components.iter().map(|c| {
                    c.strength_percent
                        .map_or_else(|| "-".into(), |p| format!("{p:.1}"))
                }));
            } else if with_target {
                row.push("-".into());
                row.extend(report.component_names.iter().map(|_| "-".to_string()));
            }
            match &s.colour {
                Some(c) => {
                    let l = &c.colour.lab;
                    row.extend([l.l, l.a, l.b, l.c, l.h_deg].map(|v| format!("{v:.2}")));
                    row.push(c.source.clone());
                }
                None => row.extend(["-", "-", "-", "-", "-", "none"].map(String::from)),
            }
            if with_target {
                let de = s.colour.as_ref().and_then(|c| c.colour.delta_e00);
                row.push(de.map_or("-".into(), |d| format!("{d:.2}")));
                row.push(match &s.target {
                    Some(t) if t.pass => "pass".into(),
                    Some(_) => "FAIL".into(),
                    None => "-".into(),
                });
            }
            row
        })
        .collect();
    (header, rows)
}

fn write_reasons_and_corrections(
    fitted: &[(&str, &Qc)],
    unit: &DisplayUnit,
    w: &mut dyn Write,
) -> io::Result<()> {
    let failing: Vec<&(&str, &Qc)> = fitted
        .iter()
        .filter(|(_, s)| s.target.as_ref().is_some_and(|t| !t.pass))
        .collect();
    if !failing.is_empty() {
        writeln!(
            w,
            "\nwhy, and the correction (per litre of lot; additions of negligible volume unless --stock):"
        )?;
    }
    for (sample, s) in failing {
        let Some(t) = &s.target else { continue };
        writeln!(w, "  {sample}: {}", t.reasons.join("; "))?;
        if let Some(c) = &s.correction {
            let mut parts = vec![format!("dilute to {:.4}× the volume", c.dilution_factor)];
            for a in c.components.iter().filter(|a| a.add_mol_per_l_of_lot > 0.0) {
                let grams = a
                    .add_g_per_l_of_lot
                    .map_or(String::new(), |g| format!(" = {:.3} mg", g * 1000.0));
                parts.push(format!(
                    "add {:.3} {} of {}{grams}",
                    a.add_mol_per_l_of_lot * unit.factor,
                    unit.label.trim_end_matches("/L"),
                    a.name
                ));
            }
            if let Some(p) = &c.predicted_colour {
                let de = p
                    .delta_e00
                    .map_or(String::new(), |d| format!(", ΔE00 {d:.2}"));
                parts.push(format!(
                    "predicted L* {:.2} a* {:.2} b* {:.2}{de}",
                    p.lab.l, p.lab.a, p.lab.b
                ));
            }
            writeln!(w, "    correction: {}", parts.join(", "))?;
            for n in &c.notes {
                writeln!(w, "    note: {n}")?;
            }
        }
    }
    for (sample, s) in fitted {
        if let Some(n) = &s.colour_note {
            writeln!(w, "  {sample}: {n}")?;
        }
    }
    Ok(())
}

/// Header of the QC CSV (`--qc-csv`): one row per sample and component.
pub const QC_CSV_HEADER: &str = "sample,target,pass,reasons,component,target_mol_per_l,measured_mol_per_l,strength_percent,tolerance_percent,ratio_deviation_percent,illuminant,observer,colour_source,L,a,b,C,h,srgb,delta_e00,dilution_factor,add_mol_per_l_of_lot,add_g_per_l_of_lot";

/// The QC CSV: one row per sample with QC results and component (a
/// colour-only sample has one row with the component columns empty).
pub fn write_qc_csv(report: &FitReport, w: &mut dyn Write) -> io::Result<()> {
    writeln!(w, "{QC_CSV_HEADER}")?;
    for o in &report.outcomes {
        let Outcome::Fitted(s) = o else { continue };
        let Some(qc) = s.qc.as_deref() else { continue };
        let mut head = format!("{},", super::csv_field(&s.sample));
        match &qc.target {
            Some(t) => {
                let _ = write!(
                    head,
                    "{},{},{},",
                    super::csv_field(&t.name),
                    t.pass,
                    super::csv_field(&t.reasons.join("; "))
                );
            }
            None => head.push_str(",,,"),
        }
        let colour = colour_cells(qc);
        let strengths = qc.target.as_ref().map_or(&[][..], |t| &t.components[..]);
        if strengths.is_empty() {
            writeln!(w, "{head},,,,,,{colour},,,")?;
        }
        for st in strengths {
            let mut row = head.clone();
            row.push_str(&super::csv_field(&st.name));
            row.push(',');
            super::num(&mut row, st.target_mol_per_l);
            row.push(',');
            super::num(&mut row, st.measured_mol_per_l);
            row.push(',');
            super::opt(&mut row, st.strength_percent);
            row.push(',');
            super::num(&mut row, st.tolerance_percent);
            row.push(',');
            super::opt(&mut row, st.ratio_deviation_percent);
            let _ = write!(row, ",{colour},");
            let addition = qc.correction.as_ref().and_then(|c| {
                let a = c.components.iter().find(|a| a.name == st.name)?;
                Some((c.dilution_factor, a))
            });
            if let Some((f, a)) = addition {
                super::num(&mut row, f);
                row.push(',');
                super::num(&mut row, a.add_mol_per_l_of_lot);
                row.push(',');
                super::opt(&mut row, a.add_g_per_l_of_lot);
            } else {
                row.push_str(",,");
            }
            writeln!(w, "{row}")?;
        }
    }
    Ok(())
}

/// `illuminant,…,delta_e00` cells (empty when no colour).
fn colour_cells(qc: &Qc) -> String {
    let Some(c) = &qc.colour else {
        return ",,,,,,,,,".into();
    };
    let l = &c.colour.lab;
    let mut s = format!("{},{},{},", c.illuminant, c.observer, c.source);
    for v in [l.l, l.a, l.b, l.c, l.h_deg] {
        super::num(&mut s, v);
        s.push(',');
    }
    s.push_str(&c.colour.srgb);
    s.push(',');
    super::opt(&mut s, c.colour.delta_e00);
    s
}
