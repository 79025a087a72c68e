//! CIELAB, CIE LCh, CIEDE2000 and sRGB from tristimulus values.
//!
//! In: CIE XYZ (Y of the perfect transmitter = 100) and the white point of
//! the same illuminant and observer. Out: [`Lab`] with C*ab and hab, colour
//! differences ΔE00, and an 8-bit sRGB triple for a swatch.
//!
//! CIELAB (CIE 15:2018, section 8.2.1):
//!
//! ```text
//! L* = 116·f(Y/Yn) − 16,  a* = 500·(f(X/Xn) − f(Y/Yn)),  b* = 200·(f(Y/Yn) − f(Z/Zn))
//! f(t) = t^(1/3) for t > (6/29)³, else t/(3·(6/29)²) + 4/29
//! C*ab = √(a*² + b*²),  hab = atan2(b*, a*) in degrees, 0–360
//! ```
//!
//! CIEDE2000 follows the implementation notes of Sharma, Wu & Dalal,
//! Color Res. Appl. 30:21 (2005), equations (1)–(17), with kL = kC = kH = 1.

use serde::{Deserialize, Serialize};

/// A CIE XYZ triple on the scale where the perfect transmitter has Y = 100.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Xyz {
    /// X tristimulus value.
    pub x: f64,
    /// Y tristimulus value (luminance factor × 100).
    pub y: f64,
    /// Z tristimulus value.
    pub z: f64,
}

/// A CIELAB colour with its chroma and hue angle.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Lab {
    /// Lightness L*.
    #[serde(rename = "L")]
    pub l: f64,
    /// Red–green coordinate a*.
    pub a: f64,
    /// Yellow–blue coordinate b*.
    pub b: f64,
    /// Chroma C*ab.
    #[serde(rename = "C")]
    pub c: f64,
    /// Hue angle hab in degrees, 0–360.
    #[serde(rename = "h")]
    pub h_deg: f64,
}

/// CIELAB of `xyz` relative to the white point `white` (CIE 15:2018).
pub fn lab_from_xyz(xyz: Xyz, white: Xyz) -> Lab {
    let fx = lab_f(xyz.x / white.x);
    let fy = lab_f(xyz.y / white.y);
    let fz = lab_f(xyz.z / white.z);
    from_lab(116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz))
}

/// A [`Lab`] from L*, a*, b*, with C*ab and hab computed.
pub fn from_lab(l: f64, a: f64, b: f64) -> Lab {
    Lab {
        l,
        a,
        b,
        c: a.hypot(b),
        h_deg: hue_deg(b, a),
    }
}

fn lab_f(t: f64) -> f64 {
    const DELTA: f64 = 6.0 / 29.0;
    if t > DELTA * DELTA * DELTA {
        t.cbrt()
    } else {
        t / (3.0 * DELTA * DELTA) + 4.0 / 29.0
    }
}

/// atan2(y, x) in degrees on 0–360; 0 for the origin.
fn hue_deg(y: f64, x: f64) -> f64 {
    if x == 0.0 && y == 0.0 {
        return 0.0;
    }
    let h = y.atan2(x).to_degrees();
    if h < 0.0 { h + 360.0 } else { h }
}

/// The CIEDE2000 colour difference ΔE00 between two CIELAB colours
/// (Sharma, Wu & Dalal 2005; parametric factors kL = kC = kH = 1).
pub fn delta_e00(one: &Lab, two: &Lab) -> f64 {
    let (p1, p2) = primed(one, two);
    let dl = two.l - one.l;
    let dc = p2.c - p1.c;
    let dh_deg = hue_difference_deg(&p1, &p2);
    let dh_big = 2.0 * (p1.c * p2.c).sqrt() * (dh_deg.to_radians() / 2.0).sin();
    let l_bar = (one.l + two.l) / 2.0;
    let c_bar = (p1.c + p2.c) / 2.0;
    let h_bar = mean_hue_deg(&p1, &p2);
    let t = 1.0 - 0.17 * (h_bar - 30.0).to_radians().cos()
        + 0.24 * (2.0 * h_bar).to_radians().cos()
        + 0.32 * (3.0 * h_bar + 6.0).to_radians().cos()
        - 0.20 * (4.0 * h_bar - 63.0).to_radians().cos();
    let d_theta_deg = 30.0 * (-((h_bar - 275.0) / 25.0).powi(2)).exp();
    let rc = 2.0 * seventh_ratio(c_bar).sqrt();
    let l50 = (l_bar - 50.0).powi(2);
    let sl = 1.0 + 0.015 * l50 / (20.0 + l50).sqrt();
    let sc = 1.0 + 0.045 * c_bar;
    let sh = 1.0 + 0.015 * c_bar * t;
    let rt = -(2.0 * d_theta_deg).to_radians().sin() * rc;
    let (l_term, c_term, h_term) = (dl / sl, dc / sc, dh_big / sh);
    (l_term * l_term + c_term * c_term + h_term * h_term + rt * c_term * h_term).sqrt()
}

