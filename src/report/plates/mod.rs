//! The plate report (`batch --report`, `unblend report run.json`): per
//! plate, one figure with a heatmap of each component's concentration in the
//! specimen and a map of the wells' states and flags; every well links to its
//! fit figure and numbers.
//!
//! Built one plate at a time ([`PlateReport::plate`]) so a batch adds each
//! plate as it is done; [`PlateReport::finish`] puts the summary first. Fit
//! figures are drawn for the first [`FIGURE_BUDGET`] fitted wells of a run
//! (later wells keep their numbers and their table row), which bounds the
//! report's size and memory for runs of many plates.
//!
//! Colours: concentrations on the viridis scale (perceptually uniform,
//! readable by colour-blind readers and monotonic in lightness, so it also
//! reads in grey print); well states in Okabe–Ito colours with a code
//! letter in each cell, so the map needs no colour to be read.

mod figure;

pub use figure::{FigureInputs, plate_figure};

use super::svg::{PALETTE, escape};
use super::{conc, sample_figure, sample_numbers, unit_for};
use crate::batch::{PlateResult, WellResult};
use crate::input::plate::Well;
use crate::input::platemap::Role;
use std::collections::HashSet;
use std::fmt::Write;

/// Fit figures drawn per report (four 384-well plates); later wells are
/// listed with their numbers only.
pub const FIGURE_BUDGET: usize = 1536;

/// Anchor colours of matplotlib's viridis colour map at 0, 1/8, …, 1
/// (values recalled from memory of matplotlib's `_cm_listed.py`; any
/// perceptually uniform sequential map would do), interpolated linearly.
const VIRIDIS: [[u8; 3]; 9] = [
    [0x44, 0x01, 0x54],
    [0x47, 0x2d, 0x7b],
    [0x3b, 0x52, 0x8b],
    [0x2c, 0x72, 0x8e],
    [0x21, 0x91, 0x8c],
    [0x28, 0xae, 0x80],
    [0x5e, 0xc9, 0x62],
    [0xad, 0xdc, 0x30],
    [0xfd, 0xe7, 0x25],
];

/// Colour of t ∈ [0, 1] on the viridis scale, and whether text on it should
/// be dark (light cells) or white.
pub fn viridis(t: f64) -> (String, bool) {
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.0
    };
    let x = t * (VIRIDIS.len() - 1) as f64;
    let i = (x.floor() as usize).min(VIRIDIS.len() - 2);
    let f = x - i as f64;
    let mix = |k: usize| {
        let a = f64::from(VIRIDIS[i][k]);
        let b = f64::from(VIRIDIS[i + 1][k]);
        (a + (b - a) * f).round() as u8
    };
    (
        format!("#{:02x}{:02x}{:02x}", mix(0), mix(1), mix(2)),
        t > 0.55,
    )
}

/// What a well's cell in the state map shows.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum State {
    Fitted,
    Flagged,
    Outlier,
    Blank,
    Failed,
}

impl State {
    fn of(w: &WellResult) -> State {
        if w.error.is_some() {
            State::Failed
        } else if w.role == Role::Blank {
            State::Blank
        } else if w.flags.iter().any(|f| f.contains("outlier")) {
            State::Outlier
        } else if !w.all_flags().is_empty() {
            State::Flagged
        } else {
            State::Fitted
        }
    }

    /// Fill, text colour, code letter, legend text.
    fn style(self) -> (&'static str, &'static str, &'static str, &'static str) {
        match self {
            State::Fitted => ("#e8f1f8", "#333", "", "fitted, no flag"),
            State::Flagged => (PALETTE[1], "#000", "!", "flagged (see the flag codes)"),
            State::Outlier => (PALETTE[5], "#000", "o", "replicate or blank outlier"),
            State::Blank => ("#bdbdbd", "#000", "b", "blank"),
            State::Failed => (PALETTE[3], "#fff", "×", "not fitted (error)"),
        }
    }
}

/// Rows and columns of a plate format.
fn dims(p: &PlateResult) -> (u8, u8) {
    match p.format.as_deref() {
        Some("96-well") => (8, 12),
        Some("384-well") => (16, 24),
        _ => {
            let big = p
                .wells
                .iter()
                .filter_map(|w| Well::parse(&w.well))
                .any(|w| w.row >= 8 || w.col >= 12);
            if big { (16, 24) } else { (8, 12) }
        }
    }
}

