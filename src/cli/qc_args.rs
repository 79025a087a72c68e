//! Flags for lot QC against a target recipe and for the colour of the
//! solution, shared by `fit` and `batch`.

use super::Failure;
use crate::colour::{Illuminant, Observer};
use crate::reference::ReferenceSet;
use crate::target::{ColourOptions, QcContext, Target, Tolerances, recipe};
use std::path::{Path, PathBuf};

/// Target recipe, tolerances, colour and correction.
#[derive(Debug, Clone, clap::Args)]
pub struct QcArgs {
    /// Target recipe: CSV `component,concentration,unit` (optional columns `tolerance_percent`, `max_delta_e00`); gives each sample's strength, pass/fail, colour and correction.
    #[arg(long, value_name = "FILE")]
    pub target: Option<PathBuf>,
    /// Strength tolerance, ± percent of the target, for components the target file gives none.
    #[arg(long, default_value_t = 5.0, value_name = "PERCENT")]
    pub strength_tolerance_percent: f64,
    /// Colour tolerance against the target's colour, CIEDE2000 (ΔE00), when the target file gives none.
    #[arg(long, default_value_t = 1.0, value_name = "DELTA_E00")]
    pub max_delta_e: f64,
    /// Give the colour of each solution (CIELAB) even without a target.
    #[arg(long)]
    pub colour: bool,
    /// CIE standard observer for the colour, degrees.
    #[arg(long, default_value = "2", value_parser = parse_observer, value_name = "2|10")]
    pub observer: Observer,
    /// CIE illuminant for the colour.
    #[arg(long, default_value = "D65", value_parser = parse_illuminant, value_name = "D65|D50|A")]
    pub illuminant: Illuminant,
    /// Pathlength the colour is shown at, cm (what the customer sees through) [default: the measurement's].
    #[arg(long, value_parser = super::common::parse_positive, value_name = "CM")]
    pub colour_pathlength_cm: Option<f64>,
    /// Volume of the lot, L: the correction's amounts for the whole batch.
    #[arg(long, value_parser = super::common::parse_positive, value_name = "L", requires = "target")]
    pub batch_volume_l: Option<f64>,
    /// Stock solutions the dyes are added from, CSV `component,concentration,unit`: the correction counts the volume they add [default: additions of negligible volume].
    #[arg(long, value_name = "FILE", requires = "target")]
    pub stock: Option<PathBuf>,
    /// Also write the QC results as CSV to FILE (one row per sample and component: strength, pass, colour, correction).
    #[arg(long, value_name = "FILE")]
    pub qc_csv: Option<PathBuf>,
}

/// The QC a run does, loaded from the flags' files.
#[derive(Debug, Clone)]
pub struct QcSetup {
    /// The target, if given.
    pub target: Option<Target>,
    /// Colour options, if the colour is wanted.
    pub colour: Option<ColourOptions>,
    /// Stock concentration per reference component, mol/L.
    pub stock_mol_per_l: Vec<Option<f64>>,
    /// The batch's volume, L.
    pub batch_volume_l: Option<f64>,
}

impl QcSetup {
    /// The engine's view of this setup.
    pub fn context<'a>(&'a self, refs: &'a ReferenceSet) -> QcContext<'a> {
        QcContext {
            refs,
            target: self.target.as_ref(),
            colour: self.colour,
            stock_mol_per_l: &self.stock_mol_per_l,
            batch_volume_l: self.batch_volume_l,
        }
    }
}

impl QcArgs {
    /// Whether any QC was asked for.
    pub fn active(&self) -> bool {
        self.target.is_some() || self.colour || self.qc_csv.is_some()
    }

    /// The QC flags for the report's summary (nothing when QC is off).
    pub fn run_info(&self) -> Vec<[String; 2]> {
        if !self.active() {
            return Vec::new();
        }
        let mut rows = vec![[
            "colour".to_string(),
            format!(
                "CIELAB, illuminant {}, {}° observer, shown at {}",
                self.illuminant.label(),
                self.observer.label(),
                self.colour_pathlength_cm
                    .map_or("the measured pathlength".into(), |l| format!("{l} cm"))
            ),
        ]];
        if let Some(t) = &self.target {
            rows.push(["target".into(), t.display().to_string()]);
            rows.push([
                "tolerances".into(),
                format!(
                    "strength ±{} % (where the file gives none), ΔE00 {}",
                    self.strength_tolerance_percent, self.max_delta_e
                ),
            ]);
        }
        if let Some(s) = &self.stock {
            rows.push(["stock solutions".into(), s.display().to_string()]);
        }
        rows
    }

    /// Read the target and stock files against the fitted references;
    /// `None` when no QC was asked for.
    pub fn setup(&self, refs: &ReferenceSet) -> Result<Option<QcSetup>, Failure> {
        if !self.active() {
            return Ok(None);
        }
        let tolerances = Tolerances::new(self.strength_tolerance_percent, self.max_delta_e)
            .map_err(|e| {
                Failure::new(format!("--strength-tolerance-percent / --max-delta-e: {e}"))
            })?;
        let target = match &self.target {
            Some(path) => {
                let name = path.file_stem().map_or_else(
                    || path.display().to_string(),
                    |s| s.to_string_lossy().into_owned(),
                );
                Some(
                    read_recipe(path)?
                        .resolve(&name, refs, tolerances)
                        .map_err(in_file(path))?,
                )
            }
            None => None,
        };
        let stock_mol_per_l = match &self.stock {
            Some(path) => {
                let stock = read_recipe(path)?;
                let values = stock.in_mol_per_l(refs).map_err(in_file(path))?;
                refs.components
                    .iter()
                    .map(|c| {
                        stock
                            .lines
                            .iter()
                            .zip(&values)
                            .find(|(l, _)| l.component == c.name)
                    })
                    .map(|found| found.map(|(_, v)| *v).filter(|v| *v > 0.0))
                    .collect()
            }
            None => vec![None; refs.components.len()],
        };
        Ok(Some(QcSetup {
            target,
            colour: Some(ColourOptions {
                illuminant: self.illuminant,
                observer: self.observer,
                pathlength_cm: self.colour_pathlength_cm,
            }),
            stock_mol_per_l,
            batch_volume_l: self.batch_volume_l,
        }))
    }
}

fn in_file(path: &Path) -> impl Fn(crate::Error) -> Failure + '_ {
    move |e| Failure::new(format!("{}: {e}", path.display()))
}

fn read_recipe(path: &Path) -> Result<recipe::Recipe, Failure> {
    let bytes =
        std::fs::read(path).map_err(|e| Failure::new(format!("{}: {e}", path.display())))?;
    recipe::read(&bytes).map_err(in_file(path))
}

fn parse_observer(s: &str) -> Result<Observer, String> {
    Observer::parse(s)
        .ok_or_else(|| format!("'{s}': expected 2 (CIE 1931) or 10 (CIE 1964) degrees"))
}

fn parse_illuminant(s: &str) -> Result<Illuminant, String> {
    Illuminant::parse(s).ok_or_else(|| format!("'{s}': expected D65, D50 or A"))
}
