//! Error types shared by every stage.
//!
//! Each variant carries the data a user needs to find the problem: the line,
//! column and offending text for parse errors, the component and wavelength for
//! model errors. Messages are lowercase with no trailing period; the CLI adds
//! the file path as context.

use thiserror::Error;

/// Where in a text input something was found (1-based line and column).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    /// 1-based line number in the input.
    pub line: usize,
    /// 1-based field (column) number, when the problem is in one field.
    pub column: Option<usize>,
}

impl std::fmt::Display for Location {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.column {
            Some(c) => write!(f, "line {}, column {}", self.line, c),
            None => write!(f, "line {}", self.line),
        }
    }
}

/// Everything that can go wrong inside the engine.
#[derive(Debug, Error)]
#[non_exhaustive]
pub enum Error {
    /// A field could not be read as what was expected.
    #[error("{at} ('{value}'): expected {expected}")]
    Parse {
        /// Where the field is.
        at: Location,
        /// The text found (shortened if long).
        value: String,
        /// What was expected there.
        expected: String,
    },
    /// The structure of the input is wrong (header, row length, empty file).
    #[error("{at}: {message}")]
    Structure {
        /// Where the problem was noticed.
        at: Location,
        /// What is wrong.
        message: String,
    },
    /// The input has no data at all.
    #[error("the input is empty: expected a header line and at least one spectrum")]
    Empty,
    /// A spectrum or curve failed validation.
    #[error("{0}")]
    Invalid(String),
    /// A named reference component is not in the library.
    #[error("no component named '{name}' in the library (available: {available})")]
    UnknownComponent {
        /// The name asked for.
        name: String,
        /// The names that are there, comma separated.
        available: String,
    },
    /// The wavelength ranges of sample and references do not overlap enough.
    #[error("{0}")]
    NoOverlap(String),
    /// The reference set cannot be solved (collinear or degenerate).
    #[error("{0}")]
    Degenerate(String),
    /// A component file is malformed.
    #[error("component file {path}: {message}")]
    ComponentFile {
        /// The file.
        path: String,
        /// What is wrong with it.
        message: String,
    },
    /// An output is the same file as an input (or as another output).
    #[error("{output} is the same file as {other}: {why}; choose another output name")]
    SameFile {
        /// The output: its role (an option name such as `--out`) and path.
        output: String,
        /// The other file: its role (`input`, `--report`) and path.
        other: String,
        /// What writing would do.
        why: &'static str,
    },
    /// A line of a text input is longer than any reading has a reason to be.
    #[error("line {line} is longer than {limit_mib} MiB: expected a text file with line breaks")]
    LineTooLong {
        /// The 1-based line number.
        line: usize,
        /// The limit in MiB.
        limit_mib: usize,
    },
    /// An option's value is outside what it accepts.
    #[error("{option} {}{unit}: expected {expected}", crate::ranges::shown(.value))]
    OutOfRange {
        /// The option, in words ("pathlength", "linearity tolerance").
        option: &'static str,
        /// The value given.
        value: f64,
        /// The unit shown after the value, with its leading space ("" if none).
        unit: &'static str,
        /// What it accepts.
        expected: &'static str,
    },
    /// Samples in an input have no row in the list that should name them all.
    #[error("the {list} has no row for {} of the {input}: {expected}", quoted_list(.samples))]
    UnlistedSamples {
        /// The list that lacks rows ("concentration file").
        list: &'static str,
        /// The input whose samples are not listed ("spectra file").
        input: &'static str,
        /// The sample identifiers.
        samples: Vec<String>,
        /// What to do about it.
        expected: &'static str,
    },
    /// A list names samples that an input does not have.
    #[error("the {list} names {} that the {input} does not have: {expected}", join_some(.samples))]
    MissingSamples {
        /// The list ("concentration file").
        list: &'static str,
        /// The input ("spectra file").
        input: &'static str,
        /// The samples, each with where it is named.
        samples: Vec<String>,
        /// What to do about it.
        expected: &'static str,
    },
    /// A wavelength is not a positive finite number.
    #[error("wavelength {position} ({value}) must be a positive finite number of nm")]
    BadWavelength {
        /// 1-based position in the list.
        position: usize,
        /// The value found.
        value: f64,
    },
    /// A wavelength repeats or breaks the order of the list.
    #[error(
        "wavelength {value_nm} nm {} (position {position} after {previous_nm} nm): wavelengths must be strictly ascending or strictly descending",
        order_word(.repeated)
    )]
    WavelengthOrder {
        /// 1-based position in the list.
        position: usize,
        /// The wavelength found there, nm.
        value_nm: f64,
        /// The one before it, nm.
        previous_nm: f64,
        /// Whether it equals the one before (else it is smaller).
        repeated: bool,
    },
    /// A spectrum has a different number of values than its grid.
    #[error("sample '{sample}': {values} absorbance values for {wavelengths} wavelengths")]
    LengthMismatch {
        /// Sample identifier.
        sample: String,
        /// Number of absorbance values.
        values: usize,
        /// Number of wavelengths expected.
        wavelengths: usize,
    },
    /// A spectrum holds a value that is not a finite number.
    #[error("sample '{sample}': absorbance at {wavelength_nm} nm is not a finite number")]
    NotFinite {
        /// Sample identifier.
        sample: String,
        /// Where, nm.
        wavelength_nm: f64,
    },
    /// Reading or writing a file failed.
    #[error("{path}: {source}")]
    Io {
        /// The file involved.
        path: String,
        /// The operating system's error.
        #[source]
        source: std::io::Error,
    },
}

