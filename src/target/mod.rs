//! Lot QC against a target recipe (diagnostics, after the fit): strength,
//! colour of the solution, and the correction to make.
//!
//! In: a fitted [`SampleResult`], the sample's measured spectrum when there
//! is one, the [`ReferenceSet`] it was fitted with and a [`Target`]. Out: a
//! [`Qc`] — per component the strength (measured / target × 100 %), pass or
//! fail with reasons, the colour of the solution (CIELAB, [`crate::colour`])
//! and its ΔE00 to the target's colour, and the [`Correction`].
//!
//! The colour is computed from the measured spectrum when it covers
//! 380–780 nm, else from the fitted model
//!
//! ```text
//! A(λ) = l·Σ εᵢ(λ)·cᵢ + baseline(λ)
//! ```
//!
//! where the references cover that range, else it is not given (with the
//! reason). Either is scaled by Beer–Lambert to the pathlength the colour is
//! shown at (and by the sample's dilution). The target's colour is
//! l·Σ εᵢ(λ)·tᵢ through the same references, without baseline.

pub mod correction;
pub mod recipe;

use crate::colour::{self, Colour, Illuminant, Lab, Observer, Sampled};
use crate::fit::{FitReport, Outcome, SampleResult};
use crate::input::spectra::SpectraFile;
use crate::preprocess::interpolate;
use crate::reference::ReferenceSet;
pub use correction::{Correction, Level};
pub use recipe::{Recipe, Target, TargetComponent, Tolerances};
use serde::{Deserialize, Serialize};

/// How the colour is computed and shown.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ColourOptions {
    /// Illuminant (default D65).
    pub illuminant: Illuminant,
    /// Observer (default CIE 1931 2°).
    pub observer: Observer,
    /// Pathlength the colour is shown at, cm; `None`: the measurement's.
    pub pathlength_cm: Option<f64>,
}

/// What a QC run needs besides the sample.
#[derive(Debug, Clone)]
pub struct QcContext<'a> {
    /// The references the samples were fitted with.
    pub refs: &'a ReferenceSet,
    /// The target, if any.
    pub target: Option<&'a Target>,
    /// Colour options; `None`: no colour.
    pub colour: Option<ColourOptions>,
    /// Stock concentration per reference component, mol/L (`None` where
    /// additions are taken as of negligible volume).
    pub stock_mol_per_l: &'a [Option<f64>],
    /// The batch's volume, L, for whole-batch amounts.
    pub batch_volume_l: Option<f64>,
}

/// One sample as QC sees it.
#[derive(Debug, Clone, Copy)]
pub struct SampleView<'a> {
    /// The fit (concentrations of the specimen, dilution applied).
    pub result: &'a SampleResult,
    /// Measured wavelengths (nm) and absorbances (AU), when at hand.
    pub measured: Option<(&'a [f64], &'a [f64])>,
    /// Dilution of the measured solution relative to the specimen (≥ 1).
    pub dilution: f64,
}

/// A colour as written in outputs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ColourOf {
    /// CIELAB, C*ab and hab.
    #[serde(flatten)]
    pub lab: Lab,
    /// 8-bit sRGB for a swatch, `#rrggbb` (D65 / 2°; screens differ).
    pub srgb: String,
    /// ΔE00 to the target's colour.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub delta_e00: Option<f64>,
}

impl ColourOf {
    fn new(c: &Colour, target: Option<&Colour>) -> Self {
        ColourOf {
            lab: c.lab,
            srgb: colour::hex(c.srgb),
            delta_e00: target.map(|t| colour::delta_e00(&c.lab, &t.lab)),
        }
    }
}

/// The colour of a sample's solution.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SampleColour {
    /// `D65`, `D50` or `A`.
    pub illuminant: String,
    /// `2` or `10` (degrees).
    pub observer: String,
    /// Pathlength the colour is shown at, cm.
    pub pathlength_cm: f64,
    /// `measured` or `model`.
    pub source: String,
    /// The sample's colour (with ΔE00 to the target's when there is one).
    #[serde(flatten)]
    pub colour: ColourOf,
    /// The target's colour, through the same references.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub target: Option<ColourOf>,
}

