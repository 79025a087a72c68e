//! `unblend report`: an HTML report from results written earlier.

use super::Failure;
use crate::batch::PlateResult;
use crate::output::JsonReport;
use crate::report::plates::{PlateReport, RunHead};
use std::path::{Path, PathBuf};

/// Make a self-contained HTML report from a results file (`fit --format json`).
#[derive(Debug, clap::Args)]
#[command(after_help = super::AFTER_HELP)]
pub struct Args {
    /// Results JSON written by `unblend fit --format json`, or a batch's run.json (with
    /// `--with-curves` on either for the fit figures).
    pub results: PathBuf,
    /// Report file to write [default: RESULTS with the extension .html].
    #[arg(long, value_name = "FILE.html")]
    pub out: Option<PathBuf>,
}

/// Run `unblend report`.
pub fn run(args: Args) -> Result<u8, Failure> {
    let shown = args.results.display().to_string();
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| args.results.with_extension("html"));
    crate::guard::refuse_overwriting(
        &[crate::guard::Named::new("results", &args.results)],
        &[crate::guard::Named::new("--out", &out)],
    )?;
    let bytes = super::common::read_input(&args.results)?;
    if is_batch_run(&bytes) {
        return batch_report(&bytes, &shown, &out);
    }
    let doc: JsonReport = serde_json::from_slice(&bytes).map_err(|e| {
        Failure::new(format!(
            "{shown}: line {}, column {}: expected the JSON results of `unblend fit --format json` or the run.json of `unblend batch` ({e})",
            e.line(),
            e.column()
        ))
    })?;
    // Everything the drawing relies on, checked first, with its place.
    crate::report::check::results(&doc).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
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

/// Whether the JSON is a batch's run.json (it has a `plates` array).
fn is_batch_run(bytes: &[u8]) -> bool {
    #[derive(serde::Deserialize)]
    struct Probe {
        plates: Option<serde::de::IgnoredAny>,
    }
    serde_json::from_slice::<Probe>(bytes).is_ok_and(|p| p.plates.is_some())
}

/// The parts of a batch's run.json the report shows.
#[derive(serde::Deserialize)]
struct BatchRun {
    tool: crate::output::ToolInfo,
    components: Vec<String>,
    #[serde(default)]
    options: serde_json::Map<String, serde_json::Value>,
    plates: Vec<PlateResult>,
    #[serde(default)]
    inputs: Vec<serde_json::Value>,
    #[serde(default)]
    warnings: Vec<String>,
}

fn batch_report(bytes: &[u8], shown: &str, out: &Path) -> Result<u8, Failure> {
    let run: BatchRun = serde_json::from_slice(bytes).map_err(|e| {
        Failure::new(format!(
            "{shown}: line {}, column {}: expected the run.json of `unblend batch` ({e})",
            e.line(),
            e.column()
        ))
    })?;
    crate::report::check::plates(&run.plates).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
    let mut rows = Vec::new();
    for i in &run.inputs {
        let path = i.get("path").and_then(|v| v.as_str()).unwrap_or("?");
        let plates = i.get("plates").and_then(|v| v.as_u64()).unwrap_or(0);
        rows.push(("input".to_string(), format!("{path} ({plates} plate(s))")));
    }
    for (k, v) in &run.options {
        let v = match v {
            serde_json::Value::String(s) => s.clone(),
            serde_json::Value::Null => "(not set)".to_string(),
            other => other.to_string(),
        };
        rows.push((format!("option {k}"), v));
    }
    let head = RunHead {
        title: format!("unblend batch report: {shown}"),
        tool: format!("{} {}", run.tool.name, run.tool.version),
        rows,
        warnings: run.warnings,
    };
    let mut report = PlateReport::new(run.components);
    for p in &run.plates {
        report.plate(p);
    }
    if !run
        .plates
        .iter()
        .any(|p| p.wells.iter().any(|w| w.curves.is_some()))
    {
        eprintln!(
            "unblend: warning: {shown} carries no fit curves: the report has the plate maps and the tables but no fit figures (run the batch with --with-curves or --report)"
        );
    }
    let html = report.finish(&head);
    crate::atomic::write_with(out, false, |w| w.write_all(html.as_bytes()))?;
    eprintln!("unblend: wrote the report to {}", out.display());
    Ok(super::exit::OK)
}
