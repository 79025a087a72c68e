//! Output of a plate batch (stage 6): the tidy `wells.csv` and
//! `samples.csv` rows and the run JSON, rendered one plate at a time so a
//! run of any size is written as it goes.
//!
//! Concentrations are mol/L (mg/L beside them where the molar mass is
//! known). In `wells.csv`, `concentration_mol_per_l` is what is in the well;
//! the `undiluted_` columns are the specimen's (dilution applied). In
//! `samples.csv` every concentration is the specimen's.
//!
//! Screening: when a candidate explains a well's residual, the well's
//! `screen_candidate`, `screen_concentration_mol_per_l` and (per component)
//! `refitted_mol_per_l` are filled, `answer` reads `refit`, and the
//! `undiluted_` columns and `samples.csv`'s statistics are of the refitted
//! values; otherwise `answer` reads `fit`. The `notes` of `wells.csv` hold
//! the batch's notes and the residual checks' notes (masking, unexplained
//! band, screening) in words, concentrations in the plate's display unit.

use super::{DisplayUnit, csv_field, notes, num, opt};
use crate::batch::{PlateResult, WellResult};
use crate::input::platemap::Role;
use std::fmt::Write as _;

/// Column names of `wells.csv`.
pub const WELLS_HEADER: &str = "plate,well,role,sample,component,concentration_mol_per_l,std_error_mol_per_l,dilution_factor,undiluted_mol_per_l,undiluted_std_error_mol_per_l,undiluted_mg_per_l,undiluted_std_error_mg_per_l,mole_fraction,pathlength_cm,pathlength_source,water_band_au,blank_mean_au,baseline_offset_au,baseline_slope_au_per_nm,residual_rms_au,r_squared,range_low_nm,range_high_nm,n_points,solver,flags,notes,error,screen_candidate,screen_concentration_mol_per_l,refitted_mol_per_l,answer";

/// Column names of `samples.csv`.
pub const SAMPLES_HEADER: &str = "plate,sample,role,component,mean_mol_per_l,sd_mol_per_l,cv_percent,n_wells,mean_mg_per_l,sd_mg_per_l,wells,outlier_wells,screen_candidates,flags,notes";

/// One plate's share of each output.
#[derive(Debug, Default)]
pub struct RenderedPlate {
    /// Rows of `wells.csv`.
    pub wells_csv: String,
    /// Rows of `samples.csv`.
    pub samples_csv: String,
    /// The plate's object in the run JSON's `plates` array.
    pub json: String,
}

fn text(out: &mut String, s: &str) {
    out.push_str(&csv_field(s));
}

/// The columns from `pathlength_cm` to `blank_mean_au`.
fn well_common(out: &mut String, w: &WellResult) {
    opt(out, w.pathlength_cm);
    out.push(',');
    out.push_str(w.pathlength_source.map_or("", |s| s.name()));
    out.push(',');
    opt(out, w.water_band_au);
    out.push(',');
    opt(out, w.blank_mean_au);
    out.push(',');
}

/// The well's notes: the batch's, then the residual checks' in words.
pub fn well_notes(w: &WellResult, unit: &DisplayUnit) -> Vec<String> {
    let mut v = w.notes.clone();
    if let Some(s) = &w.fit {
        v.extend(notes::notes(s, unit));
    }
    v
}

/// `flags`, `notes`, `error`, then the screening columns (`component` is
/// the row's component, `None` on a well without a fit).
fn flags_notes_error(
    out: &mut String,
    w: &WellResult,
    unit: &DisplayUnit,
    component: Option<&str>,
) {
    text(out, &w.all_flags().join(" "));
    out.push(',');
    text(out, &well_notes(w, unit).join("; "));
    out.push(',');
    text(out, w.error.as_deref().unwrap_or(""));
    out.push(',');
    let fit = w.fit.as_ref();
    let best = fit.and_then(notes::explaining);
    if let Some(b) = best {
        text(out, &b.name);
    }
    out.push(',');
    opt(out, best.map(|b| b.concentration_mol_per_l));
    out.push(',');
    opt(
        out,
        fit.zip(component)
            .and_then(|(s, c)| notes::refitted_mol_per_l(s, c)),
    );
    out.push(',');
    out.push_str(fit.map_or("", notes::answer));
    out.push('\n');
}

