//! Low-level delimited-text helpers shared by every parser: line splitting,
//! quote-aware field splitting and allocation-free number parsing.

use std::borrow::Cow;

/// The field delimiter of a delimited text file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Delimiter {
    /// `,`
    Comma,
    /// `;` (decimal comma allowed in numbers)
    Semicolon,
    /// tab (decimal comma allowed in numbers)
    Tab,
}

impl Delimiter {
    /// The delimiter byte.
    pub fn byte(self) -> u8 {
        match self {
            Delimiter::Comma => b',',
            Delimiter::Semicolon => b';',
            Delimiter::Tab => b'\t',
        }
    }

    /// Whether a comma may stand for the decimal point.
    pub fn allows_decimal_comma(self) -> bool {
        !matches!(self, Delimiter::Comma)
    }

    /// Guess the delimiter from a header line: tab if present, else
    /// semicolon if present, else comma.
    pub fn detect(header: &[u8]) -> Self {
        if header.contains(&b'\t') {
            Delimiter::Tab
        } else if header.contains(&b';') {
            Delimiter::Semicolon
        } else {
            Delimiter::Comma
        }
    }
}

/// Strip a UTF-8 byte-order mark.
pub fn strip_bom(bytes: &[u8]) -> &[u8] {
    bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes)
}

/// Iterate over lines as `(1-based line number, line without its end)`.
/// Handles `\n` and `\r\n`.
pub fn lines(bytes: &[u8]) -> impl Iterator<Item = (usize, &[u8])> {
    let mut rest = bytes;
    let mut number = 0usize;
    std::iter::from_fn(move || {
        if rest.is_empty() {
            return None;
        }
        number += 1;
        let (line, next) = match memchr::memchr(b'\n', rest) {
            Some(i) => (&rest[..i], &rest[i + 1..]),
            None => (rest, &rest[rest.len()..]),
        };
        rest = next;
        let line = line.strip_suffix(b"\r").unwrap_or(line);
        Some((number, line))
    })
}

/// Whether a line carries no data: empty, only delimiters and spaces, or a
/// `#` comment.
pub fn is_skippable(line: &[u8], delim: u8) -> bool {
    let first = line
        .iter()
        .position(|&b| !(b == b' ' || b == b'\t' || b == delim));
    match first {
        None => true,
        Some(i) => line[i] == b'#',
    }
}

/// The first line with data, with its 1-based number and the delimiter it
/// uses: the header row of a small CSV input. Consumes lines up to it.
pub fn first_content_line<'a>(
    lines: &mut impl Iterator<Item = (usize, &'a [u8])>,
) -> Option<(usize, &'a [u8], Delimiter)> {
    lines.find_map(|(n, line)| {
        let d = Delimiter::detect(line);
        (!is_skippable(line, d.byte())).then_some((n, line, d))
    })
}

/// Split a line into raw fields (quotes kept), quote-aware: a delimiter
/// inside `"..."` does not split. Appends into `out` to reuse its storage.
pub fn split<'a>(line: &'a [u8], delim: u8, out: &mut Vec<&'a [u8]>) {
    out.clear();
    if memchr::memchr(b'"', line).is_none() {
        let mut start = 0;
        for i in memchr::memchr_iter(delim, line) {
            out.push(&line[start..i]);
            start = i + 1;
        }
        out.push(&line[start..]);
        return;
    }
    let mut start = 0;
    let mut in_quotes = false;
    for (i, &b) in line.iter().enumerate() {
        if b == b'"' {
            in_quotes = !in_quotes;
        } else if b == delim && !in_quotes {
            out.push(&line[start..i]);
            start = i + 1;
        }
    }
    out.push(&line[start..]);
}

/// Drop trailing empty fields (spreadsheets pad rows with delimiters).
pub fn trim_trailing_empty(fields: &mut Vec<&[u8]>) {
    while fields.len() > 1 && trim(fields[fields.len() - 1]).is_empty() {
        fields.pop();
    }
}

/// A header line's field names: split, trailing empty fields dropped,
/// trimmed and lowercased.
pub fn header_names(line: &[u8], delim: u8) -> Vec<String> {
    let mut raw = Vec::new();
    split(line, delim, &mut raw);
    trim_trailing_empty(&mut raw);
    raw.iter()
        .map(|f| text(f).trim().to_ascii_lowercase())
        .collect()
}

