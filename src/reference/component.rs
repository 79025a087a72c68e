//! One reference component and its file format (`<name>.toml`).
//!
//! The format is TOML, versioned by `format_version`; readers accept unknown
//! keys so later versions can add fields. Layout (version 1):
//!
//! ```text
//! format = "unblend-component"
//! format_version = 1
//! name = "fjord-blue"
//! molar_mass_g_per_mol = 792.9          # optional
//! note = "..."                          # optional
//! created = "2026-12-01"
//! epsilon_unit = "L/(mol*cm)"
//!
//! [conditions]                          # free text, all optional
//! solvent = "water"
//! ph = "7.0"
//! temperature = "25 °C"
//!
//! [source]
//! kind = "imported"                     # or "calibration"
//! file = "fjord-blue.csv"
//! sha256 = "…"
//!
//! [calibration]                        # only when made by `unblend calibrate`
//! date = "2026-12-01"
//! concentration_max_mol_per_l = 1e-4    # the calibrated range: fit flags
//! max_absorbance_au = 0.93              # concentrations above it
//! …                                     # see [`Calibration`]
//!
//! [absorptivity]
//! # wavelength_nm, epsilon_l_per_mol_cm [, std_error_l_per_mol_cm]
//! points = [
//!   [400, 1234.5],
//! ]
//! ```
//!
//! The `[calibration]` table is additive: files without it read as before,
//! and it is kept in [`Component::extra`] so a component written by an older
//! build keeps it on rewrite. It is checked when the file is read and parsed
//! into a [`Calibration`] by [`Component::calibration`].

use crate::error::{Error, Result};
use crate::spectrum::Grid;
use serde::{Deserialize, Serialize};

/// The value of the `format` key.
pub const FORMAT_NAME: &str = "unblend-component";
/// The newest format version this build reads and writes.
pub const FORMAT_VERSION: u32 = 1;

/// Measurement conditions under which ε was determined (free text).
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq)]
pub struct Conditions {
    /// Solvent or buffer.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub solvent: Option<String>,
    /// pH.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ph: Option<String>,
    /// Temperature.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub temperature: Option<String>,
}

/// Where the ε curve came from.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Source {
    /// `imported` (from an ε table) or `calibration` (from standards).
    pub kind: String,
    /// The file the curve was made from, as given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub file: Option<String>,
    /// SHA-256 of that file, hex.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sha256: Option<String>,
}

/// The key of the calibration table in a component file.
pub const CALIBRATION_TABLE: &str = "calibration";

/// How a component was calibrated from standards: provenance, the range the
/// calibration covers, and its fit statistics. Stored as the `[calibration]`
/// table of the component file. Statistics "at the band maximum" are those of
/// the straight line A − A_blank = ε·l·c + b at the wavelength where ε is
/// largest.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Calibration {
    /// Date of the calibration (YYYY-MM-DD, UTC).
    pub date: String,
    /// The spectra file of the standards, as given.
    pub standards_file: String,
    /// SHA-256 of the spectra file, hex.
    pub standards_sha256: String,
    /// The concentration file, as given.
    pub concentrations_file: String,
    /// SHA-256 of the concentration file, hex.
    pub concentrations_sha256: String,
    /// The unit the concentrations were given in (converted to mol/L).
    pub concentration_unit: String,
    /// Optical pathlength of the standards, cm.
    pub pathlength_cm: f64,
    /// Standards used in the final fit (replicates counted).
    pub n_standards: usize,
    /// Distinct concentrations among them.
    pub n_levels: usize,
    /// Blanks averaged and subtracted (0: none; the intercept then carries
    /// the solvent and cell).
    pub n_blanks: usize,
    /// Lowest standard concentration used, mol/L.
    pub concentration_min_mol_per_l: f64,
    /// Highest standard concentration used, mol/L: the top of the calibrated
    /// range.
    pub concentration_max_mol_per_l: f64,
    /// Highest blank-subtracted absorbance used, AU.
    pub max_absorbance_au: f64,
    /// Wavelength of the largest ε, nm.
    pub band_max_nm: f64,
    /// ε at the band maximum, L·mol⁻¹·cm⁻¹.
    pub epsilon_at_band_max_l_per_mol_cm: f64,
    /// Its standard error, L·mol⁻¹·cm⁻¹.
    pub epsilon_std_error_at_band_max_l_per_mol_cm: f64,
    /// Coefficient of determination of the line at the band maximum.
    pub r_squared_at_band_max: f64,
    /// Residual standard deviation of the line at the band maximum, AU.
    pub residual_sd_at_band_max_au: f64,
    /// Intercept of the line at the band maximum, AU.
    pub intercept_at_band_max_au: f64,
    /// Its standard error as a distance from the mean blank, AU:
    /// s·√(1/n + x̄²/Sxx + 1/n_blanks).
    pub intercept_std_error_at_band_max_au: f64,
    /// Two-sided p-value of the t test of intercept = 0 at the band maximum.
    pub intercept_p_value: f64,
    /// Relative deviation from the line of the lower standards beyond which
    /// a standard or wavelength counts as non-linear.
    pub linearity_tolerance: f64,
    /// Readings above this absorbance (AU) were not used.
    pub absorbance_ceiling_au: f64,
    /// The wavelength range the curve covers, nm: [low, high].
    pub range_nm: [f64; 2],
    /// Lack-of-fit F test at the band maximum (needs replicates and three or
    /// more concentrations).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lack_of_fit: Option<LackOfFit>,
    /// Standards left out, with the reason.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub excluded_standards: Vec<ExcludedStandard>,
    /// Wavelength ranges left out, with the reason.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub excluded_wavelengths: Vec<ExcludedWavelengths>,
}

