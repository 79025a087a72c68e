//! A batch run's own records: the counters kept as it goes ([`RunTally`]),
//! the head and tail of `run.json` around the plates, the run log
//! (`run-log.txt`) and the summary rows of the plate report.

use crate::batch::run::InputSummary;
use crate::batch::{BatchOptions, OUTLIER_MIN_STD_ERRORS, PlateResult};
use crate::report::plates::RunHead;
use std::io::{self, Write};

/// Warnings kept for the run log and JSON (per-plate warnings are also in
/// each plate's JSON object).
pub const KEPT_WARNINGS: usize = 1000;

/// Counters over the run (bounded memory: counts, not rows).
#[derive(Debug, Default)]
pub struct RunTally {
    /// Plates read.
    pub plates: usize,
    /// Plates that could not be read or fitted at all.
    pub plates_failed: usize,
    /// Wells fitted.
    pub wells_fitted: usize,
    /// Wells that failed.
    pub wells_failed: usize,
    /// Blank wells.
    pub blanks: usize,
    /// Blank wells left out as outliers.
    pub blank_outliers: usize,
    /// Wells flagged as replicate outliers.
    pub replicate_outliers: usize,
    /// Wells with saturated readings.
    pub saturated: usize,
    /// Samples (per plate).
    pub samples: usize,
    /// What happened to each input file.
    pub inputs: Vec<InputSummary>,
    /// The first [`KEPT_WARNINGS`] distinct warnings.
    pub warnings: Vec<String>,
    /// Every warning counted, repeats included.
    pub n_warnings: usize,
    /// The first specimens' summary lines (printed at the end of the run).
    pub summary: Vec<String>,
    /// How many specimens' lines were not kept.
    pub summary_more: usize,
}

impl RunTally {
    /// Count a warning; keep it if it is new and there is room.
    pub fn warn(&mut self, w: String) {
        self.n_warnings += 1;
        if self.warnings.len() < KEPT_WARNINGS && !self.warnings.contains(&w) {
            self.warnings.push(w);
        }
    }

    /// Count a plate's wells, blanks, flags and warnings.
    pub fn plate(&mut self, p: &PlateResult) {
        self.plates += 1;
        if let Some(e) = &p.error {
            self.plates_failed += 1;
            self.warn(format!("plate '{}' ({}): {e}", p.plate, p.input));
        }
        self.wells_fitted += p.n_fitted();
        self.wells_failed += p.n_failed();
        self.blanks += p.blank.wells.len();
        self.blank_outliers += p.blank.outliers.len();
        self.samples += p.samples.len();
        for line in crate::output::batch::summary_lines(p) {
            if self.summary.len() < crate::output::batch::SUMMARY_SHOWN {
                self.summary.push(line);
            } else {
                self.summary_more += 1;
            }
        }
        let has = |flags: &[String], flag: &str| flags.iter().any(|f| f == flag);
        for w in &p.wells {
            if has(&w.flags, crate::batch::FLAG_REPLICATE_OUTLIER) {
                self.replicate_outliers += 1;
            }
            if has(&w.flags, crate::batch::FLAG_SATURATED) {
                self.saturated += 1;
            }
        }
        for w in &p.warnings {
            self.warn(w.clone());
        }
    }

    /// Input files that could not be read to the end.
    pub fn inputs_failed(&self) -> usize {
        self.inputs.iter().filter(|s| s.error.is_some()).count()
    }

    /// Inputs, plates and wells that could not be used.
    pub fn failures(&self) -> usize {
        self.inputs_failed() + self.plates_failed + self.wells_failed
    }
}

/// The run's settings that are not engine options: how the command was
/// asked, as the log and `run.json` record it.
#[derive(Debug, Clone, Default)]
pub struct RunSettings {
    /// What the input numbers are (`absorbance`, `transmittance`, ...).
    pub quantity: String,
    /// The plate map's path, if any.
    pub plate_map: Option<String>,
    /// Whether the residual checks ran.
    pub residual_checks: bool,
    /// The given noise level in AU (`None`: estimated per well).
    pub noise_au: Option<f64>,
    /// The residual checks' false-alarm rate.
    pub alarm_rate: f64,
    /// The saturation ceiling in AU, if any.
    pub max_absorbance_au: Option<f64>,
    /// The folder of screening candidates, if any.
    pub screen_with: Option<String>,
}

