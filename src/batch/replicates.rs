//! Step 5 of a plate: replicates. Wells with the same role and sample name
//! are grouped; per component, Grubbs' test looks for one well that
//! disagrees with the rest, and mean, SD and CV% are computed over the wells
//! kept.

use super::stats;
use super::{
    BatchOptions, ComponentStats, FLAG_REPLICATE_OUTLIER, OUTLIER_MIN_STD_ERRORS, SampleSummary,
    WellResult,
};
use crate::input::platemap::Role;
use std::collections::HashMap;

/// Group fitted wells into replicates, flag outliers, compute statistics.
pub(super) fn replicates(wells: &mut [WellResult], options: &BatchOptions) -> Vec<SampleSummary> {
    let mut out = Vec::new();
    for (key, idx) in groups(wells) {
        let n_comp = wells[idx[0]].undiluted.len();
        let mut flagged: Vec<usize> = Vec::new();
        let per_comp_flags: Vec<Vec<usize>> = (0..n_comp)
            .map(|c| {
                flag_outlier(wells, &idx, c, options, &mut flagged)
                    .into_iter()
                    .collect()
            })
            .collect();
        flagged.sort();
        let in_stats: Vec<usize> = idx
            .iter()
            .copied()
            .filter(|i| options.keep_outliers || !flagged.contains(i))
            .collect();
        let components = (0..n_comp)
            .map(|c| component_stats(wells, &in_stats, c, &per_comp_flags[c], idx[0]))
            .collect();
        out.push(SampleSummary {
            sample: key.1,
            role: key.0,
            wells: idx.iter().map(|&i| wells[i].well.clone()).collect(),
            outlier_wells: flagged.iter().map(|&i| wells[i].well.clone()).collect(),
            outliers_kept: options.keep_outliers,
            components,
        });
    }
    out
}

/// The fitted sample and standard wells grouped by (role, sample), in the
/// order the groups first appear.
fn groups(wells: &[WellResult]) -> Vec<((Role, String), Vec<usize>)> {
    let mut order: Vec<(Role, String)> = Vec::new();
    let mut members: HashMap<(Role, String), Vec<usize>> = HashMap::new();
    for (i, w) in wells.iter().enumerate() {
        if w.fit.is_none() || !matches!(w.role, Role::Sample | Role::Standard) {
            continue;
        }
        let key = (w.role, w.sample.clone());
        if !members.contains_key(&key) {
            order.push(key.clone());
        }
        members.entry(key).or_default().push(i);
    }
    order
        .into_iter()
        .map(|key| {
            let idx = members.remove(&key).unwrap_or_default();
            (key, idx)
        })
        .collect()
}

/// Grubbs' test on component `c` of the replicate wells `idx`: the outlying
/// well, when it is also more than [`OUTLIER_MIN_STD_ERRORS`] of its own
/// standard errors from the others, gets a note (and the flag, once, added
/// to `flagged`).
fn flag_outlier(
    wells: &mut [WellResult],
    idx: &[usize],
    c: usize,
    options: &BatchOptions,
    flagged: &mut Vec<usize>,
) -> Option<usize> {
    let values: Vec<f64> = idx
        .iter()
        .map(|&i| wells[i].undiluted[c].concentration_mol_per_l)
        .collect();
    let g = stats::grubbs(&values, options.outlier_alpha).filter(|g| g.is_outlier())?;
    let i = idx[g.index];
    let others: Vec<f64> = values
        .iter()
        .enumerate()
        .filter(|(k, _)| *k != g.index)
        .map(|(_, v)| *v)
        .collect();
    let (others_mean, _) = stats::mean_sd(&others);
    let u = &wells[i].undiluted[c];
    let gap = (u.concentration_mol_per_l - others_mean).abs();
    // Without a standard error (no noise estimate) Grubbs' test decides alone.
    if u.std_error_mol_per_l
        .is_some_and(|se| gap <= OUTLIER_MIN_STD_ERRORS * se)
    {
        return None;
    }
    let note = format!(
        "disagrees with its {} replicate(s) in {} (Grubbs G = {:.3} > {:.3} at α = {}; {:.4e} vs {:.4e} mol/L){}",
        idx.len() - 1,
        u.name,
        g.g,
        g.critical,
        options.outlier_alpha,
        u.concentration_mol_per_l,
        others_mean,
        if options.keep_outliers {
            "; kept in the statistics (--keep-outliers)"
        } else {
            "; left out of the statistics"
        }
    );
    wells[i].notes.push(note);
    if !flagged.contains(&i) {
        flagged.push(i);
        wells[i].flags.push(FLAG_REPLICATE_OUTLIER.to_string());
    }
    Some(i)
}

/// Mean, SD and CV% of component `c` over the wells `in_stats`.
fn component_stats(
    wells: &[WellResult],
    in_stats: &[usize],
    c: usize,
    outliers: &[usize],
    first: usize,
) -> ComponentStats {
    let v: Vec<f64> = in_stats
        .iter()
        .map(|&i| wells[i].undiluted[c].concentration_mol_per_l)
        .collect();
    let (mean, sd) = stats::mean_sd(&v);
    let mg: Option<Vec<f64>> = in_stats
        .iter()
        .map(|&i| wells[i].undiluted[c].concentration_mg_per_l)
        .collect();
    let (mean_mg, sd_mg) = match mg {
        Some(m) if !m.is_empty() => {
            let (a, b) = stats::mean_sd(&m);
            (Some(a), b)
        }
        _ => (None, None),
    };
    ComponentStats {
        name: wells[first].undiluted[c].name.clone(),
        mean_mol_per_l: mean,
        sd_mol_per_l: sd,
        cv_percent: stats::cv_percent(mean, sd),
        n_wells: v.len(),
        mean_mg_per_l: mean_mg,
        sd_mg_per_l: sd_mg,
        outlier_wells: outliers.iter().map(|&i| wells[i].well.clone()).collect(),
    }
}