/// Anchor of a well's fit section.
fn fit_anchor(plate_no: usize, well: &str) -> String {
    format!("fit-{}-{}", plate_no + 1, anchor_part(well))
}

/// Anchor of a well's table row.
fn row_anchor(plate_no: usize, well: &str) -> String {
    format!("well-{}-{}", plate_no + 1, anchor_part(well))
}

fn anchor_part(s: &str) -> String {
    s.chars()
        .map(|c| if c.is_ascii_alphanumeric() { c } else { '_' })
        .collect()
}

/// Anchor of a plate's section.
pub fn plate_anchor(plate_no: usize) -> String {
    format!("plate-{}", plate_no + 1)
}

/// The specimen concentration of component `j` in a well (dilution applied).
fn specimen(w: &WellResult, j: usize) -> Option<f64> {
    w.undiluted.get(j).map(|u| u.concentration_mol_per_l)
}

/// A number in about three significant figures for a cell.
fn short(v: f64) -> String {
    let a = v.abs();
    if a >= 100.0 {
        format!("{v:.0}")
    } else if a >= 10.0 {
        format!("{v:.1}")
    } else if a >= 1.0 {
        format!("{v:.2}")
    } else if a == 0.0 {
        "0".into()
    } else {
        format!("{v:.3}")
    }
}

/// Lines of the report's summary table.
#[derive(Debug, Default)]
pub struct RunHead {
    /// Title of the page.
    pub title: String,
    /// `unblend 0.1.0`.
    pub tool: String,
    /// (key, value) rows: command, inputs, library, options.
    pub rows: Vec<(String, String)>,
    /// Run warnings.
    pub warnings: Vec<String>,
}

/// A plate report being built, one plate at a time.
#[derive(Debug)]
pub struct PlateReport {
    components: Vec<String>,
    body: String,
    index: Vec<String>,
    plates: usize,
    plates_failed: usize,
    wells_fitted: usize,
    wells_failed: usize,
    flag_counts: Vec<(String, usize)>,
    figures_left: usize,
    figures: usize,
    wells_without_figure: usize,
    with_curves: bool,
}

impl PlateReport {
    /// A report over these components.
    pub fn new(components: Vec<String>) -> Self {
        PlateReport {
            components,
            body: String::new(),
            index: Vec::new(),
            plates: 0,
            plates_failed: 0,
            wells_fitted: 0,
            wells_failed: 0,
            flag_counts: Vec::new(),
            figures_left: FIGURE_BUDGET,
            figures: 0,
            wells_without_figure: 0,
            with_curves: false,
        }
    }

    /// Fit figures drawn so far (plate figures not counted).
    pub fn figures(&self) -> usize {
        self.figures
    }

    /// Add one plate's section.
    pub fn plate(&mut self, p: &PlateResult) {
        let k = self.plates;
        self.plates += 1;
        self.index_entry(p, k);
        plate_head(&mut self.body, p, k);
        if let Some(e) = &p.error {
            self.plates_failed += 1;
            let _ = writeln!(
                self.body,
                "<p class=\"flag\">not read: {}</p></section>",
                escape(e)
            );
            return;
        }
        blank_and_warnings(&mut self.body, p);
        let codes = self.count_flags(p);
        let drawn = self.choose_figures(p);
        let linked = |well: &str| drawn.contains(well);
        let h = &mut self.body;
        h.push_str(&plate_figure(&FigureInputs {
            plate: p,
            plate_no: k,
            components: &self.components,
            flag_codes: &codes,
            linked: &linked,
        }));
        h.push('\n');
        flag_code_list(h, &codes);
        replicate_table(h, p, &self.components);
        well_table(h, p, k, &self.components, &linked);
        for w in p.wells.iter().filter(|w| drawn.contains(w.well.as_str())) {
            if let (Some(c), Some(fit)) = (&w.curves, &w.fit) {
                self.figures += 1;
                well_section(h, p, k, w, (c, fit));
            }
        }
        h.push_str("</section>\n");
    }

