//! The correction of a lot off target: how much solvent and dye to add.
//!
//! In: the lot's concentrations cᵢ and the target's tᵢ (mol/L), optionally
//! the stock concentrations sᵢ the dyes are added from. Out: a
//! [`Correction`] — the dilution factor f (final volume over the lot's
//! volume) and the moles aᵢ of each dye to add per litre of lot, so that
//!
//! ```text
//! (cᵢ + aᵢ) / f = tᵢ,   aᵢ ≥ 0,   f ≥ 1.
//! ```
//!
//! Dyes can only be added and dilution only lowers, so the smallest f is
//! max(1, maxᵢ cᵢ/tᵢ) and aᵢ = f·tᵢ − cᵢ. With stocks, adding aᵢ brings
//! aᵢ/sᵢ litres of stock, and the solvent w = f − 1 − Σ aᵢ/sᵢ must not be
//! negative; substituting aᵢ = f·tᵢ − cᵢ gives
//! f·(1 − Σ tᵢ/sᵢ) ≥ 1 − Σ cᵢ/sᵢ, a third lower bound on f. A component with
//! target 0 that the lot holds cannot be removed: it is left diluted (cᵢ/f)
//! and named in `notes`.

use serde::{Deserialize, Serialize};

/// Relative size below which an addition is rounding, not a need.
const ROUNDING: f64 = 1e-9;

/// One component's addition.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Addition {
    /// Component name.
    pub name: String,
    /// Moles to add per litre of the lot as it is.
    pub add_mol_per_l_of_lot: f64,
    /// Grams to add per litre of lot, when the molar mass is known.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub add_g_per_l_of_lot: Option<f64>,
    /// Litres of stock per litre of lot, when a stock is given.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub stock_l_per_l_of_lot: Option<f64>,
    /// Concentration after the correction, mol/L.
    pub corrected_mol_per_l: f64,
    /// Moles to add to the whole batch (with a batch volume).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub add_mol_for_batch: Option<f64>,
    /// Grams to add to the whole batch (with a batch volume and molar mass).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub add_g_for_batch: Option<f64>,
}

/// The smallest correction bringing a lot onto its target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Correction {
    /// Final volume over the lot's volume, ≥ 1.
    pub dilution_factor: f64,
    /// Litres of plain solvent to add per litre of lot.
    pub solvent_l_per_l_of_lot: f64,
    /// One entry per component, in the reference order.
    pub components: Vec<Addition>,
    /// What the correction cannot do (components it cannot remove).
    #[serde(skip_serializing_if = "Vec::is_empty", default)]
    pub notes: Vec<String>,
    /// The batch's volume, L, when the amounts for the whole batch are given.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub batch_volume_l: Option<f64>,
    /// Litres of solvent for the whole batch (with a batch volume).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub solvent_l_for_batch: Option<f64>,
    /// The corrected lot's colour, predicted through the references.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub predicted_colour: Option<crate::target::ColourOf>,
}

impl Correction {
    /// Add the amounts for a batch of `volume_l` litres.
    pub fn for_batch(&mut self, volume_l: f64) {
        self.batch_volume_l = Some(volume_l);
        self.solvent_l_for_batch = Some(self.solvent_l_per_l_of_lot * volume_l);
        for a in &mut self.components {
            a.add_mol_for_batch = Some(a.add_mol_per_l_of_lot * volume_l);
            a.add_g_for_batch = a.add_g_per_l_of_lot.map(|g| g * volume_l);
        }
    }
}

/// One component as the correction sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct Level {
    /// Component name.
    pub name: String,
    /// The lot's concentration, mol/L.
    pub lot_mol_per_l: f64,
    /// The target's concentration, mol/L.
    pub target_mol_per_l: f64,
    /// Molar mass, g/mol, if known.
    pub molar_mass_g_per_mol: Option<f64>,
    /// Stock concentration, mol/L, if additions come from a stock solution
    /// (else the addition's volume is taken as negligible).
    pub stock_mol_per_l: Option<f64>,
}

