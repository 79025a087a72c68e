//! The lot-QC section of the fit report (output stage): per sample a swatch
//! of its colour beside the target's, ΔE00, pass/fail, strength bars
//! against the tolerance band, the reasons and the correction.
//!
//! In: a [`JsonReport`] whose samples carry `qc`. Out: HTML appended to the
//! page (plain HTML and CSS: no SVG, so the figure count stays one per fit).

use super::svg::escape;
use crate::output::JsonReport;
use crate::target::{Qc, Strength};
use std::fmt::Write;

/// Width of a strength bar, px; the bar spans 0–200 % of target.
const BAR_PX: f64 = 120.0;
/// Okabe–Ito vermillion (out of tolerance) and bluish green (within).
const OUT_COLOUR: &str = "#d55e00";
const IN_COLOUR: &str = "#009e73";

/// Append the QC section when any sample has QC results.
pub fn qc_section(h: &mut String, doc: &JsonReport) {
    let rows: Vec<(&str, &Qc)> = doc
        .samples
        .iter()
        .filter_map(|s| s.qc.as_deref().map(|q| (s.sample.as_str(), q)))
        .collect();
    if rows.is_empty() {
        return;
    }
    h.push_str("<h2 id=\"target\">Against the target</h2>\n<table><tr><th>sample</th><th>target</th><th>colour: sample | target</th><th>ΔE00</th><th>verdict</th><th>strength, % of target (band: tolerance)</th><th>why, and the correction</th></tr>\n");
    for (sample, qc) in rows {
        let _ = write!(h, "<tr><td>{}</td>", escape(sample));
        let target = qc.target.as_ref();
        let _ = write!(
            h,
            "<td>{}</td>",
            target.map_or("-".into(), |t| escape(&t.name))
        );
        swatches(h, qc);
        let de = qc.colour.as_ref().and_then(|c| c.colour.delta_e00);
        let _ = write!(
            h,
            "<td>{}</td>",
            de.map_or("-".into(), |d| format!("{d:.2}"))
        );
        let verdict = match target {
            Some(t) if t.pass => format!("<span style=\"color:{IN_COLOUR}\">pass</span>"),
            Some(_) => format!("<strong style=\"color:{OUT_COLOUR}\">FAIL</strong>"),
            None => "-".into(),
        };
        let _ = write!(h, "<td>{verdict}</td><td style=\"text-align:left\">");
        for s in target.map_or(&[][..], |t| &t.components[..]) {
            strength_bar(h, s);
        }
        h.push_str("</td><td style=\"text-align:left\">");
        why(h, qc);
        h.push_str("</td></tr>\n");
    }
    h.push_str("</table>\n<p class=\"note\">Colour: CIELAB from the spectrum (or the fitted model) by the CIE 15:2018 summation; the swatches are sRGB approximations for D65 and the 2° observer, and screens differ: judge colour on the numbers, not the swatch.</p>\n");
}

fn swatches(h: &mut String, qc: &Qc) {
    let Some(c) = &qc.colour else {
        let why = qc.colour_note.as_deref().unwrap_or("not asked");
        let _ = write!(h, "<td class=\"note\">{}</td>", escape(why));
        return;
    };
    let chip = |hex: &str, label: &str| {
        format!(
            "<span title=\"{label}\" style=\"display:inline-block;width:28px;height:18px;border:1px solid #888;background:{hex}\"></span>"
        )
    };
    let l = &c.colour.lab;
    let _ = write!(
        h,
        "<td>{}{} <span class=\"note\">L* {:.1} a* {:.1} b* {:.1} ({})</span></td>",
        chip(&c.colour.srgb, "sample"),
        c.target
            .as_ref()
            .map_or(String::new(), |t| chip(&t.srgb, "target")),
        l.l,
        l.a,
        l.b,
        escape(&c.source)
    );
}

fn strength_bar(h: &mut String, s: &Strength) {
    let px = |percent: f64| (percent.clamp(0.0, 200.0) / 200.0 * BAR_PX).round();
    let Some(p) = s.strength_percent else {
        let _ = write!(
            h,
            "<div>{}: not in the recipe ({:.3e} mol/L)</div>",
            escape(&s.name),
            s.measured_mol_per_l
        );
        return;
    };
    let within = (p - 100.0).abs() <= s.tolerance_percent;
    let colour = if within { IN_COLOUR } else { OUT_COLOUR };
    let _ = write!(
        h,
        "<div><span style=\"display:inline-block;position:relative;width:{BAR_PX}px;height:12px;background:#eee;vertical-align:middle\"><span style=\"position:absolute;left:{}px;width:{}px;top:0;height:12px;background:#bbd7ea\"></span><span style=\"position:absolute;left:0;width:{}px;top:4px;height:4px;background:{colour}\"></span><span style=\"position:absolute;left:{}px;width:1px;top:0;height:12px;background:#000\"></span></span> {} {p:.1} %</div>",
        px(100.0 - s.tolerance_percent),
        px(100.0 + s.tolerance_percent) - px(100.0 - s.tolerance_percent),
        px(p),
        px(100.0),
        escape(&s.name)
    );
}

fn why(h: &mut String, qc: &Qc) {
    let Some(t) = &qc.target else { return };
    for r in &t.reasons {
        let _ = write!(h, "<div>{}</div>", escape(r));
    }
    let Some(c) = qc.correction.as_ref().filter(|_| !t.pass) else {
        return;
    };
    let adds: Vec<String> = c
        .components
        .iter()
        .filter(|a| a.add_mol_per_l_of_lot > 0.0)
        .map(|a| {
            let g = a
                .add_g_per_l_of_lot
                .map_or(String::new(), |g| format!(" ({:.3} mg)", g * 1e3));
            format!(
                "{:.3} µmol {}{g}",
                a.add_mol_per_l_of_lot * 1e6,
                escape(&a.name)
            )
        })
        .collect();
    let _ = write!(
        h,
        "<div class=\"note\">correction per litre of lot: dilute to {:.4}×{}{}</div>",
        c.dilution_factor,
        if adds.is_empty() {
            String::new()
        } else {
            format!(", add {}", adds.join(", "))
        },
        c.predicted_colour
            .as_ref()
            .and_then(|p| p.delta_e00)
            .map_or(String::new(), |d| format!("; predicted ΔE00 {d:.2}"))
    );
}