    /// Count the plate's wells and list it in the index.
    fn index_entry(&mut self, p: &PlateResult, k: usize) {
        let fitted = p.n_fitted();
        let failed = p.n_failed();
        self.wells_fitted += fitted;
        self.wells_failed += failed;
        self.index.push(format!(
            "<li><a href=\"#{}\">{}</a>: {} well(s) fitted{}</li>",
            plate_anchor(k),
            escape(&p.plate),
            fitted,
            if failed > 0 {
                format!(", {failed} not fitted")
            } else {
                String::new()
            }
        ));
    }

    /// Flag codes of this plate, numbered in order of first appearance;
    /// counted for the run's summary.
    fn count_flags(&mut self, p: &PlateResult) -> Vec<String> {
        let mut codes: Vec<String> = Vec::new();
        for w in &p.wells {
            for f in w.all_flags() {
                if !codes.iter().any(|c| c == f) {
                    codes.push(f.to_string());
                }
                match self.flag_counts.iter_mut().find(|(n, _)| n == f) {
                    Some((_, n)) => *n += 1,
                    None => self.flag_counts.push((f.to_string(), 1)),
                }
            }
        }
        codes
    }

    /// Which wells get a figure: in order, while the budget lasts.
    fn choose_figures<'p>(&mut self, p: &'p PlateResult) -> HashSet<&'p str> {
        let mut drawn: HashSet<&str> = HashSet::new();
        for w in &p.wells {
            if w.curves.is_some() {
                self.with_curves = true;
                if self.figures_left > 0 {
                    self.figures_left -= 1;
                    drawn.insert(&w.well);
                } else {
                    self.wells_without_figure += 1;
                }
            }
        }
        drawn
    }

    /// The whole document: summary, plate index, plate sections.
    pub fn finish(self, head: &RunHead) -> String {
        let mut h = String::with_capacity(self.body.len() + 16 * 1024);
        let _ = write!(
            h,
            "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{}</style></head><body>\n<h1>{}</h1>\n",
            escape(&head.title),
            super::CSS,
            escape(&head.title)
        );
        h.push_str("<h2 id=\"summary\">Summary</h2>\n<table>\n");
        let mut row = |k: &str, v: &str| {
            let _ = writeln!(
                h,
                "<tr><th>{}</th><td style=\"text-align:left;white-space:normal\">{}</td></tr>",
                escape(k),
                escape(v)
            );
        };
        row("tool", &head.tool);
        for (k, v) in &head.rows {
            row(k, v);
        }
        row("components", &self.components.join(", "));
        row("plates", &self.plates.to_string());
        if self.plates_failed > 0 {
            row("plates not read", &self.plates_failed.to_string());
        }
        row("wells fitted", &self.wells_fitted.to_string());
        row("wells not fitted", &self.wells_failed.to_string());
        for (f, n) in &self.flag_counts {
            row(&format!("flag {f}"), &format!("{n} well(s)"));
        }
        h.push_str("</table>\n");
        super::warning_list(&mut h, &head.warnings);
        if !self.with_curves {
            h.push_str("<p class=\"note\">These results carry no fit curves, so the wells have no fit figures: run <code>unblend batch ... --report FILE.html</code> (or <code>--with-curves</code>) to get them.</p>\n");
        } else if self.wells_without_figure > 0 {
            let _ = writeln!(
                h,
                "<p class=\"note\">Fit figures are drawn for the first {FIGURE_BUDGET} fitted wells; the other {} well(s) are listed with their numbers only (all numbers are in wells.csv and run.json).</p>",
                self.wells_without_figure
            );
        }
        h.push_str("<h2 id=\"plates\">Plates</h2>\n<ul>\n");
        for line in &self.index {
            h.push_str(line);
            h.push('\n');
        }
        h.push_str("</ul>\n");
        h.push_str(&self.body);
        h.push_str("<p class=\"note\">Results are decision support, not a certified analysis. Colours: viridis for concentrations, Okabe–Ito for well states; each state also has a code letter.</p>\n</body></html>\n");
        h
    }
}