/// The lack-of-fit F test: does the straight line miss the replicate means
/// by more than the replicates scatter?
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct LackOfFit {
    /// F = (SS_lack / df_lack) / (SS_pure / df_pure).
    pub f_statistic: f64,
    /// Degrees of freedom of lack of fit (levels − 2).
    pub df_lack_of_fit: usize,
    /// Degrees of freedom of pure error (standards − levels).
    pub df_pure_error: usize,
    /// Upper-tail p-value of F.
    pub p_value: f64,
}

/// A standard that was not used.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ExcludedStandard {
    /// Sample identifier.
    pub sample: String,
    /// Its concentration, mol/L.
    pub concentration_mol_per_l: f64,
    /// Why it was left out.
    pub reason: String,
}

/// A run of wavelengths that was not used.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ExcludedWavelengths {
    /// First and last wavelength of the run, nm.
    pub range_nm: [f64; 2],
    /// Why they were left out.
    pub reason: String,
}

impl Calibration {
    /// Check the values a reader relies on.
    pub fn validate(&self) -> std::result::Result<(), String> {
        let positive = [
            ("pathlength_cm", self.pathlength_cm),
            (
                "concentration_max_mol_per_l",
                self.concentration_max_mol_per_l,
            ),
        ];
        for (key, v) in positive {
            if !(v.is_finite() && v > 0.0) {
                return Err(format!("{key} = {v}: expected a positive number"));
            }
        }
        if !(self.concentration_min_mol_per_l.is_finite()
            && self.concentration_min_mol_per_l >= 0.0
            && self.concentration_min_mol_per_l <= self.concentration_max_mol_per_l)
        {
            return Err(format!(
                "concentration_min_mol_per_l = {}: expected 0 to concentration_max_mol_per_l",
                self.concentration_min_mol_per_l
            ));
        }
        if !self.max_absorbance_au.is_finite() {
            return Err("max_absorbance_au: expected a finite number of AU".into());
        }
        Ok(())
    }
}

/// A reference component: a named molar absorptivity curve with provenance.
#[derive(Debug, Clone)]
pub struct Component {
    /// Identifier (file stem): letters, digits, `-`, `_`, `.`.
    pub name: String,
    /// Molar mass, g/mol, when known.
    pub molar_mass_g_per_mol: Option<f64>,
    /// Free-text note.
    pub note: Option<String>,
    /// Date the component was written (YYYY-MM-DD).
    pub created: String,
    /// Measurement conditions.
    pub conditions: Conditions,
    /// Provenance.
    pub source: Source,
    /// Wavelengths of the curve (ascending).
    pub grid: Grid,
    /// ε(λ), L·mol⁻¹·cm⁻¹.
    pub epsilon_l_per_mol_cm: Vec<f64>,
    /// Standard error of ε(λ), L·mol⁻¹·cm⁻¹, when known (calibration).
    pub epsilon_std_error_l_per_mol_cm: Option<Vec<f64>>,
    /// Extra tables this version does not interpret (kept on rewrite).
    pub extra: toml::Table,
}

