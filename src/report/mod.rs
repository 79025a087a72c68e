//! Report (output stage): one self-contained HTML file, and SVG figures,
//! from a results document ([`JsonReport`], with its optional fit curves).
//!
//! In: a [`JsonReport`]. Out: HTML text with inline CSS and inline SVG: no
//! scripts, no external fonts or images, so it opens offline in any browser.
//! The figures are drawn by [`svg`] (hand-written SVG, see DEVELOPERS.md).
//!
//! Per sample the figure has two panels: the measured spectrum (black) over
//! the fitted one (dashed) with each component's contribution l·εᵢ(λ)·cᵢ
//! stacked on the baseline; below, the residual with the ±2σ noise band and
//! the masked points. Plotted points are decimated above
//! [`MAX_PLOT_POINTS`]; the numbers in the tables never are.

pub mod check;
pub mod plates;
#[cfg(feature = "png")]
pub mod png;
pub mod qc;
pub mod svg;

use crate::curves::Curves;
use crate::fit::SampleResult;
use crate::output::JsonReport;
use std::fmt::Write;
use svg::{DASHES, PALETTE, Panel, Series, escape};

/// Most points per plotted curve (min/max per bucket above this): about
/// three pixels per point across the 520 px plot area, plenty for UV-vis bands.
pub const MAX_PLOT_POINTS: usize = 160;

/// Width of a sample figure, px.
const FIG_W: f64 = 760.0;
/// Height of a sample figure, px.
const FIG_H: f64 = 430.0;