/// The plate's heading and where it came from.
fn plate_head(h: &mut String, p: &PlateResult, k: usize) {
    let _ = writeln!(
        h,
        "<section class=\"plate\" id=\"{}\"><h2>Plate {}</h2>",
        plate_anchor(k),
        escape(&p.plate)
    );
    let _ = write!(h, "<p class=\"note\">from {}", escape(&p.input));
    if let Some(f) = &p.format {
        let _ = write!(h, ", {f}");
    }
    let _ = write!(h, ", {} wavelength(s) per well", p.n_wavelengths);
    if !p.mapped {
        h.push_str(", no plate map entries (every well a sample)");
    }
    h.push_str("</p>\n");
}

/// The plate's blank and its warnings.
fn blank_and_warnings(h: &mut String, p: &PlateResult) {
    let b = &p.blank;
    if !b.wells.is_empty() {
        let _ = write!(
            h,
            "<p class=\"note\">blank: {} of {} well(s) used",
            b.used.len(),
            b.wells.len()
        );
        if let Some(m) = b.mean_au {
            let _ = write!(h, ", mean {:.4} AU", m);
        }
        if let Some(s) = b.well_sd_au {
            let _ = write!(h, ", spread (SD) {:.2} mAU", s * 1e3);
        }
        if !b.outliers.is_empty() {
            let _ = write!(
                h,
                "; left out as outliers: <span class=\"flag\">{}</span>",
                escape(&b.outliers.join(", "))
            );
        }
        h.push_str("</p>\n");
    }
    for w in &p.warnings {
        let _ = writeln!(h, "<p class=\"note\">warning: {}</p>", escape(w));
    }
}

/// The numbered flag codes under the plate figure.
fn flag_code_list(h: &mut String, codes: &[String]) {
    if codes.is_empty() {
        return;
    }
    h.push_str("<p class=\"note\">flag codes: ");
    for (i, c) in codes.iter().enumerate() {
        let _ = write!(
            h,
            "{}<b>{}</b> {}",
            if i > 0 { ", " } else { "" },
            i + 1,
            escape(c)
        );
    }
    h.push_str("</p>\n");
}

/// One well's fit figure, numbers, specimen concentrations and notes.
fn well_section(
    h: &mut String,
    p: &PlateResult,
    k: usize,
    w: &WellResult,
    (c, fit): (&crate::curves::Curves, &crate::fit::SampleResult),
) {
    let _ = writeln!(
        h,
        "<section class=\"sample\" id=\"{}\"><h3>{} · {} · {}</h3>",
        fit_anchor(k, &w.well),
        escape(&p.plate),
        escape(&w.well),
        escape(&w.sample)
    );
    h.push_str(&sample_figure(c));
    h.push('\n');
    let typical = fit
        .components
        .iter()
        .map(|c| c.concentration_mol_per_l)
        .fold(0.0_f64, f64::max);
    let (unit, factor) = unit_for(typical);
    sample_numbers(h, fit, unit, factor);
    if (w.dilution_factor - 1.0).abs() > f64::EPSILON {
        let _ = writeln!(
            h,
            "<p class=\"note\">in the specimen (× {} dilution): {}</p>",
            w.dilution_factor,
            w.undiluted
                .iter()
                .map(|u| format!(
                    "{} {} {unit}",
                    escape(&u.name),
                    conc(u.concentration_mol_per_l, u.std_error_mol_per_l, factor)
                ))
                .collect::<Vec<_>>()
                .join("; ")
        );
    }
    for n in &w.notes {
        let _ = writeln!(h, "<p class=\"note\">{}</p>", escape(n));
    }
    let _ = writeln!(
        h,
        "<p class=\"note\"><a href=\"#{}\">back to plate {}</a></p></section>",
        plate_anchor(k),
        escape(&p.plate)
    );
}