/// Trim ASCII spaces and tabs from both ends.
pub fn trim(field: &[u8]) -> &[u8] {
    let start = field
        .iter()
        .position(|&b| b != b' ' && b != b'\t')
        .unwrap_or(field.len());
    let end = field
        .iter()
        .rposition(|&b| b != b' ' && b != b'\t')
        .map_or(start, |i| i + 1);
    &field[start..end]
}

/// A field as text: trimmed, surrounding quotes removed, doubled quotes
/// undone, invalid UTF-8 replaced.
pub fn text(field: &[u8]) -> Cow<'_, str> {
    let t = trim(field);
    if t.len() >= 2 && t[0] == b'"' && t[t.len() - 1] == b'"' {
        let inner = &t[1..t.len() - 1];
        let s = String::from_utf8_lossy(inner);
        if s.contains("\"\"") {
            return Cow::Owned(s.replace("\"\"", "\""));
        }
        return s;
    }
    String::from_utf8_lossy(t)
}

/// Why a number field could not be read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NumberError {
    /// The field is empty.
    Empty,
    /// The field is not a number.
    NotANumber,
    /// The field is NaN or infinite.
    NotFinite,
}

impl NumberError {
    /// What was expected, for an error message.
    pub fn expected(self, what: &str) -> String {
        match self {
            NumberError::Empty => format!("{what} (the cell is empty)"),
            NumberError::NotANumber => what.to_string(),
            NumberError::NotFinite => format!("{what} (NaN and infinity are not allowed)"),
        }
    }
}

/// Parse a finite number from a field without allocating. Accepts
/// surrounding spaces and quotes, and a decimal comma when `decimal_comma`.
pub fn number(field: &[u8], decimal_comma: bool) -> Result<f64, NumberError> {
    let mut t = trim(field);
    if t.len() >= 2 && t[0] == b'"' && t[t.len() - 1] == b'"' {
        t = trim(&t[1..t.len() - 1]);
    }
    if t.is_empty() {
        return Err(NumberError::Empty);
    }
    let value: f64 = if decimal_comma && t.contains(&b',') {
        let mut buf = [0u8; 64];
        if t.len() > buf.len() {
            return Err(NumberError::NotANumber);
        }
        let mut commas = 0;
        for (dst, &src) in buf.iter_mut().zip(t) {
            *dst = if src == b',' {
                commas += 1;
                b'.'
            } else {
                src
            };
        }
        if commas > 1 {
            return Err(NumberError::NotANumber);
        }
        fast_float2::parse(&buf[..t.len()]).map_err(|_| NumberError::NotANumber)?
    } else {
        fast_float2::parse(t).map_err(|_| NumberError::NotANumber)?
    };
    if value.is_finite() {
        Ok(value)
    } else {
        Err(NumberError::NotFinite)
    }
}

/// Whether a cell that is not a number is a generic overflow marker (a
/// saturated reading): `>` followed by a number (`>4`) or infinity (`inf`,
/// `+inf`, `infinity`, any case). Words that a particular instrument prints
/// are the user's to name ([`OverflowMarkers`]); other text (`x`, `abc`,
/// `NaN`) is not a marker, so a garbled cell stays an error rather than
/// silently becoming "saturated".
pub fn is_overflow_marker(raw: &[u8], decimal_comma: bool) -> bool {
    let t = text(raw);
    let t = t.trim();
    if let Some(rest) = t.strip_prefix('>') {
        return number(rest.as_bytes(), decimal_comma).is_ok();
    }
    let t = t.strip_prefix('+').unwrap_or(t);
    t.eq_ignore_ascii_case("inf") || t.eq_ignore_ascii_case("infinity")
}

/// Overflow markers: the generic notation ([`is_overflow_marker`]) plus the
/// words the user names for their instrument (`--overflow-marker`),
/// compared case-insensitively after trimming. Cheap to clone.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct OverflowMarkers(std::sync::Arc<[String]>);

impl OverflowMarkers {
    /// Markers from the user's words (empty words are ignored).
    pub fn new<S: AsRef<str>>(words: &[S]) -> Self {
        let words: Vec<String> = words
            .iter()
            .map(|w| w.as_ref().trim().to_lowercase())
            .filter(|w| !w.is_empty())
            .collect();
        OverflowMarkers(words.into())
    }