#[derive(Deserialize)]
struct RawFile {
    format: Option<String>,
    format_version: Option<u32>,
    name: Option<String>,
    molar_mass_g_per_mol: Option<f64>,
    note: Option<String>,
    created: Option<String>,
    epsilon_unit: Option<String>,
    #[serde(default)]
    conditions: Conditions,
    source: Option<Source>,
    absorptivity: Option<RawAbsorptivity>,
    #[serde(flatten)]
    extra: toml::Table,
}

#[derive(Deserialize)]
struct RawAbsorptivity {
    points: Vec<Vec<f64>>,
}

/// Check that a component name is usable as a file stem and an identifier.
pub fn validate_name(name: &str) -> Result<()> {
    let ok = !name.is_empty()
        && name.len() <= 64
        && name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.'))
        && !name.starts_with('.');
    if ok {
        Ok(())
    } else {
        Err(Error::Invalid(format!(
            "component name '{}': expected 1 to 64 letters, digits, '-', '_' or '.', not starting with '.'",
            crate::error::shorten(name.as_bytes())
        )))
    }
}

impl RawFile {
    /// Check format, version, name, ε unit and molar mass; the name.
    fn checked_head(&self) -> std::result::Result<String, String> {
        if self.format.as_deref() != Some(FORMAT_NAME) {
            return Err(format!("expected `format = \"{FORMAT_NAME}\"` at the top"));
        }
        match self.format_version {
            Some(v) if v >= 1 && v <= FORMAT_VERSION => {}
            Some(v) => {
                return Err(format!(
                    "format_version {v} is newer than this unblend reads ({FORMAT_VERSION}): upgrade unblend"
                ));
            }
            None => return Err("missing `format_version`".into()),
        }
        let name = self.name.clone().ok_or("missing `name`")?;
        validate_name(&name).map_err(|e| e.to_string())?;
        if let Some(u) = self.epsilon_unit.as_deref()
            && u != "L/(mol*cm)"
        {
            return Err(format!("epsilon_unit '{u}': expected \"L/(mol*cm)\""));
        }
        if let Some(m) = self.molar_mass_g_per_mol
            && !(m.is_finite() && m > 0.0)
        {
            return Err(format!(
                "molar_mass_g_per_mol {m}: expected a positive number of g/mol"
            ));
        }
        Ok(name)
    }
}

/// The columns of an `[absorptivity]` table.
struct Points {
    wavelengths_nm: Vec<f64>,
    epsilon: Vec<f64>,
    /// Present when every point has a third number.
    std_error: Option<Vec<f64>>,
}

impl RawAbsorptivity {
    /// The points as columns: at least 2, all of 2 or all of 3 finite
    /// numbers, ε and its standard error ≥ 0.
    fn columns(&self) -> std::result::Result<Points, String> {
        let width = self.points.first().map_or(0, Vec::len);
        if self.points.len() < 2 {
            return Err("[absorptivity] points: expected at least 2 points".into());
        }
        if !(width == 2 || width == 3) {
            return Err(format!(
                "[absorptivity] point 1 has {width} numbers: expected [wavelength_nm, epsilon] or [wavelength_nm, epsilon, std_error]"
            ));
        }
        let mut w = Vec::with_capacity(self.points.len());
        let mut e = Vec::with_capacity(self.points.len());
        let mut se = Vec::new();
        for (i, p) in self.points.iter().enumerate() {
            if p.len() != width {
                return Err(format!(
                    "[absorptivity] point {} has {} numbers, the first has {width}",
                    i + 1,
                    p.len()
                ));
            }
            if p.iter().any(|x| !x.is_finite()) || p[1] < 0.0 || (width == 3 && p[2] < 0.0) {
                return Err(format!(
                    "[absorptivity] point {} ({:?}): expected finite values and ε ≥ 0",
                    i + 1,
                    p
                ));
            }
            w.push(p[0]);
            e.push(p[1]);
            if width == 3 {
                se.push(p[2]);
            }
        }
        Ok(Points {
            wavelengths_nm: w,
            epsilon: e,
            std_error: (width == 3).then_some(se),
        })
    }
}

