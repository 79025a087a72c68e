//! Input stage: spectra collected point by point, turned into blocks.
//!
//! In: samples as the readers of whole files find them (wavelength and raw
//! value per point, the cells left out, the first error). Out: the
//! [`Block`]s and [`RowFailure`]s of a [`SpectraFile`], with values converted
//! to absorbance once the file's quantity is decided. A sample with a few
//! missing readings keeps its other points (its own, shorter grid); more than
//! [`MAX_MISSING_SHARE`] missing fails it with the line and column of the
//! first.

use super::quantity::Quantity;
use super::spectra::{Block, RowFailure};
use crate::error::{Error, Result};
use crate::spectrum::{self, Grid};
use std::collections::HashMap;
use std::sync::Arc;

/// The largest share of a spectrum's readings that may be missing (empty,
/// `n/a`) before the sample fails: 10 % (common practice, no source).
pub const MAX_MISSING_SHARE: f64 = 0.10;

/// One sample as read, before conversion.
#[derive(Debug)]
pub struct RawSample {
    /// The sample name.
    pub id: String,
    /// Line where the sample starts (for messages about the whole sample).
    pub first_line: usize,
    /// `(wavelength in nm, value as in the file)`; `+inf` for saturated.
    pub points: Vec<(f64, f64)>,
    /// `(line, column)` of each reading left out (empty, `n/a`).
    pub missing: Vec<(usize, usize)>,
    /// Where each point is, `(line, column)`, for conversion errors.
    pub cells: Vec<(usize, usize)>,
    /// The first reading that could not be read, which fails the sample.
    pub error: Option<Error>,
}

impl RawSample {
    /// An empty sample starting at `first_line`.
    pub fn new(id: String, first_line: usize) -> Self {
        RawSample {
            id,
            first_line,
            points: Vec::new(),
            missing: Vec::new(),
            cells: Vec::new(),
            error: None,
        }
    }

    /// Record a point read from `(line, column)`.
    pub fn push(&mut self, wavelength_nm: f64, value: f64, at: (usize, usize)) {
        self.points.push((wavelength_nm, value));
        self.cells.push(at);
    }

    /// Record an error, keeping the first.
    pub fn fail(&mut self, error: Error) {
        if self.error.is_none() {
            self.error = Some(error);
        }
    }
}

/// What [`assemble`] hands back.
#[derive(Debug, Default)]
pub struct Assembled {
    /// Samples grouped by grid, in order of first appearance.
    pub blocks: Vec<Block>,
    /// Samples that failed.
    pub failures: Vec<RowFailure>,
    /// Notes on samples that lost points.
    pub warnings: Vec<String>,
}

/// Convert every sample to absorbance with `quantity` and group the samples
/// by grid. `first_position` is the position of the first sample in the
/// input's order of samples.
pub fn assemble(samples: Vec<RawSample>, quantity: Quantity, first_position: usize) -> Assembled {
    let mut out = Assembled::default();
    let mut groups: HashMap<Vec<u64>, usize> = HashMap::new();
    for (i, sample) in samples.into_iter().enumerate() {
        let position = first_position + i;
        let id = sample.id.clone();
        match finish(sample, quantity, &mut out.warnings) {
            Ok((grid, absorbance_au)) => {
                let key: Vec<u64> = grid.wavelengths_nm().iter().map(|w| w.to_bits()).collect();
                let b = *groups.entry(key).or_insert_with(|| {
                    out.blocks.push(Block {
                        grid: Arc::new(grid),
                        ids: Vec::new(),
                        positions: Vec::new(),
                        absorbance_au: Vec::new(),
                    });
                    out.blocks.len() - 1
                });
                let block = &mut out.blocks[b];
                block.ids.push(id);
                block.positions.push(position);
                block.absorbance_au.extend_from_slice(&absorbance_au);
            }
            Err(error) => out.failures.push(RowFailure {
                position,
                sample: id,
                error,
            }),
        }
    }
    out
}

