//! Parser for calibration concentration files: which standard holds how much.
//!
//! In: bytes of a delimited file with the header `sample,concentration`
//! (optionally `role`, `unit` and `note` columns). Out: a
//! [`ConcentrationTable`] in the file's unit, and from it [`Standard`]s in
//! mol/L (the one place where a concentration unit is converted).
//!
//! The unit can be stated in four places, which must agree: the `--unit`
//! flag, the header (`concentration_umol_per_l`, `concentration (mg/L)`), a
//! `unit` column, or a suffix in the cell (`12.5 umol/L`). Blanks are rows
//! with concentration 0 or with `role` = `blank`; `role` = `exclude` keeps a
//! spectrum out of the calibration on purpose. Same delimiter and decimal
//! rules as spectra files.

use super::fields;
use crate::error::{Error, Location, Result};
use std::collections::HashMap;

/// A concentration unit a standard may be given in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ConcentrationUnit {
    /// mol/L (M).
    MolPerL,
    /// mmol/L (mM).
    MmolPerL,
    /// µmol/L (µM).
    UmolPerL,
    /// mg/L (µg/mL); needs the molar mass.
    MgPerL,
    /// g/L (mg/mL); needs the molar mass.
    GPerL,
}

impl ConcentrationUnit {
    /// Read a unit: `mol/L`, `mmol/L`, `umol/L` (also `µmol/L`), `mg/L`,
    /// `g/L`, the molar shorthands `M`, `mM`, `uM`, `µM`, `ug/mL`, `mg/mL`,
    /// and header spellings such as `umol_per_l`. Case does not matter
    /// except between `M` and `m` alone.
    pub fn parse(text: &str) -> Option<Self> {
        let t: String = text
            .trim()
            .chars()
            .filter(|c| !c.is_whitespace())
            .map(|c| if c == 'µ' || c == 'μ' { 'u' } else { c })
            .collect();
        let lower = t.to_ascii_lowercase().replace("_per_", "/");
        match (t.as_str(), lower.as_str()) {
            ("M", _) | (_, "mol/l") => Some(Self::MolPerL),
            ("mM", _) | (_, "mmol/l") => Some(Self::MmolPerL),
            ("uM", _) | (_, "umol/l") => Some(Self::UmolPerL),
            (_, "mg/l" | "ug/ml") => Some(Self::MgPerL),
            (_, "g/l" | "mg/ml") => Some(Self::GPerL),
            _ => None,
        }
    }

    /// The unit's name for messages and files.
    pub fn label(self) -> &'static str {
        match self {
            Self::MolPerL => "mol/L",
            Self::MmolPerL => "mmol/L",
            Self::UmolPerL => "umol/L",
            Self::MgPerL => "mg/L",
            Self::GPerL => "g/L",
        }
    }

    /// Whether converting to mol/L needs the molar mass.
    pub fn is_mass(self) -> bool {
        matches!(self, Self::MgPerL | Self::GPerL)
    }

    /// Convert a value in this unit to mol/L. Mass units need the molar mass
    /// in g/mol.
    pub fn to_mol_per_l(self, value: f64, molar_mass_g_per_mol: Option<f64>) -> Result<f64> {
        let molar = |grams_per_l: f64| match molar_mass_g_per_mol {
            Some(m) if m.is_finite() && m > 0.0 => Ok(grams_per_l / m),
            _ => Err(Error::Invalid(format!(
                "concentrations in {}: give --molar-mass G_PER_MOL to turn them into mol/L (ε is stored in L/(mol·cm))",
                self.label()
            ))),
        };
        // Dividing by an exact power of ten rounds once: 5 umol/L becomes
        // the double nearest 5e-6, where multiplying by 1e-6 would not.
        match self {
            Self::MolPerL => Ok(value),
            Self::MmolPerL => Ok(value / 1e3),
            Self::UmolPerL => Ok(value / 1e6),
            Self::MgPerL => molar(value / 1e3),
            Self::GPerL => molar(value),
        }
    }
}

/// What a row of the concentration file stands for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    /// A standard of known concentration.
    Standard,
    /// A blank (solvent only): subtracted from the standards.
    Blank,
    /// Left out of the calibration on purpose.
    Exclude,
}

/// One row of the concentration file, in the file's unit.
#[derive(Debug, Clone)]
pub struct ConcentrationRow {
    /// 1-based line in the file.
    pub line: usize,
    /// Sample identifier, as in the spectra file.
    pub sample: String,
    /// Concentration in the table's unit; `None` for a blank or excluded row
    /// whose cell is empty.
    pub value: Option<f64>,
    /// Standard, blank or excluded.
    pub role: Role,
}

