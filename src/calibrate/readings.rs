//! The readings of a calibration and the tests on them: concentration
//! levels, the line at one wavelength, whether the top level bends away from
//! the line of the lower ones, lack of fit, and the band maximum.

use super::{LINEARITY_ALPHA, LineFit, REPLICATE_TOLERANCE};
use crate::error::{Error, Result};
use crate::reference::component::LackOfFit;
use crate::stats;

/// One standard or blank with its readings over the window.
pub(super) struct Reading<'a> {
    pub sample: &'a str,
    pub concentration_mol_per_l: f64,
    /// l·c, mol·L⁻¹·cm.
    pub x: f64,
    /// Raw absorbances over the window, AU.
    pub raw: &'a [f64],
    /// Blank-subtracted absorbances over the window, AU.
    pub y: Vec<f64>,
}

/// Concentration levels: indices into the readings, grouped by replicate,
/// ascending.
pub(super) fn levels(readings: &[Reading], active: &[bool]) -> Vec<Vec<usize>> {
    let mut idx: Vec<usize> = (0..readings.len()).filter(|&i| active[i]).collect();
    idx.sort_by(|&a, &b| readings[a].x.total_cmp(&readings[b].x));
    let mut out: Vec<Vec<usize>> = Vec::new();
    for i in idx {
        let x = readings[i].x;
        match out.last_mut() {
            Some(g) if (x - readings[g[0]].x).abs() <= REPLICATE_TOLERANCE * x.abs() => g.push(i),
            _ => out.push(vec![i]),
        }
    }
    out
}

pub(super) fn line_at(
    readings: &[Reading],
    members: impl Iterator<Item = usize>,
    j: usize,
) -> Option<LineFit> {
    let pts: Vec<(f64, f64)> = members.map(|i| (readings[i].x, readings[i].y[j])).collect();
    LineFit::new(&pts)
}

/// Relative deviation of the top level from the line through the lower ones
/// at wavelength j, when it counts as non-linear.
pub(super) fn bends(
    readings: &[Reading],
    lv: &[Vec<usize>],
    j: usize,
    tolerance: f64,
) -> Option<f64> {
    let (top, lower) = lv.split_last()?;
    let fit = line_at(readings, lower.iter().flatten().copied(), j)?;
    let x_top = readings[top[0]].x;
    let mean_top = top.iter().map(|&i| readings[i].y[j]).sum::<f64>() / top.len() as f64;
    let predicted = fit.predict(x_top);
    if predicted.is_nan() || predicted <= 0.0 {
        return None;
    }
    let deviation = mean_top - predicted;
    let relative = deviation / predicted;
    if relative.abs() <= tolerance {
        return None;
    }
    if let Some(se) = fit.prediction_std_error(x_top, top.len()) {
        let t = stats::t_two_sided_critical(LINEARITY_ALPHA, fit.df() as f64);
        if deviation.abs() <= t * se {
            return None;
        }
    }
    Some(relative)
}

/// Lack-of-fit F test at wavelength j.
pub(super) fn lack_of_fit(
    readings: &[Reading],
    lv: &[Vec<usize>],
    fit: &LineFit,
    j: usize,
) -> Option<LackOfFit> {
    let k = lv.len();
    let n = fit.n;
    if k < 3 || n <= k {
        return None;
    }
    let mut ss_pure = 0.0;
    for g in lv {
        let mean = g.iter().map(|&i| readings[i].y[j]).sum::<f64>() / g.len() as f64;
        ss_pure += g
            .iter()
            .map(|&i| (readings[i].y[j] - mean).powi(2))
            .sum::<f64>();
    }
    if ss_pure.is_nan() || ss_pure <= 0.0 {
        return None;
    }
    let ss_lack = (fit.sse - ss_pure).max(0.0);
    let (df_lack, df_pure) = (k - 2, n - k);
    let f = (ss_lack / df_lack as f64) / (ss_pure / df_pure as f64);
    Some(LackOfFit {
        f_statistic: f,
        df_lack_of_fit: df_lack,
        df_pure_error: df_pure,
        p_value: stats::f_sf(f, df_lack as f64, df_pure as f64),
    })
}

/// The wavelength of the largest slope among those whose blank stays below
/// the ceiling.
pub(super) fn band_maximum(
    readings: &[Reading],
    active: &[bool],
    blank_ok: &[bool],
    wavelengths_nm: &[f64],
) -> Result<usize> {
    let mut best: Option<(usize, f64)> = None;
    for (j, ok) in blank_ok.iter().enumerate() {
        if !ok {
            continue;
        }
        let members = (0..readings.len()).filter(|&i| active[i]);
        if let Some(fit) = line_at(readings, members, j)
            && fit.slope.is_finite()
            && best.is_none_or(|(_, s)| fit.slope > s)
        {
            best = Some((j, fit.slope));
        }
    }
    match best {
        Some((j, s)) if s > 0.0 => Ok(j),
        _ => Err(Error::Invalid(format!(
            "the standards' absorbance does not rise with concentration at any wavelength from {} to {} nm: check the concentrations, the sample names and that the blank is a blank",
            wavelengths_nm[0],
            wavelengths_nm[wavelengths_nm.len() - 1]
        ))),
    }
}