fn well_rows(out: &mut String, plate: &str, w: &WellResult, unit: &DisplayUnit) {
    let head = |out: &mut String| {
        text(out, plate);
        out.push(',');
        text(out, &w.well);
        out.push(',');
        out.push_str(w.role.name());
        out.push(',');
        text(out, &w.sample);
        out.push(',');
    };
    match &w.fit {
        Some(s) => {
            for (c, u) in s.components.iter().zip(&w.undiluted) {
                head(out);
                text(out, &c.name);
                out.push(',');
                num(out, c.concentration_mol_per_l);
                out.push(',');
                opt(out, c.std_error_mol_per_l);
                out.push(',');
                num(out, w.dilution_factor);
                out.push(',');
                num(out, u.concentration_mol_per_l);
                out.push(',');
                opt(out, u.std_error_mol_per_l);
                out.push(',');
                opt(out, u.concentration_mg_per_l);
                out.push(',');
                opt(out, u.std_error_mg_per_l);
                out.push(',');
                opt(out, c.mole_fraction);
                out.push(',');
                well_common(out, w);
                opt(out, s.baseline.offset_au);
                out.push(',');
                opt(out, s.baseline.slope_au_per_nm);
                out.push(',');
                num(out, s.residual_rms);
                out.push(',');
                opt(out, s.r_squared);
                out.push(',');
                num(out, s.range_nm[0]);
                out.push(',');
                num(out, s.range_nm[1]);
                out.push(',');
                let _ = write!(out, "{}", s.n_points);
                out.push(',');
                out.push_str(&s.solver);
                out.push(',');
                flags_notes_error(out, w, unit, Some(&c.name));
            }
        }
        None => {
            head(out);
            out.push(',');
            out.push_str(",,");
            num(out, w.dilution_factor);
            out.push_str(",,,,,,");
            well_common(out, w);
            out.push_str(",,,,,,,,");
            flags_notes_error(out, w, unit, None);
        }
    }
}

/// The display unit of a plate's notes: from the median specimen
/// concentration of its sample and standard wells (blanks left out).
pub fn plate_unit(p: &PlateResult) -> DisplayUnit {
    let mut v: Vec<f64> = p
        .wells
        .iter()
        .filter(|w| matches!(w.role, Role::Sample | Role::Standard))
        .flat_map(|w| w.undiluted.iter().map(|u| u.concentration_mol_per_l))
        .filter(|c| *c > 0.0)
        .collect();
    v.sort_by(f64::total_cmp);
    DisplayUnit::for_typical(v.get(v.len() / 2).copied().unwrap_or(1e-6))
}

/// Specimen lines of `batch`'s closing summary shown at most (the rest are
/// counted; `samples.csv` has them all).
pub const SUMMARY_SHOWN: usize = 30;

/// One line per specimen of a plate for `batch`'s closing summary: plate,
/// specimen, role, wells in the statistics, each component's mean ± SD in
/// the plate's display unit, then the flags and a screening candidate.
pub fn summary_lines(p: &PlateResult) -> Vec<String> {
    let unit = plate_unit(p);
    p.samples
        .iter()
        .map(|s| {
            let n = s.components.first().map_or(0, |c| c.n_wells);
            let values: Vec<String> = s
                .components
                .iter()
                .map(|c| {
                    let sd = c
                        .sd_mol_per_l
                        .map_or(String::new(), |v| format!(" ± {:.3}", v * unit.factor));
                    format!("{} {:.3}{sd}", c.name, c.mean_mol_per_l * unit.factor)
                })
                .collect();
            let mut line = format!(
                "{} {} ({}, {n} well(s)): {} {}",
                p.plate,
                s.sample,
                s.role.name(),
                values.join(", "),
                unit.label
            );
            if !s.flags.is_empty() {
                line.push_str(&format!("; flags {}", s.flags.join(" ")));
            }
            if !s.screen_candidates.is_empty() {
                line.push_str(&format!(
                    "; refitted with {}",
                    s.screen_candidates.join(" ")
                ));
            }
            line
        })
        .collect()
}

