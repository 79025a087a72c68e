//! Plate maps (input stage): what each well holds.
//!
//! In: a CSV with the header `well,role,sample,dilution,pathlength_cm`
//! (`well` and `role` required, the others optional, in any order; an
//! optional `plate` column makes a row apply to one plate only). Out: a
//! [`PlateMap`] that answers, for a plate and a well, the [`MapEntry`].
//!
//! - `role`: `blank`, `sample`, `standard` or `empty`.
//! - `sample`: the specimen's name; wells that share it are replicates.
//!   Empty: the well's own name (`B3`) for samples and standards.
//! - `dilution`: the dilution factor of the well's contents relative to
//!   the specimen (10 = diluted tenfold), ≥ 1 by convention, > 0 required;
//!   empty = 1.
//! - `pathlength_cm`: the well's optical pathlength in cm; empty = from
//!   `--pathlength-from-water` or `--pathlength-cm`.
//!
//! Rows with a `plate` value override rows without one for that plate.
//! Delimiter comma, semicolon or tab (detected from the header, decimal comma
//! read with semicolon or tab); `#` comment lines and blank lines are
//! skipped. Any error in the map is fatal: a wrong map gives wrong results
//! for every plate, so nothing is guessed.

use super::fields;
use super::plate::Well;
use crate::error::{Error, Result};
use std::collections::HashMap;

/// What a well holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// Solvent or buffer only: averaged and subtracted from the plate.
    Blank,
    /// A specimen to measure.
    Sample,
    /// A standard of known composition (fitted and reported like a sample).
    Standard,
    /// Nothing: not analysed.
    Empty,
}

impl Role {
    /// Name used in files.
    pub fn name(self) -> &'static str {
        match self {
            Role::Blank => "blank",
            Role::Sample => "sample",
            Role::Standard => "standard",
            Role::Empty => "empty",
        }
    }

    fn parse(s: &str) -> Option<Role> {
        match s.trim().to_ascii_lowercase().as_str() {
            "blank" => Some(Role::Blank),
            "sample" => Some(Role::Sample),
            "standard" => Some(Role::Standard),
            "empty" => Some(Role::Empty),
            _ => None,
        }
    }
}

/// One well's entry in the map.
#[derive(Debug, Clone, PartialEq)]
pub struct MapEntry {
    /// What the well holds.
    pub role: Role,
    /// The specimen's name (replicate wells share it).
    pub sample: String,
    /// Dilution factor (undiluted concentration = measured × factor).
    pub dilution: f64,
    /// Pathlength, cm, when the map gives it.
    pub pathlength_cm: Option<f64>,
    /// 1-based line of the entry in the map file.
    pub line: usize,
}

/// A plate map: entries for every plate, and per-plate entries.
#[derive(Debug, Clone, Default)]
pub struct PlateMap {
    /// Entries that apply to every plate.
    pub all: HashMap<Well, MapEntry>,
    /// Entries for one named plate.
    pub plates: HashMap<String, HashMap<Well, MapEntry>>,
}

impl PlateMap {
    /// The entries for a plate, or `None` when the map has none for it.
    pub fn for_plate(&self, plate: &str) -> Option<HashMap<Well, MapEntry>> {
        let own = self.plates.get(plate);
        if self.all.is_empty() && own.is_none() {
            return None;
        }
        let mut m = self.all.clone();
        if let Some(own) = own {
            m.extend(own.iter().map(|(w, e)| (*w, e.clone())));
        }
        Some(m)
    }

    /// Number of entries.
    pub fn len(&self) -> usize {
        self.all.len() + self.plates.values().map(HashMap::len).sum::<usize>()
    }

