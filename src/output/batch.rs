//! Output of a plate batch (stage 6): the tidy `wells.csv` and
//! `samples.csv` rows and the run JSON, rendered one plate at a time so a
//! run of any size is written as it goes.
//!
//! Concentrations are mol/L (mg/L beside them where the molar mass is
//! known). In `wells.csv`, `concentration_mol_per_l` is what is in the well;
//! the `undiluted_` columns are the specimen's (dilution applied). In
//! `samples.csv` every concentration is the specimen's.

use super::{csv_field, num, opt};
use crate::batch::{PlateResult, WellResult};
use std::fmt::Write as _;

/// Column names of `wells.csv`.
pub const WELLS_HEADER: &str = "plate,well,role,sample,component,concentration_mol_per_l,std_error_mol_per_l,dilution_factor,undiluted_mol_per_l,undiluted_std_error_mol_per_l,undiluted_mg_per_l,undiluted_std_error_mg_per_l,mole_fraction,pathlength_cm,pathlength_source,water_band_au,blank_mean_au,baseline_offset_au,baseline_slope_au_per_nm,residual_rms_au,r_squared,range_low_nm,range_high_nm,n_points,solver,flags,notes,error";

/// Column names of `samples.csv`.
pub const SAMPLES_HEADER: &str = "plate,sample,role,component,mean_mol_per_l,sd_mol_per_l,cv_percent,n_wells,mean_mg_per_l,sd_mg_per_l,wells,outlier_wells";

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

fn flags_notes_error(out: &mut String, w: &WellResult) {
    text(out, &w.all_flags().join(" "));
    out.push(',');
    text(out, &w.notes.join("; "));
    out.push(',');
    text(out, w.error.as_deref().unwrap_or(""));
    out.push('\n');
}

fn well_rows(out: &mut String, plate: &str, w: &WellResult) {
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
                flags_notes_error(out, w);
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
            flags_notes_error(out, w);
        }
    }
}

/// Render one plate's rows and JSON object (with the wells' fit curves
/// where they were kept).
pub fn render_plate(p: &PlateResult) -> RenderedPlate {
    let mut wells_csv = String::with_capacity(p.wells.len() * 3 * 320);
    if let Some(e) = &p.error {
        text(&mut wells_csv, &p.plate);
        wells_csv.push_str(&",".repeat(27));
        text(&mut wells_csv, e);
        wells_csv.push('\n');
    }
    for w in &p.wells {
        well_rows(&mut wells_csv, &p.plate, w);
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
        assert_eq!(WELLS_HEADER.split(',').count(), 28);
    }

    #[test]
    fn a_failed_plate_is_one_row_with_its_error() {
        let p = PlateResult::failed("P1", "x.txt", "bad, very".into());
        let r = render_plate(&p);
        let fields: Vec<&str> = r.wells_csv.trim_end().splitn(28, ',').collect();
        assert_eq!(fields.len(), 28);
        assert_eq!(fields[0], "P1");
        assert_eq!(fields[27], "\"bad, very\"");
    }
}
