//! Terminal renderings of the reference library: the `library list` table,
//! one component (`library show`, as text or CSV) and the library check
//! (`library check`).

use super::text::{format_aligned, sig};
use crate::reference::Component;
use crate::separability::CheckReport;
use std::io::{self, Write};
use std::path::Path;

/// The `library list` table: one row per component.
pub fn write_list(components: &[Component], w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    let header = [
        "name",
        "range (nm)",
        "points",
        "peak ε (L/(mol·cm))",
        "at (nm)",
        "molar mass (g/mol)",
        "source",
        "created",
    ];
    let mut rows: Vec<Vec<String>> = vec![header.iter().map(|s| s.to_string()).collect()];
    for c in components {
        let (lo, hi) = c.range_nm();
        let (pk_nm, pk) = peak(c);
        rows.push(vec![
            c.name.clone(),
            format!("{lo}–{hi}"),
            c.grid.len().to_string(),
            format!("{pk:.0}"),
            format!("{pk_nm}"),
            c.molar_mass_g_per_mol
                .map_or("-".into(), |m| format!("{m}")),
            c.source.kind.clone(),
            c.created.clone(),
        ]);
    }
    w.write_all(format_aligned(&rows).as_bytes())
}

/// One component's curve as CSV (`wavelength_nm,epsilon[,std_error]`, ε in
/// L/(mol·cm)).
pub fn write_component_csv(c: &Component, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    let wavelengths = c.grid.wavelengths_nm();
    match &c.epsilon_std_error_l_per_mol_cm {
        None => {
            writeln!(w, "wavelength_nm,epsilon")?;
            for (nm, e) in wavelengths.iter().zip(&c.epsilon_l_per_mol_cm) {
                writeln!(w, "{nm},{e}")?;
            }
        }
        Some(se) => {
            writeln!(w, "wavelength_nm,epsilon,std_error")?;
            for ((nm, e), s) in wavelengths.iter().zip(&c.epsilon_l_per_mol_cm).zip(se) {
                writeln!(w, "{nm},{e},{s}")?;
            }
        }
    }
    Ok(())
}

/// One component as text: provenance, conditions, calibration and ε every
/// 50 nm. `path` is the component's file.
pub fn write_component(
    c: &Component,
    path: &Path,
    w: &mut (impl Write + ?Sized),
) -> io::Result<()> {
    let (lo, hi) = c.range_nm();
    let (pk_nm, pk) = peak(c);
    let or_dash = |s: Option<&str>| s.unwrap_or("-").to_string();
    writeln!(w, "name:        {}", c.name)?;
    writeln!(w, "file:        {}", path.display())?;
    writeln!(w, "range:       {lo}–{hi} nm, {} points", c.grid.len())?;
    writeln!(w, "peak ε:      {pk:.1} L/(mol·cm) at {pk_nm} nm")?;
    let mass = c
        .molar_mass_g_per_mol
        .map_or("unknown".into(), |m| format!("{m} g/mol"));
    writeln!(w, "molar mass:  {mass}")?;
    let conditions = &c.conditions;
    writeln!(w, "solvent:     {}", or_dash(conditions.solvent.as_deref()))?;
    writeln!(w, "pH:          {}", or_dash(conditions.ph.as_deref()))?;
    writeln!(
        w,
        "temperature: {}",
        or_dash(conditions.temperature.as_deref())
    )?;
    let from = c.source.file.as_deref().map(|f| format!(" from {f}"));
    let sha = c.source.sha256.as_deref().map(|s| format!(" (sha256 {s})"));
    writeln!(
        w,
        "source:      {}{}{}",
        c.source.kind,
        from.unwrap_or_default(),
        sha.unwrap_or_default()
    )?;
    let created = if c.created.is_empty() {
        "-"
    } else {
        &c.created
    };
    writeln!(w, "created:     {created}")?;
    if let Some(n) = &c.note {
        writeln!(w, "note:        {n}")?;
    }
    write_component_calibration(c, w)?;
    write_epsilon_every_50_nm(c, w)
}