/// One component as the run log lists it.
#[derive(Debug, Clone)]
pub struct LoggedComponent {
    /// Component name.
    pub name: String,
    /// Its wavelength range, nm.
    pub range_nm: (f64, f64),
    /// Its file.
    pub path: String,
    /// SHA-256 of its file, hex (`?` when it could not be read).
    pub sha256: String,
}

/// What the run log and the report's head say about the run besides the
/// tally.
#[derive(Debug, Clone)]
pub struct RunContext<'a> {
    /// When the run started, `YYYY-MM-DD hh:mm:ss UTC`.
    pub started_utc: String,
    /// Wall-clock seconds the run took.
    pub elapsed_s: f64,
    /// The command line, quoted for a shell.
    pub command: String,
    /// Worker threads.
    pub threads: usize,
    /// The plate map's line (path, SHA-256, entries), if any.
    pub map: Option<String>,
    /// The library folder.
    pub library_dir: String,
    /// The components fitted, in column order.
    pub components: Vec<LoggedComponent>,
    /// The engine options.
    pub options: &'a BatchOptions,
    /// The other settings.
    pub settings: &'a RunSettings,
}

/// A command-line word quoted for a POSIX shell when it needs to be.
pub fn shell_word(s: &str) -> String {
    if !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "-_./:=,+".contains(c))
    {
        s.to_string()
    } else {
        format!("'{}'", s.replace('\'', "'\\''"))
    }
}

/// The options object of `run.json` (and the report's option rows).
pub fn options_json(o: &BatchOptions, s: &RunSettings) -> serde_json::Value {
    serde_json::json!({
        "baseline": format!("{:?}", o.fit.baseline).to_lowercase(),
        "range_nm": o.fit.window_nm.map(|(lo, hi)| [lo, hi]),
        "quantity": s.quantity,
        "pathlength_cm": o.fit.pathlength_cm,
        "water_band": o.water,
        "outlier_test": "grubbs-two-sided",
        "outlier_alpha": o.outlier_alpha,
        "outlier_min_std_errors": OUTLIER_MIN_STD_ERRORS,
        "keep_outliers": o.keep_outliers,
        "plate_map": s.plate_map,
        "residual_checks": s.residual_checks,
        "noise_au": s.noise_au,
        "alarm_rate": s.alarm_rate,
        "max_absorbance_au": s.max_absorbance_au,
        "screen_with": s.screen_with,
    })
}

/// The head of `run.json`: opens the object and its `plates` array, which
/// [`write_json_tail`] closes.
pub fn write_json_head(
    components: &[&str],
    options: &serde_json::Value,
    w: &mut (impl Write + ?Sized),
) -> io::Result<()> {
    let head = serde_json::json!({
        "tool": {"name": "unblend", "version": env!("CARGO_PKG_VERSION")},
        "components": components,
        "options": options,
    });
    let head = serde_json::to_string(&head).map_err(io::Error::other)?;
    w.write_all(&head.as_bytes()[..head.len() - 1])?;
    w.write_all(b",\"plates\":[")
}

/// The tail of `run.json`: closes the `plates` array, then inputs, summary
/// and warnings.
pub fn write_json_tail(
    t: &RunTally,
    elapsed_s: f64,
    w: &mut (impl Write + ?Sized),
) -> io::Result<()> {
    let tail = serde_json::json!({
        "inputs": t.inputs,
        "summary": {
            "plates": t.plates,
            "plates_failed": t.plates_failed,
            "wells_fitted": t.wells_fitted,
            "wells_failed": t.wells_failed,
            "blank_wells": t.blanks,
            "blank_outliers": t.blank_outliers,
            "replicate_outliers": t.replicate_outliers,
            "saturated_wells": t.saturated,
            "samples": t.samples,
            "elapsed_s": elapsed_s,
        },
        "warnings": t.warnings,
    });
    let tail = serde_json::to_string(&tail).map_err(io::Error::other)?;
    w.write_all(b"],")?;
    w.write_all(&tail.as_bytes()[1..])?;
    w.write_all(b"\n")
}

