//! `unblend demo`: the main job on the built-in, invented demo data.
//!
//! The demo's spectra and reference components are embedded in the binary
//! (copies of `demo-data/lot-check.csv` and `library/*.toml`), so the demo
//! runs from any folder after `cargo install`.

use super::{Failure, exit};
use crate::atomic::stage_with;
use crate::fit::{FitOptions, fit_file};
use crate::input::spectra::{self, ReadOptions};
use crate::output::{self, Format};
use crate::reference::{Component, ReferenceSet};
use crate::target::{ColourOptions, QcContext, Target, Tolerances, recipe};
use std::path::PathBuf;

/// Run the fit on the built-in demo data and write its results.
#[derive(Debug, clap::Args)]
#[command(after_help = super::AFTER_HELP)]
pub struct Args {
    /// Folder for the demo's result files.
    #[arg(long, default_value = "unblend-demo", value_name = "DIR")]
    pub out_dir: PathBuf,
}

/// The demo spectra (invented).
pub const DEMO_SPECTRA: &str = include_str!("../../demo-data/lot-check.csv");

/// The demo reference components (invented), as (file name, text).
pub const DEMO_LIBRARY: &[(&str, &str)] = &[
    (
        "ember-red.toml",
        include_str!("../../library/ember-red.toml"),
    ),
    (
        "fjord-blue.toml",
        include_str!("../../library/fjord-blue.toml"),
    ),
    (
        "saffron-yellow.toml",
        include_str!("../../library/saffron-yellow.toml"),
    ),
];

/// The demo's target recipes (invented), as (shade, lot prefix, file text):
/// copies of `demo-data/targets/*.csv`.
pub const DEMO_TARGETS: &[(&str, &str, &str)] = &[
    (
        "harbour-teal",
        "lot-2611",
        include_str!("../../demo-data/targets/harbour-teal.csv"),
    ),
    (
        "autumn-rust",
        "lot-2612",
        include_str!("../../demo-data/targets/autumn-rust.csv"),
    ),
    (
        "heather",
        "lot-2613",
        include_str!("../../demo-data/targets/heather.csv"),
    ),
    (
        "heather",
        "lot-2614",
        include_str!("../../demo-data/targets/heather.csv"),
    ),
    (
        "strong-shade",
        "lot-2615",
        include_str!("../../demo-data/targets/strong-shade.csv"),
    ),
];

/// The demo's targets resolved against its references, with the lot prefix
/// each applies to.
pub fn demo_targets(refs: &ReferenceSet) -> Result<Vec<(&'static str, Target)>, Failure> {
    DEMO_TARGETS
        .iter()
        .map(|(shade, prefix, text)| {
            let in_file = |e: crate::Error| {
                Failure::new(format!("(built-in) demo-data/targets/{shade}.csv: {e}"))
            };
            let recipe = recipe::read(text.as_bytes()).map_err(in_file)?;
            let target = recipe
                .resolve(shade, refs, Tolerances::default())
                .map_err(in_file)?;
            Ok((*prefix, target))
        })
        .collect()
}

/// The demo's reference set, parsed from the embedded files.
pub fn demo_references() -> Result<ReferenceSet, Failure> {
    let mut components = Vec::new();
    for (name, text) in DEMO_LIBRARY {
        components.push(Component::from_toml(
            text,
            &format!("(built-in) library/{name}"),
        )?);
    }
    // Report in the order an analyst names the blend: blue, yellow, red.
    let order = ["fjord-blue", "saffron-yellow", "ember-red"];
    components.sort_by_key(|c| {
        order
            .iter()
            .position(|o| *o == c.name)
            .unwrap_or(order.len())
    });
    Ok(ReferenceSet { components })
}

/// What the demo's results show, printed after the table.
const DEMO_NOTES: &str = "
The lot-2614 replicates carry an impurity none of the three references describes: their residual is flagged unexplained-absorbance (see the notes); `unblend fit ... --screen-with DIR` tries candidate spectra on it, `unblend discover` estimates its spectrum.
The lot-2615 replicates read above 2 AU in the blue band: those points are masked out of the fit (saturation-masked); dilute and re-measure for a confident number.
Against their targets (demo-data/targets/): lots 2611, 2613 and 2615 pass; lot 2612 carries 9 % too much saffron-yellow and fails on strength (the correction above dilutes it and tops up the other dyes); lot 2614 fails on colour (ΔE00 above 1) and on strength, its impurity biasing the fit.
At the default alarm rate 1 % of clean samples are flagged by chance: a lone flag with a band of a few tenths of a mAU may be one of them.
";

/// Run `unblend demo`.
pub fn run(args: Args) -> Result<u8, Failure> {
    let refs = demo_references()?;
    let file = spectra::read(DEMO_SPECTRA.as_bytes(), ReadOptions::default())
        .map_err(|e| Failure::new(format!("(built-in) demo-data/lot-check.csv: {e}")))?;
    let options = FitOptions::default();
    let mut report = fit_file(&file, &refs, &options)?;
    let targets = demo_targets(&refs)?;
    crate::target::apply_to_file(&file, &mut report, |sample| {
        let (_, target) = targets.iter().find(|(p, _)| sample.starts_with(p))?;
        Some(QcContext {
            refs: &refs,
            target: Some(target),
            colour: Some(ColourOptions::default()),
            stock_mol_per_l: &[],
            batch_volume_l: None,
        })
    });
    for w in &report.warnings {
        eprintln!("unblend: warning: {w}");
    }
    std::fs::create_dir_all(&args.out_dir)
        .map_err(|e| Failure::new(format!("{}: {e}", args.out_dir.display())))?;
    let csv = args.out_dir.join("results.csv");
    let json = args.out_dir.join("results.json");
    let mut doc = output::JsonReport::from_report(&report);
    doc.run = Some(output::RunInfo {
        command: "demo".into(),
        input: "(built-in) demo-data/lot-check.csv".into(),
        library: "(built-in) library/".into(),
        options: vec![
            ["pathlength".into(), format!("{} cm", options.pathlength_cm)],
            ["baseline".into(), "offset".into()],
            ["residual checks".into(), "on (defaults)".into()],
            [
                "targets".into(),
                "(built-in) demo-data/targets/*.csv, one per shade".into(),
            ],
        ],
    });
    doc.curves = Some(crate::curves::for_file(&file, &refs, &options, &report));
    let html_path = args.out_dir.join("report.html");
    let html =
        crate::report::render_html(&doc, "unblend demo: lot check of an invented ink workshop");
    // The three files are replaced together: all old or all new.
    crate::atomic::commit_all(vec![
        stage_with(&csv, |w| output::write(&report, Format::Csv, w))?,
        stage_with(&json, |w| output::write_json(&doc, w))?,
        stage_with(&html_path, |w| w.write_all(html.as_bytes()))?,
    ])?;
    super::stdout::write_with(|w| {
        writeln!(
            w,
            "unblend demo: an invented ink workshop checks its production lots."
        )?;
        writeln!(
            w,
            "Three house dyes ({}), {} spectra: blanks, single-dye standards and lots in replicate, 1 cm cells.\n",
            refs.names().join(", "),
            report.outcomes.len()
        )?;
        output::write(&report, Format::Table, w)?;
        w.write_all(DEMO_NOTES.as_bytes())?;
        writeln!(w, "\nwrote {} and {}", csv.display(), json.display())?;
        writeln!(w, "open the report in a browser: {}", html_path.display())
    })?;
    Ok(if report.n_failed() == 0 {
        exit::OK
    } else {
        exit::PARTIAL
    })
}
