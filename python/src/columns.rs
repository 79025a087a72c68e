//! Outcomes → the tidy table's columns, as flat vectors for numpy and Arrow.
//!
//! The columns and their meaning are those of the tidy CSV
//! (`unblend::output::CSV_HEADER`): one row per sample and component, a
//! failed sample one row with only `sample` and `error`. An absent number
//! (an empty CSV field) is NaN here, an absent count −1 and an absent text
//! −1 in its index column; the Python side turns these into nulls. Text
//! columns are dictionary-encoded (a run has few distinct flags, solvers
//! and errors), so no Python string is made per row.

use std::collections::HashMap;
use unblend::fit::{ComponentResult, Outcome, SampleResult};

/// Per-component number columns, in CSV order.
pub const COMPONENT_FLOATS: [&str; 6] = [
    "concentration_mol_per_l",
    "std_error_mol_per_l",
    "concentration_mg_per_l",
    "std_error_mg_per_l",
    "mole_fraction",
    "mass_fraction",
];

/// Per-sample number columns (repeated on each component row), CSV order.
pub const SAMPLE_FLOATS: [&str; 18] = [
    "baseline_offset_au",
    "baseline_slope_au_per_nm",
    "residual_rms_au",
    "r_squared",
    "range_low_nm",
    "range_high_nm",
    "pathlength_cm",
    "noise_au",
    "reduced_chi_squared",
    "durbin_watson",
    "alarm_p_value",
    "band_centre_nm",
    "band_fwhm_nm",
    "band_peak_au",
    "band_signal_fraction",
    "screen_concentration_mol_per_l",
    "screen_p_value",
    // Per component, like the first six: the concentration refitted beside
    // the candidate that explains the residual (empty otherwise).
    "refitted_mol_per_l",
];

/// Count columns (−1 where the CSV field is empty).
pub const COUNTS: [&str; 2] = ["n_points", "n_masked"];

/// Text columns, dictionary-encoded.
pub const TEXTS: [&str; 5] = ["solver", "flags", "error", "screen_candidate", "answer"];

/// One text column: an index per row (−1: absent) into its distinct values.
#[derive(Default)]
pub struct Interned {
    /// Index of each row's value in `values`, −1 for none.
    pub index: Vec<i32>,
    /// Distinct values in order of first use.
    pub values: Vec<String>,
    lookup: HashMap<String, i32>,
    last: Option<(String, i32)>,
}

impl Interned {
    /// The index of `value`, added on first use. Fewer distinct values than
    /// rows, and rows fit in i32 (checked by the caller, `crate::fit_table`).
    fn id(&mut self, value: &str) -> i32 {
        // Runs of one value (the solver, no flags) skip the hash.
        if let Some((last, i)) = &self.last
            && last.as_str() == value
        {
            return *i;
        }
        if let Some(&i) = self.lookup.get(value) {
            self.last = Some((value.to_string(), i));
            return i;
        }
        let i = self.values.len() as i32;
        self.values.push(value.to_string());
        self.lookup.insert(value.to_string(), i);
        i
    }

    fn push(&mut self, value: Option<&str>) {
        let i = value.map_or(-1, |v| self.id(v));
        self.index.push(i);
    }

    fn append(&mut self, other: Interned) {
        let map: Vec<i32> = other.values.iter().map(|v| self.id(v)).collect();
        self.index.extend(
            other
                .index
                .iter()
                .map(|&i| if i < 0 { -1 } else { map[i as usize] }),
        );
    }
}

/// The tidy table of some outcomes, column by column.
#[derive(Default)]
pub struct Columns {
    /// Row of the input each table row belongs to.
    pub sample: Vec<i64>,
    /// Component index in the reference set (−1 on a failed sample's row).
    pub component: Vec<i32>,
    /// [`COMPONENT_FLOATS`] then [`SAMPLE_FLOATS`], NaN where absent.
    pub floats: Vec<Vec<f64>>,
    /// [`COUNTS`], −1 where absent.
    pub counts: Vec<Vec<i64>>,
    /// [`TEXTS`].
    pub texts: Vec<Interned>,
}

impl Columns {
    /// The columns of `outcomes`, whose first is input row `first_row`.
    pub fn from_outcomes(outcomes: &[Outcome], first_row: usize) -> Self {
        let rows: usize = outcomes
            .iter()
            .map(|o| match o {
                Outcome::Fitted(s) => s.components.len(),
                Outcome::Failed(_) => 1,
            })
            .sum();
        let mut c = Columns::with_capacity(rows);
        for (k, o) in outcomes.iter().enumerate() {
            let row = (first_row + k) as i64;
            match o {
                Outcome::Fitted(s) => c.push_fitted(row, s),
                Outcome::Failed(f) => c.push_row(row, -1, &[None; 24], [None; 2], |t| {
                    t[2] = Some(&f.error);
                }),
            }
        }
        c
    }