    /// The user's words (lowercased).
    pub fn words(&self) -> &[String] {
        &self.0
    }

    /// Whether a cell is an overflow marker: generic or one of the user's.
    pub fn matches(&self, raw: &[u8], decimal_comma: bool) -> bool {
        if is_overflow_marker(raw, decimal_comma) {
            return true;
        }
        if self.0.is_empty() {
            return false;
        }
        let t = text(raw);
        let t = t.trim().to_lowercase();
        self.0.contains(&t)
    }
}

/// What a reading cell should have held, for an error message: `noun`
/// (`an absorbance (a number)`), and when overflow markers are read and the
/// cell holds a word, how to name it as one.
pub fn reading_expected(noun: &str, overflow_as_saturated: bool, raw: &[u8]) -> String {
    let t = text(raw);
    if overflow_as_saturated && t.chars().any(char::is_alphabetic) {
        format!(
            "{noun} or an overflow marker (>N, inf; if your instrument prints '{}' for a reading above its range, name it with --overflow-marker)",
            t.trim()
        )
    } else {
        noun.to_string()
    }
}

/// Whether a cell holds a reading the instrument or the user left out:
/// empty, or `n/a`, `na`, `-`, `--` (any case). Such a point is left out of
/// its sample's fit (common practice, no source).
pub fn is_missing_reading(raw: &[u8]) -> bool {
    let t = text(raw);
    let t = t.trim();
    t.is_empty()
        || t == "-"
        || t == "--"
        || t.eq_ignore_ascii_case("n/a")
        || t.eq_ignore_ascii_case("na")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn crlf_lines_are_split_and_numbered() {
        let v: Vec<_> = lines(b"a\r\nb\nc").collect();
        assert_eq!(v, vec![(1, &b"a"[..]), (2, &b"b"[..]), (3, &b"c"[..])]);
    }

    #[test]
    fn quoted_delimiter_does_not_split() {
        let mut out = Vec::new();
        split(b"\"a,b\",1,2", b',', &mut out);
        assert_eq!(out.len(), 3);
        assert_eq!(text(out[0]), "a,b");
    }

    #[test]
    fn decimal_comma_is_read_when_allowed() {
        assert!((number(b"0,125", true).unwrap() - 0.125).abs() < 1e-15);
        assert!(number(b"0,125", false).is_err());
        assert!(number(b"1,2,3", true).is_err());
    }

    #[test]
    fn nan_and_text_are_rejected() {
        assert_eq!(number(b"NaN", false), Err(NumberError::NotFinite));
        assert_eq!(number(b"inf", false), Err(NumberError::NotFinite));
        assert_eq!(number(b"abc", false), Err(NumberError::NotANumber));
        assert_eq!(number(b"  ", false), Err(NumberError::Empty));
        assert!((number(b" \"1.5e-3\" ", false).unwrap() - 1.5e-3).abs() < 1e-18);
    }

    #[test]
    fn overflow_markers_are_generic_unless_the_user_names_words() {
        for m in [">4", ">3,5", "inf", "+INF", "Infinity"] {
            assert!(is_overflow_marker(m.as_bytes(), true), "{m}");
        }
        for m in ["NaN", "OVER", "****", "abc1", ">x", "", "0.5", "x"] {
            assert!(!is_overflow_marker(m.as_bytes(), false), "{m}");
        }
        let user = OverflowMarkers::new(&["Too High", " "]);
        assert_eq!(user.words(), ["too high"]);
        assert!(user.matches(b" TOO HIGH ", false));
        assert!(user.matches(b">2", false));
        assert!(!user.matches(b"too", false));
    }

    #[test]
    fn missing_readings_are_empty_or_not_available() {
        for m in ["", " ", "n/a", "N/A", "na", "-", "--"] {
            assert!(is_missing_reading(m.as_bytes()), "{m}");
        }
        for m in ["0", "nan", "x", "-1"] {
            assert!(!is_missing_reading(m.as_bytes()), "{m}");
        }
    }

    #[test]
    fn delimiter_is_detected_from_header() {
        assert_eq!(Delimiter::detect(b"sample\t400"), Delimiter::Tab);
        assert_eq!(Delimiter::detect(b"sample;400,5"), Delimiter::Semicolon);
        assert_eq!(Delimiter::detect(b"sample,400"), Delimiter::Comma);
    }
}