/// Render one plate's rows and JSON object (with the wells' fit curves
/// where they were kept).
pub fn render_plate(p: &PlateResult) -> RenderedPlate {
    let mut wells_csv = String::with_capacity(p.wells.len() * 3 * 320);
    if let Some(e) = &p.error {
        text(&mut wells_csv, &p.plate);
        wells_csv.push_str(&",".repeat(27));
        text(&mut wells_csv, e);
        wells_csv.push_str(",,,,\n");
    }
    let unit = plate_unit(p);
    for w in &p.wells {
        well_rows(&mut wells_csv, &p.plate, w, &unit);
    }
    let mut samples_csv = String::new();
    for s in &p.samples {
        for c in &s.components {
            text(&mut samples_csv, &p.plate);
            samples_csv.push(',');
            text(&mut samples_csv, &s.sample);
            samples_csv.push(',');
            samples_csv.push_str(s.role.name());
            samples_csv.push(',');
            text(&mut samples_csv, &c.name);
            samples_csv.push(',');
            num(&mut samples_csv, c.mean_mol_per_l);
            samples_csv.push(',');
            opt(&mut samples_csv, c.sd_mol_per_l);
            samples_csv.push(',');
            opt(&mut samples_csv, c.cv_percent);
            samples_csv.push(',');
            let _ = write!(samples_csv, "{}", c.n_wells);
            samples_csv.push(',');
            opt(&mut samples_csv, c.mean_mg_per_l);
            samples_csv.push(',');
            opt(&mut samples_csv, c.sd_mg_per_l);
            samples_csv.push(',');
            text(&mut samples_csv, &s.wells.join(" "));
            samples_csv.push(',');
            text(&mut samples_csv, &s.outlier_wells.join(" "));
            samples_csv.push(',');
            text(&mut samples_csv, &s.screen_candidates.join(" "));
            samples_csv.push(',');
            text(&mut samples_csv, &s.flags.join(" "));
            samples_csv.push(',');
            text(&mut samples_csv, &s.notes.join("; "));
            samples_csv.push('\n');
        }
    }
    let json = serde_json::to_string(p).unwrap_or_else(|e| {
        format!(
            "{{\"plate\":{},\"error\":{}}}",
            serde_json::Value::String(p.plate.clone()),
            serde_json::Value::String(format!("could not render: {e}"))
        )
    });
    RenderedPlate {
        wells_csv,
        samples_csv,
        json,
    }
}

/// Render one plate; `with_curves` false leaves the wells' fit curves (kept
/// for the report) out of the JSON. They are taken out while the plate is
/// rendered and put back, not copied.
pub fn render_plate_with(p: &mut PlateResult, with_curves: bool) -> RenderedPlate {
    if with_curves || p.wells.iter().all(|w| w.curves.is_none()) {
        return render_plate(p);
    }
    let kept: Vec<_> = p.wells.iter_mut().map(|w| w.curves.take()).collect();
    let r = render_plate(p);
    for (w, c) in p.wells.iter_mut().zip(kept) {
        w.curves = c;
    }
    r
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn headers_have_units_and_the_required_columns() {
        for col in [
            "sample",
            "component",
            "mean_mol_per_l",
            "sd_mol_per_l",
            "cv_percent",
            "n_wells",
        ] {
            assert!(SAMPLES_HEADER.split(',').any(|c| c == col), "{col}");
        }
        assert_eq!(WELLS_HEADER.split(',').count(), 32);
    }

    #[test]
    fn a_failed_plate_is_one_row_with_its_error() {
        let p = PlateResult::failed("P1", "x.txt", "bad, very".into());
        let r = render_plate(&p);
        // Read back with the csv crate (a general-purpose CSV reader).
        let mut rd = csv::ReaderBuilder::new()
            .has_headers(false)
            .from_reader(r.wells_csv.as_bytes());
        let row = rd.records().next().unwrap().unwrap();
        assert_eq!(row.len(), WELLS_HEADER.split(',').count());
        assert_eq!(&row[0], "P1");
        assert_eq!(&row[27], "bad, very");
    }
}
