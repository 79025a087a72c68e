//! Use unblend as a library: fit spectra held in memory, with no files.
//!
//! Two invented components with Gaussian absorption bands (ε in L/(mol·cm))
//! are mixed at known concentrations; the mixture spectra are built with the
//! Beer–Lambert law A(λ) = l·Σ εᵢ(λ)·cᵢ + offset and fitted back by NNLS.
//!
//! Run with `cargo run --example fit_in_memory`.

use std::sync::Arc;
use unblend::fit::{FitOptions, Model, Outcome};
use unblend::reference::{Component, ReferenceSet};
use unblend::spectrum::Grid;

/// A component whose ε curve is one Gaussian band, given as the text of a
/// component file (the same format `unblend library add` writes).
fn band_component(
    name: &str,
    peak_nm: f64,
    width_nm: f64,
    peak_epsilon: f64,
) -> unblend::Result<Component> {
    let points: Vec<String> = (400..=700)
        .map(|nm| {
            let x = (f64::from(nm) - peak_nm) / width_nm;
            format!("  [{nm}.0, {:.3}],", peak_epsilon * (-0.5 * x * x).exp())
        })
        .collect();
    let text = format!(
        "format = \"unblend-component\"\nformat_version = 1\nname = \"{name}\"\n\
         created = \"2026-12-01\"\nepsilon_unit = \"L/(mol*cm)\"\n\n\
         [source]\nkind = \"computed\"\n\n[absorptivity]\npoints = [\n{}\n]\n",
        points.join("\n")
    );
    Component::from_toml(&text, name)
}

fn main() -> unblend::Result<()> {
    let refs = ReferenceSet {
        components: vec![
            band_component("teal", 480.0, 30.0, 12_000.0)?,
            band_component("rose", 560.0, 25.0, 20_000.0)?,
        ],
    };
    // The measured spectra: 1 nm steps, 400–700 nm, 1 cm cell.
    let wavelengths_nm: Vec<f64> = (400..=700).map(f64::from).collect();
    let grid = Arc::new(Grid::new(wavelengths_nm.clone())?);
    let options = FitOptions::default();
    let model = Model::new(&grid, &refs, &options)?;
    let mut workspace = model.prepared.workspace();

    let truths_mol_per_l = [("mix-a", 2.0e-5, 1.0e-5), ("mix-b", 0.0, 3.0e-5)];
    for (sample, teal, rose) in truths_mol_per_l {
        let offset_au = 0.004;
        let absorbance_au: Vec<f64> = wavelengths_nm
            .iter()
            .map(|&nm| {
                let eps = |c: &Component| c.epsilon_at(nm).unwrap_or(0.0);
                options.pathlength_cm
                    * (eps(&refs.components[0]) * teal + eps(&refs.components[1]) * rose)
                    + offset_au
            })
            .collect();
        match model.fit_one(
            sample,
            &absorbance_au,
            options.pathlength_cm,
            &mut workspace,
        ) {
            Outcome::Fitted(result) => {
                for c in &result.components {
                    println!(
                        "{sample}: {} = {:.3e} mol/L",
                        c.name, c.concentration_mol_per_l
                    );
                }
            }
            Outcome::Failed(f) => println!("{sample}: not fitted: {}", f.error),
        }
    }
    Ok(())
}