impl Component {
    /// A component from a curve alone (no provenance beyond `source_kind`),
    /// validated like a file: name, ascending finite wavelengths, ε ≥ 0 and
    /// not all zero. Its creation date is empty: the engine never reads the
    /// clock, the caller gives the date with [`Component::created_on`].
    pub fn from_curve(
        name: &str,
        wavelengths_nm: Vec<f64>,
        epsilon_l_per_mol_cm: Vec<f64>,
        source_kind: &str,
    ) -> Result<Self> {
        validate_name(name)?;
        if wavelengths_nm.len() != epsilon_l_per_mol_cm.len() {
            return Err(Error::Invalid(format!(
                "component '{name}': {} wavelengths but {} ε values",
                wavelengths_nm.len(),
                epsilon_l_per_mol_cm.len()
            )));
        }
        if epsilon_l_per_mol_cm
            .iter()
            .any(|e| !e.is_finite() || *e < 0.0)
        {
            return Err(Error::Invalid(format!(
                "component '{name}': ε must be finite and ≥ 0"
            )));
        }
        if epsilon_l_per_mol_cm.iter().all(|e| *e <= 0.0) {
            return Err(Error::Invalid(format!(
                "component '{name}': every ε value is zero: a reference must absorb somewhere"
            )));
        }
        let grid = Grid::new(wavelengths_nm)?;
        Ok(Component {
            name: name.to_string(),
            molar_mass_g_per_mol: None,
            note: None,
            created: String::new(),
            conditions: Conditions::default(),
            source: Source {
                kind: source_kind.to_string(),
                file: None,
                sha256: None,
            },
            grid,
            epsilon_l_per_mol_cm,
            epsilon_std_error_l_per_mol_cm: None,
            extra: toml::Table::new(),
        })
    }

    /// The same component with its creation date (`YYYY-MM-DD`) set.
    pub fn created_on(mut self, date: &str) -> Self {
        self.created = date.to_string();
        self
    }

    /// Read a component from the text of its file. `path` is used in messages.
    pub fn from_toml(text: &str, path: &str) -> Result<Self> {
        let bad = |message: String| Error::ComponentFile {
            path: path.to_string(),
            message,
        };
        let raw: RawFile =
            toml::from_str(text).map_err(|e| bad(e.to_string().trim_end().to_string()))?;
        let name = raw.checked_head().map_err(bad)?;
        let source = raw
            .source
            .ok_or_else(|| bad("missing [source] table".into()))?;
        let abs = raw
            .absorptivity
            .ok_or_else(|| bad("missing [absorptivity] table with `points`".into()))?;
        let points = abs.columns().map_err(bad)?;
        let grid =
            Grid::new(points.wavelengths_nm).map_err(|x| bad(format!("[absorptivity]: {x}")))?;
        if let Some(v) = raw.extra.get(CALIBRATION_TABLE) {
            let cal: Calibration = v
                .clone()
                .try_into()
                .map_err(|e: toml::de::Error| bad(format!("[calibration]: {}", e.message())))?;
            cal.validate()
                .map_err(|e| bad(format!("[calibration]: {e}")))?;
        }
        if points.epsilon.iter().all(|&x| x <= 0.0) {
            return Err(bad(
                "every ε value is zero: a reference must absorb somewhere".into(),
            ));
        }
        Ok(Component {
            name,
            molar_mass_g_per_mol: raw.molar_mass_g_per_mol,
            note: raw.note,
            created: raw.created.unwrap_or_default(),
            conditions: raw.conditions,
            source,
            grid,
            epsilon_l_per_mol_cm: points.epsilon,
            epsilon_std_error_l_per_mol_cm: points.std_error,
            extra: raw.extra,
        })
    }