/// One component's strength against the target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Strength {
    /// Component name.
    pub name: String,
    /// Target, mol/L (0 when the recipe does not name it).
    pub target_mol_per_l: f64,
    /// Measured, mol/L.
    pub measured_mol_per_l: f64,
    /// Measured / target × 100 %; absent when the target is 0.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub strength_percent: Option<f64>,
    /// Share of the blend over its share in the recipe, minus 100 %.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub ratio_deviation_percent: Option<f64>,
    /// Strength tolerance, ± percent.
    pub tolerance_percent: f64,
}

/// Pass or fail against the target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TargetCheck {
    /// The target's name.
    pub name: String,
    /// Whether every strength and the colour are within tolerance.
    pub pass: bool,
    /// Why it failed (empty when it passed).
    pub reasons: Vec<String>,
    /// The blend's ratio deviation: the largest |ratio deviation|, percent.
    pub ratio_deviation_percent: f64,
    /// Colour tolerance, ΔE00.
    pub max_delta_e00: f64,
    /// Per component, in reference order.
    pub components: Vec<Strength>,
}

/// Everything QC says about one sample; each part absent when not asked.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Qc {
    /// Strength, pass/fail.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub target: Option<TargetCheck>,
    /// Colour of the solution.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub colour: Option<SampleColour>,
    /// Why the colour is not given.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub colour_note: Option<String>,
    /// The correction onto the target.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub correction: Option<Correction>,
}

/// QC of one fitted sample.
pub fn check_sample(ctx: &QcContext, sample: SampleView) -> Qc {
    let mut qc = Qc::default();
    let concentrations: Vec<f64> = concentrations(ctx.refs, sample.result);
    let shown_cm = ctx
        .colour
        .and_then(|c| c.pathlength_cm)
        .unwrap_or(sample.result.pathlength_cm);
    let colours = ctx.colour.map(|options| {
        let target = ctx.target.and_then(|t| {
            let c: Vec<f64> = t
                .components
                .iter()
                .map(|c| c.concentration_mol_per_l)
                .collect();
            model_colour(ctx.refs, &c, None, shown_cm, options).ok()
        });
        (
            options,
            sample_colour(ctx.refs, sample, shown_cm, options),
            target,
        )
    });
    if let Some((options, measured, target)) = &colours {
        match measured {
            Ok((c, source)) => {
                qc.colour = Some(SampleColour {
                    illuminant: options.illuminant.label().into(),
                    observer: options.observer.label().into(),
                    pathlength_cm: shown_cm,
                    source: (*source).into(),
                    colour: ColourOf::new(c, target.as_ref()),
                    target: target.as_ref().map(|t| ColourOf::new(t, None)),
                })
            }
            Err(why) => qc.colour_note = Some(why.clone()),
        }
    }
    let Some(target) = ctx.target else {
        return qc;
    };
    let delta_e = qc.colour.as_ref().and_then(|c| c.colour.delta_e00);
    qc.target = Some(strengths(target, &concentrations, delta_e));
    qc.correction = correct(ctx, target, &concentrations).map(|mut c| {
        if let Some((options, _, Some(t))) = &colours {
            let corrected: Vec<f64> = c.components.iter().map(|a| a.corrected_mol_per_l).collect();
            let baseline = Some((&sample.result.baseline, baseline_scale(sample, shown_cm)));
            c.predicted_colour = model_colour(ctx.refs, &corrected, baseline, shown_cm, *options)
                .ok()
                .map(|p| ColourOf::new(&p, Some(t)));
        }
        c
    });
    qc
}

/// The sample's concentrations in reference order (0 where it has none).
fn concentrations(refs: &ReferenceSet, result: &SampleResult) -> Vec<f64> {
    refs.components
        .iter()
        .map(|c| {
            result
                .components
                .iter()
                .find(|r| *r.name == *c.name)
                .map_or(0.0, |r| r.concentration_mol_per_l)
        })
        .collect()
}