/// A concentration file as read.
#[derive(Debug, Clone)]
pub struct ConcentrationTable {
    /// Rows in file order.
    pub rows: Vec<ConcentrationRow>,
    /// The unit of every value.
    pub unit: ConcentrationUnit,
    /// Where the unit came from (`--unit`, the header, …); `None` when no
    /// unit was stated and mol/L was assumed.
    pub unit_stated_by: Option<String>,
}

/// A standard or blank ready for calibration, concentration in mol/L.
#[derive(Debug, Clone, PartialEq)]
pub struct Standard {
    /// Sample identifier.
    pub sample: String,
    /// 1-based line in the concentration file.
    pub line: usize,
    /// Concentration, mol/L (0 for blanks).
    pub concentration_mol_per_l: f64,
    /// Standard, blank or excluded.
    pub role: Role,
}

const SAMPLE_NAMES: &[&str] = &["sample", "sample_id", "id", "well"];
const CONCENTRATION_PREFIXES: &[&str] = &["concentration", "conc"];
const NOTE_NAMES: &[&str] = &["note", "notes", "comment", "comments"];

/// Where each column is.
struct Columns {
    sample: usize,
    concentration: usize,
    role: Option<usize>,
    unit: Option<usize>,
}

/// Read a concentration file. `unit_flag` is the unit given on the command
/// line, if any.
pub fn read(bytes: &[u8], unit_flag: Option<ConcentrationUnit>) -> Result<ConcentrationTable> {
    let bytes = fields::strip_bom(bytes);
    let mut lines = fields::lines(bytes);
    let Some((header_line, header_bytes, delimiter)) = fields::first_content_line(&mut lines)
    else {
        return Err(Error::Invalid(
            "the concentration file is empty: expected a header `sample,concentration` and one row per standard".into(),
        ));
    };
    let mut raw = Vec::new();
    fields::split(header_bytes, delimiter.byte(), &mut raw);
    fields::trim_trailing_empty(&mut raw);
    let names: Vec<String> = raw.iter().map(|f| fields::text(f).into_owned()).collect();
    let mut unit_source: Option<(ConcentrationUnit, String)> =
        unit_flag.map(|u| (u, format!("--unit {}", u.label())));
    let columns = classify_header(&names, header_line, &mut unit_source)?;

    let mut rows: Vec<ConcentrationRow> = Vec::new();
    let mut seen: HashMap<String, usize> = HashMap::new();
    let mut scratch = Vec::new();
    for (line_no, line) in lines {
        if fields::is_skippable(line, delimiter.byte()) {
            continue;
        }
        fields::split(line, delimiter.byte(), &mut scratch);
        fields::trim_trailing_empty(&mut scratch);
        let row = RowCells {
            line_no,
            cells: &scratch,
            decimal_comma: delimiter.allows_decimal_comma(),
        };
        let parsed = row.parse(&columns, &mut unit_source)?;
        if let Some(first) = seen.insert(parsed.sample.clone(), line_no) {
            return Err(Error::structure(
                line_no,
                format!(
                    "sample '{}' is listed twice (first on line {first}): expected one row per spectrum",
                    parsed.sample
                ),
            ));
        }
        rows.push(parsed);
    }
    if rows.is_empty() {
        return Err(Error::structure(
            header_line,
            "the header is the only line: expected one row per standard and blank after it",
        ));
    }
    let (unit, unit_stated_by) = match unit_source {
        Some((u, by)) => (u, Some(by)),
        None => (ConcentrationUnit::MolPerL, None),
    };
    Ok(ConcentrationTable {
        rows,
        unit,
        unit_stated_by,
    })
}

/// The fields of one data row, with its line number.
struct RowCells<'r, 'a> {
    line_no: usize,
    cells: &'r [&'a [u8]],
    decimal_comma: bool,
}

/// Where a unit was stated first, to check later statements against.
type UnitSource = Option<(ConcentrationUnit, String)>;

impl RowCells<'_, '_> {
    fn cell(&self, i: usize) -> &[u8] {
        self.cells.get(i).copied().unwrap_or(b"")
    }

    /// One row: sample, role, unit cell and concentration, checked.
    fn parse(&self, columns: &Columns, unit_source: &mut UnitSource) -> Result<ConcentrationRow> {
        let sample = fields::text(self.cell(columns.sample)).into_owned();
        if sample.is_empty() {
            return Err(Error::parse(
                self.line_no,
                columns.sample + 1,
                b"",
                "a sample name (as in the spectra file)",
            ));
        }
        let role = match columns.role {
            None => None,
            Some(i) => self.role(i)?,
        };
        if let Some(i) = columns.unit {
            self.unit_cell(i, unit_source)?;
        }
        let value = self.concentration(columns.concentration, role, unit_source)?;
        let role = self.settle_role(columns.concentration, role, value)?;
        Ok(ConcentrationRow {
            line: self.line_no,
            sample,
            value,
            role,
        })
    }

