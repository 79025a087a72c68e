//! Small SVG toolkit for the report: a plot area with linear axes and
//! "nice" ticks, polylines, filled bands, markers, legends; XML escaping;
//! the colour palette; point decimation for plotting.
//!
//! Text uses the viewer's generic `sans-serif` family, so no font file is
//! embedded or fetched. Everything is written into one `String`.

use std::fmt::Write;

/// Okabe–Ito colour-blind-safe palette (M. Okabe and K. Ito, "Color
/// Universal Design (CUD): how to make figures and presentations that are
/// friendly to colorblind people", 2008; also B. Wong, Nature Methods 8:441,
/// 2011), without black (kept for the measured spectrum) and yellow (too
/// pale on white for lines): blue, orange, bluish green, vermillion, sky
/// blue, reddish purple.
pub const PALETTE: [&str; 6] = [
    "#0072B2", "#E69F00", "#009E73", "#D55E00", "#56B4E9", "#CC79A7",
];

/// Dash patterns paired with the palette so lines stay apart in grey print.
pub const DASHES: [&str; 6] = ["", "6 3", "2 2", "8 3 2 3", "4 4", "1 3"];

/// Escape text for XML/HTML content and attribute values.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// Tick positions covering [lo, hi]: steps of 1, 2 or 5 × 10ᵏ, about
/// `target` of them.
pub fn nice_ticks(lo: f64, hi: f64, target: usize) -> Vec<f64> {
    if !(lo.is_finite() && hi.is_finite()) || hi <= lo {
        return vec![lo];
    }
    let raw = (hi - lo) / target.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    (first..=last).map(|k| k as f64 * step).collect()
}

/// A tick label: short, no trailing zeros, no "-0".
pub fn tick_label(v: f64, step: f64) -> String {
    let decimals = if step >= 1.0 {
        0
    } else {
        (-step.log10()).ceil().max(0.0) as usize
    };
    let s = format!("{v:.decimals$}");
    if s.trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        "0".into()
    } else {
        s
    }
}

/// Indices of the points to plot: all of them up to `max`, else the lowest
/// and highest value of `y` in each of `max / 2` equal buckets (keeps peaks
/// and spikes), always with the first and last point.
pub fn decimate(y: &[f64], max: usize) -> Vec<usize> {
    let n = y.len();
    if n <= max || max < 4 {
        return (0..n).collect();
    }
    let buckets = max / 2;
    let mut out = Vec::with_capacity(max + 2);
    out.push(0);
    for b in 0..buckets {
        let s = b * n / buckets;
        let e = ((b + 1) * n / buckets).max(s + 1);
        let mut lo = s;
        let mut hi = s;
        for i in s..e {
            if y[i] < y[lo] {
                lo = i;
            }
            if y[i] > y[hi] {
                hi = i;
            }
        }
        out.push(lo.min(hi));
        out.push(lo.max(hi));
    }
    out.push(n - 1);
    out.dedup();
    out
}

/// A rectangular plot area mapping data coordinates to SVG pixels.
#[derive(Debug, Clone, Copy)]
pub struct Panel {
    /// Left edge of the plot area, px.
    pub left: f64,
    /// Top edge, px.
    pub top: f64,
    /// Width, px.
    pub width: f64,
    /// Height, px.
    pub height: f64,
    /// Data x range.
    pub x: (f64, f64),
    /// Data y range.
    pub y: (f64, f64),
}

/// The points a curve is drawn through: x values and the indices kept
/// (see [`decimate`]).
pub struct Series<'a> {
    /// x of every point (wavelengths, nm).
    pub x: &'a [f64],
    /// Indices of the points drawn, ascending.
    pub idx: &'a [usize],
}

impl Panel {
    /// Pixel x of data x.
    pub fn px(&self, x: f64) -> f64 {
        let (a, b) = self.x;
        let span = if b > a { b - a } else { 1.0 };
        self.left + (x - a) / span * self.width
    }

    /// Pixel y of data y.
    pub fn py(&self, y: f64) -> f64 {
        let (a, b) = self.y;
        let span = if b > a { b - a } else { 1.0 };
        self.top + self.height - (y - a) / span * self.height
    }