/// The fit figure of one sample, as a standalone SVG element: the fit panel
/// (stacked contributions, measured and fitted), its legend, and the
/// residual panel.
pub fn sample_figure(c: &Curves) -> String {
    let mut out = String::with_capacity(24 * 1024);
    let _ = write!(
        out,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="fit" width="{FIG_W}" height="{FIG_H}" viewBox="0 0 {FIG_W} {FIG_H}" font-family="sans-serif" font-size="11" role="img" aria-label="fit of {}"><title>fit of {}</title>"#,
        escape(&c.sample),
        escape(&c.sample)
    );
    out.push_str(r##"<rect width="100%" height="100%" fill="#fff"/>"##);
    if c.wavelengths_nm.is_empty() {
        out.push_str("</svg>");
        return out;
    }
    let masked: Vec<usize> = (0..c.wavelengths_nm.len())
        .filter(|i| c.masked[*i])
        .collect();
    fit_panel(&mut out, c, &masked);
    fit_legend(&mut out, c, masked.len());
    residual_panel(&mut out, c, &masked);
    out.push_str("</svg>");
    out
}

/// Legend column of the sample figure, px from the left.
const LEGEND_X: f64 = 600.0;

/// The wavelength range of a figure, nm.
fn x_range(c: &Curves) -> (f64, f64) {
    let w = &c.wavelengths_nm;
    (w[0], w[w.len() - 1])
}

/// The upper panel: baseline and each component stacked on the ones before
/// it, measured and fitted curves, masked points as crosses.
fn fit_panel(out: &mut String, c: &Curves, masked: &[usize]) {
    let w = &c.wavelengths_nm;
    let n = w.len();
    let idx = svg::decimate(&c.measured_au, MAX_PLOT_POINTS);
    let sampled = Series { x: w, idx: &idx };
    let mut layers: Vec<Vec<f64>> = vec![c.baseline_au.clone()];
    for comp in &c.contributions_au {
        let below = layers.last().cloned().unwrap_or_else(|| vec![0.0; n]);
        layers.push(below.iter().zip(&comp.au).map(|(b, a)| b + a).collect());
    }
    let zero = vec![0.0; n];
    let yr = svg::range_of(
        c.measured_au
            .iter()
            .chain(&c.fitted_au)
            .chain(&c.baseline_au)
            .chain(&zero),
        0.05,
    );
    let top = Panel {
        left: 64.0,
        top: 14.0,
        width: 520.0,
        height: 250.0,
        x: x_range(c),
        y: yr,
    };
    top.axes(out, "", "absorbance (AU)", false);
    // Each layer is one polygon, its outline in the component's dash
    // pattern (the lower edge is the previous layer's top).
    for k in 0..c.contributions_au.len() {
        let colour = PALETTE[k % PALETTE.len()];
        top.band(
            out,
            &sampled,
            (&layers[k], &layers[k + 1]),
            &format!(
                r#"fill="{colour}" fill-opacity="0.35" stroke="{colour}" stroke-width="1" stroke-dasharray="{}""#,
                DASHES[k % DASHES.len()]
            ),
        );
    }
    top.line(
        out,
        &sampled,
        &c.measured_au,
        r##"stroke="#000" stroke-width="1.6""##,
    );
    top.line(
        out,
        &sampled,
        &c.fitted_au,
        r##"stroke="#D55E00" stroke-width="1.4" stroke-dasharray="5 3""##,
    );
    for &i in masked {
        top.cross(out, w[i], c.measured_au[i].clamp(yr.0, yr.1), "#CC79A7");
    }
}

/// The legend beside the fit panel: measured, fitted, each component, and
/// the masked points when there are any.
fn fit_legend(out: &mut String, c: &Curves, n_masked: usize) {
    let lx = LEGEND_X;
    let mut ly = 24.0;
    let swatch_line = |y: f64, style: &str| {
        format!(
            r#"<line x1="{lx}" y1="{y}" x2="{}" y2="{y}" {style}/>"#,
            lx + 22.0
        )
    };
    let mut entries: Vec<(String, String)> = vec![
        (
            "measured".into(),
            swatch_line(ly, r##"stroke="#000" stroke-width="1.6""##),
        ),
        (
            "fitted".into(),
            swatch_line(
                ly + 16.0,
                r##"stroke="#D55E00" stroke-width="1.4" stroke-dasharray="5 3""##,
            ),
        ),
    ];
    for (k, comp) in c.contributions_au.iter().enumerate() {
        let colour = PALETTE[k % PALETTE.len()];
        let y = ly + 16.0 * entries.len() as f64;
        entries.push((
            comp.name.clone(),
            format!(
                r#"<rect x="{lx}" y="{:.1}" width="22" height="8" fill="{colour}" fill-opacity="0.35" stroke="{colour}" stroke-dasharray="{}"/>"#,
                y - 4.0,
                DASHES[k % DASHES.len()]
            ),
        ));
    }
    if n_masked > 0 {
        let y = ly + 16.0 * entries.len() as f64;
        entries.push((
            format!("masked ({n_masked})"),
            format!(
                r##"<path d="M{} {}l6 6m0 -6l-6 6" stroke="#CC79A7" stroke-width="1.4"/>"##,
                lx + 8.0,
                y - 3.0
            ),
        ));
    }
    for (label, swatch) in entries {
        let _ = write!(
            out,
            r#"{swatch}<text x="{:.1}" y="{:.1}">{}</text>"#,
            lx + 28.0,
            ly + 4.0,
            escape(&label)
        );
        ly += 16.0;
    }
}

/// The lower panel: residuals with the ±2σ noise band.
fn residual_panel(out: &mut String, c: &Curves, masked: &[usize]) {
    let w = &c.wavelengths_nm;
    let n = w.len();
    let lx = LEGEND_X;
    let sigma = c.noise_au.filter(|s| s.is_finite() && *s > 0.0);
    let band = sigma.map(|s| 2.0 * s).unwrap_or(0.0);
    // Masked points were not fitted: their residual does not set the scale
    // (they are drawn at the panel's edge when outside it).
    let kept: Vec<f64> = (0..n)
        .filter(|i| !c.masked[*i])
        .map(|i| c.residual_au[i])
        .collect();
    let rr = svg::range_of(kept.iter().chain([band, -band].iter()), 0.08);
    let bottom = Panel {
        left: 64.0,
        top: 290.0,
        width: 520.0,
        height: 100.0,
        x: x_range(c),
        y: rr,
    };
    bottom.axes(out, "wavelength (nm)", "residual (AU)", true);
    let end_points = [0, n - 1];
    let ends = Series {
        x: w,
        idx: &end_points,
    };
    if let Some(s) = sigma {
        let lo = vec![-2.0 * s; n];
        let hi = vec![2.0 * s; n];
        bottom.band(
            out,
            &ends,
            (&lo, &hi),
            r##"fill="#56B4E9" fill-opacity="0.3" stroke="none""##,
        );
        let _ = write!(
            out,
            r#"<text x="{:.1}" y="{:.1}">±2σ noise band</text><text x="{:.1}" y="{:.1}">σ = {:.3} mAU</text>"#,
            lx,
            bottom.top + 12.0,
            lx,
            bottom.top + 28.0,
            s * 1e3
        );
    } else {
        let _ = write!(
            out,
            r#"<text x="{:.1}" y="{:.1}">no noise estimate</text>"#,
            lx,
            bottom.top + 12.0
        );
    }
    let zero = vec![0.0; n];
    bottom.line(out, &ends, &zero, r##"stroke="#444" stroke-width="0.8""##);
    let ridx = svg::decimate(&c.residual_au, MAX_PLOT_POINTS);
    bottom.line(
        out,
        &Series { x: w, idx: &ridx },
        &c.residual_au,
        r##"stroke="#000" stroke-width="1""##,
    );
    for &i in masked {
        bottom.cross(out, w[i], c.residual_au[i].clamp(rr.0, rr.1), "#CC79A7");
    }
}

/// A concentration display unit: label and factor from mol/L.
fn display_unit(samples: &[SampleResult]) -> (&'static str, f64) {
    let mut v: Vec<f64> = samples
        .iter()
        .flat_map(|s| s.components.iter().map(|c| c.concentration_mol_per_l))
        .filter(|c| *c > 0.0)
        .collect();
    v.sort_by(f64::total_cmp);
    unit_for(v.get(v.len() / 2).copied().unwrap_or(1e-6))
}

/// The display unit for concentrations of about `typical` mol/L: label and
/// factor from mol/L (the largest unit in which it reads 0.1 or more).
pub(crate) fn unit_for(typical: f64) -> (&'static str, f64) {
    let typical = if typical.is_finite() && typical > 0.0 {
        typical
    } else {
        1e-6
    };
    for (label, f) in [("mol/L", 1.0), ("mmol/L", 1e3), ("µmol/L", 1e6)] {
        if typical * f >= 0.1 {
            return (label, f);
        }
    }
    ("nmol/L", 1e9)
}

/// The anchor id of the n-th fitted sample's section.
pub fn sample_anchor(n: usize) -> String {
    format!("sample-{}", n + 1)
}

pub(crate) const CSS: &str = "body{font-family:sans-serif;margin:1.5em auto;max-width:1100px;color:#111;line-height:1.35}\
h1{font-size:1.5em}h2{font-size:1.2em;border-bottom:1px solid #999;margin-top:1.6em}h3{font-size:1.05em;margin-bottom:.3em}\
table{border-collapse:collapse;margin:.4em 0}td,th{border:1px solid #bbb;padding:2px 6px;text-align:right;white-space:nowrap}\
th{background:#eee}td.wrap{white-space:normal;text-align:left;min-width:16em}td:first-child,th:first-child{text-align:left}.flag{color:#a33f00;font-weight:bold}\
.note{color:#444;font-size:.9em}section.sample{page-break-inside:avoid}svg{max-width:100%;height:auto}\
@media print{a{color:#000;text-decoration:none}}";

/// Render the whole report as one HTML document.
pub fn render_html(doc: &JsonReport, title: &str) -> String {
    let mut h = String::with_capacity(64 * 1024 + doc.samples.len() * 40 * 1024);
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{CSS}</style></head><body>\n<h1>{}</h1>\n",
        escape(title),
        escape(title)
    );
    summary(&mut h, doc);
    let (unit, factor) = display_unit(&doc.samples);
    sample_table(&mut h, doc, unit, factor);
    qc::qc_section(&mut h, doc);
    h.push_str("<h2 id=\"fits\">Fits</h2>\n");
    if doc.curves.is_none() {
        h.push_str("<p class=\"note\">These results carry no fit curves, so no figures are drawn: write them with <code>unblend fit ... --format json --with-curves</code> (or <code>--report</code>) to get the plots.</p>\n");
    }
    for (n, s) in doc.samples.iter().enumerate() {
        let _ = writeln!(
            h,
            "<section class=\"sample\" id=\"{}\"><h3>{}</h3>",
            sample_anchor(n),
            escape(&s.sample)
        );
        if let Some(c) = doc
            .curves
            .as_ref()
            .and_then(|cs| cs.iter().find(|c| c.sample == s.sample))
        {
            h.push_str(&sample_figure(c));
            h.push('\n');
        }
        sample_numbers(&mut h, s, unit, factor);
        h.push_str("<p class=\"note\"><a href=\"#samples\">back to the table</a></p></section>\n");
    }
    if !doc.failed.is_empty() {
        h.push_str(
            "<h2 id=\"failed\">Not fitted</h2>\n<table><tr><th>sample</th><th>error</th></tr>\n",
        );
        for f in &doc.failed {
            let _ = writeln!(
                h,
                "<tr><td>{}</td><td style=\"text-align:left\">{}</td></tr>",
                escape(&f.sample),
                escape(&f.error)
            );
        }
        h.push_str("</table>\n");
    }
    h.push_str("<p class=\"note\">Results are decision support, not a certified analysis. Colours: Okabe–Ito palette; line styles differ for print.</p>\n</body></html>\n");
    h
}

fn summary(h: &mut String, doc: &JsonReport) {
    h.push_str("<h2 id=\"summary\">Summary</h2>\n<table>\n");
    let mut row = |k: &str, v: &str| {
        let _ = writeln!(
            h,
            "<tr><th>{}</th><td style=\"text-align:left\">{}</td></tr>",
            escape(k),
            escape(v)
        );
    };
    row("tool", &format!("{} {}", doc.tool.name, doc.tool.version));
    if let Some(r) = &doc.run {
        row("command", &r.command);
        row("input", &r.input);
        row("library", &r.library);
        for [k, v] in &r.options {
            row(k, v);
        }
    }
    row("components", &doc.components.join(", "));
    row("samples fitted", &doc.samples.len().to_string());
    row("samples not fitted", &doc.failed.len().to_string());
    let mut flags: Vec<(String, usize)> = Vec::new();
    for s in &doc.samples {
        for f in &s.flags {
            match flags.iter_mut().find(|(n, _)| n == f) {
                Some((_, k)) => *k += 1,
                None => flags.push((f.clone(), 1)),
            }
        }
    }
    let flagged = doc.samples.iter().filter(|s| !s.flags.is_empty()).count();
    row("samples with flags", &flagged.to_string());
    for (f, k) in &flags {
        row(&format!("flag {f}"), &format!("{k} sample(s)"));
    }
    h.push_str("</table>\n");
    warning_list(h, &doc.warnings);
}

/// The run's warnings as a list (nothing when there are none).
pub(crate) fn warning_list(h: &mut String, warnings: &[String]) {
    if !warnings.is_empty() {
        h.push_str("<h3>Warnings</h3><ul>\n");
        for w in warnings {
            let _ = writeln!(h, "<li>{}</li>", escape(w));
        }
        h.push_str("</ul>\n");
    }
}

pub(crate) fn conc(v: f64, se: Option<f64>, factor: f64) -> String {
    match se {
        Some(se) => format!("{:.4} ± {:.4}", v * factor, se * factor),
        None => format!("{:.4} ± ?", v * factor),
    }
}

fn sample_table(h: &mut String, doc: &JsonReport, unit: &str, factor: f64) {
    h.push_str("<h2 id=\"samples\">Samples</h2>\n<table><tr><th>sample</th>");
    for c in &doc.components {
        let _ = write!(h, "<th>{} ({unit})</th>", escape(c));
    }
    h.push_str("<th>residual RMS (mAU)</th><th>R²</th><th>flags</th></tr>\n");
    for (n, s) in doc.samples.iter().enumerate() {
        let _ = write!(
            h,
            "<tr><td><a href=\"#{}\">{}</a></td>",
            sample_anchor(n),
            escape(&s.sample)
        );
        for c in &s.components {
            let _ = write!(
                h,
                "<td>{}</td>",
                conc(c.concentration_mol_per_l, c.std_error_mol_per_l, factor)
            );
        }
        let _ = writeln!(
            h,
            "<td>{:.3}</td><td>{}</td><td class=\"flag\">{}</td></tr>",
            s.residual_rms * 1e3,
            s.r_squared.map_or("-".into(), |r| format!("{r:.5}")),
            escape(&s.flags.join(" "))
        );
    }
    h.push_str("</table>\n<p class=\"note\">concentrations ± standard error</p>\n");
}

pub(crate) fn sample_numbers(h: &mut String, s: &SampleResult, unit: &'static str, factor: f64) {
    h.push_str("<table><tr><th>component</th>");
    let _ = write!(h, "<th>concentration ± SE ({unit})</th>");
    h.push_str("<th>mg/L</th><th>mole fraction</th><th>mass fraction</th></tr>\n");
    let frac = |v: Option<f64>| v.map_or("-".into(), |f| format!("{f:.4}"));
    for c in &s.components {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&c.name),
            conc(c.concentration_mol_per_l, c.std_error_mol_per_l, factor),
            c.concentration_mg_per_l
                .map_or("-".into(), |m| conc(m, c.std_error_mg_per_l, 1.0)),
            frac(c.mole_fraction),
            frac(c.mass_fraction)
        );
    }
    h.push_str("</table>\n");
    let _ = write!(
        h,
        "<p class=\"note\">range {}–{} nm, {} points, pathlength {} cm, solver {}; residual RMS {:.3} mAU",
        s.range_nm[0],
        s.range_nm[1],
        s.n_points,
        s.pathlength_cm,
        escape(&s.solver),
        s.residual_rms * 1e3
    );
    if let Some(d) = &s.diagnostics {
        let _ = write!(
            h,
            ", noise σ {:.3} mAU ({})",
            d.noise_au * 1e3,
            escape(&d.noise_source)
        );
        if let Some(p) = d.alarm_p_value {
            let _ = write!(h, ", alarm p-value {p:.3e}");
        }
    }
    if let Some(m) = &s.masking {
        let _ = write!(
            h,
            "; {} point(s) above {} AU masked",
            m.n_masked, m.max_absorbance_au
        );
    }
    h.push_str("</p>\n");
    if !s.flags.is_empty() {
        let _ = writeln!(
            h,
            "<p>flags: <span class=\"flag\">{}</span></p>",
            escape(&s.flags.join(", "))
        );
    }
    let display = crate::output::DisplayUnit {
        label: unit,
        factor,
    };
    for n in crate::output::notes::notes(s, &display) {
        let _ = writeln!(h, "<p class=\"note\">{}</p>", escape(&n));
    }
}