/// The plate report's summary rows: what was run, on what.
pub fn run_head(t: &RunTally, l: &RunContext) -> RunHead {
    let mut rows = vec![
        ("started (UTC)".to_string(), l.started_utc.clone()),
        ("command".to_string(), l.command.clone()),
    ];
    for s in &t.inputs {
        let mut v = format!("{} ({} plate(s)", s.path, s.plates);
        if let Some(h) = &s.sha256 {
            v.push_str(&format!(", sha256 {h}"));
        }
        v.push(')');
        if let Some(e) = &s.error {
            v.push_str(&format!(": {e}"));
        }
        rows.push(("input".to_string(), v));
    }
    let map = l.map.clone().unwrap_or_else(|| "none".into());
    rows.push(("plate map".to_string(), map));
    rows.push(("library".to_string(), l.library_dir.clone()));
    if let serde_json::Value::Object(m) = options_json(l.options, l.settings) {
        for (k, v) in m {
            let v = match v {
                serde_json::Value::String(s) => s,
                serde_json::Value::Null => "(not set)".to_string(),
                other => other.to_string(),
            };
            rows.push((format!("option {k}"), v));
        }
    }
    rows.push(("elapsed (s)".to_string(), format!("{:.2}", l.elapsed_s)));
    RunHead {
        title: "unblend batch report".to_string(),
        tool: format!("unblend {}", env!("CARGO_PKG_VERSION")),
        rows,
        warnings: t.warnings.clone(),
    }
}

/// The run log: tool, command, inputs, plate map, components, options,
/// results and warnings.
pub fn write_log(t: &RunTally, l: &RunContext, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    writeln!(w, "unblend batch: run log")?;
    writeln!(w, "tool:       unblend {}", env!("CARGO_PKG_VERSION"))?;
    writeln!(w, "started:    {}", l.started_utc)?;
    writeln!(w, "command:    {}", l.command)?;
    writeln!(
        w,
        "elapsed:    {:.2} s ({:.0} wells/s, {} thread(s))",
        l.elapsed_s,
        t.wells_fitted as f64 / l.elapsed_s.max(1e-9),
        l.threads
    )?;
    write_log_inputs(t, w)?;
    let map = l.map.as_deref();
    let map = map.unwrap_or("none (every well a sample, no blank)");
    writeln!(w, "plate map:  {map}")?;
    write_log_components(l, w)?;
    write_log_options(l, w)?;
    write_log_results(t, w)
}

/// The run log's inputs: layout, plates, bytes and SHA-256, or the error.
fn write_log_inputs(t: &RunTally, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    writeln!(w, "\ninputs")?;
    for s in &t.inputs {
        match (&s.error, &s.sha256) {
            (None, Some(sha)) => writeln!(
                w,
                "  {}  {}  {} plate(s)  {} bytes  sha256 {sha}",
                s.path,
                s.layout.unwrap_or("?"),
                s.plates,
                s.bytes
            )?,
            (e, _) => writeln!(
                w,
                "  {}  {} plate(s) read  ERROR: {}",
                s.path,
                s.plates,
                e.as_deref().unwrap_or("not read to the end")
            )?,
        }
    }
    Ok(())
}

/// The run log's library and components, each with its file's SHA-256.
fn write_log_components(l: &RunContext, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    writeln!(w, "library:    {}", l.library_dir)?;
    writeln!(w, "components:")?;
    for c in &l.components {
        let (lo, hi) = c.range_nm;
        writeln!(
            w,
            "  {}  {lo}–{hi} nm  {}  sha256 {}",
            c.name, c.path, c.sha256
        )?;
    }
    Ok(())
}

