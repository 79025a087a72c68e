//! Colour of a solution seen in transmission (a diagnostic for the report,
//! after the fit): CIE colorimetry from an absorbance spectrum.
//!
//! In: absorbance A(λ) in AU at 1 nm steps (measured, or rebuilt from the
//! fitted model), an illuminant and an observer. Out: [`Colour`] — XYZ,
//! CIELAB L*, a*, b*, C*ab, hab and an sRGB swatch.
//!
//! Method (CIE 15:2018, sections 7.1 and 8.2.1), at 1 nm:
//!
//! ```text
//! T(λ) = 10^(−A(λ))
//! X = k·Σ S(λ)·T(λ)·x̄(λ)·Δλ,  Y, Z likewise with ȳ, z̄
//! k = 100 / Σ S(λ)·ȳ(λ)·Δλ
//! ```
//!
//! summed over 360–830 nm, or over the part of it the spectrum covers when
//! that still includes 380–780 nm (the shortest range CIE 15:2018 allows);
//! k and the white point (T = 1) are summed over the same range. The tables
//! (colour-matching functions of the CIE 1931 2° and CIE 1964 10° observers,
//! illuminants D65, D50 and A) are in `src/colour/data/`, exported from the
//! colour-science package by `src/colour/data/export_tables.py`; see that
//! script for their provenance.

pub mod lab;

use crate::error::{Error, Result};
pub use lab::{Lab, Xyz, delta_e00, hex, lab_from_xyz, srgb8};
use std::sync::OnceLock;

/// First wavelength of the shipped tables, nm.
pub const TABLE_START_NM: u32 = 360;
/// Last wavelength of the shipped tables, nm.
pub const TABLE_END_NM: u32 = 830;
/// The range a spectrum must cover at least, nm (CIE 15:2018).
pub const REQUIRED_NM: (u32, u32) = (380, 780);

/// A CIE standard observer.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Observer {
    /// CIE 1931 2° standard observer.
    #[default]
    Two,
    /// CIE 1964 10° supplementary standard observer.
    Ten,
}

impl Observer {
    /// Read `2` or `10` (degrees).
    pub fn parse(text: &str) -> Option<Self> {
        match text.trim().trim_end_matches('°') {
            "2" => Some(Self::Two),
            "10" => Some(Self::Ten),
            _ => None,
        }
    }

    /// The observer's field size as written in outputs: `2` or `10`.
    pub fn label(self) -> &'static str {
        match self {
            Self::Two => "2",
            Self::Ten => "10",
        }
    }
}

/// A CIE illuminant.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Illuminant {
    /// CIE standard illuminant D65 (average daylight).
    #[default]
    D65,
    /// CIE illuminant D50 (horizon daylight, graphic arts).
    D50,
    /// CIE standard illuminant A (incandescent, 2856 K).
    A,
}

impl Illuminant {
    /// Read `D65`, `D50` or `A` (any case).
    pub fn parse(text: &str) -> Option<Self> {
        match text.trim().to_ascii_uppercase().as_str() {
            "D65" => Some(Self::D65),
            "D50" => Some(Self::D50),
            "A" => Some(Self::A),
            _ => None,
        }
    }

    /// The illuminant's name as written in outputs.
    pub fn label(self) -> &'static str {
        match self {
            Self::D65 => "D65",
            Self::D50 => "D50",
            Self::A => "A",
        }
    }
}

/// Absorbance at 1 nm steps from `first_nm`.
#[derive(Debug, Clone, PartialEq)]
pub struct Sampled {
    /// Wavelength of the first value, nm.
    pub first_nm: u32,
    /// Absorbance in AU at `first_nm`, `first_nm + 1`, …
    pub absorbance_au: Vec<f64>,
}