/// The reference curves ε(λ) of a set overlaid, with the analysed range
/// shaded, as one SVG element.
pub fn references_figure(refs: &crate::reference::ReferenceSet, range_nm: [f64; 2]) -> String {
    let mut out = String::with_capacity(16 * 1024);
    let _ = write!(
        out,
        r##"<svg xmlns="http://www.w3.org/2000/svg" class="references" width="{FIG_W}" height="330" viewBox="0 0 {FIG_W} 330" font-family="sans-serif" font-size="11" role="img" aria-label="reference spectra"><title>reference spectra</title><rect width="100%" height="100%" fill="#fff"/>"##
    );
    let xs = refs
        .components
        .iter()
        .flat_map(|c| [c.grid.min_nm(), c.grid.max_nm()]);
    let xr = svg::range_of(xs.collect::<Vec<_>>().iter(), 0.0);
    let ys: Vec<f64> = refs
        .components
        .iter()
        .flat_map(|c| c.epsilon_l_per_mol_cm.iter().copied())
        .chain([0.0])
        .collect();
    let yr = svg::range_of(ys.iter(), 0.05);
    let p = Panel {
        left: 74.0,
        top: 14.0,
        width: 510.0,
        height: 270.0,
        x: xr,
        y: yr,
    };
    let (lo, hi) = (p.px(range_nm[0].max(xr.0)), p.px(range_nm[1].min(xr.1)));
    let _ = write!(
        out,
        r##"<rect x="{lo:.1}" y="{:.1}" width="{:.1}" height="{:.1}" fill="#eee"/>"##,
        p.top,
        (hi - lo).max(0.0),
        p.height
    );
    p.axes(&mut out, "wavelength (nm)", "ε (L/(mol·cm))", true);
    for (k, c) in refs.components.iter().enumerate() {
        let w = c.grid.wavelengths_nm();
        let idx = svg::decimate(&c.epsilon_l_per_mol_cm, MAX_PLOT_POINTS);
        p.line(
            &mut out,
            &Series { x: w, idx: &idx },
            &c.epsilon_l_per_mol_cm,
            &format!(
                r#"stroke="{}" stroke-width="1.6" stroke-dasharray="{}""#,
                PALETTE[k % PALETTE.len()],
                DASHES[k % DASHES.len()]
            ),
        );
        let y = 24.0 + 16.0 * k as f64;
        let _ = write!(
            out,
            r#"<line x1="600" y1="{y}" x2="622" y2="{y}" stroke="{}" stroke-width="1.6" stroke-dasharray="{}"/><text x="628" y="{:.1}">{}</text>"#,
            PALETTE[k % PALETTE.len()],
            DASHES[k % DASHES.len()],
            y + 4.0,
            escape(&c.name)
        );
    }
    let y = 24.0 + 16.0 * refs.components.len() as f64;
    let _ = write!(
        out,
        r##"<rect x="600" y="{:.1}" width="22" height="8" fill="#eee" stroke="#999"/><text x="628" y="{:.1}">range analysed</text></svg>"##,
        y - 4.0,
        y + 4.0
    );
    out
}

