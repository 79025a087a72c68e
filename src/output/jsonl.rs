//! Output (stage 6): JSON Lines (`fit --format jsonl`), one JSON object per
//! sample in input order, for pipelines and LIMS imports.
//!
//! Each line is a complete UTF-8 JSON object followed by `\n` (the JSON
//! Lines convention: jsonlines.org). A fitted sample's line is the object
//! the JSON document lists under `samples` (`fit::SampleResult`); a sample
//! that could not be fitted is `{"sample": …, "error": …}`, as under
//! `failed`. Lines are formatted in parallel in pieces and written as they
//! are ready, so a streamed fit never holds the whole output.

use crate::fit::{FailedSample, FitReport, Outcome};
use rayon::prelude::*;
use std::io::{self, Write};

/// Append one outcome's line to `out`.
pub fn line(o: &Outcome, out: &mut Vec<u8>) {
    let start = out.len();
    let written = match o {
        Outcome::Fitted(s) => serde_json::to_writer(&mut *out, s),
        Outcome::Failed(f) => serde_json::to_writer(&mut *out, f),
    };
    if let Err(e) = written {
        // Every key is a string and numbers are plain f64 (NaN is written
        // as null), so this is not expected; the line still says so.
        out.truncate(start);
        let sample = match o {
            Outcome::Fitted(s) => s.sample.clone(),
            Outcome::Failed(f) => f.sample.clone(),
        };
        let failed = FailedSample {
            sample,
            error: format!("internal: the result could not be written as JSON: {e}"),
        };
        let _ = serde_json::to_writer(&mut *out, &failed);
    }
    out.push(b'\n');
}

/// The lines of some outcomes, formatted in parallel in pieces of 1,024
/// samples, to be written one after another.
pub fn line_parts(outcomes: &[Outcome]) -> Vec<String> {
    outcomes
        .par_chunks(1024)
        .map(|chunk| {
            let mut buf = Vec::with_capacity(chunk.len() * 1024);
            for o in chunk {
                line(o, &mut buf);
            }
            // serde_json writes UTF-8 only.
            String::from_utf8(buf).unwrap_or_else(|e| String::from_utf8_lossy(e.as_bytes()).into())
        })
        .collect()
}

/// Write a whole report as JSON Lines.
pub fn write(report: &FitReport, w: &mut dyn Write) -> io::Result<()> {
    for part in line_parts(&report.outcomes) {
        w.write_all(part.as_bytes())?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::FailedSample;

    #[test]
    fn a_failed_sample_is_one_line_with_its_error() {
        let o = Outcome::Failed(FailedSample {
            sample: "well \"A1\"".into(),
            error: "line 3, column 2 ('x'): expected a number".into(),
        });
        let mut out = Vec::new();
        line(&o, &mut out);
        let text = String::from_utf8(out).unwrap();
        assert!(text.ends_with('\n') && text.matches('\n').count() == 1);
        let back: FailedSample = serde_json::from_str(text.trim_end()).unwrap();
        assert_eq!(back.sample, "well \"A1\"");
        assert!(back.error.contains("expected a number"));
    }
}