impl Sampled {
    /// Sample `absorbance_at(λ)` at every whole nanometre of the tables'
    /// range it covers: it returns `None` outside its data, and the covered
    /// part must be one piece that includes 380–780 nm.
    pub fn from_fn(absorbance_at: impl Fn(f64) -> Option<f64>) -> Result<Self> {
        let values: Vec<(u32, f64)> = (TABLE_START_NM..=TABLE_END_NM)
            .filter_map(|nm| absorbance_at(f64::from(nm)).map(|a| (nm, a)))
            .collect();
        let (Some(first), Some(last)) = (values.first(), values.last()) else {
            return Err(Error::Invalid(format!(
                "no absorbance between {TABLE_START_NM} and {TABLE_END_NM} nm: the CIE summation needs at least {}–{} nm",
                REQUIRED_NM.0, REQUIRED_NM.1
            )));
        };
        let (first_nm, last_nm) = (first.0, last.0);
        if first_nm > REQUIRED_NM.0 || last_nm < REQUIRED_NM.1 {
            return Err(Error::Invalid(format!(
                "the spectrum covers {first_nm}–{last_nm} nm: the CIE summation needs at least {}–{} nm",
                REQUIRED_NM.0, REQUIRED_NM.1
            )));
        }
        if values.len() != (last_nm - first_nm + 1) as usize {
            return Err(Error::Invalid(format!(
                "the spectrum has gaps between {first_nm} and {last_nm} nm: the CIE summation needs every nanometre"
            )));
        }
        if let Some((nm, _)) = values.iter().find(|(_, a)| !a.is_finite()) {
            return Err(Error::Invalid(format!(
                "the absorbance at {nm} nm is not finite: the CIE summation needs every nanometre"
            )));
        }
        Ok(Sampled {
            first_nm,
            absorbance_au: values.into_iter().map(|(_, a)| a).collect(),
        })
    }

    /// The same spectrum with every absorbance multiplied by `factor`
    /// (Beer–Lambert: another pathlength or dilution).
    pub fn scaled(&self, factor: f64) -> Self {
        Sampled {
            first_nm: self.first_nm,
            absorbance_au: self.absorbance_au.iter().map(|a| a * factor).collect(),
        }
    }
}

/// The colour of one transmission spectrum.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Colour {
    /// Tristimulus values under the chosen illuminant and observer.
    pub xyz: Xyz,
    /// CIELAB relative to the white of the same illuminant and observer.
    pub lab: Lab,
    /// 8-bit sRGB of the same spectrum under D65 / 2° (for a swatch).
    pub srgb: [u8; 3],
}

/// Colour of `spectrum` seen in transmission under `illuminant` by `observer`.
pub fn colour_of(spectrum: &Sampled, illuminant: Illuminant, observer: Observer) -> Result<Colour> {
    let tables = tables()?;
    let (xyz, white) = tristimulus(tables, spectrum, illuminant, observer);
    let (swatch, _) = tristimulus(tables, spectrum, Illuminant::D65, Observer::Two);
    Ok(Colour {
        xyz,
        lab: lab_from_xyz(xyz, white),
        srgb: srgb8(swatch),
    })
}

/// XYZ of the spectrum and of the perfect transmitter (the white point),
/// both normalised so the white has Y = 100, summed over the spectrum's
/// part of the tables' range.
pub fn tristimulus(
    tables: &Tables,
    spectrum: &Sampled,
    illuminant: Illuminant,
    observer: Observer,
) -> (Xyz, Xyz) {
    let cmf = match observer {
        Observer::Two => &tables.cmf_2,
        Observer::Ten => &tables.cmf_10,
    };
    let column = match illuminant {
        Illuminant::D65 => 0,
        Illuminant::D50 => 1,
        Illuminant::A => 2,
    };
    let offset = (spectrum.first_nm - TABLE_START_NM) as usize;
    let mut sample = [0.0; 3];
    let mut white = [0.0; 3];
    for (i, a) in spectrum.absorbance_au.iter().enumerate() {
        let s = tables.illuminants[offset + i][column];
        let t = 10f64.powf(-a);
        for (j, bar) in cmf[offset + i].iter().enumerate() {
            sample[j] += s * t * bar;
            white[j] += s * bar;
        }
    }
    // Δλ = 1 nm cancels between k and the sums.
    let k = 100.0 / white[1];
    let xyz = |v: [f64; 3]| Xyz {
        x: k * v[0],
        y: k * v[1],
        z: k * v[2],
    };
    (xyz(sample), xyz(white))
}