    /// Frame, grid lines, ticks and axis labels; `x_label` empty hides the
    /// x tick labels (a panel above another).
    pub fn axes(&self, out: &mut String, x_label: &str, y_label: &str, show_x_ticks: bool) {
        let _ = write!(
            out,
            r##"<rect x="{:.1}" y="{:.1}" width="{:.1}" height="{:.1}" fill="none" stroke="#444" stroke-width="1"/>"##,
            self.left, self.top, self.width, self.height
        );
        let xt = nice_ticks(self.x.0, self.x.1, 8);
        let xstep = if xt.len() > 1 { xt[1] - xt[0] } else { 1.0 };
        for t in &xt {
            let x = self.px(*t);
            let _ = write!(
                out,
                r##"<line x1="{x:.1}" y1="{:.1}" x2="{x:.1}" y2="{:.1}" stroke="#ddd" stroke-width="0.6"/>"##,
                self.top,
                self.top + self.height
            );
            if show_x_ticks {
                let _ = write!(
                    out,
                    r#"<text x="{x:.1}" y="{:.1}" text-anchor="middle">{}</text>"#,
                    self.top + self.height + 14.0,
                    tick_label(*t, xstep)
                );
            }
        }
        let yt = nice_ticks(self.y.0, self.y.1, 5);
        let ystep = if yt.len() > 1 { yt[1] - yt[0] } else { 1.0 };
        for t in &yt {
            let y = self.py(*t);
            let _ = write!(
                out,
                r##"<line x1="{:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="#ddd" stroke-width="0.6"/><text x="{:.1}" y="{:.1}" text-anchor="end">{}</text>"##,
                self.left,
                self.left + self.width,
                self.left - 4.0,
                y + 4.0,
                tick_label(*t, ystep)
            );
        }
        if !x_label.is_empty() {
            let _ = write!(
                out,
                r#"<text x="{:.1}" y="{:.1}" text-anchor="middle">{}</text>"#,
                self.left + self.width / 2.0,
                self.top + self.height + 30.0,
                escape(x_label)
            );
        }
        let cy = self.top + self.height / 2.0;
        let _ = write!(
            out,
            r#"<text x="{:.1}" y="{cy:.1}" text-anchor="middle" transform="rotate(-90 {:.1} {cy:.1})">{}</text>"#,
            self.left - 44.0,
            self.left - 44.0,
            escape(y_label)
        );
    }

    /// A polyline through the points `at.idx` of (x, y).
    pub fn line(&self, out: &mut String, at: &Series, y: &[f64], style: &str) {
        out.push_str(r#"<polyline fill="none" points=""#);
        for &i in at.idx {
            point(out, self.px(at.x[i]), self.py(y[i]));
        }
        let _ = write!(out, r#"" {style}/>"#);
    }

    /// A filled band between `lo` and `hi` over the points `at.idx`.
    pub fn band(&self, out: &mut String, at: &Series, (lo, hi): (&[f64], &[f64]), style: &str) {
        out.push_str(r#"<polygon points=""#);
        for &i in at.idx {
            point(out, self.px(at.x[i]), self.py(hi[i]));
        }
        for &i in at.idx.iter().rev() {
            point(out, self.px(at.x[i]), self.py(lo[i]));
        }
        let _ = write!(out, r#"" {style}/>"#);
    }

    /// A cross marker at (x, y).
    pub fn cross(&self, out: &mut String, x: f64, y: f64, colour: &str) {
        let (cx, cy) = (self.px(x), self.py(y));
        let _ = write!(
            out,
            r#"<path d="M{:.1} {:.1}L{:.1} {:.1}M{:.1} {:.1}L{:.1} {:.1}" stroke="{colour}" stroke-width="1.4"/>"#,
            cx - 3.0,
            cy - 3.0,
            cx + 3.0,
            cy + 3.0,
            cx - 3.0,
            cy + 3.0,
            cx + 3.0,
            cy - 3.0
        );
    }
}

/// One vertex of a polyline or polygon, in whole pixels: a pixel is finer
/// than the eye follows a curve at this size, and it keeps the report small
/// (an integer is half the characters of a coordinate with a decimal).
fn point(out: &mut String, x: f64, y: f64) {
    let mut b = itoa::Buffer::new();
    out.push_str(b.format(clamp_px(x)));
    out.push(',');
    out.push_str(b.format(clamp_px(y)));
    out.push(' ');
}

/// A pixel coordinate rounded to an integer; non-finite values (which a
/// plot never should hold) go to 0, huge ones are clamped.
fn clamp_px(v: f64) -> i32 {
    if v.is_finite() {
        v.round().clamp(-1e6, 1e6) as i32
    } else {
        0
    }
}

/// Data range of some series with a small margin; a flat or empty series
/// gets a unit-wide range around its value.
pub fn range_of<'a>(series: impl IntoIterator<Item = &'a f64>, margin: f64) -> (f64, f64) {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for v in series {
        if v.is_finite() {
            lo = lo.min(*v);
            hi = hi.max(*v);
        }
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    let span = hi - lo;
    if span <= f64::EPSILON * hi.abs().max(1e-300) {
        let pad = if lo.abs() > 0.0 { lo.abs() * 0.1 } else { 1e-3 };
        return (lo - pad, hi + pad);
    }
    (lo - margin * span, hi + margin * span)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_inside_the_range() {
        let t = nice_ticks(400.0, 700.0, 8);
        assert_eq!(t.first().copied().map(|v| v as i64), Some(400));
        assert_eq!(t.last().copied().map(|v| v as i64), Some(700));
        assert!(t.len() >= 4 && t.len() <= 12);
        let t = nice_ticks(-0.0013, 0.0021, 5);
        assert!(t.iter().all(|v| (-0.0013..=0.0021).contains(v)));
        assert_eq!(tick_label(-1e-18, 0.001), "0");
        assert_eq!(tick_label(0.002, 0.001), "0.002");
    }

    #[test]
    fn decimation_keeps_ends_and_the_peak() {
        let y: Vec<f64> = (0..5000)
            .map(|i| if i == 2717 { 9.0 } else { 0.0 })
            .collect();
        let idx = decimate(&y, 400);
        assert!(idx.len() <= 402);
        assert_eq!(idx[0], 0);
        assert_eq!(*idx.last().unwrap(), 4999);
        assert!(idx.contains(&2717));
        assert!(idx.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(decimate(&y[..10], 400).len(), 10);
    }

    #[test]
    fn text_is_escaped() {
        assert_eq!(escape("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }
}
