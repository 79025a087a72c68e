//! Emission curves of a component (model): the `[[emission]]` tables of a
//! component file.
//!
//! A component may carry, beside its absorptivity curve, one emission curve
//! per excitation wavelength: the emitted intensity per unit concentration,
//! F(λ_em)/c in the instrument's intensity units per mol/L, valid at low
//! absorbance where F = k·I₀·Φ·2.303·ε(λ_ex)·c·l·S(λ_em) is linear in c
//! (Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., ch. 1–2).
//! The curve holds for one instrument and its settings, which the
//! `instrument_note` records. Layout, additive to format version 1 (older
//! files have no such table and read as before; older builds keep it as an
//! unknown table):
//!
//! ```text
//! [[emission]]
//! excitation_nm = 350.0
//! instrument_note = "slits 5/5 nm, PMT 600 V"     # optional
//! intensity_unit = "counts/(mol/L)"               # optional, free text
//! source_file = "qs-350.csv"                      # optional
//! # wavelength_nm, intensity_per_mol_per_l
//! points = [[400.0, 1.2e9], [401.0, 1.3e9]]
//! ```

use super::component::Component;
use crate::error::{Error, Result};
use crate::input::emission::EXCITATION_TOLERANCE_NM;
use crate::spectrum::Grid;
use serde::{Deserialize, Serialize};

/// The key of the emission tables in a component file.
pub const EMISSION_TABLE: &str = "emission";

/// One emission curve at one excitation wavelength.
#[derive(Debug, Clone, PartialEq)]
pub struct EmissionCurve {
    /// Excitation wavelength, nm.
    pub excitation_nm: f64,
    /// The instrument and settings the curve holds for (free text).
    pub instrument_note: Option<String>,
    /// The intensity unit, free text (e.g. "counts/(mol/L)").
    pub intensity_unit: Option<String>,
    /// The file the curve was read from, as given.
    pub source_file: Option<String>,
    /// Emission wavelengths, nm (ascending).
    pub grid: Grid,
    /// Intensity per mol/L at each wavelength (≥ 0, not all zero).
    pub intensity_per_mol_per_l: Vec<f64>,
}

#[derive(Serialize, Deserialize)]
struct RawCurve {
    excitation_nm: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    instrument_note: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    intensity_unit: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    source_file: Option<String>,
    points: Vec<[f64; 2]>,
}

impl EmissionCurve {
    /// A validated curve: positive excitation, ascending finite
    /// wavelengths, intensities finite, ≥ 0 and not all zero.
    pub fn new(
        excitation_nm: f64,
        wavelengths_nm: Vec<f64>,
        intensity_per_mol_per_l: Vec<f64>,
    ) -> Result<Self> {
        if !(excitation_nm.is_finite() && excitation_nm > 0.0) {
            return Err(Error::Invalid(format!(
                "excitation {excitation_nm} nm: expected a positive wavelength in nm"
            )));
        }
        if wavelengths_nm.len() != intensity_per_mol_per_l.len() || wavelengths_nm.len() < 2 {
            return Err(Error::Invalid(format!(
                "{} wavelengths and {} intensities: expected two or more of each, as many of one as of the other",
                wavelengths_nm.len(),
                intensity_per_mol_per_l.len()
            )));
        }
        if let Some((i, v)) = intensity_per_mol_per_l
            .iter()
            .enumerate()
            .find(|(_, v)| !(v.is_finite() && **v >= 0.0))
        {
            return Err(Error::Invalid(format!(
                "point {} ({v}): expected a finite intensity of 0 or more per mol/L",
                i + 1
            )));
        }
        if intensity_per_mol_per_l.iter().all(|v| *v <= 0.0) {
            return Err(Error::Invalid(
                "every intensity is zero: an emission reference must emit somewhere".into(),
            ));
        }
        Ok(EmissionCurve {
            excitation_nm,
            instrument_note: None,
            intensity_unit: None,
            source_file: None,
            grid: Grid::new(wavelengths_nm)?,
            intensity_per_mol_per_l,
        })
    }

    /// Whether this curve was taken at `excitation_nm` (within
    /// [`EXCITATION_TOLERANCE_NM`]).
    pub fn excited_at(&self, excitation_nm: f64) -> bool {
        (self.excitation_nm - excitation_nm).abs() <= EXCITATION_TOLERANCE_NM
    }

    fn from_raw(raw: RawCurve) -> Result<Self> {
        let (w, i) = raw.points.iter().map(|p| (p[0], p[1])).unzip();
        let mut c = EmissionCurve::new(raw.excitation_nm, w, i)?;
        c.instrument_note = raw.instrument_note;
        c.intensity_unit = raw.intensity_unit;
        c.source_file = raw.source_file;
        Ok(c)
    }