    /// The role cell in column `i`; `None` when empty.
    fn role(&self, i: usize) -> Result<Option<Role>> {
        let t = fields::text(self.cell(i)).trim().to_ascii_lowercase();
        match t.as_str() {
            "" => Ok(None),
            "standard" | "std" => Ok(Some(Role::Standard)),
            "blank" => Ok(Some(Role::Blank)),
            "exclude" | "excluded" | "skip" => Ok(Some(Role::Exclude)),
            _ => Err(Error::parse(
                self.line_no,
                i + 1,
                self.cell(i),
                "a role: standard, blank or exclude (or empty)",
            )),
        }
    }

    /// A unit cell in column `i`: when filled, it must agree with the others.
    fn unit_cell(&self, i: usize, unit_source: &mut UnitSource) -> Result<()> {
        let t = fields::text(self.cell(i));
        if t.trim().is_empty() {
            return Ok(());
        }
        let u = ConcentrationUnit::parse(&t).ok_or_else(|| {
            Error::parse(self.line_no, i + 1, self.cell(i), UNIT_EXPECTED.to_string())
        })?;
        agree(
            unit_source,
            u,
            format!("line {}, column {}", self.line_no, i + 1),
        )
    }

    /// The concentration in column `col`, with an optional unit suffix;
    /// `None` for an empty cell of a blank or excluded row.
    fn concentration(
        &self,
        col: usize,
        role: Option<Role>,
        unit_source: &mut UnitSource,
    ) -> Result<Option<f64>> {
        let line_no = self.line_no;
        let raw = self.cell(col);
        let text = fields::text(raw);
        if text.trim().is_empty() {
            if matches!(role, Some(Role::Blank | Role::Exclude)) {
                return Ok(None);
            }
            return Err(Error::parse(
                line_no,
                col + 1,
                b"",
                "a concentration (a number; 0 or role `blank` for a blank)",
            ));
        }
        let (v, suffix) = split_value(text.trim(), self.decimal_comma).ok_or_else(|| {
            Error::parse(
                line_no,
                col + 1,
                raw,
                "a concentration (a number, optionally followed by its unit)",
            )
        })?;
        if let Some(s) = suffix {
            let u = ConcentrationUnit::parse(s)
                .ok_or_else(|| Error::parse(line_no, col + 1, raw, UNIT_EXPECTED.to_string()))?;
            agree(
                unit_source,
                u,
                format!("line {line_no}, column {}", col + 1),
            )?;
        }
        if v < 0.0 {
            return Err(Error::parse(
                line_no,
                col + 1,
                raw,
                "a concentration of 0 or more (a negative concentration is not physical)",
            ));
        }
        Ok(Some(v))
    }

    /// The row's role from its role cell and value: no role means standard
    /// when positive, blank otherwise; a zero "standard" is a blank.
    fn settle_role(&self, col: usize, role: Option<Role>, value: Option<f64>) -> Result<Role> {
        let positive = value.is_some_and(|v| v > 0.0);
        let role = match role {
            Some(Role::Blank) if positive => {
                return Err(Error::parse(
                    self.line_no,
                    col + 1,
                    self.cell(col),
                    "0 or an empty cell for a row whose role is `blank`",
                ));
            }
            Some(r) => r,
            None if positive => Role::Standard,
            None => Role::Blank,
        };
        Ok(if role == Role::Standard && !positive {
            Role::Blank
        } else {
            role
        })
    }
}

const UNIT_EXPECTED: &str = "a concentration unit: mol/L, mmol/L, umol/L, mg/L or g/L";

impl ConcentrationTable {
    /// Convert every row to mol/L. Mass units need the molar mass.
    pub fn standards(&self, molar_mass_g_per_mol: Option<f64>) -> Result<Vec<Standard>> {
        let mut out = Vec::with_capacity(self.rows.len());
        for r in &self.rows {
            let c = match r.value {
                Some(v) => self.unit.to_mol_per_l(v, molar_mass_g_per_mol)?,
                None => 0.0,
            };
            out.push(Standard {
                sample: r.sample.clone(),
                line: r.line,
                concentration_mol_per_l: c,
                role: r.role,
            });
        }
        Ok(out)
    }
}