    /// Whether the map has no entries.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// Read a plate map from its bytes.
pub fn read(bytes: &[u8]) -> Result<PlateMap> {
    let bytes = fields::strip_bom(bytes);
    let mut lines = fields::lines(bytes);
    let Some((header_line, header_bytes, delimiter)) = fields::first_content_line(&mut lines)
    else {
        return Err(Error::Empty);
    };
    let delim = delimiter.byte();
    let columns = MapColumns::find(header_bytes, delim, header_line)?;
    let decimal_comma = delimiter.allows_decimal_comma();
    let mut map = PlateMap::default();
    let mut fields_buf = Vec::new();
    let mut first_rows: HashMap<(Option<String>, Well), usize> = HashMap::new();
    for (n, line) in lines {
        if fields::is_skippable(line, delim) {
            continue;
        }
        fields::split(line, delim, &mut fields_buf);
        let row = MapRow {
            line: n,
            cells: &fields_buf,
            decimal_comma,
        };
        let (plate, well, entry) = row.parse(&columns)?;
        if let Some(first) = first_rows.insert((plate.clone(), well), n) {
            return Err(Error::structure(
                n,
                format!(
                    "well {well}{} is already mapped on line {first}: each well once per plate",
                    plate
                        .as_deref()
                        .map(|p| format!(" of plate '{p}'"))
                        .unwrap_or_default()
                ),
            ));
        }
        match plate {
            Some(p) => {
                map.plates.entry(p).or_default().insert(well, entry);
            }
            None => {
                map.all.insert(well, entry);
            }
        }
    }
    if map.is_empty() {
        return Err(Error::structure(
            header_line,
            "the plate map has a header but no wells: expected rows such as `A1,blank`",
        ));
    }
    Ok(map)
}

/// Where each column of a plate map is (0-based).
struct MapColumns {
    well: usize,
    role: usize,
    sample: Option<usize>,
    dilution: Option<usize>,
    pathlength: Option<usize>,
    plate: Option<usize>,
}

impl MapColumns {
    /// Find the columns in the header line `header` (line `line`).
    fn find(header: &[u8], delim: u8, line: usize) -> Result<Self> {
        let mut raw = Vec::new();
        fields::split(header, delim, &mut raw);
        fields::trim_trailing_empty(&mut raw);
        let names: Vec<String> = raw
            .iter()
            .map(|f| fields::text(f).trim().to_ascii_lowercase())
            .collect();
        let find = |options: &[&str]| names.iter().position(|n| options.contains(&n.as_str()));
        let (Some(well), Some(role)) = (find(&["well"]), find(&["role"])) else {
            return Err(Error::structure(
                line,
                "plate map header: expected the columns `well,role` and optionally `sample,dilution,pathlength_cm,plate`",
            ));
        };
        if let Some(i) = find(&["pathlength", "pathlength_mm"]) {
            return Err(Error::parse(
                line,
                i + 1,
                names[i].as_bytes(),
                "`pathlength_cm` (the pathlength in cm)",
            ));
        }
        Ok(Self {
            well,
            role,
            sample: find(&["sample"]),
            dilution: find(&["dilution", "dilution_factor"]),
            pathlength: find(&["pathlength_cm"]),
            plate: find(&["plate"]),
        })
    }
}

/// The fields of one plate-map row, with its line number.
struct MapRow<'r, 'a> {
    line: usize,
    cells: &'r [&'a [u8]],
    decimal_comma: bool,
}

impl MapRow<'_, '_> {
    /// The trimmed text of column `c`; empty when absent.
    fn get(&self, c: Option<usize>) -> String {
        c.and_then(|c| self.cells.get(c))
            .map(|f| fields::text(f).trim().to_string())
            .unwrap_or_default()
    }

    /// A positive number in column `c`; `None` when empty.
    fn positive(&self, c: Option<usize>, what: &str) -> Result<Option<f64>> {
        let t = self.get(c);
        if t.is_empty() {
            return Ok(None);
        }
        match fields::number(t.as_bytes(), self.decimal_comma) {
            Ok(v) if v > 0.0 => Ok(Some(v)),
            _ => Err(Error::parse(
                self.line,
                c.map_or(0, |c| c + 1),
                t.as_bytes(),
                what,
            )),
        }
    }

