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
    /// A number outside its plausible range (see `ranges`).
    #[error("{what} {} {unit}: {why}", crate::ranges::shown(.value))]
    OutOfRange {
        /// What the number is ("pathlength").
        what: &'static str,
        /// The value given.
        value: f64,
        /// Its unit.
        unit: &'static str,
        /// The plausible range and why.
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
    fn binary_values_are_escaped_and_shortened() {
        let raw = [0u8, 1, 2, 0xff, b'a'];
        let s = shorten(&raw);
        assert!(s.contains("\\u{0}"));
        let long = vec![b'x'; 100];
        assert_eq!(shorten(&long).chars().count(), 41);
    }
}