/// Strengths, ratio deviations and the verdict.
fn strengths(target: &Target, measured: &[f64], delta_e00: Option<f64>) -> TargetCheck {
    let target_total: f64 = target
        .components
        .iter()
        .map(|c| c.concentration_mol_per_l)
        .sum();
    let measured_total: f64 = measured.iter().sum();
    let mut reasons = Vec::new();
    let mut components = Vec::new();
    for (t, &m) in target.components.iter().zip(measured) {
        let goal = t.concentration_mol_per_l;
        let strength = (goal > 0.0).then(|| m / goal * 100.0);
        let ratio = (goal > 0.0 && measured_total > 0.0)
            .then(|| (m / measured_total) / (goal / target_total) * 100.0 - 100.0);
        match strength {
            Some(s) if (s - 100.0).abs() > t.tolerance_percent => reasons.push(format!(
                "{} strength {s:.1} % is outside {:.1}–{:.1} %",
                t.name,
                100.0 - t.tolerance_percent,
                100.0 + t.tolerance_percent
            )),
            None if target_total > 0.0 && m / target_total * 100.0 > t.tolerance_percent => {
                reasons.push(format!(
                    "{} is not in the recipe but makes {:.1} % of the recipe's total (tolerance {:.1} %)",
                    t.name,
                    m / target_total * 100.0,
                    t.tolerance_percent
                ))
            }
            _ => {}
        }
        components.push(Strength {
            name: t.name.clone(),
            target_mol_per_l: goal,
            measured_mol_per_l: m,
            strength_percent: strength,
            ratio_deviation_percent: ratio,
            tolerance_percent: t.tolerance_percent,
        });
    }
    if let Some(de) = delta_e00.filter(|de| *de > target.max_delta_e00) {
        reasons.push(format!(
            "ΔE00 {de:.2} to the target's colour is above {:.2}",
            target.max_delta_e00
        ));
    }
    let ratio_deviation_percent = components
        .iter()
        .filter_map(|c| c.ratio_deviation_percent)
        .fold(0.0, |a: f64, r| a.max(r.abs()));
    TargetCheck {
        name: target.name.clone(),
        pass: reasons.is_empty(),
        reasons,
        ratio_deviation_percent,
        max_delta_e00: target.max_delta_e00,
        components,
    }
}

fn correct(ctx: &QcContext, target: &Target, measured: &[f64]) -> Option<Correction> {
    let levels: Vec<Level> = target
        .components
        .iter()
        .zip(measured)
        .enumerate()
        .map(|(i, (t, &m))| Level {
            name: t.name.clone(),
            lot_mol_per_l: m,
            target_mol_per_l: t.concentration_mol_per_l,
            molar_mass_g_per_mol: t.molar_mass_g_per_mol,
            stock_mol_per_l: ctx.stock_mol_per_l.get(i).copied().flatten(),
        })
        .collect();
    let mut c = correction::correct(&levels)?;
    if let Some(v) = ctx.batch_volume_l {
        c.for_batch(v);
    }
    Some(c)
}

/// The sample's colour from its measured spectrum, else from the model.
fn sample_colour(
    refs: &ReferenceSet,
    sample: SampleView,
    shown_cm: f64,
    options: ColourOptions,
) -> Result<(Colour, &'static str), String> {
    let scale = baseline_scale(sample, shown_cm);
    let measured = match sample.measured {
        Some((w, a)) => {
            match Sampled::from_fn(|nm| interpolate(w, a, nm).filter(|v| v.is_finite())) {
                Ok(s) => return evaluate(&s.scaled(scale), options).map(|c| (c, "measured")),
                Err(e) => format!("measured: {e}"),
            }
        }
        None => "no measured spectrum at hand".into(),
    };
    let c: Vec<f64> = concentrations(refs, sample.result);
    model_colour(
        refs,
        &c,
        Some((&sample.result.baseline, scale)),
        shown_cm,
        options,
    )
    .map(|c| (c, "model"))
    .map_err(|e| format!("colour not given: {measured}; model: {e}"))
}

/// Beer–Lambert factor from the measured cell to the colour shown: the
/// pathlength ratio times the dilution of the measured solution.
fn baseline_scale(sample: SampleView, shown_cm: f64) -> f64 {
    shown_cm / sample.result.pathlength_cm * sample.dilution
}