/// C̄⁷ / (C̄⁷ + 25⁷), the chroma weight of G and R_C.
fn seventh_ratio(c: f64) -> f64 {
    let c7 = c.powi(7);
    c7 / (c7 + 25f64.powi(7))
}

/// C′ and h′ of both colours (equations 2–7).
struct Primed {
    c: f64,
    h_deg: f64,
}

fn primed(one: &Lab, two: &Lab) -> (Primed, Primed) {
    let c_bar = (one.a.hypot(one.b) + two.a.hypot(two.b)) / 2.0;
    let g = 0.5 * (1.0 - seventh_ratio(c_bar).sqrt());
    let prime = |lab: &Lab| {
        let a = (1.0 + g) * lab.a;
        Primed {
            c: a.hypot(lab.b),
            h_deg: hue_deg(lab.b, a),
        }
    };
    (prime(one), prime(two))
}

/// Δh′ (equation 10): the signed hue difference on −180–180 degrees.
fn hue_difference_deg(p1: &Primed, p2: &Primed) -> f64 {
    if p1.c * p2.c == 0.0 {
        return 0.0;
    }
    let d = p2.h_deg - p1.h_deg;
    if d.abs() <= 180.0 {
        d
    } else if d > 180.0 {
        d - 360.0
    } else {
        d + 360.0
    }
}

/// h̄′ (equation 14): the mean hue, taking the short way round the circle.
fn mean_hue_deg(p1: &Primed, p2: &Primed) -> f64 {
    let sum = p1.h_deg + p2.h_deg;
    if p1.c * p2.c == 0.0 {
        sum
    } else if (p1.h_deg - p2.h_deg).abs() <= 180.0 {
        sum / 2.0
    } else if sum < 360.0 {
        (sum + 360.0) / 2.0
    } else {
        (sum - 360.0) / 2.0
    }
}

/// 8-bit sRGB (IEC 61966-2-1) of an XYZ seen under D65 with the CIE 1931 2°
/// observer, clipped to the gamut: for a swatch on screen, which only
/// approximates the solution's colour (screens differ).
pub fn srgb8(xyz_d65: Xyz) -> [u8; 3] {
    let (x, y, z) = (xyz_d65.x / 100.0, xyz_d65.y / 100.0, xyz_d65.z / 100.0);
    // IEC 61966-2-1:1999, the XYZ → linear sRGB matrix.
    let linear = [
        3.2406 * x - 1.5372 * y - 0.4986 * z,
        -0.9689 * x + 1.8758 * y + 0.0415 * z,
        0.0557 * x - 0.2040 * y + 1.0570 * z,
    ];
    linear.map(|v| {
        let v = v.clamp(0.0, 1.0);
        let encoded = if v <= 0.003_130_8 {
            12.92 * v
        } else {
            1.055 * v.powf(1.0 / 2.4) - 0.055
        };
        // Clamped to 0–1 above, so the rounded value fits a byte.
        (encoded * 255.0).round() as u8
    })
}

/// `#rrggbb` for an 8-bit sRGB triple.
pub fn hex(rgb: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", rgb[0], rgb[1], rgb[2])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn white_is_l100_and_neutral() {
        let w = Xyz {
            x: 95.047,
            y: 100.0,
            z: 108.883,
        };
        let lab = lab_from_xyz(w, w);
        assert!((lab.l - 100.0).abs() < 1e-12 && lab.c < 1e-12);
    }

    #[test]
    fn identical_colours_differ_by_zero() {
        let c = from_lab(50.0, 20.0, -30.0);
        assert!(delta_e00(&c, &c).abs() < 1e-12);
    }

    #[test]
    fn perfect_transmitter_under_d65_is_white_in_srgb() {
        // D65 white point for the 2° observer (CIE 15:2018 table 1, rounded).
        let w = Xyz {
            x: 95.047,
            y: 100.0,
            z: 108.883,
        };
        assert_eq!(srgb8(w), [255, 255, 255]);
        assert_eq!(hex([255, 0, 16]), "#ff0010");
    }
}
