//! `unblend report`: an HTML report from results written earlier.

use super::Failure;
use crate::output::JsonReport;
use std::path::PathBuf;

/// Make a self-contained HTML report from a results file (`fit --format json`).
#[derive(Debug, clap::Args)]
#[command(after_help = super::AFTER_HELP)]
pub struct Args {
    /// Results JSON written by `unblend fit --format json` (with `--with-curves` for the figures).
    pub results: PathBuf,
    /// Report file to write [default: RESULTS with the extension .html].
    #[arg(long, value_name = "FILE.html")]
    pub out: Option<PathBuf>,
}

/// Run `unblend report`.
pub fn run(args: Args) -> Result<u8, Failure> {
    let shown = args.results.display().to_string();
    let bytes = super::fit::read_input(&args.results)?;
    let doc: JsonReport = serde_json::from_slice(&bytes).map_err(|e| {
        Failure::new(format!(
            "{shown}: line {}, column {}: expected the JSON results of `unblend fit --format json` ({e})",
            e.line(),
            e.column()
        ))
    })?;
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| args.results.with_extension("html"));
    if out == args.results {
        return Err(Failure::new(format!(
            "{shown}: the report would overwrite the results: name it with --out FILE.html"
        )));
    }
    if doc.curves.is_none() {
        eprintln!(
            "unblend: warning: {shown} carries no fit curves: the report has the summary and the tables but no figures (write the results with `unblend fit ... --format json --with-curves`)"
        );
    }
    let html = crate::report::render_html(&doc, &format!("unblend report: {shown}"));
    crate::atomic::write_with(&out, false, |w| w.write_all(html.as_bytes()))?;
    eprintln!("unblend: wrote the report to {}", out.display());
    Ok(super::exit::OK)
}