/// One sample's grid and absorbances, or why it fails.
fn finish(
    s: RawSample,
    quantity: Quantity,
    warnings: &mut Vec<String>,
) -> Result<(Grid, Vec<f64>)> {
    if let Some(e) = s.error {
        return Err(e);
    }
    let total = s.points.len() + s.missing.len();
    if let Some(&(line, column)) = s.missing.first() {
        if s.missing.len() as f64 > MAX_MISSING_SHARE * total as f64 {
            return Err(Error::structure(
                line,
                format!(
                    "column {column}: {} of {total} readings of sample '{}' are missing (empty or n/a), more than {:.0} %: expected a reading at each wavelength",
                    s.missing.len(),
                    s.id,
                    MAX_MISSING_SHARE * 100.0
                ),
            ));
        }
        warnings.push(format!(
            "sample '{}': {} missing reading(s) (first at line {line}, column {column}) left out of its fit",
            s.id,
            s.missing.len()
        ));
    }
    let mut w = Vec::with_capacity(s.points.len());
    let mut a = Vec::with_capacity(s.points.len());
    for (&(nm, v), &(line, column)) in s.points.iter().zip(&s.cells) {
        let value = if v.is_infinite() {
            v
        } else {
            quantity.to_absorbance(v).map_err(|expected| {
                Error::parse(line, column, format!("{v}").as_bytes(), expected)
            })?
        };
        w.push(nm);
        a.push(value);
    }
    let (w, reversed) = spectrum::ascending(w);
    if reversed {
        a.reverse();
    }
    let grid = Grid::new(w)
        .map_err(|e| Error::structure(s.first_line, format!("sample '{}': {e}", s.id)))?;
    Ok((grid, a))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample(id: &str, n: usize, missing: usize) -> RawSample {
        let mut s = RawSample::new(id.into(), 1);
        for i in 0..n {
            if i < missing {
                s.missing.push((i + 2, 2));
            } else {
                s.push(400.0 + i as f64, 0.5, (i + 2, 2));
            }
        }
        s
    }

    #[test]
    fn a_few_missing_readings_leave_their_points_out_with_a_warning() {
        let out = assemble(
            vec![sample("a", 20, 2), sample("b", 20, 0)],
            Quantity::Absorbance,
            0,
        );
        assert!(out.failures.is_empty());
        assert_eq!(out.blocks.len(), 2, "the sample with gaps has its own grid");
        assert_eq!(out.blocks[0].grid.len(), 18);
        assert_eq!(out.warnings.len(), 1);
        assert!(
            out.warnings[0].contains("line 2, column 2"),
            "{}",
            out.warnings[0]
        );
    }

    #[test]
    fn more_than_a_tenth_missing_fails_the_sample_with_line_and_column() {
        let out = assemble(vec![sample("a", 20, 3)], Quantity::Absorbance, 4);
        assert_eq!(out.failures.len(), 1);
        assert_eq!(out.failures[0].position, 4);
        let e = out.failures[0].error.to_string();
        assert!(
            e.contains("line 2") && e.contains("column 2") && e.contains("3 of 20"),
            "{e}"
        );
    }

    #[test]
    fn values_are_converted_with_the_decided_quantity() {
        let mut s = RawSample::new("t".into(), 1);
        s.push(500.0, 10.0, (2, 2));
        s.push(400.0, 100.0, (3, 2));
        let out = assemble(vec![s], Quantity::TransmittancePercent, 0);
        let b = &out.blocks[0];
        // A = 2 − log10(%T): 100 %T → 0, 10 %T → 1 (Beer–Lambert, decadic).
        assert_eq!(b.grid.wavelengths_nm(), [400.0, 500.0]);
        assert!(b.row(0)[0].abs() < 1e-15 && (b.row(0)[1] - 1.0).abs() < 1e-15);
    }
}
