//! Step 1 of a plate: the blank. The usable blank wells (no saturated
//! reading, not an outlier by Grubbs' test on their mean absorbance over the
//! fitted range) are averaged point by point.

use super::stats;
use super::{BatchOptions, BlankSummary, FLAG_BLANK_OUTLIER, FLAG_SATURATED, WellResult};
use crate::input::plate::{PlateSpectra, is_saturated};
use crate::input::platemap::{MapEntry, Role};
use std::collections::HashMap;
use std::ops::Range;

/// What the blank step reads.
pub(super) struct BlankInputs<'a> {
    /// The plate's spectra.
    pub spectra: &'a PlateSpectra,
    /// Wells to analyse: (index into the spectra, entry).
    pub used: &'a [(usize, MapEntry)],
    /// The fitted range, indices into the grid.
    pub range: Range<usize>,
    /// The batch's options.
    pub options: &'a BatchOptions,
}

/// Average the usable blank wells; fill the summary and the blank wells'
/// results. Returns the blank spectrum over the whole grid.
pub(super) fn blank(
    inputs: &BlankInputs,
    summary: &mut BlankSummary,
    results: &mut HashMap<usize, WellResult>,
) -> Option<Vec<f64>> {
    let candidates = blank_candidates(inputs, summary, results);
    let outlier = blank_outlier(inputs, &candidates, summary, results);
    let options = inputs.options;
    let chosen: Vec<usize> = candidates
        .iter()
        .map(|c| c.0)
        .filter(|i| options.keep_outliers || Some(*i) != outlier)
        .collect();
    if chosen.is_empty() {
        return None;
    }
    let spectra = inputs.spectra;
    summary.used = chosen
        .iter()
        .map(|i| spectra.wells[*i].to_string())
        .collect();
    let mut mean = vec![0.0; spectra.n_points()];
    for &i in &chosen {
        for (m, v) in mean.iter_mut().zip(spectra.row(i)) {
            *m += v;
        }
    }
    let k = chosen.len() as f64;
    mean.iter_mut().for_each(|m| *m /= k);
    let used_means: Vec<f64> = candidates
        .iter()
        .filter(|c| chosen.contains(&c.0))
        .map(|c| c.1)
        .collect();
    let range = inputs.range.clone();
    summary.mean_au = Some(mean[range.clone()].iter().sum::<f64>() / range.len().max(1) as f64);
    summary.well_sd_au = stats::mean_sd(&used_means).1;
    if chosen.len() >= 2 {
        summary.max_point_sd_au = Some(max_point_sd(spectra, &chosen, range));
    }
    Some(mean)
}

/// The blank wells without saturated readings, with their mean absorbance
/// over the fitted range; every blank well gets a result.
fn blank_candidates(
    inputs: &BlankInputs,
    summary: &mut BlankSummary,
    results: &mut HashMap<usize, WellResult>,
) -> Vec<(usize, f64)> {
    let range = inputs.range.clone();
    let mut candidates: Vec<(usize, f64)> = Vec::new();
    for (i, e) in inputs.used.iter().filter(|(_, e)| e.role == Role::Blank) {
        let label = inputs.spectra.wells[*i].to_string();
        summary.wells.push(label.clone());
        let row = inputs.spectra.row(*i);
        let mut r = WellResult::new(&label, e);
        if row.iter().any(|v| is_saturated(*v)) {
            r.flags.push(FLAG_SATURATED.to_string());
            r.notes
                .push("blank has saturated readings: not used in the plate's blank".into());
        } else {
            let mean = row[range.clone()].iter().sum::<f64>() / range.len().max(1) as f64;
            r.blank_mean_au = Some(mean);
            candidates.push((*i, mean));
        }
        results.insert(*i, r);
    }
    candidates
}

/// The blank well whose mean disagrees with the others (Grubbs' test), named
/// in the summary and flagged in its result.
fn blank_outlier(
    inputs: &BlankInputs,
    candidates: &[(usize, f64)],
    summary: &mut BlankSummary,
    results: &mut HashMap<usize, WellResult>,
) -> Option<usize> {
    let options = inputs.options;
    let means: Vec<f64> = candidates.iter().map(|c| c.1).collect();
    let g = stats::grubbs(&means, options.outlier_alpha).filter(|g| g.is_outlier())?;
    let (i, _) = candidates[g.index];
    summary.outliers.push(inputs.spectra.wells[i].to_string());
    if let Some(r) = results.get_mut(&i) {
        r.flags.push(FLAG_BLANK_OUTLIER.to_string());
        r.notes.push(format!(
            "mean absorbance disagrees with the other blanks (Grubbs G = {:.3} > {:.3} at α = {}){}",
            g.g,
            g.critical,
            options.outlier_alpha,
            if options.keep_outliers {
                "; kept in the blank (--keep-outliers)"
            } else {
                "; left out of the blank"
            }
        ));
    }
    Some(i)
}

/// The largest standard deviation between the chosen blank wells at any
/// point of the fitted range, AU.
fn max_point_sd(spectra: &PlateSpectra, chosen: &[usize], range: Range<usize>) -> f64 {
    let mut max_sd = 0.0f64;
    let mut col = Vec::with_capacity(chosen.len());
    for j in range {
        col.clear();
        col.extend(chosen.iter().map(|&i| spectra.row(i)[j]));
        if let Some(sd) = stats::mean_sd(&col).1 {
            max_sd = max_sd.max(sd);
        }
    }
    max_sd
}