/// The run log's options section.
fn write_log_options(l: &RunContext, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    let o = l.options;
    writeln!(w, "\noptions")?;
    writeln!(
        w,
        "  range:       {}",
        o.fit.window_nm.map_or(
            "every wavelength the plate and all references cover".into(),
            |(lo, hi)| format!("{lo}–{hi} nm (within what the plate and references cover)")
        )
    )?;
    let baseline = format!("{:?}", o.fit.baseline).to_lowercase();
    writeln!(w, "  baseline:    {baseline}")?;
    writeln!(w, "  quantity:    {}", l.settings.quantity)?;
    match o.water {
        Some(wb) => writeln!(
            w,
            "  pathlength:  plate map, else water band l = (A({} nm) − A({} nm)) / {} AU/cm (readings before blank subtraction; the constant depends on temperature), else {} cm",
            wb.peak_nm, wb.reference_nm, wb.au_per_cm, o.fit.pathlength_cm
        )?,
        None => writeln!(
            w,
            "  pathlength:  plate map, else {} cm",
            o.fit.pathlength_cm
        )?,
    }
    writeln!(
        w,
        "  outliers:    Grubbs (1969) two-sided, α = {}, and more than {} standard errors from the other replicates; {}",
        o.outlier_alpha,
        OUTLIER_MIN_STD_ERRORS,
        if o.keep_outliers {
            "flagged wells kept in the statistics"
        } else {
            "flagged wells left out of the blank and the statistics"
        }
    )?;
    writeln!(w, "  checks:      {}", checks_line(l.settings))
}

/// The run log's line on the residual checks, ceiling and screening.
fn checks_line(s: &RunSettings) -> String {
    let tests = if s.residual_checks {
        format!(
            "residual tests at false-alarm rate {}, noise {}",
            s.alarm_rate,
            s.noise_au
                .map_or("estimated per well".into(), |n| format!("{n} AU"))
        )
    } else {
        "residual tests off".to_string()
    };
    let ceiling = s
        .max_absorbance_au
        .map_or("none".into(), |v| format!("{v} AU"));
    let screening = s
        .screen_with
        .as_ref()
        .map(|d| format!("; screening with {d}"))
        .unwrap_or_default();
    format!("{tests}; saturation ceiling {ceiling}{screening}")
}

/// The run log's results, outputs and warnings.
fn write_log_results(t: &RunTally, w: &mut (impl Write + ?Sized)) -> io::Result<()> {
    writeln!(w, "\nresults")?;
    writeln!(
        w,
        "  plates:      {} read, {} could not be read",
        t.plates, t.plates_failed
    )?;
    writeln!(
        w,
        "  wells:       {} fitted, {} failed, {} with saturated readings, {} replicate outlier(s)",
        t.wells_fitted, t.wells_failed, t.saturated, t.replicate_outliers
    )?;
    writeln!(
        w,
        "  blanks:      {} well(s), {} outlier(s)",
        t.blanks, t.blank_outliers
    )?;
    writeln!(w, "  samples:     {} (per plate)", t.samples)?;
    writeln!(
        w,
        "\noutputs:     wells.csv, samples.csv, run.json, run-log.txt"
    )?;
    if !t.warnings.is_empty() {
        writeln!(w, "\nwarnings")?;
        for x in &t.warnings {
            writeln!(w, "  {x}")?;
        }
        if t.n_warnings > t.warnings.len() {
            writeln!(
                w,
                "  … {} more (repeats, or past the first {KEPT_WARNINGS}; each plate's own are in run.json)",
                t.n_warnings - t.warnings.len()
            )?;
        }
    }
    writeln!(
        w,
        "\nResults are decision support, not a certified analysis."
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shell_word_quotes_only_what_a_shell_would_split() {
        // POSIX shell quoting (IEEE Std 1003.1, "Quoting"): a single-quoted word keeps
        // every character; a quote inside is closed, escaped and reopened.
        assert_eq!(shell_word("--out-dir"), "--out-dir");
        assert_eq!(shell_word("a b"), "'a b'");
        assert_eq!(shell_word("it's"), "'it'\\''s'");
        assert_eq!(shell_word(""), "''");
    }
}