fn classify_header(
    names: &[String],
    line: usize,
    unit_source: &mut Option<(ConcentrationUnit, String)>,
) -> Result<Columns> {
    let mut sample = None;
    let mut concentration = None;
    let mut role = None;
    let mut unit = None;
    for (i, name) in names.iter().enumerate() {
        let lower = name.trim().to_ascii_lowercase();
        let at = Location {
            line,
            column: Some(i + 1),
        };
        if SAMPLE_NAMES.contains(&lower.as_str()) && sample.is_none() {
            sample = Some(i);
        } else if lower == "role" {
            role = Some(i);
        } else if lower == "unit" {
            unit = Some(i);
        } else if NOTE_NAMES.contains(&lower.as_str()) {
        } else if let Some(rest) = CONCENTRATION_PREFIXES
            .iter()
            .find_map(|p| lower.strip_prefix(p))
            .filter(|_| concentration.is_none())
        {
            concentration = Some(i);
            // Keep the original case for the unit (M vs m).
            let original = &name.trim()[name.trim().len() - rest.len()..];
            let u = original.trim_matches(|c: char| {
                c == '_' || c == ' ' || c == '(' || c == ')' || c == '[' || c == ']'
            });
            if !u.is_empty() {
                let parsed = ConcentrationUnit::parse(u).ok_or_else(|| Error::Parse {
                    at: at.clone(),
                    value: name.clone(),
                    expected: format!(
                        "a concentration column whose name carries {UNIT_EXPECTED} (e.g. `concentration_umol_per_l`), or plain `concentration`"
                    ),
                })?;
                agree(unit_source, parsed, "the header".into())?;
            }
        } else {
            return Err(Error::Parse {
                at,
                value: name.clone(),
                expected: "a column named sample, concentration, role, unit or note".into(),
            });
        }
    }
    match (sample, concentration) {
        (Some(sample), Some(concentration)) => Ok(Columns {
            sample,
            concentration,
            role,
            unit,
        }),
        _ => Err(Error::structure(
            line,
            format!(
                "header '{}': expected the columns `sample,concentration` (optionally `role`, `unit`, `note`)",
                names.join(",")
            ),
        )),
    }
}

/// Record a unit statement; a second statement must name the same unit.
fn agree(
    source: &mut Option<(ConcentrationUnit, String)>,
    unit: ConcentrationUnit,
    where_: String,
) -> Result<()> {
    match source {
        None => {
            *source = Some((unit, where_));
            Ok(())
        }
        Some((u, _)) if *u == unit => Ok(()),
        Some((u, by)) => Err(Error::Invalid(format!(
            "mixed concentration units: {where_} says {} but {by} says {}: use one unit for the whole file",
            unit.label(),
            u.label()
        ))),
    }
}