    /// Render the component in the file format.
    pub fn to_toml(&self) -> String {
        #[derive(Serialize)]
        struct Head<'a> {
            format: &'a str,
            format_version: u32,
            name: &'a str,
            #[serde(skip_serializing_if = "Option::is_none")]
            molar_mass_g_per_mol: Option<f64>,
            #[serde(skip_serializing_if = "Option::is_none")]
            note: Option<&'a str>,
            created: &'a str,
            epsilon_unit: &'a str,
        }
        #[derive(Serialize)]
        struct Tables<'a> {
            conditions: &'a Conditions,
            source: &'a Source,
        }
        let head = Head {
            format: FORMAT_NAME,
            format_version: FORMAT_VERSION,
            name: &self.name,
            molar_mass_g_per_mol: self.molar_mass_g_per_mol,
            note: self.note.as_deref(),
            created: &self.created,
            epsilon_unit: "L/(mol*cm)",
        };
        // Keys this version does not know are kept. Plain values must come
        // before the first table header (after one they would belong to that
        // table), so they follow the head; unknown tables go after ours.
        let is_table = |v: &toml::Value| match v {
            toml::Value::Table(_) => true,
            toml::Value::Array(a) => !a.is_empty() && a.iter().all(toml::Value::is_table),
            _ => false,
        };
        let (extra_tables, extra_values): (toml::Table, toml::Table) = self
            .extra
            .iter()
            .map(|(k, v)| (k.clone(), v.clone()))
            .partition(|(_, v)| is_table(v));
        let mut out = String::from(
            "# unblend reference component: molar absorptivity curve and provenance\n",
        );
        out.push_str(&toml::to_string(&head).unwrap_or_default());
        if !extra_values.is_empty() {
            out.push_str(&toml::to_string(&extra_values).unwrap_or_default());
        }
        out.push('\n');
        let tables = Tables {
            conditions: &self.conditions,
            source: &self.source,
        };
        out.push_str(&toml::to_string(&tables).unwrap_or_default());
        if !extra_tables.is_empty() {
            out.push('\n');
            out.push_str(&toml::to_string(&extra_tables).unwrap_or_default());
        }
        out.push_str("\n[absorptivity]\n");
        if self.epsilon_std_error_l_per_mol_cm.is_some() {
            out.push_str("# wavelength_nm, epsilon_l_per_mol_cm, std_error_l_per_mol_cm\n");
        } else {
            out.push_str("# wavelength_nm, epsilon_l_per_mol_cm\n");
        }
        out.push_str("points = [\n");
        let w = self.grid.wavelengths_nm();
        for i in 0..w.len() {
            let (wl, eps) = (fmt_num(w[i]), fmt_num(self.epsilon_l_per_mol_cm[i]));
            match &self.epsilon_std_error_l_per_mol_cm {
                Some(se) => out.push_str(&format!("  [{wl}, {eps}, {}],\n", fmt_num(se[i]))),
                None => out.push_str(&format!("  [{wl}, {eps}],\n")),
            }
        }
        out.push_str("]\n");
        out
    }

    /// The calibration this component was made from, when it has one. The
    /// table was checked when the file was read; `None` also when it was
    /// replaced in memory by something that does not parse.
    pub fn calibration(&self) -> Option<Calibration> {
        self.extra
            .get(CALIBRATION_TABLE)
            .and_then(|v| v.clone().try_into().ok())
    }

    /// Attach a calibration (written as the `[calibration]` table).
    pub fn set_calibration(&mut self, calibration: &Calibration) -> Result<()> {
        let value = toml::Value::try_from(calibration)
            .map_err(|e| Error::Invalid(format!("calibration table: {e}")))?;
        self.extra.insert(CALIBRATION_TABLE.to_string(), value);
        Ok(())
    }

    /// Lowest and highest wavelength of the curve, nm.
    pub fn range_nm(&self) -> (f64, f64) {
        (self.grid.min_nm(), self.grid.max_nm())
    }

    /// ε linearly interpolated at `wavelength_nm`; `None` outside the curve.
    pub fn epsilon_at(&self, wavelength_nm: f64) -> Option<f64> {
        interpolate(
            self.grid.wavelengths_nm(),
            &self.epsilon_l_per_mol_cm,
            wavelength_nm,
        )
    }
}

// The interpolation lives in `preprocess`; re-exported for existing imports.
pub use crate::preprocess::interpolate;