/// The smallest correction (see the module documentation). `None` when the
/// stocks are too dilute to reach the target at any dilution.
pub fn correct(levels: &[Level]) -> Option<Correction> {
    let inverse_stock = |l: &Level| l.stock_mol_per_l.map_or(0.0, |s| 1.0 / s);
    let mut f: f64 = 1.0;
    for l in levels.iter().filter(|l| l.target_mol_per_l > 0.0) {
        f = f.max(l.lot_mol_per_l / l.target_mol_per_l);
    }
    let stock_share: f64 = levels
        .iter()
        .map(|l| l.target_mol_per_l * inverse_stock(l))
        .sum();
    let lot_share: f64 = levels
        .iter()
        .filter(|l| l.target_mol_per_l > 0.0)
        .map(|l| l.lot_mol_per_l * inverse_stock(l))
        .sum();
    if stock_share > 0.0 {
        if stock_share >= 1.0 {
            return None;
        }
        f = f.max((1.0 - lot_share) / (1.0 - stock_share));
    }
    let mut notes = Vec::new();
    let mut stock_volume = 0.0;
    let components = levels
        .iter()
        .map(|l| {
            let add = if l.target_mol_per_l > 0.0 {
                let add = f * l.target_mol_per_l - l.lot_mol_per_l;
                // The component that sets f needs nothing: its difference is rounding.
                if add > ROUNDING * f * l.target_mol_per_l {
                    add
                } else {
                    0.0
                }
            } else {
                if l.lot_mol_per_l > 0.0 {
                    notes.push(format!(
                        "{} is not in the recipe and cannot be removed by additions: it stays at {:.4} of its level",
                        l.name,
                        1.0 / f
                    ));
                }
                0.0
            };
            let stock_l = l.stock_mol_per_l.map(|s| add / s);
            stock_volume += stock_l.unwrap_or(0.0);
            Addition {
                name: l.name.clone(),
                add_mol_per_l_of_lot: add,
                add_g_per_l_of_lot: l.molar_mass_g_per_mol.map(|m| add * m),
                stock_l_per_l_of_lot: stock_l,
                corrected_mol_per_l: (l.lot_mol_per_l + add) / f,
                add_mol_for_batch: None,
                add_g_for_batch: None,
            }
        })
        .collect();
    Some(Correction {
        dilution_factor: f,
        solvent_l_per_l_of_lot: (f - 1.0 - stock_volume).max(0.0),
        components,
        notes,
        batch_volume_l: None,
        solvent_l_for_batch: None,
        predicted_colour: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Relative agreement of the mass balance: a few roundings of doubles.
    const BALANCE: f64 = 1e-12;

    fn level(name: &str, lot: f64, target: f64, stock: Option<f64>) -> Level {
        Level {
            name: name.into(),
            lot_mol_per_l: lot,
            target_mol_per_l: target,
            molar_mass_g_per_mol: Some(500.0),
            stock_mol_per_l: stock,
        }
    }

    #[test]
    fn lot_below_target_needs_no_dilution() {
        let c = correct(&[level("a", 8e-6, 10e-6, None), level("b", 5e-6, 5e-6, None)]).unwrap();
        assert!((c.dilution_factor - 1.0).abs() < BALANCE);
        assert!((c.components[0].add_mol_per_l_of_lot - 2e-6).abs() < BALANCE * 1e-5);
        assert!((c.components[0].add_g_per_l_of_lot.unwrap() - 1e-3).abs() < 1e-15);
        assert!(c.components[1].add_mol_per_l_of_lot.abs() < BALANCE * 1e-5);
    }

    #[test]
    fn strongest_excess_sets_the_dilution_and_balances_every_component() {
        let levels = [level("a", 12e-6, 10e-6, None), level("b", 5e-6, 6e-6, None)];
        let c = correct(&levels).unwrap();
        assert!((c.dilution_factor - 1.2).abs() < BALANCE);
        for (l, a) in levels.iter().zip(&c.components) {
            let back = (l.lot_mol_per_l + a.add_mol_per_l_of_lot) / c.dilution_factor;
            assert!((back - l.target_mol_per_l).abs() <= BALANCE * l.target_mol_per_l);
        }
    }

    #[test]
    fn stock_volume_counts_toward_the_final_volume() {
        // 1 L of lot at 8 µM, target 10 µM, stock 1 mM: v = 2e-6·f/1e-3 … the
        // volume balance 1 + v = f and 8e-6 + 1e-3·v = 10e-6·f give
        // f = (1 − 8e-3) / (1 − 1e-2).
        let levels = [level("a", 8e-6, 10e-6, Some(1e-3))];
        let c = correct(&levels).unwrap();
        let f = (1.0 - 8e-3) / (1.0 - 1e-2);
        assert!((c.dilution_factor - f).abs() < BALANCE);
        let v = c.components[0].stock_l_per_l_of_lot.unwrap();
        assert!((1.0 + v + c.solvent_l_per_l_of_lot - f).abs() < BALANCE);
        assert!((c.components[0].corrected_mol_per_l - 10e-6).abs() < BALANCE * 1e-5);
    }

    #[test]
    fn stock_weaker_than_the_target_cannot_correct() {
        assert!(correct(&[level("a", 1e-6, 10e-6, Some(5e-6))]).is_none());
    }

    #[test]
    fn component_outside_the_recipe_is_named_not_removed() {
        let c = correct(&[level("a", 10e-6, 10e-6, None), level("x", 1e-6, 0.0, None)]).unwrap();
        assert_eq!(c.notes.len(), 1);
        assert!(c.notes[0].starts_with("x is not in the recipe"));
    }
}
