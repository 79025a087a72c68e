//! Input stage: what the numbers in a file measure, and how that is decided.
//!
//! In: a value-column heading, metadata lines, a JCAMP-DX `##YUNITS`, the
//! user's `--quantity`, and the values themselves. Out: the [`Quantity`] the
//! values are read as, where that came from, and warnings when the file and
//! the option disagree or the values look like another quantity.
//!
//! Absorbance A = −log10(T) = 2 − log10(%T) (Beer–Lambert, decadic form);
//! the napierian form divides by ln 10.

/// What the numbers in the file measure; converted to decadic absorbance on
/// input.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Quantity {
    /// Decadic absorbance A = −log10(T), AU.
    #[default]
    Absorbance,
    /// Napierian absorbance (attenuance) −ln(T); divided by ln 10.
    AbsorbanceNatural,
    /// Transmittance as a fraction 0–1.
    Transmittance,
    /// Transmittance in percent 0–100.
    TransmittancePercent,
}

impl Quantity {
    /// Convert a value read from the file to decadic absorbance, or say what
    /// was expected.
    pub fn to_absorbance(self, v: f64) -> std::result::Result<f64, &'static str> {
        match self {
            Quantity::Absorbance => Ok(v),
            Quantity::AbsorbanceNatural => Ok(v / std::f64::consts::LN_10),
            Quantity::Transmittance => {
                if v > 0.0 {
                    Ok(-v.log10())
                } else {
                    Err("a transmittance fraction above 0")
                }
            }
            Quantity::TransmittancePercent => {
                if v > 0.0 {
                    Ok(2.0 - v.log10())
                } else {
                    Err("a transmittance percentage above 0")
                }
            }
        }
    }

    pub(crate) fn noun(self) -> &'static str {
        match self {
            Quantity::Absorbance | Quantity::AbsorbanceNatural => "an absorbance (a number)",
            Quantity::Transmittance => "a transmittance fraction (a number)",
            Quantity::TransmittancePercent => "a transmittance percentage (a number)",
        }
    }
}

impl Quantity {
    /// The name the user gives with `--quantity`.
    pub fn option_name(self) -> &'static str {
        match self {
            Quantity::Absorbance => "absorbance",
            Quantity::AbsorbanceNatural => "absorbance-natural",
            Quantity::Transmittance => "transmittance",
            Quantity::TransmittancePercent => "transmittance-percent",
        }
    }

    /// The quantity a value-column heading names: `absorbance`, `abs`, `A`,
    /// `absorbance_au`, `transmittance`, `T`, `%T`, `percent transmittance`,
    /// `transmittance (%)`, in any case. `None` for other headings.
    pub fn from_heading(heading: &str) -> Option<Quantity> {
        let h = normalise(heading);
        match h.as_str() {
            "absorbance" | "abs" | "a" | "absorbance au" | "absorbance a u" | "au" | "od" => {
                Some(Quantity::Absorbance)
            }
            "transmittance" | "t" | "transmittance fraction" => Some(Quantity::Transmittance),
            "%t"
            | "% t"
            | "percent transmittance"
            | "transmittance percent"
            | "transmittance %"
            | "% transmittance"
            | "%transmittance" => Some(Quantity::TransmittancePercent),
            _ => None,
        }
    }

    /// The quantity a metadata value names, when its key names units, mode,
    /// quantity or the y axis (`Units: %T`, `Mode = Transmittance`,
    /// `##YUNITS=ABSORBANCE`). `None` when the key is about something else
    /// or the value names no quantity.
    pub fn from_metadata(key: &str, value: &str) -> Option<Quantity> {
        let k = normalise(key);
        let about = [
            "unit",
            "mode",
            "quantity",
            "measurement",
            "ordinate",
            "y axis",
            "yunits",
        ];
        if !about.iter().any(|a| k.contains(a)) {
            return None;
        }
        let v = normalise(value);
        if let Some(q) = Quantity::from_heading(&v) {
            return Some(q);
        }
        if v.contains('%') || v.contains("percent") {
            return v.contains('t').then_some(Quantity::TransmittancePercent);
        }
        if v.contains("transmittance") || v.contains("transmission") {
            return Some(Quantity::Transmittance);
        }
        v.contains("absorbance").then_some(Quantity::Absorbance)
    }

    /// The quantity a set of values most likely is when it cannot be
    /// absorbance as read: most values between 1 and 100 with a quarter
    /// above 5 (percent transmittance), or all between 0 and 1 with half
    /// above 0.7 and the largest near 1 (a transmittance fraction, whose
    /// baseline sits near 1 where an absorbance baseline sits near 0).
    /// Rules of thumb (common practice, no source); `None` when the values
    /// look like absorbances.
    pub fn suspected(values: impl Iterator<Item = f64>) -> Option<Quantity> {
        let (mut n, mut in_percent, mut above_5) = (0usize, 0usize, 0usize);
        let (mut in_fraction, mut above_07, mut max) = (0usize, 0usize, f64::NEG_INFINITY);
        for v in values.filter(|v| v.is_finite()) {
            n += 1;
            in_percent += usize::from((1.0..=100.0).contains(&v));
            above_5 += usize::from(v > 5.0);
            in_fraction += usize::from((0.0..=1.0).contains(&v));
            above_07 += usize::from(v > 0.7);
            max = max.max(v);
        }
        if n < 4 {
            return None;
        }
        if in_percent * 10 >= n * 8 && above_5 * 4 >= n {
            return Some(Quantity::TransmittancePercent);
        }
        (in_fraction == n && above_07 * 2 >= n && max >= 0.9).then_some(Quantity::Transmittance)
    }
}