/// The CIE tables at 1 nm over 360–830 nm.
#[derive(Debug)]
pub struct Tables {
    /// x̄, ȳ, z̄ of the CIE 1931 2° observer.
    pub cmf_2: Vec<[f64; 3]>,
    /// x̄₁₀, ȳ₁₀, z̄₁₀ of the CIE 1964 10° observer.
    pub cmf_10: Vec<[f64; 3]>,
    /// Relative spectral power of D65, D50 and A.
    pub illuminants: Vec<[f64; 3]>,
}

const CMF_2: &str = include_str!("data/cmf-1931-2.csv");
const CMF_10: &str = include_str!("data/cmf-1964-10.csv");
const ILLUMINANTS: &str = include_str!("data/illuminants.csv");

/// The shipped tables, parsed once.
pub fn tables() -> Result<&'static Tables> {
    static TABLES: OnceLock<std::result::Result<Tables, String>> = OnceLock::new();
    TABLES
        .get_or_init(|| {
            Ok(Tables {
                cmf_2: parse_table("cmf-1931-2.csv", CMF_2)?,
                cmf_10: parse_table("cmf-1964-10.csv", CMF_10)?,
                illuminants: parse_table("illuminants.csv", ILLUMINANTS)?,
            })
        })
        .as_ref()
        .map_err(|e| Error::Invalid(e.clone()))
}

/// Parse a built-in table: a `#` comment, a header, then
/// `wavelength_nm,v1,v2,v3` for every nm of 360–830.
fn parse_table(name: &str, text: &str) -> std::result::Result<Vec<[f64; 3]>, String> {
    let mut rows = Vec::new();
    for (i, line) in text.lines().skip(2).enumerate() {
        let bad = || format!("built-in table {name}, line {}: '{line}'", i + 3);
        let fields: Vec<&str> = line.split(',').collect();
        let numbers: Vec<f64> = fields
            .iter()
            .map(|f| f.parse::<f64>())
            .collect::<std::result::Result<_, _>>()
            .map_err(|_| bad())?;
        let expected_nm = f64::from(TABLE_START_NM) + i as f64;
        if numbers.len() != 4 || (numbers[0] - expected_nm).abs() > 1e-9 {
            return Err(bad());
        }
        rows.push([numbers[1], numbers[2], numbers[3]]);
    }
    if rows.len() != (TABLE_END_NM - TABLE_START_NM + 1) as usize {
        return Err(format!("built-in table {name}: expected 360–830 nm"));
    }
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn built_in_tables_parse_and_peak_where_the_cie_says() {
        let t = tables().unwrap();
        // ȳ of the 2° observer is 1 at 555 nm (CIE 15:2018, common knowledge).
        assert!((t.cmf_2[(555 - TABLE_START_NM) as usize][1] - 1.0).abs() < 1e-6);
        // D65, D50 and A are normalised to 100 at 560 nm (CIE 15:2018).
        for v in t.illuminants[(560 - TABLE_START_NM) as usize] {
            assert!((v - 100.0).abs() < 1e-9);
        }
    }

    #[test]
    fn clear_solution_has_the_illuminant_white_point() {
        let clear = Sampled::from_fn(|_| Some(0.0)).unwrap();
        let c = colour_of(&clear, Illuminant::D65, Observer::Two).unwrap();
        // D65 / 2° white point 95.04, 100, 108.88 (CIE 15:2018 table 1,
        // which sums the 5 nm tables: agreement to 0.05 here).
        assert!((c.xyz.x - 95.04).abs() < 0.05 && (c.xyz.z - 108.88).abs() < 0.05);
        assert!((c.lab.l - 100.0).abs() < 1e-9 && c.lab.c < 1e-9);
    }

    #[test]
    fn spectrum_short_of_380_to_780_nm_is_refused() {
        let short = |nm: f64| (350.0..=750.0).contains(&nm).then_some(0.1);
        let e = Sampled::from_fn(short).unwrap_err().to_string();
        assert!(e.contains("360–750 nm") && e.contains("380–780"), "{e}");
    }

    #[test]
    fn names_parse_both_ways() {
        assert_eq!(Observer::parse("10°"), Some(Observer::Ten));
        assert_eq!(Illuminant::parse("d50"), Some(Illuminant::D50));
        assert_eq!(Illuminant::parse("F2"), None);
    }
}