/// The colour of l·Σ εᵢ(λ)·cᵢ at l = `shown_cm`, plus the measured
/// baseline times its scale (shown over measured pathlength, times dilution).
fn model_colour(
    refs: &ReferenceSet,
    concentrations_mol_per_l: &[f64],
    baseline: Option<(&crate::fit::BaselineResult, f64)>,
    shown_cm: f64,
    options: ColourOptions,
) -> Result<Colour, String> {
    let absorbance = |nm: f64| {
        let mut a = 0.0;
        for (c, conc) in refs.components.iter().zip(concentrations_mol_per_l) {
            a += c.epsilon_at(nm)? * conc * shown_cm;
        }
        if let Some((b, scale)) = baseline {
            let offset = b.offset_au.unwrap_or(0.0);
            let slope = b.slope_au_per_nm.unwrap_or(0.0);
            a += (offset + slope * (nm - b.reference_nm)) * scale;
        }
        Some(a)
    };
    let s = Sampled::from_fn(absorbance).map_err(|e| format!("the references: {e}"))?;
    evaluate(&s, options)
}

fn evaluate(s: &Sampled, options: ColourOptions) -> Result<Colour, String> {
    colour::colour_of(s, options.illuminant, options.observer).map_err(|e| e.to_string())
}

/// Read the flattened QC keys of a sample: `None` when it has none.
pub fn qc_or_none<'de, D: serde::Deserializer<'de>>(d: D) -> Result<Option<Box<Qc>>, D::Error> {
    let qc = Qc::deserialize(d)?;
    Ok((qc != Qc::default()).then(|| Box::new(qc)))
}

/// QC of every fitted sample of a spectra file, attached to its result;
/// the measured spectrum is the file's row (no dilution). `context_for`
/// gives the context for a sample name (`None`: no QC for that sample).
pub fn apply_to_file<'a>(
    file: &SpectraFile,
    report: &mut FitReport,
    context_for: impl Fn(&str) -> Option<QcContext<'a>>,
) {
    for block in &file.blocks {
        let w = block.grid.wavelengths_nm();
        for (i, pos) in block.positions.iter().enumerate() {
            let Some(Outcome::Fitted(r)) = report.outcomes.get_mut(*pos) else {
                continue;
            };
            let Some(ctx) = context_for(&r.sample) else {
                continue;
            };
            let view = SampleView {
                result: r,
                measured: Some((w, block.row(i))),
                dilution: 1.0,
            };
            let qc = check_sample(&ctx, view);
            r.qc = (qc != Qc::default()).then(|| Box::new(qc));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn target(concentrations: &[f64]) -> Target {
        Target {
            name: "t".into(),
            components: concentrations
                .iter()
                .enumerate()
                .map(|(i, c)| TargetComponent {
                    name: format!("dye-{i}"),
                    concentration_mol_per_l: *c,
                    tolerance_percent: 5.0,
                    molar_mass_g_per_mol: None,
                })
                .collect(),
            max_delta_e00: 1.0,
        }
    }

    #[test]
    fn strength_is_measured_over_target_in_percent() {
        let check = strengths(&target(&[10e-6, 5e-6]), &[10.4e-6, 5.6e-6], Some(0.5));
        let s: Vec<f64> = check
            .components
            .iter()
            .map(|c| c.strength_percent.unwrap())
            .collect();
        assert!((s[0] - 104.0).abs() < 1e-9 && (s[1] - 112.0).abs() < 1e-9);
        assert!(!check.pass);
        assert_eq!(
            check.reasons,
            ["dye-1 strength 112.0 % is outside 95.0–105.0 %"]
        );
    }

    #[test]
    fn component_absent_from_the_recipe_has_target_zero_and_fails_above_tolerance() {
        let check = strengths(&target(&[10e-6, 0.0]), &[10e-6, 1e-6], None);
        assert!((check.components[1].target_mol_per_l).abs() < f64::MIN_POSITIVE);
        assert_eq!(check.components[1].strength_percent, None);
        assert!(check.reasons[0].starts_with("dye-1 is not in the recipe but makes 10.0 %"));
        let trace = strengths(&target(&[10e-6, 0.0]), &[10e-6, 1e-7], None);
        assert!(trace.pass, "1 % of the recipe is within 5 %");
    }

    #[test]
    fn colour_beyond_tolerance_fails() {
        let check = strengths(&target(&[10e-6]), &[10e-6], Some(1.2));
        assert!(!check.pass);
        assert!(check.reasons[0].starts_with("ΔE00 1.20"));
    }
}