/// Where the quantity of a file's values came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum QuantitySource {
    /// The user's `--quantity`.
    Option,
    /// The file: what said it (a heading, a metadata line, `##YUNITS`).
    File(String),
    /// Nothing said; absorbance assumed.
    Assumed,
}

/// The quantity a file's values are read as, and where that came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Decided {
    /// The quantity.
    pub quantity: Quantity,
    /// Where it came from.
    pub source: QuantitySource,
    /// A warning when the option overrode a file that said otherwise.
    pub warning: Option<String>,
}

/// Decide the quantity: the option wins (with a warning naming both when the
/// file said something else); else what the file says (`said`: the quantity
/// and what said it); else absorbance.
pub fn decide(given: Option<Quantity>, said: Option<(Quantity, String)>) -> Decided {
    match (given, said) {
        (Some(q), Some((f, what))) if q != f => Decided {
            quantity: q,
            source: QuantitySource::Option,
            warning: Some(format!(
                "--quantity {} overrides the file, whose {what} says {}",
                q.option_name(),
                f.option_name()
            )),
        },
        (Some(q), _) => Decided {
            quantity: q,
            source: QuantitySource::Option,
            warning: None,
        },
        (None, Some((f, what))) => Decided {
            quantity: f,
            source: QuantitySource::File(what),
            warning: None,
        },
        (None, None) => Decided {
            quantity: Quantity::Absorbance,
            source: QuantitySource::Assumed,
            warning: None,
        },
    }
}

/// A warning when values read as absorbance (because nothing said otherwise)
/// look like another quantity, suggesting the right `--quantity`.
pub fn plausibility_warning(decided: &Decided, raw: impl Iterator<Item = f64>) -> Option<String> {
    if decided.source != QuantitySource::Assumed {
        return None;
    }
    let q = Quantity::suspected(raw)?;
    Some(format!(
        "the values look like {} rather than absorbance (nothing in the file says which): if they are, give --quantity {}",
        match q {
            Quantity::TransmittancePercent => "percent transmittance (most between 1 and 100)",
            _ => "transmittance fractions (all between 0 and 1)",
        },
        q.option_name()
    ))
}

/// Lowercase, `_`/`-`/`(`/`)`/`.` as spaces, spaces collapsed.
fn normalise(s: &str) -> String {
    let s: String = s
        .chars()
        .map(|c| match c {
            '_' | '-' | '(' | ')' | '.' | '[' | ']' | ':' => ' ',
            c => c.to_ascii_lowercase(),
        })
        .collect();
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn headings_name_their_quantity_in_any_case() {
        for (h, q) in [
            ("Absorbance", Quantity::Absorbance),
            ("ABS", Quantity::Absorbance),
            ("A", Quantity::Absorbance),
            ("absorbance_au", Quantity::Absorbance),
            ("Transmittance", Quantity::Transmittance),
            ("T", Quantity::Transmittance),
            ("%T", Quantity::TransmittancePercent),
            ("Percent Transmittance", Quantity::TransmittancePercent),
            ("transmittance (%)", Quantity::TransmittancePercent),
        ] {
            assert_eq!(Quantity::from_heading(h), Some(q), "{h}");
        }
        assert_eq!(Quantity::from_heading("sample 1"), None);
    }

    #[test]
    fn metadata_lines_about_units_or_mode_name_the_quantity() {
        assert_eq!(
            Quantity::from_metadata("Units", "%T"),
            Some(Quantity::TransmittancePercent)
        );
        assert_eq!(
            Quantity::from_metadata("Measurement mode", "Transmittance"),
            Some(Quantity::Transmittance)
        );
        assert_eq!(
            Quantity::from_metadata("YUNITS", "ABSORBANCE"),
            Some(Quantity::Absorbance)
        );
        assert_eq!(Quantity::from_metadata("Operator", "Transmittance"), None);
        assert_eq!(Quantity::from_metadata("Units", "nm"), None);
    }

    #[test]
    fn the_option_wins_over_the_file_with_a_warning_naming_both() {
        let d = decide(
            Some(Quantity::Absorbance),
            Some((Quantity::TransmittancePercent, "heading '%T'".into())),
        );
        assert_eq!(d.quantity, Quantity::Absorbance);
        let w = d.warning.unwrap();
        assert!(
            w.contains("absorbance") && w.contains("transmittance-percent"),
            "{w}"
        );
        let d = decide(None, Some((Quantity::Transmittance, "heading 'T'".into())));
        assert_eq!(d.quantity, Quantity::Transmittance);
        assert_eq!(decide(None, None).quantity, Quantity::Absorbance);
    }

    #[test]
    fn percent_transmittance_read_as_absorbance_is_suspected() {
        let assumed = decide(None, None);
        let t = [95.0, 80.5, 42.0, 12.0, 60.0];
        assert!(plausibility_warning(&assumed, t.into_iter()).is_some());
        let a = [0.05, 0.31, 1.2, 0.8, 0.02, 0.4];
        assert!(plausibility_warning(&assumed, a.into_iter()).is_none());
        let fraction = [0.98, 0.95, 0.72, 0.4, 0.85, 0.99];
        let w = plausibility_warning(&assumed, fraction.into_iter()).unwrap();
        assert!(w.contains("--quantity transmittance"), "{w}");
        let given = decide(Some(Quantity::Absorbance), None);
        assert!(plausibility_warning(&given, t.into_iter()).is_none());
    }
}
