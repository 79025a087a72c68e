//! Parser for target (recipe) and stock files, and their resolution against
//! the fitted references.
//!
//! In: bytes of a delimited file with the header
//! `component,concentration,unit` and, optionally, the columns
//! `tolerance_percent` (the strength tolerance of that component) and
//! `max_delta_e00` (the blend's colour tolerance; the same on every row that
//! gives it). `#` lines are comments. Out: a [`Recipe`] in the file's units,
//! then, with the reference set, a [`Target`] in mol/L holding every fitted
//! component (those the recipe does not name at 0). Units are those of
//! [`ConcentrationUnit`]; mass units use the component's molar mass.

use crate::error::{Error, Result};
use crate::input::concentrations::ConcentrationUnit;
use crate::input::fields::{self, Delimiter};
use crate::reference::ReferenceSet;

/// One row of a recipe or stock file.
#[derive(Debug, Clone, PartialEq)]
pub struct RecipeLine {
    /// 1-based line number in the file.
    pub line: usize,
    /// Component name (as in the library).
    pub component: String,
    /// Concentration in `unit`, ≥ 0.
    pub value: f64,
    /// The unit of `value`.
    pub unit: ConcentrationUnit,
    /// Strength tolerance of this component, percent, if the file gives one.
    pub tolerance_percent: Option<f64>,
}

/// A parsed recipe or stock file, in the file's units.
#[derive(Debug, Clone, PartialEq)]
pub struct Recipe {
    /// The rows, in file order.
    pub lines: Vec<RecipeLine>,
    /// The blend's ΔE00 tolerance, if the file gives one.
    pub max_delta_e00: Option<f64>,
}

/// One component of a [`Target`], in mol/L.
#[derive(Debug, Clone, PartialEq)]
pub struct TargetComponent {
    /// Component name.
    pub name: String,
    /// Target concentration, mol/L (0 when the recipe does not name it).
    pub concentration_mol_per_l: f64,
    /// Strength tolerance, percent.
    pub tolerance_percent: f64,
    /// Molar mass, g/mol, when the component file gives it.
    pub molar_mass_g_per_mol: Option<f64>,
}

/// A recipe resolved against the reference set: one entry per fitted
/// component, in the reference set's order.
#[derive(Debug, Clone, PartialEq)]
pub struct Target {
    /// The target's name (the file name without extension, or the plate
    /// map's name for it).
    pub name: String,
    /// Every fitted component with its target concentration.
    pub components: Vec<TargetComponent>,
    /// The blend's colour tolerance, ΔE00.
    pub max_delta_e00: f64,
}

/// Default and allowed tolerances.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tolerances {
    /// Strength tolerance, percent (0 < t < 100).
    pub strength_percent: f64,
    /// Colour tolerance, ΔE00 (0 < t ≤ 100).
    pub max_delta_e00: f64,
}

impl Default for Tolerances {
    fn default() -> Self {
        Tolerances {
            strength_percent: 5.0,
            max_delta_e00: 1.0,
        }
    }
}

impl Tolerances {
    /// Validated tolerances.
    pub fn new(strength_percent: f64, max_delta_e00: f64) -> Result<Self> {
        check_strength(strength_percent)
            .and_then(|()| check_delta_e(max_delta_e00))
            .map_err(|expected| {
                Error::Invalid(format!("tolerance out of range: expected {expected}"))
            })?;
        Ok(Tolerances {
            strength_percent,
            max_delta_e00,
        })
    }
}

const STRENGTH_EXPECTED: &str = "a strength tolerance in percent above 0 and below 100";
const DELTA_E_EXPECTED: &str = "a ΔE00 tolerance above 0 and at most 100";
const UNIT_EXPECTED: &str = "a concentration unit: mol/L, mmol/L, umol/L, mg/L or g/L";

fn check_strength(t: f64) -> std::result::Result<(), &'static str> {
    (t.is_finite() && t > 0.0 && t < 100.0)
        .then_some(())
        .ok_or(STRENGTH_EXPECTED)
}

fn check_delta_e(t: f64) -> std::result::Result<(), &'static str> {
    (t.is_finite() && t > 0.0 && t <= 100.0)
        .then_some(())
        .ok_or(DELTA_E_EXPECTED)
}