/// Split `12.5 umol/L` into the number and the unit text.
fn split_value(text: &str, decimal_comma: bool) -> Option<(f64, Option<&str>)> {
    if let Ok(v) = fields::number(text.as_bytes(), decimal_comma) {
        return Some((v, None));
    }
    // The number ends at the first character that cannot be part of one
    // (an exponent `e` counts only when a digit or sign follows).
    let b = text.as_bytes();
    let mut end = 0;
    while end < b.len() {
        let c = b[end];
        let numeric = c.is_ascii_digit()
            || c == b'.'
            || c == b'+'
            || c == b'-'
            || (decimal_comma && c == b',')
            || ((c == b'e' || c == b'E')
                && b.get(end + 1)
                    .is_some_and(|n| n.is_ascii_digit() || *n == b'-' || *n == b'+'));
        if !numeric {
            break;
        }
        end += 1;
    }
    if end == 0 {
        return None;
    }
    let v = fields::number(&b[..end], decimal_comma).ok()?;
    let unit = text[end..].trim();
    Some((v, (!unit.is_empty()).then_some(unit)))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read_str(s: &str) -> Result<ConcentrationTable> {
        read(s.as_bytes(), None)
    }

    #[test]
    fn plain_file_is_read_with_blanks_from_zero() {
        let t = read_str("sample,concentration\nb1,0\ns1,1e-5\ns2,2e-5\n").unwrap();
        assert_eq!(t.rows.len(), 3);
        assert_eq!(t.rows[0].role, Role::Blank);
        assert_eq!(t.rows[1].role, Role::Standard);
        assert_eq!(t.unit, ConcentrationUnit::MolPerL);
        assert!(t.unit_stated_by.is_none());
    }

    #[test]
    fn unit_in_header_is_applied() {
        let t = read_str("sample,concentration_umol_per_l\ns1,10\n").unwrap();
        assert_eq!(t.unit, ConcentrationUnit::UmolPerL);
        let s = t.standards(None).unwrap();
        assert!((s[0].concentration_mol_per_l - 1e-5).abs() < 1e-18);
        let t = read_str("sample,concentration_umol_per_l\ns1,5\n").unwrap();
        assert_eq!(
            t.standards(None).unwrap()[0]
                .concentration_mol_per_l
                .to_bits(),
            5e-6f64.to_bits()
        );
        let t = read_str("sample,concentration (mM)\ns1,2\n").unwrap();
        assert_eq!(t.unit, ConcentrationUnit::MmolPerL);
    }

    #[test]
    fn role_column_marks_blanks_and_exclusions() {
        let t =
            read_str("sample,concentration,role\nb,,blank\nx,5,exclude\ns,5,standard\n").unwrap();
        assert_eq!(t.rows[0].role, Role::Blank);
        assert_eq!(t.rows[0].value, None);
        assert_eq!(t.rows[1].role, Role::Exclude);
        assert_eq!(t.rows[2].role, Role::Standard);
    }

    #[test]
    fn blank_with_a_concentration_is_an_error() {
        let e = read_str("sample,concentration,role\nb,3,blank\n").unwrap_err();
        assert!(e.to_string().starts_with("line 2, column 2"), "{e}");
    }

    #[test]
    fn negative_concentration_is_an_error_naming_the_cell() {
        let e = read_str("sample,concentration\ns1,1\ns2,-2\n").unwrap_err();
        assert_eq!(
            e.to_string(),
            "line 3, column 2 ('-2'): expected a concentration of 0 or more (a negative concentration is not physical)"
        );
    }

    #[test]
    fn mixed_units_are_an_error() {
        let e = read_str("sample,concentration\ns1,10 umol/L\ns2,5 mg/L\n").unwrap_err();
        assert!(e.to_string().contains("mixed concentration units"), "{e}");
        assert!(e.to_string().contains("line 3"), "{e}");
        let e = read(
            b"sample,concentration_mg_per_l\ns1,10\n",
            Some(ConcentrationUnit::UmolPerL),
        )
        .unwrap_err();
        assert!(e.to_string().contains("--unit umol/L"), "{e}");
        let e = read_str("sample,concentration,unit\ns1,1,mM\ns2,2,uM\n").unwrap_err();
        assert!(e.to_string().contains("mixed"), "{e}");
    }

    #[test]
    fn cell_suffix_and_exponent_are_told_apart() {
        assert_eq!(split_value("1e-5", false), Some((1e-5, None)));
        assert_eq!(split_value("1e-5 M", false), Some((1e-5, Some("M"))));
        assert_eq!(split_value("5mM", false), Some((5.0, Some("mM"))));
        assert_eq!(split_value("2,5 µM", true), Some((2.5, Some("µM"))));
        assert_eq!(split_value("abc", false), None);
    }

    #[test]
    fn units_parse_in_their_usual_spellings() {
        use ConcentrationUnit::*;
        for (s, u) in [
            ("mol/L", MolPerL),
            ("M", MolPerL),
            ("mM", MmolPerL),
            ("mmol/l", MmolPerL),
            ("µmol/L", UmolPerL),
            ("uM", UmolPerL),
            ("umol_per_l", UmolPerL),
            ("mg/L", MgPerL),
            ("ug/mL", MgPerL),
            ("g/L", GPerL),
        ] {
            assert_eq!(ConcentrationUnit::parse(s), Some(u), "{s}");
        }
        assert_eq!(ConcentrationUnit::parse("m"), None);
        assert_eq!(ConcentrationUnit::parse("ppm"), None);
    }

    #[test]
    fn mass_units_need_the_molar_mass() {
        let t = read_str("sample,concentration_mg_per_l\ns,60\n").unwrap();
        assert!(t.standards(None).is_err());
        // 60 mg/L of a 300 g/mol solute is 2e-4 mol/L.
        let s = t.standards(Some(300.0)).unwrap();
        assert!((s[0].concentration_mol_per_l - 2e-4).abs() < 1e-15);
    }

    #[test]
    fn duplicate_sample_and_unknown_column_are_errors() {
        let e = read_str("sample,concentration\ns,1\ns,2\n").unwrap_err();
        assert!(e.to_string().contains("listed twice"), "{e}");
        let e = read_str("sample,concentration,rol\ns,1,blank\n").unwrap_err();
        assert!(e.to_string().starts_with("line 1, column 3"), "{e}");
        let e = read_str("name,value\ns,1\n").unwrap_err();
        assert!(e.to_string().contains("sample"), "{e}");
    }
}