/// The `library check` report: the references overlaid and the
/// separability tables, as one HTML document.
pub fn render_check_html(
    refs: &crate::reference::ReferenceSet,
    check: &crate::separability::CheckReport,
    library: &str,
) -> String {
    let mut h = String::with_capacity(64 * 1024);
    let title = format!("unblend library check: {library}");
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title><style>{CSS}</style></head><body>\n<h1>{}</h1>\n",
        escape(&title),
        escape(&title)
    );
    let _ = writeln!(
        h,
        "<table><tr><th>components</th><td style=\"text-align:left\">{}</td></tr><tr><th>range</th><td style=\"text-align:left\">{}–{} nm, {} readings every {} nm</td></tr><tr><th>baseline</th><td style=\"text-align:left\">{}</td></tr><tr><th>noise, pathlength</th><td style=\"text-align:left\">{} AU per reading, {} cm</td></tr><tr><th>condition number</th><td style=\"text-align:left\">{}</td></tr><tr><th>solver</th><td style=\"text-align:left\">{}</td></tr></table>",
        escape(&check.components.join(", ")),
        check.range_nm[0],
        check.range_nm[1],
        check.n_points,
        check.step_nm,
        escape(&check.baseline),
        check.noise_au,
        check.pathlength_cm,
        check
            .condition_number
            .map_or("singular".into(), |c| format!("{c:.3e}")),
        escape(&check.solver)
    );
    h.push_str("<h2>Reference spectra</h2>\n");
    h.push_str(&references_figure(refs, check.range_nm));
    let ses: Vec<f64> = check
        .per_component
        .iter()
        .filter_map(|c| c.std_error_mol_per_l)
        .collect();
    let typical = ses.iter().copied().fold(0.0f64, f64::max).max(1e-12);
    let (unit, factor) = [
        ("mol/L", 1.0),
        ("mmol/L", 1e3),
        ("µmol/L", 1e6),
        ("nmol/L", 1e9),
    ]
    .into_iter()
    .find(|(_, f)| typical * f >= 0.1)
    .unwrap_or(("nmol/L", 1e9));
    let opt = |v: Option<f64>, f: f64| v.map_or("-".into(), |x| format!("{:.4}", x * f));
    let _ = writeln!(
        h,
        "<h2>Per component</h2>\n<table><tr><th>component</th><th>VIF</th><th>predicted SE ({unit})</th><th>LOD ({unit})</th><th>LOQ ({unit})</th></tr>"
    );
    for c in &check.per_component {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&c.name),
            c.vif.map_or("-".into(), |v| format!("{v:.2}")),
            opt(c.std_error_mol_per_l, factor),
            opt(c.lod_mol_per_l, factor),
            opt(c.loq_mol_per_l, factor)
        );
    }
    h.push_str("</table>\n<p class=\"note\">LOD 3.3 and LOQ 10 predicted standard errors (common practice).</p>\n<h2>Pairs</h2>\n<table><tr><th>pair</th><th>cosine</th><th>cosine after baseline</th><th>variance inflation</th><th>collinear</th></tr>\n");
    for p in &check.pairs {
        let _ = writeln!(
            h,
            "<tr><td>{} / {}</td><td>{:.4}</td><td>{}</td><td>{}</td><td class=\"flag\">{}</td></tr>",
            escape(&p.a),
            escape(&p.b),
            p.cosine,
            p.cosine_after_baseline
                .map_or("-".into(), |c| format!("{c:.4}")),
            p.variance_inflation
                .map_or("-".into(), |v| format!("{v:.2}")),
            if p.collinear { "yes" } else { "" }
        );
    }
    h.push_str("</table>\n");
    if let Some(b) = &check.best_range {
        let _ = writeln!(
            h,
            "<p>best-conditioned window: {}–{} nm ({} readings)</p>",
            b.range_nm[0], b.range_nm[1], b.n_points
        );
    }
    if !check.warnings.is_empty() {
        h.push_str("<h2>Warnings</h2><ul>\n");
        for w in &check.warnings {
            let _ = writeln!(h, "<li>{}</li>", escape(w));
        }
        h.push_str("</ul>\n");
    }
    h.push_str("</body></html>\n");
    h
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::curves::ComponentCurve;

    fn curves(n: usize) -> Curves {
        let w: Vec<f64> = (0..n).map(|i| 400.0 + i as f64).collect();
        let a: Vec<f64> = w
            .iter()
            .map(|x| (-(x - 500.0f64).powi(2) / 800.0).exp())
            .collect();
        Curves {
            sample: "s<1>".into(),
            wavelengths_nm: w,
            measured_au: a.clone(),
            fitted_au: a.clone(),
            baseline_au: vec![0.0; n],
            contributions_au: vec![ComponentCurve {
                name: "x".into(),
                au: a,
            }],
            residual_au: vec![0.0; n],
            noise_au: Some(1e-3),
            masked: (0..n).map(|i| i == 3).collect(),
        }
    }

    #[test]
    fn figure_is_one_closed_svg_with_decimated_lines() {
        let s = sample_figure(&curves(5000));
        assert!(s.starts_with("<svg"));
        assert!(s.ends_with("</svg>"));
        assert_eq!(s.matches("<svg").count(), 1);
        assert!(s.contains("s&lt;1&gt;"));
        // measured, fitted, zero line, residual; one polygon per component
        assert_eq!(s.matches("<polyline").count(), 4);
        assert!(s.len() < 40_000, "figure is {} bytes", s.len());
        assert!(s.contains("masked (1)"));
    }
}