/// Result alias used throughout the library.
pub type Result<T, E = Error> = std::result::Result<T, E>;

impl Error {
    /// `Ok` when an option's `value` is finite and positive, else
    /// [`Error::OutOfRange`] with what it `expected`.
    pub fn require_positive(
        option: &'static str,
        value: f64,
        unit: &'static str,
        expected: &'static str,
    ) -> Result<()> {
        if value.is_finite() && value > 0.0 {
            return Ok(());
        }
        Err(Error::OutOfRange {
            option,
            value,
            unit,
            expected,
        })
    }

    /// Build a parse error, shortening very long or binary values for display.
    pub fn parse(line: usize, column: usize, raw: &[u8], expected: impl Into<String>) -> Self {
        Error::Parse {
            at: Location {
                line,
                column: Some(column),
            },
            value: shorten(raw),
            expected: expected.into(),
        }
    }

    /// Build a structure error at a line.
    pub fn structure(line: usize, message: impl Into<String>) -> Self {
        Error::Structure {
            at: Location { line, column: None },
            message: message.into(),
        }
    }

    /// Wrap an I/O error with the path it concerns.
    pub fn io(path: impl Into<String>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }
}

/// Render raw bytes for an error message: lossy UTF-8, control characters
/// escaped, at most 40 characters.
pub fn shorten(raw: &[u8]) -> String {
    let text = String::from_utf8_lossy(raw);
    let mut out = String::new();
    for (i, ch) in text.chars().enumerate() {
        if i >= 40 {
            out.push('…');
            break;
        }
        if ch.is_control() {
            out.extend(ch.escape_default());
        } else {
            out.push(ch);
        }
    }
    out
}

/// How a wavelength breaks the order: repeated or out of order.
fn order_word(repeated: &bool) -> &'static str {
    if *repeated {
        "appears twice"
    } else {
        "is out of order"
    }
}

/// Names in single quotes, the first five, then how many more.
pub fn quoted_list(names: &[String]) -> String {
    let quoted: Vec<String> = names.iter().map(|n| format!("'{n}'")).collect();
    join_some(&quoted)
}

/// The first five items, comma separated, then how many more.
pub fn join_some(items: &[String]) -> String {
    let shown: Vec<&str> = items.iter().take(5).map(String::as_str).collect();
    let more = items.len().saturating_sub(5);
    if more > 0 {
        format!("{} and {more} more", shown.join(", "))
    } else {
        shown.join(", ")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_error_names_line_column_and_value() {
        let e = Error::parse(14, 9, b"abc", "a number");
        assert_eq!(
            e.to_string(),
            "line 14, column 9 ('abc'): expected a number"
        );
    }

    #[test]
    fn unlisted_samples_are_quoted_and_cut_after_five() {
        let e = Error::UnlistedSamples {
            list: "concentration file",
            input: "spectra file",
            samples: (1..=7).map(|i| format!("s{i}")).collect(),
            expected: "give every spectrum a row",
        };
        assert_eq!(
            e.to_string(),
            "the concentration file has no row for 's1', 's2', 's3', 's4', 's5' and 2 more of the spectra file: give every spectrum a row"
        );
    }

    #[test]
    fn require_positive_rejects_zero_negative_and_not_finite() {
        assert!(Error::require_positive("noise", 0.002, " AU", "a positive number").is_ok());
        for bad in [0.0, -1.0, f64::NAN, f64::INFINITY] {
            let e = Error::require_positive("noise", bad, " AU", "a positive number");
            assert!(matches!(
                e,
                Err(Error::OutOfRange {
                    option: "noise",
                    ..
                })
            ));
        }
        let e = crate::separability::CheckOptions::new(
            crate::preprocess::Baseline::Offset,
            None,
            1.0,
            -0.5,
            1.0,
        );
        let message = e.unwrap_err().to_string();
        assert_eq!(message, "--noise-au -0.5: expected a positive number");
    }

    #[test]
    fn out_of_range_names_option_value_unit_and_range() {
        let e = Error::OutOfRange {
            option: "pathlength",
            value: -1.0,
            unit: " cm",
            expected: "a positive number of cm",
        };
        assert_eq!(
            e.to_string(),
            "pathlength -1 cm: expected a positive number of cm"
        );
    }

    #[test]
    fn spectrum_errors_name_position_and_values() {
        let e = Error::WavelengthOrder {
            position: 3,
            value_nm: 400.0,
            previous_nm: 401.0,
            repeated: false,
        };
        assert_eq!(
            e.to_string(),
            "wavelength 400 nm is out of order (position 3 after 401 nm): wavelengths must be strictly ascending or strictly descending"
        );
        let e = Error::LengthMismatch {
            sample: "s1".into(),
            values: 3,
            wavelengths: 4,
        };
        assert_eq!(
            e.to_string(),
            "sample 's1': 3 absorbance values for 4 wavelengths"
        );
    }

    #[test]
    fn binary_values_are_escaped_and_shortened() {
        let raw = [0u8, 1, 2, 0xff, b'a'];
        let s = shorten(&raw);
        assert!(s.contains("\\u{0}"));
        let long = vec![b'x'; 100];
        assert_eq!(shorten(&long).chars().count(), 41);
    }
}