    fn to_raw(&self) -> RawCurve {
        RawCurve {
            excitation_nm: self.excitation_nm,
            instrument_note: self.instrument_note.clone(),
            intensity_unit: self.intensity_unit.clone(),
            source_file: self.source_file.clone(),
            points: self
                .grid
                .wavelengths_nm()
                .iter()
                .zip(&self.intensity_per_mol_per_l)
                .map(|(&w, &i)| [w, i])
                .collect(),
        }
    }
}

/// Read and check the `[[emission]]` tables of a component file's extra
/// keys (`Ok(empty)` when there are none). Messages name the table.
pub fn curves_in(extra: &toml::Table) -> std::result::Result<Vec<EmissionCurve>, String> {
    let Some(value) = extra.get(EMISSION_TABLE) else {
        return Ok(Vec::new());
    };
    let raws: Vec<RawCurve> = value
        .clone()
        .try_into()
        .map_err(|e: toml::de::Error| format!("[[emission]]: {}", e.message()))?;
    let mut out: Vec<EmissionCurve> = Vec::with_capacity(raws.len());
    for (k, raw) in raws.into_iter().enumerate() {
        let c = EmissionCurve::from_raw(raw).map_err(|e| format!("[[emission]] {}: {e}", k + 1))?;
        if out.iter().any(|o| o.excited_at(c.excitation_nm)) {
            return Err(format!(
                "[[emission]] {}: a second curve at excitation {} nm",
                k + 1,
                c.excitation_nm
            ));
        }
        out.push(c);
    }
    Ok(out)
}

impl Component {
    /// The component's emission curves (checked when the file was read;
    /// empty when it has none).
    pub fn emission_curves(&self) -> Vec<EmissionCurve> {
        curves_in(&self.extra).unwrap_or_default()
    }

    /// The emission curve at `excitation_nm`, if the component has one.
    pub fn emission_at(&self, excitation_nm: f64) -> Option<EmissionCurve> {
        self.emission_curves()
            .into_iter()
            .find(|c| c.excited_at(excitation_nm))
    }

    /// Add an emission curve, replacing one at the same excitation; the
    /// curves are kept in order of excitation.
    pub fn set_emission(&mut self, curve: EmissionCurve) -> Result<()> {
        let mut curves = self.emission_curves();
        curves.retain(|c| !c.excited_at(curve.excitation_nm));
        curves.push(curve);
        curves.sort_by(|a, b| a.excitation_nm.total_cmp(&b.excitation_nm));
        let raws: Vec<RawCurve> = curves.iter().map(EmissionCurve::to_raw).collect();
        let value = toml::Value::try_from(raws)
            .map_err(|e| Error::Invalid(format!("emission table: {e}")))?;
        self.extra.insert(EMISSION_TABLE.to_string(), value);
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn component() -> Component {
        Component::from_curve("qs", vec![300.0, 350.0, 400.0], vec![1.0, 5000.0, 0.0], "x").unwrap()
    }

    fn curve(ex: f64) -> EmissionCurve {
        let mut c =
            EmissionCurve::new(ex, vec![400.0, 450.5, 500.0], vec![1.5e8, 3.25e9, 0.0]).unwrap();
        c.instrument_note = Some("slits 5/5 nm".into());
        c
    }

    #[test]
    fn emission_curves_round_trip_through_the_component_file() {
        let mut c = component();
        c.set_emission(curve(350.0)).unwrap();
        c.set_emission(curve(280.0)).unwrap();
        let text = c.to_toml();
        assert!(text.contains("[[emission]]"), "{text}");
        let back = Component::from_toml(&text, "t.toml").unwrap();
        assert_eq!(back.emission_curves(), vec![curve(280.0), curve(350.0)]);
        assert_eq!(back.epsilon_l_per_mol_cm, c.epsilon_l_per_mol_cm);
        assert_eq!(back.emission_at(350.2), Some(curve(350.0)));
        assert!(back.emission_at(360.0).is_none());
    }

    #[test]
    fn a_curve_at_the_same_excitation_is_replaced() {
        let mut c = component();
        c.set_emission(curve(350.0)).unwrap();
        let mut other = curve(350.0);
        other.instrument_note = None;
        c.set_emission(other.clone()).unwrap();
        assert_eq!(c.emission_curves(), vec![other]);
    }

    #[test]
    fn malformed_emission_table_is_refused_by_the_reader() {
        let mut c = component();
        c.set_emission(curve(350.0)).unwrap();
        let text = c.to_toml().replace("3250000000.0", "-3.0");
        let e = Component::from_toml(&text, "t.toml").unwrap_err();
        assert!(e.to_string().contains("[[emission]] 1: point 2"), "{e}");
    }

    #[test]
    fn file_without_emission_has_no_curves() {
        let back = Component::from_toml(&component().to_toml(), "t.toml").unwrap();
        assert!(back.emission_curves().is_empty());
    }
}