/// Format a float so TOML reads it back exactly: shortest round-trip form,
/// always with a decimal point or exponent.
fn fmt_num(v: f64) -> String {
    let s = format!("{v}");
    if s.contains(['.', 'e', 'E']) {
        s
    } else {
        format!("{s}.0")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Component {
        Component {
            name: "test-dye".into(),
            molar_mass_g_per_mol: Some(500.25),
            note: Some("a \"quoted\" note".into()),
            created: "2026-12-01".into(),
            conditions: Conditions {
                solvent: Some("water".into()),
                ..Default::default()
            },
            source: Source {
                kind: "imported".into(),
                file: Some("x.csv".into()),
                sha256: Some("ab".into()),
            },
            grid: Grid::new(vec![400.0, 450.5, 500.0]).unwrap(),
            epsilon_l_per_mol_cm: vec![0.0, 12345.678, 1e-3],
            epsilon_std_error_l_per_mol_cm: None,
            extra: toml::Table::new(),
        }
    }

    #[test]
    fn component_round_trips_through_its_file() {
        let c = sample();
        let text = c.to_toml();
        let back = Component::from_toml(&text, "t.toml").unwrap();
        assert_eq!(back.name, c.name);
        assert_eq!(back.note, c.note);
        assert_eq!(back.epsilon_l_per_mol_cm, c.epsilon_l_per_mol_cm);
        assert_eq!(back.grid, c.grid);
        assert_eq!(back.conditions, c.conditions);
    }

    #[test]
    fn newer_format_version_is_refused() {
        let text = sample()
            .to_toml()
            .replace("format_version = 1", "format_version = 9");
        let e = Component::from_toml(&text, "t.toml").unwrap_err();
        assert!(e.to_string().contains("newer"), "{e}");
    }

    #[test]
    fn unknown_keys_are_kept() {
        let text = sample()
            .to_toml()
            .replace("[absorptivity]", "[future]\nx = 1\n\n[absorptivity]");
        let c = Component::from_toml(&text, "t.toml").unwrap();
        assert!(c.extra.contains_key("future"));
        assert!(c.to_toml().contains("[future]"));
    }

    fn calibration() -> Calibration {
        Calibration {
            date: "2026-12-01".into(),
            standards_file: "std.csv".into(),
            standards_sha256: "aa".into(),
            concentrations_file: "conc.csv".into(),
            concentrations_sha256: "bb".into(),
            concentration_unit: "umol/L".into(),
            pathlength_cm: 1.0,
            n_standards: 6,
            n_levels: 5,
            n_blanks: 2,
            concentration_min_mol_per_l: 1e-5,
            concentration_max_mol_per_l: 1e-4,
            max_absorbance_au: 0.93,
            band_max_nm: 450.5,
            epsilon_at_band_max_l_per_mol_cm: 12345.678,
            epsilon_std_error_at_band_max_l_per_mol_cm: 12.5,
            r_squared_at_band_max: 0.9999,
            residual_sd_at_band_max_au: 0.001,
            intercept_at_band_max_au: -0.0004,
            intercept_std_error_at_band_max_au: 0.0007,
            intercept_p_value: 0.6,
            linearity_tolerance: 0.05,
            absorbance_ceiling_au: 2.0,
            range_nm: [400.0, 500.0],
            lack_of_fit: Some(LackOfFit {
                f_statistic: 1.2,
                df_lack_of_fit: 3,
                df_pure_error: 1,
                p_value: 0.55,
            }),
            excluded_standards: vec![ExcludedStandard {
                sample: "std-6".into(),
                concentration_mol_per_l: 2e-4,
                reason: "bends".into(),
            }],
            excluded_wavelengths: vec![ExcludedWavelengths {
                range_nm: [390.0, 399.0],
                reason: "blank above 2 AU".into(),
            }],
        }
    }

    #[test]
    fn calibration_table_round_trips() {
        let mut c = sample();
        c.set_calibration(&calibration()).unwrap();
        c.epsilon_std_error_l_per_mol_cm = Some(vec![1.0, 2.0, 3.0]);
        let text = c.to_toml();
        assert!(text.contains("[calibration]"), "{text}");
        let back = Component::from_toml(&text, "t.toml").unwrap();
        assert_eq!(back.calibration(), Some(calibration()));
        assert_eq!(
            back.epsilon_std_error_l_per_mol_cm,
            Some(vec![1.0, 2.0, 3.0])
        );
    }

    #[test]
    fn file_without_calibration_reads_as_uncalibrated() {
        let back = Component::from_toml(&sample().to_toml(), "t.toml").unwrap();
        assert!(back.calibration().is_none());
    }

    #[test]
    fn malformed_calibration_table_is_refused() {
        let mut c = sample();
        let mut cal = calibration();
        cal.concentration_max_mol_per_l = -1.0;
        c.set_calibration(&cal).unwrap();
        let e = Component::from_toml(&c.to_toml(), "t.toml").unwrap_err();
        assert!(
            e.to_string().contains("[calibration]: concentration_max"),
            "{e}"
        );
        let text = sample().to_toml().replace(
            "[absorptivity]",
            "[calibration]\ndate = \"x\"\n\n[absorptivity]",
        );
        let e = Component::from_toml(&text, "t.toml").unwrap_err();
        assert!(
            e.to_string().contains("[calibration]: missing field"),
            "{e}"
        );
    }

    #[test]
    fn bad_names_are_rejected() {
        assert!(validate_name("ok-name_1.2").is_ok());
        assert!(validate_name("../etc").is_err());
        assert!(validate_name("").is_err());
        assert!(validate_name("a b").is_err());
    }
}