/// Column positions of a recipe file.
struct Columns {
    component: usize,
    concentration: usize,
    unit: usize,
    tolerance: Option<usize>,
    delta_e: Option<usize>,
}

fn columns(names: &[String], line: usize) -> Result<Columns> {
    let find = |want: &str| {
        names
            .iter()
            .position(|n| n.trim().eq_ignore_ascii_case(want))
    };
    let needed = |want: &str| {
        find(want).ok_or_else(|| {
            Error::structure(
                line,
                format!("no `{want}` column: expected the header `component,concentration,unit` (optionally `tolerance_percent`, `max_delta_e00`)"),
            )
        })
    };
    Ok(Columns {
        component: needed("component")?,
        concentration: needed("concentration")?,
        unit: needed("unit")?,
        tolerance: find("tolerance_percent"),
        delta_e: find("max_delta_e00"),
    })
}

/// Read a recipe or stock file (see the module documentation).
pub fn read(bytes: &[u8]) -> Result<Recipe> {
    let bytes = fields::strip_bom(bytes);
    let mut lines = fields::lines(bytes);
    let Some((header_line, header, delimiter)) = lines.by_ref().find_map(|(n, line)| {
        let d = Delimiter::detect(line);
        (!fields::is_skippable(line, d.byte())).then_some((n, line, d))
    }) else {
        return Err(Error::Invalid(
            "the file is empty: expected a header `component,concentration,unit` and one row per component".into(),
        ));
    };
    let mut raw = Vec::new();
    fields::split(header, delimiter.byte(), &mut raw);
    let names: Vec<String> = raw.iter().map(|f| fields::text(f).into_owned()).collect();
    let cols = columns(&names, header_line)?;
    let mut recipe = Recipe {
        lines: Vec::new(),
        max_delta_e00: None,
    };
    for (n, line) in lines {
        if fields::is_skippable(line, delimiter.byte()) {
            continue;
        }
        fields::split(line, delimiter.byte(), &mut raw);
        let row = read_row(
            &raw,
            n,
            &cols,
            delimiter.allows_decimal_comma(),
            &mut recipe,
        )?;
        if let Some(first) = recipe.lines.iter().find(|l| l.component == row.component) {
            return Err(Error::structure(
                n,
                format!(
                    "component '{}' is listed twice (first on line {}): expected one row per component",
                    row.component, first.line
                ),
            ));
        }
        recipe.lines.push(row);
    }
    if recipe.lines.is_empty() {
        return Err(Error::structure(
            header_line,
            "no components below the header: expected one row per component",
        ));
    }
    Ok(recipe)
}

fn read_row(
    raw: &[&[u8]],
    n: usize,
    cols: &Columns,
    decimal_comma: bool,
    recipe: &mut Recipe,
) -> Result<RecipeLine> {
    let cell = |i: usize| raw.get(i).copied().unwrap_or(b"");
    let number = |i: usize, expected: &str| {
        fields::number(fields::trim(cell(i)), decimal_comma)
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| Error::parse(n, i + 1, cell(i), expected))
    };
    let component = fields::text(cell(cols.component)).into_owned();
    if component.is_empty() {
        return Err(Error::parse(
            n,
            cols.component + 1,
            b"",
            "a component name (as in the library)",
        ));
    }
    let value = number(cols.concentration, "a concentration, a number ≥ 0")?;
    if value < 0.0 {
        return Err(Error::parse(
            n,
            cols.concentration + 1,
            cell(cols.concentration),
            "a concentration, a number ≥ 0",
        ));
    }
    let unit = ConcentrationUnit::parse(&fields::text(cell(cols.unit)))
        .ok_or_else(|| Error::parse(n, cols.unit + 1, cell(cols.unit), UNIT_EXPECTED))?;
    let optional = |i: Option<usize>,
                    check: fn(f64) -> std::result::Result<(), &'static str>,
                    expected: &str|
     -> Result<Option<f64>> {
        let Some(i) = i.filter(|&i| !fields::trim(cell(i)).is_empty()) else {
            return Ok(None);
        };
        let v = number(i, expected)?;
        check(v).map_err(|e| Error::parse(n, i + 1, cell(i), e))?;
        Ok(Some(v))
    };
    let tolerance_percent = optional(cols.tolerance, check_strength, STRENGTH_EXPECTED)?;
    if let Some(de) = optional(cols.delta_e, check_delta_e, DELTA_E_EXPECTED)? {
        match recipe.max_delta_e00 {
            Some(before) if (before - de).abs() > 0.0 => {
                return Err(Error::structure(
                    n,
                    format!(
                        "max_delta_e00 {de} differs from {before} on an earlier line: expected one colour tolerance for the blend"
                    ),
                ));
            }
            _ => recipe.max_delta_e00 = Some(de),
        }
    }
    Ok(RecipeLine {
        line: n,
        component,
        value,
        unit,
        tolerance_percent,
    })
}