/// The calibration lines of `library show`, when the component has one.
fn write_component_calibration(c: &Component, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    let Some(k) = c.calibration() else {
        return Ok(());
    };
    writeln!(
        w,
        "calibration: {} standards at {} concentrations ({} blanks), {} cm, {}",
        k.n_standards, k.n_levels, k.n_blanks, k.pathlength_cm, k.date
    )?;
    writeln!(
        w,
        "             calibrated range {:.4e} to {:.4e} mol/L, up to {:.3} AU",
        k.concentration_min_mol_per_l, k.concentration_max_mol_per_l, k.max_absorbance_au
    )?;
    writeln!(
        w,
        "             at {} nm: R² {:.5}, intercept {:.5} ± {:.5} AU (p = {:.3})",
        k.band_max_nm,
        k.r_squared_at_band_max,
        k.intercept_at_band_max_au,
        k.intercept_std_error_at_band_max_au,
        k.intercept_p_value
    )?;
    for e in &k.excluded_standards {
        writeln!(w, "             left out {}: {}", e.sample, e.reason)?;
    }
    for e in &k.excluded_wavelengths {
        writeln!(
            w,
            "             left out {}–{} nm: {}",
            e.range_nm[0], e.range_nm[1], e.reason
        )?;
    }
    Ok(())
}

/// The short ε table of `library show` and the hint to print every point.
fn write_epsilon_every_50_nm(c: &Component, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    let (lo, hi) = c.range_nm();
    writeln!(w, "\nε at every 50 nm (L/(mol·cm)):")?;
    let mut nm = (lo / 50.0).ceil() * 50.0;
    while nm <= hi {
        if let Some(e) = c.epsilon_at(nm) {
            writeln!(w, "  {nm:>6} nm  {e:>12.1}")?;
        }
        nm += 50.0;
    }
    writeln!(
        w,
        "(`unblend library show {} --csv` prints every point)",
        c.name
    )
}

/// The wavelength and value of a component's largest ε.
pub fn peak(c: &Component) -> (f64, f64) {
    let mut best = (c.grid.wavelengths_nm()[0], f64::NEG_INFINITY);
    for (nm, e) in c.grid.wavelengths_nm().iter().zip(&c.epsilon_l_per_mol_cm) {
        if *e > best.1 {
            best = (*nm, *e);
        }
    }
    best
}

/// A display unit for concentrations of about `typical` mol/L.
pub fn concentration_unit(typical: f64) -> (&'static str, f64) {
    for (label, factor) in [
        ("mol/L", 1.0),
        ("mmol/L", 1e3),
        ("µmol/L", 1e6),
        ("nmol/L", 1e9),
    ] {
        if typical * factor >= 0.1 {
            return (label, factor);
        }
    }
    ("nmol/L", 1e9)
}

/// A condition number as shown (`infinite` when the set is singular).
fn condition(c: Option<f64>) -> String {
    c.map_or("infinite".into(), |c| format!("{c:.3}"))
}

/// The `library check` table: the set, per-component errors and limits,
/// pairs, the best-conditioned range and the verdict.
pub fn write_check(r: &CheckReport, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    writeln!(w, "reference set: {}", r.components.join(", "))?;
    writeln!(
        w,
        "range {}–{} nm, {} readings {} nm apart, baseline {}, pathlength {} cm, noise {} AU per reading",
        r.range_nm[0],
        r.range_nm[1],
        r.n_points,
        r.step_nm,
        r.baseline,
        r.pathlength_cm,
        r.noise_au
    )?;
    writeln!(
        w,
        "condition number {} (columns scaled to unit length; fit would solve with {})",
        condition(r.condition_number),
        r.solver
    )?;
    writeln!(w)?;
    w.write_all(format_aligned(&check_component_rows(r)).as_bytes())?;
    if !r.pairs.is_empty() {
        writeln!(w)?;
        w.write_all(format_aligned(&check_pair_rows(r)).as_bytes())?;
    }
    write_check_best_range(r, w)?;
    writeln!(w)?;
    if r.warnings.is_empty() {
        writeln!(w, "verdict: separable over this range (no collinear pairs)")
    } else {
        writeln!(
            w,
            "verdict: {} warning(s), printed on standard error",
            r.warnings.len()
        )
    }
}