    /// The row's plate (if named), well and entry.
    fn parse(&self, columns: &MapColumns) -> Result<(Option<String>, Well, MapEntry)> {
        let n = self.line;
        let well_text = self.get(Some(columns.well));
        let well = Well::parse(&well_text).ok_or_else(|| {
            Error::parse(
                n,
                columns.well + 1,
                well_text.as_bytes(),
                "a well such as A1 or P24",
            )
        })?;
        let role_text = self.get(Some(columns.role));
        let role = Role::parse(&role_text).ok_or_else(|| {
            Error::parse(
                n,
                columns.role + 1,
                role_text.as_bytes(),
                "a role: blank, sample, standard or empty",
            )
        })?;
        let dilution = self
            .positive(
                columns.dilution,
                "a dilution factor, a positive number (10 = diluted tenfold), or an empty cell for 1",
            )?
            .unwrap_or(1.0);
        let pathlength_cm = self.positive(
            columns.pathlength,
            "a pathlength in cm, a positive number, or an empty cell",
        )?;
        let sample = match self.get(columns.sample) {
            s if s.is_empty() && matches!(role, Role::Sample | Role::Standard) => well.to_string(),
            s => s,
        };
        let plate = Some(self.get(columns.plate)).filter(|p| !p.is_empty());
        let entry = MapEntry {
            role,
            sample,
            dilution,
            pathlength_cm,
            line: n,
        };
        Ok((plate, well, entry))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn w(s: &str) -> Well {
        Well::parse(s).unwrap()
    }

    #[test]
    fn map_with_optional_columns_is_read() {
        let m = read(
            b"well,role,sample,dilution,pathlength_cm\nA1,blank,,,\nA2,sample,lot-1,10,0.55\nA3,Sample,lot-1\n# note\n\nA4,empty\n",
        )
        .unwrap();
        let all = m.for_plate("any").unwrap();
        assert_eq!(all[&w("A1")].role, Role::Blank);
        assert_eq!(all[&w("A2")].sample, "lot-1");
        assert!((all[&w("A2")].dilution - 10.0).abs() < 1e-12);
        assert!((all[&w("A2")].pathlength_cm.unwrap() - 0.55).abs() < 1e-12);
        assert!((all[&w("A3")].dilution - 1.0).abs() < 1e-12);
        assert_eq!(all[&w("A4")].role, Role::Empty);
        assert_eq!(all[&w("A1")].sample, "");
    }

    #[test]
    fn plate_rows_override_rows_for_every_plate() {
        let m = read(b"plate;well;role;sample\n;A1;sample;x\nP2;A1;blank;\n").unwrap();
        assert_eq!(m.for_plate("P1").unwrap()[&w("A1")].role, Role::Sample);
        assert_eq!(m.for_plate("P2").unwrap()[&w("A1")].role, Role::Blank);
        let only = read(b"plate,well,role\nP2,A1,blank\n").unwrap();
        assert!(only.for_plate("P1").is_none());
    }

    #[test]
    fn bad_rows_name_line_and_column() {
        let e = read(b"well,role\nA1,blank\nZ9,sample\n").unwrap_err();
        assert_eq!(
            e.to_string(),
            "line 3, column 1 ('Z9'): expected a well such as A1 or P24"
        );
        let e = read(b"well,role\nA1,control\n").unwrap_err();
        assert!(e.to_string().contains("blank, sample, standard or empty"));
        let e = read(b"well,role,dilution\nA1,sample,-2\n").unwrap_err();
        assert!(e.to_string().starts_with("line 2, column 3 ('-2')"), "{e}");
        let e = read(b"well,role\nA1,blank\nA1,sample\n").unwrap_err();
        assert!(e.to_string().contains("already mapped on line 2"), "{e}");
        let e = read(b"well,sample\nA1,x\n").unwrap_err();
        assert!(e.to_string().contains("`well,role`"), "{e}");
    }
}