impl Recipe {
    /// Resolve against the fitted references: every recipe component must be
    /// one of them; fitted components the recipe does not name get target 0.
    pub fn resolve(&self, name: &str, refs: &ReferenceSet, defaults: Tolerances) -> Result<Target> {
        let in_mol = self.in_mol_per_l(refs)?;
        let components = refs
            .components
            .iter()
            .map(|c| {
                let line = self
                    .lines
                    .iter()
                    .zip(&in_mol)
                    .find(|(l, _)| l.component == c.name);
                TargetComponent {
                    name: c.name.clone(),
                    concentration_mol_per_l: line.map_or(0.0, |(_, v)| *v),
                    tolerance_percent: line
                        .and_then(|(l, _)| l.tolerance_percent)
                        .unwrap_or(defaults.strength_percent),
                    molar_mass_g_per_mol: c.molar_mass_g_per_mol,
                }
            })
            .collect();
        Ok(Target {
            name: name.to_string(),
            components,
            max_delta_e00: self.max_delta_e00.unwrap_or(defaults.max_delta_e00),
        })
    }

    /// Each line's concentration in mol/L, in line order; an unknown
    /// component or a mass unit without a molar mass is an error naming the line.
    pub fn in_mol_per_l(&self, refs: &ReferenceSet) -> Result<Vec<f64>> {
        self.lines
            .iter()
            .map(|l| {
                let Some(c) = refs.components.iter().find(|c| c.name == l.component) else {
                    return Err(Error::structure(
                        l.line,
                        format!(
                            "component '{}' is not among the fitted references (expected one of: {})",
                            l.component,
                            refs.names().join(", ")
                        ),
                    ));
                };
                l.unit
                    .to_mol_per_l(l.value, c.molar_mass_g_per_mol)
                    .map_err(|e| Error::structure(l.line, e.to_string()))
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tolerance_and_colour_columns_are_optional() {
        let r = read(b"component,concentration,unit\nblue,5,umol/L\n").unwrap();
        assert_eq!(r.lines.len(), 1);
        assert_eq!(r.max_delta_e00, None);
        let r = read(b"component;concentration;unit;tolerance_percent;max_delta_e00\nblue;5,5;uM;3;1,5\nred;2;uM;;\n").unwrap();
        assert!((r.lines[0].value - 5.5).abs() < 1e-12);
        assert_eq!(r.lines[0].tolerance_percent, Some(3.0));
        assert_eq!(r.lines[1].tolerance_percent, None);
        assert_eq!(r.max_delta_e00, Some(1.5));
    }

    #[test]
    fn bad_lines_are_named() {
        let cases: [(&[u8], &str); 6] = [
            (
                b"component,concentration,unit\nblue,-1,uM\n",
                "line 2, column 2 ('-1')",
            ),
            (
                b"component,concentration,unit\nblue,lots,uM\n",
                "line 2, column 2 ('lots')",
            ),
            (
                b"component,concentration,unit\n# c\nblue,1,furlongs\n",
                "line 3, column 3 ('furlongs')",
            ),
            (
                b"component,concentration,unit,tolerance_percent\nblue,1,uM,150\n",
                "line 2, column 4 ('150')",
            ),
            (
                b"component,concentration,unit\nblue,1,uM\nblue,2,uM\n",
                "line 3: component 'blue' is listed twice",
            ),
            (b"component,amount\n", "no `concentration` column"),
        ];
        for (text, want) in cases {
            let e = read(text).unwrap_err().to_string();
            assert!(e.contains(want), "{e} lacks {want}");
        }
    }

    #[test]
    fn tolerances_out_of_range_are_refused() {
        assert!(Tolerances::new(0.0, 1.0).is_err());
        assert!(Tolerances::new(5.0, -1.0).is_err());
        assert!(Tolerances::new(5.0, 1.0).is_ok());
    }
}