/// Per-component rows of the check: VIF, standard error, LOD, LOQ, and the
/// calibrated top, in one unit chosen from the smallest standard error.
fn check_component_rows(r: &CheckReport) -> Vec<Vec<String>> {
    let smallest = r
        .per_component
        .iter()
        .filter_map(|c| c.std_error_mol_per_l)
        .fold(f64::INFINITY, f64::min);
    let (unit, factor) = concentration_unit(if smallest.is_finite() { smallest } else { 1e-6 });
    let cell = |v: Option<f64>| v.map_or("-".into(), |v| sig(v * factor));
    let mut rows = vec![vec![
        "component".to_string(),
        "VIF".into(),
        format!("SE ({unit})"),
        format!("LOD 3.3σ ({unit})"),
        format!("LOQ 10σ ({unit})"),
        "LOQ (mg/L)".into(),
        format!("calibrated up to ({unit})"),
    ]];
    for c in &r.per_component {
        rows.push(vec![
            c.name.clone(),
            c.vif.map_or("infinite".into(), |v| format!("{v:.2}")),
            cell(c.std_error_mol_per_l),
            cell(c.lod_mol_per_l),
            cell(c.loq_mol_per_l),
            c.loq_mg_per_l.map_or("-".into(), sig),
            cell(c.calibrated_max_mol_per_l),
        ]);
    }
    rows
}

/// Pair rows of the check, most similar first.
fn check_pair_rows(r: &CheckReport) -> Vec<Vec<String>> {
    let mut pairs: Vec<_> = r.pairs.iter().collect();
    pairs.sort_by(|a, b| b.cosine.total_cmp(&a.cosine));
    let mut rows = vec![vec![
        "pair".to_string(),
        "cosine".into(),
        "after baseline".into(),
        "pair VIF".into(),
        "separable".into(),
    ]];
    for p in pairs {
        rows.push(vec![
            format!("{} / {}", p.a, p.b),
            format!("{:.4}", p.cosine),
            p.cosine_after_baseline
                .map_or("-".into(), |c| format!("{c:.4}")),
            p.variance_inflation
                .map_or("infinite".into(), |v| format!("{v:.2}")),
            if p.collinear {
                "no: collinear".into()
            } else {
                "yes".into()
            },
        ]);
    }
    rows
}

/// The check's line on the best-conditioned window.
fn write_check_best_range(r: &CheckReport, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    let Some(b) = &r.best_range else {
        return Ok(());
    };
    let whole_is_best = (b.range_nm[0] - r.range_nm[0]).abs() < 1e-9
        && (b.range_nm[1] - r.range_nm[1]).abs() < 1e-9;
    if whole_is_best {
        return writeln!(
            w,
            "\nbest conditioning: the whole range (no window at least {:.0} nm wide is better conditioned)",
            b.min_width_nm
        );
    }
    writeln!(
        w,
        "\nbest conditioning over windows at least {:.0} nm wide: {}–{} nm (condition {:.3} with the columns scaled as over the whole range, vs {} over {}–{} nm; {} there on its own scaling)",
        b.min_width_nm,
        b.range_nm[0],
        b.range_nm[1],
        b.scan_condition_number,
        condition(r.condition_number),
        r.range_nm[0],
        r.range_nm[1],
        condition(b.condition_number)
    )?;
    writeln!(
        w,
        "(more wavelengths never raise the predicted errors at constant noise; a better-conditioned range is less sensitive to errors in the references)"
    )
}
