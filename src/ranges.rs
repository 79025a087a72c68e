//! Plausible ranges for the numbers a run is given, checked where they
//! enter (options, and fields through the readers), so an absurd value is
//! refused with its name and the reason instead of turning into infinities
//! or empty cells later.
//!
//! The bounds are wide on purpose: they catch typing slips and units mixed
//! up by factors of a thousand, not unusual but real measurements.
//! - Pathlength 1 µm to 10 m: thin-film and capillary cells are a few µm,
//!   long-path gas cells a few metres (common practice, no source).
//! - Wavelength 100 to 25,000 nm: vacuum ultraviolet to mid-infrared, beyond
//!   any UV-vis-NIR spectrophotometer's 175–3,300 nm (common practice, no
//!   source; recalled from instrument data sheets).
//! - Absorbance within ±10 AU: 10 AU passes one part in 10¹⁰ of the light,
//!   far past any photometer's stray-light floor (about 4–6 AU; common
//!   practice, no source).

use crate::error::{Error, Result};

/// A closed interval of plausible values with its unit and reason.
#[derive(Debug, Clone, Copy)]
pub struct Plausible {
    /// What the value is, for messages ("pathlength").
    pub what: &'static str,
    /// Lowest plausible value, in `unit`.
    pub low: f64,
    /// Highest plausible value, in `unit`.
    pub high: f64,
    /// The unit of the value, with its leading space (" cm").
    pub unit: &'static str,
    /// The range in words, with the reason (after "expected ").
    pub expected: &'static str,
}

/// Pathlength in cm: 1 µm to 10 m.
pub const PATHLENGTH_CM: Plausible = Plausible {
    what: "pathlength",
    low: 1e-4,
    high: 1000.0,
    unit: " cm",
    expected: "1 µm to 10 m (0.0001 to 1000 cm)",
};

/// Wavelength in nm: 100 to 25,000 nm.
pub const WAVELENGTH_NM: Plausible = Plausible {
    what: "wavelength",
    low: 100.0,
    high: 25_000.0,
    unit: " nm",
    expected: "100 to 25,000 nm, vacuum ultraviolet to mid-infrared",
};

/// Absorbance in AU: within ±10 AU.
pub const ABSORBANCE_AU: Plausible = Plausible {
    what: "absorbance",
    low: -10.0,
    high: 10.0,
    unit: " AU",
    expected: "within ±10 AU; no photometer reads past about 6 AU",
};

impl Plausible {
    /// The value if it is finite and inside the range, else an error naming
    /// the value and the range.
    pub fn check(&self, value: f64) -> Result<f64> {
        if value.is_finite() && (self.low..=self.high).contains(&value) {
            return Ok(value);
        }
        Err(Error::OutOfRange {
            option: self.what,
            value,
            unit: self.unit,
            expected: self.expected,
        })
    }

    /// Parse an option's text and check it (for command-line parsers).
    pub fn parse(&self, text: &str) -> std::result::Result<f64, String> {
        let value: f64 = text
            .trim()
            .parse()
            .map_err(|_| format!("'{text}': expected a number of{}", self.unit))?;
        self.check(value).map_err(|e| e.to_string())
    }
}

/// A value as a person would write it: plain for everyday sizes, with an
/// exponent for the very large or small (`1e308`, not 309 digits).
pub fn shown(value: &f64) -> String {
    let a = value.abs();
    if a != 0.0 && a.is_finite() && !(1e-4..1e6).contains(&a) {
        format!("{value:e}")
    } else {
        format!("{value}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn values_at_the_bounds_pass_and_beyond_them_fail() {
        assert!(PATHLENGTH_CM.check(1e-4).is_ok());
        assert!(PATHLENGTH_CM.check(1000.0).is_ok());
        // The case of the hardening campaign: 1e-320 cm gave infinities.
        let e = PATHLENGTH_CM.check(1e-320).unwrap_err().to_string();
        assert!(e.starts_with("pathlength 1e-320 cm: "), "{e}");
        assert!(e.contains("1 µm to 10 m"), "{e}");
        assert!(WAVELENGTH_NM.check(1e308).is_err());
        assert!(WAVELENGTH_NM.check(99.9).is_err());
        assert!(ABSORBANCE_AU.check(-1e308).is_err());
        assert!(ABSORBANCE_AU.check(f64::NAN).is_err());
        assert!(ABSORBANCE_AU.check(-0.05).is_ok());
    }

    #[test]
    fn negative_and_malformed_option_text_is_explained() {
        let e = PATHLENGTH_CM.parse("-1").unwrap_err();
        assert!(e.starts_with("pathlength -1 cm: expected 1 µm"), "{e}");
        let e = PATHLENGTH_CM.parse("1cm").unwrap_err();
        assert_eq!(e, "'1cm': expected a number of cm");
    }
}
