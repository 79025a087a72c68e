//! The plate figure: one heatmap per component, then the state map, as one
//! SVG element, laid out two panels to a row.

use super::{State, fit_anchor, row_anchor, short, specimen, viridis};
use crate::batch::{PlateResult, WellResult};
use crate::input::plate::Well;
use crate::input::platemap::Role;
use crate::report::svg::escape;
use crate::report::unit_for;
use std::fmt::Write;

/// What a plate figure shows.
pub struct FigureInputs<'a> {
    /// The plate.
    pub plate: &'a PlateResult,
    /// Its number in the report (for the anchors).
    pub plate_no: usize,
    /// The components, one heatmap each.
    pub components: &'a [String],
    /// The flags in the order of their numbers in the state map.
    pub flag_codes: &'a [String],
    /// Whether a well has a fit figure (its cells link there, else to its
    /// table row).
    pub linked: &'a dyn Fn(&str) -> bool,
}

/// Sizes of the figure, px.
struct Layout {
    rows: u8,
    cols: u8,
    cell: f64,
    panel_w: f64,
    panel_h: f64,
}

/// A figure being drawn: what it shows, its sizes and the wells on the grid.
struct Canvas<'a> {
    f: &'a FigureInputs<'a>,
    l: Layout,
    wells: Vec<(Well, &'a WellResult)>,
}

/// Where one panel is: its corner (x0, y0) and the grid's corner (gx, gy).
struct Panel {
    x0: f64,
    y0: f64,
    gx: f64,
    gy: f64,
}

const LABEL_W: f64 = 18.0;
const TITLE_H: f64 = 30.0;
const PER_ROW: usize = 2;

/// The plate figure as one SVG element.
pub fn plate_figure(f: &FigureInputs) -> String {
    let p = f.plate;
    let (rows, cols) = super::dims(p);
    let cell = if cols > 12 { 14.0 } else { 27.0 };
    let panel_w = LABEL_W + f64::from(cols) * cell + 10.0;
    let grid_h = 14.0 + f64::from(rows) * cell;
    let legend_h = 44.0;
    let l = Layout {
        rows,
        cols,
        cell,
        panel_w,
        panel_h: TITLE_H + grid_h + legend_h,
    };
    let n_panels = f.components.len() + 1;
    let n_rows = n_panels.div_ceil(PER_ROW);
    let width = (l.panel_w * PER_ROW as f64 + 20.0).ceil();
    let height = (l.panel_h * n_rows as f64 + 10.0).ceil();
    let mut out = String::with_capacity(8 * 1024 * n_panels);
    let _ = write!(
        out,
        r##"<svg xmlns="http://www.w3.org/2000/svg" class="plate" width="{width}" height="{height}" viewBox="0 0 {width} {height}" font-family="sans-serif" font-size="10" role="img" aria-label="plate {name}"><title>plate {name}: concentrations and well states</title><rect width="100%" height="100%" fill="#fff"/>"##,
        name = escape(&p.plate)
    );
    let wells: Vec<(Well, &WellResult)> = p
        .wells
        .iter()
        .filter_map(|w| Well::parse(&w.well).map(|k| (k, w)))
        .filter(|(k, _)| k.row < rows && k.col < cols)
        .collect();
    let canvas = Canvas { f, l, wells };
    let l = &canvas.l;
    for panel in 0..n_panels {
        let x0 = 10.0 + (panel % PER_ROW) as f64 * l.panel_w;
        let y0 = 5.0 + (panel / PER_ROW) as f64 * l.panel_h;
        let at = Panel {
            x0,
            y0,
            gx: x0 + LABEL_W,
            gy: y0 + TITLE_H + 14.0,
        };
        empty_grid(&mut out, l, &at);
        if panel < f.components.len() {
            component_panel(&mut out, &canvas, &at, panel);
        } else {
            state_panel(&mut out, &canvas, &at);
            state_legend(&mut out, l, &at);
        }
    }
    out.push_str("</svg>");
    out
}