    fn push_fitted(&mut self, row: i64, s: &SampleResult) {
        let per_sample = sample_values(s);
        let flags = s.flags.join(" ");
        let counts = [
            Some(s.n_points as i64),
            Some(s.masking.as_ref().map_or(0, |m| m.n_masked) as i64),
        ];
        let best = s.screening.as_ref().and_then(|x| x.best.as_ref());
        for (j, comp) in s.components.iter().enumerate() {
            let mut values = [None; 24];
            values[..6].copy_from_slice(&component_values(comp));
            values[6..23].copy_from_slice(&per_sample);
            values[23] = unblend::output::notes::refitted_mol_per_l(s, &comp.name);
            self.push_row(row, j as i32, &values, counts, |t| {
                t[0] = Some(&s.solver);
                t[1] = (!flags.is_empty()).then_some(flags.as_str());
                t[3] = best.map(|b| b.name.as_str());
                t[4] = Some(unblend::output::notes::answer(s));
            });
        }
    }

    fn push_row<'a>(
        &mut self,
        row: i64,
        component: i32,
        values: &[Option<f64>; 24],
        counts: [Option<i64>; 2],
        texts: impl FnOnce(&mut [Option<&'a str>; 5]),
    ) {
        self.sample.push(row);
        self.component.push(component);
        for (col, v) in self.floats.iter_mut().zip(values) {
            // Non-finite numbers are empty in the CSV too.
            col.push(v.filter(|x| x.is_finite()).unwrap_or(f64::NAN));
        }
        for (col, v) in self.counts.iter_mut().zip(counts) {
            col.push(v.unwrap_or(-1));
        }
        let mut t = [None; 5];
        texts(&mut t);
        for (col, v) in self.texts.iter_mut().zip(t) {
            col.push(v);
        }
    }

    /// Empty columns with room for `rows` rows.
    pub fn with_capacity(rows: usize) -> Self {
        let n_floats = COMPONENT_FLOATS.len() + SAMPLE_FLOATS.len();
        Columns {
            sample: Vec::with_capacity(rows),
            component: Vec::with_capacity(rows),
            floats: (0..n_floats).map(|_| Vec::with_capacity(rows)).collect(),
            counts: (0..COUNTS.len())
                .map(|_| Vec::with_capacity(rows))
                .collect(),
            texts: (0..TEXTS.len())
                .map(|_| Interned {
                    index: Vec::with_capacity(rows),
                    ..Interned::default()
                })
                .collect(),
        }
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.sample.len()
    }

    /// The pieces' rows one after another (one allocation per column).
    pub fn concat(pieces: Vec<Columns>) -> Columns {
        let mut all = Columns::with_capacity(pieces.iter().map(Columns::len).sum());
        for piece in pieces {
            all.append(piece);
        }
        all
    }

    /// Append another piece's rows after these.
    pub fn append(&mut self, other: Columns) {
        self.sample.extend(other.sample);
        self.component.extend(other.component);
        for (a, b) in self.floats.iter_mut().zip(other.floats) {
            a.extend(b);
        }
        for (a, b) in self.counts.iter_mut().zip(other.counts) {
            a.extend(b);
        }
        for (a, b) in self.texts.iter_mut().zip(other.texts) {
            a.append(b);
        }
    }
}

fn component_values(c: &ComponentResult) -> [Option<f64>; 6] {
    [
        Some(c.concentration_mol_per_l),
        c.std_error_mol_per_l,
        c.concentration_mg_per_l,
        c.std_error_mg_per_l,
        c.mole_fraction,
        c.mass_fraction,
    ]
}

fn sample_values(s: &SampleResult) -> [Option<f64>; 17] {
    let best = s.screening.as_ref().and_then(|x| x.best.as_ref());
    let checks = unblend::output::notes::check_numbers(s);
    let mut v = [None; 17];
    v[..7].copy_from_slice(&[
        s.baseline.offset_au,
        s.baseline.slope_au_per_nm,
        Some(s.residual_rms),
        s.r_squared,
        Some(s.range_nm[0]),
        Some(s.range_nm[1]),
        Some(s.pathlength_cm),
    ]);
    v[7..15].copy_from_slice(&checks);
    v[15] = best.map(|b| b.concentration_mol_per_l);
    v[16] = best.map(|b| b.p_value);
    v
}