fn replicate_table(h: &mut String, p: &PlateResult, components: &[String]) {
    if p.samples.is_empty() {
        return;
    }
    let typical = p
        .samples
        .iter()
        .flat_map(|s| s.components.iter().map(|c| c.mean_mol_per_l))
        .fold(0.0_f64, f64::max);
    let (unit, factor) = unit_for(typical);
    h.push_str("<h3>Specimens (replicate wells, dilution applied)</h3>\n<table><tr><th>specimen</th><th>role</th><th>wells</th>");
    for c in components {
        let _ = write!(h, "<th>{} ({unit}) mean ± SD (CV %)</th>", escape(c));
    }
    h.push_str("<th>outlier wells</th></tr>\n");
    for s in &p.samples {
        let _ = write!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td>",
            escape(&s.sample),
            s.role.name(),
            s.wells.len()
        );
        for c in &s.components {
            let sd = c
                .sd_mol_per_l
                .map_or("-".into(), |v| format!("{:.4}", v * factor));
            let cv = c.cv_percent.map_or("-".into(), |v| format!("{v:.1}"));
            let _ = write!(h, "<td>{:.4} ± {sd} ({cv})</td>", c.mean_mol_per_l * factor);
        }
        let _ = writeln!(
            h,
            "<td class=\"flag\">{}</td></tr>",
            escape(&s.outlier_wells.join(" "))
        );
    }
    h.push_str("</table>\n");
}

fn well_table(
    h: &mut String,
    p: &PlateResult,
    plate_no: usize,
    components: &[String],
    linked: &dyn Fn(&str) -> bool,
) {
    if p.wells.is_empty() {
        return;
    }
    let typical = p
        .wells
        .iter()
        .flat_map(|w| w.undiluted.iter().map(|u| u.concentration_mol_per_l))
        .fold(0.0_f64, f64::max);
    let (unit, factor) = unit_for(typical);
    h.push_str("<details><summary>Wells</summary>\n<table><tr><th>well</th><th>specimen</th><th>role</th><th>dilution</th>");
    for c in components {
        let _ = write!(h, "<th>{} ({unit}, specimen)</th>", escape(c));
    }
    h.push_str("<th>residual RMS (mAU)</th><th>flags</th><th>error</th></tr>\n");
    for w in &p.wells {
        let name = if linked(&w.well) {
            format!(
                "<a href=\"#{}\">{}</a>",
                fit_anchor(plate_no, &w.well),
                escape(&w.well)
            )
        } else {
            escape(&w.well)
        };
        let _ = write!(
            h,
            "<tr id=\"{}\"><td>{name}</td><td>{}</td><td>{}</td><td>{}</td>",
            row_anchor(plate_no, &w.well),
            escape(&w.sample),
            w.role.name(),
            w.dilution_factor
        );
        for j in 0..components.len() {
            match w.undiluted.get(j) {
                Some(u) => {
                    let _ = write!(
                        h,
                        "<td>{}</td>",
                        conc(u.concentration_mol_per_l, u.std_error_mol_per_l, factor)
                    );
                }
                None => h.push_str("<td>-</td>"),
            }
        }
        let rms = w
            .fit
            .as_ref()
            .map_or("-".into(), |f| format!("{:.3}", f.residual_rms * 1e3));
        let _ = writeln!(
            h,
            "<td>{rms}</td><td class=\"flag\">{}</td><td style=\"text-align:left\">{}</td></tr>",
            escape(&w.all_flags().join(" ")),
            escape(w.error.as_deref().unwrap_or(""))
        );
    }
    h.push_str("</table></details>\n");
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn viridis_runs_dark_to_light() {
        assert_eq!(viridis(0.0).0, "#440154");
        assert_eq!(viridis(1.0).0, "#fde725");
        assert_eq!(viridis(f64::NAN).0, "#440154");
        // Lightness rises monotonically (sum of channels as a rough proxy).
        let lum = |t: f64| {
            let (c, _) = viridis(t);
            let v = u32::from_str_radix(&c[1..], 16).unwrap_or(0);
            0.2126 * f64::from(v >> 16)
                + 0.7152 * f64::from((v >> 8) & 0xff)
                + 0.0722 * f64::from(v & 0xff)
        };
        let l: Vec<f64> = (0..=20).map(|i| lum(f64::from(i) / 20.0)).collect();
        assert!(l.windows(2).all(|w| w[1] > w[0]), "{l:?}");
    }

    #[test]
    fn short_numbers() {
        assert_eq!(short(123.4), "123");
        assert_eq!(short(12.34), "12.3");
        assert_eq!(short(1.234), "1.23");
        assert_eq!(short(0.1234), "0.123");
        assert_eq!(short(0.0), "0");
    }
}