/// Row letters, column numbers and the empty grid: every position, so
/// unread wells show as blank outlines.
fn empty_grid(out: &mut String, l: &Layout, at: &Panel) {
    let (gx, gy, cell) = (at.gx, at.gy, l.cell);
    for c in 0..l.cols {
        if l.cols <= 12 || c % 2 == 0 {
            let _ = write!(
                out,
                r#"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="9">{}</text>"#,
                gx + (f64::from(c) + 0.5) * cell,
                gy - 4.0,
                c + 1
            );
        }
    }
    for r in 0..l.rows {
        let _ = write!(
            out,
            r#"<text x="{:.1}" y="{:.1}" text-anchor="end" font-size="9">{}</text>"#,
            gx - 3.0,
            gy + (f64::from(r) + 0.5) * cell + 3.0,
            (b'A' + r) as char
        );
    }
    let _ = write!(
        out,
        r##"<rect x="{gx:.1}" y="{gy:.1}" width="{:.1}" height="{:.1}" fill="#fafafa" stroke="#999" stroke-width="0.6"/>"##,
        f64::from(l.cols) * cell,
        f64::from(l.rows) * cell
    );
}

/// The heatmap of component `j` in the specimen, with its colour bar.
fn component_panel(out: &mut String, canvas: &Canvas, at: &Panel, j: usize) {
    let (f, l, wells) = (canvas.f, &canvas.l, &canvas.wells);
    let max = wells
        .iter()
        .filter(|(_, w)| w.role != Role::Blank)
        .filter_map(|(_, w)| specimen(w, j))
        .filter(|v| v.is_finite())
        .fold(0.0_f64, f64::max);
    let (unit, factor) = unit_for(max);
    let _ = write!(
        out,
        r#"<text x="{:.1}" y="{:.1}" font-size="12" font-weight="bold">{} ({unit}, in the specimen)</text>"#,
        at.x0,
        at.y0 + 16.0,
        escape(&f.components[j])
    );
    let cell = l.cell;
    for (k, w) in wells {
        let (x, y) = (
            at.gx + f64::from(k.col) * cell,
            at.gy + f64::from(k.row) * cell,
        );
        let value = (w.role != Role::Blank)
            .then(|| specimen(w, j))
            .flatten()
            .filter(|v| v.is_finite());
        let tip = match value {
            Some(v) => format!(
                "{} · {} · {} {:.4} {unit}",
                w.well,
                w.sample,
                f.components[j],
                v * factor
            ),
            None if w.role == Role::Blank => format!("{} · blank", w.well),
            None => format!("{} · {} · not fitted", w.well, w.sample),
        };
        open_link(out, f, &w.well);
        match value {
            Some(v) => {
                let t = if max > 0.0 { v / max } else { 0.0 };
                let (fill, light) = viridis(t);
                let _ = write!(
                    out,
                    r##"<rect x="{x:.1}" y="{y:.1}" width="{cell:.1}" height="{cell:.1}" fill="{fill}" stroke="#fff" stroke-width="0.5"><title>{}</title></rect>"##,
                    escape(&tip)
                );
                if l.cols <= 12 {
                    let _ = write!(
                        out,
                        r##"<text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="8" fill="{}" pointer-events="none">{}</text>"##,
                        x + cell / 2.0,
                        y + cell / 2.0 + 3.0,
                        if light { "#000" } else { "#fff" },
                        short(v * factor)
                    );
                }
            }
            None => {
                let (fill, ink, code, _) = State::of(w).style();
                let _ = write!(
                    out,
                    r##"<rect x="{x:.1}" y="{y:.1}" width="{cell:.1}" height="{cell:.1}" fill="{fill}" stroke="#fff" stroke-width="0.5"><title>{}</title></rect><text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="9" fill="{ink}" pointer-events="none">{code}</text>"##,
                    escape(&tip),
                    x + cell / 2.0,
                    y + cell / 2.0 + 3.0
                );
            }
        }
        out.push_str("</a>");
    }
    colour_bar(out, l, at, max * factor, unit);
}

/// Colour bar from 0 to the plate's largest value (in `unit`).
fn colour_bar(out: &mut String, l: &Layout, at: &Panel, max: f64, unit: &str) {
    let gx = at.gx;
    let by = at.gy + f64::from(l.rows) * l.cell + 10.0;
    let bw = f64::from(l.cols) * l.cell;
    let steps = 24;
    for s in 0..steps {
        let (fill, _) = viridis((f64::from(s) + 0.5) / f64::from(steps));
        let _ = write!(
            out,
            r#"<rect x="{:.1}" y="{by:.1}" width="{:.2}" height="8" fill="{fill}"/>"#,
            gx + bw * f64::from(s) / f64::from(steps),
            bw / f64::from(steps) + 0.3
        );
    }
    let _ = write!(
        out,
        r#"<text x="{gx:.1}" y="{:.1}">0</text><text x="{:.1}" y="{:.1}" text-anchor="end">{} {unit}</text>"#,
        by + 19.0,
        gx + bw,
        by + 19.0,
        short(max)
    );
}

