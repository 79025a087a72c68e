//! `unblend discover`: recover the spectrum of an unknown absorber that the
//! flagged samples of a batch share.

use super::common::{FormatArg, ModelArgs, parse_positive, summary_format};
use super::diagnostic_args::DiagnosticArgs;
use super::inputs;
use super::{Failure, exit};
use crate::discover::{self, DiscoverOptions, Discovery};
use crate::fit::FitOptions;
use crate::guard::Named;
use std::io::Write;
use std::path::PathBuf;

/// Recover the spectrum of an unknown absorber from the residuals of the
/// flagged samples (SVD, then non-negative alternating least squares).
#[derive(Debug, clap::Args)]
#[command(after_help = super::AFTER_HELP)]
pub struct Args {
    /// Spectra files or folders, in any shape `fit` reads; `-` reads standard input.
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// Where to write the recovered spectrum: CSV `wavelength_nm,epsilon`, ready for `library add`.
    #[arg(long, value_name = "FILE.csv")]
    pub out: PathBuf,
    /// The references and the model fitted.
    #[command(flatten)]
    pub model: ModelArgs,
    /// Peak ε given to the recovered spectrum, L/(mol·cm) (the true scale cannot be known from mixtures).
    #[arg(long, default_value_t = discover::DEFAULT_PEAK_EPSILON, value_parser = parse_positive, value_name = "L_PER_MOL_CM")]
    pub peak_epsilon: f64,
    /// Limit on alternating least-squares iterations.
    #[arg(long, default_value_t = discover::DEFAULT_MAX_ITERATIONS, value_name = "N")]
    pub max_iterations: usize,
    /// Report format on standard output.
    #[arg(long, default_value = "table", value_parser = summary_format())]
    pub format: FormatArg,
    /// Residual tests and saturation masking (as for `fit`).
    #[command(flatten)]
    pub checks: DiagnosticArgs,
}

/// Run `unblend discover`.
pub fn run(args: Args) -> Result<u8, Failure> {
    crate::guard::refuse_overwriting(
        &args
            .inputs
            .iter()
            .map(|p| Named::new("input", p))
            .collect::<Vec<_>>(),
        &[Named::new("--out", &args.out)],
    )?;
    if args.checks.no_diagnostics {
        return Err(Failure::new(
            "discover works on the samples the residual tests flag: drop --no-diagnostics",
        ));
    }
    let discovery = DiscoverOptions::new(args.peak_epsilon, args.max_iterations)?;
    let options = FitOptions::try_from(&args.model)?;
    let file = inputs::read_all(&args.inputs, args.model.read_options().quantity)?;
    for w in &file.warnings {
        eprintln!("unblend: warning: {w}");
    }
    let refs = args.model.references()?.set;
    let found = discover::discover(&file, &refs, &options, &args.checks.options(), &discovery)?;
    crate::atomic::write_with(&args.out, false, |w| {
        writeln!(w, "wavelength_nm,epsilon")?;
        for (x, e) in found.wavelengths_nm.iter().zip(&found.epsilon_l_per_mol_cm) {
            let mut a = zmij::Buffer::new();
            let mut b = zmij::Buffer::new();
            writeln!(w, "{},{}", a.format(*x), b.format(*e))?;
        }
        Ok(())
    })?;
    for w in &found.warnings {
        eprintln!("unblend: warning: {w}");
    }
    let mut out = std::io::stdout().lock();
    let written = match args.format {
        FormatArg::Json => serde_json::to_writer_pretty(&mut out, &found)
            .map_err(std::io::Error::other)
            .and_then(|_| writeln!(out)),
        // `summary_format` never gives csv.
        FormatArg::Table | FormatArg::Csv | FormatArg::Jsonl => {
            write_table(&found, &args.out, &mut out)
        }
    };
    written.map_err(|e| Failure::new(format!("standard output: {e}")))?;
    Ok(if found.n_failed > 0 {
        exit::PARTIAL
    } else {
        exit::OK
    })
}

fn write_table(d: &Discovery, path: &std::path::Path, w: &mut dyn Write) -> std::io::Result<()> {
    let sv: Vec<String> = d
        .singular_values_au
        .iter()
        .map(|s| format!("{:.2}", s / d.noise_edge_au))
        .collect();
    writeln!(
        w,
        "{} flagged sample(s) used; residual singular values / noise edge: {} (signals above {}: {})",
        d.samples.len(),
        sv.join(", "),
        discover::SIGNAL_MARGIN,
        d.n_signals
    )?;
    writeln!(
        w,
        "recovered spectrum: peak at {} nm, scaled to ε = {} L/(mol·cm) there; {:.0} % of its shape is fixed by the data (the rest by non-negativity); {} iteration(s){}",
        d.peak_nm,
        d.peak_epsilon_l_per_mol_cm,
        100.0 * d.determined_fraction,
        d.iterations,
        if d.converged { "" } else { ", not converged" }
    )?;
    let still = d.samples.iter().filter(|s| s.flagged_after).count();
    writeln!(
        w,
        "refit with it: residual sum of squares {:.1} % lower; {} of {} sample(s) still flagged\n",
        100.0 * d.rss_reduction_fraction,
        still,
        d.samples.len()
    )?;
    let header = vec![
        "sample".to_string(),
        "peak absorbance (AU)".into(),
        "as-if conc. (µmol/L)".into(),
        "residual before (mAU)".into(),
        "after (mAU)".into(),
        "still flagged".into(),
    ];
    let mut rows = Vec::new();
    for s in &d.samples {
        rows.push(vec![
            s.sample.clone(),
            format!("{:.4}", s.peak_absorbance_au),
            format!("{:.3}", s.concentration_mol_per_l * 1e6),
            format!("{:.2}", s.residual_rms_before_au * 1000.0),
            format!("{:.2}", s.residual_rms_after_au * 1000.0),
            if s.flagged_after { "yes" } else { "no" }.into(),
        ]);
    }
    crate::output::text::write_numbers_table(w, &header, &rows, true)?;
    for [s, why] in &d.left_out {
        writeln!(w, "left out: {s}: {why}")?;
    }
    writeln!(
        w,
        "\nwrote {} (add it with `unblend library add NAME --spectrum {}`)",
        path.display(),
        path.display()
    )
}