/// The map of the wells' states, each cell with its code or flag number.
fn state_panel(out: &mut String, canvas: &Canvas, at: &Panel) {
    let (f, l, wells) = (canvas.f, &canvas.l, &canvas.wells);
    let _ = write!(
        out,
        r#"<text x="{:.1}" y="{:.1}" font-size="12" font-weight="bold">well states and flags</text>"#,
        at.x0,
        at.y0 + 16.0
    );
    let cell = l.cell;
    for (k, w) in wells {
        let (x, y) = (
            at.gx + f64::from(k.col) * cell,
            at.gy + f64::from(k.row) * cell,
        );
        let (fill, ink, _, _) = State::of(w).style();
        open_link(out, f, &w.well);
        let _ = write!(
            out,
            r##"<rect x="{x:.1}" y="{y:.1}" width="{cell:.1}" height="{cell:.1}" fill="{fill}" stroke="#fff" stroke-width="0.5"><title>{}</title></rect><text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="{}" fill="{ink}" pointer-events="none">{}</text></a>"##,
            escape(&state_tip(w)),
            x + cell / 2.0,
            y + cell / 2.0 + 3.0,
            if l.cols <= 12 { 9 } else { 8 },
            escape(&state_label(w, f.flag_codes, l.cols))
        );
    }
}

/// A well's label in the state map: its state's code, or for a flagged well
/// the first flag's number, "+" when there are more.
fn state_label(w: &WellResult, flag_codes: &[String], cols: u8) -> String {
    let state = State::of(w);
    let (_, _, code, _) = state.style();
    let flags = w.all_flags();
    let mut label = code.to_string();
    if (state == State::Flagged || state == State::Outlier)
        && let Some(n) = flags
            .first()
            .and_then(|f| flag_codes.iter().position(|c| c == f))
    {
        label = (n + 1).to_string();
        if flags.len() > 1 && cols <= 12 {
            label.push('+');
        }
    }
    label
}

/// A well's tooltip in the state map: well, role, sample, flags, error.
fn state_tip(w: &WellResult) -> String {
    let flags = w.all_flags();
    let mut tip = format!("{} · {}", w.well, w.role.name());
    if !w.sample.is_empty() {
        let _ = write!(tip, " {}", w.sample);
    }
    if !flags.is_empty() {
        let _ = write!(tip, " · {}", flags.join(", "));
    }
    if let Some(e) = &w.error {
        let _ = write!(tip, " · {e}");
    }
    tip
}

/// Legend of the states, two to a line.
fn state_legend(out: &mut String, l: &Layout, at: &Panel) {
    let ly = at.gy + f64::from(l.rows) * l.cell + 8.0;
    for (i, s) in [
        State::Fitted,
        State::Flagged,
        State::Outlier,
        State::Blank,
        State::Failed,
    ]
    .iter()
    .enumerate()
    {
        let (fill, ink, code, text) = s.style();
        let lx = at.gx + (i % 2) as f64 * (l.panel_w / 2.0 - 10.0);
        let yy = ly + (i / 2) as f64 * 12.0;
        let _ = write!(
            out,
            r##"<rect x="{lx:.1}" y="{yy:.1}" width="10" height="10" fill="{fill}" stroke="#999" stroke-width="0.5"/><text x="{:.1}" y="{:.1}" text-anchor="middle" font-size="8" fill="{ink}">{code}</text><text x="{:.1}" y="{:.1}" font-size="9">{text}</text>"##,
            lx + 5.0,
            yy + 8.0,
            lx + 14.0,
            yy + 9.0
        );
    }
}

/// Open a well's link: to its fit figure when it has one, else to its row.
fn open_link(out: &mut String, f: &FigureInputs, well: &str) {
    let target = if (f.linked)(well) {
        fit_anchor(f.plate_no, well)
    } else {
        row_anchor(f.plate_no, well)
    };
    let _ = write!(out, r##"<a href="#{target}">"##);
}
